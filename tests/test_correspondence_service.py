"""Correspondence assembled from score rows in the database, over HTTP.

References: statsmodels MixedLM (REML) fitted directly on the assembled table; statsmodels
CanCorr for the canonical correlation; the design effect (true slope) is invented for the
check only.
"""

from __future__ import annotations

import hashlib
import io
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from _testing import assert_allclose
from fastapi.testclient import TestClient
from statsmodels.multivariate.cancorr import CanCorr

from measures._types import Score
from measures.correspondence.multivariate import first_canonical_correlation
from service.analysis.grid import CONTRACT_FIELDS, Selection, load_study
from service.app import create_app
from service.settings import get_settings
from storage import repo
from storage.models import Scan, Trial

ROLES = {"anterior": "snout", "posterior": "tail", "feet": {"LF": "lf", "RF": "rf", "LH": "lh"}}
TRUE_SLOPE = 0.8


def _sha(*parts: object) -> str:
    return hashlib.sha256(repr(parts).encode()).hexdigest()


class Study:
    """An isolated app holding a synthetic crossed study as score rows."""

    def __init__(self, tmp_path: Path) -> None:
        self.app = create_app(get_settings(data_dir=tmp_path / "data", workers=0))
        self.sm = self.app.state.sessionmaker
        with self.sm() as s:
            _, secret = repo.create_token(session=s, scopes=["read"], label="t")
            self.recipe, _ = repo.create_recipe(session=s, name="default", parameters={"a": 1})
        self.client = TestClient(self.app, headers={"Authorization": f"Bearer {secret}"})

    def arena(self, name: str) -> int:
        with self.sm() as s:
            return repo.create_arena(session=s, name=name, kind="runway").id

    def subject(self, label: str) -> int:
        with self.sm() as s:
            return repo.create_subject(session=s, label=label, marker_roles=ROLES).id

    def scan(self, arena_id: int, scores: dict[str, float], *, captured_at=None, z=None) -> int:
        with self.sm() as s:
            row = Scan(
                arena_id=arena_id,
                sha256=_sha("scan", arena_id, captured_at, scores),
                format="npy",
                kind="heightmap",
                units="m",
                size_bytes=1,
                captured_at=captured_at,
            )
            s.add(row)
            s.commit()
            items = [
                Score(k, v, "1", surrogate_z=None if z is None else z) for k, v in scores.items()
            ]
            repo.save_scores(
                session=s,
                target_kind="scan",
                target_id=row.id,
                recipe_hash=self.recipe.hash,
                scores=items,
                code_version="test",
                input_sha256=row.sha256,
            )
            return row.id

    def trial(self, arena_id: int, subject_id: int, scores: dict[str, float], condition="") -> int:
        with self.sm() as s:
            row = Trial(
                arena_id=arena_id,
                subject_id=subject_id,
                sha256=_sha("trial", arena_id, subject_id, scores, condition),
                format="csv",
                units="m",
                size_bytes=1,
                frame_rate_hz=300.0,
                n_frames=10,
                n_markers=5,
                marker_names=["snout", "tail", "lf", "rf", "lh"],
                condition=condition,
            )
            s.add(row)
            s.commit()
            repo.save_scores(
                session=s,
                target_kind="trial",
                target_id=row.id,
                recipe_hash=self.recipe.hash,
                scores=[Score(k, v, "1") for k, v in scores.items()],
                code_version="test",
                input_sha256=row.sha256,
            )
            return row.id

    def get(self, **params):
        res = self.client.get("/v1/correspondence", params={"recipe": "default", **params})
        assert res.status_code == 200, res.text
        return res


