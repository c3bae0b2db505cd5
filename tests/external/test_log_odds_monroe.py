"""Check distinguishing_terms against the published log-odds formula, term by term.

Source: B. L. Monroe, M. P. Colaresi and K. M. Quinn, "Fightin' Words: Lexical feature
selection and evaluation for identifying the content of political conflict",
Political Analysis 16(4), 372-403, 2008, eqs. 16-22 (log-odds ratio with an
informative Dirichlet prior, its approximate variance, and the z-score). The equation
range and formula are as cited in the project's task brief and from memory; the paper
itself was not re-read here. The reference below is a plain Python loop over terms
written straight from those formulas, independent of the vectorised implementation.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp

from service.geometry.labels import distinguishing_terms


def _paper_z(counts: np.ndarray, labels: np.ndarray, group: int, a0_scale: float) -> list[float]:
    """z_w of `group` against all other documents, one term at a time.

    Prior (informative, proportional to the whole collection): alpha_w = a0 * y_w / N
    with a0 = a0_scale * N.
    Log-odds: delta_w = log((y_i + a_w) / (n_i + a0 - y_i - a_w))
                      - log((y_j + a_w) / (n_j + a0 - y_j - a_w))
    Approximate variance: 1 / (y_i + a_w) + 1 / (y_j + a_w)
    z-score: z_w = delta_w / sqrt(variance)
    """
    in_group = labels == group
    n_total = float(counts.sum())
    a0 = a0_scale * n_total
    n_i = float(counts[in_group].sum())
    n_j = float(counts[~in_group].sum())
    z = []
    for w in range(counts.shape[1]):
        y_w = float(counts[:, w].sum())
        y_i = float(counts[in_group, w].sum())
        y_j = float(counts[~in_group, w].sum())
        a_w = a0 * y_w / n_total
        delta = math.log((y_i + a_w) / (n_i + a0 - y_i - a_w)) - math.log(
            (y_j + a_w) / (n_j + a0 - y_j - a_w)
        )
        variance = 1.0 / (y_i + a_w) + 1.0 / (y_j + a_w)
        z.append(delta / math.sqrt(variance))
    return z


@pytest.mark.parametrize("prior_scale", [1.0, 0.05, 3.0])
def test_z_scores_equal_the_paper_formula(prior_scale):
    counts = np.array(
        [
            [4, 0, 1, 2, 0, 1],
            [3, 1, 0, 2, 0, 2],
            [0, 5, 1, 1, 1, 2],
            [1, 4, 0, 2, 0, 1],
            [0, 0, 6, 1, 3, 1],
        ]
    )
    labels = np.array([0, 0, 1, 1, 2])
    result = distinguishing_terms(
        sp.csr_matrix(counts), labels, n_terms=counts.shape[1], prior_scale=prior_scale
    )
    for group, scores in enumerate(result):
        reference = _paper_z(counts, labels, group, prior_scale)
        expected_terms = sorted(
            (w for w in range(counts.shape[1]) if reference[w] > 0),
            key=lambda w: (-reference[w], w),
        )
        assert [s.term for s in scores] == expected_terms
        for s in scores:
            assert s.z == pytest.approx(reference[s.term], rel=1e-12)
            assert s.count == counts[labels == group, s.term].sum()
