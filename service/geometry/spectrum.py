"""Leading eigenpairs of the symmetric conjugate of a diffusion operator.

Implementation notes for maintainers
------------------------------------
The operator is ``A = A_s + c w w^T`` with ``A_s`` sparse symmetric (the conjugated
kernel), ``c w w^T`` an optional rank-one regularisation term, and a known top
eigenpair ``(1, top)``. Its spectrum lies in ``[-1, 1]``. The solvers:

``dense``
    LAPACK ``eigh`` on the dense matrix; exact, for small graphs.
``chebyshev``
    ARPACK (implicitly restarted Lanczos) on a Chebyshev polynomial of ``A`` that maps
    ``[lambda_min, cut]`` into ``[-1, 1]`` and grows fast above ``cut``, then a
    Rayleigh-Ritz step with ``A`` itself. ``cut`` comes from a Galerkin (Rayleigh-Ritz)
    restriction of the operator to aggregates of strongly tied nodes: by the
    Courant-Fischer theorem the restricted eigenvalues are lower bounds of the true
    ones, so ``cut = theta_{k + guard}`` lies safely below every wanted eigenvalue.
    The polynomial cuts the number of Lanczos steps (and ARPACK's restarts and
    re-orthogonalisations, which dominated plain ARPACK on clustered spectra) by
    about its degree while keeping every wanted eigenvalue in the enhanced region.
    Measured (``service.bench.spectrum_solvers``, 15-NN graphs, 41 pairs): 0.8 s at
    10,000 nodes, 4.6 s at 30,000, 26 s at 100,000 on 2 cores, residuals < 1e-10.
``shift-invert``
    ARPACK on ``(sigma I - A)^-1``, ``sigma = 1 + 1e-5``, with a SuperLU factorisation;
    its cost hardly depends on how clustered the top is, but on the factor's fill-in:
    small on components of many weakly joined topics (text archives: 7.9 M entries,
    5 s for 40 pairs at 42,378 nodes), large on one compact topic or a low-dimensional
    point cloud (minutes and gigabytes at 100,000 nodes of `service.bench.graphs`).
``adaptive``
    What ``auto`` runs: ``dense`` up to ``DENSE_MAX`` nodes, then ``shift-invert`` when
    the coarse lower bound of the k-th eigenvalue lies within ``SHIFT_INVERT_GAP`` of 1,
    ``chebyshev`` otherwise (see `_adaptive_choice` for the measurements).

Every Krylov solver runs with BLAS on ``KRYLOV_BLAS_THREADS`` thread(s): its BLAS calls
are vector-sized, and on shared cores waiting threads cost more than they give.
``arpack``
    Plain ARPACK on ``A`` with the top vector deflated; slow on clustered spectra and at a
    loose tolerance can miss an eigenvalue of a cluster (measured).
``lobpcg``
    scipy's LOBPCG without preconditioner, the top vector as constraint; for comparison.
"""

from __future__ import annotations

import functools
import itertools
import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components
from scipy.sparse.linalg import LinearOperator, eigsh, lobpcg, splu
from threadpoolctl import threadpool_limits

from service.geometry.types import FloatArray, IntArray, RngLike, as_generator

SOLVERS = ("auto", "adaptive", "dense", "chebyshev", "shift-invert", "arpack", "lobpcg")
# What ``solver="auto"`` means: "adaptive" (the measured rule of `leading_eigenpairs`) or
# "chebyshev" (the rule before it: dense up to DENSE_MAX, chebyshev beyond).
AUTO_SOLVER = "adaptive"
DENSE_MAX = 1200  # auto uses LAPACK up to here: measured 0.3 s at 1,200 nodes, as chebyshev
COARSE_MAX = 1500  # the aggregation stops below this many nodes
GUARD_FRACTION = 0.5  # cut = coarse theta_{k + guard}, guard = max(10, k * fraction)
# Measured at 100,000 nodes: about 9,000 products at degree 12, 15 or 30 (Lanczos needs
# them to resolve the clustered top whatever the polynomial); degree 30 spends least in
# ARPACK's own restarts. A larger Krylov space (ncv = k + 120) did not save products.
CHEB_DEGREE = 30
CHEB_NCV_EXTRA = 40

PARALLEL_MIN_NNZ = 500_000  # below this a thread hand-off costs more than it saves