def _populate(study: Study, rng, *, n_arenas=8, n_subjects=4, trials=2, slope=TRUE_SLOPE):
    """Crossed design: roughness drives rqa_det; subjects have random offsets (invented)."""
    roughness = np.linspace(0.1, 1.5, n_arenas)
    arenas = [study.arena(f"tray {k}") for k in range(n_arenas)]
    subjects = [study.subject(f"M{k}") for k in range(n_subjects)]
    offsets = rng.normal(0.0, 1.0, n_subjects)
    for a, sq in zip(arenas, roughness, strict=True):
        study.scan(a, {"sq_m": sq, "sdr": rng.uniform(0, 1)})
        for s, off in zip(subjects, offsets, strict=True):
            for k in range(trials):
                y = 1.0 + slope * sq + off + rng.normal(0, 0.3)
                study.trial(
                    a,
                    s,
                    {"rqa_det": y, "sample_entropy": rng.normal()},
                    condition="lit" if k == 0 else "dark",
                )
    return arenas, subjects, roughness


@pytest.fixture
def study(tmp_path: Path) -> Study:
    return Study(tmp_path)


def test_known_effect_json_contract_and_statsmodels(study, rng):
    _populate(study, rng)
    body = study.get(n_permutations=999, n_boot=199).json()
    assert (body["n_arenas"], body["n_subjects"], body["n_trials"]) == (8, 4, 64)
    rows = {(r["terrain_measure"], r["movement_measure"]): r for r in body["rows"]}
    assert len(rows) == 4  # 2 terrain x 2 movement measures
    for r in body["rows"]:
        assert set(CONTRACT_FIELDS) <= set(r)
    row = rows[("sq_m", "rqa_det")]
    assert row["ci_low"] < TRUE_SLOPE < row["ci_high"]
    # 8 arenas, 999 random permutations: the smallest Monte Carlo p is 1/1000.
    assert row["p_value"] < 0.01
    # Reference: statsmodels MixedLM (REML) on the table the service assembled.
    with study.sm() as s:
        table = load_study(
            session=s, recipe_hash=study.recipe.hash, selection=Selection()
        ).analysis_table()
    ref = sm.MixedLM(
        table["rqa_det"], sm.add_constant(table["sq_m"]), groups=table["subject_id"]
    ).fit(reml=True)
    # The trial-level reference fit. Same REML surface, different optimisers: 1e-4
    # relative (as in test_correspondence).
    assert_allclose(row["trial_slope"], ref.fe_params["sq_m"], rtol=1e-4)
    assert_allclose(
        row["trial_ci_high"] - row["trial_ci_low"], 2 * 1.959964 * ref.bse_fe["sq_m"], rtol=1e-3
    )
    # The main interval is arena-level: statsmodels OLS on the 8 arena means (balanced
    # crossed design: subject-adjusted means equal plain arena means), t with 6 df.
    means = table.groupby("arena_id")[["sq_m", "rqa_det"]].mean()
    ols = sm.OLS(means["rqa_det"], sm.add_constant(means["sq_m"])).fit()
    assert_allclose(row["slope"], ols.params["sq_m"], rtol=1e-9)
    assert_allclose([row["ci_low"], row["ci_high"]], ols.conf_int().loc["sq_m"], rtol=1e-9)
    assert row["slope_df"] == 6 and row["ci_method"] == "arena"
    # Figure data: one point per arena with its name, and the line through them.
    points = row["arena_points"]
    assert len(points) == 8 and {p["arena_name"] for p in points} == {f"tray {k}" for k in range(8)}
    assert_allclose([p["movement"] for p in points], means["rqa_det"], rtol=1e-9)
    assert all(p["movement_ci_low"] < p["movement"] < p["movement_ci_high"] for p in points)
    assert_allclose(row["fit_line"]["slope"], row["slope"], rtol=1e-9)
    assert len(row["fit_line"]["x"]) == len(row["fit_line"]["band_low"]) == 25
    assert body["scan_policy"]["rule"] == "latest"
    assert body["plane"]["bounds"]["terrain"]["n_patterns"] == 24  # (2 x 2)! default patch
    assert body["multivariate"]["n_arenas"] == 8


