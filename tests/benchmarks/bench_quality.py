"""Two-region quality on every dev set, segcut against baselines, side by side in one run.

Sets (``--sets``, all by default):

* ``horses``: ``../shared/data/horses-dev`` (60 photographs): segcut with no prior, with
  the border and centre priors, and with a tight box (the reference mask's bounding
  box, ``SplitConfig(box=(x0, y0, x1, y1))``, x the column, x1 and y1 exclusive);
* ``nuclei``: ``../shared/data/nuclei-dev`` (100 microscopy images): segcut with no
  prior and with the border prior;
* ``synthetic``: the synthetic scenes of ``tests/test_pipeline.py`` (``SCENES``, drawn by
  its ``_scene`` at 192 x 192): segcut with no prior;
* ``demo``: the demo samples (``sample_images/images`` against ``sample_images/truth``):
  segcut with no prior.

On every image of a set, in the same run: scikit-image baselines (Otsu threshold and
Li threshold, each with the frame rule: the side with fewer pixels on the image frame
is foreground; morphological Chan-Vese from a disk, with the same rule; random walker
from the border/centre seeds of segcut's border and center priors) and the
**superpixel ceiling**: every default superpixel (``segcut.superpixels.oversegment``
with the default settings, on the pixel features segcut uses) given its true majority
label, so the best any labelling of those superpixels can reach (up to the pixel
refinement, which may cross superpixel edges).

Columns: mean IoU, mean boundary F (``compare_masks(...)["boundary_f"]``: boundary
pixels matched within 2 pixels), median seconds per image and, for segcut, the median
certified gap (of the superpixel graph) and how often each start hypothesis
(``SplitResult.hypothesis``) built the graph. The tables are printed as Markdown.

Usage (from the project root)::

    python tests/benchmarks/bench_quality.py                    # every set, 2 workers
    python tests/benchmarks/bench_quality.py --sets nuclei,demo --limit 20 --jobs 1
    python tests/benchmarks/bench_quality.py FOLDER --no-baselines   # a folder of one's own
    python tests/benchmarks/bench_quality.py --sets horses --variant "k5:n_neighbors=5" \
        --variant "q90:threshold_quantile=0.9"
    python tests/benchmarks/bench_quality.py --sets horses --no-baselines --no-default --speed 10
    python tests/benchmarks/bench_quality.py --sets horses --no-baselines --orientations 8 \
        --variant "one start:prior=none,model_starts=1"

A FOLDER holds ``images/NAME.png`` and ``masks/NAME.png`` (0 background, non-zero
foreground); it is run with the rows of ``nuclei`` when named ``nuclei-dev``, else with
those of ``horses``. Each ``--variant NAME:key=value,...`` adds a segcut row to every
set, with the border and centre priors and those config changes (``prior=none`` for no
prior, ``prior=border`` for one prior, ``box=tight`` for the tight box).

``--jobs N`` (default 2) spreads the images over N worker processes (one image with
all its rows per task; results are gathered in image order, so every figure but the
seconds is the same for any N). Seconds are measured inside the workers, one thread
each (the script sets ``OMP_NUM_THREADS`` and friends to 1 unless already set).

``--orientations 8``: ``split`` processes every image in a canonical orientation
chosen from its content, so turning the input does not change the result; how much
the result depends on that choice is measured by forcing each of the eight flips
and quarter turns as the processing orientation in turn (the benchmark replaces
``segcut.pipeline.canonical_transform`` for the call). Each segcut row then shows
the mean IoU and boundary F over the 8 orientations (the expected quality of an
arbitrary orientation), the mean IoU of the canonical one (what ``split`` returns),
the lowest and highest per-orientation mean, and how many images swing by more than
0.2 IoU between orientations. Baselines do not depend on it and run once.

``--speed N``: also time N horses-dev photographs resized to 512x512, end to end (PNG
read, split with certificate, PNG write), in the main process.
"""

from __future__ import annotations

import os

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import argparse  # noqa: E402
import collections  # noqa: E402
import contextlib  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from concurrent.futures import ProcessPoolExecutor  # noqa: E402
from dataclasses import dataclass  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
from PIL import Image  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
SHARED = ROOT.parent / "shared" / "data"
DEFAULT_DATA = SHARED / "horses-dev"
SET_NAMES = ("horses", "nuclei", "synthetic", "demo")


# -- the sets ----------------------------------------------------------------------------

