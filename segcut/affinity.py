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
add theirs through the ``segcut.affinity_models`` entry-point group.
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
    "signed_weights",
    "edge_weights",
    "knn_edges",
]

ENTRY_POINT_GROUP = "segcut.affinity_models"


@dataclass(frozen=True)
class AffinityModel:
    """A named region distance.

    Attributes
    ----------
    name : str
    distance : callable
        ``distance(features, adjacency) -> (m,) float ndarray`` of non-negative
        distances, one per neighbour pair of ``adjacency``.
    description : str
    """

    name: str
    distance: Callable
    description: str = ""


_MODELS: dict[str, AffinityModel] = {}
_LOADED = False


def register_affinity_model(name: str, distance: Callable, *, description: str = "",
                            replace_existing: bool = False) -> AffinityModel:
    """Register a region distance under ``name`` (see :class:`AffinityModel`)."""
    check_new_name(_MODELS, name, "affinity model", replace_existing=replace_existing)
    description = description or first_doc_line(distance)
    model = AffinityModel(name=name, distance=distance, description=description)
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


def signed_weights(distance, border, *, quantile: float = 0.85, shape: str = "linear"):
    """Signed weights from distances around their ``quantile`` threshold.

    Parameters
    ----------
    distance : (m,) float ndarray
        Non-negative distances.
    border : (m,) float ndarray
        Shared border lengths ``b``.
    quantile : float
        The threshold ``t`` is this quantile of ``distance``.
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
    t = float(np.quantile(distance, quantile))
    if not t > 1e-9 * float(distance.max()) or t == 0.0:
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


def edge_weights(model: str, features: RegionFeatures, adjacency: RegionAdjacency, *,
                 quantile: float = 0.85) -> tuple[np.ndarray, float]:
    """Signed weights of the neighbour pairs under a named model (see module notes)."""
    spec = get_affinity_model(model)
    d = np.asarray(spec.distance(features, adjacency), dtype=np.float64)
    if d.shape != (adjacency.n_pairs,) or not np.all(np.isfinite(d)) or np.any(d < 0):
        raise RuntimeError(f"affinity model {model!r} returned invalid distances")
    shape = "gaussian" if model.endswith("_gaussian") else "linear"
    return signed_weights(d, adjacency.border, quantile=quantile, shape=shape)


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


register_affinity_model("colour", _colour_distance)
register_affinity_model(
    "colour_gaussian", _colour_distance,
    description="Euclidean distance of the mean CIELAB colours (gaussian sign)")
register_affinity_model("contrast", _contrast_distance)
register_affinity_model("histogram", _histogram_distance)
register_affinity_model("mixed", _mixed_distance)
