"""Groups of documents: how many, and which document belongs to which.

The input is the diffusion-map coordinates ``Psi_t(x) = (lambda_k^t psi_k(x))_{k>=1}``
of every document, an array of shape ``(n_docs, n_coords)``; Euclidean distance in
these coordinates is the diffusion distance at time ``t`` (Coifman & Lafon 2006), so
k-means on them groups documents that a short random walk connects.

Functions
---------
choose_n_groups
    The number of groups read off the largest gap of the spectrum ``lambda_k^t``.
cluster_coordinates
    k-means on the coordinates, with labels ordered by group size and results that
    do not depend on the order of the documents.

Implementation notes
--------------------
k-means++ seeding draws its first centre by row index and later ones by walking the
cumulative sum of squared distances in row order, so the same seed on the same rows in
another order gives another clustering. The rows are therefore put into a canonical
order (lexicographic by coordinate values) before clustering and the labels mapped
back afterwards; two inputs that differ only by a row permutation then reach
scikit-learn as the same array.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from sklearn.cluster import KMeans, MiniBatchKMeans

from service.geometry.types import FloatArray, IntArray, RngLike, as_generator

__all__ = ["Grouping", "choose_n_groups", "cluster_coordinates"]

# Two gaps closer than this (on the scale of lambda^t, which lies in [0, 1]) count as
# tied. It only has to absorb rounding in the subtraction of two eigenvalue powers.
_GAP_TIE_TOLERANCE = 1e-12

# Eigenvalues of a Markov matrix lie in [-1, 1]; solvers return values a little
# outside by rounding. Anything further out is not a Markov spectrum.
_SPECTRUM_SLACK = 1e-8

# Above this many rows mini-batch k-means (batch 4096) seeds the centres and full Lloyd
# iterations refine them. Measured (2 cores, 40 coordinates, 50 Gaussian groups,
# n_init=3, when this was written):
#   100k rows: full Lloyd 6.8 s, inertia 1041; mini-batch + Lloyd 2.6 s, inertia 1100
#   400k rows: full Lloyd 32-33 s, inertia 4236; mini-batch + Lloyd 14-17 s, 4506-4779
# The mini-batch route is about twice as fast but lands in 6-13 % worse optima, so full
# Lloyd is kept until its cost (about 80 s extrapolated at 1M rows) would dominate a build.
_MINIBATCH_ABOVE = 1_000_000
_MINIBATCH_SIZE = 4096


# eq=False: fields are arrays, and a generated __eq__ would compare them elementwise.
@dataclass(frozen=True, eq=False)
class Grouping:
    """A partition of the documents into groups.

    Attributes
    ----------
    labels : IntArray, shape (n_docs,)
        Group of each document, in ``0 .. n_groups - 1``. Group 0 is the largest;
        groups of equal size are ordered by their smallest member (document index).
    centres : FloatArray, shape (n_groups, n_coords)
        Mean coordinates of each group's members (row ``g`` for label ``g``).
    inertia : float
        Sum over documents of the squared Euclidean distance to their group's
        centre: the k-means objective, a squared diffusion distance.
    """

    labels: IntArray
    centres: FloatArray
    inertia: float

    @property
    def n_groups(self) -> int:
        """Number of groups."""
        return int(self.centres.shape[0])

    @property
    def sizes(self) -> IntArray:
        """Number of documents in each group, shape ``(n_groups,)``, non-increasing."""
        return np.bincount(self.labels, minlength=self.n_groups).astype(np.int64)


def choose_n_groups(
    eigenvalues: FloatArray,
    t: float,
    *,
    min_groups: int = 2,
    max_groups: int = 50,
) -> int:
    """Number of groups from the largest gap in the diffusion spectrum.

    Parameters
    ----------
    eigenvalues : FloatArray, shape (m + 1,)
        Eigenvalues of the Markov matrix, including ``lambda_0 = 1``. Their order
        does not matter (they are sorted here, largest first). Values must lie in
        ``[-1, 1]`` up to rounding.
    t : float
        Diffusion time, ``> 0``. The spectrum is read at this time: ``mu_k =
        lambda_k^t``.
    min_groups : int, default 2
        Smallest number of groups that may be returned, ``>= 1``.
    max_groups : int, default 50
        Largest number of groups that may be returned, ``>= min_groups``. The
        effective upper bound is also ``m`` (a gap after ``mu_{c-1}`` needs
        ``mu_c``).

    Returns
    -------
    int
        The number of groups ``c`` in ``[min_groups, min(max_groups, m)]``.

    Raises
    ------
    ValueError
        If the spectrum is malformed, ``t <= 0``, the bounds are inconsistent, or the
        spectrum is too short to show any admissible gap (``m < min_groups``).

    Notes
    -----
    For a Markov matrix whose graph consists of ``c`` nearly disconnected groups the
    ``c`` largest eigenvalues (``lambda_0 = 1`` among them) lie close to 1 and the
    next one is clearly smaller (von Luxburg 2007, section 8.3, "eigengap
    heuristic", stated there for the eigenvalues ``1 - lambda`` of the random-walk
    Laplacian). With ``mu_k = max(lambda_k, 0)^t`` sorted non-increasingly, the gap
    before group count ``c`` is

    .. math:: g_c = \\mu_{c-1} - \\mu_c, \\qquad c = 1, \\dots, m,

    and the function returns the admissible ``c`` with the largest ``g_c``.

    Choices made here:

    - Absolute gaps of ``lambda^t``, not relative gaps ``1 - mu_c / mu_{c-1}``. A
      relative gap equals ``1 - (lambda_c / lambda_{c-1})^t``, whose maximiser does
      not depend on ``t`` at all, and it is largest in the tail of the spectrum where
      eigenvalues are small and least reliable. The absolute gap makes ``t`` a scale:
      larger ``t`` shrinks the lower part of the spectrum and favours fewer, coarser
      groups, which is the meaning of diffusion time.
    - Negative eigenvalues are clipped to 0: they belong to oscillating modes, carry
      no grouping, and ``lambda^t`` is not real for non-integer ``t``.
    - Ties (gaps within ``1e-12``) go to the smallest ``c``. In particular a flat
      spectrum (all gaps equal, e.g. all eigenvalues 1, or a linearly decaying
      spectrum, or one whose powers have underflowed to 0) shows no evidence for any
      number of groups, and the function returns `min_groups`.

    References
    ----------
    .. [1] U. von Luxburg, "A tutorial on spectral clustering", Statistics and
       Computing 17(4), 395-416, 2007.
    .. [2] R. R. Coifman and S. Lafon, "Diffusion maps", Applied and Computational
       Harmonic Analysis 21(1), 5-30, 2006.

    Examples
    --------
    >>> import numpy as np
    >>> choose_n_groups(np.array([1.0, 0.99, 0.98, 0.4, 0.35, 0.3]), t=1.0)
    3
    """
    lam = np.asarray(eigenvalues, dtype=np.float64)
    if lam.ndim != 1 or lam.size < 2:
        raise ValueError(f"eigenvalues must be 1-D with at least 2 entries, got shape {lam.shape}")
    if not np.all(np.isfinite(lam)):
        raise ValueError("eigenvalues must be finite")
    if lam.max() > 1.0 + _SPECTRUM_SLACK or lam.min() < -1.0 - _SPECTRUM_SLACK:
        raise ValueError(
            f"eigenvalues of a Markov matrix lie in [-1, 1], got range [{lam.min()}, {lam.max()}]"
        )
    if not (np.isfinite(t) and t > 0):
        raise ValueError(f"t must be a positive finite number, got {t}")
    if min_groups < 1:
        raise ValueError(f"min_groups must be >= 1, got {min_groups}")
    if max_groups < min_groups:
        raise ValueError(f"max_groups must be >= min_groups={min_groups}, got {max_groups}")
    m = lam.size - 1
    if m < min_groups:
        raise ValueError(
            f"{lam.size} eigenvalues show gaps for at most {m} groups, fewer than "
            f"min_groups={min_groups}"
        )
    mu = np.clip(np.sort(lam)[::-1], 0.0, 1.0) ** t
    gaps = mu[:-1] - mu[1:]  # gaps[c - 1] is g_c
    hi = min(max_groups, m)
    candidates = gaps[min_groups - 1 : hi]
    best = candidates.max()
    # First candidate within the tolerance of the best: ties go to the smallest c.
    first = int(np.flatnonzero(candidates >= best - _GAP_TIE_TOLERANCE)[0])
    return min_groups + first


def cluster_coordinates(
    coords: FloatArray,
    n_groups: int,
    *,
    rng: RngLike = 0,
    n_init: int = 3,
    minibatch_above: int = _MINIBATCH_ABOVE,
) -> Grouping:
    """k-means groups of documents in diffusion coordinates.

    Parameters
    ----------
    coords : FloatArray, shape (n_docs, n_coords)
        Diffusion coordinates of the documents (finite).
    n_groups : int
        Number of groups, ``1 <= n_groups <= number of distinct rows``.
    rng : int or numpy.random.Generator, default 0
        Source of the one seed handed to scikit-learn (k-means++ seeding).
    n_init : int, default 3
        Number of k-means++ restarts; the run with the lowest inertia is kept.

    Other Parameters
    ----------------
    minibatch_above : int, default 1_000_000
        With more rows than this, mini-batch k-means (Sculley 2010, batch size
        4096) finds the starting centres and full Lloyd iterations refine them.

    Returns
    -------
    Grouping
        Labels ordered by group size (largest first, ties by smallest member),
        the member means as centres, and the inertia with respect to them.

    Raises
    ------
    ValueError
        If `coords` is not a finite 2-D array with at least one row, or `n_groups`
        is outside ``[1, number of distinct rows]``, or `n_init < 1`.

    Notes
    -----
    k-means (Lloyd 1982) with k-means++ seeding (Arthur & Vassilvitskii 2007)
    minimises ``sum_i ||x_i - c_{l(i)}||^2``; in diffusion coordinates that is the
    sum of squared diffusion distances to the group centres.

    Guarantee on document order: the rows are sorted lexicographically by value
    before clustering, so permuting the rows of `coords` permutes `labels` the same
    way and leaves the partition, the set of centres and the inertia unchanged. The
    label numbers themselves can differ only between groups of equal size (the tie
    is broken by smallest member index, which a permutation changes). One caveat:
    scikit-learn accumulates centre sums over threads, so the last bits of a centre
    can differ between two runs; this can only move a point that is equidistant
    from two centres to rounding precision.

    The returned centres are recomputed as the means of the final groups, so
    `centres`, `labels` and `inertia` are mutually consistent.

    References
    ----------
    .. [1] S. P. Lloyd, "Least squares quantization in PCM", IEEE Transactions on
       Information Theory 28(2), 129-137, 1982.
    .. [2] D. Arthur and S. Vassilvitskii, "k-means++: the advantages of careful
       seeding", Proc. 18th ACM-SIAM SODA, 1027-1035, 2007.
    .. [3] D. Sculley, "Web-scale k-means clustering", Proc. 19th WWW, 1177-1178,
       2010.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([[0.0, 0.0], [0.1, 0.0], [5.0, 5.0], [0.0, 0.1]])
    >>> cluster_coordinates(x, 2).labels.tolist()
    [0, 0, 1, 0]
    """
    x = np.asarray(coords)
    if x.ndim != 2 or x.shape[0] < 1 or x.shape[1] < 1:
        raise ValueError(f"coords must be 2-D with at least one row and column, got {x.shape}")
    if not np.issubdtype(x.dtype, np.floating) or not np.all(np.isfinite(x)):
        raise ValueError(f"coords must be finite floating-point values, got dtype {x.dtype}")
    n = x.shape[0]
    if not 1 <= n_groups <= n:
        raise ValueError(f"n_groups must be in [1, n_docs={n}], got {n_groups}")
    if n_init < 1:
        raise ValueError(f"n_init must be >= 1, got {n_init}")

    order = _canonical_order(x)
    xs = np.ascontiguousarray(x[order], dtype=np.float64)
    n_distinct = 1 + int(np.count_nonzero(np.any(xs[1:] != xs[:-1], axis=1)))
    if n_groups > n_distinct:
        raise ValueError(
            f"n_groups={n_groups} exceeds the number of distinct coordinate rows ({n_distinct})"
        )
    seed = int(as_generator(rng).integers(0, 2**31 - 1))
    sorted_labels = _kmeans_labels(xs, n_groups, seed, n_init, minibatch_above)

    raw = np.empty(n, dtype=np.int64)
    raw[order] = sorted_labels
    labels = _relabel_by_size(raw)
    centres = _group_means(x.astype(np.float64, copy=False), labels)
    inertia = float(np.sum((x - centres[labels]) ** 2))
    labels.setflags(write=False)
    centres.setflags(write=False)
    return Grouping(labels=labels, centres=centres, inertia=inertia)


def _canonical_order(x: FloatArray) -> IntArray:
    """Row order sorting `x` lexicographically by its columns (column 0 first).

    A full ``np.lexsort`` over all columns costs one sort per column (0.4-0.6 s at
    100k x 40), so rows are sorted by column 0 and only runs of equal values in it
    (duplicate documents, in practice) are resolved by the remaining columns.
    """
    order = np.argsort(x[:, 0], kind="stable")
    first = x[order, 0]
    tied = np.zeros(order.size, dtype=bool)
    same = first[1:] == first[:-1]
    tied[1:] |= same
    tied[:-1] |= same
    if not tied.any():
        return order.astype(np.int64)
    positions = np.flatnonzero(tied)
    rows = order[positions]
    # Tied positions form runs ordered by column 0; sorting their rows by all columns
    # (column 0 still primary) and writing them back keeps every run in its place.
    sub = x[rows]
    rows = rows[np.lexsort(sub.T[::-1])]
    order[positions] = rows
    return order.astype(np.int64)


def _kmeans_labels(
    x: FloatArray, n_groups: int, seed: int, n_init: int, minibatch_above: int
) -> IntArray:
    """Labels (arbitrary numbering) of k-means on rows already in canonical order."""
    if x.shape[0] > minibatch_above:
        start = MiniBatchKMeans(
            n_clusters=n_groups,
            batch_size=_MINIBATCH_SIZE,
            n_init=n_init,
            random_state=seed,
            compute_labels=False,
        ).fit(x)
        km = KMeans(
            n_clusters=n_groups, init=start.cluster_centers_, n_init=1, algorithm="lloyd"
        ).fit(x)
    else:
        km = KMeans(n_clusters=n_groups, n_init=n_init, algorithm="lloyd", random_state=seed).fit(x)
    return np.asarray(km.labels_, dtype=np.int64)


def _relabel_by_size(raw: IntArray) -> IntArray:
    """Renumber labels 0..g-1 by decreasing size, ties by smallest member index.

    Empty clusters (possible in principle after k-means) simply disappear.
    """
    present, first_member, sizes = np.unique(raw, return_index=True, return_counts=True)
    rank = np.lexsort((first_member, -sizes))  # position in `present` of new label 0, 1, ...
    new_of_present = np.empty(present.size, dtype=np.int64)
    new_of_present[rank] = np.arange(present.size, dtype=np.int64)
    return new_of_present[np.searchsorted(present, raw)]


def _group_means(x: FloatArray, labels: IntArray) -> FloatArray:
    """Mean row of each group (labels 0..g-1, every group non-empty)."""
    n = labels.size
    g = int(labels.max()) + 1
    indicator = sp.csr_matrix((np.ones(n), (labels, np.arange(n))), shape=(g, n), dtype=np.float64)
    sums = np.asarray(indicator @ x)
    return sums / np.bincount(labels, minlength=g)[:, None]
