"""Max-cut solvers for signed weighted graphs; they know nothing of images.

``solve_maxcut(graph, method=...)`` is the front door; each method lives in its own
module and returns a :class:`CutResult`. Methods are registered by name, and other
packages add theirs through the ``segcut.maxcut_methods`` entry-point group.
"""

from ..graph import SignedGraph, as_signed_graph, cut_value, graph_from_edges
from ._common import (
    ENTRY_POINT_GROUP,
    STATUSES,
    CutResult,
    MaxcutMethod,
    available_methods,
    get_method,
    register_method,
    relative_gap,
    solve_maxcut,
    unregister_method,
)
from . import local  # noqa: F401  (registers "local")
from . import tabu  # noqa: F401,E402  (registers "tabu", the default)
from . import exact  # noqa: F401,E402  (registers "exact")
from . import sdp  # noqa: F401,E402  (registers "sdp")
from . import flow  # noqa: F401,E402  (registers "flow")

__all__ = [
    "CutResult",
    "MaxcutMethod",
    "STATUSES",
    "ENTRY_POINT_GROUP",
    "SignedGraph",
    "as_signed_graph",
    "available_methods",
    "cut_value",
    "get_method",
    "graph_from_edges",
    "register_method",
    "relative_gap",
    "solve_maxcut",
    "unregister_method",
]
