"""What processing every image in its canonical orientation costs.

``split`` chooses one of the eight flips and quarter turns of the image from its
content (``canonical_transform``), moves the values (and seeds, box) there, and
moves the labels back at the end. This script times those extra steps on 512x512
RGB images, side by side with the whole ``split`` call (default config, prior
``border,center``), in one run:

- ``choose``: ``canonical_transform`` of the values (rounding, block sums, 8 keys);
- ``move in``: the values copied into the canonical orientation;
- ``move back``: the label image copied back to the caller's orientation;
- ``split``: the whole call, for scale.

Photographs come from ``../shared/data/horses-dev`` (relative to the project root),
resized to 512x512; without that folder, synthetic pictures are used.

Usage::

    python tests/benchmarks/bench_canonical.py [--images 5] [--repeats 7]
"""

from __future__ import annotations

import argparse
import statistics
import time
from pathlib import Path

import numpy as np
from PIL import Image
from scipy import ndimage as ndi

from segcut.config import SplitConfig
from segcut.pipeline import apply_transform, canonical_transform, split
from segcut.prepare import prepare_image as _prepare

ROOT = Path(__file__).resolve().parents[2]
DEFAULT_DATA = ROOT.parent / "shared" / "data" / "horses-dev"


def pictures(count: int, size: int = 512):
    folder = DEFAULT_DATA / "images"
    if folder.is_dir():
        names = sorted(folder.iterdir())[:count]
        for path in names:
            image = Image.open(path).convert("RGB").resize((size, size), Image.LANCZOS)
            yield path.name, np.asarray(image)
        return
    rng = np.random.default_rng(0)
    yy, xx = np.mgrid[0:size, 0:size] / size
    for k in range(count):
        disc = (yy - 0.4 - 0.05 * k) ** 2 + (xx - 0.55) ** 2 < 0.09
        texture = ndi.gaussian_filter(rng.standard_normal((size, size)), 2.0) * 25
        base = np.stack([150 + 60 * xx, 120 + 40 * yy, 90 + 0 * xx], axis=-1)
        base[disc] = (60, 140, 70)
        picture = base + texture[..., None] + rng.normal(0, 4, base.shape)
        yield f"synthetic{k}", np.clip(picture, 0, 255).astype(np.uint8)


def median_seconds(action, repeats: int) -> float:
    action()
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=5)
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args(argv)
    config = SplitConfig(prior=("border", "center"))
    print(f"512x512 RGB, medians of {args.repeats} repeats; milliseconds")
    print(f"{'image':<14}{'transform':>15}{'choose':>9}{'move in':>9}{'move back':>11}"
          f"{'split':>9}{'extra':>8}")
    shares = []
    for name, image in pictures(args.images):
        values, _, _ = _prepare(image, -1)
        transform = canonical_transform(values)
        # time every image as if it needed a move (the worst case)
        moved = "rot90" if transform == "identity" else transform
        choose = median_seconds(lambda: canonical_transform(values), args.repeats)
        move_in = median_seconds(
            lambda: np.ascontiguousarray(apply_transform(values, moved, axes=(0, 1))),
            args.repeats)
        labels = split(image, config).labels
        move_back = median_seconds(
            lambda: np.ascontiguousarray(apply_transform(labels, moved, inverse=True)),
            args.repeats)
        whole = median_seconds(lambda: split(image, config), max(3, args.repeats // 2))
        extra = choose + move_in + move_back
        shares.append(extra / whole)
        print(f"{name:<14}{transform:>15}{1e3 * choose:9.2f}{1e3 * move_in:9.2f}"
              f"{1e3 * move_back:11.2f}{1e3 * whole:9.1f}{100 * extra / whole:7.2f}%")
    print(f"median extra share of split: {100 * statistics.median(shares):.2f}%")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
