"""Content-addressed artifact store.

Objects are named by the sha256 of their bytes and sharded two levels deep
(``root/ab/cd/abcd...``). Uploads are staged in ``root/tmp/`` (same file system, so the
final rename is atomic), hashed while written, capped in size, fsynced, then linked into
place. An existing object is never overwritten: the same name means the same bytes.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import io
import os
import re
import shutil
import tempfile
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from types import TracebackType
from typing import BinaryIO

import numpy as np

from storage.errors import ArtifactCorrupt, BadInput, NotFound, StoreFull, TooLarge

__all__ = ["ArtifactStore", "StagedFile", "Stager", "npy_bytes", "sha256_file"]

_SHA_RE = re.compile(r"^[0-9a-f]{64}$")
_CHUNK = 1 << 20


def sha256_file(path: str | Path) -> str:
    """The hex sha256 of a file's bytes, read in 1 MiB chunks (the one file hash we use).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     f = pathlib.Path(d) / "x"
    ...     _ = f.write_bytes(b"abc")
    ...     sha256_file(f)[:16]  # FIPS 180-2 example "abc"
    'ba7816bf8f01cfea'
    """
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(_CHUNK), b""):
            digest.update(chunk)
    return digest.hexdigest()


_FULL_ERRNOS = {errno.ENOSPC, errno.EDQUOT}


@dataclass(frozen=True)
class StagedFile:
    """A finished upload in the staging area, not yet committed."""

    path: Path
    sha256: str
    size: int


def _check_sha(sha256: str) -> str:
    if not isinstance(sha256, str) or not _SHA_RE.match(sha256):
        raise BadInput(f"not a sha256 hex digest: {sha256!r}")
    return sha256


def _fsync_dir(path: Path) -> None:
    # Directory fsync makes the new name durable; not every platform allows it.
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


class Stager:
    """Writes one upload chunk by chunk into the staging area.

    For callers that receive chunks one at a time (an async upload handler):
    ``write`` each chunk, then ``finish``; ``abort`` (or leaving the ``with`` block with
    an exception) removes the partial file.
    """

    def __init__(self, tmp_dir: Path, *, max_bytes: int | None, filename: str | None) -> None:
        self._max_bytes = max_bytes
        self._filename = filename
        self._hash = hashlib.sha256()
        self._size = 0
        fd, name = tempfile.mkstemp(dir=tmp_dir, prefix="stage-", suffix=".part")
        self._path = Path(name)
        self._file: BinaryIO | None = os.fdopen(fd, "wb")

    def write(self, chunk: bytes) -> None:
        """Append ``chunk``; raises ``TooLarge`` past the cap, ``StoreFull`` on ENOSPC."""
        if self._file is None:
            raise RuntimeError("stager already finished or aborted")
        self._size += len(chunk)
        if self._max_bytes is not None and self._size > self._max_bytes:
            self.abort()
            raise TooLarge(self._max_bytes, file=self._filename)
        self._hash.update(chunk)
        try:
            self._file.write(chunk)
        except OSError as exc:
            self.abort()
            _raise_if_full(exc)
            raise

    def finish(self) -> StagedFile:
        """Flush and fsync the staged file and return its name and size."""
        if self._file is None:
            raise RuntimeError("stager already finished or aborted")
        try:
            self._file.flush()
            os.fsync(self._file.fileno())
            self._file.close()
        except OSError as exc:
            self.abort()
            _raise_if_full(exc)
            raise
        self._file = None
        return StagedFile(self._path, self._hash.hexdigest(), self._size)

    def abort(self) -> None:
        """Drop the partial file (idempotent)."""
        if self._file is not None:
            with contextlib.suppress(OSError):
                self._file.close()
            self._file = None
        self._path.unlink(missing_ok=True)

    def __enter__(self) -> Stager:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc_type is not None:
            self.abort()


def npy_bytes(array: np.ndarray) -> bytes:
    """An array as .npy bytes, never pickled (object dtype -> BadInput)."""
    arr = np.asarray(array)
    if arr.dtype.hasobject:
        raise BadInput(f"cannot store dtype {arr.dtype}: object arrays need pickle")
    buf = io.BytesIO()
    np.save(buf, np.ascontiguousarray(arr), allow_pickle=False)
    return buf.getvalue()


def _raise_if_full(exc: OSError) -> None:
    if exc.errno in _FULL_ERRNOS:
        raise StoreFull(f"artifact store is full: {exc.strerror}") from exc


class ArtifactStore:
    """Content-addressed files under ``root``."""

    def __init__(self, root: str | Path) -> None:
        self.root = Path(root).expanduser().resolve()
        self.tmp_dir = self.root / "tmp"
        self.tmp_dir.mkdir(parents=True, exist_ok=True)

    def __repr__(self) -> str:
        return f"ArtifactStore({str(self.root)!r})"

    # -- names ---------------------------------------------------------------
    def path(self, sha256: str) -> Path:
        """Where the object named ``sha256`` lives (whether or not it exists)."""
        sha = _check_sha(sha256)
        return self.root / sha[:2] / sha[2:4] / sha

    def exists(self, sha256: str) -> bool:
        """Whether an object with this name is stored."""
        return self.path(sha256).is_file()

    def size(self, sha256: str) -> int:
        """Size of a stored object in bytes."""
        return self.path(sha256).stat().st_size

    def iter_shas(self) -> Iterator[str]:
        """Names of every stored object."""
        for first in sorted(self.root.iterdir()):
            if len(first.name) != 2 or not first.is_dir():
                continue
            for second in sorted(first.iterdir()):
                for obj in sorted(second.iterdir()):
                    if _SHA_RE.match(obj.name):
                        yield obj.name

    # -- staging -------------------------------------------------------------
    def stage(self, *, max_bytes: int | None = None, filename: str | None = None) -> Stager:
        """A writer for one upload (see ``Stager``)."""
        try:
            return Stager(self.tmp_dir, max_bytes=max_bytes, filename=filename)
        except OSError as exc:
            _raise_if_full(exc)
            raise

    def put_stream(
        self,
        chunks: Iterable[bytes],
        *,
        max_bytes: int | None = None,
        filename: str | None = None,
    ) -> StagedFile:
        """Stream ``chunks`` to a staged file, hashing as it goes."""
        with self.stage(max_bytes=max_bytes, filename=filename) as stager:
            for chunk in chunks:
                stager.write(chunk)
            return stager.finish()

    def put_file(self, path: str | Path, *, max_bytes: int | None = None) -> StagedFile:
        """Copy a local file into the staging area."""
        with open(path, "rb") as fh:
            return self.put_stream(
                iter(lambda: fh.read(_CHUNK), b""), max_bytes=max_bytes, filename=str(path)
            )

    def discard(self, staged: StagedFile) -> None:
        """Remove a staged file that will not be committed (idempotent)."""
        staged.path.unlink(missing_ok=True)

    def commit(self, staged: StagedFile) -> str:
        """Move a staged file into place under its hash; never overwrite.

        If an object of that name exists already the staged copy is dropped: equal names
        mean equal bytes. The link is atomic, so readers never see a half-written object.
        """
        dest = self.path(staged.sha256)
        try:
            dest.parent.mkdir(parents=True, exist_ok=True)
            if dest.exists():
                self.discard(staged)
                return staged.sha256
            try:
                # link() fails if dest exists, which makes "never overwrite" race-free.
                os.link(staged.path, dest)
            except FileExistsError:
                pass
            except OSError as exc:
                if exc.errno in _FULL_ERRNOS:
                    raise
                # File systems without hard links: rename, after the existence check above.
                os.replace(staged.path, dest)
            os.chmod(dest, 0o444)
            _fsync_dir(dest.parent)
        except OSError as exc:
            self.discard(staged)
            _raise_if_full(exc)
            raise
        self.discard(staged)
        return staged.sha256

    def put_bytes(self, data: bytes) -> str:
        """Store ``data`` and return its name."""
        return self.commit(self.put_stream([data]))

    # -- reading -------------------------------------------------------------
    def open(self, sha256: str) -> BinaryIO:
        """Open a stored object for reading (no hash check; see ``verify``)."""
        try:
            return open(self.path(sha256), "rb")
        except FileNotFoundError:
            raise NotFound("artifact", sha256) from None

    def read_bytes(self, sha256: str, *, verify: bool = True) -> bytes:
        """The bytes of a stored object, checked against their name by default."""
        with self.open(sha256) as fh:
            data = fh.read()
        if verify and hashlib.sha256(data).hexdigest() != sha256:
            raise ArtifactCorrupt(sha256)
        return data

    def verify(self, sha256: str) -> bool:
        """Whether the stored bytes still hash to their name."""
        try:
            return sha256_file(self.path(sha256)) == sha256
        except FileNotFoundError:
            raise NotFound("artifact", sha256) from None

    def remove(self, sha256: str) -> bool:
        """Delete an object; True if it existed. Callers check no row refers to it."""
        path = self.path(sha256)
        try:
            path.unlink()
        except FileNotFoundError:
            return False
        return True

    # -- arrays --------------------------------------------------------------
    def put_array(self, array: np.ndarray) -> str:
        """Store an array as .npy (never pickled) and return its name."""
        arr = np.asarray(array)
        if arr.dtype.hasobject:
            raise BadInput(
                f"cannot store an array of dtype {arr.dtype} (object arrays need pickle)"
            )
        buf = io.BytesIO()
        np.save(buf, np.ascontiguousarray(arr), allow_pickle=False)
        return self.put_bytes(buf.getvalue())

    def get_array(self, sha256: str) -> np.ndarray:
        """Load an array stored by ``put_array`` after checking its hash."""
        data = self.read_bytes(sha256, verify=True)
        out: np.ndarray = np.load(io.BytesIO(data), allow_pickle=False)
        return out

    def clear_staging(self) -> int:
        """Remove leftover staged files (after a crash); returns how many."""
        n = 0
        for p in self.tmp_dir.iterdir():
            if p.is_file():
                p.unlink(missing_ok=True)
                n += 1
            elif p.is_dir():
                shutil.rmtree(p, ignore_errors=True)
        return n
