"""The run store: one SQLite record per run, for the quarter-on-quarter history.

Each record keeps the configuration text, the SHA-256 of every input file, the hedgekit
version, the key results (the run dictionary as JSON) and the report's path, written in
one transaction (standard library ``sqlite3``; the caller chooses the file).

A run is identified by its fingerprint, the SHA-256 of the configuration text, the
sorted input hashes and the version: recording the same inputs and configuration again
returns the existing id instead of a second record.

:meth:`RunStore.history_frame` lays exposures, premia and the hedge of the runs side by
side by sample end; :meth:`RunStore.flag_changes` flags large changes from one run of a
book to its next (quarter on quarter when runs are quarterly).
"""

from __future__ import annotations

import hashlib
import json
import math
import sqlite3
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from .errors import InputError
from .jsonable import jsonable

SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    run_id        INTEGER PRIMARY KEY AUTOINCREMENT,
    fingerprint   TEXT NOT NULL UNIQUE,
    fund          TEXT NOT NULL,
    run_at        TEXT NOT NULL,
    sample_start  TEXT,
    sample_end    TEXT,
    version       TEXT NOT NULL,
    config_path   TEXT,
    config_text   TEXT NOT NULL,
    results_json  TEXT NOT NULL,
    report_path   TEXT
);
CREATE TABLE IF NOT EXISTS input_files (
    run_id   INTEGER NOT NULL REFERENCES runs(run_id) ON DELETE CASCADE,
    file_key TEXT NOT NULL,
    sha256   TEXT NOT NULL,
    PRIMARY KEY (run_id, file_key)
);
CREATE INDEX IF NOT EXISTS runs_by_fund ON runs (fund, sample_end, run_at);
"""



def fingerprint(config_text: str, input_hashes: Mapping[str, str], version: str) -> str:
    """SHA-256 over the configuration text, the sorted input hashes and the version."""
    payload = json.dumps({"config": config_text, "inputs": dict(sorted(input_hashes.items())),
                          "version": version}, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(payload.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class RunRecord:
    """One stored run."""

    run_id: int
    fund: str
    run_at: str
    sample_start: str | None
    sample_end: str | None
    version: str
    config_path: str | None
    config_text: str
    input_hashes: dict[str, str]
    run: dict[str, Any]
    report_path: str | None
    fingerprint: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the record (the run dict under ``run``)."""
        return {
            "run_id": self.run_id, "fund": self.fund, "run_at": self.run_at,
            "sample_start": self.sample_start, "sample_end": self.sample_end,
            "version": self.version, "config_path": self.config_path,
            "config_text": self.config_text, "input_hashes": dict(self.input_hashes),
            "run": self.run, "report_path": self.report_path, "fingerprint": self.fingerprint,
        }


