"""The max-cut semidefinite relaxation: low-rank solve, certified bound, rounding.

The method ``"sdp"`` solves the relaxation in low rank with coordinate "mixing"
updates, proves an upper bound on the best cut through a dual certificate that is
confirmed by a factorisation, rounds the factor with Goemans-Williamson random
hyperplanes and polishes the best rounding with a 1-flip descent.

Notes
-----
With spins :math:`x_i \\in \\{-1, +1\\}` the cut value is
:math:`x^T L x / 4` with :math:`L = \\mathrm{diag}(W\\mathbf{1}) - W`. The relaxation

.. math:: \\max\\ \\langle L, X\\rangle / 4 \\quad \\text{s.t.}\\ X_{ii} = 1,\\ X \\succeq 0

is solved as :math:`X = V V^T` with unit rows :math:`v_i \\in \\mathbb{R}^k`,
:math:`k = \\lceil\\sqrt{2n}\\rceil + 1` (Burer & Monteiro 2003: a rank this large
holds an optimal solution). Each update sets :math:`v_i \\leftarrow -g_i/\\|g_i\\|`
with :math:`g_i = \\sum_j w_{ij} v_j`, the exact maximiser over :math:`v_i` alone.

Weak duality gives the bound: for every :math:`z` with :math:`\\mathrm{Diag}(z) - L/4
\\succeq 0` and every feasible :math:`X`, :math:`\\langle L, X\\rangle/4 \\le
\\sum_i z_i`. From the factor, :math:`y_i = ((L/4) V V^T)_{ii}` (so that
:math:`\\sum_i y_i` equals the relaxation value); :math:`z = y + s\\mathbf{1}` for
a shift :math:`s \\ge -\\lambda_{\\min}(\\mathrm{Diag}(y) - L/4)`. No eigenvalue
estimate is trusted: each candidate shift is accepted only when a factorisation
confirms that :math:`\\mathrm{Diag}(z) - L/4 - cI` is positive definite, by a
Cholesky factorisation (dense) or by the signs of the pivots of a symmetric
:math:`LDL^T` factorisation (sparse; Sylvester's law of inertia). Shifts are tried
on a ladder: first the largest one that meets the tolerance, then smaller ones
while they are confirmed (or larger ones until one is). The margin :math:`c` covers the backward
error of the factorisation in floating point (|ΔA| <= γ_{n+1} d d^T with
d_i = sqrt(a_ii); Higham, *Accuracy and Stability of Numerical Algorithms*, 2nd ed.,
2002, ch. 10) and the rounding of the matrix entries. A bound that could not be
confirmed is never reported as certified.

References
----------
.. [1] M. X. Goemans and D. P. Williamson, "Improved approximation algorithms for
   maximum cut and satisfiability problems using semidefinite programming",
   J. ACM 42(6):1115-1145, 1995. doi:10.1145/227683.227684
.. [2] S. Burer and R. D. C. Monteiro, "A nonlinear programming algorithm for
   solving semidefinite programs via low-rank factorization", Math. Program.
   95:329-357, 2003. doi:10.1007/s10107-002-0352-8
.. [3] P.-W. Wang, W.-C. Chang and J. Z. Kolter, "The mixing method: low-rank
   coordinate descent for semidefinite programming with diagonal constraints",
   arXiv:1706.00476, 2017.
"""

from __future__ import annotations

import contextlib
import math
import time
from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ..graph import SignedGraph, as_signed_graph, cut_value
from . import _sdp_kernels
from ._common import CutResult, register_method
from .local import descend

__all__ = [
    "SdpSettings",
    "THOROUGH",
    "QUICK",
    "SdpSolution",
    "SDP_STATUSES",
    "solve_sdp_relaxation",
    "certify_dual",
    "hyperplane_cut_values",
    "round_hyperplanes",
    "default_rank",
]

#: Status strings an :class:`SdpSolution` may carry.
SDP_STATUSES = {
    "gap_reached": "the certified relative gap of the relaxation is at or below tol",
    "optimal": "the relaxation is trivial (no edges) and solved exactly",
    "iteration_limit": "max_sweeps ran out (or the sweeps stalled) before the gap reached tol",
    "time_limit": "the time limit stopped the sweeps before the gap reached tol",
}



@dataclass(frozen=True)
class SdpSettings:
    """How hard the relaxation is solved and how many roundings are tried.

    Attributes
    ----------
    tol : float
        Target certified relative gap between the bound and the relaxation value.
    n_hyperplanes : int
        Random hyperplanes of the Goemans-Williamson rounding.
    """

    tol: float
    n_hyperplanes: int


#: Settings of method ``"sdp"`` and of the SDP start of method ``"tabu"``.
THOROUGH = SdpSettings(tol=1e-4, n_hyperplanes=100)
#: Settings of method ``"auto"`` (run on every image of a split, and behind the
#: bound of :func:`segcut.score`): a bound within 1e-3 of the relaxation, and a
#: few roundings as starts for tabu search, which does the rest.
QUICK = SdpSettings(tol=1e-3, n_hyperplanes=20)

