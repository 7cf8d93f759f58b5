"""The run: find inputs, resume what an earlier run left, run the tasks, write the outputs."""

from __future__ import annotations

import contextlib
import os
import statistics
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterable, Iterator, Sequence

from ..errors import InputError
from .executors import Task, run_dask, run_pool, run_serial
from .inputs import InputListing, find_inputs, hash_file, index_seed_folder
from .records import (CONFIDENCE_DIR, MASKS_DIR, OVERLAYS_DIR, REPORT_NAME, RUN_CONFIG_NAME, append_record,
                      check_run_folder, compact_records, load_records, remove_stale_temporaries,
                      write_summary)

__all__ = ["BatchProgress", "BatchSummary", "RunInterrupted", "run_batch", "write_report"]

_THUMBNAIL_SIZE = 320
_MISSING_SEED_WARNING = "no marker image for this input in the seed folder; split without seeds"


# --- report -------------------------------------------------------------------------------

def _thumbnail_jpeg(path: Path, size: int) -> bytes | None:
    """A small JPEG of an overlay (tens of kB, so a page of thousands stays light)."""
    import io

    from PIL import Image

    try:
        with Image.open(path) as im:
            im.draft("RGB", (size, size))
            im = im.convert("RGB")
            im.thumbnail((size, size), Image.Resampling.LANCZOS)
            buffer = io.BytesIO()
            im.save(buffer, format="JPEG", quality=85)
            return buffer.getvalue()
    except (OSError, ValueError):
        return None


def _run_settings(out_dir: Path) -> dict | None:
    """The settings a reader of the report needs, from the folder's run.toml (None without)."""
    from ..config import load_config
    from ..errors import SegcutError

    try:
        config = load_config(out_dir / RUN_CONFIG_NAME)
    except (SegcutError, OSError):
        return None
    box = config.box
    return {"prior": ", ".join(config.prior) or "none",
            "box": "none" if box is None else ",".join(str(v) for v in box),
            "method": config.method, "affinity": config.affinity,
            "superpixels": "from the image size" if config.n_superpixels is None
            else str(config.n_superpixels),
            "seed": str(config.seed), "config hash": str(config.config_hash())[:12]}


