"""Folder runs: many images, one run folder, resumable and safe to kill.

A *run folder* holds everything one configuration produced::

    OUT/
      run.toml        the exact configuration (plus versions, as comments)
      records.jsonl   one JSON object per input (the current result of each)
      summary.csv     one row per input, rewritten at the end of every run
      report.html     the page to look through the results (see :mod:`segcut.report`)
      masks/<relative path>.png      0 background, 255 foreground (.tif for 3-D stacks)
      overlays/<relative path>.png   the boundary drawn over the image

``<relative path>`` is the input's path relative to the folder it was found in (or its
file name when a file was given directly), with the suffix replaced: sub-folders of
the inputs are mirrored, so ``a/x.jpg`` and ``b/x.jpg`` never collide.

Guarantees
----------
- **Nothing half-written.** Masks, overlays, ``summary.csv``, ``run.toml`` and the
  report are written to a temporary file in the same folder and renamed into place.
  ``records.jsonl`` only ever grows by whole lines written with one ``write`` call;
  a torn last line (a run killed by SIGKILL while the operating system was writing)
  is ignored when the file is read, and the file is compacted (one line per input,
  rewritten atomically) at the start and at the end of every run.
- **Resumable.** An input is skipped when its current record is ``ok`` and has the
  same configuration hash, the same input content hash (SHA-256 of the file) and the
  same seed-file hash, and its mask and overlay exist. ``force=True`` redoes it.
  Failed inputs are tried again. Only inputs that may be skipped are hashed before
  the work starts; the others are hashed by the worker that reads them.
- **One configuration per folder.** A folder whose ``run.toml`` or records carry a
  different configuration hash is refused with a :class:`~segcut.errors.ConfigError`
  naming the folder; nothing in it is changed.
- **Failure isolation.** A bad image becomes a record with ``status = "failed"`` and a
  one-line ``error`` naming the file; the run goes on.
- **Deterministic.** Each image's random seed is derived from the configuration's
  seed and the image's content hash (:func:`image_seed`), never from worker order, so
  a serial run, a process pool and a Dask cluster write the same mask bytes. (A
  solver ``time_limit`` lets the clock decide where a search stops; results then may
  differ between runs.)
- **Inputs are named by their relative path**, so one run folder is meant for one
  collection: running another folder that holds ``x.png`` into the same run folder
  redoes ``x.png`` (its content differs) and replaces its outputs.

Executors
---------
``jobs=1`` runs in this process; ``jobs > 1`` uses a
:class:`concurrent.futures.ProcessPoolExecutor` (``forkserver`` start method where
available, else ``spawn``; each worker loads the numba kernels once when it starts);
``dask_local=N`` starts a local Dask cluster of ``N`` single-threaded worker processes;
``scheduler="tcp://host:8786"`` submits the same tasks to a running Dask distributed
cluster. At most two tasks per worker are in flight, so memory stays bounded however
many inputs there are; each worker holds one image at a time.

A real cluster: start ``dask scheduler`` on one machine and
``dask worker tcp://HOST:8786 --nworkers N --nthreads 1`` on each of the others (one
thread per worker process: the numba kernels and scikit-image hold the GIL for long
stretches), with the same segcut version installed everywhere and the input and
output folders at the same paths on every machine (a shared file system): workers
read the images and write masks and overlays themselves; only this process writes
``records.jsonl``, ``summary.csv`` and the report.

Memory
------
Peak memory is set by the largest image a worker holds (inputs stream: a worker reads
one image, splits it, writes its outputs and lets it go; the parent keeps only the
small records). Measured with ``tests/benchmarks/bench_batch.py --memory``: one
6000x4000 RGB JPEG (24 Mpixel) peaks at 3.6 GiB resident for the whole
``segcut split --jobs 1`` process, most of it in the superpixel stage; plan on a
budget of 4 GiB per worker for such photographs (so ``--jobs 5`` on a 24 GiB machine),
and a few hundred MiB per worker for 512x512 images.
"""

from __future__ import annotations

import contextlib
import csv
import fnmatch
import functools
import hashlib
import itertools
import io as _stdio
import json
import math
import os
import platform
import re
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterable, Iterator, Sequence

from .errors import ConfigError, InputError, SegcutError

__all__ = [
    "InputItem",
    "InputListing",
    "BatchProgress",
    "BatchSummary",
    "SUMMARY_COLUMNS",
    "find_inputs",
    "hash_file",
    "image_seed",
    "load_records",
    "run_batch",
    "write_report",
]

