"""HTTP hardening as one pure ASGI middleware: request ids, JSON access logs, security headers,
and a size cap on request bodies that are not uploads.

* **Request id**: a client's ``X-Request-ID`` is kept when it is short and plain (so a proxy's
  id carries through), else one is made; it is echoed in the response and put on every log
  record written while the request runs (a context variable), so one id ties them together.
* **Logs**: ``gaitscape.*`` loggers write one JSON object per line (``JsonLogFormatter``):
  time, level, logger, message, request id, and the extra fields of access records
  (method, path, status, duration_ms, client). Query strings are not logged: they may carry
  names a lab considers private, and tokens travel in headers, never in URLs. This is the one
  access log: ``gaitscape serve`` turns uvicorn's own off (it would log query strings).
* **Errors**: an exception nothing else handled is logged with its request id and answered
  as JSON ``{"detail": ...}`` with status 500 and the same headers as every other response.
* **Headers**: every response gets ``X-Content-Type-Options: nosniff``, ``Referrer-Policy:
  no-referrer`` and ``X-Frame-Options: DENY``; HTML responses also a Content-Security-Policy
  that allows only this origin's scripts, styles and images (plus inline styles and data: images,
  which the report pages embed) and no framing. API responses are marked ``Cache-Control:
  no-store`` so shared caches never keep data fetched with a token.
* **Body cap**: JSON and form bodies other than multipart uploads are cut off past
  ``MAX_BODY_BYTES`` with HTTP 413 (uploads have their own, larger cap enforced while they are
  streamed to the store).
"""

from __future__ import annotations

import contextvars
import json
import logging
import re
import sys
import time
import uuid
from collections.abc import Awaitable, Callable, MutableMapping
from typing import Any

from starlette.exceptions import HTTPException as StarletteHTTPException

__all__ = [
    "MAX_BODY_BYTES",
    "SECURITY_HEADERS",
    "HardeningMiddleware",
    "JsonLogFormatter",
    "configure_json_logging",
    "current_request_id",
    "install_hardening",
    "safe_download_name",
]

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]
ASGIApp = Callable[[Scope, Receive, Send], Awaitable[None]]

MAX_BODY_BYTES = 1024**2  # JSON bodies here are a few kB; recipes with many overrides < 100 kB
_REQUEST_ID_RE = re.compile(r"^[A-Za-z0-9._:-]{1,64}$")

SECURITY_HEADERS: tuple[tuple[bytes, bytes], ...] = (
    (b"x-content-type-options", b"nosniff"),
    (b"referrer-policy", b"no-referrer"),
    (b"x-frame-options", b"DENY"),
)
# The interactive API docs (/docs, /redoc) load their scripts from a CDN, so they are exempt
# from the strict policy; everything else that is HTML (reports, dashboard) gets it.
HTML_CSP = (
    b"default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
    b"img-src 'self' data:; object-src 'none'; base-uri 'none'; frame-ancestors 'none'; "
    b"form-action 'self'"
)
_DOCS_PATHS = ("/docs", "/redoc")

_request_id: contextvars.ContextVar[str | None] = contextvars.ContextVar(
    "gaitscape_request_id", default=None
)
access_log = logging.getLogger("gaitscape.access")
error_log = logging.getLogger("gaitscape.service")


def current_request_id() -> str | None:
    """The id of the request being handled in this context, if any."""
    return _request_id.get()


class JsonLogFormatter(logging.Formatter):
    """One JSON object per record; the request id and access fields included when present."""

    _FIELDS = ("method", "path", "status", "duration_ms", "client", "bytes_in")

    def format(self, record: logging.LogRecord) -> str:
        entry: dict[str, Any] = {
            "time": time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(record.created))
            + f".{int(record.msecs):03d}Z",
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
        }
        request_id = getattr(record, "request_id", None) or current_request_id()
        if request_id:
            entry["request_id"] = request_id
        for key in self._FIELDS:
            value = getattr(record, key, None)
            if value is not None:
                entry[key] = value
        if record.exc_info:
            entry["error"] = self.formatException(record.exc_info)
        return json.dumps(entry, default=str)


_configured = False


def configure_json_logging(level: str | int = "info") -> None:
    """Send ``gaitscape.*`` records to stderr as JSON lines (once per process)."""
    global _configured
    logger = logging.getLogger("gaitscape")
    logger.setLevel(level.upper() if isinstance(level, str) else level)
    if _configured:
        return
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(JsonLogFormatter())
    logger.addHandler(handler)
    _configured = True


def _header(scope: Scope, name: bytes) -> bytes | None:
    for key, value in scope.get("headers", ()):
        if key == name:
            return bytes(value)
    return None


class _BodyTooLarge(StarletteHTTPException):
    """Raised from ``receive``: FastAPI passes HTTP exceptions through its body parsing."""

    def __init__(self, max_bytes: int) -> None:
        super().__init__(413, f"Request body larger than {max_bytes} bytes.")


