"""The built wheel carries everything a normal (non-editable) install needs.

An editable install reads files straight from the checkout, so a package-data
mistake (the first release's wheel lacked the dashboard's app.js and app.css)
only shows in a real wheel. We build one, unpack it with pip into a folder of
its own, and import from there ahead of the editable checkout.
"""

from __future__ import annotations

import os
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
         "-w", str(out), str(ROOT)],
        check=True,
    )  # fmt: skip
    (found,) = out.glob("gaitscape-*.whl")
    return found


def test_wheel_lists_the_dashboard_assets_and_migrations(wheel: Path) -> None:
    names = set(zipfile.ZipFile(wheel).namelist())
    for needed in (
        "service/dashboard/static/app.js",
        "service/dashboard/static/app.css",
        "storage/alembic.ini",
        "storage/migrations/env.py",
        "storage/migrations/versions/0003_recipes.py",
        "service/report/discrimination.json",
        "service/docs_assets/swagger-init.js",
    ):
        assert needed in names, needed
    # Tests and the demo's output never ship.
    assert not any(n.startswith("tests/") for n in names)


def test_installed_wheel_serves_the_dashboard_assets(wheel: Path, tmp_path: Path) -> None:
    target = tmp_path / "site"
    subprocess.run(
        [sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target", str(target),
         str(wheel)],
        check=True,
    )  # fmt: skip
    code = (
        "import service, measures; "
        "from fastapi.testclient import TestClient; "
        "from service.app import create_app; from service.settings import Settings; "
        "import sys, tempfile; d = tempfile.mkdtemp(); "
        "app = create_app(Settings(data_dir=d, job_runner=False)); "
        "c = TestClient(app); "
        "r1 = c.get('/ui/static/app.js'); r2 = c.get('/ui/static/app.css'); "
        "print(service.__file__); print(r1.status_code, r2.status_code, len(r1.text) > 100)"
    )
    env = {**os.environ, "PYTHONPATH": str(target)}
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True, env=env,
        cwd=tmp_path,
    )  # fmt: skip
    where, statuses = out.stdout.strip().splitlines()[-2:]
    assert where.startswith(str(target)), where  # imported from the wheel, not the checkout
    assert statuses == "200 200 True"
