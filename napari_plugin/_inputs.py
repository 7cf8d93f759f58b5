"""From napari layers to the arguments of :func:`segcut.split`, and back to a Labels layer.

Plain functions on layers and arrays, without Qt, so the widget stays thin and the
conversions can be checked on their own.

Coordinates: a Shapes or Points layer may have its own scale and translation; its
vertices are taken to world coordinates and then into the image layer's pixel
(data) coordinates, so a box drawn over a scaled image still means the right pixels.
"""

from __future__ import annotations

import os

import numpy as np

import segcut

__all__ = ["PRIORS", "SEED_FEATURE", "ImageInput", "box_from_shapes", "image_input", "image_rng",
           "labels_seeds", "make_config", "one_line", "panel_choices", "points_seeds",
           "seeds_from_layer", "source_file"]

#: Choices of the prior box, and the ``SplitConfig.prior`` each one gives.
PRIORS = {
    "none": (),
    "border": ("border",),
    "center": ("center",),
    "border and center": ("border", "center"),
}

#: Feature column of a Points layer telling a point's seed kind
#: ("foreground"/"background", or 1/2); without it every point is foreground.
SEED_FEATURE = "seed"

_FOREGROUND_WORDS = {"1", "foreground", "fg"}
_BACKGROUND_WORDS = {"2", "background", "bg"}


class ImageInput:
    """The pixels of an image layer as :func:`segcut.split` takes them.

    Attributes
    ----------
    array : ndarray
        ``(M, N)``, ``(M, N, C)``, ``(P, M, N)`` or ``(P, M, N, C)``.
    channel_axis : int or None
        -1 for an RGB(A) layer, None for gray images and gray stacks.
    spatial_shape : tuple of int
        The shape of the mask (the array without its colour axis).
    """

    def __init__(self, array: np.ndarray, channel_axis: int | None):
        self.array = array
        self.channel_axis = channel_axis
        self.spatial_shape = array.shape[:-1] if channel_axis is not None else array.shape


def one_line(error: BaseException | str) -> str:
    """A message on one line: the first non-empty line of the error's text."""
    text = str(error).strip()
    if isinstance(error, BaseException) and not text:
        text = type(error).__name__
    first = next((line.strip() for line in text.splitlines() if line.strip()), text)
    return first


def image_input(layer) -> ImageInput:
    """The array and channel axis of a napari Image layer.

    Multiscale layers give their finest level; lazy arrays (dask, zarr) are read in
    full. RGB(A) layers keep their colour axis last.

    Raises
    ------
    ValueError
        When the layer is not 2-D or 3-D (plus colour), naming the layer.
    """
    data = layer.data[0] if getattr(layer, "multiscale", False) else layer.data
    array = np.asarray(data)
    rgb = bool(getattr(layer, "rgb", False))
    spatial = array.ndim - (1 if rgb else 0)
    if spatial not in (2, 3):
        raise ValueError(f"image layer {layer.name!r} has {spatial} spatial dimensions "
                         f"(shape {array.shape}); segcut splits 2-D images and 3-D stacks")
    return ImageInput(array, -1 if rgb else None)


def _to_image_pixels(points: np.ndarray, source_layer, image_layer) -> np.ndarray:
    """Coordinates of ``source_layer`` data taken into ``image_layer`` data coordinates."""
    points = np.atleast_2d(np.asarray(points, dtype=np.float64))
    if points.shape[1] < image_layer.ndim:
        raise ValueError(f"layer {source_layer.name!r} is {points.shape[1]}-D; image layer "
                         f"{image_layer.name!r} is {image_layer.ndim}-D")
    world = np.array([source_layer.data_to_world(p) for p in points])[:, -image_layer.ndim:]
    return np.array([image_layer.world_to_data(w) for w in world])


