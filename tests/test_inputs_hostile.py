"""Hostile and broken files (issue 13, input side): direction controls in names, ragged rows,
huge echoed values, memory of a large read. Every bad input: exit 2, one line naming file, row,
column and the fix; inputs untouched."""

from __future__ import annotations

import subprocess
import sys

import pytest

from hedgekit.cli import main

from .helpers import ROOT, demo_copy
from .test_inputs import _edit, run_case

RLO = "\u202e"

# Peak resident memory of the read alone: /proc/self/clear_refs "5" resets the high-water mark
# (VmHWM) to the current size (Linux), so import peaks and the parent's size do not count.
_MEASURE = """
import sys
sys.path.insert(0, sys.argv[1])
from pathlib import Path
from hedgekit.inputs import read_series
read_series(Path(sys.argv[2]), "assets", frequency="daily")  # warm up imports and the parser
def status(key):
    with open("/proc/self/status") as fh:
        return next(int(x.split()[1]) * 1024 for x in fh if x.startswith(key))
with open("/proc/self/clear_refs", "w") as fh:
    fh.write("5")
before = status("VmRSS")
frame = read_series(Path(sys.argv[3]), "assets", frequency="daily")
print(max(status("VmHWM") - before, 0), frame.shape[0])
"""

CASES = {
    "direction control in a header": (
        lambda d, c: _edit(d / "assets.csv", lambda ls: [ls[0].replace("energy", f"ener{RLO}gy")] + ls[1:]),
        ["assets.csv", "row 1", "U+202E", "field 6", "delete the control character"]),
    "direction isolate in a holding": (
        lambda d, c: _edit(d / "holdings.csv", lambda ls: [ls[0], ls[1].replace("banks", "ba\u2067nks")] + ls[2:]),
        ["holdings.csv", "row 2", "column 'asset'", "U+2067"]),
    "direction mark in a sheet row": (
        lambda d, c: _edit(d / "instrument_sheet.csv",
                           lambda ls: ls[:2] + [ls[2].replace("rate_future_10y", "rate_future_10y\u200f")] + ls[3:]),
        ["instrument_sheet.csv", "row 3", "column 'instrument'", "U+200F"]),
    "trailing comma on every row": (
        lambda d, c: _edit(d / "instruments.csv", lambda ls: [ls[0]] + [x + "," for x in ls[1:]]),
        ["instruments.csv", "row 2", "malformed row", "trailing comma", "after column 'quality_basket'"]),
    "trailing comma on one row": (
        lambda d, c: _edit(d / "assets.csv", lambda ls: ls[:33] + [ls[33] + ","] + ls[34:]),
        ["assets.csv", "row 34", "trailing comma"]),
    "short row": (
        lambda d, c: _edit(d / "states.csv", lambda ls: ls[:49] + [",".join(ls[49].split(",")[:4])] + ls[50:]),
        ["states.csv", "row 50", "column 'def'", "field 5", "missing"]),
    "blank lines are not rows": (
        lambda d, c: _edit(d / "assets.csv", lambda ls: ls[:20] + ["", "  "] + ls[20:40] + ["1986-13" + ls[40][7:]]
                           + ls[41:]),
        ["assets.csv", "row 43", "1986-13"]),
}


@pytest.mark.parametrize("case", list(CASES))
def test_hostile_input_exit_2(case, tmp_path, capsys):
    assert RLO not in run_case(tmp_path, capsys, *CASES[case])


@pytest.mark.parametrize("file", ["states.csv", "holdings.csv", "instrument_sheet.csv"])
def test_a_huge_header_is_echoed_short(tmp_path, capsys, file):
    """A 2 MB column name: the message cuts it to 60 characters with an ellipsis."""
    cfg = demo_copy(tmp_path)
    _edit(cfg.parent / file, lambda ls: ["x" * 2_000_000 + ls[0][ls[0].index(","):]] + ls[1:])
    assert main(["validate", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert file in err and "x" * 61 not in err and len(err) < 1_000, len(err)


def test_large_csv_memory_stays_below_three_times_the_file(tmp_path):
    """A 20 MB wide file read in a fresh process: the peak resident memory grows by less than
    three times the file's size (the bound of issue 13; the 200 MB measurement is in
    docs/interface.md). The file is written here, so the reading process holds nothing else."""
    import numpy as np
    rng = np.random.default_rng(3)
    rows, cols = 1500, 1000
    dates = np.datetime_as_string(np.datetime64("2000-01-03") + np.arange(rows), unit="D")
    body = np.char.mod("%.10f", rng.normal(0, 0.02, (rows, cols)))
    big = tmp_path / "big.csv"
    with open(big, "w") as fh:
        fh.write("date," + ",".join(f"s{j}" for j in range(cols)) + "\n")
        for d, row in zip(dates, body, strict=True):
            fh.write(d + "," + ",".join(row) + "\n")
    del body
    small = tmp_path / "small.csv"
    small.write_text("date,a\n2020-01-02,0.01\n2020-01-03,0.02\n")
    script = tmp_path / "measure.py"
    script.write_text(_MEASURE)
    out = subprocess.run([sys.executable, str(script), str(ROOT), str(small), str(big)], capture_output=True,
                         text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    growth, n = map(int, out.stdout.split())
    size = big.stat().st_size
    assert n == rows and size > 15_000_000
    assert growth < 3 * size, (growth, size)