_EPS = float(np.finfo(np.float64).eps)
_DENSE_LIMIT = 3000        # largest n certified with a dense Cholesky factorisation
# the relaxation's own checks factorise sparse graphs (mean degree up to
# _SPARSE_DEGREE) with LDL^T above _SPARSE_FROM vertices: on a 962-vertex grid
# graph 4 ms against 14 ms for the dense Cholesky, equal at about 250 vertices
_SPARSE_FROM = 300
_SPARSE_DEGREE = 32.0
_MAX_CONFIRM_ATTEMPTS = 40  # each failed confirmation multiplies the margin by 4
_STALL_CHANGE = 1e-15      # a relative change per sweep below this counts as stalled


@dataclass(frozen=True, eq=False, repr=False)
class SdpSolution:
    """A low-rank solution of the max-cut relaxation with its certified bound.

    Attributes
    ----------
    factor : (n, k) float64 ndarray
        Unit rows ``v_i``; ``X = factor @ factor.T`` is feasible for the relaxation.
    relaxation_value : float
        Primal value ``<L, V V^T> / 4`` of the factor (a lower bound on the
        relaxation optimum, not on the best cut).
    upper_bound : float
        ``sum(dual)``: an upper bound on the relaxation optimum and therefore on the
        best cut. Proven when ``certified`` is True. When the factorisation could
        not confirm the SDP dual, this is the trivial bound (sum of the positive
        weights) and ``certified`` is False.
    dual : (n,) float64 ndarray
        The dual vector ``z`` behind the bound when ``certified``: ``Diag(z) - L/4``
        was confirmed positive semidefinite and ``upper_bound`` is ``sum(z)``
        rounded upwards. When not ``certified``, the last unconfirmed estimate,
        which proves nothing.
    n_sweeps : int
        Mixing sweeps made.
    seconds : float
        Wall time of the whole solve.
    certified : bool
        True when ``Diag(dual) - L/4`` was confirmed positive definite by a
        factorisation with a margin covering round-off.
    status : str
        One of :data:`SDP_STATUSES`.
    gap : float
        Relative gap ``(upper_bound - relaxation_value) / max(|upper_bound|, floor)``
        with ``floor = 1e-6 * sum_{i<j} |w_ij|`` (it only matters when the bound is
        nearly 0, as for graphs without positive weights).
    bound_seconds : float
        Part of ``seconds`` spent on certificates (eigenvalues and factorisations).
    message : str
        One line on how the solve ended.
    """

    factor: np.ndarray
    relaxation_value: float
    upper_bound: float
    dual: np.ndarray
    n_sweeps: int
    seconds: float
    certified: bool
    status: str
    gap: float = math.inf
    bound_seconds: float = 0.0
    message: str = ""

    def __repr__(self) -> str:
        return (
            f"SdpSolution(relaxation_value={self.relaxation_value:.8g}, "
            f"upper_bound={self.upper_bound:.8g}, certified={self.certified}, "
            f"status={self.status!r}, n_sweeps={self.n_sweeps}, rank={self.factor.shape[1]})"
        )


def default_rank(n_vertices: int) -> int:
    """Rank ``ceil(sqrt(2 n)) + 1`` of the low-rank factor (at least 1).

    Examples
    --------
    >>> default_rank(800)
    41
    """
    return max(1, math.ceil(math.sqrt(2 * n_vertices)) + 1)


# --------------------------------------------------------------------------- certificate

@dataclass(frozen=True)
class _Certificate:
    dual: np.ndarray
    bound: float
    certified: bool
    shift: float
    margin: float
    attempts: int
    seconds: float


def _relaxation_dense_limit(graph: SignedGraph) -> int:
    """Largest vertex count the relaxation's checks factorise densely, for this graph."""
    n = graph.n_vertices
    sparse = 2.0 * graph.n_edges <= _SPARSE_DEGREE * max(n, 1)
    return _SPARSE_FROM if sparse else _DENSE_LIMIT


def _gap_floor(graph: SignedGraph) -> float:
    # only matters when the bound is ~0 (e.g. no positive weights)
    return max(1e-6 * float(np.abs(graph.weights).sum()) / 2.0, 1e-300)


def _relaxation_gap(primal: float, bound: float, floor: float) -> float:
    return max(0.0, (bound - primal) / max(abs(bound), floor))


def _gamma(m: int) -> float:
    u = 0.5 * _EPS  # unit round-off
    return m * u / (1.0 - m * u)


