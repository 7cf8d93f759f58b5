"""Signed edge weights between neighbouring regions: named, documented models.

A model turns two neighbouring regions into a *distance* ``d_ij >= 0``; the
weight is then signed around a data-driven threshold ``t``, the
``threshold_quantile`` quantile of all neighbour distances of the image:

``w_ij = b_ij * clip((d_ij - t) / t, -1, 1)``

with ``b_ij`` the shared border length. Similar neighbours (``d < t``) get negative
weights and attract (cutting them lowers the cut value); dissimilar ones repel.
The weight is bounded by the border length, so one strong edge never outweighs a
long border.

Models are registered by name (:func:`register_affinity_model`); other packages
add theirs through the ``segcut.affinity_models`` entry-point group. A model
declares its sign shape (``"linear"`` or ``"gaussian"``, see :func:`signed_weights`),
the options its distance takes (with defaults; set through
``SplitConfig.affinity_options``) and whether it can measure regions that do not
touch (``long_range``: then the k-nearest-neighbour edges of ``n_neighbors`` use it
too; otherwise they use the mean-colour distance). :func:`weigh_pairs` is the whole
weighing stage of an image.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from ._plugins import check_new_name, first_doc_line, load_plugins
from .regions import RegionAdjacency, RegionFeatures

__all__ = [
    "AffinityModel",
    "ENTRY_POINT_GROUP",
    "available_affinity_models",
    "get_affinity_model",
    "register_affinity_model",
    "SHAPES",
    "signed_weights",
    "edge_weights",
    "knn_edges",
    "weigh_pairs",
]

#: Sign shapes of :func:`signed_weights`.
SHAPES = ("linear", "gaussian")

ENTRY_POINT_GROUP = "segcut.affinity_models"


@dataclass(frozen=True)
class AffinityModel:
    """A named region distance.

    Attributes
    ----------
    name : str
    distance : callable
        ``distance(features, adjacency, **options) -> (m,) float ndarray`` of
        non-negative distances, one per pair of ``adjacency``.
    description : str
    shape : {"linear", "gaussian"}
        How distances become signed weights (:func:`signed_weights`).
    options : tuple of (name, default) pairs
        Keyword options of ``distance`` and their defaults (a dict is accepted and
        stored sorted); a config sets them with ``affinity_options``.
    long_range : bool
        ``distance`` reads region features only (not the border statistics
        ``adjacency.border`` and ``adjacency.contrast``), so it can measure pairs
        that do not touch: the k-nearest-neighbour edges then use it.
    """

    name: str
    distance: Callable
    description: str = ""
    shape: str = "linear"
    options: tuple = ()
    long_range: bool = False

    def __post_init__(self):
        if self.shape not in SHAPES:
            raise ValueError(f"affinity model {self.name!r}: shape must be one of "
                             f"{', '.join(SHAPES)}; got {self.shape!r}")
        options = self.options.items() if isinstance(self.options, dict) else self.options
        options = tuple(sorted((str(k), v) for k, v in options))
        for key, default in options:
            if not isinstance(default, (bool, int, float, str)):
                raise TypeError(f"affinity model {self.name!r}: option {key!r} needs a bool, "
                                f"number or text default; got {default!r}")
        object.__setattr__(self, "options", options)
        if not isinstance(self.long_range, bool):
            raise TypeError(f"affinity model {self.name!r}: long_range must be True or False")

    def check_options(self, options) -> dict:
        """The model's options with ``options`` (pairs or a dict) applied; ValueError for
        an unknown name or a value of another type than the default."""
        given = dict(options.items() if isinstance(options, dict) else options)
        defaults = dict(self.options)
        unknown = sorted(set(given) - set(defaults))
        if unknown:
            known = ", ".join(defaults) or "none"
            raise ValueError(f"affinity model {self.name!r} has no option(s) "
                             f"{', '.join(unknown)}; its options: {known}")
        for key, value in given.items():
            default = defaults[key]
            kinds = (int, float) if isinstance(default, float) else type(default)
            if isinstance(value, bool) != isinstance(default, bool) \
                    or not isinstance(value, kinds):
                raise ValueError(f"affinity option {key!r} must be a {type(default).__name__} "
                                 f"like its default {default!r}; got {value!r}")
        return {**defaults, **given}


_MODELS: dict[str, AffinityModel] = {}
_LOADED = False


def register_affinity_model(name: str, distance: Callable, *, description: str = "",
                            shape: str = "linear", options=(), long_range: bool = False,
                            replace_existing: bool = False) -> AffinityModel:
    """Register a region distance under ``name`` (see :class:`AffinityModel`).

    Examples
    --------
    >>> def lightness(features, adjacency, *, scale=1.0):
    ...     return scale * abs(features.mean[adjacency.rows, 0] - features.mean[adjacency.cols, 0])
    >>> model = register_affinity_model("lightness_demo", lightness, options={"scale": 1.0},
    ...                                 long_range=True, description="lightness difference")
    >>> model.shape, model.options, model.check_options({"scale": 2})
    ('linear', (('scale', 1.0),), {'scale': 2})
    >>> del _MODELS["lightness_demo"]
    """
    check_new_name(_MODELS, name, "affinity model", replace_existing=replace_existing)
    description = description or first_doc_line(distance)
    model = AffinityModel(name=name, distance=distance, description=description, shape=shape,
                          options=options, long_range=long_range)
    _MODELS[name] = model
    return model


def available_affinity_models() -> dict[str, AffinityModel]:
    """All registered affinity models by name, plugins included.

    Examples
    --------
    >>> {"colour", "contrast", "histogram", "mixed"} <= set(available_affinity_models())
    True
    """
    global _LOADED
    if not _LOADED:
        _LOADED = True
        load_plugins(ENTRY_POINT_GROUP, _MODELS, AffinityModel, register_affinity_model)
    return dict(sorted(_MODELS.items()))


def get_affinity_model(name: str) -> AffinityModel:
    """The model called ``name``; ValueError listing the known ones otherwise."""
    models = available_affinity_models()
    if name not in models:
        raise ValueError(f"unknown affinity model {name!r}; choose one of {', '.join(models)}")
    return models[name]


def signed_weights(distance, border, *, quantile: float = 0.85, shape: str = "linear",
                   threshold: float | None = None):
    """Signed weights from distances around their ``quantile`` threshold.

    Parameters
    ----------
    distance : (m,) float ndarray
        Non-negative distances.
    border : (m,) float ndarray
        Shared border lengths ``b``.
    quantile : float
        The threshold ``t`` is this quantile of ``distance``.
    threshold : float, optional
        This ``t`` instead of the quantile.
    shape : {"linear", "gaussian"}
        ``linear``: ``w = b * clip((d - t) / t, -1, 1)``.
        ``gaussian``: ``w = b * (1 - 2 exp(-ln 2 * (d / t)^2))`` (-b at d = 0,
        0 at d = t, towards +b far away).

    Returns
    -------
    weights : (m,) float64 ndarray
    threshold : float

    Examples
    --------
    >>> w, t = signed_weights(np.array([0.0, 1.0, 2.0, 4.0]), np.ones(4), quantile=0.5)
    >>> t, w
    (1.5, array([-1.        , -0.33333333,  0.33333333,  1.        ]))
    """
    distance = np.asarray(distance, dtype=np.float64)
    border = np.asarray(border, dtype=np.float64)
    if distance.size == 0:
        return np.zeros(0), 0.0
    t = float(np.quantile(distance, quantile)) if threshold is None else float(threshold)
    if threshold is None and (not t > 1e-9 * float(distance.max()) or t == 0.0):
        # (nearly) all neighbours identical: the largest distance separates instead
        t = float(distance.max()) if distance.max() > 0 else 1.0
    r = distance / t
    if shape == "linear":
        s = np.clip(r - 1.0, -1.0, 1.0)
    elif shape == "gaussian":
        s = 1.0 - 2.0 * np.exp(-np.log(2.0) * r * r)
    else:
        raise ValueError(f"shape must be 'linear' or 'gaussian'; got {shape!r}")
    return border * s, t


def _distances(spec: AffinityModel, features, pairs, options) -> np.ndarray:
    d = np.asarray(spec.distance(features, pairs, **spec.check_options(options)),
                   dtype=np.float64)
    if d.shape != (pairs.n_pairs,) or not np.all(np.isfinite(d)) or np.any(d < 0):
        raise RuntimeError(f"affinity model {spec.name!r} returned invalid distances")
    return d


def edge_weights(model: str, features: RegionFeatures, adjacency: RegionAdjacency, *,
                 quantile: float = 0.85, options=()) -> tuple[np.ndarray, float]:
    """Signed weights of the neighbour pairs under a named model (see module notes).

    ``options`` (a dict or pairs) set the model's own options; the model's declared
    ``shape`` signs the distances.
    """
    spec = get_affinity_model(model)
    d = _distances(spec, features, adjacency, options)
    return signed_weights(d, adjacency.border, quantile=quantile, shape=spec.shape)


def weigh_pairs(features: RegionFeatures, adjacency: RegionAdjacency, config):
    """All signed pair weights of an image graph: neighbours, then k-nearest neighbours.

    Neighbour pairs get ``config.smoothness`` times their :func:`edge_weights`. With
    ``config.n_neighbors > 0`` each region is also joined to its k nearest regions in
    mean colour (pairs that touch are left out) by an attractive edge
    ``smoothness * median border * min(0, s(d / t))``, with ``s`` the model's sign
    shape at threshold 1: ``d`` is the model's distance and ``t`` the neighbour
    threshold when the model is ``long_range``, else the mean-colour distance and its
    ``threshold_quantile`` quantile over the neighbour pairs.

    Returns
    -------
    rows, cols : (m,) int64 ndarray
    weights : (m,) float64 ndarray
    threshold : float
        The neighbour threshold ``t`` of :func:`edge_weights`.
    """
    spec = get_affinity_model(config.affinity)
    options = getattr(config, "affinity_options", ())
    rows, cols = adjacency.rows, adjacency.cols
    weights, threshold = edge_weights(config.affinity, features, adjacency,
                                      quantile=config.threshold_quantile, options=options)
    weights = config.smoothness * weights
    if config.n_neighbors <= 0:
        return rows, cols, weights, threshold
    n = features.n_regions
    kr, kc, kd = knn_edges(features, config.n_neighbors, exclude=rows * n + cols)
    shape, t = "linear", 1.0
    if rows.size:
        t = float(np.quantile(np.sqrt(((features.mean[rows] - features.mean[cols]) ** 2).sum(1)),
                              config.threshold_quantile))
    if spec.long_range:
        pairs = RegionAdjacency(rows=kr, cols=kc, border=np.full(kr.size, np.nan),
                                contrast=np.full(kr.size, np.nan))
        kd, t, shape = _distances(spec, features, pairs, options), threshold, spec.shape
    scale = float(np.median(adjacency.border)) if rows.size else 1.0
    attract = np.minimum(signed_weights(kd / max(t, 1e-12), np.ones(kd.size), shape=shape,
                                        threshold=1.0)[0], 0.0)
    return (np.concatenate([rows, kr]), np.concatenate([cols, kc]),
            np.concatenate([weights, config.smoothness * scale * attract]), threshold)


def knn_edges(features: RegionFeatures, k: int, *, exclude=None):
    """Pairs of regions that are among each other's k nearest in mean colour.

    Returns ``(rows, cols, distance)`` with ``rows < cols``, each pair once; pairs
    in ``exclude`` (a set of ``rows * n + cols`` keys) are left out.
    """
    from scipy.spatial import cKDTree

    n = features.n_regions
    if k <= 0 or n < 2:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0)
    tree = cKDTree(features.mean)
    dist, idx = tree.query(features.mean, k=min(k + 1, n))
    rows = np.repeat(np.arange(n), idx.shape[1])
    cols = idx.ravel()
    d = dist.ravel()
    keep = rows != cols
    a = np.minimum(rows[keep], cols[keep])
    b = np.maximum(rows[keep], cols[keep])
    key, first = np.unique(a * n + b, return_index=True)
    d = d[keep][first]
    if exclude is not None and len(exclude):
        out = ~np.isin(key, exclude)
        key, d = key[out], d[out]
    return key // n, key % n, d


# -- built-in models -----------------------------------------------------------------

def _colour_distance(features: RegionFeatures, adjacency: RegionAdjacency):
    """Euclidean distance of the mean CIELAB colours (linear sign)."""
    diff = features.mean[adjacency.rows] - features.mean[adjacency.cols]
    return np.sqrt(np.sum(diff * diff, axis=1))


def _contrast_distance(features: RegionFeatures, adjacency: RegionAdjacency):
    """Mean colour difference across the shared border (boundary contrast)."""
    return adjacency.contrast


def _histogram_distance(features: RegionFeatures, adjacency: RegionAdjacency):
    """Chi-square distance of the colour-word histograms."""
    p = features.histogram[adjacency.rows]
    q = features.histogram[adjacency.cols]
    s = p + q
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(s > 0, (p - q) ** 2 / np.where(s > 0, s, 1.0), 0.0)
    return 0.5 * terms.sum(axis=1)


def _mixed_distance(features: RegionFeatures, adjacency: RegionAdjacency):
    """Mean of colour distance and boundary contrast, each over its own median."""
    a = _colour_distance(features, adjacency)
    b = _contrast_distance(features, adjacency)
    sa = float(np.median(a)) if a.size else 1.0
    sb = float(np.median(b)) if b.size else 1.0
    return 0.5 * (a / (sa if sa > 0 else 1.0) + b / (sb if sb > 0 else 1.0))


register_affinity_model("colour", _colour_distance, long_range=True)
register_affinity_model(
    "colour_gaussian", _colour_distance, shape="gaussian", long_range=True,
    description="Euclidean distance of the mean CIELAB colours (gaussian sign)")
register_affinity_model("contrast", _contrast_distance)
register_affinity_model("histogram", _histogram_distance, long_range=True)
register_affinity_model("mixed", _mixed_distance)
