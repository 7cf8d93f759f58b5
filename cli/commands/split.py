"""``segcut split PATH... -o OUT``: split image files and folders into a run folder.

The work is done by :func:`segcut.batch.run_batch`; this module builds the config
from the options, shows progress and prints the outcome.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

EXIT_OK, EXIT_FAILED, EXIT_USAGE = 0, 1, 2

# Failures listed one per line before "... and N more".
_MAX_LISTED = 20


def build_config(*, config_path=None, prior=None, box=None, superpixels=None, affinity=None,
                 method=None, time_limit=None, seed=None):
    """The run's SplitConfig: the config file (or the defaults), then the options given.

    Raises
    ------
    segcut.errors.ConfigError
        The config file cannot be read or is not valid.
    ValueError
        An option value is not valid (the message says which).
    """
    from segcut.config import SplitConfig, load_config

    config = load_config(config_path) if config_path is not None else SplitConfig()
    changes = {}
    if prior is not None:
        changes["prior"] = () if prior.strip() in ("", "none") else tuple(
            p.strip() for p in prior.split(",") if p.strip())
    if box is not None:
        changes["box"] = box
    if superpixels is not None:
        changes["n_superpixels"] = superpixels
    if affinity is not None:
        changes["affinity"] = affinity
    if method is not None:
        changes["method"] = method
    if time_limit is not None:
        changes["time_limit"] = time_limit
    if seed is not None:
        changes["seed"] = seed
    try:
        return config.replace(**changes)
    except (TypeError, ValueError) as err:
        raise ValueError(" ".join(str(err).split())) from None


def _clock(seconds) -> str:
    if seconds is None:
        return "--:--"
    seconds = int(round(seconds))
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes}:{secs:02d}"


class ProgressPrinter:
    """Show progress on ``stream``: a bar on a terminal, else a plain line every ``interval`` s."""

    def __init__(self, stream, *, interval: float = 10.0, width: int = 28):
        self.stream = stream
        self.tty = bool(getattr(stream, "isatty", lambda: False)())
        self.interval = interval
        self.width = width
        self._last = -float("inf")
        self._drawn = False

    def text(self, p) -> str:
        rate = "-" if p.rate is None else f"{p.rate:.2f}"
        resumed = f" ({p.resumed} resumed)" if p.resumed else ""
        return (f"{p.done + p.failed}/{p.total} images, {p.done} done{resumed}, {p.failed} failed, "
                f"{rate} images/s, {_clock(p.eta)} left")

    def __call__(self, p) -> None:
        now = time.monotonic()
        finished = p.done + p.failed >= p.total
        if self.tty:
            filled = int(self.width * (p.done + p.failed) / p.total) if p.total else self.width
            bar = "#" * filled + "-" * (self.width - filled)
            self.stream.write(f"\r[{bar}] {self.text(p)}\x1b[K")
            self._drawn = True
            if finished:
                self.close()
        elif finished or now - self._last >= self.interval:
            self.stream.write(f"segcut: {self.text(p)}\n")
            self._last = now
        self.stream.flush()

    def close(self) -> None:
        if self.tty and self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False


def split(paths, *, out, include=(), exclude=(), config_path=None, prior=None, box=None,
          seeds=None, superpixels=None, affinity=None, method=None, time_limit=None, seed=None,
          jobs=None, force=False, quiet=False, as_json=False, scheduler=None, dask_local=None,
          report=True, stdout=None, stderr=None) -> int:
    """Run ``segcut split``; return the exit code (0 all split, 1 some failed or none found)."""
    from segcut.batch import run_batch

    stdout = sys.stdout if stdout is None else stdout
    stderr = sys.stderr if stderr is None else stderr
    try:
        config = build_config(config_path=config_path, prior=prior, box=box,
                              superpixels=superpixels, affinity=affinity, method=method,
                              time_limit=time_limit, seed=seed)
    except ValueError as err:
        stderr.write(f"segcut: split: {err}\n")
        return EXIT_USAGE
    printer = None if quiet or as_json else ProgressPrinter(stderr)
    try:
        summary = run_batch(paths, out, config, include=include, exclude=exclude, seeds=seeds,
                            jobs=jobs, scheduler=scheduler, dask_local=dask_local, force=force,
                            report=report, progress=printer)
    except ValueError as err:  # refused before any work: a bad option value
        stderr.write(f"segcut: split: {' '.join(str(err).split())}\n")
        return EXIT_USAGE
    finally:
        if printer is not None:
            printer.close()

    if as_json:
        stdout.write(json.dumps({
            "out": summary.out_dir, "total": summary.total, "done": summary.done,
            "failed": summary.failed, "resumed": summary.resumed,
            "skipped": [{"path": p, "reason": r} for p, r in summary.skipped],
            "failures": [{"input": i, "error": e} for i, e in summary.failures],
            "seconds": round(summary.seconds, 3), "config_hash": summary.config_hash,
            "summary": summary.summary_path, "report": summary.report_path,
        }, ensure_ascii=False) + "\n")
    else:
        if not quiet:
            for path, reason in summary.skipped:
                stderr.write(f"segcut: skipped {path}: {reason}\n")
        for _, error in summary.failures[:_MAX_LISTED]:
            stderr.write(f"segcut: {error}\n")
        if len(summary.failures) > _MAX_LISTED:
            stderr.write(f"segcut: ... and {len(summary.failures) - _MAX_LISTED} more failures "
                         f"(see {Path(summary.out_dir) / 'summary.csv'})\n")
        if not quiet or summary.failed or summary.total == 0:
            stream = stderr if summary.failed or summary.total == 0 else stdout
            stream.write(_one_line_summary(summary) + "\n")
    if summary.total == 0 or summary.failed:
        return EXIT_FAILED
    return EXIT_OK


def _one_line_summary(summary) -> str:
    if summary.total == 0:
        return (f"segcut: no image files found ({len(summary.skipped)} other files skipped); "
                "nothing to do")
    resumed = f" ({summary.resumed} from an earlier run)" if summary.resumed else ""
    skipped = f", {len(summary.skipped)} files skipped" if summary.skipped else ""
    written = ", ".join(Path(p).name for p in (summary.summary_path, summary.report_path) if p)
    return (f"segcut: {summary.total} images: {summary.done} split{resumed}, "
            f"{summary.failed} failed{skipped}; {summary.seconds:.1f} s; results in "
            f"{summary.out_dir} ({written})")
