"""Stable group ids across rebuilds: match the new groups to the previous version's.

Every build numbers its groups afresh (by size). Editors, though, name groups, and a
name must follow "the same" group into the next version. This module decides which
new group continues which old one, by how many documents they share.

Functions
---------
match_groups
    Hungarian assignment of current groups to previous stable ids on the overlap
    matrix, with a minimum Jaccard overlap to inherit an id and fresh ids otherwise.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import linear_sum_assignment

from service.geometry.types import BoolArray, FloatArray, IntArray

__all__ = ["DEFAULT_MIN_JACCARD", "GroupMatch", "match_groups"]

# A current group inherits a previous id only if the documents they share are at least
# this fraction of the documents in either (Jaccard index). 0.3 is a judgement call,
# not a published value: it lets the largest part of a three-way even split keep the
# id (Jaccard 1/3) and refuses it to a group formed by merging four equal ones (1/4).
DEFAULT_MIN_JACCARD = 0.3


# eq=False: fields are arrays, and a generated __eq__ would compare them elementwise.
@dataclass(frozen=True, eq=False)
class GroupMatch:
    """Stable ids of the current groups.

    Attributes
    ----------
    stable_ids : IntArray, shape (n_groups,)
        Stable id of current group ``g`` (label ``g``).
    inherited : BoolArray, shape (n_groups,)
        Whether the id was carried over from the previous version (else fresh).
    overlap : IntArray, shape (n_groups,)
        Documents shared with the previous group whose id was inherited (0 if fresh).
    jaccard : FloatArray, shape (n_groups,)
        Jaccard index of that pair over the documents present in both versions
        (0 if fresh).
    disappeared : IntArray, shape (n_disappeared,)
        Previous stable ids given to no current group, sorted ascending.
    next_id : int
        The first id not handed out: the `next_id` to use at the next rebuild.
    """

    stable_ids: IntArray
    inherited: BoolArray
    overlap: IntArray
    jaccard: FloatArray
    disappeared: IntArray
    next_id: int


def match_groups(
    previous: IntArray,
    current: IntArray,
    *,
    previous_ids: IntArray,
    next_id: int,
    min_jaccard: float = DEFAULT_MIN_JACCARD,
) -> GroupMatch:
    """Give each current group a stable id, inherited where it continues an old group.

    Parameters
    ----------
    previous : IntArray, shape (n_docs,)
        For each current document, the stable id of its group in the previous
        version, or -1 if the document was not in that version.
    current : IntArray, shape (n_docs,)
        Current group of each document, ``0 .. n_groups - 1`` with ``n_groups =
        current.max() + 1``.
    previous_ids : IntArray, shape (n_previous,)
        All stable ids of the previous version's groups (distinct, ``>= 0``),
        including groups none of whose documents remain.
    next_id : int
        Smallest id available for new groups; must exceed every previous id.
    min_jaccard : float, default 0.3
        Minimum Jaccard index, in ``[0, 1]``, for a current group to inherit a
        previous id. At least one shared document is always required.

    Returns
    -------
    GroupMatch
        Stable id per current group, which ids were inherited, and which previous
        ids disappeared.

    Raises
    ------
    ValueError
        If shapes or values are inconsistent (a previous id not in `previous_ids`,
        `next_id` not above them, negative current labels, ...).

    Notes
    -----
    Let ``O[c, p]`` be the number of documents in current group ``c`` whose
    previous group had stable id ``p``. Only documents present in both versions
    count; new documents and deleted ones say nothing about continuity. With ``A_c``
    and ``B_p`` those documents' sets, ``J[c, p] = O / (|A_c| + |B_p| - O)``.

    The one-to-one assignment maximising the total overlap ``sum O[c, p]`` over
    admissible pairs (``O >= 1`` and ``J >= min_jaccard``; the others weigh 0) is
    a linear assignment problem, solved with the Hungarian method (Kuhn 1955,
    Munkres 1957) as implemented by ``scipy.optimize.linear_sum_assignment``. Ties
    in total overlap are broken towards the larger total Jaccard index: each weight
    is ``O + J / (K + 1)`` with ``K = min(n_groups, n_previous)``, and since the
    Jaccard terms sum to less than 1 they can never outweigh one shared document.
    So when a group splits, the part holding most of its documents keeps the id;
    with an even split, the purer part.

    Current groups left unassigned get fresh ids ``next_id, next_id + 1, ...`` in
    order of decreasing size (all their documents, new ones included), ties by
    label.

    References
    ----------
    .. [1] H. W. Kuhn, "The Hungarian method for the assignment problem", Naval
       Research Logistics Quarterly 2(1-2), 83-97, 1955.
    .. [2] J. Munkres, "Algorithms for the assignment and transportation problems",
       Journal of the Society for Industrial and Applied Mathematics 5(1), 32-38,
       1957.

    Examples
    --------
    >>> import numpy as np
    >>> m = match_groups(np.array([7, 7, 3, 3, -1]), np.array([1, 1, 0, 0, 2]),
    ...                  previous_ids=np.array([3, 7]), next_id=8)
    >>> m.stable_ids.tolist(), m.disappeared.tolist(), m.next_id
    ([3, 7, 8], [], 9)
    """
    prev = np.asarray(previous)
    cur = np.asarray(current)
    ids = np.asarray(previous_ids)
    if prev.ndim != 1 or cur.shape != prev.shape:
        raise ValueError(
            f"previous and current must be 1-D of equal length, got {prev.shape} and {cur.shape}"
        )
    if ids.ndim != 1:
        raise ValueError(f"previous_ids must be 1-D, got shape {ids.shape}")
    for name, arr in (("previous", prev), ("current", cur), ("previous_ids", ids)):
        if arr.size and not np.issubdtype(arr.dtype, np.integer):
            raise ValueError(f"{name} must hold integers, got dtype {arr.dtype}")
    prev, cur, ids = prev.astype(np.int64), cur.astype(np.int64), ids.astype(np.int64)
    if cur.size and cur.min() < 0:
        raise ValueError(f"current labels must be >= 0, got minimum {cur.min()}")
    sorted_ids = np.sort(ids)
    if sorted_ids.size and (sorted_ids[0] < 0 or np.any(sorted_ids[1:] == sorted_ids[:-1])):
        raise ValueError("previous_ids must be distinct and >= 0")
    if next_id < 0 or (sorted_ids.size and next_id <= sorted_ids[-1]):
        raise ValueError(
            f"next_id must be >= 0 and exceed every previous id "
            f"(max {sorted_ids[-1] if sorted_ids.size else None}), got {next_id}"
        )
    if not 0.0 <= min_jaccard <= 1.0:
        raise ValueError(f"min_jaccard must be in [0, 1], got {min_jaccard}")
    unknown = (prev != -1) & ~np.isin(prev, sorted_ids)
    if np.any(unknown):
        bad = np.unique(prev[unknown])[:10].tolist()
        raise ValueError(f"previous holds values that are neither -1 nor in previous_ids: {bad}")
    in_both = prev >= 0
    columns = np.searchsorted(sorted_ids, prev[in_both])

    n_groups = int(cur.max()) + 1 if cur.size else 0
    n_prev = sorted_ids.size
    overlap = np.bincount(cur[in_both] * n_prev + columns, minlength=n_groups * n_prev).reshape(
        n_groups, n_prev
    )
    jaccard = _jaccard(overlap)
    rows, cols = _assign(overlap, jaccard, min_jaccard)

    stable = np.full(n_groups, -1, dtype=np.int64)
    stable[rows] = sorted_ids[cols]
    inherited = stable >= 0
    kept_overlap = np.zeros(n_groups, dtype=np.int64)
    kept_overlap[rows] = overlap[rows, cols]
    kept_jaccard = np.zeros(n_groups, dtype=np.float64)
    kept_jaccard[rows] = jaccard[rows, cols]

    fresh = np.flatnonzero(~inherited)
    sizes = np.bincount(cur, minlength=n_groups)
    fresh = fresh[np.lexsort((fresh, -sizes[fresh]))]
    stable[fresh] = next_id + np.arange(fresh.size, dtype=np.int64)
    disappeared = np.setdiff1d(sorted_ids, stable[inherited])
    return GroupMatch(
        stable_ids=stable,
        inherited=inherited,
        overlap=kept_overlap,
        jaccard=kept_jaccard,
        disappeared=disappeared.astype(np.int64),
        next_id=int(next_id + fresh.size),
    )


def _jaccard(overlap: IntArray) -> FloatArray:
    """Jaccard index of every (current, previous) pair from the overlap counts."""
    a = overlap.sum(axis=1)[:, None]
    b = overlap.sum(axis=0)[None, :]
    union = a + b - overlap
    out = np.zeros(overlap.shape, dtype=np.float64)
    np.divide(overlap, union, out=out, where=union > 0)
    return out


def _assign(
    overlap: IntArray, jaccard: FloatArray, min_jaccard: float
) -> tuple[IntArray, IntArray]:
    """Admissible (current, previous) pairs of a maximum-weight one-to-one assignment."""
    if overlap.size == 0:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty
    admissible = (overlap > 0) & (jaccard >= min_jaccard)
    k = min(overlap.shape)
    weight = np.where(admissible, overlap + jaccard / (k + 1), 0.0)
    rows, cols = linear_sum_assignment(weight, maximize=True)
    keep = admissible[rows, cols]
    return rows[keep].astype(np.int64), cols[keep].astype(np.int64)
