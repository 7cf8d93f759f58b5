"""``segcut split PATH... -o OUT``: split image files and folders into a run folder.

The work is done by :func:`segcut.batch.run_batch`; this module builds the config
from the options, shows progress and prints the outcome.
"""

from __future__ import annotations

import os
import sys
import threading
import time
from pathlib import Path

from ..common import EXIT_FAILED, EXIT_INTERRUPTED, EXIT_OK, UsageError, plural, write_json

# Failures listed one per line before "... and N more".
_MAX_LISTED = 20


def build_config(*, config_path=None, overrides=None):
    """The run's SplitConfig: the config file (or the defaults), then the options given.

    Parameters
    ----------
    config_path : str, optional
        A TOML config file.
    overrides : dict, optional
        ``{config field: value}`` (see :func:`segcut_cli.options.config_overrides`).
        Settings that cannot work are refused and ruinous ones lowered with a warning
        on stderr (:func:`segcut_cli.options.guard_extremes`).

    Raises
    ------
    segcut.errors.ConfigError
        The config file cannot be read or is not valid.
    UsageError
        An option value is not valid (the message says which).
    """
    from segcut.config import SplitConfig, load_config

    from ..options import guard_extremes

    config = load_config(config_path) if config_path is not None else SplitConfig()
    try:
        return guard_extremes(config.replace(**dict(overrides or {})), warn=_warn)
    except (TypeError, ValueError) as err:
        raise UsageError(str(err)) from None


def _warn(line: str) -> None:
    sys.stderr.write(f"segcut: warning: {line}\n")


def _clock(seconds) -> str:
    if seconds is None:
        return "--:--"
    seconds = int(round(seconds))
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes}:{secs:02d}"


class ProgressPrinter:
    """Show progress on ``stream``: a bar on a terminal, else a plain line every ``interval`` s.

    While an image is being split the line is refreshed (every second on a terminal),
    so a long image shows which input is being worked on and for how long.
    """

    def __init__(self, stream, *, interval: float = 10.0, width: int = 28,
                 heartbeat: float | None = 1.0):
        self.stream = stream
        self.tty = bool(getattr(stream, "isatty", lambda: False)())
        self.interval = interval
        self.width = width
        self._last = -float("inf")
        self._drawn = False
        self._latest = None
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread = None
        if heartbeat is not None:
            self._thread = threading.Thread(target=self._beat, args=(heartbeat,), daemon=True)
            self._thread.start()

    def text(self, p, now: float | None = None) -> str:
        rate = "-" if p.rate is None else f"{p.rate:.2f}"
        resumed = f" ({p.resumed} resumed)" if p.resumed else ""
        left = "estimating time left" if p.eta is None else f"{_clock(p.eta)} left"
        line = (f"{p.done + p.failed}/{plural(p.total, 'image')}, {p.done} done{resumed}, "
                f"{p.failed} failed, {rate} images/s, {left}")
        if p.working is not None and p.working_since is not None:
            now = time.monotonic() if now is None else now
            doing = f" ({p.stage})" if getattr(p, "stage", None) else ""
            line += f"; working on {p.working}{doing} for {_clock(now - p.working_since)}"
        return line

    def __call__(self, p) -> None:
        with self._lock:
            self._latest = p
            self._draw(p, forced=p.last is not None and p.done + p.failed >= p.total)

    def _draw(self, p, *, forced: bool = False) -> None:
        now = time.monotonic()
        finished = p.done + p.failed >= p.total
        if self.tty:
            filled = int(self.width * (p.done + p.failed) / p.total) if p.total else self.width
            bar = "#" * filled + "-" * (self.width - filled)
            self.stream.write(f"\r[{bar}] {self.text(p, now)}\x1b[K")
            self._drawn = True
            if finished:
                self._close()
        elif forced or finished or now - self._last >= self.interval:
            self.stream.write(f"segcut: {self.text(p, now)}\n")
            self._last = now
        self.stream.flush()

    def _beat(self, every: float) -> None:
        while not self._stop.wait(every):
            with self._lock:
                p = self._latest
                if p is not None and p.working is not None and p.done + p.failed < p.total:
                    self._draw(p)

    def _close(self) -> None:
        if self.tty and self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False

    def close(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=5)
        with self._lock:
            self._close()


