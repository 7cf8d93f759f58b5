"""Two-region quality on photographs with reference masks, segcut against baselines.

Runs, in one process and side by side on the same images: segcut with no prior and
with the border and centre priors, and scikit-image baselines run the same way
(Otsu threshold with the border rule, Chan-Vese, morphological Chan-Vese from a
disk, random walker with the same border/centre seeds). Prints mean IoU, mean F
(pixel F-measure = Dice), median seconds per image and, for segcut, the median
certified gap.

Usage (from the project root)::

    python tests/benchmarks/bench_quality.py                    # ../shared/data/horses-dev
    python tests/benchmarks/bench_quality.py FOLDER --limit 20 --no-baselines
    python tests/benchmarks/bench_quality.py --variant "k5:n_neighbors=5" \
        --variant "q90:threshold_quantile=0.9"
    OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 NUMBA_NUM_THREADS=1 \
        python tests/benchmarks/bench_quality.py --no-baselines --no-default --speed 10
    python tests/benchmarks/bench_quality.py --no-baselines --orientations 8 \
        --variant "one start:prior=none,model_starts=1"

FOLDER holds ``images/NAME.png`` and ``masks/NAME.png`` (0 background, non-zero
foreground). Each ``--variant NAME:key=value,...`` adds segcut with the border and
centre priors and those config changes (``prior=none`` for no prior).

``--orientations 8``: ``split`` processes every image in a canonical orientation
chosen from its content, so turning the input does not change the result; how much
the result depends on that choice is measured by forcing each of the eight flips
and quarter turns as the processing orientation in turn (the benchmark replaces
``segcut.pipeline.canonical_transform`` for the call). Each segcut row then shows
the mean IoU and F over the 8 orientations (the expected quality of an arbitrary
orientation), the mean IoU of the canonical one (what ``split`` returns), the
lowest and highest per-orientation mean, and how many images swing by more than
0.2 IoU between orientations. Baselines do not depend on it and run once.
"""

from __future__ import annotations

import argparse
import contextlib
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from PIL import Image

ROOT = Path(__file__).resolve().parents[2]
DEFAULT_DATA = ROOT.parent / "shared" / "data" / "horses-dev"


def score(pred, ref):
    """IoU and pixel F-measure (Dice) of a predicted mask against a reference."""
    try:
        from segcut.scoring import compare_masks
    except ImportError:
        compare_masks = None
    if compare_masks is not None:
        m = compare_masks(pred, ref)
        return m["iou"], m["dice"]
    p, r = pred.astype(bool), ref.astype(bool)
    tp = np.count_nonzero(p & r)
    fp = np.count_nonzero(p & ~r)
    fn = np.count_nonzero(~p & r)
    iou = tp / (tp + fp + fn) if tp + fp + fn else 1.0
    f = 2 * tp / (2 * tp + fp + fn) if tp + fp + fn else 1.0
    return iou, f


def frame_rule(mask):
    """Border rule: the side with fewer pixels on the image frame is foreground."""
    frame = np.zeros(mask.shape, dtype=bool)
    frame[0, :] = frame[-1, :] = frame[:, 0] = frame[:, -1] = True
    if np.count_nonzero(mask & frame) > np.count_nonzero(~mask & frame):
        return ~mask
    return mask


def prior_seeds(shape, config):
    """Seeds from the same border and centre prior maps segcut uses: 1 fg, 2 bg."""
    from segcut.priors import prior_map

    pmap, _ = prior_map(shape, config.replace(prior=("border", "center")))
    seeds = np.zeros(shape, dtype=np.int32)
    seeds[pmap > 0] = 1
    seeds[pmap < 0] = 2
    return seeds


def baseline_otsu(image, config):
    from skimage.color import rgb2gray
    from skimage.filters import threshold_otsu

    gray = rgb2gray(image)
    return frame_rule(gray > threshold_otsu(gray))


def baseline_chan_vese(image, config):
    from skimage.color import rgb2gray
    from skimage.segmentation import chan_vese

    return frame_rule(chan_vese(rgb2gray(image), max_num_iter=200).astype(bool))


