"""Score queries and exports, read back with pandas and pyarrow (general-purpose readers)."""

from __future__ import annotations

import io

import pandas as pd
import pytest
from fastapi.testclient import TestClient
from test_jobs import Store

from measures import Score
from service.app import create_app
from service.pipeline.flows import NotedScore
from service.settings import get_settings
from storage import repo

HURST_NOTE = "hurst psd: no self-affine band found; too few valid cells to fit"


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    root = tmp_path_factory.mktemp("export")
    app = create_app(get_settings(data_dir=root / "data", job_runner=False))
    lab = Store.__new__(Store)
    lab.root, lab.sessionmaker, lab.store = root, app.state.sessionmaker, app.state.store
    with lab.sessionmaker() as s:
        lab.arena_id = repo.create_arena(session=s, name="gravel", kind="runway").id
        _, secret = repo.create_token(session=s, scopes=["read"])
        default = repo.get_recipe(session=s, name="default")
    scan_id = lab.add_heightmap(seed=1)
    with lab.sessionmaker() as s:
        repo.save_scores(
            session=s, target_kind="scan", target_id=scan_id, recipe_hash=default.hash,
            scores=[Score("sq_m", 0.002, "m"), Score("sdr", 0.15, "1"),
                    NotedScore("hurst_psd", float("nan"), "1", note=HURST_NOTE)],
            code_version="test", input_sha256="a" * 64,
        )  # fmt: skip
    client = TestClient(app, headers={"Authorization": f"Bearer {secret}"})
    return client, scan_id, default


def test_query_filters_and_context(study) -> None:
    client, scan_id, default = study
    body = client.get("/v1/scores", params={"scan_id": scan_id, "measure": "sq_m"}).json()
    assert body["count"] == 1
    row = body["data"][0]
    assert (row["arena"], row["value"], row["unit"], row["recipe_hash"]) == (
        "gravel",
        0.002,
        "m",
        default.hash,
    )
    assert client.get("/v1/scores", params={"recipe": "default"}).json()["count"] == 3
    assert client.get("/v1/scores", params={"target_kind": "trial"}).json()["count"] == 0
    assert client.get("/v1/scores", params={"recipe": "missing"}).status_code == 404


def test_tidy_csv_json_parquet_read_back(study) -> None:
    client, _, _ = study
    csv = client.get("/v1/export/scores", params={"format": "csv"})
    assert csv.headers["content-type"].startswith("text/csv")
    frame = pd.read_csv(io.StringIO(csv.text))
    assert set(frame.columns) >= {
        "target_kind",
        "target_id",
        "arena",
        "subject",
        "recipe",
        "measure",
        "value",
        "unit",
    }
    assert sorted(frame["measure"]) == ["hurst_psd", "sdr", "sq_m"]
    assert set(frame["recipe"]) == {"default@1"}
    values = frame.set_index("measure")["value"]
    assert values[["sq_m", "sdr"]].to_dict() == {"sq_m": 0.002, "sdr": 0.15}
    assert pd.isna(values["hurst_psd"])
    assert frame.set_index("measure")["note"]["hurst_psd"] == HURST_NOTE
    pq = client.get("/v1/export/scores", params={"format": "parquet"})
    assert pq.headers["content-type"] == "application/vnd.apache.parquet"
    back = pd.read_parquet(io.BytesIO(pq.content)).set_index("measure")
    assert back["value"][["sq_m", "sdr"]].to_dict() == {"sq_m": 0.002, "sdr": 0.15}
    assert back["note"]["hurst_psd"] == HURST_NOTE
    js = pd.read_json(io.StringIO(client.get("/v1/export/scores", params={"format": "json"}).text))
    assert len(js) == 3


def test_wide_has_one_row_per_target(study) -> None:
    client, scan_id, _ = study
    for fmt in ("csv", "parquet"):
        r = client.get("/v1/export/scores", params={"format": fmt, "shape": "wide"})
        frame = (
            pd.read_csv(io.StringIO(r.text))
            if fmt == "csv"
            else pd.read_parquet(io.BytesIO(r.content))
        )
        assert len(frame) == 1 and int(frame["target_id"].iloc[0]) == scan_id
        assert float(frame["sq_m"].iloc[0]) == 0.002 and float(frame["sdr"].iloc[0]) == 0.15
        assert pd.isna(frame["hurst_psd"].iloc[0])
        assert frame["hurst_psd_note"].iloc[0] == HURST_NOTE
        assert "sq_m_note" not in frame.columns


def test_missing_value_comes_with_its_note_in_the_query(study) -> None:
    client, scan_id, _ = study
    body = client.get("/v1/scores", params={"scan_id": scan_id, "measure": "hurst_psd"}).json()
    row = body["data"][0]
    assert row["value"] is None and row["note"] == HURST_NOTE
    other = client.get("/v1/scores", params={"scan_id": scan_id, "measure": "sq_m"}).json()
    assert other["data"][0]["note"] == ""


def test_absurd_id_in_a_streamed_export_is_a_422_not_a_broken_stream(tmp_path):
    # Found by schemathesis: arena_id = 2**63 overflowed SQLite's INTEGER after the
    # streamed CSV had started, so the client saw a cut response instead of an error.
    from fastapi.testclient import TestClient

    from service.app import create_app
    from service.settings import get_settings
    from storage.repo import create_token

    app = create_app(get_settings(data_dir=tmp_path, job_runner=False))
    with TestClient(app) as client:
        with app.state.sessionmaker() as s:
            _, secret = create_token(session=s, scopes=["read"], label="r")
        client.headers["Authorization"] = f"Bearer {secret}"
        res = client.get("/v1/export/scores", params={"arena_id": 2**63, "format": "csv"})
        assert res.status_code == 422
        ok = client.get("/v1/export/scores", params={"arena_id": 2**63 - 1, "format": "csv"})
        assert ok.status_code == 404  # in range but unknown: a clean 404 (issue 18), no cut stream
