"""Does ``uncertain_fraction`` predict bad masks, and what does the confidence stage cost?

Per dev set (no prior; default config), in one process:

- the Spearman rank correlation between each image's ``uncertain_fraction`` and
  its error ``1 - IoU`` against the reference mask (scipy's ``spearmanr``), with
  that of ``hypothesis_disagreement`` beside it for comparison;
- the mean IoU of the 10% most and the 10% least uncertain images;
- the median end-to-end seconds of ``split`` on 512x512 images (dev images resized
  with PIL's Lanczos filter) with the confidence stage on and off, run
  alternately on the same images so the machine's noise hits both alike.

Usage (from the project root)::

    python tests/benchmarks/bench_confidence.py
    python tests/benchmarks/bench_confidence.py --limit 20 --timing-images 4
    python tests/benchmarks/bench_confidence.py --set ../shared/data/horses-dev

Each folder holds ``images/NAME.png`` and ``masks/NAME.png`` (0 background, non-zero
foreground). Folders that are absent are skipped with a message.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from PIL import Image
from scipy.stats import spearmanr

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from segcut.config import SplitConfig  # noqa: E402
from segcut.pipeline import split  # noqa: E402
from segcut.scoring import compare_masks  # noqa: E402

DEFAULT_SETS = [ROOT.parent / "shared" / "data" / "horses-dev",
                ROOT.parent / "shared" / "data" / "nuclei-dev"]


def read_pair(folder, path):
    image = np.asarray(Image.open(path).convert("RGB"))
    ref = np.asarray(Image.open(folder / "masks" / path.name))
    return image, (ref[..., 0] if ref.ndim == 3 else ref) > 0


def quality_rows(folder, config, limit):
    rows = []
    for path in sorted((folder / "images").glob("*.png"))[:limit]:
        image, ref = read_pair(folder, path)
        result = split(image, config)
        rows.append({"iou": compare_masks(result.mask, ref)["iou"],
                     "uncertain": result.uncertain_fraction,
                     "disagreement": result.hypothesis_disagreement})
    return rows


def tail_means(rows, share=0.1):
    """Mean IoU of the ``share`` most and least uncertain images (at least one each)."""
    order = sorted(range(len(rows)), key=lambda k: rows[k]["uncertain"])
    k = max(1, int(round(share * len(rows))))
    least = [rows[i]["iou"] for i in order[:k]]
    most = [rows[i]["iou"] for i in order[-k:]]
    return statistics.fmean(most), statistics.fmean(least), k


def timing(folder, config, n_images):
    """Median seconds of split on 512x512 images, confidence on and off, alternately."""
    on, off = [], []
    without = config.replace(confidence=False)
    for path in sorted((folder / "images").glob("*.png"))[:n_images]:
        image = np.asarray(Image.open(path).convert("RGB").resize((512, 512), Image.LANCZOS))
        for cfg, bucket in ((config, on), (without, off), (without, off), (config, on)):
            t0 = time.perf_counter()
            split(image, cfg)
            bucket.append(time.perf_counter() - t0)
    return statistics.median(on), statistics.median(off)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--set", action="append", type=Path, dest="sets",
                        help="dev folder (repeatable); default: horses-dev and nuclei-dev")
    parser.add_argument("--limit", type=int, default=None, help="images per set")
    parser.add_argument("--timing-images", type=int, default=6,
                        help="images per set timed at 512x512 (each run 2x on, 2x off)")
    args = parser.parse_args(argv)
    config = SplitConfig()  # no prior
    split(np.random.default_rng(0).random((64, 64, 3)), config)  # warm the numba cache
    print(f"confidence_margin={config.confidence_margin}, uncertain_level={config.uncertain_level}")
    header = ("set", "images", "spearman(uncertain, 1-IoU)", "spearman(hyp. disagreement)",
              "IoU 10% most uncertain", "IoU 10% least uncertain", "mean uncertain",
              "median s 512x512 on", "off", "added")
    print(" | ".join(header))
    for folder in args.sets or DEFAULT_SETS:
        if not (folder / "images").is_dir():
            print(f"{folder.name}: skipped ({folder} is absent)")
            continue
        rows = quality_rows(folder, config, args.limit)
        error = [1.0 - r["iou"] for r in rows]
        rho = spearmanr([r["uncertain"] for r in rows], error).statistic
        rho_h = spearmanr([r["disagreement"] for r in rows], error).statistic
        most, least, k = tail_means(rows)
        t_on, t_off = timing(folder, config, args.timing_images)
        mean_u = statistics.fmean(r["uncertain"] for r in rows)
        print(f"{folder.name} | {len(rows)} | {rho:.3f} | {rho_h:.3f} | {most:.3f} (n={k}) | "
              f"{least:.3f} (n={k}) | {mean_u:.3f} | {t_on:.3f} | {t_off:.3f} | "
              f"{100 * (t_on - t_off) / t_off:+.1f}%", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
