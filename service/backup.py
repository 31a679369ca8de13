"""``gaitscape backup`` / ``gaitscape restore``: the SQLite database and the artifact store.

A backup is one tar file (or, when ``--out`` names a directory, the same members unpacked):

* ``manifest.json`` — format version, gaitscape version, creation time, the database file's
  sha256 and size, and every artifact's sha256 and size;
* ``gaitscape.sqlite`` — a consistent snapshot taken with SQLite's online backup API
  (``sqlite3.Connection.backup``), so a server may keep writing while it runs;
* ``artifacts/ab/cd/<sha256>`` — every object of the store, verified while copied.

The database is snapshotted first, then the store copied: objects are immutable and a row is
committed only after its object, so every object the snapshot names is already in the store.
Objects added meanwhile come along as harmless orphans (``gaitscape check --repair`` drops them).

Restore wants an empty (or absent) data directory, checks every member against the manifest
before anything is written, refuses tar members that would land outside it, and leaves a
normal store behind. PostgreSQL databases are backed up with ``pg_dump`` (see README,
SECURITY and operations); ``backup`` refuses them rather than half-doing the job.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sqlite3
import sys
import tarfile
import tempfile
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from service.settings import Settings
    from storage.artifacts import ArtifactStore

from service.console import settings_from_args
from storage.artifacts import sha256_file

__all__ = [
    "BACKUP_FORMAT",
    "BackupError",
    "backup_store",
    "register_backup",
    "register_restore",
    "restore_store",
]

BACKUP_FORMAT = 1
MANIFEST = "manifest.json"
DB_MEMBER = "gaitscape.sqlite"


class BackupError(Exception):
    """A backup or restore that cannot go ahead; the message says why."""


def _sqlite_path(settings: Settings) -> Path:
    from sqlalchemy.engine import make_url

    url = make_url(settings.resolved_database_url)
    if url.get_backend_name() != "sqlite" or not url.database or url.database == ":memory:":
        raise BackupError(
            f"backup handles the embedded SQLite database only; this server uses "
            f"{url.get_backend_name()}: back it up with pg_dump (see README, operations) and "
            "the artifact store with this command's --artifacts-only"
        )
    return Path(url.database)


def _snapshot_sqlite(source: Path, dest: Path) -> None:
    """Copy ``source`` to ``dest`` with the online backup API (a consistent snapshot)."""
    src = sqlite3.connect(f"file:{source}?mode=ro", uri=True, timeout=30)
    try:
        dst = sqlite3.connect(dest)
        try:
            with dst:
                src.backup(dst, pages=1024)
            # The copy inherits WAL mode; a self-contained file is easier to move around.
            dst.execute("PRAGMA journal_mode=DELETE")
        finally:
            dst.close()
    finally:
        src.close()


def backup_store(
    *, settings: Settings, out: str | Path, artifacts_only: bool = False
) -> dict[str, Any]:
    """Write a backup of the store named by ``settings`` to ``out``; returns the manifest.

    ``out`` ending in ``.tar``/``.tar.gz``/``.tgz`` (or not existing and not ending in a
    slash) is a tar file; an existing directory receives the unpacked layout. The tar is
    written beside its final name and renamed into place, so a failed backup leaves no file.
    """
    from service import __version__
    from storage.artifacts import ArtifactStore

    out = Path(out)
    store = ArtifactStore(settings.artifacts_dir)
    with tempfile.TemporaryDirectory(prefix="gaitscape-backup-") as tmp_name:
        tmp = Path(tmp_name)
        manifest: dict[str, Any] = {
            "format": BACKUP_FORMAT,
            "gaitscape_version": __version__,
            "created_at": datetime.now(UTC).isoformat(timespec="seconds"),
            "database": None,
            "artifacts": {},
        }
        if not artifacts_only:
            db_path = _sqlite_path(settings)
            if not db_path.is_file():
                raise BackupError(f"no database at {db_path}")
            _snapshot_sqlite(db_path, tmp / DB_MEMBER)
            manifest["database"] = {
                "file": DB_MEMBER,
                "sha256": sha256_file(tmp / DB_MEMBER),
                "size": (tmp / DB_MEMBER).stat().st_size,
            }
        for sha in store.iter_shas():
            if not store.verify(sha):
                raise BackupError(f"artifact {sha} is corrupt; run `gaitscape check` first")
            manifest["artifacts"][sha] = store.size(sha)
        (tmp / MANIFEST).write_text(json.dumps(manifest, indent=1, sort_keys=True))
        if out.is_dir():
            _write_directory(tmp, store, manifest, out)
        else:
            _write_tar(tmp, store, manifest, out)
    return manifest


def _member(sha: str) -> str:
    return f"artifacts/{sha[:2]}/{sha[2:4]}/{sha}"


def _write_tar(tmp: Path, store: ArtifactStore, manifest: dict[str, Any], out: Path) -> None:
    mode = "w:gz" if out.name.endswith((".gz", ".tgz")) else "w"
    out.parent.mkdir(parents=True, exist_ok=True)
    partial = out.with_name(out.name + ".partial")
    try:
        with tarfile.open(partial, mode) as tar:  # type: ignore[call-overload]
            tar.add(tmp / MANIFEST, arcname=MANIFEST)
            if manifest["database"]:
                tar.add(tmp / DB_MEMBER, arcname=DB_MEMBER)
            for sha in manifest["artifacts"]:
                tar.add(store.path(sha), arcname=_member(sha))
        os.replace(partial, out)
    except BaseException:
        partial.unlink(missing_ok=True)
        raise


def _write_directory(tmp: Path, store: ArtifactStore, manifest: dict[str, Any], out: Path) -> None:
    if any(out.iterdir()):
        raise BackupError(f"{out} is not empty; give an empty directory or a .tar file name")
    if manifest["database"]:
        shutil.copy2(tmp / DB_MEMBER, out / DB_MEMBER)
    for sha in manifest["artifacts"]:
        dest = out / _member(sha)
        dest.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(store.path(sha), dest)
    shutil.copy2(tmp / MANIFEST, out / MANIFEST)  # last: a directory with it is complete


def _unpack(source: Path, into: Path) -> Path:
    """The backup's members as a directory (a tar is extracted into ``into`` safely)."""
    if source.is_dir():
        return source
    if not source.is_file():
        raise BackupError(f"no backup at {source}")
    try:
        with tarfile.open(source) as tar:
            # The "data" filter refuses absolute names, "..", links out of the tree and
            # device files: a tampered backup cannot write outside ``into``.
            tar.extractall(into, filter="data")
    except (tarfile.TarError, OSError) as exc:
        raise BackupError(f"cannot read backup {source}: {exc}") from exc
    return into


