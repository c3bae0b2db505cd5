"""Vocabulary selection and TF-IDF weighting: hand-computed cases and invariants."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp

from service.text.weighting import (
    TfidfResult,
    fit_tfidf,
    select_vocabulary,
    transform_counts,
    weight_row,
)


def _random_counts(n_docs: int, n_terms: int, seed: int) -> sp.csr_matrix:
    rng = np.random.default_rng(seed)
    dense = rng.poisson(0.3, size=(n_docs, n_terms)) * (rng.random((n_docs, n_terms)) < 0.5)
    return sp.csr_matrix(dense.astype(np.int64))


def test_select_vocabulary_applies_bounds_and_cap_with_index_ties():
    df = np.array([5, 1, 3, 3, 10, 3, 2])
    # n_docs 10, max_df 0.5 -> df <= 5; min_df 2 -> drops column 1; column 4 too common.
    assert select_vocabulary(df, 10, min_df=2, max_df=0.5, vocab_size=100).tolist() == [
        0,
        2,
        3,
        5,
        6,
    ]
    # Cap 3: df 5 first, then the three df-3 columns tie and the lower indices win.
    assert select_vocabulary(df, 10, min_df=2, max_df=0.5, vocab_size=3).tolist() == [0, 2, 3]


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"min_df": 0, "max_df": 0.5, "vocab_size": 3}, "min_df"),
        ({"min_df": 1, "max_df": 0.0, "vocab_size": 3}, "max_df"),
        ({"min_df": 1, "max_df": 1.5, "vocab_size": 3}, "max_df"),
        ({"min_df": 1, "max_df": 0.5, "vocab_size": 0}, "vocab_size"),
    ],
)
def test_select_vocabulary_rejects_bad_bounds(kwargs, message):
    with pytest.raises(ValueError, match=message):
        select_vocabulary(np.array([1, 2]), 4, **kwargs)


def test_select_vocabulary_rejects_frequencies_above_n_docs():
    with pytest.raises(ValueError, match="document frequencies"):
        select_vocabulary(np.array([1, 7]), 4, min_df=1, max_df=1.0, vocab_size=5)


def test_fit_tfidf_matches_the_formula_by_hand():
    counts = sp.csr_matrix(np.array([[3, 1, 0, 5], [1, 0, 0, 5], [0, 2, 0, 5], [0, 0, 1, 5]]))
    result = fit_tfidf(counts, min_df=1, max_df=0.5, vocab_size=10)
    # Column 3 is in every document (df 4 > 0.5 * 4) and is dropped.
    assert result.vocabulary.tolist() == [0, 1, 2]
    n = 4
    idf = [math.log((1 + n) / (1 + df)) + 1 for df in (2, 2, 1)]
    np.testing.assert_allclose(result.idf, idf, rtol=1e-12)
    row0 = np.array([(1 + math.log(3)) * idf[0], 1.0 * idf[1], 0.0])
    np.testing.assert_allclose(
        result.matrix[0].toarray().ravel(), row0 / np.linalg.norm(row0), rtol=1e-6
    )
    assert result.matrix.dtype == np.float32
    assert result.empty_rows.tolist() == []


def test_documents_without_kept_terms_are_zero_rows_and_reported():
    counts = sp.csr_matrix(np.array([[1, 0, 0], [1, 1, 0], [0, 1, 0], [0, 0, 4]]))
    result = fit_tfidf(counts, min_df=2, max_df=1.0)
    assert result.vocabulary.tolist() == [0, 1]
    assert result.empty_rows.tolist() == [3]
    assert result.matrix[3].nnz == 0


def test_rows_are_unit_and_canonical():
    result = fit_tfidf(_random_counts(200, 80, seed=1), min_df=2, max_df=0.9)
    m = result.matrix
    norms = np.sqrt(np.asarray(m.multiply(m).sum(axis=1)).ravel())
    nonempty = np.setdiff1d(np.arange(200), result.empty_rows)
    np.testing.assert_allclose(norms[nonempty], 1.0, atol=1e-6)
    assert m.has_sorted_indices
    assert np.all(m.data > 0)


def test_duplicate_entries_in_the_input_are_summed():
    counts = sp.coo_matrix(
        (np.array([1, 1, 2]), (np.array([0, 0, 1]), np.array([0, 0, 0]))), shape=(2, 1)
    )
    result = fit_tfidf(counts, min_df=1, max_df=1.0)
    # Both documents then have count 2 of the only term: identical unit rows.
    np.testing.assert_allclose(result.matrix.toarray(), [[1.0], [1.0]])


def test_transform_counts_reproduces_the_fit_and_ignores_newer_columns():
    counts = _random_counts(120, 50, seed=2)
    result = fit_tfidf(counts, min_df=2, max_df=0.8)
    np.testing.assert_array_equal(
        transform_counts(result, counts).toarray(), result.matrix.toarray()
    )
    # Terms added to the collection after the build have higher column ids.
    wider = sp.hstack([counts, sp.csr_matrix(np.ones((120, 3), dtype=np.int64))]).tocsr()
    again = transform_counts((result.vocabulary, result.idf), wider)
    np.testing.assert_array_equal(again.toarray(), result.matrix.toarray())


def test_transform_counts_checks_its_inputs():
    result = fit_tfidf(_random_counts(30, 10, seed=3), min_df=1, max_df=1.0)
    with pytest.raises(ValueError, match="columns"):
        transform_counts(result, sp.csr_matrix((1, 2), dtype=np.int64))
    with pytest.raises(ValueError, match="equal length"):
        transform_counts((result.vocabulary, result.idf[:-1]), sp.csr_matrix((1, 10), dtype=int))


@pytest.mark.parametrize(
    ("counts", "message"),
    [
        (np.ones((2, 2), dtype=np.int64), "sparse"),
        (sp.csr_matrix(np.ones((2, 2))), "integers"),
        (sp.csr_matrix(np.array([[1, -1]])), "non-negative"),
    ],
)
def test_fit_tfidf_rejects_bad_counts(counts, message):
    with pytest.raises(ValueError, match=message):
        fit_tfidf(counts)


def test_result_is_frozen():
    result = fit_tfidf(_random_counts(10, 5, seed=4), min_df=1, max_df=1.0)
    assert isinstance(result, TfidfResult)
    with pytest.raises(AttributeError):
        result.idf = np.zeros(1)  # type: ignore[misc]


def test_weight_row_equals_transform_counts_of_one_row() -> None:
    # One new document weighted alone must match the batch weighting exactly (float32).
    rng = np.random.default_rng(3)
    counts = sp.random(60, 40, density=0.2, format="csr", random_state=3)
    counts.data = rng.integers(1, 9, size=counts.nnz).astype(np.int64)
    counts = counts.astype(np.int64)
    fitted = fit_tfidf(counts, min_df=1, max_df=1.0)
    position = {int(col): i for i, col in enumerate(fitted.vocabulary)}
    for r in range(10):
        start, end = counts.indptr[r], counts.indptr[r + 1]
        kept = [
            (position[c], n)
            for c, n in zip(counts.indices[start:end], counts.data[start:end], strict=True)
            if c in position
        ]
        cols = np.array([c for c, _ in kept][::-1], dtype=np.int64)  # any order
        ns = np.array([n for _, n in kept][::-1], dtype=np.int64)
        got = weight_row(cols, ns, fitted.idf)
        want = transform_counts(fitted, counts[r])
        assert got.shape == want.shape
        np.testing.assert_array_equal(got.indices, want.indices)
        np.testing.assert_allclose(got.data, want.data, rtol=2e-7)


def test_weight_row_sums_repeated_columns_and_allows_no_term() -> None:
    idf = np.array([1.0, 2.0, 3.0])
    twice = weight_row(np.array([2, 0, 2]), np.array([1, 1, 2]), idf)
    once = weight_row(np.array([0, 2]), np.array([1, 3]), idf)
    np.testing.assert_allclose(twice.toarray(), once.toarray())
    empty = weight_row(np.array([], dtype=np.int64), np.array([], dtype=np.int64), idf)
    assert empty.nnz == 0 and empty.shape == (1, 3)
