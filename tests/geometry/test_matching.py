"""Tests of service.geometry.matching: stable group ids across rebuilds."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from service.geometry.matching import DEFAULT_MIN_JACCARD, GroupMatch, match_groups


def _ids(*values):
    return np.array(values, dtype=np.int64)


def test_identical_groupings_keep_ids():
    previous = _ids(10, 10, 10, 4, 4, 7)
    current = _ids(0, 0, 0, 1, 1, 2)
    m = match_groups(previous, current, previous_ids=_ids(4, 7, 10), next_id=11)
    assert isinstance(m, GroupMatch)
    assert m.stable_ids.tolist() == [10, 4, 7]
    assert m.inherited.all()
    assert m.overlap.tolist() == [3, 2, 1]
    np.testing.assert_allclose(m.jaccard, 1.0)
    assert m.disappeared.size == 0
    assert m.next_id == 11


def test_permuted_labelling_recovers_ids():
    rng = np.random.default_rng(0)
    previous_ids = _ids(3, 8, 15, 21, 40)
    truth = rng.integers(0, 5, size=200)
    previous = previous_ids[truth]
    relabel = rng.permutation(5)
    current = relabel[truth]
    m = match_groups(previous, current, previous_ids=previous_ids, next_id=41)
    for g in range(5):
        assert m.stable_ids[relabel[g]] == previous_ids[g]
    assert m.next_id == 41


def test_split_keeps_the_id_for_the_larger_part():
    previous = _ids(*([5] * 10), *([6] * 4))
    current = _ids(*([0] * 6), *([1] * 4), *([2] * 4))  # group 5 splits 6 / 4
    m = match_groups(previous, current, previous_ids=_ids(5, 6), next_id=7)
    assert m.stable_ids.tolist() == [5, 7, 6]
    assert m.inherited.tolist() == [True, False, True]
    assert m.next_id == 8


def test_even_split_goes_to_the_purer_part():
    # Group 5 (docs 0-5) splits 3 / 3 into current 0 and 1; current 0 also holds two
    # documents of group 6, whose other four form current 2. Giving 5 to either part
    # totals 3 + 4 shared documents, so the Jaccard tie-break decides: part 1
    # (J = 3/6) beats part 0 (J = 3/8).
    previous = _ids(5, 5, 5, 5, 5, 5, 6, 6, 6, 6, 6, 6)
    current = _ids(0, 0, 0, 1, 1, 1, 0, 0, 2, 2, 2, 2)
    m = match_groups(previous, current, previous_ids=_ids(5, 6), next_id=9)
    assert m.stable_ids.tolist() == [9, 5, 6]


def test_new_group_gets_fresh_ids_by_size_and_new_documents_do_not_count():
    previous = _ids(1, 1, 1, -1, -1, -1, -1, -1, -1)
    current = _ids(0, 0, 0, 1, 1, 1, 1, 2, 2)  # groups 1 and 2 hold only new documents
    m = match_groups(previous, current, previous_ids=_ids(1), next_id=100)
    assert m.stable_ids.tolist() == [1, 100, 101]
    assert m.overlap.tolist() == [3, 0, 0]


def test_fresh_ids_ties_in_size_ordered_by_label():
    m = match_groups(_ids(-1, -1, -1, -1), _ids(1, 1, 0, 0), previous_ids=_ids(), next_id=0)
    assert m.stable_ids.tolist() == [0, 1]


def test_disappeared_ids_are_reported():
    # 2 loses all its documents (deleted), 9 has no documents in the arrays at all.
    previous = _ids(4, 4, 4)
    current = _ids(0, 0, 0)
    m = match_groups(previous, current, previous_ids=_ids(9, 4, 2), next_id=10)
    assert m.stable_ids.tolist() == [4]
    assert m.disappeared.tolist() == [2, 9]


def test_low_jaccard_does_not_inherit():
    # Current group 0 merges four equal previous groups: J = 1/4 with each.
    previous = _ids(1, 1, 2, 2, 3, 3, 4, 4)
    current = np.zeros(8, dtype=np.int64)
    m = match_groups(previous, current, previous_ids=_ids(1, 2, 3, 4), next_id=5)
    assert m.stable_ids.tolist() == [5]
    assert not m.inherited[0]
    assert m.disappeared.tolist() == [1, 2, 3, 4]
    assert DEFAULT_MIN_JACCARD > 0.25
    # With no Jaccard threshold one of them is inherited (one shared document suffices).
    loose = match_groups(previous, current, previous_ids=_ids(1, 2, 3, 4), next_id=5, min_jaccard=0)
    assert loose.inherited[0]


def test_threshold_applies_before_assignment():
    # Previous 1 (docs 0-6) overlaps current 0 most (4 docs, J = 4/12) and current 1
    # less but cleanly (3 docs, J = 3/7); previous 2 (docs 7-26) lies mostly in
    # current 2. Assigning on raw overlap would pair (0, 1) and then reject it at
    # min_jaccard=0.4, leaving current 1 without its id; filtering first gives it.
    previous = _ids(*([1] * 7), *([2] * 20))
    current = _ids(0, 0, 0, 0, 1, 1, 1, *([0] * 5), *([2] * 15))
    m = match_groups(previous, current, previous_ids=_ids(1, 2), next_id=3, min_jaccard=0.4)
    assert m.stable_ids.tolist() == [3, 1, 2]


def _brute_force_total(overlap, jaccard, min_jaccard):
    """Best total overlap over all one-to-one partial assignments, by enumeration."""
    g, p = overlap.shape
    best = 0
    for k in range(min(g, p) + 1):
        for rows in itertools.combinations(range(g), k):
            for cols in itertools.permutations(range(p), k):
                pairs = list(zip(rows, cols, strict=True))
                if all(overlap[r, c] > 0 and jaccard[r, c] >= min_jaccard for r, c in pairs):
                    best = max(best, sum(int(overlap[r, c]) for r, c in pairs))
    return best


@pytest.mark.parametrize("seed", range(6))
def test_hungarian_agrees_with_brute_force(seed):
    rng = np.random.default_rng(seed)
    n_docs, n_prev, n_cur = 40, 4, 5
    previous_ids = np.sort(rng.choice(50, size=n_prev, replace=False)).astype(np.int64)
    previous = previous_ids[rng.integers(0, n_prev, size=n_docs)]
    previous[rng.random(n_docs) < 0.1] = -1
    current = rng.integers(0, n_cur, size=n_docs).astype(np.int64)
    m = match_groups(previous, current, previous_ids=previous_ids, next_id=50, min_jaccard=0.1)

    overlap = np.zeros((n_cur, n_prev), dtype=np.int64)
    for c, p in zip(current, previous, strict=True):
        if p >= 0:
            overlap[c, np.searchsorted(previous_ids, p)] += 1
    a = overlap.sum(axis=1, keepdims=True)
    b = overlap.sum(axis=0, keepdims=True)
    jaccard = overlap / np.maximum(a + b - overlap, 1)
    assert int(m.overlap.sum()) == _brute_force_total(overlap, jaccard, 0.1)
    for g in np.flatnonzero(m.inherited):
        col = np.searchsorted(previous_ids, m.stable_ids[g])
        assert m.overlap[g] == overlap[g, col]
        assert m.jaccard[g] == pytest.approx(jaccard[g, col])
    # Every stable id is used once; fresh ids are consecutive from next_id.
    assert len(set(m.stable_ids.tolist())) == n_cur
    fresh = sorted(m.stable_ids[~m.inherited].tolist())
    assert fresh == list(range(50, 50 + len(fresh)))


def test_empty_current_version():
    m = match_groups(_ids(), _ids(), previous_ids=_ids(0, 1), next_id=2)
    assert m.stable_ids.size == 0
    assert m.disappeared.tolist() == [0, 1]
    assert m.next_id == 2


@pytest.mark.parametrize(
    ("previous", "current", "previous_ids", "next_id", "match"),
    [
        (_ids(0, 1), _ids(0), _ids(0, 1), 2, "equal length"),
        (_ids(0, 5), _ids(0, 1), _ids(0, 1), 6, r"neither -1 nor in previous_ids: \[5\]"),
        (_ids(0, -2), _ids(0, 1), _ids(0, 1), 2, r"\[-2\]"),
        (_ids(0, 1), _ids(0, -1), _ids(0, 1), 2, "current labels must be >= 0"),
        (_ids(0, 1), _ids(0, 1), _ids(0, 1, 1), 2, "distinct"),
        (_ids(0, 1), _ids(0, 1), _ids(0, 1), 1, "exceed every previous id"),
        (_ids(0, 1), np.array([0.0, 1.0]), _ids(0, 1), 2, "integers"),
    ],
)
def test_match_groups_rejects_bad_input(previous, current, previous_ids, next_id, match):
    with pytest.raises(ValueError, match=match):
        match_groups(previous, current, previous_ids=previous_ids, next_id=next_id)


def test_match_groups_rejects_bad_min_jaccard():
    with pytest.raises(ValueError, match="min_jaccard"):
        match_groups(_ids(0), _ids(0), previous_ids=_ids(0), next_id=1, min_jaccard=1.5)
