"""Studies, covariates over HTTP and the analysis-table export.

References: statsmodels MixedLM (REML) fitted directly on the exported table (CSV and
Parquet read back with pandas); pandas crosstab for the design table. The synthetic study
(roughness lowers speed, speed drives the movement measure) is invented for the check.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from _testing import assert_allclose
from fastapi.testclient import TestClient
from test_correspondence_service import Study

from measures import detectable_rank_correlation
from storage import repo
from storage.errors import NotFound


class Lab(Study):
    """The correspondence test store plus a client allowed to create studies."""

    def __init__(self, tmp_path: Path) -> None:
        super().__init__(tmp_path)
        with self.sm() as s:
            _, secret = repo.create_token(session=s, scopes=["upload", "read"], label="w")
        self.writer = TestClient(self.app, headers={"Authorization": f"Bearer {secret}"})


@pytest.fixture
def lab(tmp_path: Path) -> Lab:
    return Lab(tmp_path)


def _slowing_study(lab: Lab, rng, *, n_arenas=8, n_subjects=4, reps=2, prefix="tray"):
    """Roughness lowers speed; speed alone drives rqa_det (plus noise)."""
    rough = np.linspace(0.0, 1.0, n_arenas)
    arenas = [lab.arena(f"{prefix} {k}") for k in range(n_arenas)]
    subjects = [lab.subject(f"{prefix}-M{k}") for k in range(n_subjects)]
    offsets = rng.normal(0, 0.2, n_subjects)
    trials = []
    for a, r in zip(arenas, rough, strict=True):
        lab.scan(a, {"sq_m": r, "sa_m": 0.8 * r + 1e-4 * rng.normal(), "hurst": rng.uniform()})
        v_a = 0.45 - 0.2 * r + 0.02 * rng.normal()
        for s, off in zip(subjects, offsets, strict=True):
            for _ in range(reps):
                v = v_a + 0.04 * rng.normal()
                y = 2.0 * v + off + 0.05 * rng.normal()
                trials.append(lab.trial(a, s, {"rqa_det": y, "speed_m_s": v}))
    return arenas, subjects, trials


def test_create_list_and_members(lab):
    res = lab.writer.post("/v1/studies", json={"name": "sand", "notes": "pilot"})
    assert res.status_code == 201, res.text
    sid = res.json()["id"]
    assert lab.writer.post("/v1/studies", json={"name": "sand"}).status_code == 409
    a = lab.arena("tray A")
    m = lab.subject("M0")
    t = lab.trial(a, m, {"rqa_det": 0.5})
    res = lab.writer.post(f"/v1/studies/{sid}/members", json={"arena_ids": [a], "subject_ids": [m]})
    assert res.status_code == 200
    body = res.json()
    assert body["arena_ids"] == [a] and body["subject_ids"] == [m] and body["trial_ids"] == []
    assert body["n_trials_in_study"] == 1  # arena and subject both members -> trial is in
    again = lab.writer.post(f"/v1/studies/{sid}/members", json={"trial_ids": [t]}).json()
    assert again["trial_ids"] == [t] and again["arena_ids"] == [a]  # idempotent, additive
    assert (
        lab.writer.post(f"/v1/studies/{sid}/members", json={"arena_ids": [999]}).status_code == 404
    )
    listing = lab.client.get("/v1/studies").json()
    assert listing["count"] == 1 and listing["data"][0]["name"] == "sand"
    assert lab.client.get("/v1/studies/12345").status_code == 404
    # A read-only token cannot create studies.
    assert lab.client.post("/v1/studies", json={"name": "x"}).status_code in (401, 403)


def test_correspondence_and_export_limited_to_a_study(lab, rng):
    arenas_a, subjects_a, _ = _slowing_study(lab, rng, n_arenas=6, prefix="gravel")
    _slowing_study(lab, rng, n_arenas=5, prefix="sand")
    sid = lab.writer.post("/v1/studies", json={"name": "gravel"}).json()["id"]
    lab.writer.post(
        f"/v1/studies/{sid}/members", json={"arena_ids": arenas_a, "subject_ids": subjects_a}
    )
    body = lab.get(study="gravel", n_permutations=99, n_boot=99).json()
    assert body["study"] == "gravel" and body["n_arenas"] == 6
    everything = lab.get(n_permutations=99, n_boot=99).json()
    assert everything["n_arenas"] == 11
    csv = lab.client.get(
        "/v1/export/analysis-table", params={"recipe": "default", "study": "gravel"}
    )
    assert csv.status_code == 200 and csv.headers["content-type"].startswith("text/csv")
    table = pd.read_csv(io.StringIO(csv.text))
    assert set(table["study"]) == {"gravel"} and table["arena_id"].nunique() == 6
    assert lab.get_status("/v1/correspondence", study="nope") == 404


def _get_status(self, path, **params):
    return self.client.get(path, params={"recipe": "default", **params}).status_code


Lab.get_status = _get_status


def test_speed_confound_over_http_and_statsmodels_on_export(lab, rng):
    _slowing_study(lab, rng)
    params = {
        "n_permutations": 999,
        "n_boot": 199,
        "movement_measure": "rqa_det",
        "terrain_measure": "all",  # sa_m is not a headline measure
    }
    plain = lab.get(**params).json()
    adjusted = lab.get(covariate="speed_m_s", **params).json()
    row_plain = {r["terrain_measure"]: r for r in plain["rows"]}["sq_m"]
    row_adj = {r["terrain_measure"]: r for r in adjusted["rows"]}["sq_m"]
    assert row_plain["p_value"] < 0.05  # slowing on rough ground looks like a terrain effect
    assert row_adj["p_value"] > 0.05  # gone once speed is a covariate
    assert adjusted["covariates"]["names"] == ["speed_m_s"]
    speed = {r["terrain_measure"]: r for r in adjusted["confounds"]["speed"]}["sq_m"]
    assert speed["confounded"] and speed["spearman_rho"] < 0 and speed["adjusted"]
    assert any("slower" in w for w in plain["warnings"])
    # sq_m and sa_m are one finding: folded into one row, listed in its group.
    assert any("one finding" in w and "'sa_m'" in w for w in plain["warnings"])
    assert row_plain["terrain_group"][0] == "sq_m" and "sa_m" in row_plain["terrain_group"]
    assert "sa_m" not in {r["terrain_measure"] for r in plain["rows"]}
    design = adjusted["design"]
    assert np.array(design["trial_counts"]).tolist() == [[2] * 4] * 8
    assert_allclose(design["power"]["detectable_abs_spearman_rho"], detectable_rank_correlation(8))
    # Export (Parquet) and refit with statsmodels directly: the adjusted slope agrees.
    res = lab.client.get(
        "/v1/export/analysis-table", params={"recipe": "default", "format": "parquet"}
    )
    assert res.status_code == 200
    table = pd.read_parquet(io.BytesIO(res.content))
    for col in ("study", "arena", "subject", "sq_m", "rqa_det", "speed_m_s", "trial_duration_s"):
        assert col in table
    fit = smf.mixedlm("rqa_det ~ sq_m + speed_m_s", table, groups=table["subject_id"]).fit(
        reml=True
    )
    # The trial-level reference fit. Two REML optimisers on one surface: 1e-4 relative
    # (as in test_correspondence).
    assert_allclose(row_adj["trial_slope"], fit.params["sq_m"], rtol=1e-4, atol=1e-6)
    # The main, arena-level slope: OLS of subject-centred arena means of rqa_det on sq_m
    # and subject-centred arena means of speed (statsmodels formula).
    for col in ("rqa_det", "speed_m_s"):
        table[f"{col}_c"] = table[col] - table.groupby("subject_id")[col].transform("mean")
    means = table.groupby("arena_id")[["sq_m", "rqa_det_c", "speed_m_s_c"]].mean()
    ols = smf.ols("rqa_det_c ~ sq_m + speed_m_s_c", means).fit()
    assert_allclose(row_adj["slope"], ols.params["sq_m"], rtol=1e-9, atol=1e-12)
    counts = pd.crosstab(table["arena_id"], table["subject_id"]).to_numpy()
    assert (np.array(design["trial_counts"]) == counts).all()


def test_unknown_covariate_is_a_clear_400(lab, rng):
    _slowing_study(lab, rng, n_arenas=5, n_subjects=3, reps=1)
    res = lab.client.get(
        "/v1/correspondence", params={"recipe": "default", "covariate": "wind_speed"}
    )
    assert res.status_code in (400, 422) and "wind_speed" in res.text


def test_upload_meta_names_a_study(tmp_path, rng):
    # Reuses the upload helpers of tests/test_api.py (a wide CSV trial at 300 Hz).
    from test_api import Lab as UploadLab
    from test_api import wide_csv

    up = UploadLab(tmp_path)
    sid = up.client.post("/v1/studies", json={"name": "dry"}).json()["id"]
    res = up.post_trial(wide_csv(rng), meta=up.trial_meta(study="dry"))
    assert res.status_code == 201, res.text
    assert up.client.get(f"/v1/studies/{sid}").json()["trial_ids"] == [res.json()["id"]]
    missing = up.post_trial(wide_csv(rng), name="b.csv", meta=up.trial_meta(study="nope"))
    assert missing.status_code == 404 and up.count("trial") == 1


# -- study= on every list, score query and export -----------------------------------------------
# The expectations follow the membership rule documented in storage/repo/studies.py: a trial is
# in when it is a member or its arena and subject both are; an arena/subject when it is a member
# or belongs to a trial in the study; a scan when its arena is; a score when its target is.


@pytest.fixture
def crossed(lab):
    """Study "gravel": arenas A1, A2 and subject S1 as members, plus trial (A3, S2) itself."""
    a1, a2, a3, a4 = (lab.arena(f"bed {k}") for k in range(1, 5))
    s1, s2, s3 = (lab.subject(f"S{k}") for k in range(1, 4))
    scans = {a: lab.scan(a, {"sq_m": 0.1 * a, "sdr": 0.01 * a}) for a in (a1, a2, a3, a4)}
    t = {
        (a, s): lab.trial(a, s, {"rqa_det": 0.1 * a + 0.01 * s, "speed_m_s": 0.3})
        for a, s in [(a1, s1), (a2, s1), (a1, s2), (a3, s1), (a3, s2), (a4, s3)]
    }
    sid = lab.writer.post("/v1/studies", json={"name": "gravel"}).json()["id"]
    lab.writer.post("/v1/studies", json={"name": "empty"})
    body = {"arena_ids": [a1, a2], "subject_ids": [s1], "trial_ids": [t[(a3, s2)]]}
    assert lab.writer.post(f"/v1/studies/{sid}/members", json=body).status_code == 200
    return {
        "study_id": sid,
        "arenas": [a1, a2, a3],  # members, plus A3 as the arena of the member trial
        "subjects": [s1, s2],  # S1 a member, S2 the subject of the member trial
        # (A1, S2) is out: S2 is not itself a member; (A3, S1) is out: A3 is not a member.
        "trials": sorted([t[(a1, s1)], t[(a2, s1)], t[(a3, s2)]]),
        "scans": sorted(scans[a] for a in (a1, a2, a3)),
        "all": {"arenas": 4, "subjects": 3, "trials": 6, "scans": 4},
        "a4": a4,
    }


def _ids(lab, path, **params):
    res = lab.client.get(path, params={"limit": 1000, **params})
    assert res.status_code == 200, res.text
    body = res.json()
    ids = [r["id"] for r in body["data"]]
    assert body["count"] == len(ids)
    return ids


@pytest.mark.parametrize("kind", ["arenas", "subjects", "trials", "scans"])
def test_every_list_is_limited_to_the_study(lab, crossed, kind):
    assert _ids(lab, f"/v1/{kind}", study="gravel") == crossed[kind]
    assert len(_ids(lab, f"/v1/{kind}")) == crossed["all"][kind]  # no study: everything
    assert _ids(lab, f"/v1/{kind}", study="empty") == []
    res = lab.client.get(f"/v1/{kind}", params={"study": "nope"})
    assert res.status_code == 404 and "study 'nope'" in res.json()["detail"]


@pytest.mark.parametrize("kind", ["arenas", "subjects", "trials", "scans"])
def test_pagination_counts_respect_the_study(lab, crossed, kind):
    want = crossed[kind]
    pages, offset = [], 0
    while offset < len(want) + 1:
        res = lab.client.get(
            f"/v1/{kind}", params={"study": "gravel", "limit": 1, "offset": offset}
        )
        body = res.json()
        assert body["count"] == len(want)  # the filtered total, not the store's
        pages += [r["id"] for r in body["data"]]
        offset += 1
    assert pages == want


def test_list_trials_agrees_with_study_trial_ids(lab, crossed):
    with lab.sm() as s:
        rows, count = repo.list_trials(session=s, study_id=crossed["study_id"])
        assert {r.id for r in rows} == repo.study_trial_ids(session=s, study_id=crossed["study_id"])
        assert count == 3
        with pytest.raises(NotFound):
            repo.list_arenas(session=s, study_id=987654)


def test_arena_scans_and_other_filters_combine_with_the_study(lab, crossed):
    a1, a4 = crossed["arenas"][0], crossed["a4"]
    assert len(_ids(lab, f"/v1/arenas/{a1}/scans", study="gravel")) == 1
    assert _ids(lab, f"/v1/arenas/{a4}/scans", study="gravel") == []  # A4 is not in the study
    assert len(_ids(lab, f"/v1/arenas/{a4}/scans")) == 1
    assert lab.client.get(f"/v1/arenas/{a1}/scans", params={"study": "nope"}).status_code == 404
    # study AND arena: the trials of A1 in the study are (A1, S1) only.
    assert len(_ids(lab, "/v1/trials", study="gravel", arena_id=a1)) == 1
    assert len(_ids(lab, "/v1/trials", arena_id=a1)) == 2


def _score_targets(rows):
    return sorted((r["target_kind"], int(r["target_id"])) for r in rows)


def _expected_targets(crossed):
    return sorted(
        [("scan", i) for i in crossed["scans"]] + [("trial", i) for i in crossed["trials"]]
    )


def test_score_query_is_limited_to_the_study(lab, crossed):
    res = lab.client.get("/v1/scores", params={"study": "gravel", "limit": 1000})
    body = res.json()
    # 2 scores per scan, 2 per trial (rqa_det, speed_m_s).
    assert (
        body["count"] == 2 * (len(crossed["scans"]) + len(crossed["trials"])) == len(body["data"])
    )
    assert sorted(set(_score_targets(body["data"]))) == _expected_targets(crossed)
    everything = lab.client.get("/v1/scores", params={"limit": 1}).json()["count"]
    assert everything == 2 * (4 + 6)
    paged = lab.client.get("/v1/scores", params={"study": "gravel", "limit": 5, "offset": 10})
    assert paged.json()["count"] == body["count"] and len(paged.json()["data"]) == 2
    trial_only = lab.client.get(
        "/v1/scores", params={"study": "gravel", "target_kind": "trial", "measure": "rqa_det"}
    ).json()
    assert trial_only["count"] == len(crossed["trials"])
    missing = lab.client.get("/v1/scores", params={"study": "nope"})
    assert missing.status_code == 404 and "nope" in missing.json()["detail"]


@pytest.mark.parametrize("shape", ["tidy", "wide"])
@pytest.mark.parametrize("fmt", ["csv", "json", "parquet"])
def test_score_export_is_limited_to_the_study(lab, crossed, shape, fmt):
    res = lab.client.get(
        "/v1/export/scores", params={"study": "gravel", "format": fmt, "shape": shape}
    )
    assert res.status_code == 200, res.text
    if fmt == "csv":
        frame = pd.read_csv(io.StringIO(res.text))
    elif fmt == "json":
        frame = pd.read_json(io.StringIO(res.text))
    else:
        frame = pd.read_parquet(io.BytesIO(res.content))
    targets = sorted(set(_score_targets(frame.to_dict("records"))))
    assert targets == _expected_targets(crossed)
    n_targets = len(crossed["scans"]) + len(crossed["trials"])
    assert len(frame) == (2 * n_targets if shape == "tidy" else n_targets)
    missing = lab.client.get("/v1/export/scores", params={"study": "nope", "format": fmt})
    assert missing.status_code == 404
