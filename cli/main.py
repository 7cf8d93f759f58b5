"""Entry point of the ``segcut`` command: parse, dispatch, map errors to exit codes.

Exit codes are defined in :mod:`segcut_cli.common`; options that set config fields
in :mod:`segcut_cli.options`.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import traceback
from typing import Sequence

from .common import (EXIT_FAILED, EXIT_INTERRUPTED, EXIT_UNEXPECTED, EXIT_USAGE, CommandError,
                     UsageError, write_json)
from .options import (SPLIT_ONLY_OPTIONS, add_config_options, config_overrides, finite_float,
                      join_negative_values, non_negative_float, non_negative_int,
                      memory_gib, positive_float, positive_int)


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as a :class:`UsageError` (one line, exit code 2)."""

    def error(self, message):  # noqa: D401
        raise UsageError(message, details={"usage": self.format_usage().strip()})


def _add_json_option(parser) -> None:
    parser.add_argument("--json", action="store_true",
                        help="print one machine-readable JSON object instead of text (also "
                             "when the command fails: then it holds the error)")


def _methods_epilog() -> str:
    from segcut.maxcut import available_methods

    lines = ["max-cut methods:"]
    lines += [f"  {name:8s} {m.description}" for name, m in available_methods().items()]
    return "\n".join(lines)


# --- maxcut -------------------------------------------------------------------------

def _registries_epilog() -> str:
    """What the registries hold (plugins included): priors, affinity models, methods."""
    from segcut.affinity import available_affinity_models
    from segcut.priors import available_priors

    lines = ["priors (--prior):"]
    lines += [f"  {name:16s} {p.description}" for name, p in available_priors().items()]
    lines += ["", "affinity models (--affinity):"]
    lines += [f"  {name:16s} {m.description}" for name, m in available_affinity_models().items()]
    return "\n".join(lines) + "\n\n" + _methods_epilog()


