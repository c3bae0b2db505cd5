"""The pure parts of the group use cases: month counting, dates, cursors, names."""

from __future__ import annotations

from collections import Counter
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from service.errors import InvalidInputError, MalformedRequestError
from service.pipeline.clusters import (
    NO_DATE,
    _iso_micros,
    _microseconds,
    clean_name,
    decode_cursor,
    encode_cursor,
    month_codes,
    month_counts,
)
from service.pipeline.formatting import iso


def micros(*dates: datetime | None) -> np.ndarray:
    return np.array([_microseconds(d) for d in dates], dtype=np.int64)


def test_month_codes_count_months_from_1970() -> None:
    codes = month_codes(
        micros(
            datetime(1970, 1, 1, tzinfo=UTC),
            datetime(2024, 3, 31, 23, 59, 59, 999_999, tzinfo=UTC),
            datetime(2024, 4, 1, tzinfo=UTC),
            datetime(1969, 12, 31, 23, 59, tzinfo=UTC),
            None,
            datetime(1, 1, 1, tzinfo=UTC),
        )
    )
    assert codes.tolist() == [
        0,
        (2024 - 1970) * 12 + 2,
        (2024 - 1970) * 12 + 3,
        -1,
        NO_DATE,
        -1969 * 12,
    ]


def test_month_counts_match_a_recount_of_random_dates() -> None:
    rng = np.random.default_rng(7)
    start = datetime(1950, 1, 1, tzinfo=UTC)
    dates: list[datetime | None] = [
        start + timedelta(seconds=int(s)) for s in rng.integers(0, 90 * 365 * 86400, size=500)
    ]
    dates += [None] * 17
    order = rng.permutation(len(dates))
    shuffled = [dates[i] for i in order]
    out = month_counts(month_codes(micros(*shuffled)))
    recount = Counter(None if d is None else d.strftime("%Y-%m") for d in dates)
    assert {m["month"]: m["count"] for m in out} == recount
    assert len(out) == len(recount), "a month listed twice"
    dated = [m["month"] for m in out if m["month"] is not None]
    assert dated == sorted(dated)
    assert out[-1] == {"month": None, "count": 17}


def test_month_counts_of_nothing_and_of_undated_only() -> None:
    assert month_counts(np.zeros(0, dtype=np.int64)) == []
    assert month_counts(month_codes(micros(None, None))) == [{"month": None, "count": 2}]


@pytest.mark.parametrize(
    "value",
    [
        datetime(2024, 3, 4, 10, 0, tzinfo=UTC),
        datetime(1969, 7, 20, 20, 17, 40, 123_456, tzinfo=UTC),
        datetime(1, 1, 1, tzinfo=UTC),
        datetime(9999, 12, 31, 23, 59, 59, 999_999, tzinfo=UTC),
    ],
)
def test_microseconds_give_back_the_same_timestamp(value: datetime) -> None:
    assert _iso_micros(_microseconds(value)) == iso(value)


def test_cursor_round_trip_and_refusals() -> None:
    for after, provisional in [(0, False), (12345, True), (2**63 - 1, False)]:
        assert decode_cursor(encode_cursor(after, provisional)) == (after, provisional)
    for bad in ["", "%%%", encode_cursor(1, False)[:-3], "eyJhZnRlciI6IjEiLCJwcm92aXNpb25hbCI6MX0"]:
        with pytest.raises(MalformedRequestError) as caught:
            decode_cursor(bad)
        assert caught.value.code == "bad_cursor"


def test_names_are_stripped_and_blank_removes() -> None:
    assert clean_name("  Harbour works\u00a0") == "Harbour works"
    assert clean_name("") is None and clean_name(" \t ") is None and clean_name(None) is None
    assert clean_name("é" * 200) == "é" * 200  # characters, not bytes
    for bad in ["x" * 201, "two\nlines", "nul\x00", 5, ["x"]]:
        with pytest.raises(InvalidInputError):
            clean_name(bad)
