"""Entry point of the ``segcut`` command: parse, dispatch, map errors to exit codes.

Exit codes: 0 all done; 1 some inputs failed (the rest finished); 2 usage error;
3 unexpected error (one line on the terminal, the traceback in a log file);
130 interrupted.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import traceback
from typing import Sequence

EXIT_OK = 0
EXIT_FAILED = 1
EXIT_USAGE = 2
EXIT_UNEXPECTED = 3
EXIT_INTERRUPTED = 130


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line and exit code 2."""

    def error(self, message):  # noqa: D401
        self.print_usage(sys.stderr)
        sys.stderr.write(f"segcut: {message}\n")
        raise SystemExit(EXIT_USAGE)


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not value > 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return value


def _non_negative_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"expected a number >= 0, got {text!r}")
    return value


def _add_json_option(parser) -> None:
    parser.add_argument("--json", action="store_true",
                        help="print one machine-readable JSON object instead of text")


def _add_seed_option(parser) -> None:
    parser.add_argument("--seed", type=_non_negative_int, default=0,
                        help="random seed; the same seed gives the same output (default 0)")


def _add_solver_options(parser, *, default_method: str | None) -> None:
    from segcut.maxcut import available_methods

    methods = available_methods()
    listing = "; ".join(f"{name}: {m.description}" for name, m in methods.items())
    parser.add_argument("--method", default=default_method, metavar="NAME",
                        help=f"max-cut method ({listing})")
    parser.add_argument("--time-limit", type=_positive_float, default=None, metavar="S",
                        help="seconds the solver may use")


# --- maxcut -------------------------------------------------------------------------

def _add_maxcut_parser(sub) -> None:
    p = sub.add_parser("maxcut", help="solve max-cut on a graph file",
                       description="Solve max-cut on a graph file (edge list 'n m / i j w', "
                                   "or GraphML) and print the cut value, the certified upper "
                                   "bound and the gap.")
    p.add_argument("graph", metavar="GRAPHFILE", help="edge-list (.txt, any other suffix) or .graphml file")
    _add_solver_options(p, default_method="tabu")
    _add_seed_option(p)
    _add_json_option(p)
    p.add_argument("-o", "--out", metavar="SIDES_FILE", default=None,
                   help="write one side label (0 or 1) per vertex, one per line")
    p.set_defaults(run=_run_maxcut)


def _run_maxcut(args) -> int:
    from .commands.maxcut import maxcut

    return maxcut(args.graph, method=args.method, time_limit=args.time_limit, seed=args.seed,
                  as_json=args.json, sides_path=args.out)


# --- parser and dispatch --------------------------------------------------------------

def build_parser() -> argparse.ArgumentParser:
    """The full ``segcut`` argument parser."""
    from segcut import __version__

    parser = _Parser(prog="segcut", description="Split images into foreground and background "
                     "as certified max-cuts on signed superpixel graphs.")
    parser.add_argument("--version", action="version", version=f"segcut {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for add in _PARSERS:
        add(sub)
    return parser


_PARSERS = [_add_maxcut_parser]


def _log_unexpected(exc: BaseException) -> str:
    """Write the traceback of an unexpected error to a log file; return its path."""
    fd, path = tempfile.mkstemp(prefix="segcut-error-", suffix=".log")
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        traceback.print_exception(type(exc), exc, exc.__traceback__, file=fh)
    return path


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``segcut`` with ``argv`` (default: ``sys.argv[1:]``); return the exit code."""
    from segcut.errors import SegcutError

    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        return int(args.run(args))
    except SystemExit as exc:  # argparse: --help, --version, usage errors
        return exc.code if isinstance(exc.code, int) else EXIT_USAGE
    except KeyboardInterrupt:
        sys.stderr.write("segcut: interrupted\n")
        return EXIT_INTERRUPTED
    except SegcutError as exc:
        sys.stderr.write(f"segcut: {exc}\n")
        return EXIT_FAILED
    except BrokenPipeError:
        return EXIT_FAILED
    except Exception as exc:  # noqa: BLE001 - the one place that catches everything
        log = _log_unexpected(exc)
        first = str(exc).splitlines()[0] if str(exc) else ""
        sys.stderr.write(f"segcut: unexpected error: {type(exc).__name__}: {first} "
                         f"(details in {log})\n")
        return EXIT_UNEXPECTED


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
