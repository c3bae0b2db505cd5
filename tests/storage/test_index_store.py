"""Index arrays in chunks: every supported kind of array comes back equal, and a version
is deleted with everything it holds."""

from __future__ import annotations

import numpy as np
import pytest
from sqlalchemy import Engine, func, select

from service.storage import index_store
from service.storage.models import IndexArray
from service.storage.types import utcnow
from tests.build_factories import add_collection, collection_row, factory

ARRAYS = {
    "floats": np.linspace(0.0, 1.0, 1001).reshape(7, 143),
    "ints": np.arange(-50, 50, dtype=np.int32),
    "flags": np.array([True, False, True]),
    "empty": np.zeros((0, 4), dtype=np.float32),
    "scalar": np.array(2.5),
    "terms": np.array(["harbour", "tīde", "", "月"], dtype=str),
    "no_terms": np.array([], dtype=str),
    "dates": np.array(["2021-03-04T10:00:00", "NaT"], dtype="datetime64[s]"),
    "big_endian": np.arange(5, dtype=">i8"),
}


def _version(engine: Engine) -> int:
    make = factory(engine)
    add_collection(make, "arrays", 0)
    with make() as session:
        conn = session.connection()
        version_id = index_store.create_version(
            conn,
            collection_id=int(collection_row(make, "arrays").id),
            parameters={},
            statistics={},
            snapshot_change_count=0,
            n_documents=0,
            now=utcnow(),
        )
        session.commit()
    return version_id


@pytest.mark.parametrize("chunk_bytes", [7, 1 << 20])
def test_arrays_round_trip_in_chunks(engine: Engine, chunk_bytes: int) -> None:
    version_id = _version(engine)
    make = factory(engine)
    with make() as session:
        conn = session.connection()
        for name, value in ARRAYS.items():
            rows = list(index_store.array_rows(version_id, name, value, chunk_bytes))
            assert len(rows) == max(1, -(-sum(len(r["data"]) for r in rows) // chunk_bytes))
            index_store.insert_array_rows(conn, rows)
        session.commit()
    with make() as session:
        loaded = index_store.load_arrays(session.connection(), version_id)
        subset = index_store.load_arrays(session.connection(), version_id, ["ints", "gone"])
    assert set(loaded) == set(ARRAYS)
    for name, value in ARRAYS.items():
        assert loaded[name].shape == value.shape, name
        assert loaded[name].dtype.kind == value.dtype.kind, name
        np.testing.assert_array_equal(loaded[name], value, err_msg=name)
        assert not loaded[name].flags.writeable, name
    assert set(subset) == {"ints"}


def test_refuses_objects_and_bad_names() -> None:
    with pytest.raises(ValueError, match="object"):
        list(index_store.array_rows(1, "objects", np.array([{}, 1], dtype=object)))
    with pytest.raises(ValueError, match="1-64"):
        list(index_store.array_rows(1, "x" * 65, np.zeros(1)))
    with pytest.raises(ValueError, match="one-dimensional"):
        list(index_store.array_rows(1, "grid", np.array([["a"]])))


def test_delete_version_removes_its_rows(engine: Engine) -> None:
    version_id = _version(engine)
    make = factory(engine)
    with make() as session:
        rows = list(index_store.array_rows(version_id, "x", np.zeros(100), chunk_bytes=64))
        index_store.insert_array_rows(session.connection(), rows)
        index_store.insert_clusters(
            session.connection(),
            version_id,
            [{"stable_id": 0, "size": 1, "label_terms": [], "representatives": [1]}],
        )
        session.commit()
        index_store.delete_version(session.connection(), version_id)
        session.commit()
        assert session.execute(select(func.count()).select_from(IndexArray)).scalar_one() == 0
        assert index_store.version_row(session.connection(), version_id) is None
        assert index_store.load_clusters(session.connection(), version_id) == []
