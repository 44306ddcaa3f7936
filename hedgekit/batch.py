"""Many books at once: shared universe work once per group, each book's own work in parallel.

Books are grouped by what their universe work depends on (the SHA-256 of the states or
factors, assets, instruments and instrument-sheet files, and the configuration sections
that shape the estimates). For each group the universe (:func:`pipeline.prepare_universe`)
is computed once in this process; then each book's own work (:func:`pipeline.run_book`:
its exposure, hedge, stress, walk-forward, report and run-store record) runs on an engine:

- ``local`` (default): a process pool of ``workers`` processes; the shared results reach
  each worker once, through the pool's initializer, not once per book;
- ``dask``: a Dask distributed cluster at ``scheduler`` (``tcp://HOST:PORT``); the shared
  results are scattered to the workers once (``Client.scatter(..., broadcast=True)``).
  Dask is an optional extra (``pip install "hedgekit[cluster]"``), imported only here.

A failing book (bad holdings, unreachable targets, anything else) is reported with its
message and exit code and does not stop the others. Results equal separate runs: a single
run is the same two calls on one book.
"""

from __future__ import annotations

import glob
import hashlib
import json
import os
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from .config import Config, load_config, parse_config
from .errors import HedgekitError, InputError
from .inputs import Dataset, load_dataset

# The data files whose content the universe work depends on; the rest belong to a book.
UNIVERSE_FILES = ("states", "factors", "assets", "instruments", "instrument_sheet")
# Configuration that shapes the universe work (every key of these sections, and these keys of [data]).
UNIVERSE_SECTIONS = ("states", "exposures", "premia", "intervals")
UNIVERSE_DATA_KEYS = ("units", "frequency")


@dataclass(frozen=True)
class BookOutcome:
    """One book's result: its run JSON, or the message and exit code of its failure."""

    name: str
    config: str
    payload: dict[str, Any] | None = None
    error: str | None = None
    exit_code: int = 0


@dataclass(frozen=True)
class BatchResult:
    """Every book's outcome, in the order the configurations were given."""

    outcomes: tuple[BookOutcome, ...]
    groups: int
    engine: str
    workers: int
    notes: tuple[str, ...] = field(default=())

    @property
    def exit_code(self) -> int:
        """0 when every book ran; else 2 if any book had bad input, 3 if any hedge was unreachable, else 1."""
        codes = {o.exit_code for o in self.outcomes if o.exit_code}
        for code in (2, 3, 1):
            if code in codes:
                return code
        return 0

    def to_dict(self) -> dict[str, Any]:
        return {
            "books": {o.name: o.payload for o in self.outcomes if o.error is None},
            "failed": {o.name: o.error for o in self.outcomes if o.error is not None},
            "exit_codes": {o.name: o.exit_code for o in self.outcomes},
            "groups": self.groups, "engine": self.engine, "workers": self.workers,
        }


# --------------------------------------------------------------------------- configs and groups

def expand_configs(items: Sequence[str]) -> list[Path]:
    """Configuration paths from files, folders (every ``*.toml`` inside) and glob patterns."""
    paths: list[Path] = []
    for item in items:
        p = Path(item)
        if p.is_dir():
            found = sorted(p.glob("*.toml"))
            if not found:
                raise InputError("the folder holds no .toml configuration.", file=str(p),
                                 fix="pass configuration files, a folder with .toml files, or a glob.")
            paths += found
        elif any(ch in item for ch in "*?["):
            found = sorted(Path(x) for x in glob.glob(item))
            if not found:
                raise InputError("the pattern matches no file.", file=item, fix="check the pattern.")
            paths += found
        else:
            paths.append(p)
    unique = list(dict.fromkeys(p.resolve() for p in paths))
    if not unique:
        raise InputError("no configuration given.", fix="pass one or more .toml files.")
    return unique