def _round_off_margin(graph: SignedGraph, dual_guess: np.ndarray, degrees: np.ndarray,
                      abs_degrees: np.ndarray, counts: np.ndarray) -> float:
    """Margin c such that a successful floating-point factorisation of
    ``fl(Diag(z) - L/4 - cI)`` proves ``Diag(z) - L/4`` positive semidefinite."""
    n = graph.n_vertices
    magnitude = np.abs(dual_guess) + np.abs(degrees) / 4.0
    # backward error of Cholesky / LDL^T on a positive definite matrix:
    # |dA| <= gamma_{n+1} d d^T, so ||dA||_2 <= gamma_{n+1} * trace
    backward = _gamma(n + 1) * float(magnitude.sum())
    # rounding of the diagonal entries (z_i - d_i/4 - c) and of the degree sums
    entries = float(np.max(4.0 * _EPS * magnitude + _gamma(int(counts.max()) + 1) * abs_degrees / 4.0))
    return 2.0 * (backward + entries) + 1e-300


def _dense_shifted(graph: SignedGraph, diagonal: np.ndarray) -> np.ndarray:
    """Dense ``Diag(diagonal) + W/4`` (lower triangle is what LAPACK reads; fill both)."""
    n = graph.n_vertices
    mat = np.zeros((n, n), dtype=np.float64)
    rows = np.repeat(np.arange(n), np.diff(graph.indptr))
    mat[rows, graph.indices] = graph.weights / 4.0
    mat[np.arange(n), np.arange(n)] = diagonal
    return mat


def _sparse_shifted(graph: SignedGraph, diagonal: np.ndarray) -> sp.csc_array:
    n = graph.n_vertices
    w = sp.csr_array((graph.weights / 4.0, graph.indices, graph.indptr), shape=(n, n))
    return (w + sp.diags_array(diagonal)).tocsc()


def _ldl_positive_definite(mat: sp.csc_array) -> bool:
    """True when a symmetric LDL^T (no pivoting, symmetric ordering) has only positive pivots."""
    try:
        lu = spla.splu(mat, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                       options=dict(SymmetricMode=True, Equil=False))
    except RuntimeError:  # exactly singular pivot
        return False
    if not np.array_equal(lu.perm_r, lu.perm_c):
        return False  # SuperLU pivoted off the diagonal: not a symmetric factorisation
    pivots = lu.U.diagonal()
    return bool(np.all(np.isfinite(pivots)) and np.all(pivots > 0.0))


class _SparseShifted:
    """``Diag(diagonal) + W/4`` in CSC form: the structure is built once per graph and
    only the diagonal changes between factorisations (the same matrix as
    :func:`_sparse_shifted` whenever no diagonal entry is exactly 0)."""

    def __init__(self, graph: SignedGraph):
        n = graph.n_vertices
        # W is symmetric: its CSR rows are its CSC columns; insert each diagonal entry
        # after the rows above it
        columns = np.repeat(np.arange(n), np.diff(graph.indptr))
        above = np.bincount(columns[graph.indices < columns], minlength=n)
        indptr = graph.indptr + np.arange(n + 1)
        self.diagonal_at = indptr[:-1] + above
        off = np.ones(int(indptr[-1]), dtype=bool)
        off[self.diagonal_at] = False
        indices = np.empty(int(indptr[-1]), dtype=np.int64)
        indices[off] = graph.indices
        indices[self.diagonal_at] = np.arange(n)
        data = np.zeros(int(indptr[-1]))
        data[off] = graph.weights / 4.0
        self.graph = graph
        self.matrix = sp.csc_array((data, indices, indptr), shape=(n, n))

    def with_diagonal(self, diagonal: np.ndarray) -> sp.csc_array:
        if np.any(diagonal == 0.0):  # a sum of sparse matrices stores no zero entry
            return _sparse_shifted(self.graph, diagonal)
        self.matrix.data[self.diagonal_at] = diagonal
        return self.matrix


def _is_positive_definite(graph: SignedGraph, diagonal: np.ndarray, dense: bool,
                          shifted: _SparseShifted | None = None) -> bool:
    """Factorisation test of ``Diag(diagonal) + W/4``: Cholesky (dense) or LDL^T pivots
    of ``shifted`` (the sparse matrix, needed when not ``dense``).

    Call it with at most one BLAS thread (:func:`_blas_threads`)."""
    if dense:
        try:
            sla.cholesky(_dense_shifted(graph, diagonal), lower=True, overwrite_a=True,
                         check_finite=False)
        except sla.LinAlgError:
            return False
        return True
    return _ldl_positive_definite(shifted.with_diagonal(diagonal))