RECORDS_NAME = "records.jsonl"
SUMMARY_NAME = "summary.csv"
RUN_CONFIG_NAME = "run.toml"
REPORT_NAME = "report.html"
MASKS_DIR = "masks"
OVERLAYS_DIR = "overlays"

#: Columns of ``summary.csv``, in order.
SUMMARY_COLUMNS = ("input", "status", "foreground_fraction", "cut_value", "upper_bound", "gap",
                   "n_superpixels", "seconds", "warnings", "error")

_HASH_CHUNK = 1 << 20
_THUMBNAIL_SIZE = 128


# --- finding inputs --------------------------------------------------------------------

@dataclass(frozen=True)
class InputItem:
    """One image file found for a run.

    Attributes
    ----------
    path : str
        The file, as found (absolute or relative to the working folder).
    input : str
        Its name inside the run: the path relative to the folder it was found in,
        with ``/`` separators (the file name when the file was given directly).
    """

    path: str
    input: str

    @property
    def stem(self) -> str:
        """``input`` without its suffix: the name of its outputs."""
        head, _, name = self.input.rpartition("/")
        stem = name.rsplit(".", 1)[0] if "." in name.lstrip(".") else name
        return f"{head}/{stem}" if head else stem


@dataclass(frozen=True)
class InputListing:
    """The result of :func:`find_inputs`.

    Attributes
    ----------
    items : tuple of InputItem
        The images to process, sorted by the order of the given paths, then by name.
    skipped : tuple of (str, str)
        ``(path, reason)`` for each file that was found but will not be processed
        (unknown type, or an output name already taken by another input).
    """

    items: tuple
    skipped: tuple


def _image_suffixes() -> frozenset:
    from .io import IMAGE_SUFFIXES

    return frozenset(s.lower() for s in IMAGE_SUFFIXES)


def _matches(relative: str, patterns: Sequence[str]) -> bool:
    name = relative.rpartition("/")[2]
    return any(fnmatch.fnmatchcase(relative, p) or fnmatch.fnmatchcase(name, p) for p in patterns)


def find_inputs(paths: Iterable, *, include: Sequence[str] = (), exclude: Sequence[str] = (),
                ignore: Iterable = ()) -> InputListing:
    """List the image files under ``paths`` (files and folders, searched recursively).

    Parameters
    ----------
    paths : iterable of str or os.PathLike
        Files and folders. Hidden files and folders (names starting with ``.``) inside
        a folder are passed over.
    include, exclude : sequence of str
        Glob patterns (``fnmatch`` syntax, case-sensitive, ``*`` also crosses ``/``)
        matched against the path relative to the given folder and against the file
        name. With ``include``, only matching files are taken; files matching
        ``exclude`` are passed over. Files given directly are matched the same way.
    ignore : iterable of str or os.PathLike
        Folders never to descend into (the run folder itself, when it lies inside an
        input folder).

    Returns
    -------
    InputListing

    Raises
    ------
    InputError
        When a path does not exist.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     root = pathlib.Path(d)
    ...     (root / "sub").mkdir()
    ...     for name in ["b.png", "sub/a.JPG", "notes.txt"]:
    ...         _ = (root / name).write_bytes(b"")
    ...     listing = find_inputs([root])
    >>> [item.input for item in listing.items]
    ['b.png', 'sub/a.JPG']
    >>> [reason for _, reason in listing.skipped]
    ['not a known image type (.txt)']
    """
    suffixes = _image_suffixes()
    ignored = {os.path.realpath(p) for p in ignore}
    items: list[InputItem] = []
    skipped: list[tuple[str, str]] = []
    owner: dict[str, str] = {}

    def consider(path: str, relative: str) -> None:
        if include and not _matches(relative, include):
            return
        if exclude and _matches(relative, exclude):
            return
        suffix = os.path.splitext(path)[1].lower()
        if suffix not in suffixes:
            skipped.append((path, f"not a known image type ({suffix or 'no suffix'})"))
            return
        item = InputItem(path=path, input=relative)
        taken_by = owner.get(item.stem)
        if taken_by is not None:
            skipped.append((path, f"output name {item.stem!r} is already used by {taken_by}"))
            return
        owner[item.stem] = path
        items.append(item)

    for given in paths:
        given = os.fspath(given)
        if os.path.isdir(given):
            found = []
            for folder, dirs, files in os.walk(given):
                dirs[:] = sorted(d for d in dirs if not d.startswith(".")
                                 and os.path.realpath(os.path.join(folder, d)) not in ignored)
                rel_folder = os.path.relpath(folder, given)
                for name in files:
                    if name.startswith("."):
                        continue
                    rel = name if rel_folder == "." else os.path.join(rel_folder, name)
                    found.append((rel.replace(os.sep, "/"), os.path.join(folder, name)))
            for rel, path in sorted(found):
                consider(path, rel)
        elif os.path.isfile(given):
            consider(given, os.path.basename(given))
        else:
            raise InputError("no such file or folder", path=given)
    return InputListing(items=tuple(items), skipped=tuple(skipped))


