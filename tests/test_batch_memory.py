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


def test_dask_budget_comes_from_the_workers_memory_limits():
    # common arithmetic: 80% of two 4 GiB workers; a given budget wins; inf means none
    from segcut.batch.executors import MEMORY_RESOURCE, _cluster_memory

    def client(*workers):
        info = {"workers": {f"w{k}": w for k, w in enumerate(workers)}}
        return SimpleNamespace(scheduler_info=lambda: info)

    plain = client({"memory_limit": 4 * GIB}, {"memory_limit": 4 * GIB})
    assert _cluster_memory(plain, None) == (pytest.approx(0.8 * 8 * GIB), None)
    assert _cluster_memory(plain, 3 * GIB) == (3 * GIB, None)
    assert _cluster_memory(plain, float("inf")) == (None, None)
    assert _cluster_memory(client({"memory_limit": 0}), None) == (None, None)
    declared = client({"memory_limit": GIB, "resources": {MEMORY_RESOURCE: 2e9}},
                      {"memory_limit": GIB, "resources": {MEMORY_RESOURCE: 5e9}})
    assert _cluster_memory(declared, None)[1] == 5e9
    half = client({"memory_limit": GIB, "resources": {MEMORY_RESOURCE: 2e9}},
                  {"memory_limit": GIB})
    assert _cluster_memory(half, None)[1] is None


def test_dask_holds_tasks_back_when_the_budget_holds_one_image(tmp_path):
    # a budget below two images' estimated peaks: one image in flight at a time (the next
    # one waits on this side), where the window alone would hand out four at once
    from segcut.batch.executors import Task, run_dask, task_peak_bytes

    config = SplitConfig(n_superpixels=40)
    tasks = []
    for k in range(4):
        path = tmp_path / f"im{k}.png"
        image = np.zeros((48, 48, 3), np.uint8)
        image[10 + k:30, 12:34] = (200, 60, 40)
        Image.fromarray(image).save(path)
        tasks.append(Task(path=str(path), input=path.name, out_dir=str(tmp_path),
                          mask=f"masks/{k}", overlay=f"overlays/{k}.png", config=config,
                          config_hash="x", input_hash=None, seeds_path=None, seeds_hash=None,
                          base_seed=0))
    peak = task_peak_bytes(tasks[0])
    assert peak == estimate_peak_bytes((48, 48), config) > 0
    pulled = []

    def handed_out():
        for task in tasks:
            pulled.append(task.input)
            yield task

    seen_at_first = None
    records = []
    for _, record in run_dask(handed_out(), scheduler=None, dask_local=2, config=config,
                              memory_budget=1.5 * peak):
        seen_at_first = len(pulled) if seen_at_first is None else seen_at_first
        records.append(record)
    assert seen_at_first <= 2  # one submitted, one held back
    assert len(records) == 4 and all(r["status"] == "ok" for r in records)


_MEASURE_FILE = """
import json, sys
import numpy as np
import tifffile
from segcut import SplitConfig, io, split
from segcut.batch.executors import Task, process_task
side, limit, folder = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
io.LAZY_PIXELS = 1000  # read through the file mapping, as a large TIFF is
warm = np.zeros((96, 96, 3)); warm[30:60, 30:60] = 1.0
split(warm, SplitConfig(max_graph_pixels=2000))
rng = np.random.default_rng(0)
yy, xx = np.mgrid[:side, :side] / side
inside = (yy - 0.5) ** 2 + (xx - 0.45) ** 2 < 0.08
image = np.where(inside[..., None], [170.0, 100, 80], [90.0, 110, 150])
image = np.clip(image + rng.normal(0, 30, image.shape), 0, 255).astype(np.uint8)
tifffile.imwrite(folder + "/in.tif", image, photometric="rgb", tile=(256, 256), compression="zlib")
del yy, xx, inside, image
with open("/proc/self/clear_refs", "w") as fh:
    fh.write("5")
config = SplitConfig(max_graph_pixels=limit)
record = process_task(Task(path=folder + "/in.tif", input="in.tif", out_dir=folder, mask="m",
                           overlay="o.png", config=config, config_hash="x", input_hash=None,
                           seeds_path=None, seeds_hash=None, base_seed=0))
assert record["status"] == "ok" and record["mask"] == "m.tif", record
with open("/proc/self/status") as fh:
    peak_kib = next(int(line.split()[1]) for line in fh if line.startswith("VmHWM:"))
print(json.dumps(peak_kib * 1024))
"""


@pytest.mark.skipif(sys.platform != "linux", reason="the peak resident set is read from Linux's /proc")
def test_estimate_holds_for_a_worker_reading_a_mapped_tiff(tmp_path):
    # a worker's whole task (mapped read, split, tiled mask and overlay written) against
    # the estimate, measured as above (VmHWM, the operating system's count)
    side, limit = 2400, 400_000  # 5.8 Mpixel, reduced by 4: the full-resolution term counts
    out = subprocess.run([sys.executable, "-c", _MEASURE_FILE, str(side), str(limit),
                          str(tmp_path)], capture_output=True, text=True, check=True)
    measured = json.loads(out.stdout.strip().splitlines()[-1])
    estimate = estimate_peak_bytes((side, side), SplitConfig(max_graph_pixels=limit))
    assert measured / FACTOR <= estimate <= measured * FACTOR, (measured / GIB, estimate / GIB)
