"""Folder-run throughput: one worker, a 2-process pool and a 2-worker Dask local cluster.

Generates N 512x512 RGB scenes (default 200; shapes on shaded, textured grounds under
noise), runs the same folder three times into fresh run folders, and prints a table of
seconds, images/s and speed-ups, plus whether the three runs wrote identical mask and
overlay bytes. Targets: 2 workers >= 1.7x one worker; the Dask local cluster within 1.3x
of the process pool's time. Worker start-up (process spawn, numba cache load) is part
of each run's time, as it is for a user.

``--memory`` also measures the peak resident memory of ``segcut split`` on one
6000x4000 photograph-like JPEG (a fresh process, one worker).

Usage::

    python tests/benchmarks/bench_batch.py [--n-images 200] [--size 512] [--no-serial]
                                           [--memory] [--keep DIR]

``--repeats R`` runs the executors R times in turn and reports median seconds (each
run's seconds are printed too). ``--no-serial`` runs the pool twice instead of the one-worker run (the first pool run
then shows the run-to-run noise of the machine), for the Dask-versus-pool check on
small runs: ``--n-images 40 --size 256 --no-serial --repeats 3``.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from PIL import Image

PROJECT_ROOT = Path(__file__).resolve().parents[2]


def make_scene(index: int, height: int = 512, width: int = 512) -> np.ndarray:
    """One RGB uint8 scene: 1-3 ellipses on a shaded, striped ground, with noise."""
    rng = np.random.default_rng(index)
    yy, xx = np.mgrid[0:height, 0:width].astype(np.float32)
    yy /= height
    xx /= width
    ground = rng.uniform(0.2, 0.8, 3).astype(np.float32)
    shade = 0.25 * (xx * np.cos(index) + yy * np.sin(index))
    stripes = 0.05 * np.sin(2 * np.pi * (6 + index % 5) * (xx + 0.3 * yy))
    image = ground[None, None, :] + (shade + stripes)[..., None]
    for _ in range(1 + index % 3):
        cy, cx = rng.uniform(0.25, 0.75, 2)
        ry, rx = rng.uniform(0.08, 0.22, 2)
        inside = ((yy - cy) / ry) ** 2 + ((xx - cx) / rx) ** 2 < 1.0
        colour = rng.uniform(0.0, 1.0, 3).astype(np.float32)
        image[inside] = colour + 0.1 * shade[inside, None]
    image += rng.normal(0.0, 0.04, image.shape).astype(np.float32)
    return (np.clip(image, 0.0, 1.0) * 255).astype(np.uint8)


def folder_bytes(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*.png"))}


def run_once(label: str, src: Path, out: Path, **executor) -> tuple:
    from segcut.batch import run_batch
    from segcut.config import SplitConfig

    from segcut.batch import load_records

    t0 = time.perf_counter()
    summary = run_batch([src], out, SplitConfig(), report=False, **executor)
    seconds = time.perf_counter() - t0
    if summary.failed or summary.done != summary.total:
        raise SystemExit(f"{label}: {summary.failed} images failed")
    per_image = float(np.median([r["seconds"] for r in load_records(out).values()]))
    return seconds, summary.total, per_image


def memory_check(workdir: Path) -> None:
    """Peak RSS of `segcut split` on one 6000x4000 JPEG, in a fresh process."""
    path = workdir / "big" / "photo_6000x4000.jpg"
    path.parent.mkdir()
    tile = make_scene(7, 1000, 1500)  # a 1000x1500 scene, upscaled smoothly
    big = Image.fromarray(tile).resize((6000, 4000), Image.Resampling.BICUBIC)
    noise = np.random.default_rng(1).normal(0, 6, (4000, 6000, 3))
    big = Image.fromarray(np.clip(np.asarray(big) + noise, 0, 255).astype(np.uint8))
    big.save(path, quality=92)
    del big, noise
    out = workdir / "big_out"
    command = [sys.executable, "-c",
               "import resource, sys; from segcut_cli.main import main; code = main(sys.argv[1:]); "
               "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr); "
               "raise SystemExit(code)",
               "split", str(path.parent), "-o", str(out), "--jobs", "1", "--quiet"]
    t0 = time.perf_counter()
    done = subprocess.run(command, cwd=PROJECT_ROOT, capture_output=True, text=True)
    seconds = time.perf_counter() - t0
    if done.returncode != 0:
        raise SystemExit(f"memory run failed: {done.stderr.strip()}")
    peak_kib = int(done.stderr.strip().splitlines()[-1])
    from segcut.batch import load_records

    record = next(iter(load_records(out).values()))
    print("\nMemory: one 6000x4000 RGB JPEG (24 Mpixel; the decoded image alone is "
          f"{4000 * 6000 * 3 / 2**20:.0f} MiB as uint8)")
    print(f"  peak resident memory of the whole `segcut split --jobs 1` process: "
          f"{peak_kib / 1024:.0f} MiB; {seconds:.1f} s; n_superpixels {record['n_superpixels']}; "
          f"gap {record['gap']:.2e}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n-images", type=int, default=200)
    parser.add_argument("--size", type=int, default=512, help="side of the square images")
    parser.add_argument("--repeats", type=int, default=1,
                        help="run the executors this many times, in turn, and report medians")
    parser.add_argument("--no-serial", action="store_true",
                        help="run only the process pool and the Dask local cluster")
    parser.add_argument("--memory", action="store_true", help="also measure the 6000x4000 case")
    parser.add_argument("--keep", default=None, help="work in this folder and keep it")
    args = parser.parse_args()

    import segcut
    from segcut.batch.executors import _warm_up

    workdir = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="bench_batch_"))
    workdir.mkdir(parents=True, exist_ok=True)
    try:
        src = workdir / "images"
        if not src.is_dir():
            src.mkdir()
            for k in range(args.n_images):
                Image.fromarray(make_scene(k, args.size, args.size)).save(
                    src / f"scene_{k:04d}.png")
        n = len(list(src.glob("*.png")))
        _warm_up()  # numba cache loaded in this process (the 1-worker run runs here)
        print(f"segcut {segcut.__version__}; {n} generated {args.size}x{args.size} RGB images; "
              f"{os.cpu_count()} cores; load average before: "
              f"{', '.join(f'{x:.2f}' for x in os.getloadavg())}")
        runs = [("1 worker (in process)", {"jobs": 1}),
                ("process pool, 2 workers", {"jobs": 2}),
                ("Dask LocalCluster, 2 workers", {"dask_local": 2})]
        if args.no_serial:  # a first pool run stands in for the one-worker row
            runs = [("process pool, 2 workers (A)", {"jobs": 2}),
                    ("process pool, 2 workers (B)", {"jobs": 2}), runs[2]]
        timings = {k: [] for k in range(len(runs))}
        for repeat in range(args.repeats):
            for k, (label, executor) in enumerate(runs):
                out = workdir / f"out{k}"
                shutil.rmtree(out, ignore_errors=True)
                timings[k].append(run_once(label, src, out, **executor))
        results = []
        for k, (label, _) in enumerate(runs):
            seconds = float(np.median([t[0] for t in timings[k]]))
            per_image = float(np.median([t[2] for t in timings[k]]))
            results.append((label, seconds, timings[k][0][1], workdir / f"out{k}", per_image))
            if args.repeats > 1:
                print(f"{label}: " + ", ".join(f"{t[0]:.1f}" for t in timings[k]) + " s")
        base = results[0][1]
        pool = results[1][1]
        print()
        print(f"{'executor':<30} {'seconds':>8} {'images/s':>9} {'speed-up':>9} {'vs pool':>8} "
              f"{'median s/image in worker':>25}")
        for label, seconds, total, _, per_image in results:
            print(f"{label:<30} {seconds:8.1f} {total / seconds:9.2f} {base / seconds:8.2f}x "
                  f"{seconds / pool:7.2f}x {per_image:25.3f}")
        print("(a per-image time that grows with the number of workers means the cores are "
              "shared: other load on the machine)")
        reference = folder_bytes(results[0][3] / "masks"), folder_bytes(results[0][3] / "overlays")
        same = all((folder_bytes(out / "masks"), folder_bytes(out / "overlays")) == reference
                   for _, _, _, out, _ in results[1:])
        verdict = "yes" if same else "NO"
        print(f"\nmasks and overlays byte-identical across the three runs: {verdict}")
        if not args.no_serial:
            print(f"target 2 workers >= 1.7x one worker: {base / pool:.2f}x "
                  f"({'met' if base / pool >= 1.7 else 'NOT met'})")
        dask = results[2][1]
        print(f"target Dask within 1.3x of the pool's time: {dask / pool:.2f}x "
              f"({'met' if dask / pool <= 1.3 else 'NOT met'})")
        print(f"load average after: {', '.join(f'{x:.2f}' for x in os.getloadavg())}")
        if args.memory:
            memory_check(workdir)
    finally:
        if not args.keep:
            shutil.rmtree(workdir, ignore_errors=True)


if __name__ == "__main__":
    main()
