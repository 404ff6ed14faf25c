"""The ``stagefit`` command line.

Every command is a thin layer over the library: it reads arguments, calls one function,
and prints a table for people or JSON for scripts (``--json`` prints nothing else on
stdout). Errors the user can mend print one clear message to stderr with no traceback.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from . import __version__
from .errors import EXIT_INPUT, EXIT_INTERNAL, StagefitError

EXIT_OK = 0
EXIT_UNMET = 3

EPILOG = """\
exit codes:
  0  success
  1  internal error (a bug: please report it with the command and files)
  2  bad input: a spec, stock list, design file or argument is wrong (the message says where)
  3  the design does not meet its spec, or no design can (check, design, compare)
"""


def _add_common(p: argparse.ArgumentParser, json_help: str = "print machine-readable JSON only") -> None:
    p.add_argument("--json", action="store_true", help=json_help)
    p.add_argument("--quiet", action="store_true", help="print nothing but results and errors")
    p.add_argument("--debug", action="store_true", help="show a traceback for internal errors")


def _add_wall_limit(p: argparse.ArgumentParser) -> None:
    p.add_argument("--wall-limit", type=float, metavar="S",
                   help="stop after S seconds of wall time whatever the time limit's clock says"
                        " (default: four times the time limit; 0: no bound, the same answer on any machine)")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="stagefit",
        description="Choose buildable part values for a transistor audio stage from a spec.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"stagefit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("series", help="list the values of a standard series", epilog=EPILOG,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("name", help="E3, E6, E12, E24, E48, E96 or E192")
    p.add_argument("--from", dest="lo", default="1", help="lowest value (default 1)")
    p.add_argument("--to", dest="hi", default="10", help="highest value (default 10)")
    p.add_argument("--capacitance", action="store_true", help="read and show the bounds as capacitances")
    _add_common(p, "print a JSON list of floats")

    p = sub.add_parser("stock", help="read a stock list and show what it holds", epilog=EPILOG,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("file", help="stock list (.csv, .yaml)")
    _add_common(p, "print a JSON list of items")

    p = sub.add_parser("validate", help="check a spec and its stock list, and say what was understood",
                       epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("spec", help="spec file (.yaml)")
    _add_common(p)

    p = sub.add_parser("check", help="analyse a design file: every figure, nominal and worst case",
                       epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("design", help="design file (.yaml)")
    p.add_argument("--spec", help="spec to judge the design against (pass/fail per target)")
    p.add_argument("--transistor", help="check the design with another transistor type instead")
    p.add_argument("--monte-carlo", type=int, default=0, metavar="N", help="also run N Monte Carlo samples")
    p.add_argument("--seed", type=int, default=1, help="seed of the Monte Carlo generator and the search (default 1)")
    p.add_argument("--time-limit", type=float, default=60.0, metavar="S",
                   help="with --transistor: seconds of search for the values to change (default 60)")
    _add_wall_limit(p)
    _add_common(p)

    p = sub.add_parser("design", help="search standard values and stock for the best designs",
                       epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("spec", help="spec file (.yaml)")
    p.add_argument("--stock", help="stock list (overrides parts.stock in the spec)")
    p.add_argument("--top", type=int, help="how many designs to report (overrides search.top)")
    p.add_argument("--time-limit", type=float, metavar="S",
                   help="seconds of search, counted as work (overrides search.time_limit)")
    _add_wall_limit(p)
    p.add_argument("--seed", type=int, help="solver seed (overrides search.seed)")
    p.add_argument("--out", help="output folder (default outputs/<spec name>/)")
    p.add_argument("--force", action="store_true", help="overwrite files a previous run wrote there")
    p.add_argument("--no-files", action="store_true", help="write no output files")
    _add_common(p)

    p = sub.add_parser("compare", help="design the same spec at several supply voltages, side by side",
                       epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("spec", help="spec file (.yaml)")
    p.add_argument("--supply", nargs="+", required=True, metavar="V", help="nominal supplies, e.g. 5 9 12")
    p.add_argument("--stock", help="stock list (overrides parts.stock in the spec)")
    p.add_argument("--time-limit", type=float, metavar="S", help="seconds of search per supply, counted as work")
    _add_wall_limit(p)
    p.add_argument("--out", help="output folder (default outputs/<spec name>-compare/)")
    p.add_argument("--force", action="store_true", help="overwrite files a previous run wrote there")
    _add_common(p)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.command:
        parser.print_help()
        return EXIT_INPUT
    from . import commands

    handler = getattr(commands, "cmd_" + args.command)
    try:
        return handler(args)
    except StagefitError as err:
        print(f"stagefit {args.command}: {err}", file=sys.stderr)
        if getattr(args, "debug", False):
            raise
        return err.exit_code
    except KeyboardInterrupt:
        print("stagefit: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK
    except Exception as err:  # a bug: say so plainly; --debug shows where
        if getattr(args, "debug", False):
            raise
        print(
            f"stagefit {args.command}: internal error: {type(err).__name__}: {err}\n"
            "  this is a bug in stagefit; run again with --debug for the traceback",
            file=sys.stderr,
        )
        return EXIT_INTERNAL


def print_json(obj) -> None:
    json.dump(obj, sys.stdout, indent=2, allow_nan=False, default=_json_default)
    sys.stdout.write("\n")


def _json_default(o):
    if isinstance(o, Path):
        return str(o)
    try:
        import numpy as np

        if isinstance(o, np.generic):
            return o.item()
        if isinstance(o, np.ndarray):
            return o.tolist()
    except ImportError:  # pragma: no cover
        pass
    raise TypeError(f"cannot write {type(o).__name__} as JSON")
