"""Validation of one incoming document (pure: no database)."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

import pytest

from service.errors import InvalidInputError, PayloadTooLargeError
from service.pipeline.document_input import (
    MAX_ID_LENGTH,
    MAX_METADATA_DEPTH,
    check_external_id,
    parse_document,
)


def parse(raw: Any, **kwargs: Any) -> Any:
    kwargs.setdefault("max_text_bytes", 2048)
    return parse_document(raw, **kwargs)


def test_defaults_and_id_from_the_path() -> None:
    doc = parse({"text": "Tide."}, external_id="a")
    assert (doc.external_id, doc.title, doc.text, doc.metadata, doc.published_at) == (
        "a",
        "",
        "Tide.",
        {},
        None,
    )


def test_batch_items_need_their_own_id() -> None:
    assert parse({"id": "b", "text": "Tide."}).external_id == "b"
    with pytest.raises(InvalidInputError, match="needs an id"):
        parse({"text": "Tide."})
    with pytest.raises(InvalidInputError, match="differs"):
        parse({"id": "b", "text": "Tide."}, external_id="a")


@pytest.mark.parametrize(
    ("sent", "expected"),
    [
        ("2021-03-04T12:30:00+02:00", datetime(2021, 3, 4, 10, 30, tzinfo=UTC)),
        ("2021-03-04T10:30:00Z", datetime(2021, 3, 4, 10, 30, tzinfo=UTC)),
        ("2021-03-04T10:30:00", datetime(2021, 3, 4, 10, 30, tzinfo=UTC)),
        ("2021-03-04", datetime(2021, 3, 4, tzinfo=UTC)),
        ("0001-01-01T00:00:00Z", datetime(1, 1, 1, tzinfo=UTC)),
    ],
)
def test_published_at_becomes_utc(sent: str, expected: datetime) -> None:
    parsed = parse({"text": "Tide.", "published_at": sent}, external_id="a").published_at
    assert parsed == expected
    assert parsed.utcoffset().total_seconds() == 0


@pytest.mark.parametrize(
    "sent", ["yesterday", "2021-02-30", "0001-01-01T00:00:00+14:00", "9999-12-31T23:00:00-14:00"]
)
def test_published_at_out_of_range_or_malformed(sent: str) -> None:
    with pytest.raises(InvalidInputError) as caught:
        parse({"text": "Tide.", "published_at": sent}, external_id="a")
    assert caught.value.details == {"field": "published_at"}


def test_equal_content_has_equal_hash_whatever_the_offset() -> None:
    one = parse({"text": "T", "published_at": "2021-03-04T12:00:00+02:00"}, external_id="a")
    two = parse({"text": "T", "published_at": "2021-03-04T10:00:00Z"}, external_id="a")
    other = parse({"text": "T", "published_at": "2021-03-04T10:00:01Z"}, external_id="a")
    assert one.content_hash == two.content_hash != other.content_hash
    reordered = parse({"text": "T", "metadata": {"b": 1, "a": 2}}, external_id="a")
    ordered = parse({"text": "T", "metadata": {"a": 2, "b": 1}}, external_id="a")
    assert reordered.content_hash == ordered.content_hash


def test_size_limit_counts_utf8_bytes_of_title_and_text() -> None:
    parse({"title": "€" * 300, "text": "€" * 382}, external_id="a")  # 2,046 bytes
    with pytest.raises(PayloadTooLargeError) as caught:
        parse({"title": "€" * 300, "text": "€" * 383}, external_id="a")  # 2,049 bytes
    assert caught.value.details["bytes"] == 2049


@pytest.mark.parametrize(
    "raw",
    [
        {"text": ""},
        {"text": "  "},
        {"text": 5},
        {"text": None},
        {"title": "x"},
        {"text": "a\x00b"},
        {"text": "T", "title": "a\x00"},
        {"text": "T", "metadata": []},
        {"text": "T", "published_at": 5},
        {"text": "T", "extra": 1},
        ["not", "an", "object"],
        None,
    ],
)
def test_invalid_documents(raw: Any) -> None:
    with pytest.raises(InvalidInputError):
        parse(raw, external_id="a")


def _nest(levels: int) -> Any:
    """An object of ``levels`` levels, objects and lists taking turns."""
    value: Any = 1
    for level in range(levels - 1):
        value = [value] if level % 2 else {"k": value}
    return {"top": value}


def test_metadata_depth_is_bounded() -> None:
    parse({"text": "T", "metadata": _nest(MAX_METADATA_DEPTH)}, external_id="a")
    with pytest.raises(InvalidInputError, match="nested"):
        parse({"text": "T", "metadata": _nest(MAX_METADATA_DEPTH + 1)}, external_id="a")


@pytest.mark.parametrize(
    "ident", ["a", "A9", "doc-1.2_x:y@z~w", "9" * MAX_ID_LENGTH, "x" + "-" * (MAX_ID_LENGTH - 1)]
)
def test_good_ids(ident: str) -> None:
    assert check_external_id(ident) == ident


@pytest.mark.parametrize(
    "ident",
    ["", "-a", ".a", "a b", "a/b", "a%b", "é", "a\n", "a\x00", "9" * (MAX_ID_LENGTH + 1), 5, None],
)
def test_bad_ids(ident: Any) -> None:
    with pytest.raises(InvalidInputError):
        check_external_id(ident)
