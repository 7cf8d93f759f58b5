"""How much memory one image needs, and how many workers fit in the memory there is.

:func:`estimate_peak_bytes` is a formula fitted to peaks measured with
``tests/benchmarks/bench_large.py`` (resident memory of a fresh process splitting one
RGB image, 2 cores):

``peak = BASE_BYTES + GRAPH_BYTES_PER_PIXEL * pixels`` on the full-resolution path, and
``peak = BASE_BYTES + max(GRAPH_BYTES_PER_PIXEL * graph_pixels, FULL_BYTES_PER_PIXEL *
pixels)`` on the large-image path of :mod:`segcut.large`, where ``graph_pixels`` are the
pixels of the reduced copy the superpixel graph is built on (the graph stages peak
first; the full-resolution labels (int32), confidence (float32), mask and tiles later).
Measured peaks (GiB, fresh process, the benchmark's own uint8 image included) and the
estimate: 512x512 0.26 (0.30); 1 Mpixel full path 0.46 (0.45), 4 Mpixel full path 1.03
(1.03); large path, ``split`` of an array, 4 Mpixel 0.37 (0.45), 16 Mpixel 0.50 (0.60),
36 Mpixel 0.75 (0.97), 100 Mpixel 1.58 (2.25). A worker does more than ``split``: it
reads the file (large TIFF and Zarr through a mapping whose pages count) and writes
the mask and overlay while the result is held, so the large-path term is fitted to
``segcut split FILE --jobs 1`` of tiled TIFF and Zarr files: 36 Mpixel 0.95-0.97
(0.97), 100 Mpixel 2.24 (2.25). Between 2 and 10 Mpixel it estimates low (measured:
``split`` of a 1.96 Mpixel array reduced by 3, 0.37 (0.30); a worker's task on a mapped
5.8 Mpixel TIFF reduced by 4, 0.48 (0.37), 9 Mpixel reduced by 5, 0.55 (0.43)): fixed
costs (overlay drawing, tiles) not in the two terms; :data:`BUDGET_FRACTION` leaves
that much room. ``tests/test_batch_memory.py`` checks the estimate against a measured peak.

:func:`memory_workers` caps the number of worker processes of a batch (the process
pool's ``jobs``, a local Dask cluster's workers) at what the memory budget (by default
:data:`BUDGET_FRACTION` of the memory available when the run starts) holds for the
largest image of the run. Dask runs also hold each image's estimate against the budget
while it is in flight (:func:`segcut.batch.executors.run_dask`). Images read through a
file mapping (large TIFF and Zarr, :mod:`segcut.io`) count their mapped pixels in the
resident memory measured here as well.
"""

from __future__ import annotations

import math
import os

__all__ = ["estimate_peak_bytes", "available_memory", "memory_workers", "image_pixels",
           "file_peak_bytes",
           "BASE_BYTES", "GRAPH_BYTES_PER_PIXEL", "FULL_BYTES_PER_PIXEL", "BUDGET_FRACTION"]

GIB = 1024 ** 3
#: Resident memory of a worker that has imported segcut and split a small image.
BASE_BYTES = int(0.25 * GIB)
#: Bytes per pixel of the image the superpixel graph is built on.
GRAPH_BYTES_PER_PIXEL = 210
#: Bytes per full-resolution pixel on the large-image path.
FULL_BYTES_PER_PIXEL = 21.5
#: Share of the available memory a batch plans to use by default.
BUDGET_FRACTION = 0.8


def estimate_peak_bytes(shape, config=None) -> int:
    """Estimated peak resident bytes of one process splitting an image of ``shape``.

    Parameters
    ----------
    shape : tuple of int
        The image's spatial shape (M, N) (a 3-D stack: (P, M, N)).
    config : SplitConfig, optional
        Its ``max_graph_pixels`` decides the path.

    Examples
    --------
    >>> from segcut import SplitConfig
    >>> round(estimate_peak_bytes((512, 512)) / GIB, 2)
    0.3
    >>> round(estimate_peak_bytes((6000, 6000)) / GIB, 2)
    0.97
    >>> round(estimate_peak_bytes((6000, 6000), SplitConfig(max_graph_pixels=None)) / GIB, 2)
    7.29
    """
    from ..config import SplitConfig
    from ..large import reduction_factor

    config = SplitConfig() if config is None else config
    pixels = math.prod(int(s) for s in shape)
    limit = config.max_graph_pixels
    if limit is None or len(shape) != 2 or pixels <= limit:
        return int(BASE_BYTES + GRAPH_BYTES_PER_PIXEL * pixels)
    f = reduction_factor(tuple(shape), limit)
    graph_pixels = math.ceil(shape[0] / f) * math.ceil(shape[1] / f)
    return int(BASE_BYTES + max(GRAPH_BYTES_PER_PIXEL * graph_pixels,
                                FULL_BYTES_PER_PIXEL * pixels))


def available_memory() -> int | None:
    """Bytes of memory available now (``MemAvailable``, capped by a cgroup limit); None
    when unknown."""
    found = None
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    found = int(line.split()[1]) * 1024
    except (OSError, ValueError):
        pass
    if found is None and hasattr(os, "sysconf"):
        try:
            found = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        except (OSError, ValueError):
            found = None
    try:
        with open("/sys/fs/cgroup/memory.max") as fh:
            text = fh.read().strip()
        if text.isdigit():
            found = int(text) if found is None else min(found, int(text))
    except OSError:
        pass
    return found


def memory_workers(jobs: int, peak_bytes: int, budget_bytes: float | None) -> int:
    """Worker processes that fit: ``min(jobs, budget // peak)``, at least 1.

    Examples
    --------
    >>> memory_workers(8, 2 * GIB, 5 * GIB)
    2
    >>> memory_workers(2, GIB, None)
    2
    """
    if budget_bytes is None or peak_bytes <= 0 or budget_bytes >= jobs * peak_bytes:
        return int(jobs)
    return max(1, min(int(jobs), int(budget_bytes // peak_bytes)))


def image_pixels(path) -> tuple | None:
    """The spatial shape of the image at ``path`` from its header (no decoding); None
    when it cannot be read that way."""
    from ..io_zarr import is_zarr_store, zarr_spatial_shape

    if is_zarr_store(path):
        return zarr_spatial_shape(path)
    try:
        import tifffile

        with tifffile.TiffFile(path) as tif:
            series = tif.series[0]
            axes = series.axes
            return tuple(int(n) for n, a in zip(series.shape, axes) if a in "YXZ" or a in "IQ")
    except Exception:  # noqa: BLE001 - not a TIFF: try Pillow
        pass
    try:
        from PIL import Image

        with Image.open(path) as img:
            return (int(img.size[1]), int(img.size[0]))
    except Exception:  # noqa: BLE001 - unreadable headers are read (and reported) later
        return None


def file_peak_bytes(path, config) -> int:
    """:func:`estimate_peak_bytes` of the image at ``path`` from its header (0 when the
    header cannot be read that way)."""
    shape = image_pixels(path)
    return estimate_peak_bytes(shape, config) if shape else 0