def box_from_shapes(shapes_layer, image_layer, spatial_shape) -> tuple[int, int, int, int]:
    """The box ``(x0, y0, x1, y1)`` of the last rectangle of a Shapes layer.

    The rectangle's corners are taken to the image's pixels; the box holds every pixel
    the rectangle touches (``x1``, ``y1`` exclusive, clipped to the image). For a 3-D
    stack the box applies to every plane.

    Raises
    ------
    ValueError
        When the layer holds no rectangle, or the rectangle misses the image.
    """
    kinds = list(shapes_layer.shape_type)
    rectangles = [k for k, kind in enumerate(kinds) if kind == "rectangle"]
    if not rectangles:
        raise ValueError(f"shapes layer {shapes_layer.name!r} holds no rectangle to use as the box")
    corners = _to_image_pixels(shapes_layer.data[rectangles[-1]], shapes_layer, image_layer)
    rows, cols = corners[:, -2], corners[:, -1]
    n_rows, n_cols = spatial_shape[-2], spatial_shape[-1]
    y0 = max(0, int(np.floor(rows.min() + 0.5)))
    x0 = max(0, int(np.floor(cols.min() + 0.5)))
    y1 = min(n_rows, int(np.floor(rows.max() + 0.5)) + 1)
    x1 = min(n_cols, int(np.floor(cols.max() + 0.5)) + 1)
    if x0 >= x1 or y0 >= y1:
        raise ValueError(f"the rectangle of shapes layer {shapes_layer.name!r} lies outside "
                         f"the image ({n_cols} x {n_rows} pixels)")
    return (x0, y0, x1, y1)


def labels_seeds(labels_layer, spatial_shape) -> np.ndarray:
    """Seeds from a Labels layer: 1 foreground, 2 background, 0 unknown.

    Raises
    ------
    ValueError
        When the layer's shape differs from the image's or it holds other labels.
    """
    data = np.asarray(labels_layer.data)
    if data.shape != tuple(spatial_shape):
        raise ValueError(f"seeds layer {labels_layer.name!r} has shape {data.shape}; the image "
                         f"needs {tuple(spatial_shape)}")
    values = np.unique(data)
    extra = [int(v) for v in values if v not in (0, 1, 2)]
    if extra:
        raise ValueError(f"seeds layer {labels_layer.name!r} holds label(s) {extra[:5]}; use "
                         "1 for foreground, 2 for background and 0 for unknown")
    return data.astype(np.uint8)


def _point_kinds(points_layer) -> np.ndarray:
    """Seed kind of every point: 1 foreground, 2 background."""
    n = len(points_layer.data)
    features = getattr(points_layer, "features", None)
    if features is None or SEED_FEATURE not in getattr(features, "columns", ()):
        return np.ones(n, dtype=np.uint8)
    kinds = np.empty(n, dtype=np.uint8)
    for k, value in enumerate(features[SEED_FEATURE]):
        word = str(value).strip().lower()
        if word in _FOREGROUND_WORDS:
            kinds[k] = 1
        elif word in _BACKGROUND_WORDS:
            kinds[k] = 2
        else:
            raise ValueError(f"points layer {points_layer.name!r}: point {k} has {SEED_FEATURE} "
                             f"{value!r}; use foreground or background")
    return kinds


def points_seeds(points_layer, image_layer, spatial_shape) -> np.ndarray:
    """Seeds from a Points layer: each point marks the pixel under it.

    A point is background when its ``seed`` feature says ``background`` (or 2), and
    foreground otherwise. Points outside the image are ignored.
    """
    seeds = np.zeros(spatial_shape, dtype=np.uint8)
    if len(points_layer.data) == 0:
        return seeds
    kinds = _point_kinds(points_layer)
    pixels = np.floor(_to_image_pixels(points_layer.data, points_layer, image_layer) + 0.5)
    pixels = pixels.astype(np.int64)[:, -len(spatial_shape):]
    inside = np.all((pixels >= 0) & (pixels < np.array(spatial_shape)), axis=1)
    for pixel, kind in zip(pixels[inside], kinds[inside]):
        seeds[tuple(pixel)] = kind
    return seeds


