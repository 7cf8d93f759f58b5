"""Large images: seconds, peak resident memory and IoU against the truth, by size.

Each image is generated row chunk by row chunk (a square RGB uint8 scene: three
ellipses and a bar in a warm colour on a shaded cool one, Gaussian noise of 40
levels), so its truth is known exactly. Every size runs in a fresh subprocess,
which first splits a 64x64 image (numba's cached kernels are loaded there, not in
the timed split) and then times ``split`` of the big image; the peak resident
memory is the process's ``ru_maxrss`` (so it includes the uint8 image itself and
the mask). The 512x512 time is measured the same way in the same run; the time
ratio of a size is its seconds over that.

The second table compares the full-resolution path (``max_graph_pixels=None``)
with the large-image path on images that fit both ways.

The third table goes through files, as the command line does: the scene is written
once as a tiled, zlib-compressed BigTIFF (512 x 512 tiles) and once as a Zarr array
(1024 x 1024 x 3 chunks, zarr's default compressor), and a fresh process warms up,
then runs ``segcut split FILE -o OUT --jobs 1`` in process (hash, read through the
file mapping, split, tiled TIFF mask, reduced overlay, records and report); its
seconds and peak resident memory (``ru_maxrss``, the mapped pixels included) are
printed with the IoU of the mask file it wrote.

Usage::

    python tests/benchmarks/bench_large.py [--sizes 1 4 16 36 100] [--compare 1 4]
                                           [--files 36 100]
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import subprocess
import sys
import tempfile
import time

import numpy as np

GIB = 1024 ** 3
_ELLIPSES = ((0.35, 0.35, 0.18, 0.22), (0.7, 0.65, 0.15, 0.12), (0.3, 0.75, 0.08, 0.1))


def truth_rows(side, r0, r1):
    """The foreground of rows [r0, r1) of the scene of ``side`` x ``side`` pixels."""
    yy = (np.arange(r0, r1, dtype=np.float64)[:, None] + 0.5) / side
    xx = (np.arange(side, dtype=np.float64)[None, :] + 0.5) / side
    inside = np.zeros((r1 - r0, side), dtype=bool)
    for cy, cx, ry, rx in _ELLIPSES:
        inside |= ((yy - cy) / ry) ** 2 + ((xx - cx) / rx) ** 2 < 1.0
    inside |= (yy > 0.88) & (yy < 0.92) & (xx > 0.15) & (xx < 0.85)
    return inside


def make_scene(side, seed=0):
    """uint8 (side, side, 3) image, generated in row chunks."""
    image = np.empty((side, side, 3), dtype=np.uint8)
    step = max(1, (1 << 20) // side)
    for r0 in range(0, side, step):
        r1 = min(side, r0 + step)
        rng = np.random.default_rng((seed, r0))
        inside = truth_rows(side, r0, r1)[..., None]
        xx = (np.arange(side)[None, :, None] + 0.5) / side
        rows = np.where(inside, np.array([170.0, 100, 80]), np.array([90.0, 110, 150]))
        rows = rows + 40.0 * xx + rng.normal(0.0, 40.0, rows.shape)
        image[r0:r1] = np.clip(rows, 0, 255).astype(np.uint8)
    return image


def iou_with_truth(mask):
    side = mask.shape[0]
    both = either = 0
    step = max(1, (1 << 20) // side)
    for r0 in range(0, side, step):
        r1 = min(side, r0 + step)
        truth = truth_rows(side, r0, r1)
        both += np.count_nonzero(truth & mask[r0:r1])
        either += np.count_nonzero(truth | mask[r0:r1])
    return both / max(either, 1)


def run_one(side, max_graph_pixels):
    """In this process: warm up, time one split; print one JSON line."""
    from segcut import SplitConfig, split

    split(make_scene(64), SplitConfig())
    image = make_scene(side)
    config = SplitConfig(max_graph_pixels=max_graph_pixels)
    t0 = time.perf_counter()
    result = split(image, config)
    seconds = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    mask = result.mask
    print(json.dumps({"side": side, "seconds": seconds, "peak_gib": peak / GIB,
                      "iou": iou_with_truth(mask), "graphs": result.graphs,
                      "stages": result.seconds,
                      "mask": mask.tobytes().hex() if side <= 2048 else None}))


def write_files(side, folder):
    """The scene as a tiled BigTIFF and as a Zarr array in ``folder``; their paths."""
    import tifffile
    import zarr

    image = make_scene(side)
    tiff = os.path.join(folder, f"scene_{side}.tif")
    tifffile.imwrite(tiff, image, photometric="rgb", tile=(512, 512), compression="zlib",
                     compressionargs={"level": 1}, bigtiff=True)
    store = os.path.join(folder, f"scene_{side}.zarr")
    array = zarr.open_array(store, mode="w", shape=image.shape, chunks=(1024, 1024, 3),
                            dtype="u1")
    step = 4096
    for r0 in range(0, side, step):
        array[r0:r0 + step] = image[r0:r0 + step]
    return tiff, store


def run_file(path, out):
    """In this process: warm up, then ``segcut split path -o out --jobs 1``; one JSON line."""
    import tifffile

    from segcut import SplitConfig, split
    from segcut.batch import load_records
    from segcut_cli.main import main as cli

    split(make_scene(64), SplitConfig())
    t0 = time.perf_counter()
    code = cli(["split", path, "-o", out, "--jobs", "1", "--quiet"])
    seconds = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    record = next(iter(load_records(out).values()))
    mask = tifffile.imread(os.path.join(out, record["mask"])) > 0
    print(json.dumps({"code": code, "seconds": seconds, "peak_gib": peak / GIB,
                      "iou": iou_with_truth(mask), "mask": record["mask"],
                      "stages": record.get("stage_seconds", {})}))


def measure_file(path, out):
    """Run :func:`run_file` in a fresh subprocess; its JSON record."""
    result = subprocess.run([sys.executable, __file__, "--file", path, out],
                            capture_output=True, text=True, check=True)
    return json.loads(result.stdout.strip().splitlines()[-1])


def measure(side, max_graph_pixels):
    """Run :func:`run_one` in a fresh subprocess; its JSON record."""
    limit = "None" if max_graph_pixels is None else str(int(max_graph_pixels))
    out = subprocess.run([sys.executable, __file__, "--one", str(side), limit],
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def graph_seconds(stages):
    """Seconds of the superpixel graph: reduced copy, superpixels, features, graph, solve."""
    return sum(stages.get(k, 0.0) for k in ("reduce", "superpixels", "features", "graph",
                                            "solve"))


def side_of(mpix):
    return int(round(math.sqrt(mpix * 1e6)))


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=float, nargs="*", default=[1, 4, 16, 36, 100])
    parser.add_argument("--compare", type=float, nargs="*", default=[1, 4])
    parser.add_argument("--files", type=float, nargs="*", default=[36, 100])
    parser.add_argument("--one", nargs=2, help=argparse.SUPPRESS)
    parser.add_argument("--file", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        run_one(int(args.one[0]), None if args.one[1] == "None" else int(args.one[1]))
        return
    if args.file:
        run_file(*args.file)
        return
    base = measure(512, None)
    print(f"512x512: {base['seconds']:.2f} s, peak {base['peak_gib']:.2f} GiB, "
          f"IoU {base['iou']:.3f}")
    print(f"{'Mpixel':>7} {'side':>6} {'seconds':>8} {'x 512²':>7} {'peak GiB':>9} "
          f"{'IoU':>6} {'factor':>6} {'tiles':>6} {'graph s':>8} {'refine s':>9}")
    for mpix in args.sizes:
        side = side_of(mpix)
        r = measure(side, 3_000_000)
        factor = r["graphs"][0].get("reduction_factor", 1)
        tiles = r["graphs"][1].get("tiles", "-") if len(r["graphs"]) > 1 else "-"
        print(f"{mpix:>7g} {side:>6} {r['seconds']:>8.1f} {r['seconds'] / base['seconds']:>7.1f} "
              f"{r['peak_gib']:>9.2f} {r['iou']:>6.3f} {factor:>6} {tiles:>6} "
              f"{graph_seconds(r['stages']):>8.1f} {r['stages'].get('refine', 0.0):>9.1f}",
              flush=True)
    print("\nfull-resolution path against the large-image path (max_graph_pixels = pixels / 4)")
    print(f"{'Mpixel':>7} {'full IoU':>9} {'large IoU':>10} {'loss':>7} {'agree IoU':>10} "
          f"{'full s':>7} {'large s':>8} {'full GiB':>9} {'large GiB':>10}")
    for mpix in args.compare:
        side = side_of(mpix)
        full = measure(side, None)
        reduced = measure(side, side * side // 4)
        a = np.frombuffer(bytes.fromhex(full["mask"]), dtype=bool) if full["mask"] else None
        b = np.frombuffer(bytes.fromhex(reduced["mask"]), dtype=bool) if reduced["mask"] else None
        agree = (np.count_nonzero(a & b) / max(np.count_nonzero(a | b), 1)
                 if a is not None else float("nan"))
        print(f"{mpix:>7g} {full['iou']:>9.4f} {reduced['iou']:>10.4f} "
              f"{full['iou'] - reduced['iou']:>7.4f} {agree:>10.4f} {full['seconds']:>7.1f} "
              f"{reduced['seconds']:>8.1f} {full['peak_gib']:>9.2f} {reduced['peak_gib']:>10.2f}",
              flush=True)
    print_files(args.files, base)


def print_files(sizes, base):
    """The third table: ``segcut split`` of a TIFF and a Zarr file of each size."""
    if not sizes:
        return
    print("\nthrough files: segcut split FILE -o OUT --jobs 1 (read, split, write), fresh process")
    print(f"{'Mpixel':>7} {'input':>6} {'seconds':>8} {'x 512²':>7} {'peak GiB':>9} {'IoU':>6} "
          f"{'read s':>7} {'write s':>8} {'mask':>18}")
    for mpix in sizes:
        side = side_of(mpix)
        with tempfile.TemporaryDirectory(prefix="bench-large-") as folder:
            for kind, path in zip(("tiff", "zarr"), write_files(side, folder)):
                r = measure_file(path, os.path.join(folder, f"out_{kind}"))
                stages = r["stages"]
                print(f"{mpix:>7g} {kind:>6} {r['seconds']:>8.1f} "
                      f"{r['seconds'] / base['seconds']:>7.1f} {r['peak_gib']:>9.2f} "
                      f"{r['iou']:>6.3f} {stages.get('read', float('nan')):>7.1f} "
                      f"{stages.get('write', float('nan')):>8.1f} {r['mask']:>18}", flush=True)


if __name__ == "__main__":
    main()
