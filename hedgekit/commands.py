"""Command handlers: load what a command needs, run its stages, print its tables.

Each handler returns ``(payload, exit_code)``; ``payload`` is the command's JSON. Notes and
progress go to stderr so ``--json`` keeps stdout to one JSON object.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd

from . import pipeline
from .config import load_config
from .errors import InputError
from .inputs import load_dataset
from .present import terminal
from .present.publish import build_tables
from .present.report import build_report
from .record import run_meta as meta_of

# Which data files each command reads (the rest are not touched).
NEEDS = {
    "states": {"states", "factors"},
    "exposures": {"states", "factors", "assets", "holdings", "portfolio_returns", "instruments"},
    "premia": {"states", "factors", "assets", "holdings", "portfolio_returns"},
    "hedge": {"states", "factors", "assets", "holdings", "portfolio_returns", "instruments", "instrument_sheet",
              "current_positions"},
    "stress": {"states", "factors", "assets", "holdings", "portfolio_returns", "instruments", "instrument_sheet",
               "current_positions"},
    "backtest": {"states", "assets", "holdings", "portfolio_returns", "instruments", "instrument_sheet"},
}


def _note(msg: str) -> None:
    print(msg, file=sys.stderr)


def _console(args):
    return terminal.make_console()


def _write_tables(args, tables: dict[str, pd.DataFrame]) -> None:
    if not getattr(args, "out", None):
        return
    folder = Path(args.out)
    if folder.exists() and not folder.is_dir():
        raise InputError("--out must name a folder, not a file.", file=str(folder))
    build_tables(tables, folder).publish()
    _note(f"tables written to {folder}/: {', '.join(f'{n}.csv' for n, f in tables.items() if f is not None)}")


def _print_notes(*results) -> None:
    """The stages' warnings, on stderr (the tables and the JSON stay clean)."""
    seen: set[str] = set()
    for res in results:
        for w in getattr(res, "warnings", ()) or ():
            if w not in seen:
                seen.add(w)
                _note(f"note: {w}")


def _load(args, command: str):
    config = load_config(args.config)
    data = load_dataset(config, need=NEEDS.get(command))
    if getattr(args, "as_of", None):
        data = data.as_of(args.as_of)
    for w in data.warnings:
        _note(f"note: {w}")
    return config, data


# --------------------------------------------------------------------------- stage commands

def cmd_states(args):
    config, data = _load(args, "states")
    fs = pipeline.factor_set(config, data)
    if fs.states is None:
        raise InputError("the config names a factors file, so the VAR step is skipped; "
                         "remove [data] factors to estimate the states.", file=str(config.path))
    res = fs.states
    if not args.json:
        terminal.show_states(_console(args), res.to_dict(), meta_of(config, data, fs))
    for w in res.warnings:
        _note(f"warning: {w}")
    _write_tables(args, {"innovations_raw": res.raw, "innovations_orthogonal": res.orthogonal,
                         "var_coefficients": res.to_frame(), "transform": res.transform})
    return res.to_dict(), 0


def cmd_exposures(args):
    config, data = _load(args, "exposures")
    st = pipeline.run_stages(config, data, "exposures")
    res = st.exposures
    _print_notes(st.factor_set.states, res)
    payload = res.to_dict()
    if not args.json:
        terminal.show_exposures(_console(args), payload, meta_of(config, data, st.factor_set))
    _write_tables(args, {"exposures_book": res.to_frame(), "exposures_assets": res.assets.to_frame(),
                         "exposures_instruments": res.instruments.to_frame() if res.instruments is not None else None,
                         "exposures_rolling_book": res.rolling_book})
    return payload, 0


def cmd_premia(args):
    config, data = _load(args, "premia")
    if data.holdings is None and data.portfolio_returns is None:  # no book: the test assets are enough
        fs = pipeline.prepare_universe(config, data).factor_set
        st = pipeline.Stages(fs, pipeline.asset_betas_only(config, data, fs))
        st = pipeline.Stages(fs, st.exposures, pipeline.run_premia(config, data, fs, st.exposures))
    else:
        st = pipeline.run_stages(config, data, "premia")
    res = st.premia
    _print_notes(st.factor_set.states, res)
    if not args.json:
        terminal.show_premia(_console(args), res.to_dict(), meta_of(config, data, st.factor_set))
    _write_tables(args, {"premia": res.to_frame(), "pricing_errors": res.pricing_errors.to_frame("pricing_error"),
                         "premia_monthly": res.gamma})
    return res.to_dict(), 0


def _hedge_code(res) -> int:
    if res.status != "optimal":
        _note(f"hedgekit: targets not reachable: {res.message}")
        return 3
    return 0


