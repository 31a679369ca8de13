"""Derived arrays: what a scoring job stores for later views (plot arrays, per-window
measures), so views read them instead of recomputing.

Each entry is one ``.npz`` of named numeric arrays in the artifact store (written with
``np.savez``, read with ``allow_pickle=False``), registered in the ``derived`` table under
(target, recipe hash, kind). Saving again under the same key replaces the entry.
"""

from __future__ import annotations

import io
import zipfile
from collections.abc import Mapping, Sequence

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from storage.artifacts import ArtifactStore
from storage.errors import BadInput, NotFound
from storage.models import TARGET_KINDS, Derived, utcnow
from storage.repo._common import need_text

__all__ = ["list_derived", "load_derived", "load_derived_many", "save_derived"]


def _npz_bytes(arrays: Mapping[str, np.ndarray]) -> bytes:
    clean: dict[str, np.ndarray] = {}
    for name, value in arrays.items():
        if not isinstance(name, str) or not name.isidentifier():
            raise BadInput(f"derived array names must be identifiers, got {name!r}")
        arr = np.asarray(value)
        if arr.dtype.hasobject:
            raise BadInput(f"derived array {name!r} has dtype {arr.dtype}; object arrays need "
                           "pickle and are not stored")  # fmt: skip
        clean[name] = np.ascontiguousarray(arr)
    buf = io.BytesIO()
    np.savez(buf, **clean)  # type: ignore[arg-type]
    return buf.getvalue()


def save_derived(
    *,
    session: Session,
    store: ArtifactStore,
    target_kind: str,
    target_id: int,
    recipe_hash: str,
    kind: str,
    arrays: Mapping[str, np.ndarray],
) -> Derived:
    """Store ``arrays`` (name -> numeric array) as one ``.npz`` and register it.

    Parameters
    ----------
    session, store
        Database session and artifact store.
    target_kind : {"scan", "trial"}
    target_id : int
    recipe_hash : str
        Recipe the arrays were computed under.
    kind : str
        What the arrays are, e.g. ``"terrain_plots"``, ``"movement_plots"``,
        ``"movement_windows"``.
    arrays : mapping of str to array
        Numeric arrays (object dtype is refused: it would need pickle).

    Returns
    -------
    Derived
        The registered row (replaced when the key existed).
    """
    if target_kind not in TARGET_KINDS:
        raise BadInput(f"target_kind must be one of {TARGET_KINDS}, got {target_kind!r}")
    kind = need_text(kind, name="kind", max_len=50)
    sha = store.put_bytes(_npz_bytes(arrays))
    row = session.scalar(
        select(Derived).where(
            Derived.target_kind == target_kind,
            Derived.target_id == target_id,
            Derived.recipe_hash == recipe_hash,
            Derived.kind == kind,
        )
    )
    if row is None:
        row = Derived(
            target_kind=target_kind, target_id=target_id, recipe_hash=recipe_hash, kind=kind
        )
        session.add(row)
    row.sha256, row.created_at = sha, utcnow()
    session.commit()
    session.refresh(row)
    return row


def list_derived(
    *,
    session: Session,
    target_kind: str,
    target_id: int,
    recipe_hash: str | None = None,
) -> list[Derived]:
    """Derived entries of one target (of one recipe when given), by id."""
    stmt = select(Derived).where(Derived.target_kind == target_kind, Derived.target_id == target_id)
    if recipe_hash is not None:
        stmt = stmt.where(Derived.recipe_hash == recipe_hash)
    return list(session.scalars(stmt.order_by(Derived.id)))


def load_derived(
    *,
    session: Session,
    store: ArtifactStore,
    target_kind: str,
    target_id: int,
    recipe_hash: str,
    kind: str,
) -> dict[str, np.ndarray]:
    """The arrays stored under (target, recipe hash, kind); NotFound when none.

    The bytes are checked against their hash and read with ``allow_pickle=False``.
    """
    row = session.scalar(
        select(Derived).where(
            Derived.target_kind == target_kind,
            Derived.target_id == target_id,
            Derived.recipe_hash == recipe_hash,
            Derived.kind == kind,
        )
    )
    if row is None:
        raise NotFound("derived arrays", f"{kind} of {target_kind} {target_id}")
    return _read(store, row)


def _read(store: ArtifactStore, row: Derived) -> dict[str, np.ndarray]:
    data = store.read_bytes(row.sha256, verify=True)
    try:
        with np.load(io.BytesIO(data), allow_pickle=False) as npz:
            return {name: npz[name] for name in npz.files}
    except (ValueError, OSError, zipfile.BadZipFile) as exc:
        what = f"derived arrays {row.kind} of {row.target_kind} {row.target_id}"
        raise BadInput(f"{what} unreadable: {exc}") from None


def load_derived_many(
    *,
    session: Session,
    store: ArtifactStore,
    target_kind: str,
    target_ids: Sequence[int],
    recipe_hash: str,
    kind: str,
) -> dict[int, dict[str, np.ndarray]]:
    """The arrays of ``kind`` stored for each of ``target_ids`` under one recipe, by target
    id, from one query; targets with none stored are absent from the result.

    Each entry is read as :func:`load_derived` reads it (hash checked, no pickle).
    """
    if not target_ids:
        return {}
    rows = session.scalars(
        select(Derived).where(
            Derived.target_kind == target_kind,
            Derived.target_id.in_(list(target_ids)),
            Derived.recipe_hash == recipe_hash,
            Derived.kind == kind,
        )
    )
    return {row.target_id: _read(store, row) for row in rows}
