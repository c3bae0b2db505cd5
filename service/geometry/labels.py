"""What each group is about: its distinguishing terms and its most central documents.

Functions
---------
distinguishing_terms
    Per group, the terms used markedly more in the group than in the rest of the
    collection: the log-odds ratio with an informative Dirichlet prior of Monroe,
    Colaresi & Quinn (2008), divided by its standard deviation.
representatives
    Per group, the documents nearest the group's centre in diffusion coordinates.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from service.geometry.types import FloatArray, IntArray

__all__ = ["TermScore", "distinguishing_terms", "representatives"]


@dataclass(frozen=True)
class TermScore:
    """One distinguishing term of a group.

    Attributes
    ----------
    term : int
        Column index of the term in the count matrix.
    z : float
        Log-odds ratio (group versus the rest) divided by its approximate standard
        deviation; positive: the group uses the term more than the rest does.
    count : int
        Number of occurrences of the term in the group's documents.
    """

    term: int
    z: float
    count: int


def distinguishing_terms(
    counts: sp.spmatrix | sp.sparray,
    labels: IntArray,
    *,
    n_terms: int = 10,
    prior_scale: float = 1.0,
) -> list[list[TermScore]]:
    """Terms that most distinguish each group from the rest of the collection.

    Parameters
    ----------
    counts : scipy.sparse matrix, shape (n_docs, n_terms_total)
        Raw term counts (non-negative, finite; any sparse format, converted to CSR).
    labels : IntArray, shape (n_docs,)
        Group of each document, in ``0 .. n_groups - 1`` with ``n_groups =
        labels.max() + 1``. Documents that belong to no group must be left out of
        both `counts` and `labels`.
    n_terms : int, default 10
        At most this many terms per group (``>= 1``).
    prior_scale : float, default 1.0
        Total prior mass as a multiple of the collection's token count:
        ``a0 = prior_scale * N``, ``> 0``. With 1 the prior pseudo-counts are the
        collection's own term counts; smaller values trust each group's counts
        more (weaker shrinkage towards the collection's frequencies).

    Returns
    -------
    list of list of TermScore
        Entry ``g`` lists group ``g``'s terms with positive z, by decreasing z (ties
        by increasing term index), at most `n_terms` of them. A group with no
        documents, or one equal to the whole collection, gets an empty list.

    Raises
    ------
    ValueError
        If shapes disagree, counts are negative or non-finite, labels are negative,
        or `n_terms` / `prior_scale` are out of range.

    Notes
    -----
    Monroe, Colaresi & Quinn (2008, eqs. 16-22) compare the term
    frequencies of two sets of documents ``i`` and ``j`` under a multinomial model
    with a Dirichlet prior ``alpha``. Here ``i`` is one group and ``j`` all other
    documents, ``y_w^i`` the count of term ``w`` in ``i``, ``n^i`` the total count
    of ``i``, and the informative prior is proportional to the term's frequency in
    the whole collection: ``alpha_w = a0 * y_w / N`` with ``N = sum_w y_w``. The
    point estimate of the log-odds ratio is

    .. math::

        \\delta_w = \\log \\frac{y_w^i + \\alpha_w}{n^i + a_0 - y_w^i - \\alpha_w}
                  - \\log \\frac{y_w^j + \\alpha_w}{n^j + a_0 - y_w^j - \\alpha_w},

    its variance approximately

    .. math:: \\sigma^2(\\delta_w) \\approx \\frac{1}{y_w^i + \\alpha_w}
                                           + \\frac{1}{y_w^j + \\alpha_w},

    and the ranking statistic is ``z_w = delta_w / sigma(delta_w)``. Dividing by the
    standard deviation keeps rare terms (few counts, large sampling noise) from
    dominating, while the prior keeps very frequent terms from doing so.

    Terms that never occur in the collection (``alpha_w = 0``) cannot distinguish
    anything and are skipped; so is any term whose statistic is not finite (a
    collection consisting of a single term).

    The work is one sparse product for the group totals, then one vectorised pass
    over the vocabulary per group.

    References
    ----------
    .. [1] B. L. Monroe, M. P. Colaresi and K. M. Quinn, "Fightin' Words: Lexical
       feature selection and evaluation for identifying the content of political
       conflict", Political Analysis 16(4), 372-403, 2008.

    Examples
    --------
    >>> import numpy as np
    >>> import scipy.sparse as sp
    >>> counts = sp.csr_matrix(np.array([[5, 0, 1], [4, 0, 1], [0, 6, 1], [0, 3, 1]]))
    >>> [[s.term for s in g] for g in distinguishing_terms(counts, np.array([0, 0, 1, 1]))]
    [[0], [1]]
    """
    if not (sp.issparse(counts) and counts.ndim == 2):
        raise ValueError(f"counts must be a 2-D scipy sparse matrix, got {type(counts).__name__}")
    lab = np.asarray(labels)
    n_docs = counts.shape[0]
    if lab.shape != (n_docs,):
        raise ValueError(f"labels must have shape ({n_docs},), got {lab.shape}")
    if n_docs and not np.issubdtype(lab.dtype, np.integer):
        raise ValueError(f"labels must be integers, got dtype {lab.dtype}")
    if n_docs and lab.min() < 0:
        raise ValueError(f"labels must be >= 0, got minimum {lab.min()}")
    if n_terms < 1:
        raise ValueError(f"n_terms must be >= 1, got {n_terms}")
    if not (np.isfinite(prior_scale) and prior_scale > 0):
        raise ValueError(f"prior_scale must be a positive finite number, got {prior_scale}")
    y = sp.csr_matrix(counts, dtype=np.float64)
    if y.nnz and (not np.all(np.isfinite(y.data)) or y.data.min() < 0):
        raise ValueError("counts must be finite and non-negative")
    if n_docs == 0:
        return []

    lab = lab.astype(np.int64)
    n_groups = int(lab.max()) + 1
    indicator = sp.csr_matrix((np.ones(n_docs), (lab, np.arange(n_docs))), shape=(n_groups, n_docs))
    per_group = sp.csr_matrix(indicator @ y)  # (n_groups, n_terms_total) group totals
    total = np.asarray(y.sum(axis=0)).ravel()  # y_w over the whole collection
    n_total = float(total.sum())
    if n_total == 0.0:
        return [[] for _ in range(n_groups)]

    observed = np.flatnonzero(total > 0)
    y_all = total[observed]
    a0 = prior_scale * n_total
    alpha = a0 * y_all / n_total
    group_tokens = np.asarray(per_group.sum(axis=1)).ravel()

    result: list[list[TermScore]] = []
    for g in range(n_groups):
        y_i = per_group[g : g + 1].toarray().ravel()[observed]
        z = _log_odds_z(y_i, y_all - y_i, group_tokens[g], n_total - group_tokens[g], alpha, a0)
        result.append(_top_terms(z, y_i, observed, n_terms))
    return result


def _log_odds_z(
    y_i: FloatArray,
    y_j: FloatArray,
    n_i: float,
    n_j: float,
    alpha: FloatArray,
    a0: float,
) -> FloatArray:
    """Monroe et al. (2008) z-scores of group ``i`` against ``j``, one per term.

    Non-finite results (zero denominators) come back as ``-inf``.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        delta = np.log((y_i + alpha) / (n_i + a0 - y_i - alpha)) - np.log(
            (y_j + alpha) / (n_j + a0 - y_j - alpha)
        )
        variance = 1.0 / (y_i + alpha) + 1.0 / (y_j + alpha)
        z = delta / np.sqrt(variance)
    z[~np.isfinite(z)] = -np.inf
    return z