# --- hashing and seeds ------------------------------------------------------------------

def hash_file(path) -> str:
    """SHA-256 of a file's bytes, read in 1 MiB pieces, as ``"sha256:<hex>"``.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = pathlib.Path(d) / "x"
    ...     _ = p.write_bytes(b"abc")
    ...     hash_file(p)[:23]
    'sha256:ba7816bf8f01cfea'
    """
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(_HASH_CHUNK):
            digest.update(chunk)
    return "sha256:" + digest.hexdigest()


def image_seed(seed: int, input_hash: str) -> int:
    """The random seed of one image: a 63-bit number from the run seed and its content hash.

    It depends only on the two arguments, never on the order in which workers take
    images, so every executor gives the same result.

    Examples
    --------
    >>> image_seed(0, "sha256:00") == image_seed(0, "sha256:00")
    True
    >>> image_seed(0, "sha256:00") != image_seed(1, "sha256:00")
    True
    """
    digest = hashlib.sha256(f"segcut-image-seed:{int(seed)}:{input_hash}".encode()).digest()
    return int.from_bytes(digest[:8], "big") >> 1


# --- one task (runs in a worker) ------------------------------------------------------

@dataclass(frozen=True)
class _Task:
    path: str
    input: str
    out_dir: str
    mask: str
    overlay: str
    config: object
    config_hash: str
    input_hash: str | None  # None: the worker hashes the file (a first run reads it once)
    seeds_path: str | None
    seeds_hash: str | None
    base_seed: int


@functools.lru_cache(maxsize=1)
def _versions_cached() -> tuple:
    return tuple(_versions_uncached().items())


def _versions() -> dict:
    return dict(_versions_cached())


