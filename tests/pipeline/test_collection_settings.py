"""Collection settings: documented defaults, unknown keys and bad values refused."""

from __future__ import annotations

from typing import Any

import pytest

from service.errors import InvalidInputError
from service.pipeline.collection_settings import (
    CollectionSettings,
    merge_settings,
    parse_settings,
)
from service.pipeline.collections import check_name
from service.text.tokenize import supported_languages


def test_no_settings_means_every_default() -> None:
    assert parse_settings(None) == CollectionSettings()
    assert parse_settings({}) == CollectionSettings()
    assert CollectionSettings().language in supported_languages()


@pytest.mark.parametrize(
    ("raw", "field"),
    [
        ({"colour": "red"}, "colour"),
        ({"neighbors": 1}, "neighbors"),
        ({"neighbors": 201}, "neighbors"),
        ({"max_df": 0}, "max_df"),
        ({"max_df": 1.01}, "max_df"),
        ({"alpha": -0.1}, "alpha"),
        ({"vocab_size": 99}, "vocab_size"),
        ({"diffusion_time": 0}, "diffusion_time"),
        ({"max_coordinates": 1}, "max_coordinates"),
        ({"groups": 1}, "settings"),
        ({"groups": 501}, "settings"),
        ({"groups": "many"}, "groups"),
        ({"language": "klingon"}, "settings"),
        ({"reindex": {"every_seconds": 59}}, "reindex.every_seconds"),
        ({"reindex": {"after_changes": 0}}, "reindex.after_changes"),
        ({"reindex": {"nightly": True}}, "reindex.nightly"),
    ],
)
def test_bad_settings_name_their_field(raw: dict[str, Any], field: str) -> None:
    with pytest.raises(InvalidInputError) as caught:
        parse_settings(raw)
    fields = [d["field"] for d in caught.value.details]
    assert any(f == field or f.startswith(f"{field}.") for f in fields), fields


@pytest.mark.parametrize("raw", ["english", [], 5, True])
def test_settings_must_be_an_object(raw: Any) -> None:
    with pytest.raises(InvalidInputError):
        parse_settings(raw)


def test_merge_keeps_what_the_patch_does_not_name() -> None:
    current = parse_settings({"neighbors": 10, "reindex": {"every_seconds": 600}})
    merged = merge_settings(current, {"reindex": {"after_changes": 5}, "alpha": 0.5})
    assert (merged.neighbors, merged.alpha) == (10, 0.5)
    assert (merged.reindex.every_seconds, merged.reindex.after_changes) == (600, 5)
    assert merge_settings(current, {}) == current
    cleared = merge_settings(current, {"reindex": {"every_seconds": None}})
    assert cleared.reindex.every_seconds is None


def test_merge_validates_the_result() -> None:
    with pytest.raises(InvalidInputError):
        merge_settings(CollectionSettings(), {"neighbors": 0})
    with pytest.raises(InvalidInputError):
        merge_settings(CollectionSettings(), None)


@pytest.mark.parametrize("name", ["a", "news", "news-2024_x", "9" * 64])
def test_good_collection_names(name: str) -> None:
    assert check_name(name) == name


@pytest.mark.parametrize(
    "name", ["", "News", "-a", "_a", "a b", "a.b", "é", "a\n", "9" * 65, None, 5]
)
def test_bad_collection_names(name: Any) -> None:
    with pytest.raises(InvalidInputError):
        check_name(name)