@dataclass(frozen=True)
class DataSet:
    """One set of images with true masks: where they are and which segcut rows it gets."""

    key: str
    title: str
    kind: str          # "folder", "synthetic" or "demo"
    where: str         # folder for "folder" and "demo"
    segcut_rows: tuple  # (label, prior tuple or "tight")


HORSE_ROWS = (("segcut, no prior", ()),
              ("segcut, border,center", ("border", "center")),
              ("segcut, tight box", "tight"))
NUCLEI_ROWS = (("segcut, no prior", ()),
               ("segcut, border", ("border",)))
NO_PRIOR_ROW = (("segcut, no prior", ()),)


def dev_sets(keys, folders):
    """The sets to run: named keys, or folders given on the command line."""
    if folders:
        return [DataSet(Path(f).name, Path(f).name, "folder", str(f),
                        NUCLEI_ROWS if Path(f).name == "nuclei-dev" else HORSE_ROWS)
                for f in folders]
    table = {
        "horses": DataSet("horses", "horses-dev", "folder", str(SHARED / "horses-dev"), HORSE_ROWS),
        "nuclei": DataSet("nuclei", "nuclei-dev", "folder", str(SHARED / "nuclei-dev"), NUCLEI_ROWS),
        "synthetic": DataSet("synthetic", "synthetic scenes", "synthetic", "", NO_PRIOR_ROW),
        "demo": DataSet("demo", "demo samples", "demo", str(ROOT / "sample_images"), NO_PRIOR_ROW),
    }
    return [table[k] for k in keys]


def _pipeline_scenes():
    """``SCENES`` and ``_scene`` of tests/test_pipeline.py (the scenes its check uses)."""
    tests = str(ROOT / "tests")
    if tests not in sys.path:
        sys.path.insert(0, tests)
    import test_pipeline

    return test_pipeline.SCENES, test_pipeline._scene


def list_items(data_set):
    """Names of the images of a set, sorted; None when its data is absent."""
    if data_set.kind == "synthetic":
        scenes, _ = _pipeline_scenes()
        return [f"{kind}-{seed}" for kind, seed in scenes]
    folder = Path(data_set.where) / "images"
    if not folder.is_dir():
        return None
    if data_set.kind == "demo":
        return sorted(p.name for p in folder.iterdir() if p.is_file())
    return sorted(p.name for p in folder.glob("*.png"))


def load_item(data_set, name):
    """(image, channel_axis, reference mask) of one item."""
    if data_set.kind == "synthetic":
        _, scene = _pipeline_scenes()
        kind, seed = name.rsplit("-", 1)
        image, truth = scene(kind, int(seed), size=192)
        return image, -1, truth
    if data_set.kind == "demo":
        from segcut.io import read_image, read_mask

        data = read_image(Path(data_set.where) / "images" / name)
        ref = read_mask(Path(data_set.where) / "truth" / (Path(name).stem + ".png"))
        return data.array, data.channel_axis, np.asarray(ref, dtype=bool)
    folder = Path(data_set.where)
    image = np.asarray(Image.open(folder / "images" / name).convert("RGB"))
    ref = np.asarray(Image.open(folder / "masks" / name).convert("L")) > 127
    return image, -1, ref


def tight_box(ref):
    """The bounding box (x0, y0, x1, y1) of a mask; x is the column, x1 and y1 exclusive."""
    rows = np.flatnonzero(ref.any(axis=1))
    cols = np.flatnonzero(ref.any(axis=0))
    return (int(cols[0]), int(rows[0]), int(cols[-1]) + 1, int(rows[-1]) + 1)


# -- scores ------------------------------------------------------------------------------

def score(pred, ref):
    """IoU and boundary F-measure of a predicted mask against a reference."""
    from segcut.scoring import compare_masks

    m = compare_masks(pred, ref)
    return m["iou"], m["boundary_f"]


# -- baselines (scikit-image) ------------------------------------------------------------

def frame_rule(mask):
    """Frame rule: the side with fewer pixels on the image frame is foreground."""
    frame = np.zeros(mask.shape, dtype=bool)
    frame[0, :] = frame[-1, :] = frame[:, 0] = frame[:, -1] = True
    if np.count_nonzero(mask & frame) > np.count_nonzero(~mask & frame):
        return ~mask
    return mask


def baseline_input(image, channel_axis):
    """The image as floats in [0, 1] (its own min and max), channels last, and its gray."""
    from skimage.color import rgb2gray

    x = np.asarray(image, dtype=np.float64)
    if channel_axis is not None:
        x = np.moveaxis(x, channel_axis, -1)
        if x.shape[-1] in (2, 4):
            x = x[..., :-1]
        if x.shape[-1] == 1:
            x = x[..., 0]
    span = float(x.max() - x.min())
    x = (x - x.min()) / (span if span > 0 else 1.0)
    gray = rgb2gray(x) if x.ndim == 3 else x
    return x, gray