def seeds_from_layer(layer, image_layer, spatial_shape) -> np.ndarray | None:
    """Seeds from a Labels or Points layer (None for no layer)."""
    if layer is None:
        return None
    from napari.layers import Labels, Points

    if isinstance(layer, Labels):
        return labels_seeds(layer, spatial_shape)
    if isinstance(layer, Points):
        return points_seeds(layer, image_layer, spatial_shape)
    raise ValueError(f"layer {layer.name!r} is not a Labels or Points layer; seeds come from "
                     "one of those")


def source_file(layer) -> str | None:
    """The file an image layer was read from, when napari or segcut recorded one."""
    path = getattr(getattr(layer, "source", None), "path", None)
    if not path:
        meta = layer.metadata.get("segcut") if isinstance(layer.metadata, dict) else None
        path = meta.get("source") if isinstance(meta, dict) else None
    return str(path) if path and os.path.isfile(path) else None


def image_rng(layer, seed: int) -> int:
    """The random seed a split of this layer uses.

    For a layer read from a file it is the command line's per-image seed (from the
    run seed and the file's SHA-256, :func:`segcut.batch.image_seed`), so the viewer
    and ``segcut split`` give the same mask for the same file and settings; for any
    other layer it is ``seed`` itself.
    """
    path = source_file(layer)
    if path is None:
        return int(seed)
    from segcut.batch import hash_file, image_seed

    return image_seed(int(seed), hash_file(path))


def make_config(*, base: segcut.SplitConfig | None = None, prior: str = "none", box=None,
                n_superpixels: int = 0, affinity: str = "colour", prior_strength: float = 2.0,
                fill_holes: bool = False, min_region_size: int = 0,
                seed: int = 0, background_radius: int = -1) -> segcut.SplitConfig:
    """The :class:`segcut.SplitConfig` of the widget's choices.

    ``base`` gives every option the panel does not show (defaults when None), and its
    box when ``box`` is None; ``n_superpixels=0`` lets segcut choose from the image size;
    ``background_radius=-1`` lets segcut decide whether to flatten the background (0:
    never, a positive number: always, with that half-width).

    Examples
    --------
    >>> make_config(prior="border and center", n_superpixels=300).prior
    ('border', 'center')
    """
    if prior not in PRIORS:
        raise ValueError(f"prior {prior!r} is not one of {', '.join(PRIORS)}")
    base = segcut.SplitConfig() if base is None else base
    return base.replace(
        prior=PRIORS[prior], box=base.box if box is None else tuple(int(v) for v in box),
        n_superpixels=int(n_superpixels) or None, affinity=affinity,
        prior_strength=float(prior_strength), fill_holes=bool(fill_holes),
        min_region_size=int(min_region_size), seed=int(seed),
        background_radius=None if int(background_radius) < 0 else int(background_radius))


def panel_choices(config: segcut.SplitConfig) -> dict:
    """The widget's choices that give ``config`` back through :func:`make_config`.

    Examples
    --------
    >>> cfg = segcut.SplitConfig(prior=("center", "border"), n_superpixels=400, seed=7,
    ...                          background_radius=12)
    >>> make_config(base=cfg, **panel_choices(cfg)) == cfg.replace(prior=("border", "center"))
    True
    """
    wanted = set(config.prior)
    prior = next((name for name, value in PRIORS.items() if set(value) == wanted), None)
    if prior is None:
        raise ValueError(f"prior {config.prior!r} has no choice in the panel")
    return {"prior": prior, "n_superpixels": config.n_superpixels or 0,
            "affinity": config.affinity, "prior_strength": config.prior_strength,
            "fill_holes": config.fill_holes, "min_region_size": config.min_region_size,
            "seed": config.seed,
            "background_radius": -1 if config.background_radius is None
            else config.background_radius}