def _file_sha(path: Path | None) -> str | None:
    if path is None:
        return None
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def group_key(config: Config, _hashes: dict[Path, str | None] | None = None) -> str:
    """The key of the universe work a configuration needs: equal keys share it."""
    cache = _hashes if _hashes is not None else {}
    files = {}
    for key in UNIVERSE_FILES:
        path = config.data_path(key)
        if path is not None and path.exists():
            if path not in cache:
                cache[path] = _file_sha(path)
            files[key] = cache[path]
    settings = config.to_dict()
    payload = {"files": files,
               "data": {k: settings["data"].get(k) for k in UNIVERSE_DATA_KEYS},
               "sections": {s: settings.get(s) for s in UNIVERSE_SECTIONS},
               "covariance": settings["hedge"].get("covariance")}
    return hashlib.sha256(json.dumps(payload, sort_keys=True, default=str).encode()).hexdigest()


def book_name(config: Config, path: Path, taken: set[str]) -> str:
    """The book's name in the combined JSON: its fund name, made unique with the file name."""
    name = str(config["portfolio"]["name"])
    if name in taken:
        name = f"{name} ({path.name})"
    taken.add(name)
    return name


# --------------------------------------------------------------------------- the book's own work

@dataclass(frozen=True)
class Shared:
    """What every book of a group shares: the universe data and results."""

    data: Dataset
    universe: Any                  # pipeline.Universe


# The parts of a Dataset that belong to one book; the rest comes from the group's shared data.
BOOK_PARTS = ("holdings", "portfolio_returns", "current_positions", "warnings", "hashes")


@dataclass(frozen=True)
class BookJob:
    """One book's own inputs; the shared part travels to the workers separately, once."""

    name: str
    config_text: str               # the configuration travels as its text (re-parsed by the worker)
    config_path: Path
    book: dict[str, Any]           # BOOK_PARTS of the book's Dataset
    group: str
    options: dict[str, Any]

    def dataset(self, shared: Shared) -> Dataset:
        return replace(shared.data, **self.book)

    def config(self) -> Config:
        return parse_config(self.config_text, path=self.config_path, base=self.config_path.parent)


_WORKER_SHARED: dict[str, Shared] = {}


def _init_worker(shared: dict[str, Shared]) -> None:
    """Process-pool initializer: the shared results arrive once per worker."""
    _WORKER_SHARED.clear()
    _WORKER_SHARED.update(shared)


def run_book_job(job: BookJob, shared: Shared | None = None) -> BookOutcome:
    """One book's own work (exposure, hedge, stress, walk-forward, report, store); never raises."""
    from .commands import finish_run
    from .pipeline import run_book
    shared = shared if shared is not None else _WORKER_SHARED[job.group]
    try:
        config = job.config()
        run = run_book(config, job.dataset(shared), shared.universe, backtest=job.options.get("backtest", True),
                       closest=job.options.get("closest", False))
        payload, code, _ = finish_run(config, run, store=job.options.get("store", True))
        error = None
        if code:
            error = (payload.get("hedge") or {}).get("message") or "hedge targets not reachable"
        return BookOutcome(job.name, str(job.config_path), payload, error if code else None, code)
    except HedgekitError as exc:
        return BookOutcome(job.name, str(job.config_path), None, str(exc), exc.exit_code)
    except Exception as exc:  # noqa: BLE001 - one book's failure must not stop the others
        return BookOutcome(job.name, str(job.config_path), None, f"internal error: {type(exc).__name__}: {exc}", 1)


# --------------------------------------------------------------------------- the batch

