"""Command handlers: load what a command needs, run its stages, print its tables.

Each handler returns ``(payload, exit_code)``; ``payload`` is the command's JSON.
"""

from __future__ import annotations

import sys
from pathlib import Path

from . import display
from .config import load_config
from .errors import StageNotBuilt
from .inputs import load_dataset


def _notes(msg: str) -> None:
    print(msg, file=sys.stderr)


def cmd_demo(args):
    from .demo import write_scenario
    folder = Path(args.dir)
    config_path = write_scenario(folder)
    _notes(f"demo scenario (invented) written to {folder}/")
    config = load_config(config_path)
    data = load_dataset(config)
    payload = {"config": str(config_path), "data": data.summary()}
    if not args.json:
        con = display.make_console()
        _print_summary(con, config, data)
        display.print_cautions(con)
    return payload, 0


def _print_summary(con, config, data) -> None:
    s = data.summary()
    plain = con.no_color
    con.print(f"{config['portfolio']['name']}  (NAV {config['portfolio']['nav']:,.0f} "
              f"{config['portfolio']['currency']}, {s['frequency']})")
    rows = []
    for key in ("states", "assets", "instruments", "factors"):
        if key in s:
            v = s[key]
            rows.append([key, v["start"], v["end"], str(v["periods"]), str(len(v["columns"])),
                         str(v["missing_cells"])])
    con.print(display.table("Inputs", ["file", "first", "last", "periods", "series", "blank cells"], rows,
                            plain=plain))
    if data.holdings is not None:
        con.print(display.table("Holdings (weight of NAV)", ["asset", "weight"],
                                [[a, display.fmt(w, 2, pct=True)] for a, w in data.holdings.items()],
                                plain=plain))
    if data.sheet is not None:
        con.print(display.table("Hedge instruments", ["instrument", "multiplier", "price", "cost bp",
                                                      "min wt", "max wt"],
                                [[i, display.fmt(r.multiplier, 0), display.fmt(r.price, 2),
                                  display.fmt(r.cost_bps, 1), display.fmt(r.min_weight, 2),
                                  display.fmt(r.max_weight, 2)] for i, r in data.sheet.iterrows()],
                                plain=plain))
    for w in data.warnings:
        con.print(f"note: {w}")


def cmd_validate(args):
    config = load_config(args.config)
    data = load_dataset(config)
    if not args.json:
        con = display.make_console()
        _print_summary(con, config, data)
        con.print("All input files read and checked.")
    return {"config": str(args.config), "data": data.summary()}, 0


def dispatch(args):
    handler = globals().get(f"cmd_{args.command}")
    if handler is None:
        raise StageNotBuilt(f"the '{args.command}' command is not built yet in this version.")
    return handler(args)
