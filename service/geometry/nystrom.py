"""Nystrom extension of diffusion eigenvectors to points outside the graph."""

from __future__ import annotations

import numpy as np

from service.geometry.diffusion import DiffusionMap
from service.geometry.types import FloatArray, IntArray

__all__ = ["extend", "extend_many"]

_TINY = 1e-12  # |lambda_k| below this: psi_k is not extended (returned as 0)


def _check(dm: DiffusionMap, idx: np.ndarray, rows: np.ndarray) -> None:
    n = dm.psi.shape[0]
    if idx.shape != rows.shape:
        raise ValueError(f"neighbor indices {idx.shape} and kernel rows {rows.shape} differ")
    if idx.size and (idx.min() < 0 or idx.max() >= n):
        raise ValueError(f"neighbor index outside [0, {n}): {idx.min()}..{idx.max()}")
    if rows.size and (not np.all(np.isfinite(rows)) or rows.min() < 0):
        raise ValueError("kernel weights must be finite and non-negative")


def extend_many(
    dm: DiffusionMap, neighbor_indices: IntArray, kernel_rows: FloatArray
) -> FloatArray:
    """Nystrom extension of ``psi`` to a batch of new points.

    Parameters
    ----------
    dm : DiffusionMap
        The indexed component's diffusion map.
    neighbor_indices : ndarray of int, shape (b, r)
        For each new point, the indexed nodes ``j`` it has kernel weight to.
    kernel_rows : ndarray of float, shape (b, r)
        Raw kernel weights ``K(x, j)``, computed with the same rule as the graph (the
        self-tuning bandwidth), before any normalisation. Zero padding is allowed.

    Returns
    -------
    ndarray of shape (b, k)
        ``psi_k(x)`` for every stored pair, ``[:, 0] == 1``. Diffusion coordinates follow
        as ``lambda_k^t psi_k(x)``.

    Raises
    ------
    ValueError
        On mismatched shapes, indices outside the component, negative weights, a point
        with zero total weight (when ``tau == 0``).

    Notes
    -----
    The new point gets the normalisations of the indexed graph: ``q_x = sum_j K(x, j)``
    (plus ``tau``), ``K_alpha(x, j) = K(x, j) / (q_x^alpha q_j^alpha)`` with the stored
    raw degrees ``q_j``, ``p(x, j) = K_alpha(x, j) / sum_j K_alpha(x, j)``, and since
    ``P psi_k = lambda_k psi_k`` on the graph,
    ``psi_k(x) = lambda_k^-1 sum_j p(x, j) psi_k(j)`` (Coifman & Lafon 2006, "Geometric
    harmonics", ACHA 21, 31-52; Bengio et al. 2004, "Out-of-sample extensions for LLE,
    Isomap, MDS, Eigenmaps, and spectral clustering", NIPS 16). For an indexed node whose
    own row of ``W`` is given, this reproduces its stored ``psi``. With ``tau > 0`` the
    regularisation ``tau / n`` is added to the weight to every indexed node, as in the
    graph. Dividing by ``lambda_k`` amplifies the error of small eigenvalues, so only
    coordinates with ``|lambda_k|`` not small are trustworthy out of sample; for
    ``|lambda_k| < 1e-12`` the returned ``psi_k(x)`` is 0.
    """
    idx = np.asarray(neighbor_indices)
    rows = np.asarray(kernel_rows, dtype=np.float64)
    if idx.ndim != 2:
        raise ValueError(f"neighbor_indices must be 2-D (b, r), got shape {idx.shape}")
    _check(dm, idx, rows)
    n = dm.psi.shape[0]
    alpha = dm.alpha
    u = dm.degrees**-alpha
    c = dm.tau / n
    q_x = rows.sum(axis=1) + dm.tau
    if np.any(q_x <= 0):
        bad = int(np.flatnonzero(q_x <= 0)[0])
        raise ValueError(f"new point {bad} has zero kernel weight to every indexed node")
    k_alpha = rows * u[idx] * (q_x**-alpha)[:, None]  # (b, r)
    num = np.einsum("br,brk->bk", k_alpha, dm.psi[idx])
    den = k_alpha.sum(axis=1)
    if c != 0.0:
        # The tau / n weight to all n nodes, summed once per eigenvector.
        num += c * (q_x**-alpha)[:, None] * (u @ dm.psi)[None, :]
        den += c * q_x**-alpha * u.sum()
    lam = dm.eigenvalues
    tiny = np.abs(lam) < _TINY
    # psi_k(x) = lambda_k^-1 (P psi_k)(x) is undefined for lambda_k = 0; its diffusion
    # coordinate lambda_k^t psi_k(x) is 0 for any t > 0, so 0 is returned there.
    psi = num / den[:, None] / np.where(tiny, 1.0, lam)[None, :]
    psi[:, tiny] = 0.0
    psi[:, 0] = 1.0
    return np.asarray(psi)


def extend(dm: DiffusionMap, neighbor_indices: IntArray, kernel_row: FloatArray) -> FloatArray:
    """Nystrom extension of ``psi`` to one new point; see :func:`extend_many`.

    Parameters
    ----------
    dm : DiffusionMap
    neighbor_indices : ndarray of int, shape (r,)
    kernel_row : ndarray of float, shape (r,)
        Raw kernel weights ``K(x, j)`` to the nodes ``neighbor_indices``.

    Returns
    -------
    ndarray of shape (k,)
        ``psi_k(x)``, ``[0] == 1``.
    """
    idx = np.asarray(neighbor_indices)
    row = np.asarray(kernel_row, dtype=np.float64)
    if idx.ndim != 1:
        raise ValueError(f"neighbor_indices must be 1-D, got shape {idx.shape}")
    return extend_many(dm, idx[None, :], row[None, :])[0]
