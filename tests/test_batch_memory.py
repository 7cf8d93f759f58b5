"""Memory-aware batches: the peak estimate against a measured peak, and the worker cap.

The measured peak is the subprocess's largest resident set as the operating system
counts it (Linux's ``VmHWM`` in ``/proc/self/status``, the outside reference), reset
after a warm-up split so that compiling the numba kernels on a cold cache (a fresh
clone) is not counted: the estimate is for images split by a warm worker.
"""

from __future__ import annotations

import json
import subprocess
import sys
from types import SimpleNamespace

import numpy as np
import pytest
from PIL import Image

from segcut import SplitConfig
from segcut.batch.memory import GIB, estimate_peak_bytes, image_pixels, memory_workers
from segcut.batch.run import _memory_jobs

#: The estimate must be within this factor of the measured peak (both ways).
FACTOR = 1.5

_MEASURE = """
import json, sys
import numpy as np
from segcut import SplitConfig, split
side, limit = int(sys.argv[1]), (None if sys.argv[2] == "None" else int(sys.argv[2]))
warm = np.zeros((96, 96, 3)); warm[30:60, 30:60] = 1.0
split(warm, SplitConfig(max_graph_pixels=limit and 2000))  # loads (or compiles) every kernel
with open("/proc/self/clear_refs", "w") as fh:
    fh.write("5")  # reset the peak resident set to the current one
rng = np.random.default_rng(0)
yy, xx = np.mgrid[:side, :side] / side
inside = (yy - 0.5) ** 2 + (xx - 0.45) ** 2 < 0.08
image = np.where(inside[..., None], [170.0, 100, 80], [90.0, 110, 150])
image = np.clip(image + rng.normal(0, 30, image.shape), 0, 255).astype(np.uint8)
del yy, xx, inside
split(image, SplitConfig(max_graph_pixels=limit))
with open("/proc/self/status") as fh:
    peak_kib = next(int(line.split()[1]) for line in fh if line.startswith("VmHWM:"))
print(json.dumps(peak_kib * 1024))
"""


def _measured_peak(side, limit):
    out = subprocess.run([sys.executable, "-c", _MEASURE, str(side), str(limit)],
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


@pytest.mark.skipif(sys.platform != "linux", reason="the peak resident set is read from Linux's /proc")
@pytest.mark.parametrize("side, limit", [(900, None), (1400, 250_000)])
def test_estimate_is_within_factor_of_measured_peak(side, limit):
    measured = _measured_peak(side, limit)
    estimate = estimate_peak_bytes((side, side), SplitConfig(max_graph_pixels=limit))
    assert measured / FACTOR <= estimate <= measured * FACTOR, (measured / GIB, estimate / GIB)


def test_estimate_grows_with_size_and_is_bounded_on_the_large_path():
    small = estimate_peak_bytes((1000, 1000))
    big = estimate_peak_bytes((10000, 10000))
    assert big > small
    # the large path's estimate per pixel is far below the full path's
    full = estimate_peak_bytes((10000, 10000), SplitConfig(max_graph_pixels=None))
    assert big < full / 3


def test_memory_workers_never_oversubscribe():
    # common arithmetic: 3 copies of 1.5 GiB do not fit in 4 GiB, 2 do
    assert memory_workers(4, int(1.5 * GIB), 4 * GIB) == 2
    assert memory_workers(4, 5 * GIB, 4 * GIB) == 1
    assert memory_workers(3, GIB, 100 * GIB) == 3


def test_run_caps_jobs_by_the_largest_image(tmp_path):
    paths = []
    for i, side in enumerate((64, 3000)):
        path = tmp_path / f"im{i}.png"
        Image.fromarray(np.zeros((side, side // 2, 3), np.uint8)).save(path)
        paths.append(path)
    assert image_pixels(paths[1]) == (3000, 1500)
    todo = [(SimpleNamespace(path=str(p)),) for p in paths]
    peak = estimate_peak_bytes((3000, 1500))
    assert _memory_jobs(8, todo, SplitConfig(), 2.5 * peak / GIB) == 2
    assert _memory_jobs(8, todo, SplitConfig(), float("inf")) == 8
    assert 1 <= _memory_jobs(8, todo, SplitConfig(), None) <= 8
