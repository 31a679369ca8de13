"""From an empty server to a report with the command line alone (no curl, no Python API).

A real ``gaitscape serve`` process on a free port; every step after it is a ``gaitscape``
command: arena, subject and study set-up, upload, recipe list, report (which waits for the
scoring with progress lines, since its output is not a terminal). Files come from the demo
generators (invented data, labelled so). The report is checked for what a person reads: the
arena names, the study and SI-prefixed units.
"""

from __future__ import annotations

import json
import os
import re
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
pytestmark = [pytest.mark.integration, pytest.mark.slow]
ARENAS = ("tray-low", "tray-mid", "tray-high")
SUBJECTS = ("vole-a", "vole-b")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _gaitscape(*args: str, env: dict[str, str], timeout: float = 900) -> str:
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli", *args],
        cwd=REPO,
        env=env,
        capture_output=True,
        text=True,
        timeout=timeout,
    )
    assert proc.returncode == 0, f"gaitscape {' '.join(args)}:\n{proc.stdout}\n{proc.stderr}"
    assert "Warning" not in proc.stderr, proc.stderr  # no third-party warnings
    return proc.stdout + proc.stderr


def _files(root: Path, arena_ids: dict[str, int], subject_ids: dict[str, int]) -> None:
    """Heightmaps and short trials, with the folder configs a lab's rig would hold."""
    from demo_arena import SUBJECTS as SPECS
    from demo_arena import self_affine_surface, walk_over
    from demo_arena.files import write_csv_wide, write_heightmap_npy

    for a, name in enumerate(ARENAS):
        folder = root / name
        folder.mkdir(parents=True)
        (folder / "gaitscape.json").write_text(json.dumps({"arena": arena_ids[name]}))
        z = self_affine_surface((100, 400), 0.001, hurst=0.8, rms_m=0.0003 * (a + 1), seed=a)
        path = folder / "scan.npy"
        write_heightmap_npy(path, z)
        path.with_name("scan.npy.json").write_text(
            json.dumps({"kind": "scan", "units": "m", "dx": 0.001, "dy": 0.001})
        )
        for s, label in enumerate(SUBJECTS):
            rec = walk_over(z, 0.001, SPECS[s], duration_s=4.0, seed=10 * a + s)
            trial = folder / f"{label}.csv"
            write_csv_wide(trial, rec.markers, rec.marker_names, rec.frame_rate_hz)
            trial.with_name(trial.name + ".json").write_text(
                json.dumps(
                    {
                        "kind": "trial",
                        "subject": subject_ids[label],
                        "units": "mm",
                        "frame_rate_hz": rec.frame_rate_hz,
                    }
                )
            )


def test_empty_server_to_report_with_the_cli(tmp_path: Path) -> None:
    data, port = tmp_path / "data", _free_port()
    env = {
        **os.environ,
        "PYTHONPATH": str(REPO),
        "GAITSCAPE_PROGRESS_INTERVAL_S": "5",
        "PYTHONWARNINGS": "default",
    }
    server = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--data", str(data), "--port", str(port)],
        cwd=REPO,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    try:
        first = server.stdout.readline()
        assert f"also in {data / 'admin-token'}" in first, first
        env["GAITSCAPE_SERVER"] = f"http://127.0.0.1:{port}"
        env["GAITSCAPE_TOKEN"] = (data / "admin-token").read_text().strip()
        deadline = time.monotonic() + 120
        while True:  # wait until it listens
            try:
                socket.create_connection(("127.0.0.1", port), timeout=1).close()
                break
            except OSError:
                assert time.monotonic() < deadline and server.poll() is None
                time.sleep(0.3)

        arena_ids = {}
        for name in ARENAS:
            out = _gaitscape("arena", "create", name, "--band-mm", "5", "80", env=env)
            arena_ids[name] = int(re.search(r"created arena (\d+)", out).group(1))
        subject_ids = {}
        for label in SUBJECTS:
            out = _gaitscape(
                "subject", "create", label, "--anterior", "snout", "--posterior", "tailbase",
                "--foot", "LF=foot_LF,RF=foot_RF,LH=foot_LH,RH=foot_RH",
                "--species", "demo vole (invented)", env=env,
            )  # fmt: skip
            subject_ids[label] = int(re.search(r"created subject (\d+)", out).group(1))
        listing = _gaitscape("arena", "list", env=env)
        assert "5 to 80" in listing and all(n in listing for n in ARENAS)
        study_args = [f"--arena={n}" for n in ARENAS] + [f"--subject={s}" for s in SUBJECTS]
        out = _gaitscape("study", "create", "pilot", *study_args, env=env)
        assert "3 arenas, 2 subjects" in out

        _files(tmp_path / "rig", arena_ids, subject_ids)
        _gaitscape("upload", str(tmp_path / "rig"), "--study", "pilot", "--no-progress", env=env)
        assert "default@1" in _gaitscape("recipe", "list", env=env)

        report = tmp_path / "report.html"
        out = _gaitscape("report", "--out", str(report), "--study", "pilot", env=env)
        assert f"wrote {report}" in out
        assert re.search(r"scoring: \d+/\d+ jobs \(100 %\)", out), out  # plain lines, not a bar
        assert "\r" not in out
        html = report.read_text()
        assert "<code>pilot</code>" in html
        assert all(name in html for name in ARENAS)
        assert "Main result" in html and "<th>Sq (um)</th>" in html
    finally:
        server.terminate()
        server.wait(timeout=60)