def _add_maxcut_parser(sub) -> None:
    p = sub.add_parser("maxcut", help="solve max-cut on a graph file",
                       description="Solve max-cut on a graph file (edge list 'n m / i j w', "
                                   "or GraphML) and print the cut value, the certified upper "
                                   "bound and the gap.",
                       epilog=_methods_epilog(),
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("graph", metavar="GRAPHFILE", help="edge-list (.txt, any other suffix) or .graphml file")
    from segcut.maxcut import available_methods

    p.add_argument("--method", default="auto", metavar="NAME",
                   help=f"max-cut method: {', '.join(available_methods())} (default auto: the "
                        "best cut of the portfolio and a certified bound)")
    p.add_argument("--time-limit", type=positive_float, default=None, metavar="S",
                   help="seconds the solver may use")
    p.add_argument("--seed", type=non_negative_int, default=0,
                   help="random seed; the same seed gives the same output (default 0)")
    _add_json_option(p)
    p.add_argument("-o", "--out", metavar="SIDES_FILE", default=None,
                   help="write one side label (0 or 1) per vertex, one per line")
    p.set_defaults(run=_run_maxcut)


def _run_maxcut(args) -> int:
    from .commands.maxcut import maxcut

    return maxcut(args.graph, method=args.method, time_limit=args.time_limit, seed=args.seed,
                  as_json=args.json, sides_path=args.out)


# --- score ---------------------------------------------------------------------------

def _add_score_parser(sub) -> None:
    p = sub.add_parser(
        "score", help="cut score of given masks on an image's graph, with the certified bound",
        description="Build the image's signed graph (as 'segcut split' would with the same "
                    "config), project each mask onto it (each superpixel takes the side most "
                    "of its pixels are on) and report each mask's cut value, the share of "
                    "pixels that agree with that projection, the graph's certified upper "
                    "bound and the gap; masks are ranked by cut value. IMAGE and MASK may be "
                    "folders (searched recursively): images and masks are then matched by "
                    "their path inside the folders without the suffix, else by file name "
                    "where that is unambiguous. Mask files: 0 is background, anything else "
                    "foreground.")
    p.add_argument("image", metavar="IMAGE", help="an image file, or a folder of images")
    p.add_argument("masks", metavar="MASK", nargs="+",
                   help="mask files or folders of masks (matched to images by path, then name)")
    p.add_argument("--config", metavar="FILE", default=None,
                   help="TOML config used to build the graph (default: the built-in config)")
    p.add_argument("--seeds", metavar="FILE", default=None,
                   help="seed marker image, as for 'segcut split' (single image only)")
    add_config_options(p, skip=SPLIT_ONLY_OPTIONS)
    _add_json_option(p)
    p.add_argument("--csv", metavar="FILE", default=None, dest="csv_path",
                   help="also write one row per (image, mask) to this CSV file")
    p.set_defaults(run=_run_score)


def _run_score(args) -> int:
    from .commands.score import score

    return score(args.image, args.masks, config_path=args.config, seeds_path=args.seeds,
                 overrides=config_overrides(args), as_json=args.json,
                 csv_path=args.csv_path)


# --- compare -------------------------------------------------------------------------

def _add_compare_parser(sub) -> None:
    from segcut.scoring import METRICS

    p = sub.add_parser(
        "compare", help="agreement of predicted masks with reference masks",
        description="Compare predicted masks with reference masks: IoU, Dice, precision, "
                    "recall, boundary F-measure, Hausdorff distance and average symmetric "
                    "surface distance per image; means with bootstrap 95% intervals per "
                    "prediction set; sets ranked side by side, and the best two compared "
                    "image by image. PRED and REF may be files or folders (searched "
                    "recursively; matched by their path inside the folders without the "
                    "suffix, else by file name where that is unambiguous; each prediction "
                    "folder is one set). Masks: 0 is background, "
                    "anything else foreground; reference masks with more than two values "
                    "(e.g. JPEG) are cut at half their type's range unless --threshold is "
                    "given. Unmatched files are listed and counted, not fatal; nothing matched "
                    "at all exits with 1.")
    p.add_argument("predictions", metavar="PRED", nargs="+",
                   help="predicted mask files or folders (one set per folder)")
    p.add_argument("--reference", "-r", metavar="REF", required=True,
                   help="reference mask file or folder")
    p.add_argument("--tolerance", type=non_negative_float, default=2.0, metavar="PX",
                   help="boundary matching tolerance in pixels (default 2)")
    p.add_argument("--threshold", type=finite_float, default=None, metavar="T",
                   help="reference foreground is value > T (default: see above)")
    p.add_argument("--rank-by", choices=METRICS, default="iou", metavar="MEASURE",
                   help=f"measure that ranks the sets: {', '.join(METRICS)} (default iou)")
    p.add_argument("--per-image", action="store_true", help="also print one row per image")
    p.add_argument("--seed", type=non_negative_int, default=0,
                   help="seed of the bootstrap resampling (default 0)")
    _add_json_option(p)
    p.add_argument("--csv", metavar="FILE", default=None, dest="csv_path",
                   help="also write one row per (set, image) to this CSV file")
    p.set_defaults(run=_run_compare)


def _run_compare(args) -> int:
    from .commands.compare import compare

    return compare(args.predictions, reference=args.reference, tolerance=args.tolerance,
                   threshold=args.threshold, rank_by=args.rank_by, seed=args.seed,
                   per_image=args.per_image, as_json=args.json, csv_path=args.csv_path)


# --- split and report -----------------------------------------------------------------

def _add_split_parser(sub) -> None:
    p = sub.add_parser(
        "split", help="split images (files or folders) into foreground and background",
        description="Split every image under PATH (files, or folders searched recursively) "
                    "into foreground and background, writing masks/, overlays/, "
                    "records.jsonl, summary.csv, run.toml and report.html into OUT. "
                    "Sub-folders are mirrored in masks/ and overlays/. Re-running the same "
                    "command skips images already finished with the same config and file "
                    "content; a folder holding another config's results is refused (unless "
                    "--force). Every input gets its own outputs: inputs sharing a name up "
                    "to the suffix keep their suffix (masks/a.png.png, masks/a.jpg.png), and "
                    "inputs of two folders sharing a path are prefixed with their folder's "
                    "name.",
        epilog=_registries_epilog(), formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("paths", metavar="PATH", nargs="+", help="image files and folders")
    p.add_argument("-o", "--out", metavar="OUT", required=True, help="the run folder")
    p.add_argument("--include", metavar="GLOB", action="append", default=[],
                   help="only files whose relative path or name matches (repeatable)")
    p.add_argument("--exclude", metavar="GLOB", action="append", default=[],
                   help="leave out files whose relative path or name matches (repeatable)")
    p.add_argument("--config", metavar="FILE", default=None,
                   help="TOML config (the options below override it)")
    p.add_argument("--seeds", metavar="PATH", default=None,
                   help="seed marker image, or a folder of them matched by relative path or stem")
    add_config_options(p)
    p.add_argument("--jobs", "-j", type=positive_int, default=None, metavar="N",
                   help="worker processes of the local pool (default: all cores); not with "
                        "--dask-local or --scheduler")
    p.add_argument("--memory-budget", type=memory_gib, default=None, metavar="GIB",
                   help="memory the workers may use together (default: 80%% of the "
                        "available memory; for --scheduler, of the workers' memory limits); "
                        "--jobs and --dask-local are lowered to fit the largest image and "
                        "Dask holds images back while it is used; 'inf' for no limit")
    p.add_argument("--force", action="store_true",
                   help="redo images finished by an earlier run, and take over a folder "
                        "holding another configuration's results (its records are emptied)")
    p.add_argument("--quiet", "-q", action="store_true", help="no progress and no summary line")
    _add_json_option(p)
    where = p.add_mutually_exclusive_group()
    where.add_argument("--scheduler", metavar="ADDRESS", default=None,
                       help="send the work to a Dask distributed scheduler (tcp://host:8786)")
    where.add_argument("--dask-local", type=positive_int, default=None, metavar="N",
                       help="start a local Dask cluster with N worker processes")
    p.add_argument("--no-report", action="store_true", help="do not write report.html")
    p.set_defaults(run=_run_split)


def _run_split(args) -> int:
    from .commands.split import split

    return split(args.paths, out=args.out, include=args.include, exclude=args.exclude,
                 config_path=args.config, overrides=config_overrides(args),
                 seeds=args.seeds, jobs=args.jobs, force=args.force, quiet=args.quiet,
                 as_json=args.json, scheduler=args.scheduler, dask_local=args.dask_local,
                 report=not args.no_report, confidence_maps=bool(args.confidence),
                 memory_budget=args.memory_budget)


def _add_report_parser(sub) -> None:
    p = sub.add_parser("report", help="write the HTML report of a run folder",
                       description="Write OUT/report.html from the run folder's records and "
                                   "overlays: one self-contained page, no network needed.")
    p.add_argument("out", metavar="OUT", help="a run folder written by 'segcut split'")
    _add_json_option(p)
    p.set_defaults(run=_run_report)


def _run_report(args) -> int:
    from .commands.report import report

    return report(args.out, as_json=args.json)


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
_PARSERS += [_add_score_parser, _add_compare_parser]
_PARSERS += [_add_split_parser, _add_report_parser]


def _log_unexpected(exc: BaseException) -> str:
    """Write the traceback of an unexpected error to a log file; return its path."""
    fd, path = tempfile.mkstemp(prefix="segcut-error-", suffix=".log")
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        traceback.print_exception(type(exc), exc, exc.__traceback__, file=fh)
    return path


def _command_of(argv: list) -> str | None:
    return next((a for a in argv if not a.startswith("-")), None)


def _fail(argv: list, code: int, message: str, details: dict | None = None) -> int:
    """Report a failed command: one line on stderr; with --json, one JSON object on stdout."""
    sys.stderr.write(f"segcut: {message}\n")
    if "--json" in argv:
        write_json(sys.stdout, {"command": _command_of(argv), "error": message,
                                "exit_code": code, **(details or {})})
    return code


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``segcut`` with ``argv`` (default: ``sys.argv[1:]``); return the exit code."""
    from segcut.errors import ConfigError, SegcutError

    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        parser = build_parser()
        args = parser.parse_args(join_negative_values(argv))
        return int(args.run(args))
    except SystemExit as exc:  # argparse: --help, --version
        return exc.code if isinstance(exc.code, int) else EXIT_USAGE
    except KeyboardInterrupt:
        return _fail(argv, EXIT_INTERRUPTED, "interrupted")
    except UsageError as exc:
        if "usage" in exc.details and "--json" not in argv:
            sys.stderr.write(exc.details["usage"] + "\n")
        return _fail(argv, EXIT_USAGE, str(exc), exc.details)
    except CommandError as exc:
        return _fail(argv, exc.exit_code, str(exc), exc.details)
    except ConfigError as exc:  # a bad config file or a refused run folder
        return _fail(argv, EXIT_USAGE, str(exc))
    except SegcutError as exc:
        return _fail(argv, EXIT_FAILED, str(exc))
    except BrokenPipeError:
        return EXIT_FAILED
    except Exception as exc:  # noqa: BLE001 - the one place that catches everything
        log = _log_unexpected(exc)
        first = str(exc).splitlines()[0] if str(exc) else ""
        return _fail(argv, EXIT_UNEXPECTED, f"unexpected error: {type(exc).__name__}: {first} "
                     f"(details in {log})")


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