def _check_members(root: Path) -> dict[str, Any]:
    try:
        manifest: dict[str, Any] = json.loads((root / MANIFEST).read_text())
    except (OSError, ValueError) as exc:
        raise BackupError(f"backup has no readable {MANIFEST}: {exc}") from exc
    if manifest.get("format") != BACKUP_FORMAT:
        raise BackupError(f"unknown backup format {manifest.get('format')!r}")
    db = manifest.get("database")
    if db:
        path = root / DB_MEMBER
        if not path.is_file() or sha256_file(path) != db["sha256"]:
            raise BackupError("the database in the backup does not match its manifest")
    for sha in manifest.get("artifacts", {}):
        path = root / _member(sha)
        if not path.is_file() or sha256_file(path) != sha:
            raise BackupError(f"artifact {sha} in the backup is missing or damaged")
    return manifest


def restore_store(*, settings: Settings, source: str | Path) -> dict[str, Any]:
    """Restore a backup into the (empty or absent) data directory of ``settings``.

    Everything is verified before the first byte is written to the data directory.
    Returns the manifest.
    """
    from storage.artifacts import ArtifactStore

    data_dir = Path(settings.data_dir)
    if data_dir.exists() and any(data_dir.iterdir()):
        raise BackupError(f"{data_dir} is not empty; restore only into an empty directory")
    with tempfile.TemporaryDirectory(prefix="gaitscape-restore-") as tmp_name:
        root = _unpack(Path(source), Path(tmp_name))
        manifest = _check_members(root)
        if manifest.get("database"):
            target = _sqlite_path(settings)
            target.parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(root / DB_MEMBER, target)
        store = ArtifactStore(settings.artifacts_dir)
        for sha in manifest.get("artifacts", {}):
            store.commit(store.put_file(root / _member(sha)))
    return manifest


# -- command line -----------------------------------------------------------------------------
def _backup(args: argparse.Namespace) -> int:

    try:
        manifest = backup_store(
            settings=settings_from_args(args), out=args.out, artifacts_only=args.artifacts_only
        )
    except BackupError as exc:
        print(f"gaitscape backup: {exc}", file=sys.stderr)
        return 1
    db = "artifacts only" if not manifest["database"] else "database and"
    print(f"wrote {args.out}: {db} {len(manifest['artifacts'])} artifacts")
    return 0


def _restore(args: argparse.Namespace) -> int:

    try:
        manifest = restore_store(settings=settings_from_args(args), source=args.source)
    except BackupError as exc:
        print(f"gaitscape restore: {exc}", file=sys.stderr)
        return 1
    print(f"restored {len(manifest['artifacts'])} artifacts into {args.data}")
    return 0


def register_backup(sub: Any) -> None:
    p = sub.add_parser("backup", help="snapshot the database and artifact store into a tar")
    p.add_argument("--data", required=True, help="data directory")
    p.add_argument("--out", required=True, help="backup file (.tar, .tar.gz) or empty directory")
    p.add_argument(
        "--artifacts-only",
        action="store_true",
        help="skip the database (PostgreSQL: dump it with pg_dump instead)",
    )
    p.set_defaults(func=_backup)


def register_restore(sub: Any) -> None:
    p = sub.add_parser("restore", help="restore a backup into an empty data directory")
    p.add_argument("--data", required=True, help="data directory to create (must be empty)")
    p.add_argument("--from", dest="source", required=True, help="backup file or directory")
    p.set_defaults(func=_restore)