def _check_executor_options(jobs, scheduler, dask_local) -> None:
    if jobs is not None and (scheduler is not None or dask_local is not None):
        other = "--scheduler" if scheduler is not None else "--dask-local"
        raise UsageError(f"--jobs sets the local process pool, which {other} replaces; give "
                         f"the number of workers to {other} instead")


def split(paths, *, out, include=(), exclude=(), config_path=None, overrides=None, seeds=None,
          jobs=None, force=False, quiet=False, as_json=False, scheduler=None, dask_local=None,
          report=True, confidence_maps=False, stdout=None, stderr=None,
          memory_budget=None) -> int:
    """Run ``segcut split``; return the exit code (0 all split, 1 some failed or none found).

    Raises
    ------
    UsageError
        A bad option, a missing input, an output path that is a file, or a seed path
        that does not exist (nothing is written).
    RunInterrupted
        Never: Ctrl-C is reported here (exit code 130) after the outputs are updated.
    """
    from segcut.batch import RunInterrupted, run_batch
    from segcut.errors import InputError

    stdout = sys.stdout if stdout is None else stdout
    stderr = sys.stderr if stderr is None else stderr
    _check_executor_options(jobs, scheduler, dask_local)
    config = build_config(config_path=config_path, overrides=overrides)
    if paths and not any(os.path.exists(p) for p in paths):
        raise UsageError("no such file or folder", path=paths[0])
    printer = None if quiet or as_json else ProgressPrinter(stderr)
    try:
        summary = run_batch(paths, out, config, include=include, exclude=exclude, seeds=seeds,
                            jobs=jobs, scheduler=scheduler, dask_local=dask_local, force=force,
                            report=report, progress=printer,
                            confidence_maps=confidence_maps, memory_budget=memory_budget)
    except ValueError as err:  # refused before any work: a bad option value
        raise UsageError(f"split: {err}") from None
    except InputError as err:  # refused before any work: a path that cannot be used
        raise UsageError(str(err)) from None
    except RunInterrupted as stop:
        if printer is not None:
            printer.close()
        return _interrupted(stop.summary, paths, out, as_json, stdout, stderr)
    finally:
        if printer is not None:
            printer.close()
    if as_json:
        write_json(stdout, _json_summary(summary))
    else:
        _print_outcome(summary, quiet, stdout, stderr)
    if summary.total == 0 or summary.failed:
        return EXIT_FAILED
    return EXIT_OK


def _json_summary(summary) -> dict:
    return {
        "command": "split", "out": summary.out_dir, "total": summary.total,
        "done": summary.done, "failed": summary.failed, "resumed": summary.resumed,
        "skipped": [{"path": p, "reason": r} for p, r in summary.skipped],
        "failures": [{"input": i, "error": e} for i, e in summary.failures],
        "seconds": round(summary.seconds, 3), "config_hash": summary.config_hash,
        "summary": summary.summary_path, "report": summary.report_path,
    }


def _interrupted(summary, paths, out, as_json, stdout, stderr) -> int:
    again = " ".join(["segcut split", *[str(p) for p in paths], "-o", str(out)])
    stderr.write(f"segcut: {summary.done} of {plural(summary.total, 'image')} finished "
                 f"({summary.resumed} by an earlier run); the finished ones are kept in "
                 f"{out}; run the same command again to do the rest ({again} ...)\n")
    if as_json:
        write_json(stdout, {**_json_summary(summary), "error": "interrupted",
                            "exit_code": EXIT_INTERRUPTED})
    stderr.write("segcut: interrupted\n")
    return EXIT_INTERRUPTED


def _print_outcome(summary, quiet, stdout, stderr) -> None:
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


def _one_line_summary(summary) -> str:
    if summary.total == 0:
        return (f"segcut: no image files found ({plural(len(summary.skipped), 'other file')} "
                "skipped); nothing to do")
    resumed = f" ({summary.resumed} from an earlier run)" if summary.resumed else ""
    skipped = f", {plural(len(summary.skipped), 'file')} skipped" if summary.skipped else ""
    written = ", ".join(Path(p).name for p in (summary.summary_path, summary.report_path) if p)
    return (f"segcut: {plural(summary.total, 'image')}: {summary.done} split{resumed}, "
            f"{summary.failed} failed{skipped}; {summary.seconds:.1f} s; results in "
            f"{summary.out_dir} ({written})")
