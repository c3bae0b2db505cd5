"""A one-row SELECT run straight on the driver, for the checks made on every query.

SQLAlchemy's Core path (connection wrapper, result object, row processors) costs about
60 us per execution on SQLite, against about 10 us for the same statement on the raw
DBAPI cursor (measured on this machine; the pool checkout and its pre-ping are paid
either way). A statement is compiled once for the engine's dialect; its parameters are
bound by name, so the SQL string and the driver's paramstyle stay SQLAlchemy's business.
Only for reads of plain columns (ints, strings): no result type processing happens.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import Engine
from sqlalchemy.sql import Select

__all__ = ["PreparedRead"]


class PreparedRead:
    """``first(**params)``: the first row of ``statement`` as a tuple, or None."""

    def __init__(self, engine: Engine, statement: Select[Any]) -> None:
        compiled = statement.compile(dialect=engine.dialect)
        self._engine = engine
        self._sql = str(compiled)
        self._order: list[str] | None = (
            list(compiled.positiontup or []) if compiled.positional else None
        )

    def first(self, **params: Any) -> tuple[Any, ...] | None:
        bound: Any = params if self._order is None else tuple(params[n] for n in self._order)
        connection = self._engine.raw_connection()
        try:
            cursor = connection.cursor()
            try:
                cursor.execute(self._sql, bound)
                row = cursor.fetchone()
            finally:
                cursor.close()
        finally:
            connection.close()  # back to the pool, which ends the read transaction
        return None if row is None else tuple(row)
