"""Deterministic top-k selection shared by the exact and the partitioned k-NN search.

Implementation notes
--------------------
Every candidate neighbour is encoded as one int64 *key* whose integer order is the
order we want: higher cosine first, then lower document index. The upper 32 bits
hold the float32 similarity mapped to an order-preserving int32 (the usual IEEE-754
trick: flip the magnitude bits of negative numbers), the lower 32 bits hold
``2**32 - 1 - index``. Keys are unique per (row, column) pair, so "the k largest
keys" is a total order: the result does not depend on the order in which candidate
blocks are merged, on thread scheduling, or on how ``argpartition`` treats ties.
"""

from __future__ import annotations

import numpy as np

from service.geometry.types import Float32Array, FloatArray, IntArray

#: Key of an empty slot: smaller than every real key.
EMPTY_KEY = np.iinfo(np.int64).min

_LOW = np.int64(0xFFFFFFFF)


def encode_keys(sim: Float32Array, cols: IntArray) -> IntArray:
    """Keys for similarities ``sim`` (float32) of columns ``cols`` (broadcastable)."""
    # Adding 0.0 turns -0.0 into +0.0 so equal similarities get equal bits.
    bits = (np.asarray(sim, dtype=np.float32) + np.float32(0.0)).view(np.int32)
    bits = np.where(bits < 0, bits ^ np.int32(0x7FFFFFFF), bits).astype(np.int64)
    return (bits << 32) | (_LOW - np.asarray(cols, dtype=np.int64))


def decode_keys(keys: IntArray) -> tuple[IntArray, FloatArray]:
    """Column indices and float64 similarities of keys (no EMPTY_KEY allowed)."""
    cols = _LOW - (keys & _LOW)
    bits = (keys >> 32).astype(np.int32)
    bits = np.where(bits < 0, bits ^ np.int32(0x7FFFFFFF), bits)
    return cols.astype(np.int64), bits.view(np.float32).astype(np.float64)


def top_keys(keys: IntArray, k: int) -> IntArray:
    """The k largest keys of every row of a 2-D key array, in no particular order.

    Rows with fewer than k columns are padded with EMPTY_KEY.
    """
    n_rows, n_cols = keys.shape
    if n_cols < k:
        pad = np.full((n_rows, k - n_cols), EMPTY_KEY, dtype=np.int64)
        return np.concatenate([keys, pad], axis=1)
    if n_cols > k:
        part = np.argpartition(keys, n_cols - k, axis=1)[:, n_cols - k :]
        keys = np.take_along_axis(keys, part, axis=1)
    return keys


def sort_keys(keys: IntArray) -> IntArray:
    """Rows of a key table sorted descending (best neighbour first)."""
    # Ascending sort then reverse: EMPTY_KEY cannot be negated without overflow.
    return np.ascontiguousarray(np.sort(keys, axis=1)[:, ::-1])


def block_top_keys(sim: Float32Array, cols: IntArray, k: int) -> IntArray:
    """Top-k keys of every row of a dense similarity block, in no particular order.

    Parameters
    ----------
    sim : float32 array, shape (n_rows, n_cols)
        Similarities; entries to ignore (a row's own column) set to ``-inf``.
    cols : IntArray, shape (n_cols,)
        Global document index of each column.
    k : int
        Number of neighbours kept.
    """
    n_rows, n_cols = sim.shape
    if n_rows == 0:
        return np.empty((0, k), dtype=np.int64)
    if n_cols > 4 * k:
        # Cut on the float values first (cheap), keeping every entry tied with
        # the k-th largest, then order the survivors exactly by key.
        kth = np.partition(sim, n_cols - k, axis=1)[:, n_cols - k]
        width = int((sim >= kth[:, None]).sum(axis=1).max())
        part = np.argpartition(sim, n_cols - width, axis=1)[:, n_cols - width :]
        sub = np.take_along_axis(sim, part, axis=1)
        return top_keys(encode_keys(sub, cols[part]), k)
    return top_keys(encode_keys(sim, cols[None, :]), k)


def merge_keys(table: IntArray, rows: IntArray, new: IntArray) -> None:
    """Merge candidate keys ``new`` (len(rows), k') into ``table[rows]`` in place.

    The caller guarantees that a (row, column) pair is offered at most once over
    all merges, so no de-duplication is needed. Rows whose best new key does not
    beat their current worst key are skipped (the common case in later rounds).
    """
    k = table.shape[1]
    if new.shape[1] == 0 or rows.size == 0:
        return
    current = table[rows]
    better = new.max(axis=1) > current.min(axis=1)
    if not better.any():
        return
    rows, current, new = rows[better], current[better], new[better]
    table[rows] = top_keys(np.concatenate([current, new], axis=1), k)
