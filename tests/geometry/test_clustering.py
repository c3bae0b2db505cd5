"""Tests of service.geometry.clustering: number of groups and k-means grouping."""

from __future__ import annotations

import numpy as np
import pytest

from service.geometry.clustering import Grouping, choose_n_groups, cluster_coordinates

# --- choose_n_groups ---------------------------------------------------------------


def test_choose_n_groups_picks_the_largest_gap():
    lam = np.array([1.0, 0.999, 0.998, 0.997, 0.5, 0.45, 0.4])
    assert choose_n_groups(lam, t=1.0) == 4


def test_choose_n_groups_ignores_input_order():
    lam = np.array([1.0, 0.999, 0.998, 0.997, 0.5, 0.45, 0.4])
    rng = np.random.default_rng(3)
    assert choose_n_groups(rng.permutation(lam), t=1.0) == choose_n_groups(lam, t=1.0)


def test_choose_n_groups_larger_t_favours_coarser_groups():
    # Two candidate structures: gap after 2 (0.95 -> 0.80) and after 4 (0.78 -> 0.2).
    lam = np.array([1.0, 0.95, 0.80, 0.78, 0.2, 0.18])
    assert choose_n_groups(lam, t=1.0) == 4
    # At t = 20 the lower eigenvalues have decayed: 0.95^20 - 0.80^20 dominates.
    assert choose_n_groups(lam, t=20.0) == 2


@pytest.mark.parametrize(
    "lam",
    [
        np.ones(8),  # all eigenvalues equal: no gap anywhere
        np.linspace(1.0, 0.3, 8),  # linear decay: all gaps equal
    ],
)
def test_choose_n_groups_flat_spectrum_returns_min_groups(lam):
    assert choose_n_groups(lam, t=1.0, min_groups=2) == 2
    assert choose_n_groups(lam, t=1.0, min_groups=3) == 3


def test_choose_n_groups_ties_go_to_fewest_groups():
    lam = np.array([1.0, 0.9, 0.5, 0.4, 0.0])  # g2 = 0.4 = g4
    assert choose_n_groups(lam, t=1.0) == 2


def test_choose_n_groups_respects_bounds():
    lam = np.array([1.0, 0.2, 0.19, 0.18, 0.05, 0.04])  # largest gap is g1 (one group)
    assert choose_n_groups(lam, t=1.0, min_groups=1) == 1
    assert choose_n_groups(lam, t=1.0) == 4  # min_groups=2 excludes c = 1
    assert choose_n_groups(lam, t=1.0, max_groups=3) == 2  # g2, g3 tied at 0.01


def test_choose_n_groups_clips_negative_eigenvalues():
    lam = np.array([1.0, 0.99, 0.98, -0.5, -0.9])
    assert choose_n_groups(lam, t=0.5) == 3


def test_choose_n_groups_underflowed_spectrum_returns_min_groups():
    lam = np.array([1.0, 0.5, 0.4, 0.3])
    assert choose_n_groups(lam, t=1e4) == 2


@pytest.mark.parametrize(
    ("lam", "kwargs", "match"),
    [
        (np.array([1.0]), {}, "at least 2"),
        (np.array([1.0, np.nan, 0.2]), {}, "finite"),
        (np.array([1.5, 0.5, 0.2]), {}, r"\[-1, 1\]"),
        (np.array([1.0, 0.5, 0.2]), {"t": 0.0}, "t must be"),
        (np.array([1.0, 0.5, 0.2]), {"min_groups": 0}, "min_groups"),
        (np.array([1.0, 0.5, 0.2]), {"min_groups": 3, "max_groups": 2}, "max_groups"),
        (np.array([1.0, 0.5]), {"min_groups": 2}, "at most 1 groups"),
    ],
)
def test_choose_n_groups_rejects_bad_input(lam, kwargs, match):
    kwargs = {"t": 1.0, **kwargs}
    with pytest.raises(ValueError, match=match):
        choose_n_groups(lam, **kwargs)


# --- cluster_coordinates -----------------------------------------------------------


def _blobs(sizes, dim=3, spread=0.05, seed=0):
    rng = np.random.default_rng(seed)
    centres = rng.normal(size=(len(sizes), dim)) * 3.0
    truth = np.repeat(np.arange(len(sizes)), sizes)
    x = centres[truth] + rng.normal(size=(truth.size, dim)) * spread
    return x, truth


def _same_partition(a, b):
    """True if labellings a and b define the same partition (bijective relabelling)."""
    pairs = set(zip(a.tolist(), b.tolist(), strict=True))
    return len(pairs) == len(set(a.tolist())) == len(set(b.tolist()))


def test_cluster_recovers_separated_blobs_and_orders_labels_by_size():
    x, truth = _blobs([10, 40, 25])
    g = cluster_coordinates(x, 3, rng=0)
    assert isinstance(g, Grouping)
    assert _same_partition(g.labels, truth)
    assert g.labels.dtype == np.int64
    assert g.sizes.tolist() == [40, 25, 10]
    assert g.n_groups == 3


