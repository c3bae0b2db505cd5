"""TF-IDF weighting checked against scikit-learn's TfidfTransformer (reference library)."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from sklearn.datasets import load_digits
from sklearn.feature_extraction.text import TfidfTransformer

from service.text.weighting import fit_tfidf, transform_counts


def _digit_counts() -> sp.csr_matrix:
    # The scikit-learn digits (UCI optical digits): 8x8 images with integer
    # intensities 0-16, read here as counts of 64 "terms" per "document".
    return sp.csr_matrix(load_digits().data.astype(np.int64))


def test_matches_scikit_learn_on_the_kept_columns():
    counts = _digit_counts()
    result = fit_tfidf(counts, min_df=5, max_df=0.9, vocab_size=40)
    # Reference: scikit-learn TfidfTransformer(sublinear_tf=True, smooth_idf=True,
    # norm="l2"), i.e. idf = ln((1+n)/(1+df)) + 1 and tf -> 1 + ln(tf).
    reference = TfidfTransformer(sublinear_tf=True, smooth_idf=True, norm="l2")
    expected = reference.fit_transform(counts[:, result.vocabulary])
    np.testing.assert_allclose(result.idf, reference.idf_, rtol=1e-12)
    np.testing.assert_allclose(result.matrix.toarray(), expected.toarray(), atol=1e-6)
    # New documents: scikit-learn's transform with the fitted idf.
    fresh = counts[:25]
    np.testing.assert_allclose(
        transform_counts(result, fresh).toarray(),
        reference.transform(fresh[:, result.vocabulary]).toarray(),
        atol=1e-6,
    )


def test_empty_rows_agree_with_scikit_learn():
    counts = _digit_counts()
    # Three pixels lit in at most 60 % of the images: some images have none of them.
    result = fit_tfidf(counts, min_df=1, max_df=0.6, vocab_size=3)
    assert result.empty_rows.size > 0
    reference = TfidfTransformer(sublinear_tf=True, smooth_idf=True, norm="l2")
    expected = reference.fit_transform(counts[:, result.vocabulary]).toarray()
    np.testing.assert_array_equal(result.empty_rows, np.flatnonzero(~np.any(expected != 0, axis=1)))
    np.testing.assert_allclose(result.matrix.toarray(), expected, atol=1e-6)
