"""The one signed-graph type of segcut, validated in one place.

A :class:`SignedGraph` is an undirected graph with real (possibly negative) edge
weights, stored as a symmetric CSR structure: ``indptr``, ``indices`` and
``weights`` hold every edge twice, once from each end. It has no self-loops and
only finite weights. Duplicate edges given to a builder are **summed** into one edge;
edges whose summed weight is exactly zero are kept out.

Build one with :func:`graph_from_edges`, or convert a scipy sparse matrix, a dense
array or a networkx graph with :func:`as_signed_graph`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

__all__ = [
    "SignedGraph",
    "graph_from_edges",
    "as_signed_graph",
    "cut_value",
    "validate_sides",
]


@dataclass(frozen=True, eq=False, repr=False)
class SignedGraph:
    """Undirected graph with signed weights in symmetric CSR form.

    Do not build this directly; use :func:`graph_from_edges` or
    :func:`as_signed_graph`, which validate and normalise the arrays.

    Attributes
    ----------
    indptr : (n + 1,) int64 ndarray
        Row pointers.
    indices : (2 m,) int64 ndarray
        Column indices, sorted within each row.
    weights : (2 m,) float64 ndarray
        Edge weights, each undirected edge stored at both ends.
    n_vertices : int
        Number of vertices ``n``.

    Examples
    --------
    >>> g = graph_from_edges(3, [0, 1], [1, 2], [1.0, -2.0])
    >>> g
    SignedGraph(n_vertices=3, n_edges=2, total_weight=-1)
    >>> g.neighbors(1)
    (array([0, 2]), array([ 1., -2.]))
    """

    indptr: np.ndarray
    indices: np.ndarray
    weights: np.ndarray
    n_vertices: int

    @property
    def n_edges(self) -> int:
        """Number of undirected edges ``m``."""
        return int(self.indices.shape[0] // 2)

    @property
    def total_weight(self) -> float:
        """Sum of all edge weights (each undirected edge once)."""
        return float(self.weights.sum() / 2.0)

    @property
    def degrees(self) -> np.ndarray:
        """Weighted degree of each vertex, ``W 1``."""
        rows = np.repeat(np.arange(self.n_vertices), np.diff(self.indptr))
        return np.bincount(rows, weights=self.weights, minlength=self.n_vertices)

    def neighbors(self, vertex: int) -> tuple[np.ndarray, np.ndarray]:
        """Neighbours of ``vertex`` and the weights of the edges to them."""
        lo, hi = self.indptr[vertex], self.indptr[vertex + 1]
        return self.indices[lo:hi], self.weights[lo:hi]

    def edges(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Each undirected edge once, as arrays ``(i, j, w)`` with ``i < j``."""
        rows = np.repeat(np.arange(self.n_vertices, dtype=np.int64), np.diff(self.indptr))
        keep = rows < self.indices
        return rows[keep], self.indices[keep], self.weights[keep]

    def to_scipy(self) -> sp.csr_array:
        """The symmetric weight matrix ``W`` as a scipy CSR array (a copy)."""
        n = self.n_vertices
        return sp.csr_array(
            (self.weights.copy(), self.indices.copy(), self.indptr.copy()), shape=(n, n)
        )

    def laplacian(self) -> sp.csr_array:
        """The signed Laplacian ``L = diag(W 1) - W``; ``cut(x) = x^T L x / 4``."""
        w = self.to_scipy()
        return (sp.diags_array(self.degrees) - w).tocsr()

    def __repr__(self) -> str:
        return (
            f"SignedGraph(n_vertices={self.n_vertices}, n_edges={self.n_edges}, "
            f"total_weight={self.total_weight:.6g})"
        )


