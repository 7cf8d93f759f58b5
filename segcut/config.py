"""The settings of one image split: a frozen dataclass, TOML in and out, a stable hash.

:class:`SplitConfig` holds every option of :func:`segcut.pipeline.split`. It is
written as TOML with one table per stage (``[background]``, ``[superpixels]``, ``[affinity]``,
``[prior]``, ``[appearance]``, ``[refine]``, ``[solver]``, ``[confidence]``,
``[cleanup]``) plus the top-level ``seed``; unknown tables or keys are errors, so a
typo never goes unnoticed.
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
import os
import tomllib
from dataclasses import dataclass, fields

from .errors import ConfigError

__all__ = ["SplitConfig", "load_config", "SECTIONS", "check_registered_names"]

#: Table of the TOML file each field lives in ("" = top level).
SECTIONS = {
    "background_radius": "background",
    "n_superpixels": "superpixels",
    "compactness": "superpixels",
    "pixel_grid_max_pixels": "superpixels",
    "max_graph_pixels": "superpixels",
    "sigma": "superpixels",
    "affinity": "affinity",
    "affinity_options": "affinity",
    "threshold_quantile": "affinity",
    "smoothness": "affinity",
    "n_neighbors": "affinity",
    "prior": "prior",
    "box": "prior",
    "prior_strength": "prior",
    "border_width": "prior",
    "center_fraction": "prior",
    "colour_model": "appearance",
    "n_colour_words": "appearance",
    "model_rounds": "appearance",
    "model_strength": "appearance",
    "prior_model_strength": "appearance",
    "start_clusters": "appearance",
    "model_starts": "appearance",
    "refine": "refine",
    "refine_band": "refine",
    "refine_smoothness": "refine",
    "method": "solver",
    "time_limit": "solver",
    "max_moves": "solver",
    "confidence": "confidence",
    "confidence_margin": "confidence",
    "uncertain_level": "confidence",
    "fill_holes": "cleanup",
    "min_region_size": "cleanup",
    "seed": "",
}


@dataclass(frozen=True)
class SplitConfig:
    """Every option of one image split, with defaults that suit photographs.

    Parameters
    ----------
    background_radius : int or None
        Flattening of an uneven background (:mod:`segcut.background`): None decides
        per image (flatten when it turns the image into two clearly separated
        classes), 0 never flattens, a positive integer always flattens with a square
        of this half-width in pixels (larger than the objects' radius).
    n_superpixels : int or None
        Target number of SLIC superpixels; None chooses it from the image size (twice
        the square root of the pixel count, at least 100 and at most 6000; 1024 for
        512x512).
    compactness : float
        SLIC compactness (colour against space, in CIELAB units).
    pixel_grid_max_pixels : int
        Images with at most this many pixels (voxels) use every pixel as a vertex
        (a 4-connected / 6-connected grid graph) instead of superpixels.
    max_graph_pixels : int or None
        2-D images with more pixels than this take the large-image path
        (:mod:`segcut.large`): the superpixel graph is built and solved on an
        area-averaged copy reduced by the smallest integer factor that brings it
        to at most this many pixels, and the pixel refinement runs at full
        resolution in tiles, only near the boundary, so memory stays bounded.
        None: always the full-resolution path.
    sigma : float
        Gaussian smoothing (pixels) before SLIC, so pixel noise does not shatter the
        superpixels.
    affinity : str
        Name of the affinity model turning region distances into signed weights
        (see :func:`segcut.affinity.available_affinity_models`).
    affinity_options : tuple of (name, value) pairs
        Options of the affinity model (those it declares; a dict is accepted and
        stored sorted). In TOML an inline table: ``affinity_options = {scale = 2.0}``.
    threshold_quantile : float
        Quantile of the neighbour distances where an edge changes sign (0 < q < 1):
        closer pairs attract, farther pairs repel.
    smoothness : float
        Multiplier of the neighbour edges against the appearance (terminal) edges.
    n_neighbors : int
        Long-range attractive edges to the k nearest regions in colour space (0 = none).
    prior : tuple of str
        Names of registered priors (see :func:`segcut.priors.available_priors`):
        built in, ``"border"`` (the frame is background) and ``"center"`` (a central
        box is foreground); empty for no prior.
    box : (x0, y0, x1, y1) tuple of int, or None
        A box known to contain the foreground (pixels; x is the column). Outside
        it is known background (hard background seeds); its central part
        (``center_fraction`` of each side) is the first foreground sample of the
        colour models, which are then re-estimated from the current split.
    prior_strength : float
        Weight per pixel of the prior terminal edges, relative to appearance edges.
    border_width : float
        Width of the frame band used by the border prior, as a fraction of the
        shorter image side.
    center_fraction : float
        Side of the central box of the center prior, as a fraction of each image side
        (and of the central part of a ``box``, as a fraction of each box side).
    colour_model : bool
        Learn per-image colour models for foreground and background and add their
        log-likelihood ratios as terminal edges.
    n_colour_words : int
        Number of colour words (k-means centres in CIELAB) of the colour models.
    model_rounds : int
        Times the colour models are re-estimated from the current split.
    model_strength : float
        Multiplier of the colour-model terminal edges (with no prior; and of the
        pixel refinement's appearance edges).
    prior_model_strength : float
        Multiplier of the colour-model terminal edges of the superpixel graph when a
        prior, a box or seeds orient it. The models then start from samples the
        user only roughly placed (a frame band, a box), so they count for less
        against the prior and the neighbour edges. Measured on the dev sets (one
        run, mean IoU, model strength 1.0 / 0.35): horses-dev border+center
        0.724 / 0.761, tight box 0.785 / 0.789, nuclei-dev border 0.714 / 0.722;
        0.25-0.5 gave 0.755-0.762 on border+center.
    start_clusters : int
        With no prior and no seeds, the region colours are grouped in this many
        clusters and the clusters rarer on the image frame than in the image start
        as foreground (0 or 1: a 2-means split oriented by the border rule).
    model_starts : int
        With no prior and no seeds, the colour-model rounds run from this many
        distinct starts (the frame-shy clusters above, the regions inside the
        central box of ``center_fraction``, a 2-means split, frame-shy clusters
        of more colour words) and the end point whose foreground avoids
        the image frame most (share of the frame pixels over share of the area) is
        kept; 1 runs from the first start only (see :func:`segcut.pipeline.split`,
        Notes).
    refine : bool
        Refine the boundary at pixel level: a second max-cut on the pixels near the
        boundary of the superpixel split (see :mod:`segcut.refine`).
    refine_band : int or None
        Half-width in pixels of that band; None chooses half the mean superpixel
        side (at least 2).
    refine_smoothness : float
        Weight of a neighbour edge between equal pixels in the refinement graph,
        against the colour-model evidence of one pixel.
    method : str
        A registered max-cut method (see :func:`segcut.maxcut.available_methods`);
        ``"auto"``: the SDP bound and tabu search from the colour-model split and a
        Goemans-Williamson rounding (:mod:`segcut.maxcut.auto`).
    time_limit : float or None
        Seconds the solver may use per solve (None: the iteration budget decides).
    max_moves : int or None
        Deterministic move budget of search methods that take one (None: 20 moves
        per vertex).
    confidence : bool
        Measure how sure the split is, pixel by pixel (``SplitResult.confidence``
        and ``uncertain_fraction``; see :mod:`segcut.confidence`).
    confidence_margin : float
        Share of a region's edge weight (``sum |w|`` of its graph edges): a region
        whose cheapest move to the other side (with the regions that follow it)
        costs this much of it or more has confidence 1; a free move has 0.5.
    uncertain_level : float
        Pixels with a confidence below this count as uncertain in
        ``uncertain_fraction``.
    fill_holes : bool
        Fill background holes enclosed by the foreground after solving.
    min_region_size : int
        Drop foreground or background specks with fewer pixels than this (0 = keep).
    seed : int
        Seed of everything random (k-means start, search order).

    Examples
    --------
    >>> cfg = SplitConfig(prior=("border", "center"))
    >>> SplitConfig.from_toml(cfg.to_toml()) == cfg
    True
    >>> cfg.replace(n_superpixels=500).n_superpixels
    500
    """

    background_radius: int | None = None
    n_superpixels: int | None = None
    compactness: float = 20.0
    pixel_grid_max_pixels: int = 1024
    max_graph_pixels: int | None = 3_000_000
    sigma: float = 1.0
    affinity: str = "colour"
    affinity_options: tuple = ()
    threshold_quantile: float = 0.95
    smoothness: float = 4.0
    n_neighbors: int = 0
    prior: tuple = ()
    box: tuple | None = None
    prior_strength: float = 2.0
    border_width: float = 0.08
    center_fraction: float = 0.2
    colour_model: bool = True
    n_colour_words: int = 24
    model_rounds: int = 3
    model_strength: float = 1.0
    prior_model_strength: float = 0.35
    start_clusters: int = 4
    model_starts: int = 2
    refine: bool = True
    refine_band: int | None = None
    refine_smoothness: float = 8.0
    method: str = "auto"
    time_limit: float | None = None
    max_moves: int | None = None
    confidence: bool = True
    confidence_margin: float = 1.0
    uncertain_level: float = 0.9
    fill_holes: bool = False
    min_region_size: int = 0
    seed: int = 0

    def __post_init__(self):
        _validate(self)

    # -- construction -------------------------------------------------------------
    @classmethod
    def from_toml(cls, source) -> "SplitConfig":
        """Read a config from TOML text, or from a file when ``source`` is a path.

        Parameters
        ----------
        source : str or os.PathLike
            TOML text (anything containing a newline, ``=`` or ``[``), or a path.

        Raises
        ------
        ConfigError
            Naming the file (when read from one) and the bad table, key or value.
        """
        path = None
        if isinstance(source, os.PathLike) or (
            isinstance(source, str) and not any(c in source for c in "\n=[")
        ):
            path = os.fspath(source)
            try:
                with open(path, "rb") as fh:
                    text = fh.read().decode("utf-8")
            except FileNotFoundError:
                raise ConfigError("config file not found", path=path) from None
            except (OSError, UnicodeDecodeError) as err:
                raise ConfigError(f"cannot read config file: {err}", path=path) from None
        else:
            text = source
        try:
            data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as err:
            raise ConfigError(f"not valid TOML: {err}", path=path) from None
        return cls.from_dict(data, path=path)

    @classmethod
    def from_dict(cls, data: dict, *, path=None) -> "SplitConfig":
        """Build a config from the nested dict of a parsed TOML file."""
        values = {}
        by_section: dict[str, set] = {}
        for name, section in SECTIONS.items():
            by_section.setdefault(section, set()).add(name)
        for key, value in data.items():
            if isinstance(value, dict):
                if key not in by_section or key == "":
                    known = ", ".join(f"[{s}]" for s in sorted(by_section) if s)
                    raise ConfigError(f"unknown table [{key}]; known tables: {known}", path=path)
                for sub, subvalue in value.items():
                    if sub not in by_section[key]:
                        raise ConfigError(
                            f"unknown key {sub!r} in [{key}]; known keys: "
                            f"{', '.join(sorted(by_section[key]))}", path=path)
                    values[sub] = subvalue
            else:
                if key not in by_section[""]:
                    raise ConfigError(
                        f"unknown top-level key {key!r}; known: {', '.join(sorted(by_section['']))}"
                        " (other keys belong in their table)", path=path)
                values[key] = value
        if "prior" in values:
            prior = values["prior"]
            if isinstance(prior, str):
                prior = [p for p in prior.split(",") if p.strip()]
            if not isinstance(prior, list):
                raise ConfigError(f"[prior] prior must be a list of names; got {prior!r}",
                                  path=path)
            values["prior"] = tuple(p.strip() if isinstance(p, str) else p for p in prior)
        if "box" in values:
            box = values["box"]
            values["box"] = tuple(box) if isinstance(box, list) else box
        if isinstance(values.get("affinity_options"), dict):
            values["affinity_options"] = tuple(sorted(values["affinity_options"].items()))
        try:
            return cls(**values)
        except (TypeError, ValueError) as err:
            raise ConfigError(str(err), path=path) from None

    def replace(self, **changes) -> "SplitConfig":
        """A copy with some fields changed (validated like the constructor)."""
        unknown = sorted(set(changes) - {f.name for f in fields(self)})
        if unknown:
            raise TypeError(f"SplitConfig has no field(s) {', '.join(unknown)}")
        if "prior" in changes:
            changes["prior"] = _as_prior(changes["prior"])
        if "box" in changes and changes["box"] is not None:
            changes["box"] = tuple(changes["box"])
        if isinstance(changes.get("affinity_options"), dict):
            changes["affinity_options"] = tuple(sorted(changes["affinity_options"].items()))
        return dataclasses.replace(self, **changes)

    # -- output -------------------------------------------------------------------
    def to_dict(self) -> dict:
        """Plain field values (tuples as lists), for JSON records."""
        out = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name == "affinity_options":
                value = dict(value)
            out[f.name] = list(value) if isinstance(value, tuple) else value
        return out

    def to_toml(self) -> str:
        """Stable TOML text: fixed table and key order; unset (None) options as comments."""
        lines = [f"seed = {_toml_value(self.seed)}"]
        sections = []
        for name, section in SECTIONS.items():
            if section and section not in sections:
                sections.append(section)
        for section in sections:
            lines.append("")
            lines.append(f"[{section}]")
            for name, sec in SECTIONS.items():
                if sec != section:
                    continue
                value = getattr(self, name)
                if value is None:
                    lines.append(f"# {name} is not set")
                elif name == "affinity_options":
                    if value:  # none: no line, so configs without options keep their hash
                        pairs = ", ".join(f"{k} = {_toml_value(v)}" for k, v in value)
                        lines.append(f"{name} = {{{pairs}}}")
                else:
                    lines.append(f"{name} = {_toml_value(value)}")
        return "\n".join(lines) + "\n"

    def config_hash(self) -> str:
        """16 hex digits of SHA-256 over the canonical TOML and the segcut version.

        Equal configs give equal hashes on every machine; a new segcut version gives a
        new hash (its results may differ).
        """
        from . import __version__

        text = f"segcut {__version__}\n{self.to_toml()}"
        return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def load_config(path) -> SplitConfig:
    """Read a :class:`SplitConfig` from a TOML file (ConfigError names file and key)."""
    return SplitConfig.from_toml(os.fspath(path) if not isinstance(path, os.PathLike) else path)


# -- validation ---------------------------------------------------------------------

def _as_prior(prior) -> tuple:
    if prior is None:
        return ()
    if isinstance(prior, str):
        prior = [p.strip() for p in prior.split(",") if p.strip()]
        if prior == ["none"]:
            return ()
    return tuple(prior)


def _validate(cfg: SplitConfig) -> None:
    def number(name, *, lo=None, hi=None, integer=False, allow_none=False, lo_open=False):
        value = getattr(cfg, name)
        if value is None and allow_none:
            return
        kind = "an integer" if integer else "a number"
        ok_type = isinstance(value, int) if integer else isinstance(value, (int, float))
        if isinstance(value, bool) or not ok_type or (not integer and not math.isfinite(value)):
            raise ValueError(f"{name} must be {kind}; got {value!r}")
        if lo is not None and (value <= lo if lo_open else value < lo):
            raise ValueError(f"{name} must be {'>' if lo_open else '>='} {lo}; got {value!r}")
        if hi is not None and value > hi:
            raise ValueError(f"{name} must be <= {hi}; got {value!r}")
        if not integer:  # 10 and 10.0 are the same setting: keep one spelling (stable hash)
            object.__setattr__(cfg, name, float(value))

    number("background_radius", lo=0, integer=True, allow_none=True)
    number("n_superpixels", lo=1, integer=True, allow_none=True)
    number("compactness", lo=0, lo_open=True)
    number("pixel_grid_max_pixels", lo=0, integer=True)
    number("max_graph_pixels", lo=4, integer=True, allow_none=True)
    number("sigma", lo=0)
    number("threshold_quantile", lo=0, hi=1, lo_open=True)
    if cfg.threshold_quantile >= 1:
        raise ValueError(f"threshold_quantile must be < 1; got {cfg.threshold_quantile!r}")
    number("smoothness", lo=0)
    number("n_neighbors", lo=0, integer=True)
    number("prior_strength", lo=0)
    number("border_width", lo=0, hi=0.5, lo_open=True)
    number("center_fraction", lo=0, hi=1, lo_open=True)
    number("n_colour_words", lo=2, integer=True)
    number("model_rounds", lo=0, integer=True)
    number("model_strength", lo=0)
    number("prior_model_strength", lo=0)
    number("start_clusters", lo=0, integer=True)
    number("model_starts", lo=1, integer=True)
    number("refine_band", lo=0, integer=True, allow_none=True)
    number("refine_smoothness", lo=0)
    number("time_limit", lo=0, lo_open=True, allow_none=True)
    number("max_moves", lo=1, integer=True, allow_none=True)
    number("min_region_size", lo=0, integer=True)
    number("confidence_margin", lo=0, lo_open=True)
    number("uncertain_level", lo=0, hi=1)
    number("seed", lo=0, integer=True)
    for name in ("colour_model", "fill_holes", "refine", "confidence"):
        if not isinstance(getattr(cfg, name), bool):
            raise ValueError(f"{name} must be true or false; got {getattr(cfg, name)!r}")
    for name in ("affinity", "method"):
        value = getattr(cfg, name)
        if not isinstance(value, str) or not value:
            raise ValueError(f"{name} must be a non-empty name; got {value!r}")
    prior = cfg.prior
    if not isinstance(prior, tuple):
        object.__setattr__(cfg, "prior", _as_prior(prior))
        prior = cfg.prior
    for p in prior:
        if not isinstance(p, str) or not p:
            raise ValueError(f"prior must be a list of names; got {prior!r}")
    if len(set(prior)) != len(prior):
        raise ValueError(f"prior lists a name twice: {prior!r}")
    if cfg.box is not None:
        box = cfg.box
        if (not isinstance(box, (tuple, list)) or len(box) != 4
                or not all(isinstance(v, int) and not isinstance(v, bool) for v in box)):
            raise ValueError(f"box must be four integers x0, y0, x1, y1; got {box!r}")
        if not (box[0] < box[2] and box[1] < box[3]):
            raise ValueError(f"box must have x0 < x1 and y0 < y1; got {tuple(box)!r}")
        object.__setattr__(cfg, "box", tuple(box))
    options = cfg.affinity_options
    if isinstance(options, dict):
        options = tuple(sorted(options.items()))
    if (not isinstance(options, tuple)
            or not all(isinstance(o, tuple) and len(o) == 2 and isinstance(o[0], str)
                       for o in options)):
        raise ValueError(f"affinity_options must be a table of option names and values; "
                         f"got {cfg.affinity_options!r}")
    object.__setattr__(cfg, "affinity_options", tuple(sorted(options)))
    check_registered_names(cfg)


def check_registered_names(cfg: SplitConfig) -> None:
    """The one check of a config's names against the registries (plugins included).

    The priors, the affinity model (and its options) and the max-cut method must be
    registered, built in or added by another package through an entry point
    (:mod:`segcut.priors`, :mod:`segcut.affinity`, :mod:`segcut.maxcut`).

    Raises
    ------
    ValueError
        Naming the unknown name and the registered ones.
    """
    from .affinity import get_affinity_model
    from .maxcut import get_method
    from .priors import available_priors

    priors = available_priors()
    for p in cfg.prior:
        if p not in priors:
            raise ValueError(f"prior {p!r} is not known; use any of {', '.join(priors)} (box "
                             "and seeds are separate options)")
    get_affinity_model(cfg.affinity).check_options(cfg.affinity_options)
    get_method(cfg.method)


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (tuple, list)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} as TOML")