def write_report(out_dir, *, title: str | None = None,
                 thumbnail_size: int = _THUMBNAIL_SIZE) -> Path:
    """Write ``report.html`` of a run folder from its records, overlays and run.toml.

    Parameters
    ----------
    out_dir : str or os.PathLike
        The run folder.
    title : str, optional
        Page title (default: the folder's name).
    thumbnail_size : int
        Longest side of the overlay thumbnails embedded in the page, in pixels.

    Returns
    -------
    pathlib.Path
        The report file.

    Raises
    ------
    InputError
        When ``out_dir`` holds no ``records.jsonl``.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     _ = (pathlib.Path(d) / "records.jsonl").write_text(
    ...         '{"input": "x.png", "status": "failed", "error": "x.png: empty file"}\\n')
    ...     page = write_report(d, title="demo").read_text(encoding="utf-8")
    >>> "1 image: 0 split, 1 failed, 1 flagged" in page
    True
    """
    from ..files import write_bytes_atomic
    from ..report import render_report
    from .records import RECORDS_NAME, summary_rows

    out_dir = Path(out_dir)
    if not (out_dir / RECORDS_NAME).is_file():
        raise InputError(f"not a run folder (no {RECORDS_NAME} in it)", path=out_dir)
    records = load_records(out_dir)
    rows = summary_rows(records)
    for row in rows:
        record = records[row["input"]]
        overlay = record.get("overlay")
        row["overlay"] = overlay
        row["mask"] = record.get("mask")
        row["thumbnail"] = row["confidence_thumbnail"] = None
        row["confidence"] = record.get("confidence")
        if overlay and record.get("status") == "ok":
            row["thumbnail"] = _thumbnail_jpeg(out_dir / overlay, thumbnail_size)
            if row["confidence"]:
                row["confidence_thumbnail"] = _thumbnail_jpeg(out_dir / row["confidence"],
                                                              thumbnail_size // 3)
    has_toml = (out_dir / RUN_CONFIG_NAME).is_file()
    settings = _run_settings(out_dir) if has_toml else None
    if settings is not None:
        seeded = sum(1 for r in records.values() if r.get("seeds_hash"))
        settings["seeds"] = (f"a marker image for {seeded} of {len(records)}" if seeded
                             else "none")
    html = render_report(rows, title=title or out_dir.resolve().name, settings=settings,
                         config_link=RUN_CONFIG_NAME if has_toml else None)
    path = out_dir / REPORT_NAME
    write_bytes_atomic(path, html.encode("utf-8", errors="xmlcharrefreplace"))
    return path


# --- the run --------------------------------------------------------------------------------

@dataclass(frozen=True)
class BatchProgress:
    """What a progress callback receives: at the start, when an image starts, after each image.

    Attributes
    ----------
    total : int
        Images in this run, including those already finished earlier.
    done : int
        Images finished (``ok``) so far, including ``resumed``.
    failed : int
        Images that failed in this run.
    resumed : int
        Images skipped because an earlier run finished them with the same config.
    elapsed : float
        Seconds since processing started.
    rate : float or None
        Images processed per second in this run (None before the first one).
    eta : float or None
        Estimated seconds left: the median time per image in a worker, leaving out the
        first image (which also loads or compiles the kernels), times the images left,
        divided by the workers. None until two images are finished.
    last : str or None
        ``input`` of the image that just finished.
    working : str or None
        ``input`` of the oldest image handed to a worker and not finished yet.
    working_since : float or None
        ``time.monotonic()`` when ``working`` was handed out.
    stage : str or None
        What is being done to ``working`` (``"reading"``, ``"splitting"``, ``"writing"``),
        when the run is in this process (one worker, or one image); else None.
    """

    total: int
    done: int
    failed: int
    resumed: int
    elapsed: float
    rate: float | None
    eta: float | None
    last: str | None = None
    working: str | None = None
    working_since: float | None = None
    stage: str | None = None


@dataclass(frozen=True)
class BatchSummary:
    """The outcome of :func:`run_batch`.

    Attributes
    ----------
    out_dir : str
        The run folder.
    total, done, failed, resumed : int
        Counts as in :class:`BatchProgress` at the end (``total`` and ``failed``
        include given paths that do not exist).
    skipped : tuple of (str, str)
        Files found but not processed, with the reason.
    failures : tuple of (str, str)
        ``(input, error)`` for each image that failed in this run.
    seconds : float
        Wall time of the run.
    summary_path, report_path : str or None
        The files written at the end (``report_path`` None without a report).
    config_hash : str
    """

    out_dir: str
    total: int
    done: int
    failed: int
    resumed: int
    skipped: tuple
    failures: tuple
    seconds: float
    summary_path: str | None
    report_path: str | None
    config_hash: str


class RunInterrupted(KeyboardInterrupt):
    """Ctrl-C during :func:`run_batch`, after the outputs were brought up to date.

    Attributes
    ----------
    summary : BatchSummary
        What was finished when the run stopped.
    """

    def __init__(self, summary: BatchSummary):
        super().__init__("interrupted")
        self.summary = summary


def _check_config_names(config) -> None:
    """Unknown affinity model, prior or method: ValueError before any work is done."""
    from ..affinity import get_affinity_model
    from ..maxcut import available_methods
    from ..priors import get_prior

    get_affinity_model(config.affinity)
    for name in config.prior:
        get_prior(name)
    methods = available_methods()
    if config.method != "auto" and config.method not in methods:
        raise ValueError(f"unknown max-cut method {config.method!r}; choose auto or one of "
                         f"{', '.join(sorted(methods))}")


def _check_arguments(jobs, scheduler, dask_local) -> int:
    if jobs is None:
        jobs = os.cpu_count() or 1
    if int(jobs) < 1:
        raise ValueError(f"jobs must be >= 1, got {jobs}")
    if scheduler is not None and dask_local is not None:
        raise ValueError("give scheduler or dask_local, not both")
    if dask_local is not None and int(dask_local) < 1:
        raise ValueError(f"dask_local must be >= 1, got {dask_local}")
    return int(jobs)


def _seed_source(seeds):
    """(seed file or None, seed folder or None) of the ``seeds`` argument."""
    if seeds is None:
        return None, None
    if os.path.isdir(seeds):
        return None, Path(seeds)
    if not os.path.isfile(seeds):
        raise InputError("no such seed file or folder", path=seeds)
    return str(seeds), None


def _seeds_of(item, seed_file, seed_index, seed_hashes) -> tuple:
    """(seed path, seed hash) of one input."""
    path = seed_file
    if seed_index is not None:
        path = seed_index.get(item.relative) or seed_index.get(item.relative.rpartition("/")[2])
    if path is None:
        return None, None
    if path not in seed_hashes:
        try:
            seed_hashes[path] = hash_file(path)
        except OSError as exc:
            raise InputError(f"cannot read the seed file ({exc.strerror or exc})",
                             path=path) from None
    return path, seed_hashes[path]


def _finished_before(old, out_dir: Path, config_hash: str, seeds_hash, item,
                     confidence_maps: bool = False) -> str | None:
    """The input's hash when an earlier run finished it with the same settings (and, with
    ``confidence_maps``, wrote its confidence map), else None."""
    wanted = ("mask", "overlay", "confidence") if confidence_maps else ("mask", "overlay")
    if (old is None or old.get("status") != "ok" or old.get("config_hash") != config_hash
            or old.get("seeds_hash") != seeds_hash
            or not all(old.get(key) and (out_dir / str(old[key])).is_file() for key in wanted)):
        return None
    try:
        return hash_file(item.path)
    except OSError:
        return None  # the worker reports it


def _plan(listing: InputListing, records: dict, out_dir: Path, config_hash: str, seeds,
          force: bool, confidence_maps: bool = False) -> tuple[list, int]:
    """The inputs to process ``(item, input hash or None, seed path, seed hash)``, and how
    many an earlier run finished already."""
    seed_file, seed_dir = _seed_source(seeds)
    seed_index = index_seed_folder(seed_dir) if seed_dir is not None else None
    seed_hashes: dict = {}
    todo, resumed = [], 0
    for item in listing.items:
        seeds_path, seeds_hash = _seeds_of(item, seed_file, seed_index, seed_hashes)
        input_hash = None
        if not force:
            input_hash = _finished_before(records.get(item.input), out_dir, config_hash,
                                          seeds_hash, item, confidence_maps)
            if input_hash is not None and records[item.input].get("input_hash") == input_hash:
                resumed += 1
                continue
        todo.append((item, input_hash, seeds_path, seeds_hash))
    return todo, resumed


class _Tally:
    """Counts of a run, the progress callback and the honest estimate of time left."""

    def __init__(self, total: int, resumed: int, workers: int, progress):
        self.total, self.resumed, self.workers = total, resumed, max(1, workers)
        self.done, self.failed = resumed, 0
        self.failures: list = []
        self.worker_seconds: list = []
        self.in_flight: dict = {}  # input -> monotonic time it was handed out
        self.current_stage: str | None = None
        self.progress = progress
        self.t0 = time.perf_counter()

    def fail(self, name: str, error: str) -> None:
        self.failed += 1
        self.failures.append((name, error))

    def started(self, name: str) -> None:
        self.in_flight[name] = time.monotonic()
        self.current_stage = None
        self.report(None)

    def stage(self, name: str) -> None:
        self.current_stage = name
        self.report(None)

    def finished(self, record: dict) -> None:
        self.in_flight.pop(record["input"], None)
        self.current_stage = None
        if record["status"] == "ok":
            self.done += 1
        else:
            self.fail(record["input"], record.get("error", ""))
        if isinstance(record.get("seconds"), (int, float)):
            self.worker_seconds.append(float(record["seconds"]))
        self.report(record["input"])

    def report(self, last) -> None:
        if self.progress is None:
            return
        elapsed = time.perf_counter() - self.t0
        processed = self.done + self.failed - self.resumed
        rate = processed / elapsed if processed and elapsed > 0 else None
        left = self.total - self.done - self.failed
        eta = None
        if len(self.worker_seconds) >= 2:
            eta = statistics.median(self.worker_seconds[1:]) * left / self.workers
        working = min(self.in_flight, key=self.in_flight.get) if self.in_flight else None
        self.progress(BatchProgress(
            total=self.total, done=self.done, failed=self.failed, resumed=self.resumed,
            elapsed=elapsed, rate=rate, eta=eta, last=last, working=working,
            working_since=self.in_flight.get(working), stage=self.current_stage))


@contextlib.contextmanager
def _interrupts_held():
    """Hold Ctrl-C (SIGINT) back for the duration of the block; it is raised right after.

    Only in the main thread (where Python runs signal handlers); elsewhere the block
    runs as is.
    """
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    previous = signal.signal(signal.SIGINT, lambda number, frame: caught.append(number))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
    if caught and previous is not signal.SIG_IGN:
        if callable(previous):
            previous(signal.SIGINT, None)  # the default handler raises KeyboardInterrupt
        raise KeyboardInterrupt


def _budget_bytes(memory_budget):
    """The memory budget in bytes: ``memory_budget`` GiB, else
    :data:`~segcut.batch.memory.BUDGET_FRACTION` of the available memory (None: unknown)."""
    from .memory import BUDGET_FRACTION, GIB, available_memory

    if memory_budget is None:
        available = available_memory()
        return None if available is None else BUDGET_FRACTION * available
    return float(memory_budget) * GIB


def _memory_jobs(jobs, todo, config, memory_budget):
    """``jobs`` capped by the memory budget and the largest image's estimated peak."""
    from .memory import file_peak_bytes, memory_workers

    if jobs <= 1 or len(todo) <= 1:
        return jobs
    peak = max(file_peak_bytes(entry[0].path, config) for entry in todo)
    return memory_workers(jobs, peak, _budget_bytes(memory_budget))


def _executor(tasks, *, jobs, n_todo, scheduler, dask_local, config, stage, memory_budget):
    if scheduler is not None or dask_local is not None:
        # a local cluster shares this machine's budget; a remote one is measured by the
        # workers' own memory limits unless a budget was given
        budget = None if scheduler is not None and memory_budget is None \
            else _budget_bytes(memory_budget)
        return run_dask(tasks, scheduler=scheduler, dask_local=dask_local, config=config,
                        memory_budget=budget)
    if jobs == 1 or n_todo <= 1:
        return run_serial(tasks, stage)
    return run_pool(tasks, jobs=min(jobs, n_todo), config=config)


def _finish(out_dir: Path, report: bool) -> tuple:
    """Compact the records (the file is the truth), write summary.csv and the report."""
    records = load_records(out_dir)
    compact_records(out_dir, records)
    summary_path = write_summary(out_dir, records)
    report_path = write_report(out_dir) if report else None
    return summary_path, report_path


def run_batch(paths: Iterable, out_dir, config, *, include: Sequence[str] = (),
              exclude: Sequence[str] = (), seeds=None, jobs: int | None = None,
              scheduler: str | None = None, dask_local: int | None = None, force: bool = False,
              report: bool = True, progress: Callable[[BatchProgress], None] | None = None,
              confidence_maps: bool = False,
              memory_budget: float | None = None) -> BatchSummary:
    """Split every image under ``paths`` into ``out_dir``; resume what an earlier run left.

    Parameters
    ----------
    paths : iterable of str or os.PathLike
        Image files and folders (searched recursively; see :func:`find_inputs`). A
        path that does not exist counts as one failed input (the others are run),
        unless no path exists.
    out_dir : str or os.PathLike
        The run folder (created if needed).
    config : SplitConfig
        The configuration of every split (its ``seed`` is the run seed).
    include, exclude : sequence of str
        Glob patterns, as in :func:`find_inputs`.
    seeds : str or os.PathLike, optional
        A marker image used for every input, or a folder of marker images matched by
        the input's relative path without suffix (``sub/x.*``), then by file stem
        (``x.*``). An input without a marker in the folder runs without one and gets
        a warning in its record.
    jobs : int, optional
        Worker processes (default: all cores). 1 runs in this process. Fewer are
        started when the memory budget does not hold that many copies of the
        estimated peak of the run's largest image (:mod:`segcut.batch.memory`).
    scheduler : str, optional
        Address of a Dask distributed scheduler to send the tasks to.
    dask_local : int, optional
        Start a local Dask cluster with this many single-threaded worker processes.
    force : bool
        Redo images even when an earlier run finished them with the same config, and
        take over a folder holding another configuration's results (its records are
        emptied and its ``run.toml`` replaced).
    report : bool
        Write ``report.html`` at the end (also after Ctrl-C).
    progress : callable, optional
        Called with a :class:`BatchProgress` at the start, when an image is handed to
        a worker, as it moves through its stages (runs in this process) and after
        each image.
    confidence_maps : bool
        Also write each image's confidence map (:func:`segcut.confidence.confidence_to_uint8`:
        0-255, 255 = certain) to ``confidence/``, named as its mask (TIFF for 3-D
        stacks), and name it in the record (``confidence``). Sets ``config.confidence``.
        An image an earlier run finished counts as finished only if its map exists.
    memory_budget : float, optional
        GiB the worker processes may use together; by default
        :data:`~segcut.batch.memory.BUDGET_FRACTION` of the memory available at the
        start; ``float("inf")`` never limits anything. It caps ``jobs`` and the workers
        of ``dask_local`` (as many as hold the largest image's estimated peak), and on
        Dask the images in flight (their estimates summed must fit; for ``scheduler``
        the default is the workers' own memory limits) and each task's
        ``segcut_memory`` resource (:func:`segcut.batch.executors.run_dask`).

    Returns
    -------
    BatchSummary

    Raises
    ------
    ValueError
        For a bad argument, or an affinity model, prior or method name that is not
        registered (checked before any work).
    ConfigError
        When ``out_dir`` holds results of another configuration (without ``force``).
    InputError
        When no given path exists, or ``out_dir`` is a file.
    RunInterrupted
        On Ctrl-C, after the records are compacted and ``summary.csv`` and the report
        are written; every output already finished stays valid.
    """
    jobs = _check_arguments(jobs, scheduler, dask_local)
    _check_config_names(config)
    if confidence_maps and not config.confidence:
        config = config.replace(confidence=True)
    started = time.perf_counter()
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError("the output path exists and is not a folder", path=out_dir)
    _seed_source(seeds)
    paths = list(paths)
    listing = find_inputs(paths, include=include, exclude=exclude, ignore=[out_dir],
                          missing_ok=True)
    if paths and len(listing.missing) == len(paths):
        raise InputError("no such file or folder", path=listing.missing[0])
    config_hash = str(config.config_hash())
    out_dir.mkdir(parents=True, exist_ok=True)
    records = load_records(out_dir)
    check_run_folder(out_dir, config, config_hash, records, force=force)
    remove_stale_temporaries(out_dir)
    compact_records(out_dir, records)  # drops a torn last line before we append
    todo, resumed = _plan(listing, records, out_dir, config_hash, seeds, force,
                          confidence_maps)
    if scheduler is None and dask_local is None:
        jobs = _memory_jobs(jobs, todo, config, memory_budget)
    elif dask_local is not None:
        dask_local = _memory_jobs(int(dask_local), todo, config, memory_budget)
    workers = dask_local or (1 if scheduler is None and jobs == 1 else jobs)
    tally = _Tally(len(listing.items) + len(listing.missing), resumed, workers, progress)
    for missing in listing.missing:
        tally.fail(missing, f"{missing}: no such file or folder")
    base_seed = int(getattr(config, "seed", 0) or 0)
    seed_folder = seeds is not None and os.path.isdir(seeds)

    def tasks() -> Iterator[Task]:
        for item, input_hash, seeds_path, seeds_hash in todo:
            tally.started(item.input)
            yield Task(
                path=os.path.abspath(item.path), input=item.input, out_dir=str(out_dir.resolve()),
                mask=f"{MASKS_DIR}/{item.output}", overlay=f"{OVERLAYS_DIR}/{item.output}.png",
                config=config, config_hash=config_hash, input_hash=input_hash,
                seeds_path=None if seeds_path is None else os.path.abspath(seeds_path),
                seeds_hash=seeds_hash, base_seed=base_seed,
                confidence=f"{CONFIDENCE_DIR}/{item.output}" if confidence_maps else None)

    tally.report(None)
    results = _executor(tasks(), jobs=jobs, n_todo=len(todo), scheduler=scheduler,
                        dask_local=dask_local, config=config, stage=tally.stage,
                        memory_budget=memory_budget)
    interrupted = False
    try:
        for task, record in results:
            if seed_folder and task.seeds_path is None:
                record.setdefault("warnings", []).append(_MISSING_SEED_WARNING)
            with _interrupts_held():  # the record and the counts change together
                append_record(out_dir, record)
                tally.finished(record)
    except KeyboardInterrupt:
        interrupted = True
    finally:
        close = getattr(results, "close", None)
        if close is not None:
            close()  # stops the workers (the executors' finally blocks)
        summary_path, report_path = _finish(out_dir, report)
    summary = BatchSummary(
        out_dir=str(out_dir), total=tally.total, done=tally.done, failed=tally.failed,
        resumed=resumed, skipped=listing.skipped, failures=tuple(tally.failures),
        seconds=time.perf_counter() - started, summary_path=str(summary_path),
        report_path=None if report_path is None else str(report_path), config_hash=config_hash)
    if interrupted:
        raise RunInterrupted(summary)
    return summary
