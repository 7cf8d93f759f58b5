"""Running the tasks of a run: one image per task, in this process, a pool or Dask.

``jobs=1`` runs in this process; ``jobs > 1`` uses a
:class:`concurrent.futures.ProcessPoolExecutor` (``forkserver`` start method where
available, else ``spawn``; each worker loads the numba kernels once when it starts);
``dask_local=N`` starts a local Dask cluster of ``N`` single-threaded worker processes;
``scheduler="tcp://host:8786"`` submits the same tasks to a running Dask distributed
cluster. At most two tasks per worker are in flight, so memory stays bounded however
many inputs there are; each worker holds one image at a time. Every executor yields
``(task, record)`` pairs; :func:`process_task` never raises for a bad input.
"""

from __future__ import annotations

import itertools
import math
import os
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

from ..errors import InputError, SegcutError
from ..files import json_ready
from .inputs import hash_file, image_seed
from .records import one_line, versions

__all__ = ["Task", "process_task", "failed_record", "run_serial", "run_pool", "run_dask"]


@dataclass(frozen=True)
class Task:
    """One image to split: where it is, where its outputs go, and how to split it."""

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
    confidence: str | None = None  # where the confidence map goes (no suffix); None: not written


def frame_fraction(mask) -> float:
    """Share of the image's outermost pixels (its frame; of every plane for a stack)
    that are foreground.

    Examples
    --------
    >>> import numpy as np
    >>> mask = np.zeros((4, 4), bool); mask[0, :] = True
    >>> frame_fraction(mask)  # 4 of the 12 frame pixels
    0.3333333333333333
    """
    import numpy as np

    mask = np.asarray(mask, bool)
    frame = np.zeros(mask.shape[-2:], bool)
    frame[[0, -1], :] = True
    frame[:, [0, -1]] = True
    return float(mask[..., frame].mean())


def _box_warning(config, spatial) -> str | None:
    """A note when the configured box reaches outside the image (the split clips it)."""
    box = getattr(config, "box", None)
    if box is None:
        return None
    height, width = spatial[-2], spatial[-1]
    x0, y0, x1, y1 = box
    if x0 >= 0 and y0 >= 0 and x1 <= width and y1 <= height:
        return None
    inside = (max(0, x0), max(0, y0), min(width, x1), min(height, y1))
    if inside[0] >= inside[2] or inside[1] >= inside[3]:
        return (f"the box {x0},{y0},{x1},{y1} lies outside the {width} x {height} image; "
                "it holds no pixel")
    return (f"the box {x0},{y0},{x1},{y1} reaches outside the {width} x {height} image; "
            f"clipped to {','.join(str(v) for v in inside)}")


def _no_stage(name: str) -> None:
    pass


def process_task(task: Task, stage=_no_stage) -> dict:
    """Read, split and write one image; return its record. Never raises for bad input.

    The mask goes to ``<task.mask>.png``, or ``.tif`` (zlib-compressed, in 256 x 256
    tiles for a 2-D image above ``max_graph_pixels``,
    :func:`segcut.large.uses_large_path`) for 3-D stacks and large images; the record's ``mask`` names the file written. Overlays of
    large images are drawn from a reduced copy (:func:`segcut.drawing.write_display_overlay`).

    ``stage`` (in-process runs only) is called with ``"reading"``, ``"splitting"``, then
    ``"splitting: <stage>"`` for each stage of :func:`segcut.split`
    (:data:`segcut.pipeline.STAGES`), and ``"writing"`` as the work moves on.
    """
    from ..io import read_image, read_seeds
    from ..pipeline import split

    started = time.perf_counter()
    io_seconds: dict = {}
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
            stage("reading")
            t0 = time.perf_counter()
            image = read_image(task.path)
            seeds = None if task.seeds_path is None else read_seeds(task.seeds_path)
            io_seconds["read"] = time.perf_counter() - t0
            stage("splitting")
            result = split(image.array, task.config, seeds=seeds,
                           channel_axis=image.channel_axis,
                           rng=image_seed(task.base_seed, input_hash),
                           progress=lambda name: stage(f"splitting: {name}"))
            stage("writing")
            t0 = time.perf_counter()
            mask_name, confidence_name = _write_outputs(task, image, result)
            io_seconds["write"] = time.perf_counter() - t0
        caught_messages = [one_line(w.message) for w in caught]
        record.update(json_ready(result.to_record()))
        record["status"] = "ok"
        record["mask"] = mask_name
        record["frame_fraction"] = frame_fraction(result.mask)
        box_note = _box_warning(task.config, image.spatial_shape)
        caught_messages = list(image.warnings) + [box_note] * bool(box_note) + caught_messages
        record["overlay"] = task.overlay
        if confidence_name is not None:
            record["confidence"] = confidence_name
    except SegcutError as exc:
        record["status"] = "failed"
        record["error"] = str(exc) if exc.path else f"{task.path}: {exc}"
    except ValueError as exc:  # the pipeline's refusal of a malformed image or seed file
        record["status"] = "failed"
        record["error"] = one_line(f"{task.path}: {exc}")
    except MemoryError:
        record["status"] = "failed"
        record["error"] = f"{task.path}: out of memory while processing this image"
    except Exception as exc:  # noqa: BLE001 - one bad image must not stop the run
        record["status"] = "failed"
        record["error"] = one_line(f"{task.path}: unexpected {type(exc).__name__}: {exc}")
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
    record["versions"] = versions()
    stages = record.get("seconds")
    if isinstance(stages, dict):
        record["stage_seconds"] = {**stages, **io_seconds}  # split's stages, reading, writing
    record["seconds"] = time.perf_counter() - started
    return record


