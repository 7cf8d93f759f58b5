"""Speed of the agreement measures and of scoring masks, on the public horse photographs.

Run from the project root: ``python tests/benchmarks/bench_scoring.py [N_SCORE]``.
Reads ``../shared/data/horses-dev`` (skipped with a message when absent). Prints:

1. ``compare_masks`` time per image (reference mask against a copy shifted by 3 px),
   beside the time to read the two mask files;
2. for the first ``N_SCORE`` images (default 8): ``split`` time against ``score``
   time for three masks (the split's own, the reference, the shifted reference),
   measured side by side in one run, and whether scoring the split's mask gave its
   value back exactly.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
DATA = ROOT.parent / "shared" / "data" / "horses-dev"


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    n_score = int(argv[0]) if argv else 8
    if not DATA.is_dir():
        print("skipped: public reference data not found at ../shared/data/horses-dev")
        return 0
    from segcut.config import SplitConfig
    from segcut.io import read_image, read_mask
    from segcut.pipeline import split
    from segcut.scoring import compare_masks, score

    refs = sorted((DATA / "masks").glob("*.png"))
    read_s, cmp_s, pixels = [], [], []
    for path in refs:
        t0 = time.perf_counter()
        ref = read_mask(path)
        _ = read_mask(path)
        t1 = time.perf_counter()
        compare_masks(np.roll(ref, 3, axis=1), ref)
        t2 = time.perf_counter()
        read_s.append((t1 - t0) / 2)
        cmp_s.append(t2 - t1)
        pixels.append(ref.size)
    print(f"compare_masks on {len(refs)} reference masks "
          f"({min(pixels)}-{max(pixels)} pixels, median {int(np.median(pixels))})")
    print("| step | median ms | max ms |")
    print("|---|---|---|")
    print(f"| read one mask file | {1e3 * np.median(read_s):.2f} | {1e3 * max(read_s):.2f} |")
    print(f"| compare_masks (all measures) | {1e3 * np.median(cmp_s):.2f} | {1e3 * max(cmp_s):.2f} |")
    print()

    cfg = SplitConfig(prior=("border", "center"))
    print(f"split vs score (3 masks, SDP bound) on the first {n_score} images, "
          "config prior=border,center, seed 0")
    print("| image | superpixels | split s | score s | score/split | own value back | "
          "reference gap | shifted gap |")
    print("|---|---|---|---|---|---|---|---|")
    ratios, exact = [], 0
    for path in sorted((DATA / "images").glob("*.png"))[:n_score]:
        data = read_image(path)
        ref = read_mask(DATA / "masks" / path.name)
        t0 = time.perf_counter()
        r = split(data.array, cfg, channel_axis=data.channel_axis, rng=0)
        t1 = time.perf_counter()
        s = score(data.array, {"split": r.mask, "reference": ref,
                               "shifted": np.roll(ref, 3, axis=1)},
                  config=cfg, channel_axis=data.channel_axis, rng=0)
        t2 = time.perf_counter()
        same = s.masks[0].value == r.value
        exact += same
        ratios.append((t2 - t1) / (t1 - t0))
        print(f"| {path.stem} | {s.n_superpixels} | {t1 - t0:.2f} | {t2 - t1:.2f} | "
              f"{ratios[-1]:.2f} | {'yes' if same else 'NO'} | {100 * s.masks[1].gap:.2f}% | "
              f"{100 * s.masks[2].gap:.2f}% |")
    print()
    print(f"median score/split time ratio {np.median(ratios):.2f}; "
          f"split's own value given back exactly on {exact} of {len(ratios)} images")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
