"""Every SQLAlchemy transaction is one database transaction on both back ends: two reads
in one transaction see one state although a writer commits between them (what a build's
snapshot relies on), and a write use case still works beside a long reader."""

from __future__ import annotations

from sqlalchemy import Engine, select, update

from service.storage.models import Collection
from tests.build_factories import add_collection, factory, upsert

COLLECTIONS = Collection.__table__


def test_two_reads_in_one_transaction_see_one_state(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "snap", 3)
    with make() as reader:
        if engine.dialect.name == "postgresql":
            reader.connection(execution_options={"isolation_level": "REPEATABLE READ"})
        query = select(COLLECTIONS.c.change_count).where(COLLECTIONS.c.name == "snap")
        first = reader.execute(query).scalar_one()
        upsert(make, "snap", [{"id": "late", "text": "a document stored meanwhile"}])
        second = reader.execute(query).scalar_one()
        reader.rollback()
        third = reader.execute(query).scalar_one()
    assert first == second == 3
    assert third == 4


def test_a_writer_commits_while_a_reader_holds_its_snapshot(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "busy", 1)
    with make() as reader:
        reader.execute(select(COLLECTIONS.c.id)).all()  # the read transaction is open
        with make() as writer:
            writer.execute(
                update(COLLECTIONS).where(COLLECTIONS.c.name == "busy").values(next_group_id=5)
            )
            writer.commit()
        reader.rollback()
    with make() as session:
        value = session.execute(
            select(COLLECTIONS.c.next_group_id).where(COLLECTIONS.c.name == "busy")
        ).scalar_one()
    assert value == 5
