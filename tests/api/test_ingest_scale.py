"""NDJSON ingestion of many documents through the API keeps the term table exact.

5,000 documents run in every suite; 20,000 carry the ``slow`` marker (deselect with
``-m "not slow"``). Measured on the 2-core development machine while other jobs ran
(load average 5-8), whole test through TestClient: 5,000 took 5 s on SQLite and 10-12 s
on PostgreSQL, 20,000 took 20 s and 76 s (that server runs without autovacuum, so every
chunk's document-frequency updates leave dead term rows behind).
"""

from __future__ import annotations

import itertools
import json
import random

import pytest
from sqlalchemy import Engine, func, select

from service.storage.models import Document
from tests.factories import TestClient, auth, frequency_recount, new_collection

# Invented two-syllable words with Zipf-like frequencies: only the counting is checked.
_SYLLABLES = [c + v for c in "bdfgklmnprstvz" for v in "aeiou"]
VOCABULARY = ["".join(pair) for pair in itertools.product(_SYLLABLES, repeat=2)]
_CUMULATIVE = list(itertools.accumulate(1.0 / (rank + 3) for rank in range(len(VOCABULARY))))
NDJSON = {"content-type": "application/x-ndjson"}


def lines(rng: random.Random, ids: range, words: int = 24) -> list[bytes]:
    out = []
    for i in ids:
        drawn = rng.choices(VOCABULARY, cum_weights=_CUMULATIVE, k=words)
        doc = {"id": f"b{i}", "title": " ".join(drawn[:4]), "text": " ".join(drawn[4:])}
        out.append(json.dumps(doc).encode())
    return out


@pytest.mark.parametrize("n_docs", [5_000, pytest.param(20_000, marks=pytest.mark.slow)])
def test_ndjson_ingest_keeps_document_frequencies_exact(
    client: TestClient, keys: dict[str, str], engine: Engine, n_docs: int
) -> None:
    new_collection(client, keys, "big")
    rng = random.Random(n_docs)
    url, headers = "/v1/collections/big/documents", auth(keys["write"]) | NDJSON

    body = b"\n".join(lines(rng, range(n_docs)))
    response = client.post(url, content=body, headers=headers)
    assert response.status_code == 200, response.text[:500]
    assert response.json() == {
        "inserted": n_docs,
        "updated": 0,
        "unchanged": 0,
        "rejected": 0,
        "items": [],
    }

    # A second stream: a tenth rewritten, a tenth sent again unchanged, a few bad lines,
    # then some deletes; the table must still equal a recount from the stored vectors.
    tenth = n_docs // 10
    again = body.split(b"\n")[tenth : 2 * tenth]
    second = lines(rng, range(tenth)) + again + [b"{broken", b"[]", b'{"id": "b1"}']
    response = client.post(url, content=b"\n".join(second), headers=headers)
    summary = response.json()
    assert (summary["updated"], summary["unchanged"], summary["rejected"]) == (tenth, tenth, 3)
    for i in range(0, n_docs, n_docs // 50):
        assert client.delete(f"{url}/b{i}", headers=auth(keys["write"])).status_code == 204

    with engine.connect() as conn:
        stored = conn.execute(select(func.count()).select_from(Document.__table__)).scalar_one()
    assert stored == n_docs - 50
    table, recount = frequency_recount(engine, "big")
    assert len(recount) > 1000
    assert table == recount
    view = client.get("/v1/collections/big", headers=auth(keys["read"])).json()
    assert view["documents"] == n_docs - 50
    assert view["terms"] == len(recount)
    assert view["changes"] == n_docs + tenth + 50
