"""segcut: split images into foreground and background as certified max-cuts.

The public API in one place:

- images: :func:`split` (one image, numpy in and out), :class:`SplitConfig`,
  :func:`load_config`, :func:`build_image_graph`, :func:`mask_to_sides`;
- judging masks: :func:`score` (cut value of any mask on the image's graph, beside the
  certified bound) and :func:`compare_masks` (IoU, Dice, boundary F, Hausdorff, ...);
- any signed graph: :func:`solve_maxcut`, :func:`cut_value`, :class:`SignedGraph`,
  :func:`solve_sdp_relaxation`, :func:`read_graph` / :func:`write_graph`;
- files: :func:`read_image`, :func:`read_mask`, :func:`read_seeds`, :func:`write_mask`,
  :func:`write_overlay`.
"""

from ._numba_cache import configure_numba_cache

configure_numba_cache()

from .config import SplitConfig, load_config  # noqa: E402
from .errors import ConfigError, InputError, SegcutError, SegcutWarning  # noqa: E402
from .graph import SignedGraph, as_signed_graph, cut_value, graph_from_edges  # noqa: E402
from .drawing import write_overlay  # noqa: E402
from .io import ImageData, read_image, read_mask, read_seeds, write_mask  # noqa: E402
from .maxcut import CutResult, available_methods, register_method, solve_maxcut  # noqa: E402
from .maxcut.formats import read_graph, write_graph  # noqa: E402
from .maxcut.sdp import SdpSolution, certify_dual, round_hyperplanes, solve_sdp_relaxation  # noqa: E402
from .pipeline import ImageGraph, SplitResult, build_image_graph, mask_to_sides, split  # noqa: E402
from .scoring import (  # noqa: E402
    ComparisonSummary,
    MaskScore,
    ScoreResult,
    bootstrap_ci,
    compare_masks,
    paired_difference,
    score,
    summarize_comparison,
)

__version__ = "0.1.0"

__all__ = [
    "ComparisonSummary",
    "ConfigError",
    "CutResult",
    "ImageData",
    "ImageGraph",
    "InputError",
    "MaskScore",
    "ScoreResult",
    "SdpSolution",
    "SegcutError",
    "SegcutWarning",
    "SignedGraph",
    "SplitConfig",
    "SplitResult",
    "__version__",
    "as_signed_graph",
    "available_methods",
    "bootstrap_ci",
    "build_image_graph",
    "certify_dual",
    "compare_masks",
    "cut_value",
    "graph_from_edges",
    "load_config",
    "mask_to_sides",
    "paired_difference",
    "read_graph",
    "read_image",
    "read_mask",
    "read_seeds",
    "register_method",
    "round_hyperplanes",
    "score",
    "solve_maxcut",
    "solve_sdp_relaxation",
    "split",
    "summarize_comparison",
    "write_graph",
    "write_mask",
    "write_overlay",
]
