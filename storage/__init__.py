"""gaitscape storage: database rows, content-addressed artifacts and file readers.

storage/ alone touches the database and the artifact files. It does not import FastAPI.
Sub-modules: ``errors``, ``db``, ``models``, ``artifacts``, ``readers``, ``repo``.
"""

from storage.errors import (
    ArtifactCorrupt,
    BadInput,
    Conflict,
    NotFound,
    ReaderError,
    StorageError,
    StoreFull,
    TooLarge,
)

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
