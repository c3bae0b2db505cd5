"""The mapping chain as a whole: determinism, document order, duplicates, empty
documents, refusals, components, and the point-cloud entry."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.sparse as sp

from service.pipeline.mapping import (
    ISOLATED,
    MAPPED,
    NO_TERMS,
    CorpusMap,
    MapParams,
    map_corpus,
    map_points,
)
from tests.stdlib_corpus import stdlib_corpus

TIMINGS = {"seconds", "solver_seconds"}  # wall times: the only statistics that may differ


def _blocks(sizes: tuple[int, ...], vocab: int = 300, seed: int = 0) -> sp.csr_matrix:
    """Counts where block b's documents use only terms [b * vocab, (b + 1) * vocab).

    Terms are Poisson with gamma-distributed rates (shape 0.3: bursty, as words are), about
    70 tokens per document; blocks share no term, so no document of one block has a
    positive cosine with one of another.
    """
    rng = np.random.default_rng(seed)
    parts = []
    for b, n in enumerate(sizes):
        block = np.zeros((n, vocab * len(sizes)), dtype=np.int64)
        block[:, b * vocab : (b + 1) * vocab] = rng.poisson(0.8 * rng.gamma(0.3, size=(n, vocab)))
        parts.append(block)
    return sp.csr_matrix(np.vstack(parts))


def _same_partition(a: np.ndarray, b: np.ndarray) -> bool:
    """True when labels a and b cut the items the same way (up to renaming)."""
    pairs = np.unique(np.column_stack([a, b]), axis=0)
    return len(pairs) == len(np.unique(a)) == len(np.unique(b))


def _arrays(result: CorpusMap) -> dict[str, object]:
    return {f.name: getattr(result, f.name) for f in dataclasses.fields(result)}


@pytest.fixture(scope="module")
def stdlib_map() -> CorpusMap:
    return map_corpus(stdlib_corpus().counts, MapParams())


def test_same_input_gives_bit_identical_output(stdlib_map: CorpusMap) -> None:
    again = map_corpus(stdlib_corpus().counts, MapParams())
    first, second = _arrays(stdlib_map), _arrays(again)
    for name, value in first.items():
        other = second[name]
        if isinstance(value, np.ndarray):
            assert value.dtype == other.dtype and value.tobytes() == other.tobytes(), name
        elif sp.issparse(value):
            for part in ("data", "indices", "indptr"):
                assert getattr(value, part).tobytes() == getattr(other, part).tobytes(), name
        elif name == "statistics":
            assert {k: v for k, v in value.items() if k not in TIMINGS} == {
                k: v for k, v in other.items() if k not in TIMINGS
            }
        else:
            assert value == other, name


def test_document_order_permutes_the_output(stdlib_map: CorpusMap) -> None:
    counts = stdlib_corpus().counts
    perm = np.random.default_rng(7).permutation(counts.shape[0])
    moved = map_corpus(counts[perm], MapParams())
    a = stdlib_map
    # Document i of the original input is document inv[i] of the permuted one.
    inv = np.argsort(perm)
    np.testing.assert_array_equal(moved.status[inv], a.status)
    assert _same_partition(moved.vertex[inv], a.vertex)  # duplicate classes
    assert _same_partition(moved.group[inv], a.group)
    mapped = np.flatnonzero(a.status == MAPPED)
    vertex_a, vertex_b = a.vertex[mapped], moved.vertex[inv[mapped]]
    assert _same_partition(a.component[vertex_a], moved.component[vertex_b])
    np.testing.assert_allclose(moved.eigenvalues, a.eigenvalues, rtol=0, atol=1e-10)
    # The sign of every eigenvector is fixed by its largest entry, so the coordinates
    # agree entry by entry, not just up to sign.
    np.testing.assert_allclose(moved.psi[vertex_b], a.psi[vertex_a], rtol=0, atol=1e-8)
    np.testing.assert_allclose(moved.pi[vertex_b], a.pi[vertex_a], rtol=0, atol=1e-12)
    np.testing.assert_array_equal(moved.n_coordinates, a.n_coordinates)
    # Group summaries: same terms and the same representatives (as duplicate classes).
    label_of = {
        int(g): int(h) for g, h in zip(a.group[mapped], moved.group[inv[mapped]], strict=True)
    }
    by_label = {g.label: g for g in moved.groups}
    for group in a.groups:
        twin = by_label[label_of[group.label]]
        assert twin.size == group.size
        assert [t for t, _, _ in twin.terms] == [t for t, _, _ in group.terms]
        np.testing.assert_allclose([z for _, z, _ in twin.terms], [z for _, z, _ in group.terms])
        assert [a.vertex[perm[r]] for r in twin.representatives] == [
            a.vertex[r] for r in group.representatives
        ]


def test_exact_duplicates_share_a_vertex_and_are_reported() -> None:
    counts = _blocks((120,)).tolil()
    for copy, source in ((10, 3), (11, 3), (20, 7)):
        counts[copy] = counts[source]
    result = map_corpus(sp.csr_matrix(counts), MapParams())
    np.testing.assert_array_equal(result.duplicate_of[[10, 11, 20]], [3, 3, 7])
    assert np.count_nonzero(result.duplicate_of >= 0) == 3
    assert result.vertex[10] == result.vertex[11] == result.vertex[3]
    assert result.vertex[20] == result.vertex[7]
    assert result.group[10] == result.group[3] and result.group[20] == result.group[7]
    assert result.statistics["duplicates"] == 3
    assert result.statistics["vertices"] == result.vertex_doc.size == 117
    assert np.all(result.status == MAPPED)
    assert result.sigma.min() > 0


def test_documents_without_kept_terms_are_reported() -> None:
    base = _blocks((100,)).toarray()
    ubiquitous = np.ones((base.shape[0] + 3, 1), dtype=np.int64)  # df = n > max_df * n
    rare = np.zeros((base.shape[0] + 3, 1), dtype=np.int64)  # df = 1 < min_df
    body = np.vstack([base, np.zeros((3, base.shape[1]), dtype=np.int64)])
    rare[-2] = 4
    counts = np.hstack([body, ubiquitous, rare])
    counts[-3, -2] = 0  # nothing at all; -2: only a rare term; -1: only a ubiquitous one
    result = map_corpus(sp.csr_matrix(counts), MapParams())
    empty = [100, 101, 102]
    np.testing.assert_array_equal(result.status[empty], NO_TERMS)
    np.testing.assert_array_equal(result.vertex[empty], -1)
    np.testing.assert_array_equal(result.group[empty], -1)
    np.testing.assert_array_equal(result.duplicate_of[empty], -1)
    assert result.tfidf[empty].nnz == 0
    assert result.statistics["documents_no_terms"] == 3
    assert np.all(result.status[:100] == MAPPED)
    assert not set(empty) & {r for g in result.groups for r in g.representatives}


def test_too_few_documents_are_refused_in_words() -> None:
    with pytest.raises(ValueError, match=r"only 2 of 2 documents keep any term .* at least 3"):
        map_corpus(sp.csr_matrix(np.array([[1, 1, 0], [0, 1, 1]])), MapParams(min_df=1))
    # Four documents with terms but only two different texts.
    two_texts = sp.csr_matrix(np.array([[2, 1, 0, 0], [2, 1, 0, 0], [0, 0, 1, 3], [0, 0, 1, 3]]))
    with pytest.raises(ValueError, match="the 4 documents with terms have only 2 distinct"):
        map_corpus(two_texts, MapParams())


def test_disjoint_vocabularies_give_two_components() -> None:
    result = map_corpus(_blocks((150, 120)), MapParams())
    assert result.statistics["components"] == [150, 120]
    components = result.component[result.vertex]
    np.testing.assert_array_equal(components, np.repeat([0, 1], [150, 120]))
    np.testing.assert_array_equal(result.eigenvalues[:, 0], 1.0)
    for c in (0, 1):
        assert result.pi[result.component == c].sum() == pytest.approx(1.0, abs=1e-12)
    for group in result.groups:  # no group spans both vocabularies
        members = np.flatnonzero(result.group == group.label)
        assert np.unique(components[members]).size == 1


@pytest.mark.parametrize(("n_groups", "expected"), [(1, 2), (2, 2), (5, 5)])
def test_fixed_number_of_groups_counts_the_whole_map(n_groups: int, expected: int) -> None:
    result = map_corpus(_blocks((150, 120)), MapParams(n_groups=n_groups))
    # Each component is at least one group (no edge joins them); beyond that the setting
    # is the total, shared by the pooled spectrum.
    assert len(result.groups) == np.unique(result.group).size == expected
    if n_groups == 2:
        np.testing.assert_array_equal(result.group, np.repeat([0, 1], [150, 120]))


def test_small_component_is_isolated_and_reported() -> None:
    result = map_corpus(_blocks((150, 120, 5)), MapParams())
    assert result.statistics["components"] == [150, 120]
    small = np.arange(270, 275)
    np.testing.assert_array_equal(result.status[small], ISOLATED)
    np.testing.assert_array_equal(result.component[result.vertex[small]], -1)
    np.testing.assert_array_equal(result.group[small], -1)
    np.testing.assert_array_equal(result.psi[result.vertex[small]], 0.0)
    assert result.statistics["documents_isolated"] == 5
    assert result.statistics["isolated_vertices"] == 5
    assert np.all(result.status[:270] == MAPPED)


def test_map_points_separates_distant_clouds_and_checks_its_input() -> None:
    rng = np.random.default_rng(3)
    points = np.vstack([rng.normal(size=(80, 2)), rng.normal(size=(60, 2)) + 100.0])
    result = map_points(points, MapParams())
    assert result.statistics["components"] == [80, 60]
    assert len(result.diffusion_maps) == 2
    np.testing.assert_array_equal(result.component, np.repeat([0, 1], [80, 60]))
    with pytest.raises(ValueError, match="at least 3 rows"):
        map_points(np.zeros((2, 2)), MapParams())
