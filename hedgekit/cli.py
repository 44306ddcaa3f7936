"""Command line: ``hedgekit COMMAND CONFIG [options]``.

Only wiring lives here: parse arguments, call :mod:`hedgekit.pipeline`, print with
:mod:`hedgekit.present.terminal`, map errors to exit codes (0 done, 1 other, 2 bad input,
3 hedge targets unreachable). ``--json`` prints one JSON object on stdout and nothing
else there; notes go to stderr.
"""

from __future__ import annotations

import argparse
import json
import sys
import traceback

from . import __version__
from .errors import HedgekitError, InputError
from .jsonable import jsonable

COMMANDS = {
    "demo": "the whole job on the bundled invented scenario (no CONFIG needed)",
    "run": "the whole job: states, exposures, premia, hedge, stress, walk-forward, report",
    "states": "VAR of the state vector, raw and orthogonal innovations",
    "exposures": "full-sample and rolling betas of assets, book and instruments",
    "premia": "Fama-MacBeth prices of risk",
    "hedge": "the overlay and its ticket",
    "stress": "scenario P&L before and after the hedge",
    "backtest": "the walk-forward check of the hedge",
    "report": "the quarterly exposure report (HTML and Markdown)",
    "history": "earlier runs from the run store, side by side",
    "validate": "read and check every input file the config names, print a summary",
    "batch": "the whole job for many books at once, sharing the work their inputs have in common",
}

EPILOG = ("Exit codes: 0 done, 1 other failure, 2 bad input or configuration, "
          "3 hedge targets not reachable.\nOutput is decision support, not investment advice.")



def build_parser() -> argparse.ArgumentParser:
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    common.add_argument("--debug", action="store_true", help="show the traceback on errors")
    common.add_argument("--out", metavar="DIR", help="also write this command's tables as CSV into DIR")
    common.add_argument("--as-of", metavar="PERIOD", dest="as_of",
                        help="use data up to this period only (e.g. 2025-09): re-create an earlier quarter's run")
    parser = argparse.ArgumentParser(
        prog="hedgekit",
        description="Exposures of a book to state-variable innovations, their prices of risk, "
                    "and the overlay that neutralises the ones you choose.",
        epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"hedgekit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, text in COMMANDS.items():
        if name == "batch":
            _batch_parser(sub, text)
            continue
        p = sub.add_parser(name, parents=[common], help=text, description=text, epilog=EPILOG)
        if name == "demo":
            p.add_argument("--dir", default="hedgekit_demo",
                           help="folder the demo scenario and its outputs are written to (default: %(default)s)")
        else:
            p.add_argument("config", metavar="CONFIG", help="the book's TOML configuration file")
        if name in ("demo", "run", "hedge", "stress", "report"):
            p.add_argument("--closest", action="store_true",
                           help="when targets are unreachable, return the closest reachable overlay")
        if name in ("demo", "run", "report"):
            p.add_argument("--no-backtest", action="store_true", dest="no_backtest",
                           help="skip the walk-forward check (it is part of the whole job by default)")
            p.add_argument("--no-store", action="store_true", help="do not record the run in the run store")
        if name == "backtest":
            p.add_argument("--rebalance", choices=["quarterly", "monthly"], help="override [backtest] rebalance")
    return parser


BATCH_EPILOG = ("Exit codes: 0 every book ran; 2 a book had bad input or configuration; 3 a book's hedge "
                "targets were not reachable (and none had bad input); 1 any other failure. The other books "
                "run regardless.\nOutput is decision support, not investment advice.")


def _batch_parser(sub, text: str) -> None:
    p = sub.add_parser("batch", help=text, description=text, epilog=BATCH_EPILOG)
    p.add_argument("configs", metavar="CONFIG", nargs="+",
                   help="configuration files, folders of .toml files, or glob patterns")
    p.add_argument("--workers", type=int, metavar="N", help="processes for the books' own work (default: cores)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run the books on a Dask distributed cluster, e.g. tcp://10.0.0.5:8786")
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    p.add_argument("--debug", action="store_true", help="show the traceback on errors")
    p.add_argument("--closest", action="store_true",
                   help="when targets are unreachable, return the closest reachable overlay")
    p.add_argument("--no-backtest", action="store_true", dest="no_backtest", help="skip the walk-forward check")
    p.add_argument("--no-store", action="store_true", help="do not record the runs in the run stores")


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.command:
        parser.print_help()
        return 0
    try:
        from . import commands
        payload, code = commands.dispatch(args)
        if args.json:
            sys.stdout.write(json.dumps(jsonable(payload), indent=None, allow_nan=False) + "\n")
        return code
    except HedgekitError as exc:
        if args.debug:
            traceback.print_exc()
        kind = "bad input" if isinstance(exc, InputError) else "error"
        print(f"hedgekit: {kind}: {exc}", file=sys.stderr)
        if args.json:
            sys.stdout.write(json.dumps({"error": str(exc), "exit_code": exc.exit_code}) + "\n")
        return exc.exit_code
    except KeyboardInterrupt:
        print("hedgekit: interrupted", file=sys.stderr)
        return 1
    except Exception as exc:  # noqa: BLE001 - the shell turns any failure into exit 1
        if args.debug:
            traceback.print_exc()
        print(f"hedgekit: internal error: {type(exc).__name__}: {exc}. Rerun with --debug for the traceback.",
              file=sys.stderr)
        if args.json:
            sys.stdout.write(json.dumps({"error": f"{type(exc).__name__}: {exc}", "exit_code": 1}) + "\n")
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