def _write_outputs(task: Task, image, result) -> tuple:
    """Write the mask, the overlay and (when asked) the confidence map of one split;
    return the names of the mask and the confidence map (None when not written)."""
    from ..confidence import confidence_to_uint8
    from ..drawing import write_display_overlay
    from ..io import write_image, write_mask
    from ..large import uses_large_path

    out = Path(task.out_dir)
    large = uses_large_path(image.array, task.config, image.channel_axis)
    suffix = ".tif" if image.is_stack or large else ".png"
    mask_name = task.mask + suffix
    write_mask(result.mask, out / mask_name, tiled=large)
    write_display_overlay(image, result.mask, out / task.overlay)
    confidence_name = None
    if task.confidence is not None and result.confidence is not None:
        confidence_name = task.confidence + suffix
        write_image(confidence_to_uint8(result.confidence), out / confidence_name, tiled=large)
    return mask_name, confidence_name


def failed_record(task: Task, error: str) -> dict:
    return {"input": task.input, "status": "failed", "error": error, "warnings": [],
            "config_hash": task.config_hash, "input_hash": task.input_hash,
            "seeds_hash": task.seeds_hash, "versions": versions(),
            "seconds": 0.0}


def _warm_up(config=None) -> None:
    """Load the numba kernels once in a fresh worker (ignore SIGINT: the parent handles it)."""
    import signal

    import numpy as np

    try:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
    except ValueError:  # not the main thread (a Dask worker thread)
        pass
    from ..config import SplitConfig
    from ..pipeline import split

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



_THREAD_LIMITS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def run_serial(tasks: Iterator[Task], stage=_no_stage) -> Iterator[tuple[Task, dict]]:
    """Run the tasks one by one in this process, telling ``stage`` where each one is."""
    for task in tasks:
        yield task, process_task(task, stage)


def run_pool(tasks: Iterator[Task], *, jobs: int, config) -> Iterator[tuple[Task, dict]]:
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    methods = multiprocessing.get_all_start_methods()
    context = multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")
    window = 2 * jobs
    retries: dict[int, int] = {}
    pending_tasks: list[Task] = []  # tasks to resubmit after a worker died

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
                in_flight[pool.submit(process_task, task)] = task
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
                        yield task, failed_record(
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


#: The Dask worker resource a task asks for: its estimated peak bytes
#: (:func:`segcut.batch.memory.estimate_peak_bytes`). Local clusters declare it (the
#: memory budget shared by the workers); workers of a cluster started elsewhere declare
#: it with ``dask worker ... --resources segcut_memory=<bytes>``.
MEMORY_RESOURCE = "segcut_memory"


def task_peak_bytes(task: Task) -> int:
    """Estimated peak bytes of splitting ``task``'s image (0 when its header is unreadable)."""
    from .memory import file_peak_bytes

    return file_peak_bytes(task.path, task.config)


def _local_cluster(n_workers: int, worker_bytes: float | None = None):
    """A local Dask cluster of ``n_workers`` single-threaded worker processes, set up for
    short runs: workers started through a fork server, as the process pool's are (closing
    such a cluster took 0.05-0.07 s against 1.3-1.8 s for spawned workers, 2 workers on
    the 2-core machine, three runs each), no statistical profiler sampling the compute
    thread every 10 ms, and a calmer event loop (both compete for the GIL with the split).
    """
    import multiprocessing

    import dask
    from distributed import LocalCluster

    settings = {"distributed.worker.profile.enabled": False,
                "distributed.admin.tick.interval": "1s",
                "distributed.admin.system-monitor.interval": "5s",
                "distributed.worker.memory.monitor-interval": "1s"}
    if "forkserver" in multiprocessing.get_all_start_methods():
        settings["distributed.worker.multiprocessing-method"] = "forkserver"
    with dask.config.set(settings):
        extra = {} if worker_bytes is None or not math.isfinite(worker_bytes) \
            else {"resources": {MEMORY_RESOURCE: float(worker_bytes)}}
        return LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                            dashboard_address=None, silence_logs=50, **extra)