def test_csv_equals_json(study, rng):
    _populate(study, rng, n_arenas=5, n_subjects=3, trials=1)
    params = {"n_permutations": 99, "n_boot": 99}
    rows = pd.DataFrame(study.get(**params).json()["rows"])
    res = study.get(format="csv", **params)
    assert res.headers["content-type"].startswith("text/csv")
    csv = pd.read_csv(io.StringIO(res.text))
    assert list(csv.columns[: len(CONTRACT_FIELDS)]) == list(CONTRACT_FIELDS)
    # Scalar fields are columns; list fields (groups) are ";"-joined; figure data stays JSON.
    cols = [c for c in rows.columns if c in csv.columns and not c.endswith("_group")]
    assert len(cols) >= len(CONTRACT_FIELDS) + 5
    pd.testing.assert_frame_equal(csv[cols], rows[cols].astype(csv[cols].dtypes))
    assert list(csv["terrain_group"]) == [";".join(g) for g in rows["terrain_group"]]


def test_latest_and_mean_scans(study):
    a = study.arena("two scans")
    now = datetime(2026, 1, 1, tzinfo=UTC)
    study.scan(a, {"sq_m": 1.0}, captured_at=now)
    study.scan(a, {"sq_m": 3.0}, captured_at=now + timedelta(days=1))
    study.trial(a, study.subject("M0"), {"rqa_det": 0.5})
    with study.sm() as s:
        latest = load_study(session=s, recipe_hash=study.recipe.hash, selection=Selection())
        mean = load_study(
            session=s, recipe_hash=study.recipe.hash, selection=Selection(scans="mean")
        )
    assert latest.arenas.loc[a, "sq_m"] == 3.0  # the later capture
    assert mean.arenas.loc[a, "sq_m"] == 2.0  # (1 + 3) / 2
    assert (latest.arenas.loc[a, "n_scans"], mean.arenas.loc[a, "n_scans"]) == (1, 2)


def test_selection_filters(study, rng):
    arenas, subjects, _ = _populate(study, rng, n_arenas=6, n_subjects=3, trials=2)
    params = {"n_permutations": 99, "n_boot": 99}
    body = study.get(
        arena_id=arenas[:5],
        subject_id=subjects[:2],
        condition="lit",
        terrain_measure="sq_m",
        movement_measure="rqa_det",
        **params,
    ).json()
    assert (body["n_arenas"], body["n_subjects"], body["n_trials"]) == (5, 2, 10)
    assert [(r["terrain_measure"], r["movement_measure"]) for r in body["rows"]] == [
        ("sq_m", "rqa_det")
    ]
    bad = study.client.get(
        "/v1/correspondence", params={"recipe": "default", "terrain_measure": "nope"}
    )
    assert bad.status_code == 400 and "nope" in bad.json()["detail"]
    assert study.client.get("/v1/correspondence", params={"recipe": "none"}).status_code == 404


def test_design_warnings(study, rng):
    # 3 arenas, 2 subjects, each subject in its own arenas (confounded), a constant measure.
    a = [study.arena(f"a{k}") for k in range(3)]
    s = [study.subject(f"S{k}") for k in range(2)]
    for k, arena in enumerate(a):
        study.scan(arena, {"sq_m": float(k), "sdr": rng.uniform(), "flat": 1.0}, z=0.5)
        for _ in range(3):
            study.trial(arena, s[0] if k < 2 else s[1], {"rqa_det": rng.normal(), "same": 2.0})
    # "all": every scored measure, not only the headline ones (flat/same are not headline).
    res = study.get(n_permutations=99, n_boot=99, terrain_measure="all", movement_measure="all")
    body = res.json()
    text = " ".join(body["warnings"])
    assert "Only 3 arenas" in text
    assert "Only 2 subjects" in text
    # Constant measures get no row, only the reason (issue: "slope -0.0 [-0, -0]").
    missing = {(m["terrain_measure"], m["movement_measure"]): m for m in body["not_estimable"]}
    assert "constant" in missing[("flat", None)]["reason"]
    assert "constant" in missing[(None, "same")]["reason"]
    in_rows = {r["terrain_measure"] for r in body["rows"]}
    in_rows |= {r["movement_measure"] for r in body["rows"]}
    assert not {"flat", "same"} & in_rows
    assert "no structure for 'flat'" in text  # surrogate z = 0.5 in every scan
    assert "meaningless" in text  # canonical correlation with n_arenas <= variables
    detail = next(d for d in body["warning_details"] if "Only 3 arenas" in d["message"])
    assert detail["scope"] == "study" and detail["n_arenas"] == 3
    assert set(detail["measures"]) == {"sq_m", "sdr", "rqa_det"}


