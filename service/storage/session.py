"""Engine and session factories for SQLite (embedded) and PostgreSQL."""

from __future__ import annotations

from typing import Any

from sqlalchemy import Connection, Engine, create_engine, event
from sqlalchemy.orm import Session, sessionmaker


def make_engine(url: str, **kwargs: Any) -> Engine:
    """Create an engine with the settings each back end needs.

    SQLite: WAL so readers never wait for the writer, a busy timeout so writers queue
    instead of failing, foreign keys on (SQLite leaves them off by default).

    SQLite transactions: the pysqlite driver opens a transaction only before a write, so
    two SELECTs of one SQLAlchemy transaction could see two different states of the
    database (a writer committing in between). SQLAlchemy's documented recipe ("Serializable
    isolation / Savepoints / Transactional DDL" in the SQLite dialect notes) turns the
    driver's own transaction handling off and emits BEGIN when SQLAlchemy begins, so every
    SQLAlchemy transaction is one SQLite transaction: a build's snapshot is consistent.
    The price is SQLite's rule for deferred transactions in WAL mode: one that read first
    cannot write once another connection has committed since its first read (SQLITE_BUSY,
    without waiting), so every write use case starts with its write (see
    ``service.storage.repository.lock_collection``).
    """
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"timeout": 30}, **kwargs)

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_conn: Any, _record: Any) -> None:
            # None: the driver never issues BEGIN/COMMIT by itself (the "begin" hook does).
            dbapi_conn.isolation_level = None
            cur = dbapi_conn.cursor()
            if ":memory:" not in url:
                cur.execute("PRAGMA journal_mode=WAL")
            cur.execute("PRAGMA synchronous=NORMAL")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute("PRAGMA busy_timeout=30000")
            cur.close()

        @event.listens_for(engine, "begin")
        def _sqlite_begin(conn: Connection) -> None:
            conn.exec_driver_sql("BEGIN")

        return engine
    kwargs.setdefault("pool_pre_ping", True)
    kwargs.setdefault("pool_size", 10)
    kwargs.setdefault("max_overflow", 20)
    return create_engine(url, **kwargs)


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(bind=engine, expire_on_commit=False)
