"""Collections over HTTP: create with defaults, list, read, change settings."""

from __future__ import annotations

from service.pipeline.collection_settings import CollectionSettings
from tests.factories import TestClient, assert_error, auth, document, new_collection, put_document


def test_create_fills_in_every_default(client: TestClient, keys: dict[str, str]) -> None:
    view = new_collection(client, keys, "news")
    assert view["name"] == "news"
    assert view["settings"] == CollectionSettings().model_dump()
    assert (view["documents"], view["documents_without_terms"], view["terms"]) == (0, 0, 0)
    assert view["changes"] == 0
    assert view["created_at"].endswith("+00:00")


def test_create_keeps_given_settings(client: TestClient, keys: dict[str, str]) -> None:
    given = {
        "language": "french",
        "stemming": True,
        "groups": 12,
        "reindex": {"every_seconds": 3600},
    }
    view = new_collection(client, keys, "actualites", given)
    settings = view["settings"]
    assert {k: settings[k] for k in ("language", "stemming", "groups")} == {
        "language": "french",
        "stemming": True,
        "groups": 12,
    }
    assert settings["reindex"] == {"every_seconds": 3600, "after_changes": None}
    again = client.get("/v1/collections/actualites", headers=auth(keys["read"])).json()
    assert again == view


def test_list_is_sorted_by_name_with_counts(client: TestClient, keys: dict[str, str]) -> None:
    for name in ("zeta", "alpha", "mid-1"):
        new_collection(client, keys, name)
    put_document(client, keys, "mid-1", document(1))
    put_document(client, keys, "mid-1", {"id": "x", "text": "the and of"})
    response = client.get("/v1/collections", headers=auth(keys["read"]))
    assert response.status_code == 200
    items = response.json()["items"]
    assert [c["name"] for c in items] == ["alpha", "mid-1", "zeta"]
    mid = items[1]
    assert (mid["documents"], mid["documents_without_terms"], mid["changes"]) == (2, 1, 2)
    assert mid["terms"] > 0


def test_patch_changes_only_what_it_names(client: TestClient, keys: dict[str, str]) -> None:
    new_collection(client, keys, "news", {"reindex": {"every_seconds": 600}, "neighbors": 10})
    response = client.patch(
        "/v1/collections/news",
        json={"settings": {"reindex": {"after_changes": 50}, "max_df": 0.8}},
        headers=auth(keys["admin"]),
    )
    assert response.status_code == 200, response.text
    settings = response.json()["settings"]
    assert settings["reindex"] == {"every_seconds": 600, "after_changes": 50}
    assert (settings["max_df"], settings["neighbors"]) == (0.8, 10)
    empty_patch = client.patch("/v1/collections/news", json={}, headers=auth(keys["admin"]))
    assert empty_patch.json()["settings"] == settings
    # A refused patch leaves every setting as it was.
    assert_error(
        client.patch(
            "/v1/collections/news",
            json={"settings": {"max_df": 0.9, "neighbors": 0}},
            headers=auth(keys["admin"]),
        ),
        422,
        "invalid_input",
    )
    now = client.get("/v1/collections/news", headers=auth(keys["read"])).json()["settings"]
    assert now == settings


def test_setting_errors_name_the_field(client: TestClient, keys: dict[str, str]) -> None:
    error = assert_error(
        client.post(
            "/v1/collections",
            json={"name": "news", "settings": {"neighbors": 1, "colour": "red"}},
            headers=auth(keys["admin"]),
        ),
        422,
        "invalid_input",
    )
    fields = {d["field"] for d in error["details"]}
    assert fields == {"neighbors", "colour"}


def test_language_change_refused_once_documents_exist(
    client: TestClient, keys: dict[str, str]
) -> None:
    new_collection(client, keys, "news")
    put_document(client, keys, "news", document(1))
    error = assert_error(
        client.patch(
            "/v1/collections/news",
            json={"settings": {"language": "german", "stemming": True}},
            headers=auth(keys["admin"]),
        ),
        409,
        "conflict",
    )
    assert error["details"] == {"fields": ["language", "stemming"]}
    # Once the documents are gone the collection may change its language.
    client.delete("/v1/collections/news/documents/doc-1", headers=auth(keys["write"]))
    response = client.patch(
        "/v1/collections/news",
        json={"settings": {"language": "german"}},
        headers=auth(keys["admin"]),
    )
    assert response.status_code == 200, response.text