def test_confounded_subject_and_arena(study, rng):
    for k in range(5):
        arena = study.arena(f"a{k}")
        study.scan(arena, {"sq_m": float(k)})
        subject = study.subject(f"S{k}")
        for _ in range(2):
            study.trial(arena, subject, {"rqa_det": rng.normal()})
    text = " ".join(study.get(n_permutations=99, n_boot=99).json()["warnings"])
    assert "confounded" in text


def test_missing_values_use_complete_pairs(study, rng):
    arenas, _, _ = _populate(study, rng, n_arenas=6, n_subjects=3, trials=1)
    with study.sm() as s:
        trial = repo.list_trials(session=s, arena_id=arenas[0])[0][0]
        repo.save_scores(
            session=s,
            target_kind="trial",
            target_id=trial.id,
            recipe_hash=study.recipe.hash,
            scores=[Score("sample_entropy", float("nan"), "1")],
            code_version="t",
            input_sha256="x",
        )
    rows = study.get(n_permutations=99, n_boot=99).json()["rows"]
    n = {(r["terrain_measure"], r["movement_measure"]): r["n_trials"] for r in rows}
    assert n[("sq_m", "rqa_det")] == 18 and n[("sq_m", "sample_entropy")] == 17


def test_canonical_correlation_matches_statsmodels(rng):
    # Reference: statsmodels CanCorr (Hotelling 1936), first canonical correlation.
    x = rng.normal(size=(40, 3))
    y = np.column_stack([x[:, 0] + 0.5 * rng.normal(size=40), rng.normal(size=(40, 1))])
    ours = first_canonical_correlation(x, y, n_permutations=999)
    assert_allclose(ours.correlation, CanCorr(y, x).cancorr[0], rtol=1e-10)
    variate_x = ((x - x.mean(0)) / x.std(0)) @ ours.x_weights
    variate_y = ((y - y.mean(0)) / y.std(0)) @ ours.y_weights
    assert_allclose(np.corrcoef(variate_x, variate_y)[0, 1], ours.correlation, rtol=1e-10)
    assert ours.p_value < 0.01 and not ours.degenerate
    # One variable per block: |Pearson r| (analytic).
    r = np.corrcoef(x[:, 0], y[:, 0])[0, 1]
    assert_allclose(first_canonical_correlation(x[:, 0], y[:, 0]).correlation, abs(r))
    assert first_canonical_correlation(x[:4], y[:4]).degenerate


def test_expected_movement_leaves_the_arena_out(study, rng):
    # Reference: statsmodels OLS get_prediction (obs interval) on the other 7 arena means.
    arenas, _, roughness = _populate(study, rng)
    res = study.client.get(
        f"/v1/arenas/{arenas[3]}/expected-movement",
        params={"recipe": "default", "terrain_measure": "sq_m"},
    )
    assert res.status_code == 200, res.text
    body = res.json()
    assert body["left_out"] and body["n_arenas"] == 7 and body["terrain_measure"] == "sq_m"
    row = next(r for r in body["rows"] if r["movement_measure"] == "rqa_det")
    with study.sm() as s:
        table = load_study(
            session=s, recipe_hash=study.recipe.hash, selection=Selection()
        ).analysis_table()
    rest = table[table["arena_id"] != arenas[3]]
    means = rest.groupby("arena_id")[["sq_m", "rqa_det"]].mean()
    ols = sm.OLS(means["rqa_det"], sm.add_constant(means["sq_m"])).fit()
    frame = ols.get_prediction(np.array([[1.0, roughness[3]]])).summary_frame(alpha=0.05)
    assert_allclose(row["predicted"], frame["mean"].iloc[0], rtol=1e-9)
    assert_allclose(row["pi_low"], frame["obs_ci_lower"].iloc[0], rtol=1e-9)
    assert_allclose(row["pi_high"], frame["obs_ci_upper"].iloc[0], rtol=1e-9)
    assert row["n_arenas"] == 7
    assert set(body["rows"][0]) >= {"movement_measure", "predicted", "pi_low", "pi_high"}
    csv = study.client.get(
        f"/v1/arenas/{arenas[3]}/expected-movement",
        params={"recipe": "default", "terrain_measure": "sq_m", "format": "csv"},
    )
    frame_csv = pd.read_csv(io.StringIO(csv.text))
    assert list(frame_csv.columns[:5]) == ["movement_measure", "predicted", "pi_low", "pi_high",
                                           "n_arenas"]  # fmt: skip
    assert_allclose(frame_csv.set_index("movement_measure").loc["rqa_det", "predicted"],
                    row["predicted"], rtol=1e-12)  # fmt: skip


