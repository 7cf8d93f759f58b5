"""The path of one image, as a short composition of named stages.

:func:`split` is the main job of segcut: numpy image in, boolean mask out, with the
cut value, its certified upper bound and the gap. The stages:

1. prepare: checks, robust intensity normalisation (:mod:`segcut.prepare`) and the
   canonical orientation (:mod:`segcut.orientation`);
2. superpixels and region features (:mod:`segcut.superpixels`, :mod:`segcut.regions`);
3. signed neighbour edges (:mod:`segcut.affinity`);
4. priors, box and seeds (:mod:`segcut.priors`);
5. appearance models and start hypotheses (:mod:`segcut.appearance`);
6. the max-cut of the superpixel graph (:mod:`segcut.maxcut`);
7. pixel-level boundary refinement (:mod:`segcut.refine`) and clean-up.

:func:`build_image_graph` gives the signed graph that :func:`split` solves, and
:func:`mask_to_sides` projects any mask onto it, so any mask can be scored on the
same graph:

>>> image = np.zeros((40, 40)); image[10:30, 12:28] = 1.0
>>> result = split(image, rng=0)
>>> result.mask[20, 20], result.mask[2, 2]
(np.True_, np.False_)
>>> sides, agreement = mask_to_sides(result.image_graph, result.mask)
>>> cut_value(result.image_graph.graph, sides) == result.value
True
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace

import numpy as np

from .affinity import weigh_pairs
from .background import BackgroundDecision, flatten_background
from .appearance import ModelProblem, border_rule, choose_end_point, lightness_threshold, \
    run_model_rounds, start_hypotheses
from .confidence import split_confidence, uncertain_fraction
from .config import SplitConfig
from .graph import cut_value, graph_from_edges
from .image_graph import ImageGraph, PixelContext, frame_pixels, mask_to_sides, vertex_start
from .maxcut import relative_gap
from .orientation import CANONICAL_TRANSFORMS, _canonical_box, apply_transform, \
    canonical_transform
from .prepare import image_features, prepare_image
from .priors import SEED_BACKGROUND, SEED_FOREGROUND, box_map, get_prior, prior_map, \
    seeded_regions
from .pixel_models import fit_two_gaussians
from .refine import pixel_log_likelihood, refine_with_llr
from .regions import describe_regions, region_adjacency, word_histograms
from .superpixels import oversegment

__all__ = ["ImageGraph", "SplitResult", "build_image_graph", "mask_to_sides", "split",
           "ORIENTATIONS", "CANONICAL_TRANSFORMS", "apply_transform", "canonical_transform"]

#: The stages :func:`split` announces to its ``progress`` callable, in order.
STAGES = ("prepare", "superpixels", "appearance", "solve", "refine", "confidence")


def _no_progress(stage: str) -> None:
    pass


#: What may decide which side is foreground (``SplitResult.orientation``).
ORIENTATIONS = {
    "terminal": "priors or seeds: the terminal vertex's side is foreground",
    "border_rule": "no prior: the side with fewer pixels on the image frame is foreground",
    "no_contrast": "the image has no contrast: the mask is empty",
}


@dataclass(frozen=True, eq=False)
class SplitResult:
    """The outcome of :func:`split` for one image.

    Attributes
    ----------
    mask : bool ndarray, spatial shape of the image
        True for foreground.
    labels : int64 ndarray, same shape
        Superpixel of every pixel.
    value : float
        Cut value of the final mask on ``image_graph.graph``:
        ``cut_value(graph, mask_to_sides(image_graph, mask)[0])``.
    upper_bound : float or None
        Certified upper bound on the best cut of that graph (None when the method
        gives none).
    gap : float or None
        ``(upper_bound - value) / |upper_bound|``.
    foreground_fraction : float
    n_superpixels : int
    orientation : str
        See :data:`ORIENTATIONS`.
    seconds : dict
        Seconds per stage.
    warnings : list of str
    cleanup : dict
        ``value_before`` and ``value_after`` the clean-up, pixels changed.
    method : str
        Max-cut method used for the final solve.
    seed : int or None
    image_graph : ImageGraph
        The graph that was solved.
    canonical_transform : str
        The flip or turn that took the image to the orientation it was processed
        in (a key of :data:`CANONICAL_TRANSFORMS`; see :func:`split`, Notes).
    hypothesis : str
        The start hypothesis whose colour models built the graph (a key of
        :data:`segcut.appearance.HYPOTHESES`; ``"prior"`` with priors or seeds).
    choice_rule : str
        How it was chosen among several (a key of :data:`segcut.appearance.CHOICE_RULES`).
    hypothesis_disagreement : float
        1 - IoU between the kept end point and the closest other hypothesis's end
        point (0 when one hypothesis ran): large values mean the image can be read
        in more than one way.
    refine_changed_fraction : float
        Share of the pixels whose side the pixel refinement changed.
    background : dict or None
        Whether the background was flattened before the split, at which radius and
        by which rule (:mod:`segcut.background`); None for an image without contrast.
    graphs : list of dict
        Every graph solved, in order: ``name`` (``"superpixels"``, ``"refine"``),
        ``n_vertices``, ``value``, ``upper_bound`` and ``gap`` of that graph.
        ``value``, ``upper_bound`` and ``gap`` above are those of the superpixel
        graph (the final mask projected onto it); the refinement graph's certify
        the pixel split inside its band. On the large-image path
        (:mod:`segcut.large`) the superpixel graph is that of the reduced copy
        (with its ``reduction_factor``) and ``"refine"`` sums the tiles' graphs
        (``n_vertices``, ``value``, ``upper_bound`` summed, ``tiles`` counted).
        The ``"refine"`` entry also names its ``pixel_model``
        (``"colour_words"``, or ``"colour_words+two_gaussians"`` on a two-cluster
        image) and the two-Gaussian ``separation`` (:mod:`segcut.pixel_models`).
    confidence : float64 ndarray, spatial shape of the image, or None
        How sure the split is at every pixel, in [0, 1] (1 = certain, 0.5 = either
        side costs the same; see :mod:`segcut.confidence`); None when
        ``config.confidence`` is off.
    uncertain_level : float
        The level below which a pixel counts in :attr:`uncertain_fraction`.
    """

    mask: np.ndarray
    labels: np.ndarray
    value: float
    upper_bound: float | None
    gap: float | None
    foreground_fraction: float
    n_superpixels: int
    orientation: str
    seconds: dict
    warnings: list
    cleanup: dict
    method: str
    seed: int | None = None
    image_graph: ImageGraph | None = field(default=None, repr=False)
    canonical_transform: str = "identity"
    hypothesis: str = "prior"
    choice_rule: str = "only"
    hypothesis_disagreement: float = 0.0
    refine_changed_fraction: float = 0.0
    background: dict | None = None
    graphs: list = field(default_factory=list)
    confidence: np.ndarray | None = field(default=None, repr=False)
    uncertain_level: float = 0.9

    @property
    def uncertain_fraction(self) -> float | None:
        """Share of the pixels whose confidence is below ``uncertain_level`` (None: off)."""
        if self.confidence is None:
            return None
        return uncertain_fraction(self.confidence, self.uncertain_level)

    @property
    def solver_gap(self) -> float | None:
        """Certified gap of the max-cut solver's own split of the superpixel graph.

        ``gap`` is that of the final mask, after the pixel refinement and the clean-up
        moved it (on purpose) away from the superpixel optimum; this is the gap of
        the split the solver returned (``cleanup["value_before"]``), which says how
        well the search did. None without a bound.
        """
        if self.upper_bound is None:
            return None
        return relative_gap(float(self.cleanup.get("value_before", self.value)), self.upper_bound)

    def to_record(self) -> dict:
        """The JSON-serialisable statistics of this split (no arrays).

        Examples
        --------
        >>> r = split(np.eye(8), rng=0)
        >>> sorted(r.to_record())[:4]
        ['background', 'canonical_transform', 'choice_rule', 'cleanup']
        """
        return {
            "value": float(self.value),
            "upper_bound": None if self.upper_bound is None else float(self.upper_bound),
            "gap": None if self.gap is None else float(self.gap),
            "solver_gap": None if self.solver_gap is None else float(self.solver_gap),
            "foreground_fraction": float(self.foreground_fraction),
            "n_superpixels": int(self.n_superpixels),
            "orientation": self.orientation,
            "canonical_transform": self.canonical_transform,
            "method": self.method,
            "seed": self.seed,
            "seconds": {k: round(float(v), 6) for k, v in self.seconds.items()},
            "warnings": list(self.warnings),
            "cleanup": dict(self.cleanup),
            "hypothesis": self.hypothesis,
            "choice_rule": self.choice_rule,
            "hypothesis_disagreement": round(float(self.hypothesis_disagreement), 6),
            "refine_changed_fraction": round(float(self.refine_changed_fraction), 6),
            "background": None if self.background is None else dict(self.background),
            "graphs": [dict(g) for g in self.graphs],
            "uncertain_fraction": (None if self.confidence is None
                                   else round(self.uncertain_fraction, 6)),
        }

    def __repr__(self) -> str:
        bound = "None" if self.upper_bound is None else f"{self.upper_bound:.6g}"
        gap = "None" if self.gap is None else f"{self.gap:.3g}"
        return (f"SplitResult(shape={self.mask.shape}, foreground_fraction="
                f"{self.foreground_fraction:.3g}, value={self.value:.6g}, upper_bound={bound}, "
                f"gap={gap}, n_superpixels={self.n_superpixels}, orientation={self.orientation!r})")


def _normalise_seeds(seeds, spatial_shape):
    if seeds is None:
        return None
    seeds = np.asarray(seeds)
    if seeds.shape != tuple(spatial_shape):
        raise ValueError(f"seeds shape {seeds.shape} does not match the image's spatial shape "
                         f"{tuple(spatial_shape)}")
    values = np.unique(seeds)
    bad = values[~np.isin(values, (0, SEED_FOREGROUND, SEED_BACKGROUND))]
    if bad.size:
        raise ValueError(f"seeds must hold 0 (unknown), 1 (foreground) or 2 (background); got "
                         f"value {bad[0]!r}")
    return seeds


# -- stage 1: prepare (checks, normalisation, canonical orientation, features) ----------

@dataclass(frozen=True, eq=False)
class _Prepared:
    """The image in its processing orientation, and what came with it."""

    values: np.ndarray
    features: np.ndarray
    seeds: np.ndarray | None
    config: SplitConfig
    transform: str
    caller_spatial: tuple
    warnings: list
    #: The transform named priors are moved by (default ``transform``; the large-image
    #: path hands in a reduced copy already in its canonical orientation).
    prior_transform: str | None = None
    #: The flattening decision (:mod:`segcut.background`) the features come from.
    background: BackgroundDecision | None = None


def _prepare_stage(image, config, seeds, channel_axis, seconds):
    """Normalise the image and move it (with seeds and box) to its canonical orientation.

    Returns None when the image has no contrast.
    """
    t0 = time.perf_counter()
    values, warnings, has_contrast = prepare_image(image, channel_axis)
    caller_spatial = values.shape[:-1]
    seeds = _normalise_seeds(seeds, caller_spatial)
    if not has_contrast:
        seconds["prepare"] = time.perf_counter() - t0
        warnings.append("image has no contrast: the mask is empty")
        return None, warnings, caller_spatial
    t1 = time.perf_counter()
    transform = canonical_transform(values)
    plane = (values.ndim - 3, values.ndim - 2)
    if transform != "identity":
        values = np.ascontiguousarray(apply_transform(values, transform, axes=plane))
        if seeds is not None:
            seeds = np.ascontiguousarray(apply_transform(seeds, transform))
        if config.box is not None:
            config = config.replace(box=_canonical_box(config.box, caller_spatial, transform))
    seconds["canonical"] = time.perf_counter() - t1
    t2 = time.perf_counter()
    features, background = flatten_background(image_features(values), config.background_radius)
    seconds["background"] = time.perf_counter() - t2
    seconds["prepare"] = time.perf_counter() - t0 - seconds["canonical"] - seconds["background"]
    return _Prepared(values, features, seeds, config, transform, tuple(caller_spatial),
                     warnings, background=background), warnings, caller_spatial


# -- stage 2: superpixels and region features ----------------------------------------

def _region_stage(features, config, seconds):
    t0 = time.perf_counter()
    labels = oversegment(features, n_superpixels=config.n_superpixels,
                         compactness=config.compactness,
                         pixel_grid_max_pixels=config.pixel_grid_max_pixels,
                         sigma=config.sigma)
    seconds["superpixels"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    regions = describe_regions(labels, features, n_colour_words=config.n_colour_words)
    adjacency = region_adjacency(labels, features)
    seconds["features"] = time.perf_counter() - t0
    return labels, regions, adjacency


# -- stage 3: neighbour edges --------------------------------------------------------

def _pair_stage(regions, adjacency, config):
    """Signed neighbour edges (affinity model) and optional long-range kNN edges."""
    return weigh_pairs(regions, adjacency, config)


# -- stage 4: priors, box and seeds --------------------------------------------------

@dataclass(frozen=True, eq=False)
class _Priors:
    evidence: np.ndarray          # terminal evidence per region
    fg_w: np.ndarray | None       # first foreground sample weights (None: no prior)
    bg_w: np.ndarray | None
    merged: np.ndarray            # +1 / -1 hard-seeded regions
    fixed: np.ndarray             # per pixel: 0 free, +1 foreground seed, -1 background


def _box_core(inside, config):
    """The central part of a box (``center_fraction`` of each of its sides).

    A box tight around an object holds much background too: its central part is a
    purer first foreground sample of the colour models than the whole box (dev
    photographs with the reference mask's bounding box, one run: whole box 0.650
    mean IoU, central 70% 0.683, 50% 0.736, 30% 0.778, 20% and 10% 0.785).
    """
    rows = np.flatnonzero(inside.any(axis=-1).reshape(-1, inside.shape[-2]).any(axis=0))
    cols = np.flatnonzero(inside.reshape(-1, inside.shape[-1]).any(axis=0))
    h, w = rows[-1] - rows[0] + 1, cols[-1] - cols[0] + 1
    core_h = max(1, int(round(config.center_fraction * h)))
    core_w = max(1, int(round(config.center_fraction * w)))
    r0, c0 = rows[0] + (h - core_h) // 2, cols[0] + (w - core_w) // 2
    out = np.zeros_like(inside)
    out[..., r0:r0 + core_h, c0:c0 + core_w] = True
    return out


def _box_seeds(seeds, spatial, box):
    """Seeds with every pixel outside ``box`` marked background (a box means that)."""
    if box is None:
        return seeds
    outside = box_map(spatial, box) < 0
    out = np.zeros(spatial, dtype=np.int64) if seeds is None else np.array(seeds, np.int64)
    out[outside & (out == 0)] = SEED_BACKGROUND
    return out


def _prior_stage(labels, regions, config, seeds, warnings, transform="identity"):
    n = regions.n_regions
    spatial = labels.shape
    pmap, inside = prior_map(spatial, config, transform)
    flat_labels = labels.ravel()
    evidence = np.zeros(n)
    fg_w = bg_w = None
    if pmap is not None:
        evidence = config.prior_strength * np.bincount(flat_labels, weights=pmap.ravel(),
                                                       minlength=n)
        pos = (pmap > 0) if inside is None else (pmap > 0) | _box_core(inside, config)
        fg_w = np.bincount(flat_labels, weights=pos.ravel().astype(float),
                           minlength=n) / regions.area
        bg_w = np.bincount(flat_labels, weights=(pmap < 0).ravel().astype(float),
                           minlength=n) / regions.area
    seeds = _box_seeds(seeds, spatial, config.box)
    merged = np.zeros(n, dtype=np.int8)
    fixed = np.zeros(spatial, dtype=np.int8)
    if seeds is not None:
        fixed[seeds == SEED_FOREGROUND] = 1
        fixed[seeds == SEED_BACKGROUND] = -1
    if seeds is not None and np.any(seeds):
        merged, seed_warnings = seeded_regions(labels, seeds)
        if config.box is None or np.any(seeds[box_map(spatial, config.box) == 0]):
            warnings.extend(seed_warnings)
        if fg_w is None:
            fg_w, bg_w = (merged == 1).astype(float), (merged == -1).astype(float)
        else:
            fg_w = np.where(merged == 1, 1.0, np.where(merged == -1, 0.0, fg_w))
            bg_w = np.where(merged == -1, 1.0, np.where(merged == 1, 0.0, bg_w))
        if not fg_w.any():
            fg_w = 1.0 - bg_w
        if not bg_w.any():
            bg_w = 1.0 - fg_w
    return _Priors(evidence, fg_w, bg_w, merged, fixed)


# -- stage 5: appearance models and start hypotheses --------------------------------

def _appearance_stage(problem, labels, regions, adjacency, features, priors, config,
                      generator, flattened=False):
    """Colour-model rounds from the priors, or from several start hypotheses without them.

    On a flattened image (:mod:`segcut.background`) with no prior the lightness
    threshold of the flattened image, the split the flattening was judged by, is the
    one start (rule ``"flattened_background"``).

    Returns (fg_w, bg_w, region_fg, hypothesis, rule, disagreement).
    """
    rounds = config.model_rounds if config.colour_model else 0
    if problem.oriented or not config.colour_model:
        fg_w, bg_w, region_fg = run_model_rounds(problem, priors.fg_w, priors.bg_w, rounds,
                                                 generator)
        return fg_w, bg_w, region_fg, "prior" if problem.oriented else "none", "only", 0.0
    if flattened:
        group = lightness_threshold(regions, features[..., 0])
        if group is not None and group.any() and not group.all():
            fg_w, bg_w, region_fg = run_model_rounds(
                problem, group.astype(float), (~group).astype(float), rounds, generator)
            return fg_w, bg_w, region_fg, "lightness_threshold", "flattened_background", 0.0
    n = regions.n_regions
    box = get_prior("center").pixel_map(labels.shape, config)
    central = np.bincount(labels.ravel(), weights=box.ravel(), minlength=n) > 0.5 * regions.area
    hypotheses = start_hypotheses(regions, config.start_clusters, config.model_starts,
                                  central=central, lightness=features[..., 0])
    outcomes = [(name, run_model_rounds(problem, group.astype(float), (~group).astype(float),
                                        rounds, generator))
                for name, group in hypotheses]
    index, rule, disagreement = choose_end_point(outcomes, regions, adjacency,
                                                 problem.word_counts)
    name, (fg_w, bg_w, region_fg) = outcomes[index]
    return fg_w, bg_w, region_fg, name, rule, disagreement


def _no_contrast_graph(caller_spatial, warnings, seconds):
    labels = np.zeros(caller_spatial, dtype=np.int64)
    g = graph_from_edges(1, [], [], [])
    return ImageGraph(labels=labels, graph=g, terminal=None,
                      region_vertex=np.zeros(1, np.int64), merged=np.zeros(1, np.int8),
                      offset=0.0, orientation="no_contrast", threshold=0.0,
                      start=-np.ones(1, np.int8), warnings=warnings, seconds=seconds,
                      hypothesis="none")


def _build(image, config, seeds, channel_axis, rng, progress=None):
    """The stages of the graph: prepare, superpixels, edges, priors, appearance, assembly."""
    progress = _no_progress if progress is None else progress
    seconds = {}
    progress("prepare")
    prepared, warnings, caller_spatial = _prepare_stage(image, config, seeds, channel_axis,
                                                        seconds)
    if prepared is None:
        return _no_contrast_graph(caller_spatial, warnings, seconds)
    return _graph_stages(prepared, seconds, rng, progress)[0]


def _graph_stages(prepared, seconds, rng, progress=None):
    """Superpixels, edges, priors, appearance and assembly; returns (ImageGraph, regions)."""
    progress = _no_progress if progress is None else progress
    config, warnings = prepared.config, prepared.warnings
    progress("superpixels")
    labels, regions, adjacency = _region_stage(prepared.features, config, seconds)
    t0 = time.perf_counter()
    rows, cols, pair_w, threshold = _pair_stage(regions, adjacency, config)
    priors = _prior_stage(labels, regions, config, prepared.seeds, warnings,
                          prepared.prior_transform or prepared.transform)
    informed = priors.fg_w is not None
    problem = ModelProblem(
        n_regions=regions.n_regions, merged=priors.merged, rows=rows, cols=cols,
        weights=pair_w, prior_evidence=priors.evidence,
        word_counts=word_histograms(labels, regions.words, regions.n_regions,
                                    regions.centres.shape[0]),
        model_strength=config.prior_model_strength if informed else config.model_strength,
        use_models=config.colour_model,
        with_terminal=informed or config.colour_model, oriented=informed, frame=regions.frame)
    generator = np.random.default_rng(rng)
    progress("appearance")
    background = prepared.background
    fg_w, bg_w, region_fg, hypothesis, rule, disagreement = _appearance_stage(
        problem, labels, regions, adjacency, prepared.features, priors, config, generator,
        flattened=background is not None and background.flattened)
    u = problem.evidence(fg_w, bg_w) if problem.with_terminal else np.zeros(regions.n_regions)
    g, terminal, region_vertex, offset = problem.assemble(u)
    if region_fg is None:
        region_fg = u > 0
    start = vertex_start(region_fg, region_vertex, priors.merged, terminal, g.n_vertices)
    context = PixelContext(features=prepared.features, labels=labels, words=regions.words,
                           n_words=int(regions.centres.shape[0]), fixed=priors.fixed,
                           transform=prepared.transform)
    if prepared.transform != "identity":
        labels = np.ascontiguousarray(apply_transform(labels, prepared.transform, inverse=True))
    seconds["graph"] = time.perf_counter() - t0
    return ImageGraph(labels=labels, graph=g, terminal=terminal, region_vertex=region_vertex,
                      merged=priors.merged, offset=offset,
                      orientation="terminal" if informed else "border_rule",
                      threshold=threshold, start=start, warnings=warnings, seconds=seconds,
                      canonical_transform=prepared.transform, hypothesis=hypothesis,
                      choice_rule=rule, hypothesis_disagreement=disagreement,
                      background=None if background is None else background.to_record(),
                      pixel_context=context), regions


def build_image_graph(image, config: SplitConfig | None = None, *, seeds=None,
                      channel_axis: int | None = -1, rng=None) -> ImageGraph:
    """The signed graph :func:`split` solves for ``image`` (same arguments).

    Over-segments the image, measures the regions, weighs neighbour pairs with the
    affinity model, adds prior and colour-model evidence as terminal edges and
    merges hard seeds into the terminal. The colour models are re-estimated over
    ``config.model_rounds`` rounds of fast 1-flip solves, so the graph returned is
    the one of the last round.

    Parameters
    ----------
    image : (M, N[, C]) or (P, M, N[, C]) ndarray
        Gray, RGB or RGBA (alpha ignored); any integer or float dtype.
    config : SplitConfig, optional
    seeds : int ndarray, spatial shape of ``image``, optional
        0 unknown, 1 foreground, 2 background (hard seeds).
    channel_axis : int or None
        Axis of the colour channels; None for gray images and gray 3-D stacks.
    rng : None, int or numpy.random.Generator
        Seed of the search order; by default ``config.seed``.

    Returns
    -------
    ImageGraph

    Examples
    --------
    >>> image = np.zeros((20, 20)); image[5:15, 5:15] = 1.0
    >>> ig = build_image_graph(image, SplitConfig(prior=("border",)))
    >>> ig.n_regions, ig.terminal, ig.orientation
    (400, 400, 'terminal')
    """
    config = SplitConfig() if config is None else config
    if not isinstance(config, SplitConfig):
        raise TypeError(f"config must be a SplitConfig; got {type(config).__name__}")
    return _build(image, config, seeds, channel_axis, config.seed if rng is None else rng)


# -- solving ---------------------------------------------------------------------------

def _solve(ig: ImageGraph, config: SplitConfig, generator):
    """Solve the image graph with ``config.method``; returns (method, sides, value, upper_bound).

    A method that declares ``warm_start`` searches from the split of the colour-model
    rounds; one that takes ``max_moves`` gets ``config.max_moves`` (by default 20
    moves per vertex). ``"auto"`` is the portfolio of :mod:`segcut.maxcut.auto`.
    """
    from .maxcut.auto import solve_warm

    result = solve_warm(ig.graph, method=config.method, start=ig.start,
                        max_moves=config.max_moves, time_limit=config.time_limit, rng=generator)
    return result.method, result.sides, result.value, result.upper_bound


# -- stage 7: pixel refinement and clean-up ------------------------------------------

def _refine_band(config, labels, n_regions):
    if config.refine_band is not None:
        return int(config.refine_band)
    side = np.sqrt(labels.size / max(n_regions, 1))
    return max(2, int(round(0.5 * side)))


def _refine_stage(ig: ImageGraph, mask, config):
    """Refine ``mask`` (caller's orientation) at pixel level; returns (mask, graph record)."""
    ctx = ig.pixel_context
    if ctx is None:
        return mask, None
    inside = apply_transform(mask, ctx.transform) if ctx.transform != "identity" else mask
    inside = np.where(ctx.fixed == 0, inside, ctx.fixed > 0)
    if not config.refine or not inside.any() or inside.all():
        refined, record = inside, None
    else:
        llr = pixel_log_likelihood(ctx.words, inside, ctx.n_words)
        fit = fit_two_gaussians(ctx.features, inside)
        if fit.two_cluster:
            llr = llr + fit.log_likelihood_ratio(ctx.features)
        result = refine_with_llr(ctx.features, inside, llr,
                                 band=_refine_band(config, ctx.labels, ig.n_regions),
                                 smoothness=config.refine_smoothness,
                                 strength=config.model_strength, free=ctx.fixed == 0)
        refined = result.mask
        record = {"name": "refine", "n_vertices": result.n_vertices,
                  "value": result.value, "upper_bound": result.upper_bound,
                  "gap": relative_gap(result.value, result.upper_bound), **fit.refine_entry()}
    if ctx.transform != "identity":
        refined = np.ascontiguousarray(apply_transform(refined, ctx.transform, inverse=True))
    return refined, record


def _large_stage(image, config, seeds, channel_axis, generator, seed):
    """The large-image path (:mod:`segcut.large`) when the image needs it, else None."""
    from .large import split_large, uses_large_path

    if not uses_large_path(image, config, channel_axis):
        return None
    return split_large(image, config, seeds=seeds, channel_axis=channel_axis,
                       generator=generator, seed=seed)


def _clean(mask, config):
    from scipy import ndimage as ndi

    out = mask
    if config.min_region_size > 0:
        for target in (True, False):
            comp, count = ndi.label(out == target)
            if count:
                sizes = np.bincount(comp.ravel())
                small = sizes < config.min_region_size
                small[0] = False
                out = np.where(small[comp], not target, out)
    if config.fill_holes:
        out = ndi.binary_fill_holes(out)
    return out


def _no_contrast_result(ig, seconds, warnings, seed):
    mask = np.zeros(ig.labels.shape, dtype=bool)
    return SplitResult(mask=mask, labels=ig.labels, value=0.0, upper_bound=0.0, gap=0.0,
                       foreground_fraction=0.0, n_superpixels=1, orientation="no_contrast",
                       seconds=seconds, warnings=warnings,
                       cleanup={"value_before": 0.0, "value_after": 0.0, "pixels_changed": 0},
                       method="none", seed=_seed_record(seed), image_graph=ig,
                       canonical_transform=ig.canonical_transform, hypothesis="none")


def split(image, config: SplitConfig | None = None, *, seeds=None,
          channel_axis: int | None = -1, rng=None, progress=None) -> SplitResult:
    """Split an image into foreground and background as a certified max-cut.

    Parameters
    ----------
    image : (M, N[, C]) or (P, M, N[, C]) ndarray
        Gray, RGB or RGBA (alpha ignored); uint8, uint16, other integers or floats
        (floats in [0, 1] are taken as they are, others rescaled to [0, 1]).
    config : SplitConfig, optional
        All options; ``SplitConfig()`` by default.
    seeds : int ndarray, spatial shape of ``image``, optional
        Hard seeds: 0 unknown, 1 foreground, 2 background.
    channel_axis : int or None, default -1
        Axis of the colour channels; None for gray images and gray 3-D stacks.
    rng : None, int or numpy.random.Generator
        Seed for everything random; by default ``config.seed``. The same image,
        config and seed give identical masks.
    progress : callable, optional
        Called with the name of each stage as it starts (:data:`STAGES`).

    Returns
    -------
    SplitResult

    Raises
    ------
    ValueError
        For a malformed image, seeds or a config value.

    Notes
    -----
    With spins ``x_i`` in {-1, +1}, the cut value is
    ``sum_{i<j} w_ij (1 - x_i x_j) / 2``. Neighbour weights come from the affinity
    model (:mod:`segcut.affinity`), terminal weights from priors and colour models
    (:mod:`segcut.priors`). With no prior and no seeds the colour models start
    from the colour clusters that are rarer on the image frame than in the image
    (``config.start_clusters`` clusters of the region colours; a 2-means split when
    none qualifies), and after each round the side with fewer pixels on the frame is
    foreground (orientation ``"border_rule"``).

    Several starts (``config.model_starts``, default 2): the rounds run from each
    of the first distinct starts of the list: frame-shy clusters of
    ``start_clusters`` colour words, the regions inside the central box of the
    center prior (``center_fraction``; a start only, no prior edges), a 2-means
    split, frame-shy clusters of 2, 4, ... more words. The end point whose
    foreground avoids the frame most (its share of the frame pixels over its
    share of the area, :func:`_frame_shyness`; ties go to the earlier start)
    builds the final graph. The rounds end at different fixed points depending on
    the start, and which one a single start reaches flips with small changes (the
    superpixel grid, the search order). Measured on 60 dev photographs with each
    of the eight flips and quarter turns forced as the processing orientation
    (``tests/benchmarks/bench_quality.py --orientations 8``), mean IoU over the
    eight (canonical orientation in brackets): one start 0.522 (0.494); without
    the central start, 4 starts 0.558 (0.531) and 8 starts 0.562 (0.543); with
    it, 2 starts 0.635 (0.636), 5 starts 0.630 (0.625), 8 starts 0.626 (0.613).
    Choosing by the neighbour cut value plus the colour log-likelihood of each
    end point under its own models picked worse end points (0.405 with 3
    starts). With priors or seeds the prior regions start the rounds as before.

    ``method="auto"`` certifies the answer with the SDP relaxation (relative
    accuracy 1e-3) and searches with tabu search from the split of the colour-model
    rounds and from a Goemans-Williamson rounding, with a move budget of 20 moves
    per vertex (deterministic).

    Canonical orientation: superpixels and the search follow the pixel order, so
    the image is processed in an orientation chosen from its content alone: of its
    eight flips and quarter turns (:data:`CANONICAL_TRANSFORMS`; for 3-D stacks
    those of the (M, N) plane) the one with the smallest key (spatial shape, then
    exact sums of the values over a 9 x 9 grid of mirror-symmetric blocks, then
    the values pixel by pixel), see :func:`canonical_transform`. Seeds and the
    ``box`` (given in the caller's frame) are moved along, and so are the maps of named
    priors (laid out over the caller's image). The labels and mask are moved back,
    and the transform is recorded as ``canonical_transform``. Hence for every flip
    or quarter turn ``T``, ``split(T(image)).mask == T(split(image).mask)`` bit for
    bit, with the same value and upper bound (same graph, same vertex order), for
    priors that are themselves symmetric under ``T`` (the border and center priors).
    Exception: an image that equals one of its own flips or turns ``S`` (exact
    symmetry) has several equally canonical views; they are the same array, so the
    graph, value and bound are still the same, but the mask may come back as
    ``T(S(split(image).mask))`` rather than ``T(split(image).mask)``, since no
    rule on the content can tell ``image`` from ``S(image)``.

    Examples
    --------
    >>> image = np.zeros((30, 30, 3)); image[8:22, 8:22] = (0.9, 0.2, 0.1)
    >>> r = split(image, SplitConfig(prior=("border",)), rng=1)
    >>> round(r.foreground_fraction, 3), r.orientation
    (0.218, 'terminal')
    """
    config = SplitConfig() if config is None else config
    if not isinstance(config, SplitConfig):
        raise TypeError(f"config must be a SplitConfig; got {type(config).__name__}")
    seed = config.seed if rng is None else rng
    generator = np.random.default_rng(seed)
    progress = _no_progress if progress is None else progress
    large = _large_stage(image, config, seeds, channel_axis, generator, seed)
    if large is not None:
        return large
    ig = _build(image, config, seeds, channel_axis, generator, progress)
    seconds = dict(ig.seconds)
    warnings = list(ig.warnings)
    if ig.orientation == "no_contrast":
        blank = _no_contrast_result(ig, seconds, warnings, seed)  # one side: nothing to doubt
        return replace(blank, uncertain_level=config.uncertain_level,
                       confidence=np.ones(blank.mask.shape) if config.confidence else None)
    progress("solve")
    t0 = time.perf_counter()
    method, sides, value_before, bound = _solve(ig, config, generator)
    seconds["solve"] = time.perf_counter() - t0

    progress("refine")
    t0 = time.perf_counter()
    mask = ig.paint(sides)
    if ig.terminal is None and border_rule(ig.region_foreground(sides),
                                           frame_pixels(ig.labels)):
        mask = ~mask  # no terminal: the side touching the frame less is foreground
    refined, refine_record = _refine_stage(ig, mask, config)
    seconds["refine"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    final_mask = _clean(refined, config)
    final_sides, _ = mask_to_sides(ig, final_mask)
    value_after = cut_value(ig.graph, final_sides)
    seconds["cleanup"] = time.perf_counter() - t0
    confidence = None
    if config.confidence:
        progress("confidence")
        t0 = time.perf_counter()
        confidence = split_confidence(ig, sides, margin=config.confidence_margin)
        seconds["confidence"] = time.perf_counter() - t0
    graphs = [{"name": "superpixels", "n_vertices": int(ig.graph.n_vertices),
               "value": float(value_after), "upper_bound": bound,
               "gap": relative_gap(value_after, bound)}]
    if refine_record is not None:
        graphs.append(refine_record)
    return SplitResult(
        mask=final_mask, labels=ig.labels, value=value_after, upper_bound=bound,
        gap=relative_gap(value_after, bound), foreground_fraction=float(final_mask.mean()),
        n_superpixels=ig.n_regions, orientation=ig.orientation, seconds=seconds,
        warnings=warnings,
        cleanup={"value_before": float(value_before), "value_after": float(value_after),
                 "pixels_changed": int(np.count_nonzero(final_mask != refined))},
        method=method, seed=_seed_record(seed), image_graph=replace(ig, pixel_context=None),
        canonical_transform=ig.canonical_transform, hypothesis=ig.hypothesis,
        choice_rule=ig.choice_rule, hypothesis_disagreement=ig.hypothesis_disagreement,
        refine_changed_fraction=float(np.count_nonzero(refined != mask)) / max(mask.size, 1),
        background=ig.background,
        graphs=graphs, confidence=confidence, uncertain_level=config.uncertain_level)


def _seed_record(seed):
    if seed is None or isinstance(seed, (int, np.integer)):
        return None if seed is None else int(seed)
    return None
