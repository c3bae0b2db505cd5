"""Diffusion distances from stored eigenpairs, each with a bound on what truncation left out."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from service.geometry.diffusion import DiffusionMap
from service.geometry.types import FloatArray, IntArray

__all__ = [
    "DistanceResult",
    "diffusion_distance",
    "distances_from",
    "distances_to",
    "distances_to_point",
]

Spectrum = DiffusionMap | tuple[FloatArray, FloatArray, FloatArray]


@dataclass(frozen=True)
class DistanceResult:
    """A truncated diffusion distance and how far the true one can lie from it.

    Attributes
    ----------
    value : float
        Truncated distance ``sqrt(sum_{k=1..m} lambda_k^(2t) (psi_k(x) - psi_k(y))^2)``;
        never larger than the true ``D_t(x, y)``.
    bound : float
        Upper bound on the left-out part of the SQUARED distance,
        ``D_t(x, y)^2 - value^2 <= bound``.
    upper : float
        ``sqrt(value^2 + bound)``, an upper bound on the distance itself, so
        ``value <= D_t(x, y) <= upper``.
    """

    value: float
    bound: float
    upper: float


def _unpack(dm: Spectrum) -> tuple[FloatArray, FloatArray, FloatArray, float, bool]:
    if isinstance(dm, DiffusionMap):
        return dm.eigenvalues, dm.psi, dm.pi, dm.smallest_eigenvalue, dm.complete
    eigenvalues, psi, pi = (np.asarray(a, dtype=np.float64) for a in dm)
    if psi.ndim != 2 or psi.shape != (pi.size, eigenvalues.size):
        raise ValueError(
            f"psi must have shape (n, k) = ({pi.size}, {eigenvalues.size}), got {psi.shape}"
        )
    # Without a stored smallest eigenvalue assume no uncomputed |lambda| exceeds the last
    # computed one (true for a non-negative spectrum, e.g. a lazy walk).
    return eigenvalues, psi, pi, float(eigenvalues[-1]), psi.shape[1] == pi.size


def _squared_parts(
    dm: Spectrum, x: int, ys: FloatArray | slice, t: float, m: int
) -> tuple[FloatArray, FloatArray]:
    lam, psi, pi, smallest, complete = _unpack(dm)
    n, k = psi.shape
    if not 1 <= m <= k - 1:
        raise ValueError(f"n_coordinates must lie in [1, {k - 1}], got {m}")
    if not t > 0:
        raise ValueError(f"t must be > 0, got {t}")
    if not 0 <= x < n:
        raise ValueError(f"node index {x} outside [0, {n})")
    delta2 = (psi[ys, 1:] - psi[x, 1:]) ** 2  # (p, k - 1)
    weights = np.abs(lam[1:]) ** (2 * t)
    value2 = delta2[:, :m] @ weights[:m]
    # Computed but not kept: known exactly.
    known = delta2[:, m:] @ weights[m:]
    if complete:
        return value2, known
    # Not computed: every remaining eigenvalue lies in [smallest, lam[-1]], so its
    # |lambda| is at most mu; and sum over ALL k of (psi_k(x) - psi_k(y))^2 equals
    # 1/pi(x) + 1/pi(y) for x != y, of which the computed terms are already accounted.
    mu = max(abs(float(lam[-1])), abs(min(smallest, float(lam[-1]))))
    y_pi = pi[ys]
    rest = 1.0 / pi[x] + 1.0 / y_pi - delta2.sum(axis=1)
    ys_idx = np.arange(n)[ys]
    rest = np.where(ys_idx == x, 0.0, np.maximum(rest, 0.0))
    return value2, known + mu ** (2 * t) * rest


def diffusion_distance(
    dm: Spectrum, x: int, y: int, t: float, n_coordinates: int
) -> DistanceResult:
    """Truncated diffusion distance between nodes ``x`` and ``y`` with its bound.

    Parameters
    ----------
    dm : DiffusionMap or tuple (eigenvalues (k,), psi (n, k), pi (n,))
        Stored eigenpairs, trivial pair first.
    x, y : int
        Node indices in the component.
    t : float
        Diffusion time ``> 0``.
    n_coordinates : int
        ``m``, the non-trivial coordinates summed, in ``[1, k - 1]``.

    Returns
    -------
    DistanceResult
        ``value`` (the truncated distance), ``bound`` (on the left-out part of the
        squared distance) and ``upper`` (``sqrt(value^2 + bound)``).

    Notes
    -----
    ``D_t(x, y)^2 = sum_z (p_t(x, z) - p_t(y, z))^2 / pi(z)
    = sum_{k >= 1} lambda_k^(2t) (psi_k(x) - psi_k(y))^2`` (Coifman & Lafon 2006,
    Proposition 1). The value keeps ``k = 1..m``. The left-out part is bounded by

    ``sum_{k=m+1}^{K-1} lambda_k^(2t) Dpsi_k^2
    + mu^(2t) (1/pi(x) + 1/pi(y) - sum_{k=1}^{K-1} Dpsi_k^2)``

    where ``K`` eigenpairs were computed, the first sum is exact (computed pairs not
    kept), and ``mu`` bounds ``|lambda|`` of every pair NOT computed: the solver returns
    the algebraically largest eigenvalues, so an uncomputed one lies in
    ``[lambda_min, lambda_{K-1}]`` and ``mu = max(|lambda_{K-1}|, |lambda_min|)``, with
    ``lambda_min`` the stored smallest eigenvalue (a negative eigenvalue near -1 would
    otherwise be missed; for integer ``t`` it contributes ``lambda^(2t)``). The bracket
    uses ``sum_{all k} psi_k(x)^2 = 1/pi(x)`` (completeness of the ``psi_k`` in the
    ``pi`` inner product) and ``sum_k psi_k(x) psi_k(y) = 0`` for ``x != y``. This is
    never larger than the simpler ``lambda_{m+1}^(2t) (1/pi(x) + 1/pi(y))`` whenever
    ``|lambda_min| <= |lambda_{m+1}|``. With the whole spectrum stored the second term
    is zero. Negative eigenvalues enter as ``|lambda|^(2t)``, the integer-``t`` value.
    """
    n = _unpack(dm)[1].shape[0]
    if not 0 <= y < n:
        raise ValueError(f"node index {y} outside [0, {n})")
    value2, bound = _squared_parts(dm, x, np.array([y]), t, n_coordinates)
    v2, b = float(value2[0]), float(bound[0])
    return DistanceResult(value=float(np.sqrt(v2)), bound=b, upper=float(np.sqrt(v2 + b)))


def distances_from(
    dm: Spectrum, x: int, t: float, n_coordinates: int
) -> tuple[FloatArray, FloatArray]:
    """Truncated diffusion distances from node ``x`` to every node, with bounds.

    Parameters
    ----------
    dm, x, t, n_coordinates
        As in :func:`diffusion_distance`.

    Returns
    -------
    values : ndarray of shape (n,)
        Truncated distances (not squared); ``values[x] == 0``.
    bounds : ndarray of shape (n,)
        Bounds on the left-out part of the squared distances; the distance itself is
        at most ``sqrt(values**2 + bounds)``.
    """
    value2, bound = _squared_parts(dm, x, slice(None), t, n_coordinates)
    return np.sqrt(value2), bound


def distances_to_point(
    eigenvalues: FloatArray,
    psi_x: FloatArray,
    psi_ys: FloatArray,
    inv_pi_x: float,
    inv_pi_ys: FloatArray,
    t: float,
    n_coordinates: int,
    smallest_eigenvalue: float,
) -> tuple[FloatArray, FloatArray]:
    """Truncated diffusion distances from one point given by its eigenvector values.

    For points that need not be graph vertices (a Nystrom-extended draft, see
    service.geometry.nystrom), where completeness ``sum_k psi_k(x)^2 = 1/pi(x)`` does not
    hold: the left-out part is bounded by the computed-but-not-kept terms plus
    ``mu^(2t) (1/pi(x) + 1/pi(y))``, the form of DESIGN.md's bound (Coifman & Lafon
    2006), with ``mu`` as in :func:`diffusion_distance`. With an estimated ``pi(x)`` the
    bound is an estimate too.

    Parameters
    ----------
    eigenvalues : ndarray (K,)
        Trivial eigenvalue first.
    psi_x : ndarray (K,)
    psi_ys : ndarray (p, K)
    inv_pi_x : float
        ``1 / pi(x)`` (``inf`` gives an infinite bound).
    inv_pi_ys : ndarray (p,)
    t, n_coordinates
        As in :func:`diffusion_distance`.
    smallest_eigenvalue : float
        Lower estimate of the spectrum (bounds the eigenvalues not computed).

    Returns
    -------
    values, bounds : ndarrays (p,)
        Truncated distances, and bounds on the left-out part of the squared distances.
    """
    lam = np.asarray(eigenvalues, dtype=np.float64)
    k = lam.size
    m = n_coordinates
    if not 1 <= m <= k - 1:
        raise ValueError(f"n_coordinates must lie in [1, {k - 1}], got {m}")
    if not t > 0:
        raise ValueError(f"t must be > 0, got {t}")
    delta2 = (np.asarray(psi_ys, dtype=np.float64)[:, 1:k] - np.asarray(psi_x)[1:k]) ** 2
    weights = np.abs(lam[1:]) ** (2 * t)
    value2 = delta2[:, :m] @ weights[:m]
    known = delta2[:, m:] @ weights[m:]
    mu = max(abs(float(lam[-1])), abs(min(smallest_eigenvalue, float(lam[-1]))))
    rest = mu ** (2 * t) * (inv_pi_x + np.asarray(inv_pi_ys, dtype=np.float64))
    return np.sqrt(value2), known + rest


def distances_to(
    dm: Spectrum, x: int, ys: IntArray, t: float, n_coordinates: int
) -> tuple[FloatArray, FloatArray]:
    """Truncated diffusion distances from node ``x`` to the nodes ``ys``, with bounds.

    As :func:`distances_from`, for a chosen set of nodes (cost O(len(ys) k)).
    """
    psi = _unpack(dm)[1]
    ys = np.asarray(ys, dtype=np.int64)
    if ys.size and (ys.min() < 0 or ys.max() >= psi.shape[0]):
        raise ValueError(f"node index outside [0, {psi.shape[0]})")
    value2, bound = _squared_parts(dm, x, ys, t, n_coordinates)
    return np.sqrt(value2), bound