@functools.cache
def _pool(workers: int) -> ThreadPoolExecutor:
    # Created on first use, never at import. scipy's sparse kernels release the GIL, so
    # row blocks multiply in parallel (measured 1.8x on 2 cores at 100,000 nodes).
    return ThreadPoolExecutor(max_workers=workers, thread_name_prefix="spmv")


def _n_workers() -> int:
    try:
        return max(1, min(4, len(os.sched_getaffinity(0))))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, min(4, os.cpu_count() or 1))


def _row_blocks(M: sp.csr_matrix, parts: int) -> tuple[tuple[int, int, sp.csr_matrix], ...]:
    """Row slices of about equal numbers of non-zeros."""
    cuts = np.searchsorted(M.indptr, np.linspace(0, M.nnz, parts + 1)[1:-1])
    bounds = np.unique(np.r_[0, cuts, M.shape[0]])
    return tuple((int(a), int(b), M[int(a) : int(b)]) for a, b in itertools.pairwise(bounds))


@dataclass(frozen=True)
class SymOperator:
    """``A = A_s + c w w^T`` with sparse symmetric ``A_s`` and a known top eigenvector."""

    sparse: sp.csr_matrix
    rank_one: FloatArray
    rank_one_scale: float
    top: FloatArray
    blocks: tuple[tuple[int, int, sp.csr_matrix], ...] = field(default=(), repr=False)

    @staticmethod
    def build(
        sparse: sp.csr_matrix, rank_one: FloatArray, rank_one_scale: float, top: FloatArray
    ) -> SymOperator:
        """Operator with the sparse part split for parallel products when it pays."""
        workers = _n_workers()
        blocks = (
            _row_blocks(sparse, workers) if workers > 1 and sparse.nnz >= PARALLEL_MIN_NNZ else ()
        )
        return SymOperator(sparse, rank_one, rank_one_scale, top, blocks)

    @property
    def n(self) -> int:
        return int(self.sparse.shape[0])

    def _sparse_product(self, X: FloatArray) -> FloatArray:
        if not self.blocks:
            return np.asarray(self.sparse @ X)
        out = np.empty((self.n, *X.shape[1:]))

        def run(block: tuple[int, int, sp.csr_matrix]) -> None:
            a, b, rows = block
            out[a:b] = rows @ X

        list(_pool(len(self.blocks)).map(run, self.blocks))
        return out

    def matmat(self, X: FloatArray) -> FloatArray:
        """``A @ X`` for a vector or a block of column vectors."""
        Y = self._sparse_product(X)
        if self.rank_one_scale != 0.0:
            w = self.rank_one
            if X.ndim == 2:
                Y += self.rank_one_scale * np.outer(w, w @ X)
            else:
                Y += self.rank_one_scale * (w @ X) * w
        return Y

    def dense(self) -> FloatArray:
        """The operator as a dense array (small graphs only)."""
        M = self.sparse.toarray()
        if self.rank_one_scale != 0.0:
            M += self.rank_one_scale * np.outer(self.rank_one, self.rank_one)
        return M


@dataclass(frozen=True)
class Eigenpairs:
    """Leading eigenpairs (descending) of a :class:`SymOperator`, top pair first."""

    values: FloatArray
    vectors: FloatArray
    residuals: FloatArray
    solver: str
    smallest: float


def residual_norms(op: SymOperator, values: FloatArray, vectors: FloatArray) -> FloatArray:
    """``||A v_k - lambda_k v_k||_2`` for unit vectors ``v_k`` (columns)."""
    return np.asarray(np.linalg.norm(op.matmat(vectors) - vectors * values, axis=0))


def _deflated(op: SymOperator) -> Callable[[FloatArray], FloatArray]:
    top = op.top

    def apply(x: FloatArray) -> FloatArray:
        x = x - top * (top @ x)
        y = op.matmat(x)
        return np.asarray(y - top * (top @ y))

    return apply


