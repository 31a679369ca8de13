"""Stream a multipart/form-data upload from the raw request straight into the artifact store.

Starlette's form parser would first spool the whole file to a temporary file of its own and only
then let the route look at it; here the one file part is fed chunk by chunk into
``ArtifactStore.put_stream`` (which hashes it and enforces the size cap), so an upload is never
held in memory, crosses the disk once, and an oversize one is cut off as soon as the cap is
passed. The parsing runs in a worker thread; body chunks are pulled from the event loop with
``anyio.from_thread.run``.
"""

from __future__ import annotations

from collections import deque
from collections.abc import AsyncIterator, Iterator
from dataclasses import dataclass, field
from typing import Any

import anyio.from_thread
from fastapi import HTTPException, Request, status
from python_multipart.multipart import MultipartParseError, MultipartParser, parse_options_header
from starlette.concurrency import run_in_threadpool

__all__ = ["ReceivedUpload", "multipart_request_body", "receive_upload"]

MAX_FIELD_BYTES = 64 * 1024  # a meta JSON string is a few hundred bytes
MULTIPART_OVERHEAD_BYTES = 1024**2  # headers, boundaries and the meta field around the file


@dataclass
class ReceivedUpload:
    """The file part (already staged in the store) and the small text fields around it."""

    staged: Any
    filename: str
    fields: dict[str, str] = field(default_factory=dict)


@dataclass
class _PartState:
    headers: dict[str, str] = field(default_factory=dict)
    header_field: bytearray = field(default_factory=bytearray)
    header_value: bytearray = field(default_factory=bytearray)
    name: str = ""
    filename: str | None = None
    buffer: bytearray = field(default_factory=bytearray)


def _bad_request(message: str) -> HTTPException:
    return HTTPException(status_code=status.HTTP_400_BAD_REQUEST, detail=message)


class _StreamingForm:
    """Callbacks for python-multipart's push parser; file bytes go to a queue, fields to a dict."""

    def __init__(self, *, boundary: bytes, file_field: str, pull: Any) -> None:
        self.file_field = file_field
        self._pull = pull  # () -> bytes | None, one raw body chunk from the event loop
        self.fields: dict[str, str] = {}
        self.filename: str | None = None
        self.file_started = False
        self.file_done = False
        self.body_done = False
        self._in_file = False
        self._part = _PartState()
        self._pending: deque[bytes] = deque()
        callbacks = {
            "on_part_begin": self._part_begin,
            "on_header_field": self._header_field,
            "on_header_value": self._header_value,
            "on_header_end": self._header_end,
            "on_headers_finished": self._headers_finished,
            "on_part_data": self._part_data,
            "on_part_end": self._part_end,
        }
        self._parser = MultipartParser(boundary, callbacks)  # type: ignore[arg-type]

    # -- parser callbacks ------------------------------------------------------------------
    def _part_begin(self) -> None:
        self._part = _PartState()

    def _header_field(self, data: bytes, start: int, end: int) -> None:
        self._part.header_field += data[start:end]

    def _header_value(self, data: bytes, start: int, end: int) -> None:
        self._part.header_value += data[start:end]

    def _header_end(self) -> None:
        key = self._part.header_field.decode("latin-1").lower()
        self._part.headers[key] = self._part.header_value.decode("latin-1")
        self._part.header_field.clear()
        self._part.header_value.clear()

    def _headers_finished(self) -> None:
        _, options = parse_options_header(self._part.headers.get("content-disposition", ""))
        self._part.name = options.get(b"name", b"").decode("utf-8", "replace")
        raw_filename = options.get(b"filename")
        self._part.filename = None if raw_filename is None else raw_filename.decode("utf-8")
        if self._part.name == self.file_field and self._part.filename is not None:
            if self.file_started:
                raise _bad_request(f"Send one {self.file_field!r} part per upload.")
            self.file_started = True
            self._in_file = True
            self.filename = self._part.filename

    def _part_data(self, data: bytes, start: int, end: int) -> None:
        if self._in_file:
            self._pending.append(bytes(data[start:end]))
            return
        self._part.buffer += data[start:end]
        if len(self._part.buffer) > MAX_FIELD_BYTES:
            raise _bad_request(
                f"Form field {self._part.name!r} is longer than {MAX_FIELD_BYTES} bytes."
            )

    def _part_end(self) -> None:
        if self._in_file:
            self._in_file = False
            self.file_done = True
        elif self._part.name:
            self.fields[self._part.name] = self._part.buffer.decode("utf-8", "replace")

    # -- driving -----------------------------------------------------------------------------
    def _feed_once(self) -> bool:
        chunk = self._pull()
        if chunk is None:
            self.body_done = True
            self._parser.finalize()
            return False
        try:
            self._parser.write(chunk)
        except MultipartParseError as exc:
            raise _bad_request(f"Malformed multipart body: {exc}") from exc
        return True

    def feed_until_file(self) -> None:
        while not self.file_started and self._feed_once():
            pass

    def file_chunks(self) -> Iterator[bytes]:
        while True:
            while self._pending:
                yield self._pending.popleft()
            if self.file_done or not self._feed_once():
                while self._pending:
                    yield self._pending.popleft()
                return

    def drain(self) -> None:
        while self._feed_once():
            pass