class RunStore:
    """SQLite run store at ``path`` (created on first use)."""

    def __init__(self, path: Path | str) -> None:
        self.path = Path(path)
        if self.path.exists() and not self.path.is_file():
            what = "a folder" if self.path.is_dir() else "not a regular file"
            raise InputError(f"the run store path is {what}.", file=str(self.path),
                             fix="set [store] path to a file name such as 'hedgekit_runs.sqlite'.")
        with self._guard("create the run store"):
            self.path.parent.mkdir(parents=True, exist_ok=True)
            conn = self._connect()
            try:
                conn.executescript(_SCHEMA)
                conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
            finally:
                conn.close()

    def _connect(self) -> sqlite3.Connection:
        conn = sqlite3.connect(self.path, timeout=30.0)
        conn.execute("PRAGMA foreign_keys = ON")
        return conn

    @contextmanager
    def _guard(self, doing: str) -> Iterator[None]:
        """Turn SQLite and file-system failures into an input error that names the store and the fix."""
        try:
            yield
        except InputError:
            raise
        except sqlite3.DatabaseError as exc:
            text = str(exc).lower()
            if "not a database" in text or "malformed" in text or "no such table" in text \
                    or "file is encrypted" in text:
                raise InputError(f"cannot {doing}: the file is not a hedgekit run store or is damaged ({exc}).",
                                 file=str(self.path),
                                 fix="move the file aside (e.g. rename it to *.broken) and run again: a new "
                                     "store is created; or run with --no-store.") from None
            if "readonly" in text or "read-only" in text:
                raise InputError(f"cannot {doing}: the run store is read-only ({exc}).", file=str(self.path),
                                 fix="make the file and its folder writable, point [store] path elsewhere, "
                                     "or run with --no-store.") from None
            if "full" in text:
                raise InputError(f"cannot {doing}: the disk is full ({exc}).", file=str(self.path),
                                 fix="free space on that disk or point [store] path elsewhere.") from None
            raise InputError(f"cannot {doing} ({exc}).", file=str(self.path),
                             fix="check the path and its permissions, or run with --no-store.") from None
        except OSError as exc:
            raise InputError(f"cannot {doing}: {exc.strerror or exc}.", file=str(self.path),
                             fix="check the path, its permissions and free space, or run with --no-store.") \
                from None

    # -- writing --------------------------------------------------------------------

    def record(self, run: Mapping[str, Any], config_text: str,
               report_path: Path | str | None = None) -> int:
        """Store one run in one transaction; return its id (the existing id for a re-run).

        A re-run of the same configuration text, input hashes and version is recognised by
        its fingerprint and not stored twice; its report path is filled in if it had none.
        """
        meta = run.get("meta") or {}
        hashes = {str(k): str(v) for k, v in (meta.get("input_hashes") or {}).items()}
        version = str(meta.get("version") or "")
        fp = fingerprint(config_text, hashes, version)
        results = json.dumps(jsonable(dict(run)), allow_nan=False)  # key order kept: factor order
        report = str(report_path) if report_path not in (None, "") else None
        with self._guard("record the run"):
            return self._insert(fp, meta, version, config_text, results, report, hashes)

    def _insert(self, fp, meta, version, config_text, results, report, hashes) -> int:
        conn = self._connect()
        try:
            with conn:  # one transaction: commits on success, rolls back on any error
                conn.execute("BEGIN IMMEDIATE")
                row = conn.execute("SELECT run_id, report_path FROM runs WHERE fingerprint = ?",
                                   (fp,)).fetchone()
                if row is not None:
                    if row[1] is None and report is not None:
                        conn.execute("UPDATE runs SET report_path = ? WHERE run_id = ?",
                                     (report, row[0]))
                    return int(row[0])
                cur = conn.execute(
                    "INSERT INTO runs (fingerprint, fund, run_at, sample_start, sample_end, version,"
                    " config_path, config_text, results_json, report_path)"
                    " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    (fp, str(meta.get("fund") or ""), str(meta.get("run_at") or ""),
                     meta.get("sample_start"), meta.get("sample_end"), version,
                     None if meta.get("config") is None else str(meta.get("config")),
                     config_text, results, report))
                run_id = int(cur.lastrowid)
                conn.executemany("INSERT INTO input_files (run_id, file_key, sha256) VALUES (?, ?, ?)",
                                 [(run_id, k, v) for k, v in sorted(hashes.items())])
                return run_id
        finally:
            conn.close()

    # -- reading --------------------------------------------------------------------

    def _select(self, column: str | None, value: Any) -> list[RunRecord]:
        sql = ("SELECT run_id, fund, run_at, sample_start, sample_end, version, config_path,"
               " config_text, results_json, report_path, fingerprint FROM runs")
        files_sql = "SELECT run_id, file_key, sha256 FROM input_files"
        args: list[Any] = []
        if column is not None:
            sql += f" WHERE {column} = ?"
            files_sql += f" WHERE run_id IN (SELECT run_id FROM runs WHERE {column} = ?)"
            args.append(value)
        sql += " ORDER BY COALESCE(sample_end, ''), run_at, run_id"
        with self._guard("read the run store"):
            conn = self._connect()
            try:
                rows = conn.execute(sql, args).fetchall()
                files = conn.execute(files_sql, args).fetchall()
            finally:
                conn.close()
        hashes: dict[int, dict[str, str]] = {}
        for run_id, key, sha in files:
            hashes.setdefault(int(run_id), {})[key] = sha
        records = [RunRecord(run_id=int(r[0]), fund=r[1], run_at=r[2], sample_start=r[3],
                             sample_end=r[4], version=r[5], config_path=r[6], config_text=r[7],
                             input_hashes=hashes.get(int(r[0]), {}), run=json.loads(r[8]),
                             report_path=r[9], fingerprint=r[10]) for r in rows]
        return records

    def history(self, fund: str | None = None, limit: int | None = None) -> list[RunRecord]:
        """Stored runs, oldest first by sample end and run time; ``limit`` keeps the latest."""
        records = self._select(None if fund is None else "fund", fund)
        if limit is not None:
            if limit < 0:
                raise InputError(f"limit must be zero or more, got {limit}.", column="limit",
                                 fix="pass a count of runs, e.g. 8.")
            records = records[len(records) - limit:] if limit else []
        return records

    def get(self, run_id: int) -> RunRecord:
        """One stored run by id."""
        found = self._select("run_id", int(run_id))
        if found:
            return found[0]
        raise InputError(f"no run with id {run_id} in the store.", file=str(self.path),
                         fix="list the runs with 'hedgekit history'.")

    def history_frame(self, fund: str | None = None, limit: int | None = None) -> pd.DataFrame:
        """Exposures, premia and the hedge of each run side by side, one row per run.

        Columns: ``run_id``, ``fund``, ``run_at``, ``sample_end``, then
        ``exposure:<factor>`` (the book's beta), ``exposure_se:<factor>``,
        ``premium:<factor>`` (λ a period), ``t_shanken:<factor>``,
        ``hedge:<instrument>`` (weight of NAV), ``exposure_after:<factor>``,
        ``tracking_error`` and ``hedge_status``.  Missing values are NaN.
        """
        rows = [_flatten(rec) for rec in self.history(fund, limit)]
        base = ["run_id", "fund", "run_at", "sample_end"]
        if not rows:
            return pd.DataFrame(columns=base)
        seen = list(dict.fromkeys(k for r in rows for k in r))  # factor order as stored
        frame = pd.DataFrame(rows, columns=seen)
        order = base + [c for c in seen if c not in base]
        return frame[order].reset_index(drop=True)

    def compare_with_previous(self, run: Mapping[str, Any], threshold: float = 0.2, *,
                              premium_se_multiple: float = 2.0) -> dict[str, Any] | None:
        """How ``run`` differs from the latest stored run of the same book with an earlier sample end.

        Returns ``None`` when there is none; else ``previous_run_id``, ``previous_sample_end``,
        ``exposure`` and ``hedge`` ({name: {before, after}}) and ``changes`` (the flags of
        :meth:`flag_changes` for this pair).
        """
        meta = run.get("meta") or {}
        end = meta.get("sample_end")
        earlier = [r for r in self.history(str(meta.get("fund") or ""))
                   if r.sample_end is not None and end is not None and str(r.sample_end) < str(end)]
        if not earlier:
            return None
        prev = earlier[-1]

        def pairs(stage: str, key: str) -> dict[str, dict[str, float]]:
            before = _section(prev.run, stage).get(key) or {}
            after = _section(run, stage).get(key) or {}
            return {str(k): {"before": _num(before.get(k)), "after": _num(after.get(k))}
                    for k in dict.fromkeys([*before, *after])}

        return jsonable({"previous_run_id": prev.run_id, "previous_sample_end": prev.sample_end,
                       "exposure": pairs("exposures", "portfolio"), "hedge": pairs("hedge", "positions"),
                       "changes": _changes(prev.run, run, threshold, premium_se_multiple)})

    def flag_changes(self, threshold: float = 0.2, *, fund: str | None = None,
                     premium_se_multiple: float = 2.0) -> pd.DataFrame:
        """Large changes of a book from one stored run to its next (by sample end).

        Flags an exposure or an overlay weight (fraction of NAV) that moved by more than
        ``threshold`` in absolute terms, and a price of risk that moved by more than
        ``premium_se_multiple`` times its earlier Shanken standard error (its plain
        Fama-MacBeth one when that is missing).  The thresholds are common practice
        starting points, not from a source; set them to the book's own tolerance.
        Columns: ``fund``, ``run_id``, ``previous_run_id``, ``sample_end``,
        ``previous_sample_end``, ``quantity``, ``name``, ``before``, ``after``,
        ``change``, ``limit``.
        """
        if not (threshold > 0 and premium_se_multiple > 0):
            raise InputError("thresholds must be positive.", column="threshold",
                             fix="use for example threshold=0.2, premium_se_multiple=2.")
        columns = ["fund", "run_id", "previous_run_id", "sample_end", "previous_sample_end",
                   "quantity", "name", "before", "after", "change", "limit"]
        flags: list[dict[str, Any]] = []
        by_fund: dict[str, list[RunRecord]] = {}
        for rec in self.history(fund):
            by_fund.setdefault(rec.fund, []).append(rec)
        for name, recs in by_fund.items():
            for prev, cur in zip(recs, recs[1:], strict=False):  # consecutive runs, not months
                flags += [dict(fund=name, run_id=cur.run_id, previous_run_id=prev.run_id,
                               sample_end=cur.sample_end, previous_sample_end=prev.sample_end, **f)
                          for f in _changes(prev.run, cur.run, threshold, premium_se_multiple)]
        return pd.DataFrame(flags, columns=columns)


