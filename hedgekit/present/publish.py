"""Publishing outputs: all or none, formula-safe CSV, atomic single files.

**One publishing step.** An output folder (the report folder, or the ``--out`` tables) is
a symbolic link onto a hidden sibling version folder ``.<name>.v-<pid>-<token>``. A new
output is built in a fresh staging folder beside it (the files of the current version
that the new output does not replace are carried over as hard links), flushed to disk,
and then made current by one atomic step: a new link is renamed onto the output path
(``os.replace``). A reader sees the whole old output or the whole new one, also when the
process is killed at any moment. Leftovers of an interrupted run (staging folders,
links, versions no longer current, each named with the pid of a process that is gone)
are removed by the next build. On any failure the earlier output stays as it was and an
:class:`InputError` names what failed (exit 2).

An output path that is a plain folder (an earlier hedgekit, or a folder the user made)
is taken over on the first publish: it is renamed to a version folder and the link put
in its place; only that one-time move has a moment (between two renames) where the path
is absent.

**CSV.** Every CSV hedgekit writes goes through :func:`csv_text`: a text cell (values,
index labels and headers) starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage
return gets a leading apostrophe, so a spreadsheet shows it as text instead of running
it as a formula (common practice, OWASP "CSV injection"); numbers, and text that reads as
a number, are left as they are.
"""

from __future__ import annotations

import contextlib
import csv
import os
import re
import secrets
import shutil
import tempfile
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ..errors import InputError

FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_NAME_OK = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]*")


# --------------------------------------------------------------------------- CSV cells

def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def neutralise_cell(value):
    """A text cell that a spreadsheet would run as a formula, made inert with a leading
    apostrophe; anything else (numbers, dates, ordinary text) unchanged."""
    if isinstance(value, str) and value.startswith(FORMULA_START) and not _is_number(value):
        return "'" + value
    return value


def _neutral_labels(index: pd.Index) -> pd.Index:
    if isinstance(index, pd.MultiIndex):
        return index.set_levels([_neutral_labels(level) for level in index.levels])
    if isinstance(index, pd.PeriodIndex):
        return index.astype(str)
    if index.dtype == object or pd.api.types.is_string_dtype(index):
        return pd.Index([neutralise_cell(v) for v in index], name=neutralise_cell(index.name))
    return index.rename(neutralise_cell(index.name))


