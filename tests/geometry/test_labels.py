"""Tests of service.geometry.labels: distinguishing terms and representatives."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from service.geometry.labels import TermScore, distinguishing_terms, representatives


def _planted_counts(n_groups=4, docs_per_group=30, n_background=200, planted_per_group=3, seed=0):
    """Background Zipf-like counts shared by all documents, plus terms planted per group.

    Group g's planted terms are columns n_background + g * planted_per_group + (0, 1, 2),
    used only (and heavily) by group g's documents.
    """
    rng = np.random.default_rng(seed)
    n_docs = n_groups * docs_per_group
    labels = np.repeat(np.arange(n_groups), docs_per_group)
    p = 1.0 / np.arange(1, n_background + 1)
    background = rng.multinomial(40, p / p.sum(), size=n_docs)
    planted = np.zeros((n_docs, n_groups * planted_per_group), dtype=np.int64)
    for g in range(n_groups):
        rows = labels == g
        cols = slice(g * planted_per_group, (g + 1) * planted_per_group)
        planted[rows, cols] = rng.poisson(3.0, size=(docs_per_group, planted_per_group)) + 1
    counts = sp.csr_matrix(np.hstack([background, planted]))
    # Shuffle the documents so that the test does not depend on contiguous groups.
    perm = rng.permutation(n_docs)
    return counts[perm], labels[perm]


@pytest.mark.parametrize("prior_scale", [1.0, 0.01])
def test_planted_terms_rank_first(prior_scale):
    counts, labels = _planted_counts()
    result = distinguishing_terms(counts, labels, n_terms=5, prior_scale=prior_scale)
    assert len(result) == 4
    for g, scores in enumerate(result):
        planted = {200 + 3 * g + j for j in range(3)}
        assert {s.term for s in scores[:3]} == planted
        assert all(isinstance(s, TermScore) for s in scores)


def test_scores_are_sorted_positive_and_report_group_counts():
    counts, labels = _planted_counts()
    dense = counts.toarray()
    result = distinguishing_terms(counts, labels, n_terms=20)
    for g, scores in enumerate(result):
        z = [s.z for s in scores]
        assert all(v > 0 for v in z)
        assert z == sorted(z, reverse=True)
        for s in scores:
            assert s.count == dense[labels == g, s.term].sum()


def test_ties_broken_by_term_index_and_cut_respects_ties():
    # Terms 0..3 are used identically by group 0 and never by group 1: equal z.
    counts = sp.csr_matrix(np.array([[2, 2, 2, 2, 0], [2, 2, 2, 2, 0], [0, 0, 0, 0, 9]]))
    result = distinguishing_terms(counts, np.array([0, 0, 1]), n_terms=2)
    assert [s.term for s in result[0]] == [0, 1]
    assert result[0][0].z == result[0][1].z
    assert [s.term for s in result[1]] == [4]


def test_input_order_of_columns_only_relabels_terms():
    counts, labels = _planted_counts(seed=2)
    perm = np.random.default_rng(5).permutation(counts.shape[1])
    # All positive terms (no cut), so ties at the cut cannot make the two lists differ.
    a = distinguishing_terms(counts, labels, n_terms=10_000)
    b = distinguishing_terms(counts[:, perm], labels, n_terms=10_000)
    for ga, gb in zip(a, b, strict=True):
        za = {s.term: s.z for s in ga}
        zb = {int(perm[s.term]): s.z for s in gb}
        assert za.keys() == zb.keys()
        np.testing.assert_allclose([zb[t] for t in za], list(za.values()), rtol=1e-12)


def test_whole_collection_group_and_empty_group_have_no_terms():
    counts = sp.csr_matrix(np.array([[1, 2], [3, 0]]))
    assert distinguishing_terms(counts, np.array([0, 0])) == [[]]
    # Label 1 has no documents.
    result = distinguishing_terms(counts, np.array([0, 2]))
    assert result[1] == []


def test_unused_terms_and_single_term_collections_are_skipped():
    counts = sp.csr_matrix(np.array([[3, 0], [5, 0]]))  # term 1 never occurs
    result = distinguishing_terms(counts, np.array([0, 1]))
    assert all(s.term == 0 for group in result for s in group)


def test_accepts_sparse_arrays_and_other_formats():
    counts, labels = _planted_counts(n_groups=2)
    a = distinguishing_terms(counts, labels, n_terms=3)
    b = distinguishing_terms(sp.csc_array(counts), labels, n_terms=3)
    assert [[s.term for s in g] for g in a] == [[s.term for s in g] for g in b]


def test_no_documents_gives_no_groups():
    assert distinguishing_terms(sp.csr_matrix((0, 4)), np.zeros(0, dtype=np.int64)) == []


@pytest.mark.parametrize(
    ("counts", "labels", "kwargs", "match"),
    [
        (np.ones((2, 2)), np.array([0, 1]), {}, "sparse"),
        (sp.csr_matrix(np.ones((2, 2))), np.array([0]), {}, r"shape \(2,\)"),
        (sp.csr_matrix(np.ones((2, 2))), np.array([0.0, 1.0]), {}, "integers"),
        (sp.csr_matrix(np.ones((2, 2))), np.array([0, -1]), {}, ">= 0"),
        (sp.csr_matrix(-np.ones((2, 2))), np.array([0, 1]), {}, "non-negative"),
        (sp.csr_matrix(np.ones((2, 2))), np.array([0, 1]), {"n_terms": 0}, "n_terms"),
        (sp.csr_matrix(np.ones((2, 2))), np.array([0, 1]), {"prior_scale": 0.0}, "prior_scale"),
    ],
)
def test_distinguishing_terms_rejects_bad_input(counts, labels, kwargs, match):
    with pytest.raises(ValueError, match=match):
        distinguishing_terms(counts, labels, **kwargs)


# --- representatives ---------------------------------------------------------------


def test_representatives_are_nearest_members_in_order():
    rng = np.random.default_rng(0)
    coords = rng.normal(size=(50, 3))
    labels = rng.integers(0, 4, size=50)
    centres = rng.normal(size=(4, 3))
    reps = representatives(coords, labels, centres, n=3)
    assert len(reps) == 4
    for g, r in enumerate(reps):
        members = np.flatnonzero(labels == g)
        d = np.linalg.norm(coords[members] - centres[g], axis=1)
        np.testing.assert_array_equal(r, members[np.argsort(d, kind="stable")][:3])
        assert r.dtype == np.int64


def test_representatives_small_and_empty_groups():
    coords = np.array([[0.0], [1.0], [2.0]])
    reps = representatives(coords, np.array([0, 0, 2]), np.array([[0.0], [5.0], [2.0]]), n=5)
    assert [r.tolist() for r in reps] == [[0, 1], [], [2]]


def test_representatives_ties_by_document_index():
    coords = np.array([[1.0], [-1.0], [1.0], [-1.0]])
    reps = representatives(coords, np.zeros(4, dtype=np.int64), np.array([[0.0]]), n=4)
    assert reps[0].tolist() == [0, 1, 2, 3]


@pytest.mark.parametrize(
    ("coords", "labels", "centres", "n", "match"),
    [
        (np.zeros(3), np.zeros(3, int), np.zeros((1, 1)), 1, "coords must be 2-D"),
        (np.zeros((3, 2)), np.zeros(3, int), np.zeros((1, 3)), 1, "centres"),
        (np.zeros((3, 2)), np.zeros(2, int), np.zeros((1, 2)), 1, "labels must have shape"),
        (np.zeros((3, 2)), np.array([0, 1, 2]), np.zeros((2, 2)), 1, r"\[0, 2\)"),
        (np.full((3, 2), np.nan), np.zeros(3, int), np.zeros((1, 2)), 1, "finite"),
        (np.zeros((3, 2)), np.zeros(3, int), np.zeros((1, 2)), 0, "n must be"),
    ],
)
def test_representatives_rejects_bad_input(coords, labels, centres, n, match):
    with pytest.raises(ValueError, match=match):
        representatives(coords, labels, centres, n=n)