def baseline_morph_chan_vese(image, config):
    from skimage.color import rgb2gray
    from skimage.segmentation import morphological_chan_vese

    return morphological_chan_vese(rgb2gray(image), num_iter=100,
                                   init_level_set="disk").astype(bool)


def baseline_random_walker(image, config):
    from skimage.segmentation import random_walker

    import warnings

    seeds = prior_seeds(image.shape[:2], config)
    with warnings.catch_warnings():
        # scikit-image warns when its probabilities leave [0, 1] by round-off; the
        # labels are still the argmax
        warnings.simplefilter("ignore", UserWarning)
        labels = random_walker(image.astype(np.float64) / 255.0, seeds, beta=130,
                               mode="cg_j", channel_axis=-1)
    return labels == 1


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("folder", nargs="?", default=str(DEFAULT_DATA))
    parser.add_argument("--limit", type=int, default=0, help="first N images only")
    parser.add_argument("--no-baselines", action="store_true")
    parser.add_argument("--no-default", action="store_true",
                        help="skip the two default segcut rows")
    parser.add_argument("--variant", action="append", default=[],
                        help="NAME:key=value,... segcut (border,center) with config changes")
    parser.add_argument("--method", default=None, help="max-cut method for every segcut row")
    parser.add_argument("--orientations", type=int, choices=(1, 8), default=1,
                        help="8: force each flip and quarter turn as the processing "
                             "orientation and report the mean over them")
    parser.add_argument("--speed", type=int, default=0, metavar="N",
                        help="also time N photographs resized to 512x512, end to end "
                             "(PNG read, split with certificate, PNG write)")
    args = parser.parse_args(argv)

    from segcut.config import SplitConfig
    from segcut.pipeline import split

    folder = Path(args.folder)
    if not (folder / "images").is_dir():
        print(f"skipped: no images/ folder in {folder} (the public data is not here)")
        return 0
    names = sorted(p.name for p in (folder / "images").glob("*.png"))
    if args.limit:
        names = names[:args.limit]
    base = SplitConfig() if args.method is None else SplitConfig(method=args.method)

    rows = []
    if not args.no_default:
        rows.append(("segcut, no prior", "segcut", base))
        rows.append(("segcut, border,center", "segcut", base.replace(prior=("border", "center"))))
    for spec in args.variant:
        name, _, changes = spec.partition(":")
        kw = {}
        for item in filter(None, changes.split(",")):
            key, _, value = item.partition("=")
            kw[key.strip()] = _parse(value.strip())
        prior = kw.pop("prior", ("border", "center"))
        prior = () if prior == "none" else prior
        rows.append((f"segcut {name}", "segcut", base.replace(prior=prior, **kw)))
    if not args.no_baselines:
        rows += [("otsu + border rule", baseline_otsu, base),
                 ("chan-vese + border rule", baseline_chan_vese, base),
                 ("morph. chan-vese (disk)", baseline_morph_chan_vese, base),
                 ("random walker (same seeds)", baseline_random_walker, base)]

    images = []
    for name in names:
        image = np.asarray(Image.open(folder / "images" / name).convert("RGB"))
        ref = np.asarray(Image.open(folder / "masks" / name).convert("L")) > 127
        images.append((name, image, ref))

    # warm the numba caches so the first image is not charged for compilation
    split(images[0][1], base.replace(prior=("border", "center")))

    print(f"{len(images)} images from {folder.name}; one process, same images for every row\n")
    header = (f"{'method':32s} {'IoU':>6s} {'F':>6s} {'median s':>9s} {'median gap':>11s} "
              f"{'superpixels':>11s}")
    if args.orientations == 8:
        segcut_rows = [r for r in rows if r[1] == "segcut"]
        print_orientation_table(segcut_rows, images)
        rows = [r for r in rows if r[1] != "segcut"]
        if rows:
            print()
    if rows:
        print(header)
        print("-" * len(header))
    for label, runner, config in rows:
        ious, fs, secs, gaps, nsp = [], [], [], [], []
        for name, image, ref in images:
            t0 = time.perf_counter()
            if runner == "segcut":
                result = split(image, config)
                mask = result.mask
                if result.gap is not None:
                    gaps.append(result.gap)
                nsp.append(result.n_superpixels)
            else:
                mask = runner(image, config)
            secs.append(time.perf_counter() - t0)
            iou, f = score(mask, ref)
            ious.append(iou)
            fs.append(f)
        gap = f"{100 * statistics.median(gaps):10.2f}%" if gaps else f"{'-':>11s}"
        sp = f"{statistics.median(nsp):11.0f}" if nsp else f"{'-':>11s}"
        print(f"{label:32s} {np.mean(ious):6.3f} {np.mean(fs):6.3f} "
              f"{statistics.median(secs):9.3f} {gap} {sp}", flush=True)
    if args.speed:
        speed(images[:args.speed], base.replace(prior=("border", "center")))
    return 0


