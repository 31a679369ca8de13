"""The ``gaitscape`` command line.

Each subcommand is one small ``register_*`` function that adds its parser and sets
``func``; ``COMMANDS`` lists them, so a new subcommand is one function and one line.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from service.console import (
    ADMIN_TOKEN_FILE,
    ensure_admin_token,
    format_table,
    is_empty_dir,
    settings_from_args,
)
from storage.models import TOKEN_SCOPES

__all__ = ["COMMANDS", "build_parser", "ensure_admin_token", "format_table", "main"]

SCOPES = TOKEN_SCOPES


# -- serve ----------------------------------------------------------------------------------
def _serve(args: argparse.Namespace) -> int:
    import uvicorn

    from service.app import create_app

    overrides: dict[str, Any] = {}
    if args.host is not None:
        overrides["host"] = args.host
    if args.port is not None:
        overrides["port"] = args.port
    settings = settings_from_args(args, **overrides)
    first_start = is_empty_dir(settings.data_dir)
    app = create_app(settings)
    secret = ensure_admin_token(settings, first_start=first_start)
    token_file = settings.data_dir / ADMIN_TOKEN_FILE
    if secret is not None:
        print(f"Created an admin token (shown once; also in {token_file}):")
        print(secret, flush=True)
    elif token_file.is_file():
        print(f"Admin token: in {token_file} (readable by this user only)", flush=True)
    else:
        print(
            f"No admin token file in {settings.data_dir}; make one with "
            f"`gaitscape token create --data {settings.data_dir} --scope admin`",
            flush=True,
        )
    where = f"http://{settings.host}:{settings.port}"
    print(f"Dashboard: {where}/ui  API docs: {where}/docs", flush=True)
    # access_log=False: the JSON access log (service/security.py) is the only one, and it
    # never records query strings. proxy_headers=False: forwarded addresses are believed only
    # from GAITSCAPE_TRUSTED_PROXIES (service/deps.py), never from whoever connects locally.
    # timeout_graceful_shutdown bounds how long SIGTERM waits for open requests before the
    # lifespan stops the job runner and its workers.
    uvicorn.run(
        app,
        host=settings.host,
        port=settings.port,
        log_level=settings.log_level,
        access_log=False,
        proxy_headers=False,
        timeout_graceful_shutdown=10,
    )
    return 0


def register_serve(sub: Any) -> None:
    p = sub.add_parser("serve", help="run the HTTP API")
    p.add_argument("--data", help="data directory (env GAITSCAPE_DATA_DIR)")
    p.add_argument("--host", help="interface to listen on (default 127.0.0.1)")
    p.add_argument("--port", type=int, help="TCP port (default 8000)")
    p.set_defaults(func=_serve)


# -- token ----------------------------------------------------------------------------------
def _with_session(args: argparse.Namespace, work: Callable[[Any], int]) -> int:
    from service.app import open_resources

    resources = open_resources(settings_from_args(args))
    try:
        with resources.sessionmaker() as session:
            return work(session)
    finally:
        resources.engine.dispose()


def _positive_days(value: str) -> float:
    days = float(value)
    if not days > 0 or days != days or days == float("inf"):
        raise argparse.ArgumentTypeError(f"must be a positive number of days, got {value!r}")
    return days


def _parse_scopes(values: list[str]) -> list[str]:
    scopes = [s for value in values for s in value.replace(",", " ").split()]
    unknown = sorted(set(scopes) - set(SCOPES))
    if unknown or not scopes:
        raise SystemExit(f"gaitscape token: scopes must be among {', '.join(SCOPES)}; got {values}")
    return list(dict.fromkeys(scopes))


def _token_create(args: argparse.Namespace) -> int:
    from storage import repo

    scopes = _parse_scopes(args.scope)

    def work(session: Any) -> int:
        expires_at = None
        if args.expires_days is not None:  # hardening: tokens that lapse by themselves
            from datetime import UTC, datetime, timedelta

            expires_at = datetime.now(UTC) + timedelta(days=args.expires_days)
        _, secret = repo.create_token(
            session=session, scopes=scopes, label=args.label, expires_at=expires_at
        )
        print(secret)
        return 0

    return _with_session(args, work)


def _token_list(args: argparse.Namespace) -> int:
    from storage import repo

    def work(session: Any) -> int:
        rows = [("id", "label", "scopes", "created", "expires", "revoked", "state")]
        tokens, _ = repo.list_tokens(session=session, include_revoked=True, limit=1000)

        def when(value: Any) -> str:
            return value.isoformat(timespec="seconds") if value else ""

        for t in tokens:
            state = "revoked" if t.revoked_at else ("active" if t.active else "expired")
            expires = when(t.expires_at) or "never"
            row = (str(t.id), t.label, t.scopes, when(t.created_at), expires,
                   when(t.revoked_at), state)  # fmt: skip
            rows.append(row)
        print(format_table(rows))
        return 0

    return _with_session(args, work)


def _token_revoke(args: argparse.Namespace) -> int:
    from storage import repo
    from storage.errors import NotFound

    def work(session: Any) -> int:
        try:
            repo.revoke_token(session=session, token_id=args.token_id)
        except NotFound as exc:
            print(f"gaitscape token revoke: {exc}", file=sys.stderr)
            return 1
        print(f"revoked token {args.token_id}")
        return 0

    return _with_session(args, work)


def register_token(sub: Any) -> None:
    p = sub.add_parser("token", help="create, list or revoke API tokens")
    tsub = p.add_subparsers(dest="token_command", required=True)
    create = tsub.add_parser("create", help="create a token and print it (only it, one line)")
    create.add_argument("--data", required=True, help="data directory")
    create.add_argument(
        "--scope",
        action="append",
        required=True,
        help=f"scope to grant ({', '.join(SCOPES)}); repeat or comma-separate for several",
    )
    create.add_argument("--label", default="", help="a note saying who or what uses it")
    create.add_argument(
        "--expires-days",
        type=_positive_days,
        help="the token stops working this many days from now (default: never)",
    )
    create.set_defaults(func=_token_create)
    lst = tsub.add_parser("list", help="list tokens (never their secrets)")
    lst.add_argument("--data", required=True, help="data directory")
    lst.set_defaults(func=_token_list)
    rev = tsub.add_parser("revoke", help="revoke a token by id")
    rev.add_argument("token_id", type=int)
    rev.add_argument("--data", required=True, help="data directory")
    rev.set_defaults(func=_token_revoke)


# -- upload ---------------------------------------------------------------------------------
def _upload(args: argparse.Namespace) -> int:
    from service.uploader import run_upload

    if not args.token:
        print("gaitscape upload: give --token or set GAITSCAPE_TOKEN", file=sys.stderr)
        return 2
    if not args.server:
        print("gaitscape upload: give --server or set GAITSCAPE_SERVER", file=sys.stderr)
        return 2
    return run_upload(
        [Path(p) for p in args.paths],
        server=args.server,
        token=args.token,
        arena=args.arena,
        subject=args.subject,
        study=args.study,
        retries=args.retries,
        progress=not args.no_progress,
    )


def register_upload(sub: Any) -> None:
    p = sub.add_parser(
        "upload",
        help="push scan and trial files to a server (skips what it has)",
        description="Walks the given files and folders; see service/uploader.py for how the "
        "kind of each file and its metadata are decided.",
    )
    p.add_argument("paths", nargs="+", metavar="PATH", help="files or folders")
    p.add_argument(
        "--server",
        default=os.environ.get("GAITSCAPE_SERVER"),
        help="server URL, e.g. http://lab-server:8000 (default: env GAITSCAPE_SERVER)",
    )
    p.add_argument(
        "--token",
        default=os.environ.get("GAITSCAPE_TOKEN"),
        help="API token with the upload scope (default: env GAITSCAPE_TOKEN)",
    )
    p.add_argument("--arena", type=int, help="arena id for files whose metadata names none")
    p.add_argument("--subject", type=int, help="subject id for trials whose metadata names none")
    p.add_argument(
        "--study", help="study name for the uploads (trials join it; scans add their arena)"
    )
    p.add_argument(
        "--retries",
        type=int,
        default=4,
        help="retries per file on connection errors and 5xx (default 4, exponential backoff)",
    )
    p.add_argument("--no-progress", action="store_true", help="no progress bars")
    p.set_defaults(func=_upload)


# -- demo -------------------------------------------------------------------------------------
def _demo(args: argparse.Namespace) -> int:
    from service.demo import run_demo

    result = run_demo(
        Path(args.out), quick=args.quick, progress=not args.no_progress, timeout_s=args.timeout
    )
    return 1 if result.failed_uploads or result.failed_jobs else 0


def register_demo(sub: Any) -> None:
    p = sub.add_parser(
        "demo",
        help="build, score and report an invented demo study",
        description="Generates an invented study (arenas, a synthetic quadruped), serves it "
        "in-process, uploads and scores it, prints the correspondence and writes "
        "DIR/report.html. DIR is left as a normal store for `gaitscape serve --data DIR`.",
    )
    p.add_argument("--out", default="demo-out", help="output directory (default ./demo-out)")
    p.add_argument("--quick", action="store_true", help="smaller study (about a minute)")
    p.add_argument("--no-progress", action="store_true", help="no progress bars or lines")
    p.add_argument(
        "--timeout",
        type=float,
        help="give up if scoring takes longer than this many seconds (default: no deadline)",
    )
    p.set_defaults(func=_demo)


def _hardening_commands() -> list[Callable[[Any], None]]:
    # check, backup and restore live in their own modules (service/check.py, service/backup.py).
    from service.backup import register_backup, register_restore
    from service.check import register_check

    return [register_check, register_backup, register_restore]


def _http_commands() -> list[Callable[[Any], None]]:
    # Set-up over HTTP (arena, subject, study, recipe, rescore, report): service/cli_http.py.
    from service.cli_http import HTTP_COMMANDS

    return list(HTTP_COMMANDS)


COMMANDS: list[Callable[[Any], None]] = [
    register_serve,
    register_token,
    register_upload,
    register_demo,
    *_http_commands(),
    *_hardening_commands(),
]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="gaitscape",
        description="Score terrain and movement complexity and their correspondence.",
    )
    from service import __version__

    parser.add_argument("--version", action="version", version=f"gaitscape {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for register in COMMANDS:
        register(sub)
    return parser


def quiet_third_party() -> None:
    """No third-party warnings on a normal run.

    numba tries its TBB threading layer first and warns when the TBB library is missing or
    old; OpenMP (shipped with numba's wheels) goes first instead, and a leftover TBB notice
    is filtered. Our own warnings are untouched.
    """
    import warnings

    os.environ.setdefault("NUMBA_THREADING_LAYER_PRIORITY", "omp tbb workqueue")
    warnings.filterwarnings("ignore", message=r".*TBB.*", module=r"numba(\..*)?")
    warnings.filterwarnings("ignore", message=r".*(TBB|tbb).*")


def main(argv: Sequence[str] | None = None) -> int:
    """Console entry point ``gaitscape``."""
    quiet_third_party()
    args = build_parser().parse_args(argv)
    return int(args.func(args) or 0)


if __name__ == "__main__":
    sys.exit(main())