def prior_seeds(shape, config):
    """Seeds from the same border and centre prior maps segcut uses: 1 fg, 2 bg."""
    from segcut.priors import prior_map

    pmap, _ = prior_map(shape, config.replace(prior=("border", "center")))
    seeds = np.zeros(shape, dtype=np.int32)
    seeds[pmap > 0] = 1
    seeds[pmap < 0] = 2
    return seeds


def baseline_otsu(x, gray, config):
    from skimage.filters import threshold_otsu

    return frame_rule(gray > threshold_otsu(gray))


def baseline_li(x, gray, config):
    from skimage.filters import threshold_li

    return frame_rule(gray > threshold_li(gray))


def baseline_morph_chan_vese(x, gray, config):
    from skimage.segmentation import morphological_chan_vese

    return frame_rule(morphological_chan_vese(gray, num_iter=100,
                                              init_level_set="disk").astype(bool))


def baseline_random_walker(x, gray, config):
    from skimage.segmentation import random_walker

    seeds = prior_seeds(gray.shape, config)
    with warnings.catch_warnings():
        # scikit-image warns when its probabilities leave [0, 1] by round-off; the
        # labels are still the argmax
        warnings.simplefilter("ignore", UserWarning)
        labels = random_walker(x, seeds, beta=130, mode="cg_j",
                               channel_axis=-1 if x.ndim == 3 else None)
    return labels == 1


BASELINES = {
    "otsu + frame rule": baseline_otsu,
    "li + frame rule": baseline_li,
    "morph. chan-vese (disk) + frame rule": baseline_morph_chan_vese,
    "random walker (border/centre seeds)": baseline_random_walker,
}


def superpixel_ceiling(image, channel_axis, ref, config):
    """Every default superpixel given its true majority label: (mask, n_superpixels).

    The superpixels are ``oversegment`` of segcut's pixel features (robustly
    normalised CIELAB or lightness) with the config's superpixel settings, in the
    caller's orientation (``split`` makes them in its canonical orientation, so its own
    superpixels may differ slightly); a superpixel is foreground when more than half
    of its pixels are.
    """
    from segcut.prepare import image_features, prepare_image
    from segcut.superpixels import oversegment

    values, _, _ = prepare_image(image, channel_axis)
    labels = oversegment(image_features(values), n_superpixels=config.n_superpixels,
                         compactness=config.compactness,
                         pixel_grid_max_pixels=config.pixel_grid_max_pixels, sigma=config.sigma)
    flat = labels.ravel()
    n = int(flat.max()) + 1
    inside = np.bincount(flat, weights=ref.ravel().astype(np.float64), minlength=n)
    size = np.bincount(flat, minlength=n)
    return (2 * inside > size)[labels], n


# -- the rows of one image ---------------------------------------------------------------

@dataclass(frozen=True)
class Row:
    label: str
    kind: str            # "segcut", "baseline" or "ceiling"
    config: object       # SplitConfig
    tight: bool = False  # segcut with the reference mask's bounding box


def set_rows(data_set, base, args):
    rows = []
    if not args.no_default:
        for label, prior in data_set.segcut_rows:
            if prior == "tight":
                rows.append(Row(label, "segcut", base, tight=True))
            else:
                rows.append(Row(label, "segcut", base.replace(prior=prior)))
    for spec in args.variant:
        name, _, changes = spec.partition(":")
        kw = {}
        for item in filter(None, changes.split(",")):
            key, _, value = item.partition("=")
            kw[key.strip()] = _parse(value.strip())
        prior = kw.pop("prior", ("border", "center"))
        prior = () if prior == "none" else (prior,) if isinstance(prior, str) else prior
        tight = kw.pop("box", None) == "tight"
        rows.append(Row(f"segcut {name}", "segcut", base.replace(prior=prior, **kw), tight=tight))
    if not args.no_baselines:
        rows += [Row(label, "baseline", base) for label in BASELINES]
        rows.append(Row("superpixel ceiling", "ceiling", base))
    return rows