def _cluster_memory(client, budget_bytes):
    """``(budget, capacity)`` of a Dask run: the bytes the images in flight may use
    together (``budget_bytes``, else :data:`~segcut.batch.memory.BUDGET_FRACTION` of the
    workers' memory limits summed; None: no limit), and the largest
    :data:`MEMORY_RESOURCE` one worker declares (None when some worker declares none)."""
    from .memory import BUDGET_FRACTION

    workers = list(client.scheduler_info().get("workers", {}).values())
    declared = [(w.get("resources") or {}).get(MEMORY_RESOURCE) for w in workers]
    capacity = max(declared) if workers and all(declared) else None
    if budget_bytes is None:
        limits = [w.get("memory_limit") or 0 for w in workers]
        budget_bytes = BUDGET_FRACTION * sum(limits) if limits and all(limits) else None
    if budget_bytes is not None and not math.isfinite(budget_bytes):
        budget_bytes = None
    return budget_bytes, capacity


def run_dask(tasks: Iterator[Task], *, scheduler: str | None, dask_local: int | None,
             config, memory_budget: float | None = None) -> Iterator[tuple[Task, dict]]:
    """Run the tasks on a Dask cluster (local or at ``scheduler``), memory-aware.

    Each task's estimated peak (:func:`task_peak_bytes`) is held against the memory of
    the cluster: tasks are handed out while the estimates of those in flight fit in
    ``memory_budget`` bytes (default: :data:`~segcut.batch.memory.BUDGET_FRACTION` of
    the workers' memory limits; ``inf``: no limit), always at least one; and when every
    worker declares the resource :data:`MEMORY_RESOURCE`, each task asks for its
    estimate of it (at most what the largest worker has), so a worker running several
    tasks at once never takes more than it declared.
    """
    from distributed import Client, as_completed

    cluster = None
    if dask_local:
        share = None if memory_budget is None else memory_budget / dask_local
        cluster = _local_cluster(dask_local, share)
        client = Client(cluster)
    else:
        try:
            client = Client(scheduler, timeout=30)
        except OSError as exc:
            raise SegcutError(f"cannot reach the Dask scheduler: {one_line(exc)}",
                              path=scheduler) from None
    try:
        client.run(_warm_up, config)
        n_workers = max(1, len(client.scheduler_info().get("workers", {})))
        budget, capacity = _cluster_memory(client, memory_budget)
        window = 2 * n_workers
        in_flight: dict = {}  # key -> (task, its estimated peak)
        counter = itertools.count()
        queue = as_completed()
        exhausted = False
        held: list = []  # the next task, waiting for memory

        def submit_more():
            nonlocal exhausted
            while len(in_flight) < window and (held or not exhausted):
                task, peak = held.pop() if held else (next(tasks, None), 0)
                if task is None:
                    exhausted = True
                    return
                peak = peak or task_peak_bytes(task)
                used = sum(p for _, p in in_flight.values())
                if in_flight and budget is not None and used + peak > budget:
                    held.append((task, peak))
                    return
                extra = {} if capacity is None else \
                    {"resources": {MEMORY_RESOURCE: float(min(max(peak, 1), capacity))}}
                future = client.submit(process_task, task, pure=False,
                                       key=f"segcut-image-{next(counter)}-{time.time_ns()}",
                                       **extra)
                in_flight[future.key] = (task, peak)
                queue.add(future)

        submit_more()
        for future in queue:
            task, _ = in_flight.pop(future.key)
            try:
                record = future.result()
            except Exception as exc:  # noqa: BLE001 - a lost worker, not a bad image
                record = failed_record(task, one_line(
                    f"{task.path}: the Dask task failed: {type(exc).__name__}: {exc}"))
            yield task, record
            submit_more()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