def test_cluster_centres_are_member_means_and_inertia_matches():
    x, _ = _blobs([12, 7, 9], dim=4)
    g = cluster_coordinates(x, 3, rng=1)
    for k in range(3):
        np.testing.assert_allclose(g.centres[k], x[g.labels == k].mean(axis=0))
    expected = sum(np.sum((x[g.labels == k] - g.centres[k]) ** 2) for k in range(3))
    assert g.inertia == pytest.approx(expected, rel=1e-12)


def test_cluster_equal_sizes_are_ordered_by_smallest_member():
    x, truth = _blobs([5, 5, 5])
    perm = np.random.default_rng(0).permutation(truth.size)
    g = cluster_coordinates(x[perm], 3, rng=0)
    first_member = [int(np.flatnonzero(g.labels == k)[0]) for k in range(3)]
    assert first_member == sorted(first_member)
    assert first_member[0] == 0


def _uniform_cube():
    # Uniform points have many k-means local optima, so k-means++ seeding (which walks
    # the rows in order) reaches different partitions for different row orders unless
    # the order is made canonical. Exact duplicates exercise the canonical tie-break.
    x = np.random.default_rng(4).uniform(size=(120, 3))
    x[10:14] = x[3]
    return x


@pytest.mark.parametrize("seed", [0, 7])  # seed 0: all sizes differ; seed 7: two sizes tie
def test_cluster_is_invariant_to_document_order(seed):
    x = _uniform_cube()
    reference = cluster_coordinates(x, 6, rng=seed, n_init=1)
    sizes_distinct = len(set(reference.sizes.tolist())) == 6
    rng = np.random.default_rng(11)
    for _ in range(5):
        perm = rng.permutation(x.shape[0])
        permuted = cluster_coordinates(x[perm], 6, rng=seed, n_init=1)
        labels_back = np.empty_like(permuted.labels)
        labels_back[perm] = permuted.labels
        assert _same_partition(labels_back, reference.labels)
        if sizes_distinct:
            np.testing.assert_array_equal(labels_back, reference.labels)
        np.testing.assert_allclose(
            np.sort(permuted.centres, axis=0), np.sort(reference.centres, axis=0), rtol=1e-12
        )
        assert permuted.inertia == pytest.approx(reference.inertia, rel=1e-12)


def test_cluster_seeds_reach_different_optima_on_the_invariance_data():
    # Guards the invariance test above: it is only meaningful if seeding matters here.
    x = _uniform_cube()
    a = cluster_coordinates(x, 6, rng=0, n_init=1)
    b = cluster_coordinates(x, 6, rng=7, n_init=1)
    assert not _same_partition(a.labels, b.labels)


def test_cluster_same_seed_same_result_and_generator_accepted():
    x, _ = _blobs([20, 20, 20], spread=1.0)
    a = cluster_coordinates(x, 3, rng=5)
    b = cluster_coordinates(x, 3, rng=5)
    np.testing.assert_array_equal(a.labels, b.labels)
    c = cluster_coordinates(x, 3, rng=np.random.default_rng(5))
    assert set(c.labels.tolist()) == {0, 1, 2}


def test_cluster_minibatch_path_recovers_blobs():
    x, truth = _blobs([60, 40, 30])
    g = cluster_coordinates(x, 3, rng=0, minibatch_above=10)
    assert _same_partition(g.labels, truth)
    assert g.sizes.tolist() == [60, 40, 30]


def test_cluster_one_group_and_as_many_groups_as_points():
    x, _ = _blobs([4, 3])
    one = cluster_coordinates(x, 1)
    assert one.labels.tolist() == [0] * 7
    np.testing.assert_allclose(one.centres[0], x.mean(axis=0))
    every = cluster_coordinates(x, 7)
    assert sorted(every.labels.tolist()) == list(range(7))
    assert every.inertia == pytest.approx(0.0, abs=1e-24)


def test_cluster_results_are_read_only():
    x, _ = _blobs([4, 3])
    g = cluster_coordinates(x, 2)
    with pytest.raises(ValueError, match="read-only"):
        g.labels[0] = 5


@pytest.mark.parametrize(
    ("coords", "n_groups", "match"),
    [
        (np.zeros(5), 1, "2-D"),
        (np.zeros((0, 2)), 1, "2-D"),
        (np.array([[0.0, np.inf], [1.0, 1.0]]), 1, "finite"),
        (np.array([[0, 1], [1, 1]]), 1, "floating"),
        (np.zeros((3, 2)), 4, r"n_groups must be in \[1, n_docs=3\]"),
        (np.zeros((3, 2)), 0, "n_groups"),
        (np.array([[0.0, 0.0], [0.0, 0.0], [1.0, 1.0]]), 3, "distinct coordinate rows \\(2\\)"),
    ],
)
def test_cluster_rejects_bad_input(coords, n_groups, match):
    with pytest.raises(ValueError, match=match):
        cluster_coordinates(coords, n_groups)


def test_cluster_rejects_bad_n_init():
    with pytest.raises(ValueError, match="n_init"):
        cluster_coordinates(np.eye(3), 2, n_init=0)
