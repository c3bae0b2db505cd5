"""Liveness and readiness."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse
from sqlalchemy import text

from service.api.deps import READ
from service.storage.schema import schema_status

router = APIRouter(tags=["health"])


@router.get("/healthz", summary="Liveness: the process answers")
def healthz() -> dict[str, str]:
    """Answers 200 while the process runs; needs no key and touches nothing."""
    return {"status": "ok"}


@router.get(
    "/readyz", summary="Readiness: database reachable and schema current", dependencies=[READ]
)
def readyz(request: Request) -> Any:
    """200 when the database answers and its schema is the one this code expects, else 503."""
    engine = request.app.state.engine
    try:
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
        status = schema_status(engine)
    except Exception as exc:  # any failure to reach the database means "not ready"
        return JSONResponse(
            {"status": "unavailable", "database": "unreachable", "reason": type(exc).__name__},
            status_code=503,
        )
    body = {
        "status": "ok" if status.ok else "unavailable",
        "database": "ok",
        "schema": {"current": status.current, "head": status.head, "state": status.state},
    }
    return JSONResponse(body, status_code=200 if status.ok else 503)