def _pull_from(stream: AsyncIterator[bytes]) -> Any:
    async def next_chunk() -> bytes | None:
        async for chunk in stream:
            if chunk:
                return chunk
        return None

    def pull() -> bytes | None:
        return anyio.from_thread.run(next_chunk)

    return pull


def _boundary(request: Request) -> bytes:
    content_type, params = parse_options_header(request.headers.get("content-type"))
    if content_type != b"multipart/form-data" or not params.get(b"boundary"):
        raise HTTPException(
            status_code=status.HTTP_415_UNSUPPORTED_MEDIA_TYPE,
            detail="Send the upload as multipart/form-data with a 'file' part and a 'meta' "
            "JSON string.",
        )
    return params[b"boundary"]


def _too_large(max_bytes: int) -> HTTPException:
    return HTTPException(
        status_code=status.HTTP_413_CONTENT_TOO_LARGE,
        detail=f"The upload is larger than the server's limit of {max_bytes} bytes.",
    )


async def receive_upload(
    request: Request, *, store: Any, max_bytes: int, file_field: str = "file"
) -> ReceivedUpload:
    """Stage the ``file_field`` part of a multipart request in ``store``; collect other fields.

    Raises HTTP 415 for a non-multipart body, 413 (nothing kept) when the file passes
    ``max_bytes`` or Content-Length announces that it will, 400 for a malformed or truncated
    body or a missing file part. The caller owns the staged file afterwards (commit or discard).
    """
    boundary = _boundary(request)
    declared = request.headers.get("content-length")
    if declared and declared.isdigit() and int(declared) > max_bytes + MULTIPART_OVERHEAD_BYTES:
        raise _too_large(max_bytes)
    form = _StreamingForm(
        boundary=boundary, file_field=file_field, pull=_pull_from(request.stream())
    )

    def work() -> ReceivedUpload:
        form.feed_until_file()
        if not form.file_started:
            raise _bad_request(f"The upload has no {file_field!r} file part.")
        staged = store.put_stream(form.file_chunks(), max_bytes=max_bytes)
        try:
            if not form.file_done:
                raise _bad_request("The upload ended before the file part was complete.")
            form.drain()
        except BaseException:
            store.discard(staged)
            raise
        return ReceivedUpload(staged=staged, filename=form.filename or "", fields=form.fields)

    return await run_in_threadpool(work)


def multipart_request_body(meta_description: str, meta_example: dict[str, Any]) -> dict[str, Any]:
    """``openapi_extra`` describing the multipart body these routes read by hand."""
    import json

    return {
        "requestBody": {
            "required": True,
            "content": {
                "multipart/form-data": {
                    "schema": {
                        "type": "object",
                        "required": ["file", "meta"],
                        "properties": {
                            "file": {
                                "type": "string",
                                "format": "binary",
                                "description": "The raw file, streamed; its name's extension "
                                "picks the reader.",
                            },
                            "meta": {
                                "type": "string",
                                "description": meta_description,
                                "example": json.dumps(meta_example),
                            },
                        },
                    },
                    "encoding": {"meta": {"contentType": "application/json, text/plain"}},
                }
            },
        }
    }