def graph_from_edges(n_vertices, rows, cols, weights=None) -> SignedGraph:
    """Build a :class:`SignedGraph` from edge arrays.

    Parameters
    ----------
    n_vertices : int
        Number of vertices; vertex ids run from 0 to ``n_vertices - 1``.
    rows, cols : (m,) array_like of int
        End points of each edge (0-based). The order of the two ends does not matter.
    weights : (m,) array_like of float, optional
        Edge weights; 1.0 for every edge when omitted.

    Returns
    -------
    SignedGraph
        Duplicate edges (in either orientation) are summed into one edge; edges
        whose summed weight is exactly 0 are dropped.

    Raises
    ------
    ValueError
        On a negative vertex count, mismatched lengths, a vertex id out of range,
        a self-loop or a weight that is NaN or infinite. The message names the first
        offending edge.

    Examples
    --------
    >>> g = graph_from_edges(3, [0, 1, 1], [1, 0, 2], [1.0, 2.0, -1.0])
    >>> g.edges()
    (array([0, 1]), array([1, 2]), array([ 3., -1.]))
    """
    n = _as_count(n_vertices)
    rows = np.asarray(rows)
    cols = np.asarray(cols)
    if rows.ndim != 1 or cols.ndim != 1 or rows.shape != cols.shape:
        raise ValueError(
            f"rows and cols must be 1-D arrays of equal length; got shapes "
            f"{rows.shape} and {cols.shape}"
        )
    if weights is None:
        weights = np.ones(rows.shape[0], dtype=np.float64)
    weights = np.asarray(weights)
    if weights.shape != rows.shape:
        raise ValueError(
            f"weights must have one entry per edge: {rows.shape[0]} edges, "
            f"{weights.shape} weights"
        )
    if rows.size and not (np.issubdtype(rows.dtype, np.integer) and np.issubdtype(cols.dtype, np.integer)):
        if not (np.all(np.mod(rows, 1) == 0) and np.all(np.mod(cols, 1) == 0)):
            raise ValueError("vertex ids must be integers")
    rows = rows.astype(np.int64, copy=False)
    cols = cols.astype(np.int64, copy=False)
    try:
        weights = weights.astype(np.float64, copy=False)
    except (TypeError, ValueError) as err:
        raise ValueError(f"weights must be real numbers: {err}") from err
    bad = np.flatnonzero((rows < 0) | (rows >= n) | (cols < 0) | (cols >= n))
    if bad.size:
        k = bad[0]
        raise ValueError(
            f"edge {k} ({rows[k]}, {cols[k]}) has a vertex id outside 0..{n - 1}"
        )
    bad = np.flatnonzero(rows == cols)
    if bad.size:
        k = bad[0]
        raise ValueError(f"edge {k} is a self-loop on vertex {rows[k]}; self-loops never count in a cut")
    bad = np.flatnonzero(~np.isfinite(weights))
    if bad.size:
        k = bad[0]
        raise ValueError(f"edge {k} ({rows[k]}, {cols[k]}) has a non-finite weight {weights[k]}")
    # sum duplicates once per unordered pair, then mirror: w_ij and w_ji are the same
    # float (summing each orientation on its own could differ in the last bit)
    upper = sp.csr_array((weights, (np.minimum(rows, cols), np.maximum(rows, cols))),
                         shape=(n, n))
    upper.sum_duplicates()
    upper.eliminate_zeros()
    mat = (upper + upper.T).tocsr()  # strictly upper plus strictly lower: no sums
    mat.sort_indices()
    return SignedGraph(
        indptr=np.ascontiguousarray(mat.indptr, dtype=np.int64),
        indices=np.ascontiguousarray(mat.indices, dtype=np.int64),
        weights=np.ascontiguousarray(mat.data, dtype=np.float64),
        n_vertices=n,
    )