def test_expected_movement_new_arena_and_too_few(study, rng):
    _populate(study, rng, n_arenas=4, n_subjects=3, trials=1)
    new = study.arena("fresh tray")
    study.scan(new, {"sq_m": 0.7, "sdr": 0.5})
    body = study.client.get(
        f"/v1/arenas/{new}/expected-movement", params={"recipe": "default"}
    ).json()
    assert not body["left_out"] and body["n_arenas"] == 4
    assert all(r["predicted"] is None and "needed" in r["note"] for r in body["rows"])
    assert any("Too few arenas" in w for w in body["warnings"])
    bare = study.arena("unscanned")
    res = study.client.get(f"/v1/arenas/{bare}/expected-movement", params={"recipe": "default"})
    assert res.status_code == 400 and "no scored scan" in res.json()["detail"]


def _statements(study: Study, fn) -> int:
    from sqlalchemy import event

    engine = study.sm.kw["bind"]
    seen: list[str] = []

    def count(conn, cursor, statement, *args):
        seen.append(statement)

    event.listen(engine, "before_cursor_execute", count)
    try:
        fn()
    finally:
        event.remove(engine, "before_cursor_execute", count)
    return len(seen)


def test_study_tables_read_in_constant_statements(tmp_path, rng):
    # No per-row lookups (N+1): the statement count does not grow with the study.
    counts = []
    for name, size in (("small", (3, 2, 1)), ("large", (6, 3, 2))):
        lab = Study(tmp_path / name)
        _populate(lab, rng, n_arenas=size[0], n_subjects=size[1], trials=size[2])

        def load(lab=lab):
            with lab.sm() as s:
                load_study(session=s, recipe_hash=lab.recipe.hash, selection=Selection())

        counts.append(_statements(lab, load))
    assert counts[0] == counts[1] <= 4, counts


def test_scan_policy_prefers_heightmaps_and_is_reported(study):
    a = study.arena("two kinds")
    now = datetime(2026, 1, 1, tzinfo=UTC)
    hm = study.scan(a, {"sq_m": 1.0}, captured_at=now)
    with study.sm() as s:  # a later point cloud of the same tray
        cloud = Scan(
            arena_id=a, sha256=_sha("cloud"), format="ply", kind="points", units="m",
            size_bytes=1, captured_at=now + timedelta(days=1),
        )  # fmt: skip
        s.add(cloud)
        s.commit()
        repo.save_scores(
            session=s, target_kind="scan", target_id=cloud.id, recipe_hash=study.recipe.hash,
            scores=[Score("sq_m", 9.0, "m")], code_version="t", input_sha256="x",
        )  # fmt: skip
    study.trial(a, study.subject("M0"), {"rqa_det": 0.5})
    with study.sm() as s:
        tables = load_study(session=s, recipe_hash=study.recipe.hash, selection=Selection())
    assert tables.arenas.loc[a, "sq_m"] == 1.0  # the heightmap, though the cloud is later
    (entry,) = tables.scan_policy["arenas"]
    assert entry == {"arena_id": a, "scan_ids": [hm], "kinds": ["heightmap"]}
    assert "heightmap" in tables.scan_policy["description"]