def _top_terms(z: FloatArray, y_i: FloatArray, columns: IntArray, n_terms: int) -> list[TermScore]:
    """The at most `n_terms` positive scores, by z descending then column ascending."""
    positive = np.flatnonzero(z > 0)
    if positive.size > n_terms:
        # Keep everything tied with the n-th best so that the tie rule decides the cut.
        kth = np.partition(z[positive], positive.size - n_terms)[positive.size - n_terms]
        positive = positive[z[positive] >= kth]
    order = positive[np.lexsort((columns[positive], -z[positive]))][:n_terms]
    return [TermScore(term=int(columns[k]), z=float(z[k]), count=round(y_i[k])) for k in order]


def representatives(
    coords: FloatArray,
    labels: IntArray,
    centres: FloatArray,
    *,
    n: int = 5,
) -> list[IntArray]:
    """Documents nearest each group's centre.

    Parameters
    ----------
    coords : FloatArray, shape (n_docs, n_coords)
        Diffusion coordinates of the documents.
    labels : IntArray, shape (n_docs,)
        Group of each document, in ``0 .. n_groups - 1``.
    centres : FloatArray, shape (n_groups, n_coords)
        Centre of each group (e.g. `Grouping.centres`).
    n : int, default 5
        At most this many documents per group (``>= 1``).

    Returns
    -------
    list of IntArray
        Entry ``g`` holds the indices of group ``g``'s members nearest its centre,
        nearest first (ties by document index); fewer than `n` when the group is
        smaller, empty when it has no members.

    Raises
    ------
    ValueError
        If shapes disagree, values are not finite, labels fall outside
        ``[0, n_groups)``, or ``n < 1``.

    Notes
    -----
    Distance is Euclidean in the coordinates, i.e. diffusion distance when the
    coordinates are ``lambda_k^t psi_k`` (Coifman & Lafon 2006). Only members of a
    group are candidates for it. One stable sort of all documents by (group,
    distance, index) does the work.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([[0.0], [1.0], [0.4], [9.0]])
    >>> [r.tolist() for r in representatives(x, np.array([0, 0, 0, 1]),
    ...                                       np.array([[0.5], [9.0]]), n=2)]
    [[2, 0], [3]]
    """
    x = np.asarray(coords, dtype=np.float64)
    lab = np.asarray(labels)
    c = np.asarray(centres, dtype=np.float64)
    if x.ndim != 2:
        raise ValueError(f"coords must be 2-D, got shape {x.shape}")
    if c.ndim != 2 or c.shape[1] != x.shape[1]:
        raise ValueError(f"centres must have shape (n_groups, {x.shape[1]}), got {c.shape}")
    if lab.shape != (x.shape[0],):
        raise ValueError(f"labels must have shape ({x.shape[0]},), got {lab.shape}")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(c))):
        raise ValueError("coords and centres must be finite")
    n_groups = c.shape[0]
    if lab.size and (
        not np.issubdtype(lab.dtype, np.integer) or lab.min() < 0 or lab.max() >= n_groups
    ):
        raise ValueError(
            f"labels must be integers in [0, {n_groups}), got range [{lab.min()}, {lab.max()}]"
        )
    if n < 1:
        raise ValueError(f"n must be >= 1, got {n}")

    lab = lab.astype(np.int64)
    dist2 = np.sum((x - c[lab]) ** 2, axis=1)
    order = np.lexsort((np.arange(lab.size), dist2, lab))
    starts = np.searchsorted(lab[order], np.arange(n_groups + 1))
    return [
        order[starts[g] : min(starts[g] + n, starts[g + 1])].astype(np.int64)
        for g in range(n_groups)
    ]
