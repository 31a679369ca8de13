"""The gaitscape command line: token commands, first-start admin token, demo placeholder."""

from __future__ import annotations

import stat
from pathlib import Path

import pytest

from service import cli
from service.app import open_resources
from service.settings import get_settings
from storage import repo


def _authenticate(data: Path, secret: str):
    resources = open_resources(get_settings(data_dir=data))
    try:
        with resources.sessionmaker() as session:
            return repo.authenticate(session=session, secret=secret)
    finally:
        resources.engine.dispose()


def test_token_create_prints_only_the_token(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert (
        cli.main(["token", "create", "--data", str(tmp_path), "--scope", "read", "--label", "pc"])
        == 0
    )
    out = capsys.readouterr().out
    lines = out.splitlines()
    assert len(lines) == 1 and lines[0] == lines[0].strip() and len(lines[0]) >= 20
    token = _authenticate(tmp_path, lines[0])
    assert token is not None
    assert token.label == "pc"
    assert "read" in token.scopes and "admin" not in token.scopes


def test_token_create_several_scopes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    cli.main(
        ["token", "create", "--data", str(tmp_path), "--scope", "read,upload", "--scope", "analyse"]
    )
    token = _authenticate(tmp_path, capsys.readouterr().out.strip())
    assert set(token.scopes.replace(",", " ").split()) == {"read", "upload", "analyse"}


def test_token_create_refuses_unknown_scope(tmp_path: Path) -> None:
    with pytest.raises(SystemExit, match="scopes must be among"):
        cli.main(["token", "create", "--data", str(tmp_path), "--scope", "superuser"])


def test_token_list_and_revoke(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    cli.main(["token", "create", "--data", str(tmp_path), "--scope", "upload", "--label", "rig-7"])
    secret = capsys.readouterr().out.strip()
    assert cli.main(["token", "list", "--data", str(tmp_path)]) == 0
    listing = capsys.readouterr().out
    assert "rig-7" in listing and "upload" in listing
    assert secret not in listing  # secrets are never shown after creation
    token_id = _authenticate(tmp_path, secret).id
    assert cli.main(["token", "revoke", str(token_id), "--data", str(tmp_path)]) == 0
    assert _authenticate(tmp_path, secret) is None
    assert cli.main(["token", "revoke", "9999", "--data", str(tmp_path)]) == 1


def test_serve_first_start_writes_admin_token(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    import uvicorn

    calls = []
    monkeypatch.setattr(uvicorn, "run", lambda app, **kw: calls.append(kw))
    data = tmp_path / "fresh"
    assert cli.main(["serve", "--data", str(data), "--port", "8123"]) == 0
    assert [{k: kw[k] for k in ("host", "port", "log_level")} for kw in calls] == [
        {"host": "127.0.0.1", "port": 8123, "log_level": "info"}
    ]
    # One access log (ours, without query strings); forwarded headers only from our setting.
    assert calls[0]["access_log"] is False and calls[0]["proxy_headers"] is False
    token_file = data / cli.ADMIN_TOKEN_FILE
    assert stat.S_IMODE(token_file.stat().st_mode) == 0o600
    secret = token_file.read_text().strip()
    assert secret in capsys.readouterr().out  # printed once, on first start
    assert "admin" in _authenticate(data, secret).scopes
    # A second start finds a non-empty directory: no new token, nothing printed.
    cli.main(["serve", "--data", str(data)])
    assert secret not in capsys.readouterr().out
    assert token_file.read_text().strip() == secret


def test_demo_help_names_its_options(capsys: pytest.CaptureFixture[str]) -> None:
    # The demo itself runs end to end in tests/test_demo.py (slow).
    with pytest.raises(SystemExit) as exc:
        cli.main(["demo", "--help"])
    assert exc.value.code == 0
    out = capsys.readouterr().out
    assert "--out" in out and "--quick" in out


def test_subcommands_are_registered_from_functions() -> None:
    parser = cli.build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    # Every contract command is there, and each registered function adds one.
    assert {"serve", "token", "upload", "demo"} <= set(sub.choices)
    assert len(cli.COMMANDS) == len(sub.choices)


def test_progress_plain_lines_off_a_terminal_and_a_bar_on_one(monkeypatch) -> None:
    """Off a terminal: whole lines (no carriage return) with an ETA at the mean rate so far,
    remaining x elapsed / done = 30 x 10 / 10 = 30 s (arithmetic); on one: a redrawn bar."""
    import io

    from service import progress as pg

    clock = iter([100.0, 110.0, 110.0, 110.0, 110.0, 110.0, 110.0])
    monkeypatch.setattr(pg.time, "monotonic", lambda: next(clock))
    log = io.StringIO()
    bar = pg.Progress("scoring", total=40, unit="jobs", stream=log, interval_s=0)
    bar.update(10)
    bar.close()
    lines = log.getvalue().splitlines()
    assert "\r" not in log.getvalue() and len(lines) == 2
    assert lines[0] == "scoring: 10/40 jobs (25 %), elapsed 10 s, ETA 30 s"

    class Tty(io.StringIO):
        def isatty(self) -> bool:
            return True

    monkeypatch.setattr(pg.time, "monotonic", lambda: 0.0)
    term = Tty()
    with pg.Progress("upload", total=4, unit="MB", stream=term) as b:
        b.update(2)
    assert term.getvalue().startswith("\r[") and "#" * 12 + "." * 12 in term.getvalue()


def test_http_commands_are_registered() -> None:
    parser = cli.build_parser()
    for argv in (
        ["arena", "create", "tray", "--band-mm", "5", "80"],
        ["subject", "create", "M07", "--anterior", "a", "--posterior", "p", "--foot", "LF=x"],
        ["study", "create", "pilot", "--arena", "tray"],
        ["recipe", "create", "fine", "--set", "movement.ordinal_order=3"],
        ["rescore", "--wait"],
        ["report", "--out", "r.html"],
    ):
        args = parser.parse_args(argv)
        assert args.func is not None and args.server and hasattr(args, "token")
