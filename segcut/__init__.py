"""segcut: split images into foreground and background as certified max-cuts.

The public API: :func:`solve_maxcut` and the graph type for any signed graph; the
image functions (``split``, ``score``, ``compare``) build on them.
"""

from ._numba_cache import configure_numba_cache

configure_numba_cache()

from .errors import ConfigError, InputError, SegcutError, SegcutWarning  # noqa: E402
from .graph import SignedGraph, as_signed_graph, cut_value, graph_from_edges  # noqa: E402
from .maxcut import CutResult, available_methods, solve_maxcut  # noqa: E402

__version__ = "0.1.0"

__all__ = [
    "ConfigError",
    "CutResult",
    "InputError",
    "SegcutError",
    "SegcutWarning",
    "SignedGraph",
    "as_signed_graph",
    "available_methods",
    "cut_value",
    "graph_from_edges",
    "solve_maxcut",
    "__version__",
]