@contextlib.contextmanager
def _blas_threads(limit: int):
    """Run the block with at most ``limit`` BLAS threads, when the BLAS allows it.

    A multi-threaded BLAS spinning on busy cores made a 400 x 400 Cholesky
    factorisation take 1.6 s instead of 1 ms (2 cores, load 5): the certificate
    factorises with one thread. Uses threadpoolctl when installed, else the
    thread setter of the OpenBLAS bundled with scipy; does nothing otherwise.
    """
    try:
        from threadpoolctl import threadpool_limits  # noqa: PLC0415 - optional
    except ImportError:
        threadpool_limits = None
    if threadpool_limits is not None:
        with threadpool_limits(limits=limit, user_api="blas"):
            yield
        return
    setter = _openblas_thread_setter()
    if setter is None:
        yield
        return
    get, set_ = setter
    before = int(get())
    set_(int(limit))
    try:
        yield
    finally:
        set_(before)


_OPENBLAS = []


def _openblas_thread_setter():
    """``(get_num_threads, set_num_threads)`` of scipy's bundled OpenBLAS, or None."""
    if not _OPENBLAS:
        found = None
        try:
            import ctypes
            import glob
            import os

            import scipy

            folder = os.path.join(os.path.dirname(os.path.dirname(scipy.__file__)), "scipy.libs")
            for path in sorted(glob.glob(os.path.join(folder, "libscipy_openblas*"))):
                lib = ctypes.CDLL(path)
                for prefix in ("scipy_openblas", "openblas"):
                    get = getattr(lib, f"{prefix}_get_num_threads", None)
                    set_ = getattr(lib, f"{prefix}_set_num_threads", None)
                    if get is not None and set_ is not None:
                        get.restype = ctypes.c_int
                        set_.argtypes = [ctypes.c_int]
                        found = (get, set_)
                        break
                if found:
                    break
        except (OSError, ImportError, AttributeError):
            found = None
        _OPENBLAS.append(found)
    return _OPENBLAS[0]


def certify_dual(graph, dual, *, target_shift: float = 0.0,
                 dense_limit: int = _DENSE_LIMIT) -> tuple[np.ndarray, float, bool]:
    """Shift a dual estimate until ``Diag(z) - L/4`` is provably positive semidefinite.

    Parameters
    ----------
    graph : SignedGraph or graph-like
    dual : (n,) array_like of float
        Any estimate ``y`` (for example the diagonal of ``(L/4) V V^T`` from a factor).
    target_shift : float, default 0
        First shift ``s`` tried (``z = y + s`` plus a round-off margin). When it is
        confirmed, smaller shifts are tried (halving, down to 1/8 of it); when it fails,
        larger ones (x8 each time) up to the Gershgorin shift, which always works.
    dense_limit : int, default 3000
        Up to this many vertices the proof is a dense Cholesky factorisation;
        above it, the signs of the pivots of a sparse symmetric ``LDL^T``
        factorisation (Sylvester's law of inertia).

    Returns
    -------
    z : (n,) float64 ndarray
        ``y + s`` for a scalar shift ``s >= 0``.
    bound : float
        ``sum(z)`` rounded upwards: an upper bound on the max-cut value when
        ``certified``.
    certified : bool
        True when a factorisation confirmed ``Diag(z) - L/4`` positive definite
        with a margin covering floating-point round-off. False only when every
        attempt failed; then ``z`` and ``bound`` prove nothing.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges
    >>> triangle = graph_from_edges(3, [0, 1, 0], [1, 2, 2])
    >>> z, bound, certified = certify_dual(triangle, [0.75, 0.75, 0.75])
    >>> certified, round(bound, 6)
    (True, 2.25)
    """
    graph = as_signed_graph(graph)
    y = np.array(dual, dtype=np.float64)
    if y.shape != (graph.n_vertices,) or not np.all(np.isfinite(y)):
        raise ValueError(
            f"dual must be a finite vector with one entry per vertex ({graph.n_vertices}); "
            f"got shape {y.shape}"
        )
    if isinstance(target_shift, bool) or not isinstance(target_shift, (int, float, np.number)) \
            or not math.isfinite(target_shift) or target_shift < 0:
        raise ValueError(f"target_shift must be a finite number >= 0; got {target_shift!r}")
    cert = _certify(graph, y, target_shift=float(target_shift), dense_limit=int(dense_limit))
    return cert.dual, cert.bound, cert.certified


def _certify(graph: SignedGraph, y: np.ndarray, *, target_shift: float,
             dense_limit: int, tighten: int = 3) -> _Certificate:
    """Ladder of factorisations: the smallest confirmed shift near ``target_shift``
    (every factorisation with one BLAS thread)."""
    with _blas_threads(1):
        return _certify_ladder(graph, y, target_shift=target_shift, dense_limit=dense_limit,
                               tighten=tighten)


