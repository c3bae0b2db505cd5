"""The one table from domain errors to HTTP statuses, and the JSON error shape."""

from __future__ import annotations

import logging
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from sqlalchemy.exc import DBAPIError, IntegrityError, InterfaceError, OperationalError
from sqlalchemy.exc import TimeoutError as PoolTimeoutError
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.routing import Match

from service import errors

log = logging.getLogger("tidemap.api")

STATUS: dict[type[errors.TidemapError], int] = {
    errors.MalformedRequestError: 400,
    errors.AuthenticationError: 401,
    errors.PermissionDeniedError: 403,
    errors.NotFoundError: 404,
    errors.ConflictError: 409,
    errors.PayloadTooLargeError: 413,
    errors.InvalidInputError: 422,
    errors.SchemaMismatchError: 503,
    errors.UnavailableError: 503,
}

HTTP_CODES = {400: "malformed_request", 404: "not_found", 405: "method_not_allowed"}


def status_of(exc: errors.TidemapError) -> int:
    for cls in type(exc).__mro__:
        if cls in STATUS:
            return STATUS[cls]
    return 500


def error_response(
    status: int, code: str, message: str, details: Any = None, headers: dict[str, str] | None = None
) -> JSONResponse:
    body = {"error": {"code": code, "message": message, "details": details}}
    return JSONResponse(body, status_code=status, headers=headers)


async def _domain(_: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, errors.TidemapError)
    status = status_of(exc)
    headers = {"WWW-Authenticate": "Bearer"} if status == 401 else None
    return error_response(status, exc.code, exc.message, exc.details, headers)


async def _validation(_: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, RequestValidationError)
    problems = [
        {"field": ".".join(str(p) for p in err.get("loc", ())), "problem": err.get("msg", "")}
        for err in exc.errors()
    ]
    if any(err.get("type") == "json_invalid" for err in exc.errors()):
        return error_response(400, "malformed_request", "the body is not valid JSON", problems)
    return error_response(422, "invalid_input", "the request has invalid fields", problems)


def _allowed_methods(request: Request) -> list[str]:
    """Every method some route serves at this path (starlette's 405 names only the first
    matching route's, e.g. POST but not GET for /v1/collections)."""
    routes = request.app.router.routes
    return [
        method
        for method in ("GET", "HEAD", "POST", "PUT", "PATCH", "DELETE")
        if any(r.matches({**request.scope, "method": method})[0] == Match.FULL for r in routes)
    ]


async def _http(request: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, StarletteHTTPException)
    code = HTTP_CODES.get(exc.status_code, f"http_{exc.status_code}")
    headers = exc.headers
    if exc.status_code == 405 and (allowed := _allowed_methods(request)):
        headers = {**(headers or {}), "Allow": ", ".join(allowed)}
    return error_response(exc.status_code, code, str(exc.detail), None, headers)


async def _database_unavailable(_: Request, exc: Exception) -> JSONResponse:
    """The connection failed, dropped or timed out: a retry may well succeed."""
    log.warning("database unavailable: %s", exc)
    return error_response(
        503, "unavailable", "the database cannot be reached right now; try again shortly"
    )


async def _database_conflict(_: Request, exc: Exception) -> JSONResponse:
    """A constraint refused the write: a concurrent request changed the same rows first
    (the use cases check the constraints they know before writing)."""
    log.warning("database constraint: %s", exc)
    return error_response(
        409, "conflict", "a concurrent change to the same data came first; read it and try again"
    )


async def _database_other(_: Request, exc: Exception) -> JSONResponse:
    """Any other driver error is a fault of ours, not an outage: logged as one."""
    log.exception("database error", exc_info=exc)
    return error_response(500, "internal", "an unexpected error occurred; it has been logged")


async def _unexpected(_: Request, exc: Exception) -> JSONResponse:
    log.exception("unexpected error", exc_info=exc)
    return error_response(500, "internal", "an unexpected error occurred; it has been logged")


def install_error_handlers(app: FastAPI) -> None:
    app.add_exception_handler(errors.TidemapError, _domain)
    app.add_exception_handler(RequestValidationError, _validation)
    app.add_exception_handler(StarletteHTTPException, _http)
    # Starlette picks the handler of the nearest class in the exception's MRO.
    app.add_exception_handler(OperationalError, _database_unavailable)
    app.add_exception_handler(InterfaceError, _database_unavailable)
    app.add_exception_handler(PoolTimeoutError, _database_unavailable)
    app.add_exception_handler(IntegrityError, _database_conflict)
    app.add_exception_handler(DBAPIError, _database_other)
    app.add_exception_handler(Exception, _unexpected)
