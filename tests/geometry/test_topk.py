"""The int64 key encoding behind deterministic top-k selection."""

from __future__ import annotations

import numpy as np

from service.geometry._topk import (
    EMPTY_KEY,
    block_top_keys,
    decode_keys,
    encode_keys,
    merge_keys,
    sort_keys,
    top_keys,
)


def test_key_order_is_similarity_descending_then_index_ascending():
    sim = np.array([0.5, -0.25, 0.5, 0.0, -0.0, 1.0, -1.0], dtype=np.float32)
    cols = np.array([7, 3, 2, 9, 4, 1, 0])
    keys = encode_keys(sim, cols)
    order = np.argsort(-keys)  # keys are far from int64 min, negation is safe here
    expected = sorted(range(sim.size), key=lambda i: (-float(sim[i]), int(cols[i])))
    assert order.tolist() == expected
    got_cols, got_sim = decode_keys(keys)
    np.testing.assert_array_equal(got_cols, cols)
    np.testing.assert_array_equal(got_sim, sim.astype(np.float64) + 0.0)


def test_block_top_keys_breaks_ties_by_lower_index():
    sim = np.zeros((2, 40), dtype=np.float32)
    sim[0, [5, 30]] = 0.9
    sim[1, :] = 0.3  # all tied: the lowest column indices win
    sim[1, 0] = -np.inf
    cols, vals = decode_keys(sort_keys(block_top_keys(sim, np.arange(40), 3)))
    assert cols.tolist() == [[5, 30, 0], [1, 2, 3]]
    np.testing.assert_allclose(vals[0], [0.9, 0.9, 0.0], rtol=1e-6)


def test_merging_in_any_order_gives_the_same_table():
    rng = np.random.default_rng(0)
    sim = rng.random((5, 60)).astype(np.float32)
    full = sort_keys(block_top_keys(sim, np.arange(60), 4))
    for perm in (np.arange(6), rng.permutation(6)):
        table = np.full((5, 4), EMPTY_KEY, dtype=np.int64)
        for part in perm:
            cols = np.arange(10 * part, 10 * part + 10)
            merge_keys(table, np.arange(5), block_top_keys(sim[:, cols], cols, 4))
        np.testing.assert_array_equal(sort_keys(table), full)


def test_top_keys_pads_short_rows_with_empty_keys():
    out = top_keys(np.array([[5, 3]], dtype=np.int64), 3)
    assert sorted(out.ravel().tolist()) == [EMPTY_KEY, 3, 5]
