"""Helpers shared by the repository modules."""

from __future__ import annotations

import re
from typing import Any, TypeVar

from sqlalchemy import Select, func, select
from sqlalchemy.orm import Session

from storage.errors import BadInput, NotFound
from storage.models import Base

T = TypeVar("T", bound=Base)

MAX_LIMIT = 1000


def paginate(
    session: Session, stmt: Select[Any], *, offset: int, limit: int
) -> tuple[list[Any], int]:
    """Rows ``offset .. offset+limit`` of ``stmt`` and the total count it matches."""
    if not isinstance(offset, int) or offset < 0:
        raise BadInput(f"offset must be an integer >= 0, got {offset!r}")
    if not isinstance(limit, int) or not 1 <= limit <= MAX_LIMIT:
        raise BadInput(f"limit must be an integer in 1..{MAX_LIMIT}, got {limit!r}")
    count = session.scalar(select(func.count()).select_from(stmt.order_by(None).subquery()))
    rows = list(session.scalars(stmt.offset(offset).limit(limit)))
    return rows, int(count or 0)


def get_or_404(session: Session, model: type[T], ident: int, kind: str) -> T:
    """The row with primary key ``ident`` or NotFound."""
    if isinstance(ident, int) and not -(2**63) <= ident < 2**63:
        raise NotFound(kind, ident)  # no 64-bit key is that large (SQLite would overflow)
    row = session.get(model, ident)
    if row is None:
        raise NotFound(kind, ident)
    return row


_CONTROL = re.compile(r"[\x00-\x1f\x7f]")


def need_text(value: object, *, name: str, max_len: int = 200) -> str:
    """A non-empty stripped string without control characters, or BadInput naming the field."""
    if not isinstance(value, str) or not value.strip():
        raise BadInput(f"{name} must be a non-empty string, got {value!r}")
    text = value.strip()
    bad = _CONTROL.search(text)
    if bad:
        raise BadInput(
            f"{name} contains a control character (U+{ord(bad.group()):04X}) at position "
            f"{bad.start()}"
        )
    if len(text) > max_len:
        raise BadInput(f"{name} is longer than {max_len} characters")
    return text


_CONTROL_FREE = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")


def free_text(value: object, *, name: str, max_len: int = 10_000) -> str:
    """Optional free text (notes): tabs and newlines allowed, NUL and other controls not."""
    if value is None:
        return ""
    if not isinstance(value, str):
        raise BadInput(f"{name} must be a string, got {value!r}")
    bad = _CONTROL_FREE.search(value)
    if bad:
        raise BadInput(
            f"{name} contains a control character (U+{ord(bad.group()):04X}) at position "
            f"{bad.start()}"
        )
    if len(value) > max_len:
        raise BadInput(f"{name} is longer than {max_len} characters")
    return value


def optional_positive(value: object, *, name: str) -> float | None:
    """None, or a finite float > 0."""
    if value is None:
        return None
    try:
        out = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise BadInput(f"{name} must be a number, got {value!r}") from None
    if not out > 0 or out == float("inf"):
        raise BadInput(f"{name} must be a finite number > 0, got {value!r}")
    return out
