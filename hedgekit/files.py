"""Atomic file output: write to a temporary file in the same folder, then rename.

A reader never sees a half-written file, and a failure leaves the earlier file whole.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import pandas as pd


def atomic_write_text(path: Path, text: str) -> None:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o644)  # mkstemp makes 0600; outputs are ordinary readable files
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def atomic_write_csv(frame: pd.DataFrame, path: Path, *, index: bool = True, float_format: str | None = None) -> None:
    """A frame as CSV (periods written as ``YYYY-MM``), atomically."""
    out = frame.copy()
    if isinstance(out.index, pd.PeriodIndex):
        out.index = out.index.astype(str)
    atomic_write_text(path, out.to_csv(index=index, lineterminator="\n", float_format=float_format))