def _certify_ladder(graph: SignedGraph, y: np.ndarray, *, target_shift: float,
                    dense_limit: int, tighten: int) -> _Certificate:
    start = time.perf_counter()
    n = graph.n_vertices
    if n == 0:
        return _Certificate(y.copy(), 0.0, True, 0.0, 0.0, 0, 0.0)
    degrees = graph.degrees
    counts = np.diff(graph.indptr)
    rows = np.repeat(np.arange(n), counts)
    abs_degrees = np.bincount(rows, weights=np.abs(graph.weights), minlength=n)
    dense = n <= dense_limit
    shifted = None if dense else _SparseShifted(graph)
    # shift that makes Diag(y) - L/4 diagonally dominant, hence positive semidefinite
    gershgorin = max(0.0, float(np.max(abs_degrees / 4.0 - (y - degrees / 4.0))))
    attempts = 0

    def attempt(shift, extra=0.0):
        nonlocal attempts
        attempts += 1
        c = _round_off_margin(graph, y + shift, degrees, abs_degrees, counts)
        total = shift + 2.0 * c + extra
        z = y + total
        c = _round_off_margin(graph, z, degrees, abs_degrees, counts)
        if not _is_positive_definite(graph, (z - degrees / 4.0) - c, dense, shifted):
            return None
        bound = float(np.nextafter(math.fsum(z), math.inf))
        return _Certificate(z, bound, True, total, c, attempts, 0.0)

    shift = min(max(target_shift, 0.0), gershgorin)
    best = attempt(shift)
    if best is not None:
        for _ in range(tighten):
            if shift <= 0.0:
                break
            shift /= 2.0
            smaller = attempt(shift)
            if smaller is None:
                break
            best = smaller
    else:
        while best is None and shift < gershgorin:
            shift = min(gershgorin, max(8.0 * shift, 1e-12 * max(gershgorin, 1e-300)))
            best = attempt(shift)
        margin = _round_off_margin(graph, y + shift, degrees, abs_degrees, counts)
        for k in range(_MAX_CONFIRM_ATTEMPTS):
            if best is not None:
                break
            best = attempt(shift, extra=margin * 4.0 ** k)
    seconds = time.perf_counter() - start
    if best is None:
        z = y + shift
        return _Certificate(z, float(math.fsum(z)), False, shift, 0.0, attempts, seconds)
    return _Certificate(best.dual, best.bound, True, best.shift, best.margin, attempts, seconds)


# --------------------------------------------------------------------------- relaxation

def _check_positive_int(name, value):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
        raise ValueError(f"{name} must be a positive integer; got {value!r}")
    return int(value)


def _check_time_limit(time_limit):
    if time_limit is None:
        return None
    if isinstance(time_limit, bool) or not isinstance(time_limit, (int, float, np.number)) \
            or not math.isfinite(time_limit) or time_limit <= 0:
        raise ValueError(f"time_limit must be a positive number of seconds; got {time_limit!r}")
    return float(time_limit)


def _check_tol(tol):
    if isinstance(tol, bool) or not isinstance(tol, (int, float, np.number)) \
            or not math.isfinite(tol) or not 0 < tol < 1:
        raise ValueError(f"tol must be a number in (0, 1); got {tol!r}")
    return float(tol)


def _positive_weight_bound(graph: SignedGraph) -> float:
    w = graph.weights
    return float(np.nextafter(math.fsum(w[w > 0]) / 2.0, math.inf))


def solve_sdp_relaxation(graph, *, tol: float = THOROUGH.tol, max_sweeps: int = 20000,
                         rank: int | None = None, time_limit: float | None = None,
                         rng=None) -> SdpSolution:
    """Solve the max-cut semidefinite relaxation in low rank, with a certified bound.

    Cyclic mixing sweeps ``v_i <- -normalise(sum_j w_ij v_j)`` run until the
    *certified* relative gap ``(upper_bound - relaxation_value) / |upper_bound|``
    is at most ``tol``. The certificate costs an eigenvalue computation, so it is
    checked only when the relative change of the objective per sweep falls below a
    threshold that is lowered after each failed check (a small change per sweep
    alone says little about the gap).

    Parameters
    ----------
    graph : SignedGraph or graph-like
    tol : float, default 1e-4
        Target certified relative gap between the bound and the relaxation value.
    max_sweeps : int, default 20000
        Budget of sweeps; the answer is still certified when it runs out.
    rank : int, optional
        Columns of the factor; ``ceil(sqrt(2 n)) + 1`` by default.
    time_limit : float, optional
        Seconds for the sweeps. The last certificate runs after the clock stops
        them, so the call can take longer by one certificate. Results that the
        clock cut short are not reproducible; the iteration budget is.
    rng : None, int or numpy.random.Generator
        Seed of the random unit start.

    Returns
    -------
    SdpSolution

    Raises
    ------
    ValueError
        For a bad ``tol``, ``max_sweeps``, ``rank`` or ``time_limit``.

    See Also
    --------
    round_hyperplanes : turn the factor into a cut.
    certify_dual : the certificate on its own.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges
    >>> pentagon = graph_from_edges(5, [0, 1, 2, 3, 4], [1, 2, 3, 4, 0])
    >>> sol = solve_sdp_relaxation(pentagon, tol=1e-8, rng=0)
    >>> sol.certified, round(sol.relaxation_value, 5), round(sol.upper_bound, 5)
    (True, 4.52254, 4.52254)
    """
    tol = _check_tol(tol)
    max_sweeps = _check_positive_int("max_sweeps", max_sweeps)
    time_limit = _check_time_limit(time_limit)
    graph = as_signed_graph(graph)
    n = graph.n_vertices
    k = default_rank(n) if rank is None else _check_positive_int("rank", rank)
    rng = np.random.default_rng(rng)
    start = time.perf_counter()

    factor = rng.standard_normal((n, k))
    norms = np.linalg.norm(factor, axis=1)
    norms[norms == 0] = 1.0
    factor = np.ascontiguousarray(factor / norms[:, None])
    if graph.n_edges == 0:
        return SdpSolution(factor=factor, relaxation_value=0.0, upper_bound=0.0,
                           dual=np.zeros(n), n_sweeps=0, seconds=time.perf_counter() - start,
                           certified=True, status="optimal", gap=0.0,
                           message="no edges: every cut and the relaxation are 0")
    run = _MixingRun(graph, factor, tol)
    run.sweep(max_sweeps, time_limit, start)
    return run.solution(start)