def cmd_hedge(args):
    config, data = _load(args, "hedge")
    st = pipeline.run_stages(config, data, "hedge", closest=args.closest)
    res = st.hedge
    _print_notes(st.factor_set.states, st.exposures, st.premia, res)
    if not args.json:
        con = _console(args)
        terminal.show_hedge(con, res.to_dict(), meta_of(config, data, st.factor_set))
        terminal.print_cautions(con)
    _write_tables(args, {"hedge_ticket": res.to_frame()})
    return res.to_dict(), _hedge_code(res)


def cmd_stress(args):
    config, data = _load(args, "stress")
    st = pipeline.run_stages(config, data, "stress", closest=args.closest, stress_unreachable=False)
    if st.hedge.status != "optimal":
        _note("note: the hedge targets are not reachable; 'hedged' columns use the closest overlay found"
              if args.closest else "note: hedge targets unreachable; the book is stressed without an overlay "
                                   "(use --closest for the closest reachable one)")
    res = st.stress
    _print_notes(st.factor_set.states, st.exposures, st.premia, st.hedge, res)
    if not args.json:
        con = _console(args)
        terminal.show_stress(con, res.to_dict(), meta_of(config, data, st.factor_set))
        terminal.print_cautions(con)
    _write_tables(args, {"stress": res.to_frame(), "replay_months": res.replay_months,
                         "replay_quarters": res.replay_quarters})
    return res.to_dict(), 0


def cmd_backtest(args):
    config, data = _load(args, "backtest")
    st = pipeline.run_stages(config, data, "exposures")
    ex = st.exposures
    with terminal.progress_bar("walk-forward") as tick:
        res = pipeline.run_backtest_stage(config, data, ex, progress=tick, rebalance=args.rebalance)
    _print_notes(ex, res)
    if not args.json:
        con = _console(args)
        terminal.show_backtest(con, res.to_dict(), meta_of(config, data, st.factor_set))
        terminal.print_cautions(con)
    _write_tables(args, {"backtest_periods": res.to_frame()})
    return res.to_dict(), 0


# --------------------------------------------------------------------------- whole job

def _previous_quarter(data) -> str:
    """The period one quarter before the last month of the states (or factors) file."""
    frame = data.states if data.states is not None else data.factors
    last = frame.dropna(how="all").index[-1]
    return str(last - (3 if data.frequency == "monthly" else 1))


def _record_earlier_run(config, data, as_of: str) -> None:
    """Run the job as of an earlier quarter and store it, so history has a comparison."""
    from .store import RunStore
    run = pipeline.run_all(config, data=data.as_of(as_of), backtest=False)
    RunStore(Path(config["store"]["path"])).record(run.to_dict(), config.text, None)
    _note(f"... stored the run as of {as_of} for the quarter-on-quarter comparison")


def _run_tables(run) -> dict[str, pd.DataFrame | None]:
    """Every stage's tables, for ``--out`` on the whole job."""
    st = run.factor_set.states
    ex = run.exposures
    tables: dict[str, pd.DataFrame | None] = {
        "innovations_orthogonal": st.orthogonal if st is not None else None,
        "var_coefficients": st.to_frame() if st is not None else None,
        "exposures_book": ex.to_frame(), "exposures_assets": ex.assets.to_frame(),
        "exposures_instruments": ex.instruments.to_frame() if ex.instruments is not None else None,
        "exposures_rolling_book": ex.rolling_book,
        "premia": run.premia.to_frame() if run.premia is not None else None,
        "hedge_ticket": run.hedge.to_frame() if run.hedge is not None else None,
        "stress": run.stress.to_frame() if run.stress is not None else None,
        "backtest_periods": run.backtest.to_frame() if run.backtest is not None else None,
    }
    return tables


def finish_run(config, run, *, store: bool = True, name: str = "report") -> tuple[dict, int, dict]:
    """Publish a computed run: compare with the stored history, write the report, record the run.

    Returns ``(payload, exit code, report paths)``. Used by the whole job and by each book of
    a batch, so both publish the same way.
    """
    payload = run.to_dict()
    store_path = Path(config["store"]["path"])
    storing = store and config["store"]["enabled"]
    if storing and store_path.exists():  # the store is created only when a run is recorded
        from .store import RunStore
        payload["history"] = RunStore(store_path).compare_with_previous(payload, config["store"]["change_threshold"])
    staged = build_report(payload, Path(config["report"]["output"]),
                          formats=tuple(config["report"]["formats"]), name=name)
    report_paths = staged.paths
    payload["report"] = {k: str(v) for k, v in report_paths.items()}
    try:  # the run is recorded first; the report is published only when the record is in
        if storing:
            from .store import RunStore
            payload["run_id"] = RunStore(store_path).record(payload, config.text, str(report_paths.get("html", "")))
    except BaseException:
        staged.discard()
        raise
    staged.publish()
    code = 0 if run.hedge is None or run.hedge.status == "optimal" else 3
    return payload, code, report_paths