def prepare(paths: Sequence[Path], *, note: Callable[[str], None] = lambda _m: None
            ) -> tuple[list[BookJob], dict[str, Shared], list[BookOutcome]]:
    """Load every configuration, group them, compute each group's universe once."""
    from .pipeline import prepare_universe
    jobs: list[BookJob] = []
    failed: list[BookOutcome] = []
    shared: dict[str, Shared] = {}
    taken: set[str] = set()
    hashes: dict[Path, str | None] = {}
    for path in paths:
        name = path.stem
        try:
            config = load_config(path)
            name = book_name(config, path, taken)
            key = group_key(config, hashes)
            if key not in shared:
                note(f"group {len(shared) + 1}: reading shared inputs and estimating the universe "
                     f"(from {path.name})")
                universe_data = load_dataset(config)
                shared[key] = Shared(universe_data, prepare_universe(config, universe_data))
            data = load_dataset(config)
            jobs.append(BookJob(name, config.text, Path(config.path),
                                {k: getattr(data, k) for k in BOOK_PARTS}, key, {}))
        except HedgekitError as exc:
            failed.append(BookOutcome(name, str(path), None, str(exc), exc.exit_code))
    return jobs, shared, failed


def run_batch(paths: Sequence[Path], *, workers: int | None = None, scheduler: str | None = None,
              backtest: bool = True, closest: bool = False, store: bool = True,
              note: Callable[[str], None] = lambda _m: None,
              tick: Callable[[int, int], None] | None = None) -> BatchResult:
    """Run every book; shared work once per group; the book's own work on the chosen engine."""
    jobs, shared, failed = prepare(paths, note=note)
    options = {"backtest": backtest, "closest": closest, "store": store}
    jobs = [replace(j, options=options) for j in jobs]
    workers = max(1, workers or min(len(jobs), os.cpu_count() or 1) or 1)
    if scheduler:
        done = _on_dask(jobs, shared, scheduler, tick)
        engine = "dask"
    elif workers == 1 or len(jobs) <= 1:
        done = _in_process(jobs, shared, tick)
        engine, workers = "in-process", 1
    else:
        done = _on_pool(jobs, shared, workers, tick)
        engine = "local"
    by_name = {o.name: o for o in done}
    ordered = [by_name[j.name] for j in jobs] + failed
    return BatchResult(tuple(ordered), len(shared), engine, workers)


def _in_process(jobs: Iterable[BookJob], shared: dict[str, Shared], tick) -> list[BookOutcome]:
    jobs = list(jobs)
    out = []
    for i, job in enumerate(jobs, 1):
        out.append(run_book_job(job, shared[job.group]))
        if tick:
            tick(i, len(jobs))
    return out


def _on_pool(jobs: list[BookJob], shared: dict[str, Shared], workers: int, tick) -> list[BookOutcome]:
    import multiprocessing as mp
    ctx = mp.get_context("spawn")  # no fork of a process that may hold threads (BLAS, rich)
    out = []
    with ProcessPoolExecutor(max_workers=min(workers, len(jobs)), mp_context=ctx,
                             initializer=_init_worker, initargs=(shared,)) as pool:
        futures = [pool.submit(run_book_job, job) for job in jobs]
        for i, fut in enumerate(as_completed(futures), 1):
            out.append(fut.result())
            if tick:
                tick(i, len(jobs))
    return out


def _on_dask(jobs: list[BookJob], shared: dict[str, Shared], scheduler: str, tick) -> list[BookOutcome]:
    try:
        from distributed import Client
        from distributed import as_completed as dask_completed
    except ImportError:
        raise InputError("--scheduler needs Dask distributed, which is not installed.",
                         fix='pip install "hedgekit[cluster]" (or dask[distributed]).') from None
    try:
        client = Client(scheduler, timeout="20s")
    except (OSError, TimeoutError) as exc:
        raise InputError(f"cannot reach the Dask scheduler: {exc}.", file=scheduler,
                         fix="check the address (tcp://HOST:PORT) and that the scheduler runs.") from None
    try:
        remote = {key: client.scatter(value, broadcast=True) for key, value in shared.items()}
        futures = [client.submit(run_book_job, job, remote[job.group], pure=False) for job in jobs]
        out = []
        for i, fut in enumerate(dask_completed(futures), 1):
            out.append(fut.result())
            if tick:
                tick(i, len(jobs))
        return out
    finally:
        client.close()
