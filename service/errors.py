"""One place that turns storage and measures errors into JSON ``{"detail": ...}`` responses."""

from __future__ import annotations

import logging
import math
from typing import Any

from fastapi import FastAPI, Request
from fastapi.encoders import jsonable_encoder
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from sqlalchemy.exc import TimeoutError as PoolTimeout

from measures.errors import InvalidParameterError
from storage import errors as storage_errors

__all__ = ["error_body", "error_status", "install_error_handlers"]

log = logging.getLogger("gaitscape.service")

# Most specific first: the first class an error is an instance of decides its status.
# TooLarge and ReaderError are BadInput subclasses, so they precede it.
_STATUS_BY_CLASS: tuple[tuple[type[storage_errors.StorageError], int], ...] = (
    (storage_errors.NotFound, 404),
    (storage_errors.Conflict, 409),
    (storage_errors.TooLarge, 413),
    (storage_errors.ReaderError, 422),
    (storage_errors.BadInput, 400),
    (storage_errors.StoreFull, 507),
    (storage_errors.ArtifactCorrupt, 500),
)


def error_status(exc: BaseException) -> int:
    """HTTP status for a storage or measures error (500 for anything unexpected)."""
    for cls, status in _STATUS_BY_CLASS:
        if isinstance(exc, cls):
            return status
    if isinstance(exc, InvalidParameterError):
        return 422
    if isinstance(exc, OSError) and exc.errno == 28:  # ENOSPC escaping storage
        return 507
    return 500


def error_body(exc: BaseException) -> dict[str, Any]:
    """``{"detail": message}``, plus ``file`` and ``where`` when a reader named them."""
    body: dict[str, Any] = {"detail": str(exc) or exc.__class__.__name__}
    for key in ("file", "where"):
        value = getattr(exc, key, None)
        if value is not None:
            body[key] = str(value)
    return body


async def _handle(request: Request, exc: Exception) -> JSONResponse:
    status = error_status(exc)
    if status == 500 and not isinstance(exc, storage_errors.StorageError):
        raise exc
    return JSONResponse(status_code=status, content=error_body(exc))


def install_error_handlers(app: FastAPI) -> None:
    """Register the one handler for every storage and measures error class."""
    app.add_exception_handler(storage_errors.StorageError, _handle)
    app.add_exception_handler(InvalidParameterError, _handle)
    app.add_exception_handler(OverflowError, _out_of_range)
    app.add_exception_handler(RequestValidationError, _validation)
    app.add_exception_handler(PoolTimeout, _busy)
    _document_string_details(app)


def _document_string_details(app: FastAPI) -> None:
    """Say in the OpenAPI schema that a 422 ``detail`` may be a message, not only a list.

    Reader and parameter errors are 422 with ``{"detail": "message", "file", "where"}``;
    FastAPI documents 422 as its validation list alone, so clients generated from the schema
    (and schemathesis, tests/test_schema_fuzz.py) would reject our own answers.
    """
    build = app.openapi

    def openapi() -> dict[str, Any]:
        if app.openapi_schema:
            return app.openapi_schema
        schema = build()
        error = schema.get("components", {}).get("schemas", {}).get("HTTPValidationError")
        if error is not None:
            props = error.setdefault("properties", {})
            listed = {k: v for k, v in props.get("detail", {}).items() if k != "title"}
            props["detail"] = {"anyOf": [listed, {"type": "string"}], "title": "Detail"}
            props.setdefault("file", {"type": "string", "title": "File"})
            props.setdefault("where", {"type": "string", "title": "Where"})
        return schema

    app.openapi = openapi  # type: ignore[method-assign]


def _finite(value: Any) -> Any:
    """``value`` with every non-finite float written as text (JSON has no Infinity or NaN)."""
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


async def _validation(request: Request, exc: Exception) -> JSONResponse:
    # FastAPI's own handler echoes the input; an input holding 1e400 (read as Infinity) made it
    # fail to render and the client got a 500 (found by tests/test_hostile.py).
    errors = exc.errors() if isinstance(exc, RequestValidationError) else []
    return JSONResponse(status_code=422, content={"detail": _finite(jsonable_encoder(errors))})


async def _busy(request: Request, exc: Exception) -> JSONResponse:
    # Every database connection is in use: a moment's overload, not a fault; clients retry.
    log.warning("database connection pool exhausted: %s", exc)
    return JSONResponse(
        status_code=503,
        content={"detail": "The server is busy (all database connections in use); retry."},
        headers={"Retry-After": "2"},
    )


async def _out_of_range(request: Request, exc: Exception) -> JSONResponse:
    # A filter or id past 64 bits reaches the database driver as OverflowError (found by
    # tests/test_schema_fuzz.py); it is the client's number that is wrong, not the server.
    return JSONResponse(
        status_code=422, content={"detail": f"A number in the request is out of range: {exc}"}
    )