def test_warning_names_a_measure_defined_on_fewer_arenas(study, rng):
    # hurst_psd defined on 3 of 8 arenas: its own warning with its own count; the
    # study-level "Only N arenas" warning does not appear (the grid has 8).
    roughness = np.linspace(0.1, 1.5, 8)
    subjects = [study.subject(f"M{k}") for k in range(4)]
    for k, sq in enumerate(roughness):
        a = study.arena(f"tray {k}")
        scores = {"sq_m": sq, "sdr": rng.uniform()}
        if k < 3:
            scores["hurst_psd"] = rng.uniform(0.3, 0.9)
        study.scan(a, scores)
        for s in subjects:
            study.trial(a, s, {"rqa_det": 1.0 + 0.8 * sq + rng.normal(0, 0.3)})
    body = study.get(n_permutations=99, n_boot=99).json()
    assert not any("Only 3 arenas" in w for w in body["warnings"])
    detail = next(d for d in body["warning_details"] if "'hurst_psd'" in d["message"])
    assert detail["measures"] == ["hurst_psd"] and detail["n_arenas"] == 3
    assert "3 of 8 arenas" in detail["message"] and "0.333" in detail["message"]
    row = next(r for r in body["rows"] if r["terrain_measure"] == "hurst_psd")
    assert row["n_arenas"] == 3 and row["slope_df"] == 1


def _cloud(study: Study, arena_id: int, scores: dict[str, float], captured_at=None) -> int:
    """A scored point-cloud scan of ``arena_id`` (the fixture's ``scan`` adds heightmaps)."""
    with study.sm() as s:
        row = Scan(
            arena_id=arena_id, sha256=_sha("cloud", arena_id, scores), format="ply",
            kind="points", units="m", size_bytes=1, captured_at=captured_at,
        )  # fmt: skip
        s.add(row)
        s.commit()
        repo.save_scores(
            session=s, target_kind="scan", target_id=row.id, recipe_hash=study.recipe.hash,
            scores=[Score(k, v, "1") for k, v in scores.items()], code_version="t",
            input_sha256=row.sha256,
        )  # fmt: skip
        return row.id


def test_expected_movement_and_study_table_use_the_same_scan(study, rng):
    # Like the demo: most arenas scanned as point clouds, two also as heightmaps whose
    # values differ from their clouds' (invented values). The dashboard's scan page asks
    # the endpoint without a study; the value it predicts from must be the table's.
    arenas = [study.arena(f"tray {k}") for k in range(7)]
    subjects = [study.subject(f"M{k}") for k in range(3)]
    ed = np.linspace(0.2, 1.2, 7)  # the clouds' values, all inside the study's range
    pairs = {arenas[1]: 0.05, arenas[4]: 0.1}  # their heightmaps: far below the range
    hm_ids, cloud_ids = {}, {}
    for a, v in zip(arenas, ed, strict=True):
        cloud_ids[a] = _cloud(study, a, {"sq_m": v, "entropy_density_2d_bits": v})
        if a in pairs:
            hm_ids[a] = study.scan(a, {"sq_m": v, "entropy_density_2d_bits": pairs[a]})
        for s in subjects:
            study.trial(a, s, {"rqa_det": 1.0 + 0.5 * v + rng.normal(0, 0.1)})
    with study.sm() as s:
        tables = load_study(
            session=s, recipe_hash=study.recipe.hash, selection=Selection(terrain_measures=("all",))
        )
    policy = {e["arena_id"]: e for e in tables.scan_policy["arenas"]}
    assert tables.scan_policy["kind"] == "points"  # 7 arenas have clouds, 2 heightmaps
    for a in arenas:
        body = study.client.get(
            f"/v1/arenas/{a}/expected-movement",
            params={"recipe": "default", "terrain_measure": "entropy_density_2d_bits"},
        ).json()
        assert body["terrain_value"] == tables.arenas.loc[a, "entropy_density_2d_bits"]
        assert body["scan_policy"]["scan_ids"] == policy[a]["scan_ids"] == [cloud_ids[a]]
        if a in pairs:  # interior by its cloud; its heightmap value would extrapolate
            assert not any("extrapolation" in w for w in body["warnings"]), body["warnings"]
    # A new arena outside the study with both kinds: the same rule (the study's kind).
    new = study.arena("fresh tray")
    study.scan(new, {"sq_m": 0.5, "entropy_density_2d_bits": 0.01})
    fresh = _cloud(study, new, {"sq_m": 0.5, "entropy_density_2d_bits": 0.5})
    body = study.client.get(
        f"/v1/arenas/{new}/expected-movement",
        params={"recipe": "default", "terrain_measure": "entropy_density_2d_bits"},
    ).json()
    assert not body["left_out"] and body["scan_policy"]["scan_ids"] == [fresh]
    assert body["terrain_value"] == 0.5


