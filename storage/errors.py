"""Errors raised by storage/.

The service maps each type to one HTTP status in a single handler:
``NotFound`` -> 404, ``Conflict`` -> 409, ``BadInput``/``ReaderError`` -> 400/422,
``TooLarge`` -> 413, ``StoreFull`` -> 507, ``ArtifactCorrupt`` -> 500.
"""

from __future__ import annotations

from typing import Any

__all__ = [
    "ArtifactCorrupt",
    "BadInput",
    "Conflict",
    "NotFound",
    "ReaderError",
    "StorageError",
    "StoreFull",
    "TooLarge",
]


class StorageError(Exception):
    """Base of every error storage/ raises on purpose.

    Every class here survives pickling with its message and attributes: readers run in
    worker processes and their errors travel back to the job runner (the default
    ``BaseException.__reduce__`` would call ``__init__`` with the formatted message alone).
    """

    def __init__(self, message: str) -> None:
        self.message = message
        super().__init__(message)

    def __reduce__(self) -> tuple[Any, ...]:
        # Rebuild without __init__, then restore args (the message) and every attribute.
        return (_rebuild, (type(self), self.args, dict(self.__dict__)))


def _rebuild(cls: type[StorageError], args: tuple[Any, ...], state: dict[str, Any]) -> Any:
    exc = cls.__new__(cls, *args)
    Exception.__init__(exc, *args)
    exc.__dict__.update(state)
    return exc


class NotFound(StorageError):
    """A row asked for by id (or name) does not exist."""

    def __init__(self, kind: str, ident: object) -> None:
        self.kind = kind
        self.ident = ident
        super().__init__(f"{kind} {ident!r} not found")


class Conflict(StorageError):
    """The request clashes with what is stored (a name taken, say)."""


class BadInput(StorageError):
    """Input that cannot be accepted; names the file and the place when known."""

    def __init__(self, message: str, *, file: str | None = None, where: str | None = None) -> None:
        self.file = file
        self.where = where
        self.reason = message
        parts = [p for p in (file, where) if p]
        text = ": ".join([*parts, message])
        super().__init__(text)


class ReaderError(BadInput):
    """A file could not be read or failed validation; nothing was stored."""


class TooLarge(BadInput):
    """An upload went past the size cap."""

    def __init__(self, max_bytes: int, *, file: str | None = None) -> None:
        self.max_bytes = max_bytes
        super().__init__(f"upload exceeds the size limit of {max_bytes} bytes", file=file)


class StoreFull(StorageError):
    """The artifact store ran out of space (ENOSPC or quota)."""


class ArtifactCorrupt(StorageError):
    """Stored bytes no longer hash to their name."""

    def __init__(self, sha256: str) -> None:
        self.sha256 = sha256
        super().__init__(f"artifact {sha256} is corrupt: its content no longer matches its hash")