def _rayleigh_ritz(op: SymOperator, basis: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Ritz pairs of ``A`` on ``span(basis)``, descending; the top vector is kept exact."""
    basis = basis - np.outer(op.top, op.top @ basis)
    Q, _ = np.linalg.qr(basis)
    AQ = op.matmat(Q)
    H = Q.T @ AQ
    theta, Z = np.linalg.eigh((H + H.T) / 2)
    order = np.argsort(theta)[::-1]
    values = np.r_[1.0, theta[order]]
    vectors = np.column_stack([op.top, Q @ Z[:, order]])
    return values, vectors


def _smallest_eigenvalue(op: SymOperator, rng: np.random.Generator) -> float:
    if op.n <= DENSE_MAX:
        return float(sla.eigvalsh(op.dense(), subset_by_index=[0, 0])[0])
    v0 = rng.standard_normal(op.n)
    linop = LinearOperator((op.n, op.n), matvec=op.matmat, dtype=np.float64)
    theta, vec = eigsh(linop, k=1, which="SA", tol=1e-8, v0=v0)
    # A Ritz value lies above lambda_min; widen by the residual to stay on the safe side.
    res = float(residual_norms(op, theta, vec)[0])
    return max(-1.0, float(theta[0]) - res)


# -- coarse Galerkin restriction (gives the Chebyshev cut) ---------------------------------


def _aggregate(S: sp.csr_matrix, strength: float = 0.5) -> IntArray:
    """Aggregate label per node: join each node to its strongest neighbour when that tie
    is also strong for the neighbour (so aggregates do not straddle weak cuts)."""
    n = S.shape[0]
    rows = np.repeat(np.arange(n), np.diff(S.indptr))
    data = np.where(S.indices == rows, -np.inf, S.data)
    nonempty = np.diff(S.indptr) > 0
    row_max = np.full(n, -np.inf)
    row_max[nonempty] = np.maximum.reduceat(data, S.indptr[:-1][nonempty])
    hit = np.flatnonzero((data == row_max[rows]) & np.isfinite(data) & (data > 0))
    first_rows, first = np.unique(rows[hit], return_index=True)
    best = S.indices[hit[first]]
    keep = S.data[hit[first]] >= strength * row_max[best]
    G = sp.csr_matrix((np.ones(int(keep.sum())), (first_rows[keep], best[keep])), shape=(n, n))
    return connected_components(G, directed=False)[1].astype(np.int64)


def coarse_ritz_values(op: SymOperator, k: int, coarse_max: int = COARSE_MAX) -> FloatArray:
    """Top ``k`` eigenvalues of a Galerkin restriction of ``A`` to node aggregates.

    Each is a lower bound of the matching true eigenvalue (Courant-Fischer), because the
    restriction is a Rayleigh-Ritz projection onto piecewise-constant vectors (in the
    ``D``-weighted form). Aggregation repeats until at most ``coarse_max`` nodes remain or
    it stops shrinking the graph.

    Raises
    ------
    RuntimeError
        When aggregation stalls above ``4 * coarse_max`` nodes (a dense solve would be
        too large).
    """
    # The generalized form K psi = lambda D psi, with K = S A S, S = diag(top), D = S^2:
    # aggregating K and D keeps every level a graph whose degrees are its row sums.
    s = op.top
    K = sp.diags(s) @ op.sparse @ sp.diags(s)
    u = op.rank_one * s
    d = s * s
    while K.shape[0] > coarse_max:
        r = 1.0 / np.sqrt(d)
        labels = _aggregate((sp.diags(r) @ K @ sp.diags(r)).tocsr())
        n_coarse = int(labels.max()) + 1
        if n_coarse > 0.9 * K.shape[0] or n_coarse <= k:
            break
        P = sp.csr_matrix((np.ones(K.shape[0]), (np.arange(K.shape[0]), labels)))
        K = (P.T @ K @ P).tocsr()
        u, d = P.T @ u, P.T @ d
    if K.shape[0] > 4 * coarse_max:
        raise RuntimeError(f"aggregation stalled at {K.shape[0]} nodes")
    Kd = K.toarray() + op.rank_one_scale * np.outer(u, u)
    r = 1.0 / np.sqrt(d)
    Ac = Kd * r[:, None] * r[None, :]
    nc = Ac.shape[0]
    top_k = min(k, nc)
    theta = sla.eigvalsh((Ac + Ac.T) / 2, subset_by_index=[nc - top_k, nc - 1])
    return np.asarray(theta[::-1])


# -- solvers -------------------------------------------------------------------------------


def _dense(op: SymOperator, k: int) -> tuple[FloatArray, FloatArray]:
    M = op.dense()
    n = M.shape[0]
    _, vectors = sla.eigh((M + M.T) / 2, subset_by_index=[n - k, n - 1])
    # Re-project on the exactly known top vector, keep the other k - 1 directions.
    return _rayleigh_ritz(op, vectors[:, ::-1][:, 1:])


def _guard(k: int) -> int:
    return max(10, int(GUARD_FRACTION * k))


def _chebyshev(
    op: SymOperator,
    k: int,
    tol: float,
    rng: np.random.Generator,
    lam_min: float,
    theta: FloatArray | None = None,
) -> tuple[FloatArray, FloatArray]:
    if theta is None:
        theta = coarse_ritz_values(op, k + _guard(k), COARSE_MAX)
    cut = float(theta[-1])
    lo = lam_min - 0.01
    if not lo < cut < 1.0:
        raise RuntimeError(f"no Chebyshev interval: lambda_min={lam_min:.3g}, cut={cut:.3g}")
    half, centre = (cut - lo) / 2, (cut + lo) / 2
    deflate = _deflated(op)

    def filtered(x: FloatArray) -> FloatArray:
        # Three-term recurrence of T_j((A - centre) / half), stable on and near [-1, 1].
        y_prev, y = x, (deflate(x) - centre * x) / half
        for _ in range(2, CHEB_DEGREE + 1):
            y_prev, y = y, 2.0 * (deflate(y) - centre * y) / half - y_prev
        return y

    linop = LinearOperator((op.n, op.n), matvec=filtered, dtype=np.float64)
    v0 = rng.standard_normal(op.n)
    v0 -= op.top * (op.top @ v0)
    ncv = min(op.n - 1, max(2 * k + 1, k + CHEB_NCV_EXTRA))
    _, V = eigsh(linop, k=k - 1, which="LA", tol=tol, ncv=ncv, v0=v0)
    values, vectors = _rayleigh_ritz(op, V)
    if values[-1] <= cut:
        raise RuntimeError(f"Ritz value {values[-1]:.6g} below the Chebyshev cut {cut:.6g}")
    # A missed member of a cluster shows as a computed j-th value below the j-th coarse
    # lower bound (a one-sided test: it cannot prove that nothing was missed).
    short = np.flatnonzero(values < theta[:k] - max(tol, 1e-12))
    if short.size:
        j = int(short[0])
        raise RuntimeError(f"eigenvalue {j} = {values[j]:.8g} below its lower bound {theta[j]:.8g}")
    return values, vectors


def _shift_invert(
    op: SymOperator, k: int, tol: float, rng: np.random.Generator
) -> tuple[FloatArray, FloatArray]:
    # sigma just above the top eigenvalue 1: M = sigma I - A_s is positive definite, so the
    # symmetric-mode factorisation needs no pivoting, and the eigenvalues of A near 1 become
    # the largest, well separated eigenvalues 1 / (sigma - lambda) of the inverse.
    sigma = 1.0 + SHIFT_INVERT_OFFSET
    n = op.n
    lu = splu(
        (sigma * sp.identity(n, format="csr") - op.sparse).tocsc(),
        permc_spec="MMD_AT_PLUS_A",
        diag_pivot_thresh=0.0,
        options={"SymmetricMode": True},
    )
    c, w, top = op.rank_one_scale, op.rank_one, op.top
    z = lu.solve(w) if c != 0.0 else w
    denom = 1.0 - c * (w @ z)

    def solve(x: FloatArray) -> FloatArray:
        x = x - top * (top @ x)
        y = lu.solve(x)
        if c != 0.0:  # Sherman-Morrison for (M - c w w^T)^-1
            y = y + z * (c * (w @ y) / denom)
        return np.asarray(y - top * (top @ y))

    linop = LinearOperator((n, n), matvec=solve, dtype=np.float64)
    v0 = rng.standard_normal(n)
    v0 -= top * (top @ v0)
    # ARPACK stops at ||B v - mu v|| <= tol |mu| for B = M^-1, which bounds the residual
    # on A only by about 2 tol: ask for more so that residuals stay near the other paths'.
    _, V = eigsh(linop, k=k - 1, which="LA", tol=tol * SHIFT_INVERT_TOL_FACTOR, v0=v0)
    return _rayleigh_ritz(op, V)


def _arpack(
    op: SymOperator, k: int, tol: float, rng: np.random.Generator
) -> tuple[FloatArray, FloatArray]:
    linop = LinearOperator((op.n, op.n), matvec=_deflated(op), dtype=np.float64)
    v0 = rng.standard_normal(op.n)
    v0 -= op.top * (op.top @ v0)
    ncv = min(op.n - 1, max(2 * k + 1, k + 40))
    _, V = eigsh(linop, k=k - 1, which="LA", tol=tol, ncv=ncv, v0=v0)
    return _rayleigh_ritz(op, V)


def _lobpcg(
    op: SymOperator, k: int, tol: float, rng: np.random.Generator
) -> tuple[FloatArray, FloatArray]:
    block = k - 1 + max(10, k // 2)
    X = rng.standard_normal((op.n, block))
    linop = LinearOperator((op.n, op.n), matvec=op.matmat, matmat=op.matmat, dtype=np.float64)
    _, V = lobpcg(linop, X, Y=op.top[:, None], tol=tol, maxiter=1000, largest=True)
    values, vectors = _rayleigh_ritz(op, V)
    return values[:k], vectors[:, :k]


_FALLBACKS = {
    "chebyshev": ("chebyshev", "shift-invert", "arpack"),
    "shift-invert": ("shift-invert", "arpack"),
    "arpack": ("arpack", "shift-invert"),
    "lobpcg": ("lobpcg", "chebyshev"),
    "dense": ("dense",),
}
SHIFT_INVERT_MAX = 40_000  # fallback chains: beyond this SuperLU fill-in can explode
# sigma = 1 + offset. Measured on a 42,378-node text component: 148 solves at 1e-5 against
# 175 at 1e-3 (201 against 148 on a 16,336-node one), residuals below 1e-12 either way.
SHIFT_INVERT_OFFSET = 1e-5
SHIFT_INVERT_TOL_FACTOR = 1e-2  # ARPACK tolerance = tol * this (see `_shift_invert`)
# The "adaptive" rule (see `leading_eigenpairs`): shift-invert first when the coarse lower
# bound of the k-th eigenvalue is within SHIFT_INVERT_GAP of 1 and n is at most
# SHIFT_INVERT_AUTO_MAX, chebyshev first otherwise.
SHIFT_INVERT_GAP = 2e-2
SHIFT_INVERT_AUTO_MAX = 60_000
# BLAS threads inside the Krylov solvers. Their BLAS calls are vector-sized (dot products,
# n x ncv products); measured on 2 shared cores, a 16,336-node shift-invert run spent 1.6 s
# in ARPACK with the default threads and 0.45 s with one (threads wait on each other).
KRYLOV_BLAS_THREADS = 1


def leading_eigenpairs(
    op: SymOperator, k: int, *, solver: str = "auto", tol: float = 1e-8, rng: RngLike = 0
) -> Eigenpairs:
    """The ``k`` algebraically largest eigenpairs of ``op`` (the top pair included).

    Parameters
    ----------
    op : SymOperator
        Symmetric operator with spectrum in ``[-1, 1]`` and top eigenpair ``(1, op.top)``.
    k : int
        Number of eigenpairs including the top one; ``2 <= k <= op.n`` (``k >= n - 1``
        always uses the dense solver).
    solver : {"auto", "adaptive", "dense", "chebyshev", "shift-invert", "arpack", "lobpcg"}
        ``auto`` is ``AUTO_SOLVER``: ``adaptive`` (``dense`` up to ``DENSE_MAX`` nodes,
        then ``shift-invert`` on a clustered top of the spectrum, ``chebyshev`` on a
        spread one; see `_adaptive_choice`) or ``chebyshev`` (``dense`` up to
        ``DENSE_MAX``, ``chebyshev`` beyond). A solver that raises or returns a residual
        above ``tol`` is followed by the next in its fallback chain (``chebyshev`` ->
        ``shift-invert`` (small graphs only) -> ``arpack``; a chosen ``shift-invert`` ->
        ``chebyshev`` -> ``arpack``).
    tol : float, default 1e-8
        Accepted residual ``max_k ||A v_k - lambda_k v_k||`` of unit vectors; also the
        ARPACK / LOBPCG convergence tolerance.
    rng : int or numpy.random.Generator, default 0
        Seeds the Krylov start vectors, so repeated calls give identical results.

    Returns
    -------
    Eigenpairs
        Values descending with ``values[0] == 1``, orthonormal vectors, residuals, the
        solver that produced them and the smallest eigenvalue (estimate, rounded down by
        its residual), needed for truncation bounds.

    Raises
    ------
    ValueError
        On a bad ``solver`` or ``k``.
    RuntimeError
        When every solver of the chain failed or missed the residual tolerance.
    """
    if solver not in SOLVERS:
        raise ValueError(f"solver must be one of {SOLVERS}, got {solver!r}")
    if not 2 <= k <= op.n:
        raise ValueError(f"need 2 <= k <= n, got k={k}, n={op.n}")
    gen = as_generator(rng)
    automatic = solver in ("auto", "adaptive")
    if solver == "auto":
        solver = AUTO_SOLVER
    if k >= op.n - 1 or (automatic and op.n <= DENSE_MAX):  # Krylov solvers need k < n - 1
        solver = "dense"
    if solver == "dense":
        return _run_chain(op, k, ["dense"], tol, gen, None)
    with threadpool_limits(limits=KRYLOV_BLAS_THREADS, user_api="blas"):
        theta = None
        if solver == "adaptive":
            solver, theta = _adaptive_choice(op, k)
        chain = [s for s in _FALLBACKS[solver] if s != "shift-invert" or op.n <= SHIFT_INVERT_MAX]
        if solver == "shift-invert":
            chain = list(_FALLBACKS[solver])  # chosen or asked for: try it whatever the size
            if theta is not None:
                chain = ["shift-invert", "chebyshev", "arpack"]
        return _run_chain(op, k, chain or ["arpack"], tol, gen, theta)


def _adaptive_choice(op: SymOperator, k: int) -> tuple[str, FloatArray | None]:
    """The first solver of the "adaptive" rule, with the coarse bounds it computed.

    Lanczos on the Chebyshev filter needs more steps the closer the wanted eigenvalues lie
    to 1 (its convergence depends on their gaps relative to the whole spectrum), while
    shift-invert takes about the same ~150 solves whatever the gaps and pays for one sparse
    factorisation, whose fill-in is small on graphs of weakly joined groups and large on one
    compact topic (measured: 7.9 M factor entries for a 42,378-node component of many
    topics, 4.7 M and 5 s to factor a 12,160-node single topic). A clustered top of the
    spectrum is what such weakly joined groups give, so the coarse lower bound
    ``1 - theta_k`` (cheap; Chebyshev reuses it) decides. Measured on the components of
    the 10,000 / 30,000 / 100,000 document benchmark builds (`service.bench.build`),
    BLAS on one thread: ``1 - theta_k`` of 3e-3 to 6e-3 gave shift-invert 0.8-0.9 s vs
    Chebyshev 2.1-3.3 s (16,336 nodes); 3e-2 to 0.8 gave Chebyshev 0.5-1.4 s vs
    shift-invert 1.7-6.8 s (2,000-12,000 nodes).
    """
    try:
        theta = coarse_ritz_values(op, k + _guard(k), COARSE_MAX)
    except RuntimeError:
        return "chebyshev", None  # aggregation stalled: the legacy chain handles it
    clustered = 1.0 - float(theta[min(k, theta.size) - 1]) <= SHIFT_INVERT_GAP
    if clustered and op.n <= SHIFT_INVERT_AUTO_MAX:
        return "shift-invert", theta
    return "chebyshev", theta


def _run_chain(
    op: SymOperator,
    k: int,
    chain: list[str],
    tol: float,
    gen: np.random.Generator,
    theta: FloatArray | None,
) -> Eigenpairs:
    lam_min = _smallest_eigenvalue(op, gen)
    failures: list[str] = []
    for name in chain:
        try:
            if name == "dense":
                values, vectors = _dense(op, k)
            elif name == "chebyshev":
                values, vectors = _chebyshev(op, k, tol, gen, lam_min, theta)
            elif name == "shift-invert":
                values, vectors = _shift_invert(op, k, tol, gen)
            elif name == "arpack":
                values, vectors = _arpack(op, k, tol, gen)
            else:
                values, vectors = _lobpcg(op, k, tol, gen)
        except (RuntimeError, ValueError, np.linalg.LinAlgError) as exc:
            failures.append(f"{name}: {exc}")
            continue
        res = residual_norms(op, values, vectors)
        if float(res.max()) <= tol or name == "dense":
            return Eigenpairs(values, vectors, res, name, min(lam_min, float(values[-1])))
        failures.append(f"{name}: residual {res.max():.2e} > tol {tol:.2e}")
    raise RuntimeError("no eigen-solver met the tolerance: " + "; ".join(failures))