def test_scan_policy_names_arenas_measured_by_the_other_kind(study):
    a, b = study.arena("cloud only"), study.arena("heightmap only")
    now = datetime(2026, 1, 1, tzinfo=UTC)
    _cloud(study, a, {"sq_m": 1.0}, captured_at=now)
    study.scan(b, {"sq_m": 2.0})  # no capture time: ranks with naive and aware times alike
    for arena in (a, b):
        study.trial(arena, study.subject(f"M{arena}"), {"rqa_det": 0.5})
    with study.sm() as s:
        tables = load_study(session=s, recipe_hash=study.recipe.hash, selection=Selection())
    assert tables.scan_policy["kind"] == "heightmap"  # a tie goes to heightmaps
    assert any("'cloud only'" in w and "another kind" in w for w in tables.warnings)


def test_expected_movement_equals_leave_one_arena_out(study, rng):
    # One code path: the endpoint's prediction for each study arena is the held-out
    # prediction measures.leave_one_arena_out makes on the same table (which the benchmark
    # validates).
    from measures import leave_one_arena_out

    _populate(study, rng, n_arenas=7, n_subjects=3, trials=2)
    with study.sm() as s:
        tables = load_study(session=s, recipe_hash=study.recipe.hash, selection=Selection())
        table = tables.trials.copy()
    ids = tables.arenas.index.to_numpy()
    loo = leave_one_arena_out(
        tables.arenas["sq_m"].to_numpy(dtype=float),
        table[tables.movement_measures].to_numpy(dtype=float),
        np.searchsorted(ids, table["arena_id"].to_numpy()),
        table["subject_id"].to_numpy(),
    )
    for k, a in enumerate(ids):
        body = study.client.get(
            f"/v1/arenas/{a}/expected-movement",
            params={"recipe": "default", "terrain_measure": "sq_m"},
        ).json()
        got = {r["movement_measure"]: r for r in body["rows"]}
        for j, name in enumerate(tables.movement_measures):
            assert_allclose(got[name]["predicted"], loo.predicted[k, j], rtol=1e-12)
            assert_allclose(got[name]["pi_high"], loo.pi_high[k, j], rtol=1e-12)


def test_report_terrain_figure_uses_the_tables_scan():
    # The report's hillshade of an arena shows the scan its table values come from (the
    # scan policy's), not the first heightmap upload.
    from types import SimpleNamespace

    from service.report.panels import _policy_scan

    hm = SimpleNamespace(id=1, arena_id=5, kind="heightmap", heightmap_sha256="a")
    cloud = SimpleNamespace(id=2, arena_id=5, kind="points", heightmap_sha256="b")
    study = SimpleNamespace(scans=[hm, cloud], policy_scan_ids={5: [2]})
    assert _policy_scan(study, 5) is cloud
    study.policy_scan_ids = {}
    assert _policy_scan(study, 5) is hm  # no policy entry: the heightmap upload