def _whole_job(args, config_path: Path, *, earlier: bool = False):
    config = load_config(config_path)
    data = load_dataset(config)
    storing = config["store"]["enabled"] and not getattr(args, "no_store", False)
    if earlier and storing:
        _record_earlier_run(config, data, _previous_quarter(data))
    as_of = getattr(args, "as_of", None)
    if as_of:
        data = data.as_of(as_of)
    if args.json:
        for w in data.warnings:
            _note(f"note: {w}")
    with terminal.progress_bar("walk-forward") as tick:
        run = pipeline.run_all(config, data=data, backtest=not getattr(args, "no_backtest", False),
                               closest=getattr(args, "closest", False), progress=lambda s: _note(f"... {s}"),
                               backtest_progress=tick)
    # A run re-created --as-of an earlier period gets its own report name: the current one stays.
    name = f"report_{run.meta['sample_end']}" if as_of else "report"
    payload, code, report_paths = finish_run(config, run, store=storing, name=name)
    cuts = payload.get("dropped") or []
    for cut in cuts[:10]:
        _note(f"unused: {cut['file']}{'' if cut.get('column') is None else ' ' + str(cut['column'])} "
              f"{cut['first']} to {cut['last']} ({cut['periods']} periods): {cut['reason']}")
    if len(cuts) > 10:
        _note(f"unused: {len(cuts) - 10} more stretches (see 'dropped' in --json)")
    _write_tables(args, _run_tables(run))
    if not args.json:
        con = _console(args)
        terminal.show_run(con, payload)
    for key in ("html", "md"):
        if key in report_paths:
            _note(f"report written: {report_paths[key]}")
    if code:
        _hedge_code(run.hedge)
    return payload, code


def cmd_run(args):
    return _whole_job(args, Path(args.config))


def cmd_report(args):
    return _whole_job(args, Path(args.config))


def cmd_demo(args):
    from .demo import write_scenario
    folder = Path(args.dir)
    config_path = write_scenario(folder)
    _note(f"demo scenario (invented, simulated) written to {folder}/")
    return _whole_job(args, config_path, earlier=True)


def cmd_history(args):
    from .store import RunStore
    config = load_config(args.config)
    path = Path(config["store"]["path"])
    if not path.exists():
        raise InputError("no run store yet: run 'hedgekit run' first.", file=str(path))
    store = RunStore(path)
    frame = store.history_frame(fund=config["portfolio"]["name"])
    flags = store.flag_changes(fund=config["portfolio"]["name"], threshold=config["store"]["change_threshold"])
    if not args.json:
        terminal.show_history(_console(args), frame, flags)
    _write_tables(args, {"history": frame})
    runs = [{k: v for k, v in rec.to_dict().items() if k not in ("run", "config_text")}
            for rec in store.history(fund=config["portfolio"]["name"])]
    table = frame.set_index("run_id").to_dict(orient="index") if len(frame) else {}
    return {"runs": runs, "side_by_side": {str(k): v for k, v in table.items()},
            "flags": flags.to_dict(orient="records")}, 0


def cmd_batch(args):
    from . import batch
    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers {args.workers} must be at least 1.", fix="pass a count of processes, e.g. 2.")
    paths = batch.expand_configs(args.configs)
    _note(f"batch: {len(paths)} configuration(s)")
    with terminal.progress_bar("books") as tick:
        res = batch.run_batch(paths, workers=args.workers, scheduler=args.scheduler,
                              backtest=not args.no_backtest, closest=args.closest, store=not args.no_store,
                              note=lambda m: _note(f"... {m}"), tick=tick)
    _note(f"... {len(res.outcomes)} book(s) in {res.groups} group(s) of shared inputs, engine {res.engine}"
          f" ({res.workers} worker(s))")
    for o in res.outcomes:
        if o.error is not None:
            _note(f"book {o.name!r} failed (exit {o.exit_code}): {o.error}")
    if not args.json:
        con = _console(args)
        terminal.show_batch(con, res.to_dict())
        terminal.print_cautions(con)
    return res.to_dict(), res.exit_code


def cmd_validate(args):
    config = load_config(args.config)
    data = load_dataset(config)
    if not args.json:
        con = _console(args)
        terminal.show_inputs(con, config, data)
        con.print("All input files read and checked.")
    return {"config": str(args.config), "data": data.summary()}, 0


def dispatch(args):
    out = getattr(args, "out", None)
    if out and Path(out).exists() and not Path(out).is_dir():  # before any work is done
        raise InputError("--out must name a folder, not a file.", file=str(out), fix="pass a folder name.")
    return globals()[f"cmd_{args.command}"](args)
