"""Hostile uploads through the API: each malformed file is a 4xx with a message, and nothing is
stored (no row, no artifact, no staging leftover). Path-traversal names are stored by hash only."""

from __future__ import annotations

import json
import sys
import tempfile
from pathlib import Path

import numpy as np
import pytest
from test_api import Lab, wide_csv

sys.path.insert(0, str(Path(__file__).parent / "corpus"))
from make_corpus import build_corpus

with tempfile.TemporaryDirectory() as _work:  # scratch for the reference writers only
    CASES = build_corpus(Path(_work))


@pytest.fixture(scope="module")
def lab(tmp_path_factory: pytest.TempPathFactory) -> Lab:
    return Lab(tmp_path_factory.mktemp("hostile"))


def _post(lab: Lab, case) -> object:
    if case.kind == "trial":
        meta = {"arena_id": lab.arena_id, "subject_id": lab.subject_id, **case.meta}
        url = "/v1/trials"
    else:
        meta = dict(case.meta)
        url = f"/v1/arenas/{lab.arena_id}/scans"
    return lab.client.post(
        url, files={"file": (case.filename, case.content)}, data={"meta": json.dumps(meta)}
    )


def test_corpus_files_are_small() -> None:
    assert len(CASES) >= 40
    assert max(len(c.content) for c in CASES) < 64 * 1024
    assert {c.filename.rsplit(".", 1)[-1] for c in CASES} >= {
        "csv",
        "tsv",
        "c3d",
        "npy",
        "ply",
        "pcd",
        "xyz",
        "pts",
        "tif",
        "tiff",
    }


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_hostile_upload_is_4xx_and_stores_nothing(lab: Lab, case) -> None:
    before = (lab.count("trial"), lab.count("scan"), lab.count("job"))
    response = _post(lab, case)
    assert 400 <= response.status_code < 500, (response.status_code, response.text)
    detail = response.json()["detail"]
    assert isinstance(detail, str) and len(detail) > 10
    assert (lab.count("trial"), lab.count("scan"), lab.count("job")) == before
    assert lab.stored_files() == [], "an artifact or staging file was left behind"


def test_traversal_name_is_stored_by_hash_only(tmp_path: Path, rng: np.random.Generator) -> None:
    lab = Lab(tmp_path / "lab")
    content = wide_csv(rng)
    response = lab.post_trial(content, name="../../etc/passwd.csv")
    assert response.status_code == 201, response.text
    sha = response.json()["sha256"]
    store = lab.app.state.store
    assert list(store.iter_shas()) == [sha] and store.read_bytes(sha) == content
    data_dir = lab.app.state.settings.data_dir
    every_file = [p for p in tmp_path.rglob("*") if p.is_file()]
    # Besides the database files, the one object named by its hash: nothing else anywhere.
    outside = [p for p in every_file if not p.name.startswith("gaitscape.sqlite")]
    assert outside == [store.path(sha)]
    assert all(p.is_relative_to(data_dir) for p in every_file)
    download = lab.client.get(f"/v1/trials/{response.json()['id']}/file")
    assert download.content == content
    assert "/" not in download.headers["content-disposition"].split("filename", 1)[1]