class HardeningMiddleware:
    """Request id, access log, security headers and the body cap, for HTTP requests."""

    def __init__(self, app: ASGIApp, *, max_body_bytes: int = MAX_BODY_BYTES) -> None:
        self.app = app
        self.max_body_bytes = max_body_bytes

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        given = (_header(scope, b"x-request-id") or b"").decode("latin-1")
        request_id = given if _REQUEST_ID_RE.match(given) else uuid.uuid4().hex
        token = _request_id.set(request_id)
        started = time.perf_counter()
        state = {"status": 0, "started": False, "bytes_in": 0}
        path = scope.get("path", "")
        content_type = (_header(scope, b"content-type") or b"").lower()
        capped = not content_type.startswith(b"multipart/form-data")

        async def send_wrapper(message: Message) -> None:
            if message["type"] == "http.response.start":
                state["status"] = message["status"]
                state["started"] = True
                headers = list(message.get("headers", []))
                names = {k.lower() for k, _ in headers}
                headers.append((b"x-request-id", request_id.encode()))
                headers += [(k, v) for k, v in SECURITY_HEADERS if k not in names]
                ctype = next((v for k, v in headers if k.lower() == b"content-type"), b"")
                is_page = ctype.startswith(b"text/html") and not path.startswith(_DOCS_PATHS)
                if is_page and b"content-security-policy" not in names:
                    headers.append((b"content-security-policy", HTML_CSP))
                if path.startswith("/v1/") and b"cache-control" not in names:
                    headers.append((b"cache-control", b"no-store"))
                message["headers"] = headers
            await send(message)

        async def receive_wrapper() -> Message:
            message = await receive()
            if message["type"] == "http.request":
                state["bytes_in"] += len(message.get("body", b""))
                if capped and state["bytes_in"] > self.max_body_bytes:
                    raise _BodyTooLarge(self.max_body_bytes)
            return message

        try:
            declared = _header(scope, b"content-length")
            if capped and declared and declared.isdigit() and int(declared) > self.max_body_bytes:
                await self._too_large(send_wrapper)
                return
            await self.app(scope, receive_wrapper, send_wrapper)
        except _BodyTooLarge:
            if not state["started"]:
                await self._too_large(send_wrapper)
        except Exception:
            # Anything unhandled: log it here (with the request id) and answer a JSON 500
            # through send_wrapper, so it carries the security headers and the request id too;
            # Starlette's fallback would write plain text past this middleware.
            error_log.exception("unhandled error in %s %s", scope.get("method", ""), path)
            if not state["started"]:
                await self._json(send_wrapper, 500, "Internal server error; the request id "
                                 f"{request_id} identifies it in the server log.")  # fmt: skip
        finally:
            access_log.info(
                "%s %s %s",
                scope.get("method", ""),
                path,
                state["status"] or 500,
                extra={
                    "method": scope.get("method", ""),
                    "path": path,
                    "status": state["status"] or 500,
                    "duration_ms": round((time.perf_counter() - started) * 1000, 2),
                    "client": (scope.get("client") or ("", 0))[0],
                    "bytes_in": state["bytes_in"],
                    "request_id": request_id,
                },
            )
            _request_id.reset(token)

    async def _too_large(self, send: Send) -> None:
        await self._json(send, 413, f"Request body larger than {self.max_body_bytes} bytes.")

    @staticmethod
    async def _json(send: Send, status: int, detail: str) -> None:
        body = json.dumps({"detail": detail}).encode()
        await send(
            {
                "type": "http.response.start",
                "status": status,
                "headers": [
                    (b"content-type", b"application/json"),
                    (b"content-length", str(len(body)).encode()),
                ],
            }
        )
        await send({"type": "http.response.body", "body": body})


_UNSAFE_NAME_CHARS = re.compile(r'[\x00-\x1f\x7f"]')


def safe_download_name(name: str | None, fallback: str) -> str:
    """The last path component of an uploaded file name, for Content-Disposition.

    A client may have sent ``../../etc/passwd.csv`` or ``C:\\lab\\run.c3d``; the row keeps that
    text as sent (it is only metadata), but a download offers the bare name, without control
    characters or quotes, so no client is nudged into writing outside its download folder.
    """
    base = re.split(r"[/\\]", name or "")[-1]
    base = _UNSAFE_NAME_CHARS.sub("_", base).strip(" .")
    return base or fallback


def install_hardening(app: Any, settings: Any = None) -> None:
    """Add the middleware to ``app`` and JSON logging for ``gaitscape.*`` at the set level."""
    level = getattr(settings, "log_level", "info") if settings is not None else "info"
    configure_json_logging(level)
    app.add_middleware(HardeningMiddleware)
