"""Publishing outputs: formula-safe CSV, all-or-none folders under failure and kill -9,
leftovers of interrupted runs removed, same run same bytes.

Formula neutralisation follows common practice (OWASP, "CSV Injection"): a text cell that
starts with =, +, -, @, a tab or a carriage return gets a leading apostrophe; numbers stay.
The folder switch is one rename(2) of a symbolic link, atomic on POSIX file systems
(POSIX.1-2017, rename()).
"""

from __future__ import annotations

import csv
import io
import os
import random
import re
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from hedgekit.errors import InputError
from hedgekit.present import publish, report

from .test_report import demo_run

HOSTILE = ["=HYPERLINK(\"http://example.invalid\",\"x\")", "+cmd", "-2+3", "@SUM(A1)", "\tindent", "\rcr"]


def _cells(text: str) -> list[list[str]]:
    return list(csv.reader(io.StringIO(text, newline="")))


def test_formula_cells_are_neutralised_numbers_are_not() -> None:
    frame = pd.DataFrame({"=weight": [-0.5, 1.25, 3.0, -1.0, 0.0, 2.0],
                          "note": ["-1.5", "=1+1", "ok", "@x", "+", "plain"]},
                         index=pd.Index(HOSTILE, name="instrument"))
    rows = _cells(publish.csv_text(frame))
    assert rows[0] == ["instrument", "'=weight", "note"]
    assert [r[0] for r in rows[1:]] == ["'" + h for h in HOSTILE]
    assert [r[1] for r in rows[1:]] == ["-0.5", "1.25", "3.0", "-1.0", "0.0", "2.0"]   # numbers unchanged
    assert [r[2] for r in rows[1:]] == ["-1.5", "'=1+1", "ok", "'@x", "'+", "plain"]  # numeric text stays
    periods = pd.DataFrame({"x": [1.0]}, index=pd.PeriodIndex(["2020-01"], freq="M", name="date"))
    assert _cells(publish.csv_text(periods))[1] == ["2020-01", "1.0"]


def test_tables_are_published_all_or_none(tmp_path: Path, monkeypatch) -> None:
    out = tmp_path / "tables"
    first = publish.publish_tables({"a": pd.DataFrame({"x": [1]}), "b": pd.DataFrame({"y": [2]}),
                                    "none": None}, out)
    assert set(first) == {"a", "b"} and (out / "a.csv").read_text() == ",x\n0,1\n"
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    real, calls = publish._write_bytes, []

    def fail_second(path, data):
        calls.append(path)
        if len(calls) == 2:
            raise OSError(28, "No space left on device")
        return real(path, data)
    monkeypatch.setattr(publish, "_write_bytes", fail_second)
    with pytest.raises(InputError, match="tables"):
        publish.publish_tables({"a": pd.DataFrame({"x": [9]}), "b": pd.DataFrame({"y": [9]})}, out)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([out.name, os.readlink(out)])


def test_a_plain_folder_is_taken_over_with_its_files(tmp_path: Path) -> None:
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    paths = report.publish_report(demo_run(), out)
    assert out.is_symlink() and (out / "notes.txt").read_text() == "mine" and paths["html"].exists()
    # a second report under another name keeps the first (the --as-of case)
    other = report.publish_report(demo_run(), out, name="report_2024-12")
    assert paths["html"].exists() and other["html"].exists() and (out / "notes.txt").exists()
    # this report's figures are replaced: none of an earlier run is left behind
    run = demo_run()
    run["exposures"].pop("rolling")
    again = report.publish_report(run, out)
    assert "figure_rolling" not in again and not (out / "report_rolling.png").exists()
    assert (out / "report_2024-12_rolling.png").exists()


def test_leftovers_of_dead_processes_are_removed(tmp_path: Path) -> None:
    out = tmp_path / "out"
    report.publish_report(demo_run(), out)
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                          text=True, check=True).stdout.strip()
    junk = [tmp_path / f".out.tmp-{dead}-0badc0de", tmp_path / f".out.v-{dead}-0badc0de"]
    for j in junk:
        j.mkdir()
        (j / "report.html").write_text("half")
    os.symlink(junk[1].name, tmp_path / f".out.link-{dead}-0badc0de")
    unrelated = tmp_path / ".out.tmp-notours"
    unrelated.mkdir()
    report.publish_report(demo_run(), out)
    left = sorted(p.name for p in tmp_path.iterdir())
    assert left == sorted(["out", os.readlink(out), ".out.tmp-notours"])


def test_same_run_same_bytes_apart_from_the_timestamp(tmp_path: Path) -> None:
    run = demo_run()
    a = report.publish_report(run, tmp_path / "a")
    run2 = demo_run()
    run2["meta"]["run_at"] = "2030-06-30T12:00:00+00:00"
    run2["meta"]["input_hashes"] = dict(reversed(list(run2["meta"]["input_hashes"].items())))
    b = report.publish_report(run2, tmp_path / "b")
    assert set(a) == set(b)
    for key in a:
        x, y = a[key].read_bytes(), b[key].read_bytes()
        if key in ("html", "md"):
            x = x.replace(run["meta"]["run_at"].encode(), b"T")
            y = y.replace(b"2030-06-30T12:00:00+00:00", b"T")
        assert x == y, key


CHILD = """
import sys
from hedgekit.present.publish import stage_files
out = sys.argv[1]
i = 0
while True:
    i += 1
    stage_files(out, {f"part{j}.txt": (f"{i}\\n" * 20000).encode() for j in range(6)}).publish()
"""


def _consistent(out: Path) -> set[str]:
    return {p.read_text().split("\n", 1)[0] for p in out.iterdir()}


def test_kill_9_at_random_moments_leaves_old_or_new_whole(tmp_path: Path) -> None:
    """A publisher killed with SIGKILL at random moments: the output always shows one version."""
    out = tmp_path / "out"
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    rng = random.Random(20260101)
    for _ in range(8):
        proc = subprocess.Popen([sys.executable, "-c", CHILD, str(out)], env=env)
        deadline = time.monotonic() + 20
        while not out.exists() and time.monotonic() < deadline:
            time.sleep(0.01)
        time.sleep(rng.uniform(0.0, 0.3))
        proc.kill()
        proc.wait()
        versions = _consistent(out)
        assert len(versions) == 1, versions   # every file from the same publish
        assert len(list(out.iterdir())) == 6
    publish.stage_files(out, {"part0.txt": b"final\n"}).publish()
    names = sorted(p.name for p in tmp_path.iterdir())
    assert names == sorted(["out", os.readlink(out)])   # leftovers of the killed runs are gone
    assert not [n for n in names if re.search(r"\.(tmp|link|old)-", n)]