def run_row(row, image, channel_axis, ref, x, gray):
    """One method on one image: dict of iou, bf, seconds (+ gap, hypothesis, n_sp)."""
    from segcut.pipeline import split

    out = {}
    t0 = time.perf_counter()
    if row.kind == "segcut":
        config = row.config.replace(box=tight_box(ref)) if row.tight else row.config
        result = split(image, config, channel_axis=channel_axis)
        mask = result.mask
        out.update(gap=result.gap, hypothesis=result.hypothesis, n_sp=result.n_superpixels)
    elif row.kind == "ceiling":
        mask, out["n_sp"] = superpixel_ceiling(image, channel_axis, ref, row.config)
    else:
        mask = BASELINES[row.label](x, gray, row.config)
    out["seconds"] = time.perf_counter() - t0
    out["iou"], out["bf"] = score(mask, ref)
    return out


def run_item(task):
    """All rows of one image (runs in a worker)."""
    data_set, name, rows, orientations = task
    image, channel_axis, ref = load_item(data_set, name)
    x, gray = baseline_input(image, channel_axis)
    results = []
    for row in rows:
        if orientations == 8 and row.kind == "segcut":
            results.append(run_row_orientations(row, image, channel_axis, ref))
        else:
            results.append(run_row(row, image, channel_axis, ref, x, gray))
    return results


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


def run_row_orientations(row, image, channel_axis, ref):
    """A segcut row in each of the eight processing orientations."""
    from segcut.pipeline import CANONICAL_TRANSFORMS, canonical_transform, split
    from segcut.prepare import prepare_image

    views = list(CANONICAL_TRANSFORMS)
    canonical = views.index(canonical_transform(prepare_image(image, channel_axis)[0]))
    config = row.config.replace(box=tight_box(ref)) if row.tight else row.config
    ious, bfs, secs = [], [], []
    for view in views:
        with forced_orientation(view):
            t0 = time.perf_counter()
            mask = split(image, config, channel_axis=channel_axis).mask
            secs.append(time.perf_counter() - t0)
        iou, bf = score(mask, ref)
        ious.append(iou)
        bfs.append(bf)
    return {"ious8": ious, "bfs8": bfs, "seconds8": secs, "canonical": canonical}


def warm_up():
    """Load the numba kernels once per process, so no image is charged for it."""
    from segcut.config import SplitConfig
    from segcut.pipeline import split

    _, scene = _pipeline_scenes()
    image, truth = scene("noise", 1, size=96)
    for config in (SplitConfig(), SplitConfig(prior=("border", "center")),
                   SplitConfig(box=tight_box(truth))):
        split(image, config)


# -- tables ------------------------------------------------------------------------------

def _count(n_images):
    return f"{n_images} image" + ("" if n_images == 1 else "s")


def _hypotheses(values):
    counts = collections.Counter(values)
    return ", ".join(f"{name} {n}" for name, n in
                     sorted(counts.items(), key=lambda kv: (-kv[1], kv[0])))


def print_table(data_set, rows, results, n_images):
    print(f"\n**{data_set.title}** ({_count(n_images)})\n")
    print("| method | mean IoU | mean boundary F | median s per image | median certified gap "
          "| median superpixels | start hypotheses |")
    print("|---|---|---|---|---|---|---|")
    for r, row in enumerate(rows):
        per_image = [res[r] for res in results]
        iou = np.mean([p["iou"] for p in per_image])
        bf = np.mean([p["bf"] for p in per_image])
        secs = statistics.median(p["seconds"] for p in per_image)
        gaps = [p["gap"] for p in per_image if p.get("gap") is not None]
        gap = f"{100 * statistics.median(gaps):.2f}%" if gaps else "–"
        nsp = [p["n_sp"] for p in per_image if "n_sp" in p]
        sp = f"{statistics.median(nsp):.0f}" if nsp else "–"
        hyp = _hypotheses(p["hypothesis"] for p in per_image) if row.kind == "segcut" else "–"
        print(f"| {row.label} | {iou:.3f} | {bf:.3f} | {secs:.3f} | {gap} | {sp} | {hyp} |",
              flush=True)


def print_orientation_table(data_set, rows, results, n_images):
    print(f"\n**{data_set.title}**, segcut in all 8 processing orientations "
          f"({_count(n_images)})\n")
    print("| method | IoU, mean of 8 | boundary F, mean of 8 | IoU, canonical | lowest view "
          "| highest view | images swinging > 0.2 | median s |")
    print("|---|---|---|---|---|---|---|---|")
    for r, row in enumerate(rows):
        if row.kind != "segcut":
            continue
        ious = np.array([res[r]["ious8"] for res in results])
        bfs = np.array([res[r]["bfs8"] for res in results])
        canonical = np.array([res[r]["canonical"] for res in results])
        secs = statistics.median(s for res in results for s in res[r]["seconds8"])
        by_view = ious.mean(axis=0)
        can = ious[np.arange(len(results)), canonical].mean()
        swing = int(np.count_nonzero(ious.max(axis=1) - ious.min(axis=1) > 0.2))
        print(f"| {row.label} | {ious.mean():.3f} | {bfs.mean():.3f} | {can:.3f} | "
              f"{by_view.min():.3f} | {by_view.max():.3f} | {swing} | {secs:.3f} |", flush=True)