def _num(x: Any) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return math.nan
    return v


def _section(run: Mapping, stage: str) -> Mapping:
    value = run.get(stage)
    return value if isinstance(value, Mapping) else {}


def _flatten(rec: RunRecord) -> dict[str, Any]:
    run = rec.run
    exposures, premia, hedge = (_section(run, s) for s in ("exposures", "premia", "hedge"))
    row: dict[str, Any] = {"run_id": rec.run_id, "fund": rec.fund, "run_at": rec.run_at,
                           "sample_end": rec.sample_end}
    for prefix, mapping in (("exposure", exposures.get("portfolio")),
                            ("exposure_se", exposures.get("portfolio_se")),
                            ("premium", premia.get("lambda")),
                            ("t_shanken", premia.get("t_shanken")),
                            ("hedge", hedge.get("positions")),
                            ("exposure_after", hedge.get("exposure_after"))):
        for key, value in (mapping or {}).items():
            row[f"{prefix}:{key}"] = _num(value)
    row["tracking_error"] = _num(hedge.get("tracking_error"))
    row["hedge_status"] = hedge.get("status")
    return row


def _changes(prev: Mapping, cur: Mapping, threshold: float, se_multiple: float) -> list[dict]:
    out = []

    def compare(quantity: str, before: Mapping | None, after: Mapping | None,
                limits: Mapping[str, float] | float) -> None:
        before, after = before or {}, after or {}
        for key in dict.fromkeys([*before, *after]):
            b, a = _num(before.get(key, 0.0 if quantity == "hedge" else None)), \
                _num(after.get(key, 0.0 if quantity == "hedge" else None))
            lim = limits.get(key, math.nan) if isinstance(limits, Mapping) else limits
            if math.isnan(a) or math.isnan(b) or math.isnan(lim):
                continue
            if abs(a - b) > lim:
                out.append(dict(quantity=quantity, name=str(key), before=b, after=a,
                                change=a - b, limit=lim))

    pe, ce = _section(prev, "exposures"), _section(cur, "exposures")
    compare("exposure", pe.get("portfolio"), ce.get("portfolio"), threshold)
    pp, cp = _section(prev, "premia"), _section(cur, "premia")
    se = pp.get("se_shanken") or pp.get("se_fm") or {}
    compare("premium", pp.get("lambda"), cp.get("lambda"),
            {k: se_multiple * _num(v) for k, v in se.items()})
    ph, ch = _section(prev, "hedge"), _section(cur, "hedge")
    compare("hedge", ph.get("positions"), ch.get("positions"), threshold)
    return out