@contextlib.contextmanager
def forced_orientation(name):
    """Within the block, ``split`` processes every image in the view ``name``."""
    import segcut.pipeline as pipeline

    original = pipeline.canonical_transform
    pipeline.canonical_transform = lambda values: name
    try:
        yield
    finally:
        pipeline.canonical_transform = original


def print_orientation_table(rows, images):
    """Mean IoU and F over the eight processing orientations, for each segcut row."""
    from segcut.pipeline import CANONICAL_TRANSFORMS, canonical_transform, split
    from segcut.prepare import prepare_image as _prepare

    views = list(CANONICAL_TRANSFORMS)
    canonical = [views.index(canonical_transform(_prepare(image, -1)[0]))
                 for _, image, _ in images]
    header = (f"{'method (8 orientations)':32s} {'IoU8':>6s} {'F8':>6s} {'IoUcan':>7s} "
              f"{'min':>6s} {'max':>6s} {'swing>.2':>8s} {'median s':>9s}")
    print(header)
    print("-" * len(header))
    for label, _, config in rows:
        ious = np.zeros((len(images), len(views)))
        fs = np.zeros_like(ious)
        secs = []
        for v, view in enumerate(views):
            with forced_orientation(view):
                for i, (_, image, ref) in enumerate(images):
                    t0 = time.perf_counter()
                    mask = split(image, config).mask
                    secs.append(time.perf_counter() - t0)
                    ious[i, v], fs[i, v] = score(mask, ref)
        by_view = ious.mean(axis=0)
        can = ious[np.arange(len(images)), canonical].mean()
        swing = int(np.count_nonzero(ious.max(axis=1) - ious.min(axis=1) > 0.2))
        print(f"{label:32s} {ious.mean():6.3f} {fs.mean():6.3f} {can:7.3f} "
              f"{by_view.min():6.3f} {by_view.max():6.3f} {swing:8d} "
              f"{statistics.median(secs):9.3f}", flush=True)


def speed(images, config):
    """Median seconds for a 512x512 RGB photograph: read PNG, split, write PNG mask."""
    import io
    import tempfile

    from segcut.pipeline import split

    stages = {}
    totals = []
    with tempfile.TemporaryDirectory() as tmp:
        for name, image, _ in images:
            big = np.asarray(Image.fromarray(image).resize((512, 512), Image.LANCZOS))
            buf = io.BytesIO()
            Image.fromarray(big).save(buf, format="PNG")
            data = buf.getvalue()
            t0 = time.perf_counter()
            pixels = np.asarray(Image.open(io.BytesIO(data)).convert("RGB"))
            result = split(pixels, config)
            Image.fromarray(result.mask.astype(np.uint8) * 255).save(Path(tmp) / name)
            totals.append(time.perf_counter() - t0)
            for key, value in result.seconds.items():
                stages.setdefault(key, []).append(value)
    print(f"\n512x512 RGB end to end, {len(images)} photographs, prior border,center, "
          f"method {config.method}:")
    print(f"  median total {statistics.median(totals):.3f} s; per stage (median): "
          + ", ".join(f"{k} {statistics.median(v):.3f}" for k, v in stages.items()))
    return 0


def _parse(text):
    for cast in (int, float):
        try:
            return cast(text)
        except ValueError:
            pass
    if text in ("true", "false"):
        return text == "true"
    if "+" in text:
        return tuple(text.split("+"))
    return text


if __name__ == "__main__":
    sys.exit(main())
