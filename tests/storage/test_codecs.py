"""Term-count blobs and array codecs: round trips, the documented format, validation."""

from __future__ import annotations

import numpy as np
import pytest

from service.storage.codecs import (
    FORMAT_VERSION,
    HEADER_SIZE,
    MAX_COUNT,
    MAX_TERM_ID,
    decode_array,
    decode_counts,
    decode_many,
    encode_array,
    encode_counts,
)

# Values on both sides of every varint length boundary (7, 14, 21, 28 bits) and the limits.
BOUNDARIES = [0, 1, 127, 128, 129, 16383, 16384, 2**21 - 1, 2**21, 2**28 - 1, 2**28]


def random_document(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Sorted distinct ids and positive counts, with sizes and ranges varied widely."""
    n = int(rng.choice([0, 1, 2, 5, 50, 300]))
    span = int(rng.choice([n + 1, 1000, 200_000, MAX_TERM_ID + 1]))
    n = min(n, span)
    ids = (
        np.sort(rng.choice(span, size=n, replace=False))
        if span < 10**7
        else np.unique(rng.integers(0, span, size=n, dtype=np.int64))
    )
    top = int(rng.choice([2, 200, 70_000, MAX_COUNT]))
    counts = rng.integers(1, top, size=ids.size, endpoint=True)
    return ids, counts


def hand_varint(value: int) -> bytes:
    """LEB128 written out from its definition, 7 bits per byte, low bits first."""
    out = bytearray()
    while True:
        group, value = value & 0x7F, value >> 7
        out.append(group | (0x80 if value else 0))
        if not value:
            return bytes(out)


# --- format --------------------------------------------------------------------------


def test_blob_layout_matches_the_documented_format() -> None:
    ids, counts = [3, 4, 200, 70_000], [1, 2, 1, 300]
    # Gaps t_i - t_{i-1} - 1 with t_{-1} = -1, counts minus one, interleaved.
    stored = [3, 0, 0, 1, 195, 0, 69_799, 299]
    expected = bytes([1]) + (4).to_bytes(4, "little") + b"".join(map(hand_varint, stored))
    assert encode_counts(ids, counts) == expected


def test_empty_document_is_a_bare_header() -> None:
    blob = encode_counts([], [])
    assert blob == bytes([FORMAT_VERSION, 0, 0, 0, 0])
    ids, counts = decode_counts(blob)
    assert ids.shape == counts.shape == (0,)
    assert ids.dtype == np.int64
    assert counts.dtype == np.int32


def test_small_gaps_and_counts_take_one_byte_each() -> None:
    blob = encode_counts(np.arange(100), np.ones(100, dtype=np.int64))
    assert len(blob) == HEADER_SIZE + 2 * 100


@pytest.mark.parametrize("value", BOUNDARIES)
def test_varint_boundaries_round_trip(value: int) -> None:
    ids = np.array([value, value + 1 + value])
    counts = np.array([min(value, MAX_COUNT - 1) + 1, 1])
    blob = encode_counts(ids, counts)
    stored = [value, int(counts[0]) - 1, value, 0]
    assert blob[HEADER_SIZE:] == b"".join(map(hand_varint, stored))
    got_ids, got_counts = decode_counts(blob)
    np.testing.assert_array_equal(got_ids, ids)
    np.testing.assert_array_equal(got_counts, counts)


def test_extreme_ids_and_counts_round_trip() -> None:
    ids = np.array([0, MAX_TERM_ID - 1, MAX_TERM_ID])
    counts = np.array([MAX_COUNT, 1, MAX_COUNT])
    got_ids, got_counts = decode_counts(encode_counts(ids, counts))
    np.testing.assert_array_equal(got_ids, ids)
    np.testing.assert_array_equal(got_counts, counts)


# --- randomised round trips ----------------------------------------------------------


@pytest.mark.parametrize("seed", range(5))
def test_random_documents_round_trip(seed: int) -> None:
    rng = np.random.default_rng(seed)
    for _ in range(200):
        ids, counts = random_document(rng)
        got_ids, got_counts = decode_counts(encode_counts(ids, counts))
        np.testing.assert_array_equal(got_ids, ids)
        np.testing.assert_array_equal(got_counts, counts)
        assert got_ids.dtype == np.int64
        assert got_counts.dtype == np.int32


@pytest.mark.parametrize("seed", range(5))
def test_decode_many_equals_per_blob_decode(seed: int) -> None:
    rng = np.random.default_rng(100 + seed)
    docs = [random_document(rng) for _ in range(int(rng.integers(1, 80)))]
    blobs = [encode_counts(ids, counts) for ids, counts in docs]
    indptr, indices, data = decode_many(blobs)
    assert indptr.dtype == indices.dtype == np.int64
    assert data.dtype == np.int32
    assert indptr[0] == 0
    assert indptr.shape == (len(blobs) + 1,)
    for row, blob in enumerate(blobs):
        ids, counts = decode_counts(blob)
        np.testing.assert_array_equal(indices[indptr[row] : indptr[row + 1]], ids)
        np.testing.assert_array_equal(data[indptr[row] : indptr[row + 1]], counts)
        np.testing.assert_array_equal(ids, docs[row][0])


def test_decode_many_with_empty_rows_everywhere() -> None:
    empty = encode_counts([], [])
    full = encode_counts([5, 9], [2, 3])
    indptr, indices, data = decode_many([empty, full, empty, empty, full, empty])
    np.testing.assert_array_equal(indptr, [0, 0, 2, 2, 2, 4, 4])
    np.testing.assert_array_equal(indices, [5, 9, 5, 9])
    np.testing.assert_array_equal(data, [2, 3, 2, 3])


def test_decode_many_of_nothing() -> None:
    indptr, indices, data = decode_many([])
    np.testing.assert_array_equal(indptr, [0])
    assert indices.size == data.size == 0


def test_decode_accepts_any_bytes_like() -> None:
    blob = encode_counts([1, 300], [4, 1])
    for form in (bytearray(blob), memoryview(blob)):
        ids, counts = decode_counts(form)
        np.testing.assert_array_equal(ids, [1, 300])
        np.testing.assert_array_equal(counts, [4, 1])
    _, indices, _ = decode_many([memoryview(blob), bytearray(blob)])
    np.testing.assert_array_equal(indices, [1, 300, 1, 300])


def test_input_dtypes_are_accepted() -> None:
    for dtype in (np.int32, np.uint16, np.uint64, np.int64):
        ids, _ = decode_counts(encode_counts(np.array([2, 7], dtype=dtype), [1, 1]))
        np.testing.assert_array_equal(ids, [2, 7])


# --- encode validation ---------------------------------------------------------------


@pytest.mark.parametrize(
    ("ids", "counts", "message"),
    [
        ([3, 2], [1, 1], "not ascending"),
        ([2, 2], [1, 1], "repeated"),
        ([-1, 2], [1, 1], "non-negative"),
        ([MAX_TERM_ID + 1], [1], "at most"),
        ([1, 2], [1, 0], "at least 1"),
        ([1, 2], [-3, 1], "at least 1"),
        ([1], [MAX_COUNT + 1], "at most"),
        ([1, 2], [1], "differ in length"),
        ([[1, 2]], [[1, 1]], "one-dimensional"),
        ([1.0, 2.0], [1, 1], "integers"),
        ([1, 2], [1.5, 1], "integers"),
        (np.array([2**63], dtype=np.uint64), [1], "int64"),
    ],
)
def test_encode_refuses_bad_input(ids: object, counts: object, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        encode_counts(ids, counts)  # type: ignore[arg-type]


# --- decode validation ---------------------------------------------------------------


def _blob(n: int, payload: bytes, version: int = FORMAT_VERSION) -> bytes:
    return bytes([version]) + n.to_bytes(4, "little") + payload


@pytest.mark.parametrize(
    ("blob", "message"),
    [
        (b"\x01\x00\x00", "shorter than"),
        (_blob(0, b"", version=2), "version tag 2"),
        (encode_counts([1, 2], [1, 1])[:-1], "malformed"),  # truncated payload
        (encode_counts([1, 2], [1, 1]) + b"\x00", "malformed"),  # trailing value
        (encode_counts([1, 200], [1, 1]) + b"\x80", "malformed"),  # dangling continuation
        (_blob(1, b"\x81"), "malformed"),  # varint cut off
        (_blob(1, b"\x80\x80\x80\x80\x80\x01\x00"), "longer than"),  # six-byte varint
        (_blob(1, b"\xff\xff\xff\xff\x7f\x00"), "32 bits"),  # 35-bit value
        (_blob(2, hand_varint(MAX_TERM_ID) + b"\x00\x00\x00"), "term id exceeds"),
        (_blob(1, b"\x00" + hand_varint(MAX_COUNT)), "count exceeds"),
        (_blob(2, b"\x00"), "malformed"),  # header claims more terms than stored
    ],
)
def test_decode_refuses_malformed_blobs(blob: bytes, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        decode_counts(blob)
    with pytest.raises(ValueError, match=message):
        decode_many([encode_counts([1], [1]), blob])


def test_decode_many_names_the_bad_blob() -> None:
    good = encode_counts([1, 2], [1, 1])
    with pytest.raises(ValueError, match="blob 2 "):
        decode_many([good, good, good[:-1], good])
    with pytest.raises(ValueError, match="blob 1 "):
        decode_many([good, _blob(0, b"", version=7)])


@pytest.mark.parametrize(
    ("first", "second"),
    [
        (_blob(1, b"\x00\x81"), _blob(1, b"\x01\x00\x00")),
        # Here every blob even holds the right number of final bytes: only the check
        # that a payload ends on a final byte catches it.
        (_blob(1, b"\x00\x00\x81"), _blob(1, b"\x01\x00")),
    ],
)
def test_a_varint_cannot_run_into_the_next_blob(first: bytes, second: bytes) -> None:
    # Blob 0 ends on a continuation byte that blob 1's bytes would complete, and the
    # stream as a whole holds the right number of values.
    with pytest.raises(ValueError, match="blob 0 "):
        decode_many([first, second])


# --- arrays --------------------------------------------------------------------------

DTYPES = [
    np.bool_,
    np.int8,
    np.uint8,
    np.int16,
    np.uint16,
    np.int32,
    np.uint32,
    np.int64,
    np.uint64,
    np.float16,
    np.float32,
    np.float64,
    np.complex64,
    np.complex128,
]


@pytest.mark.parametrize("dtype", DTYPES)
@pytest.mark.parametrize("shape", [(), (0,), (7,), (3, 4), (2, 0, 5), (2, 3, 4)])
def test_arrays_round_trip(dtype: type, shape: tuple[int, ...]) -> None:
    rng = np.random.default_rng(7)
    a = (rng.standard_normal(shape) * 50).astype(dtype)
    name, got_shape, data = encode_array(a)
    assert got_shape == shape
    assert len(data) == a.size * a.itemsize
    assert name == np.dtype(dtype).newbyteorder("<").str
    b = decode_array(name, got_shape, data)
    assert b.dtype == a.dtype
    np.testing.assert_array_equal(b, a)


def test_array_bytes_are_little_endian_c_order() -> None:
    a = np.array([[1, 2], [3, 4]], dtype=np.int16)
    assert encode_array(a) == ("<i2", (2, 2), b"\x01\x00\x02\x00\x03\x00\x04\x00")
    assert encode_array(a.T)[2] == b"\x01\x00\x03\x00\x02\x00\x04\x00"
    assert encode_array(np.asfortranarray(a))[2] == encode_array(a)[2]


def test_big_endian_arrays_are_stored_little_endian() -> None:
    a = np.arange(6, dtype=">f8").reshape(2, 3)
    name, shape, data = encode_array(a)
    assert name == "<f8"
    assert data == np.arange(6, dtype="<f8").tobytes()
    np.testing.assert_array_equal(decode_array(name, shape, data), a)


def test_non_contiguous_views_round_trip() -> None:
    a = np.arange(60, dtype=np.float32).reshape(6, 10)[::2, 1::3]
    np.testing.assert_array_equal(decode_array(*encode_array(a)), a)


def test_decoded_array_from_bytes_is_a_read_only_view() -> None:
    b = decode_array(*encode_array(np.arange(4)))
    assert not b.flags.writeable
    assert decode_array("<i8", (4,), bytearray(8 * 4)).flags.writeable


@pytest.mark.parametrize("value", [np.array(["a"]), np.array([object()]), np.zeros(2, "M8[s]")])
def test_encode_array_refuses_non_numeric(value: np.ndarray) -> None:
    with pytest.raises(ValueError, match="numeric"):
        encode_array(value)


def test_encode_array_refuses_structured() -> None:
    with pytest.raises(ValueError, match="numeric"):
        encode_array(np.zeros(2, dtype=[("x", "<f8")]))


@pytest.mark.parametrize(
    ("dtype", "shape", "data", "message"),
    [
        ("<f8", (3,), bytes(16), "do not hold"),
        ("<f8", (-1,), b"", "non-negative"),
        ("<f8", (2.0,), bytes(16), "integers"),
        ("<f8", (True,), bytes(8), "integers"),
        (">f8", (1,), bytes(8), "little-endian"),
        ("|O", (1,), bytes(8), "numeric"),
        ("<U3", (1,), bytes(12), "numeric"),
        ("no such dtype", (1,), bytes(8), "not a dtype"),
    ],
)
def test_decode_array_refuses_bad_input(
    dtype: str, shape: tuple[object, ...], data: bytes, message: str
) -> None:
    with pytest.raises(ValueError, match=message):
        decode_array(dtype, shape, data)  # type: ignore[arg-type]


def test_encode_many_equals_encode_counts_per_document() -> None:
    from service.storage.codecs import encode_many

    rng = np.random.default_rng(5)
    docs = []
    for _ in range(200):
        n = int(rng.integers(0, 60))
        ids = rng.choice(2**32 - 1, size=n, replace=False)
        counts = rng.integers(1, 300, size=n)
        docs.append((ids, counts))
    # Flat arrays in unsorted per-document order, as the ingest path builds them.
    blobs = encode_many(
        [len(i) for i, _ in docs],
        np.concatenate([i for i, _ in docs]),
        np.concatenate([c for _, c in docs]),
    )
    for (ids, counts), blob in zip(docs, blobs, strict=True):
        order = np.argsort(ids)
        assert blob == encode_counts(ids[order], counts[order])


def test_encode_many_rejects_repeated_ids() -> None:
    from service.storage.codecs import encode_many

    with pytest.raises(ValueError, match="repeat"):
        encode_many([3], np.array([4, 9, 4]), np.array([1, 1, 1]))