def _versions_uncached() -> dict:
    from importlib import metadata

    out = {"python": platform.python_version()}
    for name in ("segcut", "numpy", "scipy", "scikit-image", "numba", "pillow", "tifffile"):
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _jsonable(value):
    """Record values as plain JSON types (numpy scalars and arrays converted)."""
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if hasattr(value, "tolist"):  # numpy scalar or array
        return _jsonable(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _process(task: _Task) -> dict:
    """Read, split and write one image; return its record. Never raises for bad input."""
    from .io import read_image, read_seeds, write_mask, write_overlay
    from .pipeline import split

    started = time.perf_counter()
    record = {"input": task.input, "status": "ok"}
    caught_messages: list[str] = []
    input_hash = task.input_hash
    try:
        if input_hash is None:
            try:
                input_hash = hash_file(task.path)
            except OSError as exc:
                raise InputError(f"cannot read the file ({exc.strerror or exc})",
                                 path=task.path) from None
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            image = read_image(task.path)
            seeds = None if task.seeds_path is None else read_seeds(task.seeds_path)
            result = split(image.array, task.config, seeds=seeds,
                           channel_axis=image.channel_axis,
                           rng=image_seed(task.base_seed, input_hash))
            out = Path(task.out_dir)
            mask_name = task.mask + (".tif" if image.is_stack else ".png")
            write_mask(result.mask, out / mask_name)
            write_overlay(image.array, result.mask, out / task.overlay,
                          channel_axis=image.channel_axis)
        caught_messages = [_one_line(w.message) for w in caught]
        record.update(_jsonable(result.to_record()))
        record["status"] = "ok"
        record["mask"] = mask_name
        caught_messages = list(image.warnings) + caught_messages
        record["overlay"] = task.overlay
    except SegcutError as exc:
        record["status"] = "failed"
        record["error"] = str(exc) if exc.path else f"{task.path}: {exc}"
    except ValueError as exc:  # the pipeline's refusal of a malformed image or seed file
        record["status"] = "failed"
        record["error"] = _one_line(f"{task.path}: {exc}")
    except MemoryError:
        record["status"] = "failed"
        record["error"] = f"{task.path}: out of memory while processing this image"
    except Exception as exc:  # noqa: BLE001 - one bad image must not stop the run
        record["status"] = "failed"
        record["error"] = _one_line(f"{task.path}: unexpected {type(exc).__name__}: {exc}")
    seen = list(record.get("warnings") or [])
    for message in caught_messages:
        if message not in seen:
            seen.append(message)
    record["warnings"] = seen
    record["input"] = task.input
    record["config_hash"] = task.config_hash
    record["input_hash"] = input_hash
    record["seeds_hash"] = task.seeds_hash
    record["seed"] = None if input_hash is None else image_seed(task.base_seed, input_hash)
    record["versions"] = _versions()
    stages = record.get("seconds")
    if isinstance(stages, dict):
        record["stage_seconds"] = stages
    record["seconds"] = time.perf_counter() - started
    return record


def _failed_record(task: _Task, error: str) -> dict:
    return {"input": task.input, "status": "failed", "error": error, "warnings": [],
            "config_hash": task.config_hash, "input_hash": task.input_hash,
            "seeds_hash": task.seeds_hash, "versions": _versions(),
            "seconds": 0.0}


def _warm_up(config=None) -> None:
    """Load the numba kernels once in a fresh worker (ignore SIGINT: the parent handles it)."""
    import signal

    import numpy as np

    try:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
    except ValueError:  # not the main thread (a Dask worker thread)
        pass
    from .config import SplitConfig
    from .pipeline import split

    # 96 x 96: large enough for the superpixel path (the one photographs take)
    yy, xx = np.mgrid[0:96, 0:96]
    image = np.where((yy - 48) ** 2 + (xx - 48) ** 2 < 400, 0.8, 0.2)
    image = np.stack([image, image * 0.5, 1 - image], axis=-1)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            split(image, config if config is not None else SplitConfig(), rng=0)
    except Exception:  # noqa: BLE001 - a warm-up failure shows again on the first image
        pass


# --- executors ---------------------------------------------------------------------------

_THREAD_LIMITS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def _run_serial(tasks: Iterator[_Task]) -> Iterator[tuple[_Task, dict]]:
    for task in tasks:
        yield task, _process(task)


def _run_pool(tasks: Iterator[_Task], *, jobs: int, config) -> Iterator[tuple[_Task, dict]]:
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    methods = multiprocessing.get_all_start_methods()
    context = multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")
    window = 2 * jobs
    retries: dict[int, int] = {}
    pending_tasks: list[_Task] = []  # tasks to resubmit after a worker died

    def new_pool():
        return ProcessPoolExecutor(max_workers=jobs, mp_context=context,
                                   initializer=_warm_up, initargs=(config,))

    # one BLAS/OpenMP thread per worker process, as Dask's workers get: N workers on N
    # cores, not N x N threads (only variables the user has not set are changed)
    added = {k: "1" for k in _THREAD_LIMITS if k not in os.environ}
    os.environ.update(added)
    pool = new_pool()
    in_flight: dict = {}
    exhausted = False
    try:
        while True:
            while len(in_flight) < window and (pending_tasks or not exhausted):
                if pending_tasks:
                    task = pending_tasks.pop(0)
                else:
                    task = next(tasks, None)
                    if task is None:
                        exhausted = True
                        break
                in_flight[pool.submit(_process, task)] = task
            if not in_flight:
                return
            done, _ = wait(in_flight, return_when=FIRST_COMPLETED)
            broken = False
            for future in sorted(done, key=lambda f: in_flight[f].input):
                task = in_flight.pop(future)
                try:
                    yield task, future.result()
                except BrokenProcessPool:
                    broken = True
                    key = id(task)
                    retries[key] = retries.get(key, 0) + 1
                    if retries[key] > 1:
                        yield task, _failed_record(
                            task, f"{task.path}: the worker process died while processing this "
                                  "image (killed, or out of memory)")
                    else:
                        pending_tasks.append(task)
            if broken:
                pending_tasks.extend(in_flight.values())
                in_flight.clear()
                pool.shutdown(wait=True, cancel_futures=True)
                pool = new_pool()
    finally:
        _stop_pool(pool)
        for key in added:
            os.environ.pop(key, None)


def _stop_pool(pool) -> None:
    """Shut a process pool down now: cancel queued tasks, end running workers."""
    processes = list(getattr(pool, "_processes", {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        if process.is_alive():
            process.terminate()
    for process in processes:
        process.join(timeout=5)


def _run_dask(tasks: Iterator[_Task], *, scheduler: str | None, dask_local: int | None,
              config) -> Iterator[tuple[_Task, dict]]:
    from distributed import Client, LocalCluster, as_completed

    cluster = None
    if dask_local:
        import dask

        # workers of our own cluster: no statistical profiler sampling the compute thread
        # every 10 ms, and a calmer event loop (both compete for the GIL with the split)
        with dask.config.set({"distributed.worker.profile.enabled": False,
                              "distributed.admin.tick.interval": "1s",
                              "distributed.admin.system-monitor.interval": "5s"}):
            cluster = LocalCluster(n_workers=dask_local, threads_per_worker=1, processes=True,
                                   dashboard_address=None, silence_logs=50)
        client = Client(cluster)
    else:
        try:
            client = Client(scheduler, timeout=30)
        except OSError as exc:
            raise SegcutError(f"cannot reach the Dask scheduler: {_one_line(exc)}",
                              path=scheduler) from None
    try:
        client.run(_warm_up, config)
        n_workers = max(1, len(client.scheduler_info().get("workers", {})))
        window = 2 * n_workers
        in_flight: dict = {}
        counter = itertools.count()
        queue = as_completed()
        exhausted = False

        def submit_more():
            nonlocal exhausted
            while not exhausted and len(in_flight) < window:
                task = next(tasks, None)
                if task is None:
                    exhausted = True
                    return
                future = client.submit(_process, task, pure=False,
                                       key=f"segcut-image-{next(counter)}-{time.time_ns()}")
                in_flight[future.key] = task
                queue.add(future)

        submit_more()
        for future in queue:
            task = in_flight.pop(future.key)
            try:
                record = future.result()
            except Exception as exc:  # noqa: BLE001 - a lost worker, not a bad image
                record = _failed_record(task, _one_line(
                    f"{task.path}: the Dask task failed: {type(exc).__name__}: {exc}"))
            yield task, record
            submit_more()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


# --- records -----------------------------------------------------------------------------

def load_records(out_dir) -> dict:
    """Read ``records.jsonl`` of a run folder: ``{input: record}``, the last line per input.

    Lines that are not whole JSON objects (a torn last line after a kill) are ignored.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     _ = (pathlib.Path(d) / "records.jsonl").write_text(
    ...         '{"input": "a.png", "status": "failed"}\\n'
    ...         '{"input": "a.png", "status": "ok"}\\n{"input": "b.p')
    ...     load_records(d)
    {'a.png': {'input': 'a.png', 'status': 'ok'}}
    """
    path = Path(out_dir) / RECORDS_NAME
    records: dict = {}
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return records
    for line in data.split(b"\n"):
        if not line.strip():
            continue
        try:
            record = json.loads(line)
        except ValueError:
            continue
        if isinstance(record, dict) and isinstance(record.get("input"), str):
            records[record["input"]] = record
    return records


def _atomic_write(path: Path, data: bytes) -> None:
    from .io import write_bytes_atomic

    write_bytes_atomic(path, data)


def _record_line(record: dict) -> bytes:
    text = json.dumps(record, sort_keys=True, ensure_ascii=False, allow_nan=False) + "\n"
    try:
        return text.encode("utf-8")
    except UnicodeEncodeError:  # a file name that is not valid UTF-8: escape it in the JSON
        return (json.dumps(record, sort_keys=True, allow_nan=False) + "\n").encode("ascii")


def _compact_records(out_dir: Path, records: dict) -> None:
    data = b"".join(_record_line(records[key]) for key in sorted(records))
    _atomic_write(out_dir / RECORDS_NAME, data)


def _append_record(out_dir: Path, record: dict) -> None:
    """One whole line per record (a single write on an O_APPEND file, then fsync)."""
    from .io import append_line

    append_line(out_dir / RECORDS_NAME, _record_line(record).decode("utf-8").rstrip("\n"))


# Temporary names of segcut.io.atomic_path: ".<stem>.<pid>-<8 hex>.tmp<suffix>".
_TEMP_NAME = re.compile(r"^\..*\.\d+-[0-9a-f]{8}\.tmp(\.[A-Za-z0-9]+)?$")


def _remove_stale_temporaries(out_dir: Path) -> None:
    """Delete temporary files a killed run left behind (they were never renamed into place)."""
    folders = [(out_dir, False), (out_dir / MASKS_DIR, True), (out_dir / OVERLAYS_DIR, True)]
    for folder, recursive in folders:
        if not folder.is_dir():
            continue
        walker = os.walk(folder) if recursive else [(str(folder), [], os.listdir(folder))]
        for root, _, files in walker:
            for name in files:
                if _TEMP_NAME.match(name):
                    with contextlib.suppress(OSError):
                        os.unlink(os.path.join(root, name))


# --- summary.csv ------------------------------------------------------------------------

def _csv_value(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "; ".join(_one_line(v) for v in value)
    return _one_line(value)


def summary_rows(records: dict) -> list[dict]:
    """One flat row per record, with the columns of :data:`SUMMARY_COLUMNS`."""
    rows = []
    for key in sorted(records):
        r = records[key]
        rows.append({
            "input": r.get("input"),
            "status": r.get("status"),
            "foreground_fraction": r.get("foreground_fraction"),
            "cut_value": r.get("value"),
            "upper_bound": r.get("upper_bound"),
            "gap": r.get("gap"),
            "n_superpixels": r.get("n_superpixels"),
            "seconds": r.get("seconds"),
            "warnings": r.get("warnings") or [],
            "error": r.get("error"),
        })
    return rows


def _write_summary(out_dir: Path, records: dict) -> Path:
    buffer = _stdio.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(SUMMARY_COLUMNS)
    for row in summary_rows(records):
        writer.writerow([_csv_value(row[c]) for c in SUMMARY_COLUMNS])
    path = out_dir / SUMMARY_NAME
    _atomic_write(path, buffer.getvalue().encode("utf-8", errors="backslashreplace"))
    return path


# --- report -------------------------------------------------------------------------------

def _thumbnail_jpeg(path: Path, size: int) -> bytes | None:
    """A small JPEG of an overlay (a few kB, so a page of thousands stays light)."""
    from PIL import Image

    try:
        with Image.open(path) as im:
            im.draft("RGB", (size, size))
            im = im.convert("RGB")
            im.thumbnail((size, size), Image.Resampling.LANCZOS)
            buffer = _stdio.BytesIO()
            im.save(buffer, format="JPEG", quality=85)
            return buffer.getvalue()
    except (OSError, ValueError):
        return None


def write_report(out_dir, *, title: str | None = None,
                 thumbnail_size: int = _THUMBNAIL_SIZE) -> Path:
    """Write ``report.html`` of a run folder from its records and overlays.

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
    >>> "1 images: 0 split, 1 failed, 1 flagged" in page
    True
    """
    from .report import render_report

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
        row["thumbnail"] = None
        if overlay and record.get("status") == "ok":
            row["thumbnail"] = _thumbnail_jpeg(out_dir / overlay, thumbnail_size)
    html = render_report(rows, title=title or out_dir.resolve().name)
    path = out_dir / REPORT_NAME
    _atomic_write(path, html.encode("utf-8", errors="xmlcharrefreplace"))
    return path


# --- the run --------------------------------------------------------------------------------

@dataclass(frozen=True)
class BatchProgress:
    """What a progress callback receives after each image (and once at the start).

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
        Estimated seconds left at that rate.
    last : str or None
        ``input`` of the image that just finished.
    """

    total: int
    done: int
    failed: int
    resumed: int
    elapsed: float
    rate: float | None
    eta: float | None
    last: str | None = None


@dataclass(frozen=True)
class BatchSummary:
    """The outcome of :func:`run_batch`.

    Attributes
    ----------
    out_dir : str
        The run folder.
    total, done, failed, resumed : int
        Counts as in :class:`BatchProgress` at the end.
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


def _config_hash(config) -> str:
    return str(config.config_hash())


def _check_run_folder(out_dir: Path, config, config_hash: str, records: dict) -> None:
    """Refuse a folder made with another configuration; write run.toml for a new one."""
    from .config import load_config

    run_toml = out_dir / RUN_CONFIG_NAME
    found = set()
    if run_toml.is_file():
        try:
            found.add(_config_hash(load_config(run_toml)))
        except SegcutError as exc:
            raise ConfigError(f"its {RUN_CONFIG_NAME} cannot be read ({exc.message}); "
                              "choose another output folder", path=out_dir) from None
    found.update(r.get("config_hash") for r in records.values() if r.get("config_hash"))
    found.discard(config_hash)
    if found:
        other = sorted(found)[0]
        raise ConfigError(
            f"this run folder holds results of a different configuration (config hash "
            f"{other[:12]}, this run {config_hash[:12]}); write to another output folder, "
            f"or delete this one to start again", path=out_dir)
    if not run_toml.is_file():
        versions = _versions()
        header = "".join(f"# {name} {version}\n" for name, version in versions.items())
        text = (f"# segcut run configuration (config hash {config_hash})\n{header}\n"
                + config.to_toml())
        _atomic_write(run_toml, text.encode("utf-8"))


def _check_config_names(config) -> None:
    """Unknown affinity model, prior or method: ValueError before any work is done."""
    from .affinity import get_affinity_model
    from .maxcut import available_methods
    from .priors import get_prior

    get_affinity_model(config.affinity)
    for name in config.prior:
        get_prior(name)
    methods = available_methods()
    if config.method != "auto" and config.method not in methods:
        raise ValueError(f"unknown max-cut method {config.method!r}; choose auto or one of "
                         f"{', '.join(sorted(methods))}")


def run_batch(paths: Iterable, out_dir, config, *, include: Sequence[str] = (),
              exclude: Sequence[str] = (), seeds=None, jobs: int | None = None,
              scheduler: str | None = None, dask_local: int | None = None, force: bool = False,
              report: bool = True, progress: Callable[[BatchProgress], None] | None = None,
              ) -> BatchSummary:
    """Split every image under ``paths`` into ``out_dir``; resume what an earlier run left.

    Parameters
    ----------
    paths : iterable of str or os.PathLike
        Image files and folders (searched recursively; see :func:`find_inputs`).
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
        Worker processes (default: all cores). 1 runs in this process.
    scheduler : str, optional
        Address of a Dask distributed scheduler to send the tasks to.
    dask_local : int, optional
        Start a local Dask cluster with this many single-threaded worker processes.
    force : bool
        Redo images even when an earlier run finished them with the same config.
    report : bool
        Write ``report.html`` at the end.
    progress : callable, optional
        Called with a :class:`BatchProgress` at the start and after each image.

    Returns
    -------
    BatchSummary

    Raises
    ------
    ValueError
        For a bad argument, or an affinity model, prior or method name that is not
        registered (checked before any work).
    ConfigError
        When ``out_dir`` holds results of another configuration.
    InputError
        When a path does not exist, or ``out_dir`` is a file.
    KeyboardInterrupt
        Passed on after the records are compacted and ``summary.csv`` is written;
        every output already finished stays valid.
    """
    if jobs is None:
        jobs = os.cpu_count() or 1
    if int(jobs) < 1:
        raise ValueError(f"jobs must be >= 1, got {jobs}")
    if scheduler is not None and dask_local is not None:
        raise ValueError("give scheduler or dask_local, not both")
    if dask_local is not None and int(dask_local) < 1:
        raise ValueError(f"dask_local must be >= 1, got {dask_local}")
    _check_config_names(config)
    started = time.perf_counter()
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError("the output path exists and is not a folder", path=out_dir)
    seeds_dir = None
    if seeds is not None:
        if os.path.isdir(seeds):
            seeds_dir = Path(seeds)
        elif not os.path.isfile(seeds):
            raise InputError("no such seed file or folder", path=seeds)

    listing = find_inputs(paths, include=include, exclude=exclude, ignore=[out_dir])
    config_hash = _config_hash(config)
    out_dir.mkdir(parents=True, exist_ok=True)
    records = load_records(out_dir)
    _check_run_folder(out_dir, config, config_hash, records)
    _remove_stale_temporaries(out_dir)
    _compact_records(out_dir, records)  # drops a torn last line before we append

    base_seed = int(getattr(config, "seed", 0) or 0)
    seed_index = _index_seed_folder(seeds_dir) if seeds_dir is not None else None
    seed_hashes: dict = {}

    todo: list[tuple[InputItem, str, str | None, str | None]] = []
    resumed = 0
    for item in listing.items:
        seeds_path = None
        if seeds is not None:
            seeds_path = str(seeds) if seeds_dir is None else seed_index.get(item.stem) \
                or seed_index.get(item.stem.rpartition("/")[2])
        seeds_hash = None
        if seeds_path is not None:
            if seeds_path not in seed_hashes:
                try:
                    seed_hashes[seeds_path] = hash_file(seeds_path)
                except OSError as exc:
                    raise InputError(f"cannot read the seed file ({exc.strerror or exc})",
                                     path=seeds_path) from None
            seeds_hash = seed_hashes[seeds_path]
        old = records.get(item.input)
        input_hash = None  # hashed here only when an earlier result may be reused
        if (not force and old is not None and old.get("status") == "ok"
                and old.get("config_hash") == config_hash
                and old.get("seeds_hash") == seeds_hash
                and (out_dir / str(old.get("mask"))).is_file()
                and (out_dir / str(old.get("overlay"))).is_file()):
            try:
                input_hash = hash_file(item.path)
            except OSError:
                input_hash = None  # the worker reports it
            if input_hash is not None and old.get("input_hash") == input_hash:
                resumed += 1
                continue
        todo.append((item, input_hash, seeds_path, seeds_hash))

    def tasks() -> Iterator[_Task]:
        for item, input_hash, seeds_path, seeds_hash in todo:
            yield _Task(
                path=os.path.abspath(item.path), input=item.input, out_dir=str(out_dir.resolve()),
                mask=f"{MASKS_DIR}/{item.stem}", overlay=f"{OVERLAYS_DIR}/{item.stem}.png",
                config=config, config_hash=config_hash, input_hash=input_hash,
                seeds_path=None if seeds_path is None else os.path.abspath(seeds_path),
                seeds_hash=seeds_hash, base_seed=base_seed)

    total = len(listing.items)
    done, failed = resumed, 0
    failures: list[tuple[str, str]] = []
    missing_seed_warning = "no marker image for this input in the seed folder; split without seeds"
    t0 = time.perf_counter()

    def report_progress(last):
        if progress is None:
            return
        elapsed = time.perf_counter() - t0
        processed = done + failed - resumed
        rate = processed / elapsed if processed and elapsed > 0 else None
        left = total - done - failed
        eta = left / rate if rate else None
        progress(BatchProgress(total=total, done=done, failed=failed, resumed=resumed,
                               elapsed=elapsed, rate=rate, eta=eta, last=last))

    report_progress(None)
    if scheduler is not None or dask_local is not None:
        results = _run_dask(tasks(), scheduler=scheduler, dask_local=dask_local, config=config)
    elif jobs == 1 or len(todo) <= 1:
        results = _run_serial(tasks())
    else:
        results = _run_pool(tasks(), jobs=min(int(jobs), len(todo)), config=config)

    interrupted = False
    try:
        for task, record in results:
            if seeds_dir is not None and task.seeds_path is None:
                record.setdefault("warnings", []).append(missing_seed_warning)
            _append_record(out_dir, record)
            records[record["input"]] = record
            if record["status"] == "ok":
                done += 1
            else:
                failed += 1
                failures.append((record["input"], record.get("error", "")))
            report_progress(record["input"])
    except BaseException:
        interrupted = True
        raise
    finally:
        close = getattr(results, "close", None)
        if close is not None:
            close()  # stops the workers (the executors' finally blocks)
        # the file is the truth: a record appended just before an interrupt is kept
        records = load_records(out_dir)
        _compact_records(out_dir, records)
        summary_path = _write_summary(out_dir, records)
        report_path = None
        if report and not interrupted:
            report_path = write_report(out_dir)

    return BatchSummary(
        out_dir=str(out_dir), total=total, done=done, failed=failed, resumed=resumed,
        skipped=listing.skipped, failures=tuple(failures),
        seconds=time.perf_counter() - started, summary_path=str(summary_path),
        report_path=None if report_path is None else str(report_path), config_hash=config_hash)


def _index_seed_folder(folder: Path) -> dict:
    """``{relative stem: path}`` and ``{file stem: path}`` of the images in a seed folder."""
    listing = find_inputs([folder])
    index: dict = {}
    for item in listing.items:
        index.setdefault(item.stem, item.path)
    for item in listing.items:
        index.setdefault(item.stem.rpartition("/")[2], item.path)
    return index