class _MixingRun:
    """State of one relaxation solve: the factor, its objective and the best certificate.

    The certified gap shrinks roughly like the square root of the relative change of
    the objective per sweep (gap ~ 0.2-0.4 sqrt(change) on G-set graphs). A sweep costs
    far less than a certificate, so the first check comes well past the point where
    that law predicts the target, the next where it predicts it again, and in any case
    every ``check_every`` sweeps (doubling), in case the change per sweep stalls above
    the threshold while the gap is already small.
    """

    def __init__(self, graph: SignedGraph, factor: np.ndarray, tol: float):
        self.graph, self.factor, self.tol = graph, factor, tol
        self.twice_total = float(graph.weights.sum())
        self.floor = _gap_floor(graph)
        self.scratch = np.empty(factor.shape[1], dtype=np.float64)
        self.objective = self._factor_objective()
        self.best: _Certificate | None = None
        self.certified_at = -1
        self.bound_seconds = 0.0
        self.last_check_seconds = 0.0
        self.next_check = tol ** 2
        self.check_every = 1000
        self.sweeps = 0
        self.status = None
        self.relative_change = math.inf

    def _factor_objective(self) -> float:
        g = self.graph
        return _sdp_kernels.factor_objective(g.indptr, g.indices, g.weights, self.factor)

    def primal(self) -> float:
        return (self.twice_total - self.objective) / 4.0

    def check(self, expected_gap: float = 0.0, tighten: int = 3) -> float:
        """Certify the current factor; return the certified gap (inf when unconfirmed)."""
        g, n = self.graph, self.graph.n_vertices
        self.objective = self._factor_objective()
        y = np.empty(n, dtype=np.float64)
        _sdp_kernels.dual_estimate(g.indptr, g.indices, g.weights, self.factor, g.degrees, y)
        # a shift that meets half the tolerance (n s <= tol * bound / 2), or the
        # expected gap when the sweeps stopped early
        target = (max(0.5 * self.tol, expected_gap) * max(abs(self.primal()), self.floor)
                  / max(n, 1))
        cert = _certify(g, y, target_shift=target, dense_limit=_relaxation_dense_limit(g),
                        tighten=tighten)
        self.bound_seconds += cert.seconds
        self.last_check_seconds = cert.seconds
        self.certified_at = self.sweeps
        best = self.best
        if cert.certified and (best is None or not best.certified or cert.bound < best.bound):
            self.best = cert
        elif best is None:
            self.best = cert
        if not self.best.certified:
            return math.inf
        return _relaxation_gap(self.primal(), self.best.bound, self.floor)

    def _out_of_budget(self, max_sweeps, time_limit, start) -> bool:
        if self.sweeps >= max_sweeps:
            self.status = "iteration_limit"
            return True
        if time_limit is not None:
            # keep time for the last certificate: as long as the last one took, or
            # 30% of the limit before any was measured
            reserve = self.last_check_seconds if self.certified_at >= 0 else 0.3 * time_limit
            if time.perf_counter() + reserve >= start + time_limit:
                self.status = "time_limit"
                return True
        return False

    def sweep(self, max_sweeps: int, time_limit, start: float) -> None:
        """Mixing sweeps until the certified gap meets ``tol`` or a budget runs out."""
        g = self.graph
        while not self._out_of_budget(max_sweeps, time_limit, start):
            change = _sdp_kernels.mixing_sweep(g.indptr, g.indices, g.weights, self.factor,
                                               self.scratch)
            self.sweeps += 1
            self.objective += change
            self.relative_change = abs(change) / 4.0 / max(abs(self.primal()), self.floor)
            if self.relative_change <= self.next_check \
                    or self.sweeps - self.certified_at >= self.check_every:
                if self.relative_change > self.next_check:
                    self.check_every *= 2  # a check the schedule did not ask for: space them
                gap = self.check()
                if gap <= self.tol:
                    self.status = "gap_reached"
                    return
                if self.relative_change <= _STALL_CHANGE:
                    self.status = "iteration_limit"
                    return
                if math.isfinite(gap) and gap > 0:
                    self.next_check = self.relative_change * min(0.25,
                                                                  (0.5 * self.tol / gap) ** 2)
                else:
                    self.next_check = 0.5 * self.relative_change

    def solution(self, start: float) -> SdpSolution:
        """The last certificate (if the sweeps moved since) and the answer."""
        if self.certified_at != self.sweeps:
            if self.status == "time_limit":
                # far from converged: start the ladder near the gap the square-root law
                # predicts, and spend no time tightening
                self.check(expected_gap=min(0.5, 0.5 * math.sqrt(self.relative_change)),
                           tighten=0)
            else:
                self.check()
        primal, best, status = self.primal(), self.best, self.status
        if status == "iteration_limit" and best.certified \
                and _relaxation_gap(primal, best.bound, self.floor) <= self.tol:
            status = "gap_reached"
        if best.certified:
            bound, dual = best.bound, best.dual
            gap = _relaxation_gap(primal, bound, self.floor)
            message = (f"{status}: certified relative gap {gap:.3g} after {self.sweeps} "
                       f"sweeps (bound {bound:.10g}, relaxation {primal:.10g})")
        else:
            bound, dual = _positive_weight_bound(self.graph), best.dual
            gap = _relaxation_gap(primal, bound, self.floor)
            message = (f"{status}: the SDP dual bound could not be confirmed by a "
                       "factorisation; upper_bound falls back to the sum of positive weights "
                       f"{bound:.10g}")
        return SdpSolution(factor=self.factor, relaxation_value=float(primal),
                           upper_bound=float(bound), dual=dual, n_sweeps=self.sweeps,
                           seconds=time.perf_counter() - start, certified=best.certified,
                           status=status, gap=gap, bound_seconds=self.bound_seconds,
                           message=message)


