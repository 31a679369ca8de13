"""Settings: typed, described, read from GAITSCAPE_* variables, documented for operators."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from service.settings import ENV_PREFIX, Settings, get_settings

ROOT = Path(__file__).resolve().parents[1]


def test_every_setting_has_a_description() -> None:
    missing = [
        name for name, f in Settings.model_fields.items() if not (f.description or "").strip()
    ]
    assert missing == []


def test_environment_variables_use_the_prefix(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    monkeypatch.setenv("GAITSCAPE_DATA_DIR", str(tmp_path))
    monkeypatch.setenv("GAITSCAPE_MAX_UPLOAD_BYTES", "12345")
    monkeypatch.setenv("GAITSCAPE_DASK_SCHEDULER", "tcp://10.0.0.5:8786")
    monkeypatch.setenv("GAITSCAPE_CORS_ORIGINS", "https://a.example, https://b.example")
    settings = get_settings()
    assert settings.data_dir == tmp_path
    assert settings.max_upload_bytes == 12345
    assert settings.dask_scheduler == "tcp://10.0.0.5:8786"
    assert settings.cors_origins == ["https://a.example", "https://b.example"]
    # Keyword overrides beat the environment.
    assert get_settings(max_upload_bytes=7).max_upload_bytes == 7


def test_defaults(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    for name in Settings.model_fields:
        monkeypatch.delenv(ENV_PREFIX + name.upper(), raising=False)
    settings = get_settings(data_dir=tmp_path)
    assert settings.max_upload_bytes == 2 * 1024**3
    assert settings.cors_origins == []  # CORS off by default
    assert settings.host == "127.0.0.1"
    assert settings.resolved_database_url.startswith("sqlite:///")
    assert settings.resolved_database_url.endswith("gaitscape.sqlite")


def test_bad_values_are_refused() -> None:
    with pytest.raises(ValueError, match="max_upload_bytes"):
        get_settings(max_upload_bytes=0)
    with pytest.raises(ValueError, match="log_level"):
        get_settings(log_level="chatty")


def _config_section(markdown: str) -> str:
    """The README section under a heading mentioning configuration, up to the next heading of
    the same or a higher level."""
    kept: list[str] = []
    level = None
    for line in markdown.splitlines():
        heading = re.match(r"^(#+)\s", line)
        if heading and level is not None and len(heading.group(1)) <= level:
            break
        if level is not None:
            kept.append(line)
        elif heading and re.search(r"config|settings", line, re.I):
            level = len(heading.group(1))
    return "\n".join(kept)


def test_config_section_reader() -> None:
    text = "# a\nx_top\n## Configuration\n| data_dir |\n### sub\ny\n## Other\nz_out\n"
    section = _config_section(text)
    assert "data_dir" in section and "y" in section
    assert "z_out" not in section and "x_top" not in section


def _documented_text() -> str:
    parts = []
    readme = ROOT / "README.md"
    if readme.is_file():
        parts.append(_config_section(readme.read_text(encoding="utf-8")))
    developers = ROOT / "DEVELOPERS.md"
    if developers.is_file():
        parts.append(developers.read_text(encoding="utf-8"))
    return "\n".join(parts)


def test_every_setting_is_documented() -> None:
    text = _documented_text()
    missing = [
        name
        for name in Settings.model_fields
        if name not in text and (ENV_PREFIX + name.upper()) not in text
    ]
    assert not missing, (
        f"settings missing from README.md's configuration section and DEVELOPERS.md: {missing}"
    )
