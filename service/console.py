"""Helpers shared by the command-line commands: settings from ``--data``, the first-start
admin token, and plain tables.

They live here rather than in ``service.cli`` so that the commands' own modules (backup,
check, demo, upload, the HTTP commands) import them at the top without an import cycle.
"""

from __future__ import annotations

import argparse
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

__all__ = [
    "ADMIN_TOKEN_FILE",
    "ensure_admin_token",
    "format_table",
    "is_empty_dir",
    "settings_from_args",
]

ADMIN_TOKEN_FILE = "admin-token"


def settings_from_args(args: argparse.Namespace, **extra: Any) -> Any:
    """Settings for a command that takes ``--data``: the environment, with the flag on top."""
    from service.settings import get_settings

    overrides = {"data_dir": Path(args.data)} if getattr(args, "data", None) else {}
    return get_settings(**overrides, **extra)


def is_empty_dir(path: Path) -> bool:
    """True for a missing folder or one with nothing in it (a first start)."""
    return not path.exists() or (path.is_dir() and not any(path.iterdir()))


def ensure_admin_token(settings: Any, *, first_start: bool) -> str | None:
    """On a first start (empty data dir), create an admin token and write DATA/admin-token.

    Returns the secret when one was made. The file is created with mode 0600 from the start
    (``os.open`` with the mode), so the secret is never readable by others, even briefly.
    """
    if not first_start:
        return None
    from service.app import open_resources
    from storage import repo

    resources = open_resources(settings)
    try:
        with resources.sessionmaker() as session:
            _, secret = repo.create_token(session=session, scopes=["admin"], label="first start")
    finally:
        resources.engine.dispose()
    path = settings.data_dir / ADMIN_TOKEN_FILE
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "w") as fh:
        fh.write(secret + "\n")
    return secret


def format_table(rows: Sequence[Sequence[str]]) -> str:
    """Plain aligned columns; the first row is the header."""
    widths = [max(len(str(r[i])) for r in rows) for i in range(len(rows[0]))]
    lines = [
        "  ".join(str(c).ljust(w) for c, w in zip(r, widths, strict=True)).rstrip() for r in rows
    ]
    return "\n".join(lines)
