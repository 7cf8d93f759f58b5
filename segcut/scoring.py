"""Score and compare segmentations.

Two questions an analyst asks of any foreground mask:

* **How good is it under segcut's own objective?** :func:`score` builds the image's
  signed graph, projects each mask onto it (every superpixel takes the side most of
  its pixels are on) and reports the cut value of that projection beside the graph's
  certified upper bound, so masks from any source (segcut under other settings, a
  hand-drawn mask, another method) are measured on one scale.
* **How well does it agree with a reference mask?** :func:`compare_masks` gives the
  standard agreement measures for one pair; :func:`summarize_comparison` aggregates
  them over images with bootstrap confidence intervals, ranks several prediction
  sets and compares the best two on the same images.

Everything here works on arrays in memory; reading files is the job of
:mod:`segcut.io`.

Mask convention
---------------
In memory a mask is any array whose zero entries are background and whose other
entries are foreground (booleans work as they are). Files are read by
:func:`segcut.io.read_mask`: a mask with at most two values, one of them 0 (segcut's
own 0/255 masks, 0/1 label images), is foreground wherever it is not 0; a mask that
is not strictly binary (a JPEG-compressed reference, a soft mask) is cut at half its
type's range (127.5 for 8-bit files); its ``threshold=`` overrides both rules
(``segcut compare --threshold`` passes it for the reference masks).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
from scipy import ndimage as ndi

__all__ = [
    "METRICS",
    "HIGHER_IS_BETTER",
    "as_binary_mask",
    "mask_boundary",
    "compare_masks",
    "bootstrap_ci",
    "paired_difference",
    "summarize_comparison",
    "MetricSummary",
    "SetSummary",
    "PairedComparison",
    "ComparisonSummary",
    "MaskScore",
    "ScoreResult",
    "score",
]

#: The measures :func:`compare_masks` returns, in table order.
METRICS = (
    "iou",
    "dice",
    "precision",
    "recall",
    "boundary_f",
    "boundary_precision",
    "boundary_recall",
    "hausdorff",
    "assd",
)

#: For each measure, whether a larger value means better agreement.
HIGHER_IS_BETTER = {
    "iou": True,
    "dice": True,
    "precision": True,
    "recall": True,
    "boundary_f": True,
    "boundary_precision": True,
    "boundary_recall": True,
    "hausdorff": False,
    "assd": False,
}


# --- one pair of masks ------------------------------------------------------------------

def as_binary_mask(mask, *, name: str = "mask") -> np.ndarray:
    """Return ``mask != 0`` as a boolean array, refusing what cannot be a mask.

    Parameters
    ----------
    mask : array_like
        Zero is background, anything else foreground.
    name : str
        How to call the argument in error messages.

    Returns
    -------
    ndarray of bool

    Raises
    ------
    ValueError
        For a 0-d array, an empty array, or NaN entries.
    TypeError
        For a non-numeric array.

    Examples
    --------
    >>> as_binary_mask([[0, 3], [255, 0]])
    array([[False,  True],
           [ True, False]])
    """
    arr = np.asarray(mask)
    if arr.dtype == bool:
        out = arr
    else:
        if not (np.issubdtype(arr.dtype, np.number)):
            raise TypeError(f"{name} must be a numeric or boolean array; got dtype {arr.dtype}")
        if np.issubdtype(arr.dtype, np.inexact) and np.isnan(arr).any():
            raise ValueError(f"{name} contains NaN; a mask needs 0 (background) or non-zero (foreground)")
        out = arr != 0
    if out.ndim == 0 or out.size == 0:
        raise ValueError(f"{name} must be a non-empty array with at least one axis; got shape {out.shape}")
    return np.ascontiguousarray(out)


def mask_boundary(mask) -> np.ndarray:
    """Foreground pixels that touch the background (the inner boundary).

    A pixel is on the boundary when it is foreground and one of its face neighbours
    (4-neighbourhood in 2-D) is background. The image frame is **not** a boundary:
    a mask that covers the whole image has no boundary pixels. This is the
    ``mode="inner", connectivity=1`` boundary of
    :func:`skimage.segmentation.find_boundaries`.

    Parameters
    ----------
    mask : array_like
        Zero is background, anything else foreground.

    Returns
    -------
    ndarray of bool, same shape as ``mask``

    Examples
    --------
    >>> m = np.zeros((4, 5), dtype=bool)
    >>> m[1:4, 1:4] = True
    >>> mask_boundary(m).astype(int)
    array([[0, 0, 0, 0, 0],
           [0, 1, 1, 1, 0],
           [0, 1, 0, 1, 0],
           [0, 1, 0, 1, 0]])
    """
    m = as_binary_mask(mask)
    structure = ndi.generate_binary_structure(m.ndim, 1)
    interior = ndi.binary_erosion(m, structure=structure, border_value=1)
    return m & ~interior


def _safe_ratio(num: int, den: int, *, both_empty: bool) -> float:
    """num/den; for den == 0: 1.0 when both sets are empty, else 0.0."""
    if den == 0:
        return 1.0 if both_empty else 0.0
    return num / den


def compare_masks(pred, ref, *, tolerance: float = 2.0) -> dict:
    """Agreement between a predicted mask and a reference mask.

    Parameters
    ----------
    pred, ref : (M, N) array_like
        Masks of the same shape (any number of axes works); zero is background,
        anything else foreground.
    tolerance : float, default 2.0
        Largest distance, in pixels, at which a boundary pixel of one mask counts as
        matched by the other mask's boundary (boundary F-measure).

    Returns
    -------
    dict
        ``iou``, ``dice``, ``precision``, ``recall`` (pixel overlap);
        ``boundary_precision``, ``boundary_recall``, ``boundary_f`` (boundaries
        matched within ``tolerance``); ``hausdorff`` and ``assd`` (boundary
        distances in pixels); the pixel counts ``true_positive``,
        ``false_positive``, ``false_negative``, ``n_pixels``; and the flags
        ``pred_empty``, ``ref_empty`` and ``distances_finite``. Measures are
        Python floats; the keys of :data:`METRICS` are always present.

    Raises
    ------
    ValueError
        When the shapes differ (both shapes are named), or for a negative or
        non-finite ``tolerance``.

    See Also
    --------
    summarize_comparison : means and confidence intervals over many images.

    Notes
    -----
    With ``P`` the predicted foreground, ``R`` the reference foreground,
    ``TP = |P & R|``, ``FP = |P - R|``, ``FN = |R - P|``:

    * IoU (Jaccard index) ``TP / (TP + FP + FN)``; Dice (F1) ``2 TP / (2 TP + FP + FN)``,
      so ``Dice = 2 IoU / (1 + IoU)``.
    * precision ``TP / |P|``, recall ``TP / |R|``.
    * Boundaries ``B_P``, ``B_R`` are the inner boundaries of :func:`mask_boundary`.
      Boundary precision is the share of ``B_P`` within ``tolerance`` (Euclidean,
      inclusive) of some pixel of ``B_R``; boundary recall the share of ``B_R`` within
      ``tolerance`` of ``B_P``; ``boundary_f`` their harmonic mean. Matching uses
      distance transforms, so one reference pixel may match several predicted
      ones (no one-to-one assignment).
    * Hausdorff distance ``max(max_{a in B_P} d(a, B_R), max_{b in B_R} d(b, B_P))``;
      average symmetric surface distance (ASSD)
      ``(sum_{a in B_P} d(a, B_R) + sum_{b in B_R} d(b, B_P)) / (|B_P| + |B_R|)``.

    Empty-set conventions (every measure is defined, none is NaN):

    * A ratio whose denominator is an empty set is 1.0 when both sets compared are
      empty and 0.0 otherwise. So two empty masks give IoU = Dice = precision =
      recall = 1; an empty prediction against a non-empty reference gives 0 for all
      four. The same rule applies to the boundary ratios and ``boundary_f``.
    * Distances: 0.0 when both boundaries are empty and the masks are equal (both
      empty, or both the whole image); ``inf`` when one boundary is empty and the
      other is not, or both are empty but the masks differ (an empty mask against a
      full one). ``distances_finite`` is False exactly then.

    Examples
    --------
    >>> ref = np.zeros((6, 6), dtype=bool); ref[1:5, 1:5] = True   # 16 pixels
    >>> pred = np.zeros((6, 6), dtype=bool); pred[1:5, 2:6] = True  # shifted right by 1
    >>> m = compare_masks(pred, ref)
    >>> round(m["iou"], 4), m["dice"], m["precision"], m["recall"]
    (0.6, 0.75, 0.75, 0.75)
    >>> m["hausdorff"], m["boundary_f"]
    (1.0, 1.0)
    """
    if isinstance(tolerance, bool) or not isinstance(tolerance, (int, float, np.number)) \
            or not math.isfinite(tolerance) or tolerance < 0:
        raise ValueError(f"tolerance must be a finite number of pixels >= 0; got {tolerance!r}")
    p = as_binary_mask(pred, name="pred")
    r = as_binary_mask(ref, name="ref")
    if p.shape != r.shape:
        raise ValueError(f"pred shape {p.shape} does not match ref shape {r.shape}")

    n_pred = int(np.count_nonzero(p))
    n_ref = int(np.count_nonzero(r))
    tp = int(np.count_nonzero(p & r))
    fp = n_pred - tp
    fn = n_ref - tp
    both_empty = n_pred == 0 and n_ref == 0
    out = {
        "iou": _safe_ratio(tp, tp + fp + fn, both_empty=both_empty),
        "dice": _safe_ratio(2 * tp, 2 * tp + fp + fn, both_empty=both_empty),
        "precision": _safe_ratio(tp, n_pred, both_empty=both_empty),
        "recall": _safe_ratio(tp, n_ref, both_empty=both_empty),
    }

    bp = mask_boundary(p)
    br = mask_boundary(r)
    n_bp = int(np.count_nonzero(bp))
    n_br = int(np.count_nonzero(br))
    masks_equal = bool(np.array_equal(p, r))
    if n_bp and n_br:
        # distance of every pixel to the nearest boundary pixel of the other mask
        to_ref = ndi.distance_transform_edt(~br)[bp]
        to_pred = ndi.distance_transform_edt(~bp)[br]
        b_precision = float(np.count_nonzero(to_ref <= tolerance)) / n_bp
        b_recall = float(np.count_nonzero(to_pred <= tolerance)) / n_br
        hausdorff = float(max(to_ref.max(), to_pred.max()))
        assd = float((to_ref.sum() + to_pred.sum()) / (n_bp + n_br))
        finite = True
    else:
        both_b_empty = n_bp == 0 and n_br == 0 and masks_equal
        b_precision = 1.0 if both_b_empty else 0.0
        b_recall = b_precision
        hausdorff = assd = 0.0 if both_b_empty else math.inf
        finite = both_b_empty
    if b_precision + b_recall > 0:
        b_f = 2.0 * b_precision * b_recall / (b_precision + b_recall)
    else:
        b_f = 0.0
    out.update(
        boundary_f=b_f,
        boundary_precision=b_precision,
        boundary_recall=b_recall,
        hausdorff=hausdorff,
        assd=assd,
        true_positive=tp,
        false_positive=fp,
        false_negative=fn,
        n_pixels=int(p.size),
        pred_empty=n_pred == 0,
        ref_empty=n_ref == 0,
        distances_finite=finite,
    )
    return out


# --- many images ------------------------------------------------------------------------

def _resample_means(values: np.ndarray, n_resamples: int, generator: np.random.Generator,
                    chunk: int = 256) -> np.ndarray:
    """Means of ``n_resamples`` bootstrap resamples of ``values`` (drawn in chunks)."""
    n = values.shape[0]
    means = np.empty(n_resamples, dtype=np.float64)
    done = 0
    while done < n_resamples:
        k = min(chunk, n_resamples - done)
        idx = generator.integers(0, n, size=(k, n))
        means[done:done + k] = values[idx].mean(axis=1)
        done += k
    return means


def _check_resampling(n_resamples, confidence) -> None:
    if isinstance(n_resamples, bool) or not isinstance(n_resamples, (int, np.integer)) \
            or n_resamples < 1:
        raise ValueError(f"n_resamples must be a whole number >= 1; got {n_resamples!r}")
    if isinstance(confidence, bool) or not isinstance(confidence, (int, float, np.number)) \
            or not 0 < confidence < 1:
        raise ValueError(f"confidence must be between 0 and 1 (exclusive); got {confidence!r}")


def bootstrap_ci(values, *, n_resamples: int = 2000, confidence: float = 0.95,
                 rng=0) -> tuple[float, float]:
    """Percentile bootstrap confidence interval of the mean.

    Parameters
    ----------
    values : (n,) array_like of float
        One value per image; all finite.
    n_resamples : int, default 2000
        Number of resamples (with replacement, ``n`` values each).
    confidence : float, default 0.95
        Coverage of the interval.
    rng : None, int or numpy.random.Generator, default 0
        Seed of the resampling; the default makes the interval reproducible.

    Returns
    -------
    (low, high) : tuple of float
        The ``(1 - confidence)/2`` and ``(1 + confidence)/2`` quantiles of the
        resampled means. ``(v, v)`` for a single value; ``(nan, nan)`` for none.

    Raises
    ------
    ValueError
        For values that are not a 1-D array of finite numbers, or bad options.

    Notes
    -----
    The percentile interval (Efron and Tibshirani, *An Introduction to the
    Bootstrap*, 1993, ch. 13). It is simple and transformation-respecting; with few
    images (say under 10) it is too narrow, which the per-set image count makes
    visible.

    Examples
    --------
    >>> low, high = bootstrap_ci([0.5, 0.6, 0.7, 0.8, 0.9])
    >>> bool(low < 0.7 < high)
    True
    >>> bootstrap_ci([0.5, 0.6, 0.7, 0.8, 0.9]) == (low, high)
    True
    """
    _check_resampling(n_resamples, confidence)
    arr = np.asarray(values, dtype=np.float64)
    if arr.ndim != 1:
        raise ValueError(f"values must be a 1-D array; got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError("values must be finite; drop or count infinite distances first")
    if arr.size == 0:
        return (math.nan, math.nan)
    if arr.size == 1 or np.all(arr == arr[0]):
        return (float(arr[0]), float(arr[0]))
    means = _resample_means(arr, int(n_resamples), np.random.default_rng(rng))
    alpha = (1.0 - confidence) / 2.0
    low, high = np.quantile(means, [alpha, 1.0 - alpha])
    return (float(low), float(high))


@dataclass(frozen=True)
class PairedComparison:
    """The per-image difference between two prediction sets on the images both have.

    Attributes
    ----------
    first, second : str
        Names of the sets; differences are ``first - second``.
    metric : str
        The measure compared.
    n_images : int
        Images in both sets with a finite value of ``metric`` in both.
    mean_difference : float
        Mean of the per-image differences.
    ci_low, ci_high : float
        Paired percentile bootstrap interval of the mean difference (images are
        resampled, each keeping its pair of values).
    wilcoxon_statistic, p_value : float
        Wilcoxon signed-rank test of "the differences are centred on 0", two-sided
        (:func:`scipy.stats.wilcoxon`; zero differences dropped). ``p_value`` is 1.0
        when every difference is 0 and NaN with fewer than 2 images.
    """

    first: str
    second: str
    metric: str
    n_images: int
    mean_difference: float
    ci_low: float
    ci_high: float
    wilcoxon_statistic: float
    p_value: float

    def to_dict(self) -> dict:
        """Plain JSON-ready dict."""
        return _jsonable(self.__dict__)


def paired_difference(first, second, *, names=("first", "second"), metric: str = "",
                      n_resamples: int = 2000, confidence: float = 0.95,
                      rng=0) -> PairedComparison:
    """Compare two sets of per-image values measured on the same images.

    Parameters
    ----------
    first, second : (n,) array_like of float
        Values of the same measure, image by image, in the same order. Pairs where
        either value is not finite are left out.
    names : (str, str)
        Names of the two sets, for the result.
    metric : str
        Name of the measure, for the result.
    n_resamples, confidence, rng
        As in :func:`bootstrap_ci`.

    Returns
    -------
    PairedComparison

    Examples
    --------
    >>> r = paired_difference([0.9, 0.8, 0.85, 0.7], [0.8, 0.7, 0.8, 0.6])
    >>> round(r.mean_difference, 4), r.p_value
    (0.0875, 0.125)
    """
    _check_resampling(n_resamples, confidence)
    a = np.asarray(first, dtype=np.float64)
    b = np.asarray(second, dtype=np.float64)
    if a.ndim != 1 or a.shape != b.shape:
        raise ValueError(f"first and second must be 1-D arrays of equal length; got shapes "
                         f"{a.shape} and {b.shape}")
    keep = np.isfinite(a) & np.isfinite(b)
    d = a[keep] - b[keep]
    n = int(d.size)
    if n == 0:
        mean = low = high = stat = p = math.nan
    else:
        mean = float(d.mean())
        low, high = bootstrap_ci(d, n_resamples=n_resamples, confidence=confidence, rng=rng)
        if n < 2:
            stat, p = math.nan, math.nan
        elif np.all(d == 0):
            stat, p = 0.0, 1.0
        else:
            from scipy.stats import wilcoxon

            res = wilcoxon(d, zero_method="wilcox", alternative="two-sided")
            stat, p = float(res.statistic), float(res.pvalue)
    return PairedComparison(first=str(names[0]), second=str(names[1]), metric=metric,
                            n_images=n, mean_difference=mean, ci_low=low, ci_high=high,
                            wilcoxon_statistic=stat, p_value=p)


@dataclass(frozen=True)
class MetricSummary:
    """One measure over the images of one prediction set.

    Attributes
    ----------
    mean : float
        Mean over the images where the measure is finite (NaN when there is none).
    ci_low, ci_high : float
        Percentile bootstrap interval of that mean.
    n : int
        Images counted in the mean.
    n_infinite : int
        Images left out because the value was infinite (distances to an empty
        boundary; see :func:`compare_masks`).
    """

    mean: float
    ci_low: float
    ci_high: float
    n: int
    n_infinite: int = 0


@dataclass(frozen=True)
class SetSummary:
    """Aggregates of one prediction set.

    Attributes
    ----------
    name : str
    rank : int
        1 for the best set by the ranking measure.
    n_images : int
        Images compared in this set.
    metrics : dict of str to MetricSummary
    """

    name: str
    rank: int
    n_images: int
    metrics: dict

    def to_dict(self) -> dict:
        """Plain JSON-ready dict."""
        return _jsonable({"name": self.name, "rank": self.rank, "n_images": self.n_images,
                          "metrics": {k: v.__dict__ for k, v in self.metrics.items()}})


@dataclass(frozen=True)
class ComparisonSummary:
    """Prediction sets side by side, best first.

    Attributes
    ----------
    rank_by : str
        The measure that decides the ranking (its mean).
    sets : tuple of SetSummary
        Ranked, best first.
    paired : PairedComparison or None
        Best set minus second best on the images both have (None with one set).
    confidence : float
        Coverage of every interval.
    n_resamples : int
    """

    rank_by: str
    sets: tuple
    paired: PairedComparison | None
    confidence: float = 0.95
    n_resamples: int = 2000

    def to_dict(self) -> dict:
        """Plain JSON-ready dict."""
        return {
            "rank_by": self.rank_by,
            "confidence": self.confidence,
            "n_resamples": self.n_resamples,
            "sets": [s.to_dict() for s in self.sets],
            "paired": None if self.paired is None else self.paired.to_dict(),
        }


def summarize_comparison(results: Mapping[str, Mapping[str, dict]], *, rank_by: str = "iou",
                         metrics: Sequence[str] = METRICS, n_resamples: int = 2000,
                         confidence: float = 0.95, rng=0) -> ComparisonSummary:
    """Aggregate per-image agreement of several prediction sets, rank them, compare the best two.

    Parameters
    ----------
    results : mapping of set name to (mapping of image id to dict)
        ``results[set_name][image_id]`` is what :func:`compare_masks` returned for
        that image (only the keys in ``metrics`` are read).
    rank_by : str, default "iou"
        Measure whose mean ranks the sets (larger is better, except for
        ``hausdorff`` and ``assd``). For a distance, a set with more infinite
        values (see :func:`compare_masks`) ranks below one with fewer, whatever the
        means over the finite ones. Ties are broken by set name.
    metrics : sequence of str
        Measures to aggregate; ``rank_by`` must be one of them.
    n_resamples, confidence, rng
        As in :func:`bootstrap_ci`; each measure of each set uses a fresh generator
        seeded from ``rng``, so adding a set does not change another set's intervals.

    Returns
    -------
    ComparisonSummary
        Means with percentile bootstrap intervals per set and measure; the ranking;
        and a :class:`PairedComparison` of the two best sets on ``rank_by``
        (paired bootstrap interval and Wilcoxon signed-rank test).

    Raises
    ------
    ValueError
        For an unknown measure, or no sets at all.

    Examples
    --------
    >>> ref = np.zeros((8, 8), dtype=bool); ref[2:6, 2:6] = True
    >>> good = {"a": compare_masks(ref, ref), "b": compare_masks(ref[::-1], ref)}
    >>> empty = {"a": compare_masks(ref & False, ref), "b": compare_masks(ref & False, ref)}
    >>> s = summarize_comparison({"good": good, "empty": empty})
    >>> [(x.name, x.rank, x.metrics["iou"].mean) for x in s.sets]
    [('good', 1, 1.0), ('empty', 2, 0.0)]
    >>> s.paired.mean_difference
    1.0
    """
    metrics = tuple(metrics)
    unknown = [m for m in metrics if m not in HIGHER_IS_BETTER]
    if unknown:
        raise ValueError(f"unknown measure(s) {', '.join(unknown)}; choose from {', '.join(METRICS)}")
    if rank_by not in metrics:
        raise ValueError(f"rank_by={rank_by!r} must be one of the aggregated measures: "
                         f"{', '.join(metrics)}")
    if not results:
        raise ValueError("no prediction sets to summarise")
    _check_resampling(n_resamples, confidence)
    base = _base_seed(rng)

    summaries = []
    for name in sorted(results):
        per_image = results[name]
        agg = {}
        for k, metric in enumerate(metrics):
            vals = np.array([float(per_image[i][metric]) for i in sorted(per_image)],
                            dtype=np.float64)
            finite = vals[np.isfinite(vals)]
            child = np.random.default_rng([base, _stable_hash(name), k])
            low, high = bootstrap_ci(finite, n_resamples=n_resamples, confidence=confidence,
                                     rng=child)
            mean = float(finite.mean()) if finite.size else math.nan
            agg[metric] = MetricSummary(mean=mean, ci_low=low, ci_high=high, n=int(finite.size),
                                        n_infinite=int(vals.size - finite.size))
        summaries.append((name, len(per_image), agg))

    sign = 1.0 if HIGHER_IS_BETTER[rank_by] else -1.0

    def order(item):
        m = item[2][rank_by]
        return (math.isnan(m.mean), m.n_infinite, -sign * (0.0 if math.isnan(m.mean) else m.mean),
                item[0])

    summaries.sort(key=order)
    sets = tuple(SetSummary(name=name, rank=r + 1, n_images=n, metrics=agg)
                 for r, (name, n, agg) in enumerate(summaries))
    paired = None
    if len(sets) >= 2:
        first, second = sets[0].name, sets[1].name
        common = sorted(set(results[first]) & set(results[second]))
        a = [float(results[first][i][rank_by]) for i in common]
        b = [float(results[second][i][rank_by]) for i in common]
        paired = paired_difference(
            a, b, names=(first, second), metric=rank_by, n_resamples=n_resamples,
            confidence=confidence,
            rng=np.random.default_rng([base, _stable_hash("paired")]))
    return ComparisonSummary(rank_by=rank_by, sets=sets, paired=paired, confidence=confidence,
                             n_resamples=int(n_resamples))


# --- the cut score of given masks -------------------------------------------------------

@dataclass(frozen=True)
class MaskScore:
    """The cut score of one mask on an image's graph.

    Attributes
    ----------
    name : str
    value : float
        Cut value of the mask's projection onto the graph (the same quantity as
        :attr:`segcut.pipeline.SplitResult.value`).
    gap : float or None
        ``(upper_bound - value) / |upper_bound|``: how far below the best possible
        split under this graph the mask is, at most. None without a bound.
    agreement : float
        Share of pixels where the mask equals its projection (1.0 when the mask
        follows superpixel borders; lower for masks finer than the superpixels).
    foreground_fraction : float
        Share of the mask's pixels that are foreground.
    rank : int
        1 for the mask with the largest cut value.
    confident_disagreement : float or None
        Share of the image's pixels where the mask contradicts segcut's own split
        of the graph at a pixel whose confidence is at least ``uncertain_level``
        (:func:`segcut.confidence.confident_disagreement`); None when
        ``config.confidence`` is off.
    """

    name: str
    value: float
    gap: float | None
    agreement: float
    foreground_fraction: float
    rank: int
    confident_disagreement: float | None = None

    def to_dict(self) -> dict:
        """Plain JSON-ready dict."""
        return _jsonable(self.__dict__)


@dataclass(frozen=True, eq=False)
class ScoreResult:
    """Cut scores of several masks on one image's graph, with the graph's certified bound.

    Attributes
    ----------
    masks : tuple of MaskScore
        In the order the masks were given (see :attr:`ranking` for best first).
    upper_bound : float or None
        Certified upper bound on the cut value of *any* split under this graph
        (None when the bound method gives no certificate).
    solver_value : float
        Best cut found by the bound solve itself (for the SDP: hyperplane rounding
        and 1-flip polish), a reference point beside the given masks.
    method : str
        Max-cut method that produced the bound.
    n_superpixels : int
    n_vertices : int
        Graph vertices (superpixels not merged into seeds, plus the terminal).
    orientation : str
        How the graph decides the foreground side (see
        :data:`segcut.pipeline.ORIENTATIONS`).
    seed : int or None
        Seed the graph was built with (``split`` must use the same one).
    image_graph : ImageGraph
        The graph the masks were scored on.
    """

    masks: tuple
    upper_bound: float | None
    solver_value: float
    method: str
    n_superpixels: int
    n_vertices: int
    orientation: str
    seed: int | None
    image_graph: object = field(default=None, repr=False)

    @property
    def ranking(self) -> tuple:
        """The mask scores, largest cut value first."""
        return tuple(sorted(self.masks, key=lambda m: m.rank))

    def to_dict(self) -> dict:
        """Plain JSON-ready dict (no arrays)."""
        return {
            "upper_bound": _jsonable(self.upper_bound),
            "solver_value": _jsonable(self.solver_value),
            "method": self.method,
            "n_superpixels": self.n_superpixels,
            "n_vertices": self.n_vertices,
            "orientation": self.orientation,
            "seed": self.seed,
            "masks": [m.to_dict() for m in self.masks],
        }

    def __repr__(self) -> str:
        bound = "None" if self.upper_bound is None else f"{self.upper_bound:.6g}"
        best = self.ranking[0].name if self.masks else None
        return (f"ScoreResult(n_masks={len(self.masks)}, upper_bound={bound}, "
                f"best={best!r}, n_superpixels={self.n_superpixels})")


def score(image, masks, *, config=None, seeds=None, channel_axis: int | None = -1,
          rng=None, method: str | None = None) -> ScoreResult:
    """Cut score of given masks on an image's signed graph, beside its certified bound.

    Builds the graph :func:`segcut.split` would solve for ``image`` (same config,
    seeds and seed), projects each mask onto it (every superpixel takes the side of
    the majority of its pixels) and reports the cut value of each projection, the
    share of pixels that agree with it, and the gap to a certified upper bound
    computed once for the image and shared by all masks. With
    ``config.confidence`` on, each score also gives the share of pixels where the
    mask contradicts a confident pixel of segcut's own split of the graph
    (``confident_disagreement``).

    Parameters
    ----------
    image : (M, N[, C]) ndarray
        As for :func:`segcut.pipeline.split`.
    masks : sequence of array_like, or mapping of name to array_like
        Masks of the image's spatial shape; zero is background, anything else
        foreground. A sequence is named ``mask0``, ``mask1``...
    config : SplitConfig, optional
        The config that builds the graph; ``SplitConfig()`` by default.
    seeds : int ndarray, optional
        Hard seeds as for ``split`` (they are part of the graph: seeded superpixels
        keep their seed whatever the mask says, which lowers ``agreement``).
    channel_axis : int or None, default -1
    rng : None, int or numpy.random.Generator
        Seed of the graph building (its colour-model rounds) and of the bound
        solve; by default ``config.seed``, as in ``split``. Score a mask written by
        ``split`` with the seed it ran with.
    method : str, optional
        Max-cut method that provides the upper bound; by default ``config.method``.
        The graph is solved exactly as :func:`segcut.split` solves it (same seed
        stream, start, move budget and certificate settings, see
        :func:`segcut.maxcut.auto.solve_warm`), so with the same config and seed the
        bound equals ``SplitResult.upper_bound``. It must give a certified bound
        (``"auto"``, ``"sdp"``, or ``"exact"`` for tiny graphs).

    Returns
    -------
    ScoreResult

    Raises
    ------
    ValueError
        For no masks, masks of different shapes, a mask whose shape differs from
        the image's spatial shape (both shapes named), or a malformed image.

    Notes
    -----
    The cut value is ``sum_{i<j} w_ij (1 - x_i x_j) / 2`` over the graph's vertices
    (superpixels, plus the terminal when priors, colour models or seeds add one; it
    takes the foreground side). Without a terminal, flipping every side gives the
    same value, so the foreground rule does not matter. For the mask that ``split``
    returned, the projection is exact and the value equals ``SplitResult.value``.
    No mask can score above ``upper_bound``.

    Examples
    --------
    >>> from segcut.config import SplitConfig
    >>> image = np.zeros((24, 24)); image[6:18, 6:18] = 1.0
    >>> square = image > 0.5
    >>> half = np.zeros((24, 24), dtype=bool); half[:, :12] = True
    >>> cfg = SplitConfig(prior=("border",), colour_model=False)
    >>> r = score(image, {"square": square, "left half": half}, config=cfg)
    >>> [(m.name, m.rank, m.agreement) for m in r.ranking]
    [('square', 1, 1.0), ('left half', 2, 1.0)]
    >>> r.masks[0].value <= r.upper_bound
    True

    With colour models the graph finds the square, and a mask that contradicts
    it where segcut is sure shows it:

    >>> r = score(image, {"square": square, "left half": half},
    ...           config=SplitConfig(prior=("border",)))
    >>> [round(m.confident_disagreement, 3) for m in r.masks]
    [0.0, 0.5]
    """
    from .config import SplitConfig
    from .graph import cut_value
    from .maxcut import get_method
    from .maxcut._common import relative_gap
    from .maxcut.auto import solve_warm
    from .pipeline import build_image_graph, mask_to_sides

    if method is not None:
        get_method(method)  # an unknown method is refused before any work

    if isinstance(masks, Mapping):
        names = [str(k) for k in masks]
        arrays = list(masks.values())
    elif isinstance(masks, np.ndarray):
        raise TypeError("masks must be a sequence or a mapping of masks; wrap one mask in a list")
    else:
        arrays = list(masks)
        names = [f"mask{k}" for k in range(len(arrays))]
    if not arrays:
        raise ValueError("no masks to score")
    binary = [as_binary_mask(a, name=f"mask {n!r}") for n, a in zip(names, arrays)]
    for n, b in zip(names, binary):
        if b.shape != binary[0].shape:
            raise ValueError(f"mask {n!r} shape {b.shape} differs from mask {names[0]!r} "
                             f"shape {binary[0].shape}")
    config = SplitConfig() if config is None else config
    if not isinstance(config, SplitConfig):
        raise TypeError(f"config must be a SplitConfig; got {type(config).__name__}")
    method = config.method if method is None else method
    seed = config.seed if rng is None else rng
    generator = np.random.default_rng(seed)  # one stream for building and solving, as split
    ig = build_image_graph(image, config, seeds=seeds, channel_axis=channel_axis, rng=generator)
    if binary[0].shape != ig.labels.shape:
        raise ValueError(f"mask shape {binary[0].shape} does not match the image's spatial "
                         f"shape {ig.labels.shape}")
    bound_solve = solve_warm(ig.graph, method=method, start=ig.start, max_moves=config.max_moves,
                             time_limit=config.time_limit, rng=generator)
    bound = bound_solve.upper_bound
    values, agreements = [], []
    for b in binary:
        sides, agreement = mask_to_sides(ig, b)
        values.append(cut_value(ig.graph, sides))
        agreements.append(agreement)
    order = sorted(range(len(values)), key=lambda k: (-values[k], k))
    rank = {k: r + 1 for r, k in enumerate(order)}
    disagreements = _confident_disagreements(ig, bound_solve.sides, binary, config)
    scores = tuple(
        MaskScore(name=n, value=float(v), gap=relative_gap(v, bound), agreement=float(a),
                  foreground_fraction=float(b.mean()), rank=rank[k],
                  confident_disagreement=d)
        for k, (n, v, a, b, d) in enumerate(zip(names, values, agreements, binary,
                                                disagreements))
    )
    return ScoreResult(masks=scores, upper_bound=bound, solver_value=float(bound_solve.value),
                       method=bound_solve.method, n_superpixels=ig.n_regions,
                       n_vertices=ig.graph.n_vertices, orientation=ig.orientation,
                       seed=int(seed) if isinstance(seed, (int, np.integer)) else None,
                       image_graph=ig)


def _confident_disagreements(ig, sides, masks, config) -> list:
    """Per mask, the share of pixels contradicting the confident part of segcut's split.

    segcut's split of the graph is the bound solve's cut, oriented as ``split``
    orients it (:func:`segcut.confidence.confident_reference`); None per mask when
    ``config.confidence`` is off.
    """
    if not config.confidence:
        return [None] * len(masks)
    from .confidence import confident_disagreement, confident_reference

    reference, confidence = confident_reference(ig, sides, margin=config.confidence_margin)
    return [confident_disagreement(m, reference, confidence, config.uncertain_level)
            for m in masks]


# --- helpers ----------------------------------------------------------------------------

def _base_seed(rng) -> int:
    """A non-negative integer seed from ``rng`` (None: fresh entropy; Generator: one draw)."""
    if isinstance(rng, np.random.Generator):
        return int(rng.integers(0, 2**63 - 1))
    if rng is None:
        return int(np.random.SeedSequence().entropy)
    if isinstance(rng, (bool, np.bool_)) or not isinstance(rng, (int, np.integer)) or rng < 0:
        raise ValueError(f"rng must be None, an integer >= 0 or a numpy Generator; got {rng!r}")
    return int(rng)


def _stable_hash(text: str) -> int:
    """A small hash of ``text`` that does not change between runs (unlike ``hash``)."""
    import zlib

    return zlib.crc32(text.encode("utf-8"))


def _jsonable(obj):
    """Copy ``obj`` with numpy scalars made plain and non-finite floats made None."""
    from .files import json_ready

    return json_ready(obj)