# --------------------------------------------------------------------------- rounding

def _check_factor(graph: SignedGraph, factor) -> np.ndarray:
    factor = np.ascontiguousarray(factor, dtype=np.float64)
    if factor.ndim != 2 or factor.shape[0] != graph.n_vertices or factor.shape[1] < 1:
        raise ValueError(
            f"factor must have shape (n_vertices, k) = ({graph.n_vertices}, k >= 1); "
            f"got {factor.shape}"
        )
    if not np.all(np.isfinite(factor)):
        raise ValueError("factor must be finite")
    return factor


def _hyperplane_signs(graph: SignedGraph, factor: np.ndarray, n_hyperplanes: int,
                      rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    normals = rng.standard_normal((factor.shape[1], n_hyperplanes))
    signs = np.where(factor @ normals >= 0.0, 1, -1).astype(np.int8)
    signs = np.ascontiguousarray(signs)
    values = np.empty(n_hyperplanes, dtype=np.float64)
    _sdp_kernels.cut_values_of_columns(graph.indptr, graph.indices, graph.weights, signs, values)
    return signs, values


def hyperplane_cut_values(graph, factor, *, n_hyperplanes: int = THOROUGH.n_hyperplanes,
                          rng=None) -> np.ndarray:
    """Cut values of Goemans-Williamson roundings by random hyperplanes (no polish).

    Vertex ``i`` goes to side ``sign(<v_i, r>)`` for a Gaussian normal vector ``r``;
    on graphs with nonnegative weights the *expected* cut is at least 0.87856 times
    the relaxation value (Goemans & Williamson 1995).

    Parameters
    ----------
    graph : SignedGraph or graph-like
    factor : (n, k) array_like
        Unit rows, for example :attr:`SdpSolution.factor`.
    n_hyperplanes : int, default 100
    rng : None, int or numpy.random.Generator

    Returns
    -------
    (n_hyperplanes,) float64 ndarray
        The cut value of each rounding; the same ``rng`` draws the same hyperplanes
        as :func:`round_hyperplanes`.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges
    >>> square = graph_from_edges(4, [0, 1, 2, 3], [1, 2, 3, 0])
    >>> sol = solve_sdp_relaxation(square, rng=0)
    >>> hyperplane_cut_values(square, sol.factor, n_hyperplanes=3, rng=1)
    array([4., 4., 4.])
    """
    graph = as_signed_graph(graph)
    factor = _check_factor(graph, factor)
    n_hyperplanes = _check_positive_int("n_hyperplanes", n_hyperplanes)
    return _hyperplane_signs(graph, factor, n_hyperplanes, np.random.default_rng(rng))[1]


def round_hyperplanes(graph, factor, *, n_hyperplanes: int = THOROUGH.n_hyperplanes, rng=None,
                      polish: bool = True, n_polish: int = 8) -> np.ndarray:
    """Goemans-Williamson rounding of a factor by many random hyperplanes at once.

    Parameters
    ----------
    graph : SignedGraph or graph-like
    factor : (n, k) array_like
        Unit rows, for example :attr:`SdpSolution.factor`.
    n_hyperplanes : int, default 100
        Random hyperplanes tried (``sides = sign(V @ R)`` for a Gaussian ``(k, H)``
        matrix ``R``).
    rng : None, int or numpy.random.Generator
    polish : bool, default True
        Improve the best roundings with a 1-flip descent; the answer is then a
        1-flip local optimum.
    n_polish : int, default 8
        How many of the best roundings are polished; the best result is kept.

    Returns
    -------
    (n,) int8 ndarray of +-1
        The best cut found.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges, cut_value
    >>> pentagon = graph_from_edges(5, [0, 1, 2, 3, 4], [1, 2, 3, 4, 0])
    >>> sol = solve_sdp_relaxation(pentagon, rng=0)
    >>> cut_value(pentagon, round_hyperplanes(pentagon, sol.factor, rng=0))
    4.0
    """
    graph = as_signed_graph(graph)
    factor = _check_factor(graph, factor)
    n_hyperplanes = _check_positive_int("n_hyperplanes", n_hyperplanes)
    n_polish = _check_positive_int("n_polish", n_polish)
    rng = np.random.default_rng(rng)
    signs, values = _hyperplane_signs(graph, factor, n_hyperplanes, rng)
    order = np.argsort(-values, kind="stable")
    if not polish:
        return signs[:, order[0]].copy()
    best_sides, best_value = None, -math.inf
    for h in order[:n_polish]:
        sides, _ = descend(graph, signs[:, h], rng=rng)
        value = cut_value(graph, sides)
        if value > best_value:
            best_sides, best_value = sides, value
    return best_sides


# --------------------------------------------------------------------------- the method

def _solve_sdp(graph: SignedGraph, *, time_limit=None, rng=None, tol: float = THOROUGH.tol,
               max_sweeps: int = 20000, rank: int | None = None,
               n_hyperplanes: int = THOROUGH.n_hyperplanes,
               polish: bool = True) -> CutResult:
    """SDP relaxation with a certified upper bound, Goemans-Williamson rounding and 1-flip polish."""
    tol = _check_tol(tol)
    max_sweeps = _check_positive_int("max_sweeps", max_sweeps)
    n_hyperplanes = _check_positive_int("n_hyperplanes", n_hyperplanes)
    if rank is not None:
        _check_positive_int("rank", rank)
    rng = np.random.default_rng(rng)
    relaxation = solve_sdp_relaxation(graph, tol=tol, max_sweeps=max_sweeps, rank=rank,
                                      time_limit=time_limit, rng=rng)
    sides = round_hyperplanes(graph, relaxation.factor, n_hyperplanes=n_hyperplanes, rng=rng,
                              polish=bool(polish))
    value = cut_value(graph, sides)
    bound = relaxation.upper_bound if relaxation.certified else None
    integral = bool(np.all(graph.weights == np.round(graph.weights))
                    and np.abs(graph.weights).sum() < 2.0 ** 52)
    if relaxation.status == "time_limit":
        status = "time_limit"
    elif bound is not None and (value >= bound or (integral and value > bound - 1.0)):
        status = "optimal"  # an integer cut value below bound < value + 1 cannot exist
    elif polish:
        status = "local_optimum"
    else:
        status = "iteration_limit"
    info = {
        "relaxation_value": relaxation.relaxation_value,
        "certified": relaxation.certified,
        "n_sweeps": relaxation.n_sweeps,
        "bound_seconds": relaxation.bound_seconds,
        "relaxation_gap": relaxation.gap,
        "relaxation_status": relaxation.status,
        "rank": int(relaxation.factor.shape[1]),
    }
    if not relaxation.certified:
        info["uncertified_bound"] = float(math.fsum(relaxation.dual))
    if relaxation.certified:
        about = (f"relaxation {relaxation.relaxation_value:.10g} certified within relative "
                 f"{relaxation.gap:.2g} after {relaxation.n_sweeps} sweeps ({relaxation.status})")
    else:
        about = (f"relaxation {relaxation.relaxation_value:.10g} after {relaxation.n_sweeps} "
                 "sweeps; its bound could not be confirmed by a factorisation, none reported")
    message = (f"{about}; best of {n_hyperplanes} hyperplane roundings"
               + (", 1-flip polished" if polish else ""))
    return CutResult(sides=sides, value=value, upper_bound=bound, gap=None, method="sdp",
                     status=status, message=message, n_iter=relaxation.n_sweeps,
                     info=info)


register_method("sdp", _solve_sdp)