# -- main --------------------------------------------------------------------------------

def parse_args(argv):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("folder", nargs="*", help="folders with images/ and masks/ "
                        "(instead of --sets)")
    parser.add_argument("--sets", default=",".join(SET_NAMES),
                        help=f"comma-separated, any of {', '.join(SET_NAMES)} (default all)")
    parser.add_argument("--limit", type=int, default=0, help="first N images of each set only")
    parser.add_argument("--jobs", type=int, default=2, help="worker processes (1: in process)")
    parser.add_argument("--no-baselines", action="store_true",
                        help="skip the scikit-image baselines and the superpixel ceiling")
    parser.add_argument("--no-default", action="store_true",
                        help="skip the default segcut rows of each set")
    parser.add_argument("--variant", action="append", default=[],
                        help="NAME:key=value,... segcut (border,center) with config changes")
    parser.add_argument("--method", default=None, help="max-cut method for every segcut row")
    parser.add_argument("--orientations", type=int, choices=(1, 8), default=1,
                        help="8: force each flip and quarter turn as the processing "
                             "orientation and report the mean over them")
    parser.add_argument("--speed", type=int, default=0, metavar="N",
                        help="also time N horses-dev photographs resized to 512x512, end "
                             "to end (PNG read, split with certificate, PNG write)")
    args = parser.parse_args(argv)
    keys = [k.strip() for k in args.sets.split(",") if k.strip()]
    bad = [k for k in keys if k not in SET_NAMES]
    if bad:
        parser.error(f"--sets: unknown set {bad[0]!r}; use any of {', '.join(SET_NAMES)}")
    if args.jobs < 1:
        parser.error("--jobs must be at least 1")
    args.keys = keys
    return args


def main(argv=None) -> int:
    args = parse_args(argv)
    from segcut.config import SplitConfig

    base = SplitConfig() if args.method is None else SplitConfig(method=args.method)
    plans = []
    for data_set in dev_sets(args.keys, args.folder):
        names = list_items(data_set)
        if names is None:
            print(f"skipped {data_set.title}: no images/ folder in {data_set.where} "
                  "(the public data is not here)")
            continue
        if args.limit:
            names = names[:args.limit]
        plans.append((data_set, names, set_rows(data_set, base, args)))
    tasks = [(data_set, name, rows, args.orientations)
             for data_set, names, rows in plans for name in names]
    print(f"{len(tasks)} images in {len(plans)} sets; every row of a set runs on the same "
          f"images; {args.jobs} worker process(es), one thread each")
    if args.jobs == 1:
        warm_up()
        results = [run_item(task) for task in tasks]
    else:
        with ProcessPoolExecutor(args.jobs, initializer=warm_up) as pool:
            results = list(pool.map(run_item, tasks, chunksize=1))
    start = 0
    for data_set, names, rows in plans:
        chunk = results[start:start + len(names)]
        start += len(names)
        if args.orientations == 8 and any(r.kind == "segcut" for r in rows):
            print_orientation_table(data_set, rows, chunk, len(names))
            keep = [i for i, r in enumerate(rows) if r.kind != "segcut"]
            rows = [rows[i] for i in keep]
            chunk = [[res[i] for i in keep] for res in chunk]
        if rows:
            print_table(data_set, rows, chunk, len(names))
    if args.speed:
        speed_set = dev_sets(["horses"], [])[0]
        names = (list_items(speed_set) or [])[:args.speed]
        if names:
            warm_up()
            speed([(n, load_item(speed_set, n)[0]) for n in names],
                  base.replace(prior=("border", "center")))
    return 0


def speed(images, config):
    """Median seconds for a 512x512 RGB photograph: read PNG, split, write PNG mask."""
    import io
    import tempfile

    from segcut.pipeline import split

    stages = {}
    totals = []
    with tempfile.TemporaryDirectory() as tmp:
        for name, image in images:
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
          f"method {config.method}, one process:")
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