def as_signed_graph(graph, *, weight: str = "weight") -> SignedGraph:
    """Convert a graph-like object to a validated :class:`SignedGraph`.

    Parameters
    ----------
    graph : SignedGraph, scipy sparse matrix/array, (n, n) ndarray or networkx.Graph
        A matrix must be square and symmetric; its diagonal must be zero. A networkx
        graph must be undirected and not a multigraph; its nodes are numbered in
        ``list(graph.nodes)`` order.
    weight : str, default "weight"
        Edge attribute holding the weight of a networkx graph (1 when absent).

    Returns
    -------
    SignedGraph

    Raises
    ------
    TypeError
        For an unsupported type, a directed graph or a multigraph.
    ValueError
        For a non-square or non-symmetric matrix, a non-zero diagonal or a
        non-finite weight.

    Examples
    --------
    >>> import numpy as np
    >>> as_signed_graph(np.array([[0, 2], [2, 0]]))
    SignedGraph(n_vertices=2, n_edges=1, total_weight=2)
    """
    if isinstance(graph, SignedGraph):
        return graph
    if sp.issparse(graph) or isinstance(graph, np.ndarray):
        mat = sp.coo_array(graph)
        if mat.ndim != 2 or mat.shape[0] != mat.shape[1]:
            raise ValueError(f"a graph matrix must be square; got shape {mat.shape}")
        mat = mat.tocsr()
        mat.sum_duplicates()
        if mat.shape[0] and abs(mat - mat.T).max() > 0:
            raise ValueError("a graph matrix must be symmetric (W == W.T)")
        coo = mat.tocoo()
        if np.any((coo.row == coo.col) & (coo.data != 0)):
            raise ValueError("a graph matrix must have a zero diagonal (no self-loops)")
        keep = coo.row < coo.col
        return graph_from_edges(mat.shape[0], coo.row[keep], coo.col[keep], coo.data[keep])
    try:
        import networkx as nx
    except ImportError:  # pragma: no cover - networkx is a dependency
        nx = None
    if nx is not None and isinstance(graph, nx.Graph):
        if graph.is_directed():
            raise TypeError("max-cut needs an undirected graph; got a directed networkx graph")
        if graph.is_multigraph():
            raise TypeError("multigraphs are not supported; merge parallel edges first")
        index = {node: k for k, node in enumerate(graph.nodes)}
        rows, cols, ws = [], [], []
        for u, v, data in graph.edges(data=True):
            if u == v:
                raise ValueError(f"node {u!r} has a self-loop; self-loops never count in a cut")
            rows.append(index[u])
            cols.append(index[v])
            ws.append(data.get(weight, 1.0))
        return graph_from_edges(len(index), np.array(rows, dtype=np.int64),
                                np.array(cols, dtype=np.int64), np.array(ws, dtype=np.float64))
    raise TypeError(
        f"cannot make a signed graph from {type(graph).__name__}; pass a SignedGraph, "
        "a scipy sparse matrix, a square ndarray or a networkx.Graph"
    )


def validate_sides(graph: SignedGraph, sides) -> np.ndarray:
    """Check a side assignment and return it as a C-contiguous int8 array of +-1.

    Parameters
    ----------
    graph : SignedGraph
    sides : (n,) array_like
        One entry per vertex, each -1 or +1 (booleans and 0/1 are also accepted:
        ``True``/1 become +1 and ``False``/0 become -1).

    Raises
    ------
    ValueError
        If the length differs from the vertex count or a value is not a side.
    """
    sides = np.asarray(sides)
    if sides.shape != (graph.n_vertices,):
        raise ValueError(
            f"sides must have one entry per vertex: expected shape ({graph.n_vertices},), "
            f"got {sides.shape}"
        )
    if sides.dtype == bool:
        return np.where(sides, 1, -1).astype(np.int8)
    values = np.unique(sides)
    if np.all(np.isin(values, (-1, 1))):
        return np.ascontiguousarray(sides, dtype=np.int8)
    if np.all(np.isin(values, (0, 1))):
        return np.where(sides == 1, 1, -1).astype(np.int8)
    raise ValueError(f"sides must be -1/+1 (or 0/1, or booleans); got values {values[:5]}")


def cut_value(graph, sides) -> float:
    """Total weight of the edges whose ends lie on different sides.

    Parameters
    ----------
    graph : SignedGraph or graph-like
        Anything :func:`as_signed_graph` accepts.
    sides : (n,) array_like
        Side of each vertex (see :func:`validate_sides`).

    Returns
    -------
    float
        ``cut(x) = sum_{i<j} w_ij (1 - x_i x_j) / 2``. Negative weights make the
        value smaller when their edge is cut.

    Examples
    --------
    >>> g = graph_from_edges(3, [0, 1, 0], [1, 2, 2], [1.0, 1.0, -0.5])
    >>> cut_value(g, [1, -1, 1])
    2.0
    >>> cut_value(g, [1, 1, -1])
    0.5
    """
    graph = as_signed_graph(graph)
    x = validate_sides(graph, sides).astype(np.float64)
    i, j, w = graph.edges()
    return float(np.sum(w * (x[i] != x[j])))


def _as_count(n) -> int:
    if isinstance(n, (bool, np.bool_)) or not isinstance(n, (int, np.integer)):
        raise TypeError(f"n_vertices must be an integer; got {type(n).__name__}")
    if n < 0:
        raise ValueError(f"n_vertices must be >= 0; got {n}")
    return int(n)