def safe_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` with every text cell, label and header neutralised."""
    out = frame.copy()
    out.index = _neutral_labels(out.index)
    out.columns = _neutral_labels(out.columns)
    for col in range(out.shape[1]):
        s = out.iloc[:, col]
        if s.dtype == object or pd.api.types.is_string_dtype(s):
            out.iloc[:, col] = s.map(neutralise_cell)
    return out


def csv_text(frame: pd.DataFrame | pd.Series, *, index: bool = True, float_format: str | None = None) -> str:
    """A frame as formula-safe CSV text (periods as ``YYYY-MM``, ``\\n`` line ends)."""
    if isinstance(frame, pd.Series):
        frame = frame.to_frame()
    safe = safe_frame(frame)
    # Python's csv writer (3.11) leaves a lone carriage return unquoted when lines end in "\n";
    # a table holding one quotes every text cell, so no row is split in a spreadsheet.
    quoting = csv.QUOTE_NONNUMERIC if _has_cr(safe, index) else csv.QUOTE_MINIMAL
    return safe.to_csv(index=index, lineterminator="\n", float_format=float_format, quoting=quoting)


def _has_cr(frame: pd.DataFrame, index: bool) -> bool:
    texts = [*map(str, frame.columns), *(map(str, frame.index) if index else ())]
    for col in range(frame.shape[1]):
        s = frame.iloc[:, col]
        if s.dtype == object or pd.api.types.is_string_dtype(s):
            texts += [v for v in s if isinstance(v, str)]
    return any("\r" in t for t in texts)


# --------------------------------------------------------------------------- single files

def _fsync_dir(path: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _write_bytes(path: Path, data: bytes) -> None:
    with open(path, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())
    os.chmod(path, 0o644)


def atomic_write_text(path: Path, text: str) -> None:
    """One file through a temporary sibling and ``os.replace``: never seen half-written."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        _write_bytes(Path(tmp), text.encode("utf-8"))
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def atomic_write_csv(frame: pd.DataFrame, path: Path, *, index: bool = True,
                     float_format: str | None = None) -> None:
    """A frame as formula-safe CSV, atomically (one file; for a set of files use :func:`build_tables`)."""
    atomic_write_text(path, csv_text(frame, index=index, float_format=float_format))


# --------------------------------------------------------------------------- staged folders

def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True


def _remove(path: Path) -> None:
    with contextlib.suppress(FileNotFoundError):
        if path.is_symlink() or not path.is_dir():
            path.unlink()
        else:
            shutil.rmtree(path)


@dataclass(frozen=True)
class _Layout:
    """Where an output lives: ``parent/name`` (the link) and its hidden siblings."""

    parent: Path
    name: str

    @property
    def path(self) -> Path:
        return self.parent / self.name

    def sibling(self, kind: str) -> Path:
        return self.parent / f".{self.name}.{kind}-{os.getpid()}-{secrets.token_hex(4)}"

    def own(self, entry: str) -> tuple[str, int] | None:
        """(kind, pid) when ``entry`` is one of this output's hidden siblings."""
        m = re.fullmatch(rf"\.{re.escape(self.name)}\.(v|tmp|link|old)-(\d+)-[0-9a-f]+", entry)
        return (m.group(1), int(m.group(2))) if m else None

    def current(self) -> Path | None:
        """The folder whose files the output shows now (``None`` if there is none yet)."""
        p = self.path
        if p.is_symlink():
            target = os.readlink(p)
            return self.parent / target if self.own(target) else None
        return p if p.is_dir() else None


def _layout(out_dir: Path | str) -> _Layout:
    """The output's layout; a link not made by hedgekit (the user's own) is followed."""
    p = Path(os.path.abspath(out_dir))
    for _ in range(40):
        parent = Path(os.path.realpath(p.parent))
        lay = _Layout(parent, p.name)
        if not lay.path.is_symlink() or lay.own(os.readlink(lay.path)):
            return lay
        p = Path(os.path.realpath(lay.path))
    raise InputError("the output path is a loop of symbolic links.", file=str(out_dir),
                     fix="point the output at a plain folder.")


def clean_leftovers(out_dir: Path | str) -> list[Path]:
    """Remove what interrupted runs left beside an output (of processes that are gone)."""
    lay = _layout(out_dir)
    if not lay.parent.is_dir():
        return []
    current = lay.current()
    removed = []
    for entry in sorted(os.listdir(lay.parent)):
        own = lay.own(entry)
        if own is None or _pid_alive(own[1]):
            continue
        path = lay.parent / entry
        if current is not None and path == current:
            continue
        _remove(path)
        removed.append(path)
    return removed


@dataclass
class StagedOutput:
    """A complete new output built beside the current one; :meth:`publish` makes it current.

    ``paths`` are the published files as seen through the output path (``{key: path}``).
    """

    out_dir: Path
    staging: Path
    paths: dict[str, Path]
    what: str = "output"
    fix: str = "choose an output folder you can write to."
    _layout: _Layout | None = field(default=None, repr=False)
    _done: bool = field(default=False, repr=False)

    def publish(self) -> dict[str, Path]:
        """Switch the output to the new files in one atomic rename; the old version is removed."""
        if self._done:
            raise RuntimeError("this output was already published or discarded")
        lay = self._layout
        assert lay is not None
        link, version, aside = lay.sibling("link"), lay.sibling("v"), None
        try:
            old = lay.current()
            os.rename(self.staging, version)
            os.symlink(version.name, link)
            if lay.path.is_dir() and not lay.path.is_symlink():
                # A plain folder is taken over: moved aside, then the link put in its place.
                aside = lay.sibling("old")
                os.rename(lay.path, aside)
                old = aside
            os.replace(link, lay.path)
            _fsync_dir(lay.parent)
        except OSError as exc:
            if aside is not None and not os.path.lexists(lay.path):
                with contextlib.suppress(OSError):
                    os.rename(aside, lay.path)
            for path in (link, version, self.staging):
                with contextlib.suppress(OSError):
                    _remove(path)
            self._done = True
            raise InputError(f"cannot publish the {self.what} ({exc.strerror or exc}); the earlier "
                             f"{self.what}, if any, is unchanged.", file=str(self.out_dir),
                             fix=self.fix) from None
        self._done = True
        if old is not None and old != version:
            with contextlib.suppress(OSError):
                _remove(old)
        return dict(self.paths)

    def discard(self) -> None:
        """Drop the staged files; the current output is untouched."""
        self._done = True
        with contextlib.suppress(OSError):
            _remove(self.staging)


def _carry_over(current: Path | None, staging: Path, replaced: set[str]) -> None:
    """Hard links (copies across devices) of the current files the new output does not replace."""
    if current is None or not current.is_dir():
        return
    for entry in sorted(os.listdir(current)):
        if entry in replaced:
            continue
        src, dst = current / entry, staging / entry
        if src.is_symlink():
            os.symlink(os.readlink(src), dst)
        elif src.is_dir():
            shutil.copytree(src, dst, symlinks=True, copy_function=_link_or_copy)
        else:
            _link_or_copy(src, dst)


def _link_or_copy(src, dst) -> None:
    try:
        os.link(src, dst)
    except OSError:
        shutil.copy2(src, dst)


def stage_files(out_dir: Path | str, files: Mapping[str, bytes], *, keys: Mapping[str, str] | None = None,
                drop: Iterable[str] = (), what: str = "output",
                fix: str = "choose an output folder you can write to.") -> StagedOutput:
    """Build a new version of ``out_dir`` holding ``files`` ({file name: bytes}) plus the current
    files not named in ``files`` or ``drop``; nothing visible changes until ``publish()``.

    ``keys`` maps a result key to a file name for the returned paths.
    """
    for fname in files:
        if not _NAME_OK.fullmatch(fname):
            raise InputError(f"output file name {fname!r} is not a plain file name.", file=str(out_dir),
                             fix="use letters, digits, '.', '_' or '-' only.")
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"the {what} path is a file, not a folder.", file=str(out_dir), fix=fix)
    try:
        lay = _layout(out_dir)
        lay.parent.mkdir(parents=True, exist_ok=True)
        clean_leftovers(out_dir)
        staging = lay.sibling("tmp")
        staging.mkdir()
    except OSError as exc:
        raise InputError(f"cannot prepare the {what} folder ({exc.strerror or exc}).", file=str(out_dir),
                         fix=fix) from None
    try:
        _carry_over(lay.current(), staging, set(files) | set(drop))
        for fname, data in files.items():
            _write_bytes(staging / fname, data)
        os.chmod(staging, 0o755)
        _fsync_dir(staging)
    except OSError as exc:
        _remove(staging)
        raise InputError(f"cannot write the {what} ({exc.strerror or exc}); the earlier {what}, if any, "
                         "is unchanged.", file=str(out_dir), fix=fix) from None
    except BaseException:
        _remove(staging)
        raise
    names = keys if keys is not None else {f: f for f in files}
    return StagedOutput(out_dir, staging, {k: out_dir / f for k, f in names.items()}, what, fix, lay)


def build_tables(tables: Mapping[str, pd.DataFrame | None], out_dir: Path | str, *,
                 index: bool = True) -> StagedOutput:
    """The ``--out`` tables (``{name: frame}``, ``None`` skipped) as formula-safe CSV files,
    staged as one output: ``build_tables(...).publish()`` writes all of them or none."""
    files = {f"{name}.csv": csv_text(frame, index=index).encode("utf-8")
             for name, frame in tables.items() if frame is not None}
    return stage_files(out_dir, files, keys={n: f"{n}.csv" for n, fr in tables.items() if fr is not None},
                       what="tables", fix="pass --out a folder you can write to.")


def publish_tables(tables: Mapping[str, pd.DataFrame | None], out_dir: Path | str) -> dict[str, Path]:
    """:func:`build_tables` and publish at once: ``{name: path}``."""
    return build_tables(tables, out_dir).publish()
