"""Local correspondence: terrain patches under the path, within- and across-trial statistics.

Sources: analytic Sq and 2D permutation entropy of a checkerboard and of flat ground
(ISO 25178-2 Sq definition; Bandt & Pompe 2002 normalisation by ln D!); exact enumeration of
cyclic shifts with scipy.stats.spearmanr; statsmodels MixedLM (REML) fitted directly.
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from _testing import assert_allclose
from fastapi.testclient import TestClient
from scipy import stats

from measures.correspondence.local import local_correspondence, window_terrain_patches
from service.app import create_app
from service.settings import get_settings
from storage import repo

AMPLITUDE_M = 1e-3
DX_M = 2e-3
ROUGH_UNTIL_M = 0.3  # x < 0.3 m: checkerboard +-1 mm; beyond: flat


def _ground(ny: int = 100, nx: int = 300) -> np.ndarray:
    iy, ix = np.indices((ny, nx))
    z = AMPLITUDE_M * np.where((ix + iy) % 2 == 0, 1.0, -1.0)
    z[:, (ix[0] + 0.5) * DX_M >= ROUGH_UNTIL_M] = 0.0
    return z


def _checkerboard_sq(patch: np.ndarray) -> float:
    # Sq after removing the mean: a sqrt(1 - (s/n)^2), s the sum of the +-1 signs (analytic).
    signs = np.sign(patch)
    return AMPLITUDE_M * math.sqrt(1.0 - (signs.sum() / signs.size) ** 2)


def test_patches_recover_rough_and_smooth_halves():
    z = _ground()
    t = np.linspace(0.0, 10.0, 1001)
    xy = np.column_stack([0.05 + 0.05 * t, np.full(t.size, 0.1)])
    starts = np.arange(0.0, 10.0, 2.0)
    p = window_terrain_patches(
        xy,
        time_s=t,
        window_start_s=starts,
        window_stop_s=starts + 2.0,
        z=z,
        dx_m=DX_M,
        margin_m=0.02,
    )
    r0, r1, c0, c1 = p.bounds_ij[1]  # x in 0.15..0.25 m: rough only
    assert_allclose(p.sq_m[1], _checkerboard_sq(z[r0:r1, c0:c1]), rtol=1e-12)
    assert_allclose(p.sq_m[3], 0.0, atol=1e-18)  # x in 0.35..0.45 m: flat
    # Two equiprobable 2x2 patterns on a checkerboard: H = ln 2 / ln 4! (Bandt & Pompe 2002).
    assert_allclose(p.permutation_entropy_2d[1], math.log(2) / math.log(24), rtol=1e-3)
    assert_allclose(p.permutation_entropy_2d[3], 0.0, atol=1e-12)  # ties: one pattern
    assert 0 < p.sq_m[2] < p.sq_m[1]  # straddles the boundary
    assert_allclose(p.coverage, 1.0)


def test_within_trial_shift_p_is_exact_enumeration(rng):
    n = 9
    t = rng.normal(size=n)
    m = t + rng.normal(scale=0.5, size=n)
    res = local_correspondence(
        t,
        m,
        np.zeros(n, dtype=int),
        terrain_names=["a"],
        movement_names=["b"],
        n_permutations=99,
    )
    row = res.rows[0]
    observed = stats.spearmanr(t, m).statistic
    null = [stats.spearmanr(np.roll(t, -k), m).statistic for k in range(n)]
    expected = np.mean([abs(v) >= abs(observed) * (1 - 1e-12) for v in null])
    assert_allclose(row.rho_within[0], observed, rtol=1e-12)
    assert_allclose(row.p_within[0], expected)


def test_across_trials_matches_statsmodels_and_finds_slope(rng):
    true_slope = 2.0
    n_trials, n_windows = 8, 12
    trial = np.repeat(np.arange(n_trials), n_windows)
    # A smooth terrain series per trial (autocorrelated, as along a real path).
    terrain = np.concatenate([np.cumsum(rng.normal(size=n_windows)) * 0.1 for _ in range(n_trials)])
    offsets = rng.normal(0, 1.0, n_trials)
    movement = true_slope * terrain + offsets[trial] + rng.normal(0, 0.1, trial.size)
    res = local_correspondence(
        terrain,
        movement,
        trial,
        terrain_names=["patch_sq_m"],
        movement_names=["rqa_det"],
        n_permutations=999,
    )
    row = res.rows[0]
    ref = sm.MixedLM(movement, sm.add_constant(terrain), groups=trial).fit(reml=True)
    assert_allclose(row.slope, ref.fe_params[1], rtol=1e-4)  # optimiser precision
    assert row.ci_low < true_slope < row.ci_high
    assert row.p_value <= 0.01
    assert row.n_trials == n_trials and row.n_windows == trial.size


def test_across_trials_null_p_is_not_small(rng):
    trial = np.repeat(np.arange(6), 10)
    terrain = np.concatenate([np.cumsum(rng.normal(size=10)) for _ in range(6)])
    movement = np.concatenate([np.cumsum(rng.normal(size=10)) for _ in range(6)])
    p = local_correspondence(
        terrain, movement, trial, terrain_names=["a"], movement_names=["b"]
    ).rows[0]
    assert 0 <= p.p_value <= 1 and np.isfinite(p.statistic)


# -- the route, from stored artifacts ------------------------------------------------------
ROLES = {
    "anterior": "snout",
    "posterior": "tail",
    "feet": {"LF": "lf", "RF": "rf", "LH": "lh", "RH": "rh"},
}
MARKERS = ["snout", "tail", "lf", "rf", "lh", "rh"]


def _walk_csv(rng, *, rate_hz=300.0, duration_s=10.0, speed_m_s=0.05) -> bytes:
    """Straight walk along x at y = 0.1 m; feet swing fore-aft at 3 Hz (invented)."""
    t = np.arange(int(rate_hz * duration_s)) / rate_hz
    x = 0.05 + speed_m_s * t
    cols = {"snout": (x + 0.02, 0.1, 0.01), "tail": (x - 0.02, 0.1, 0.01)}
    for k, (name, side) in enumerate(zip(MARKERS[2:], (1, -1, 1, -1), strict=True)):
        swing = 0.01 * np.sin(2 * np.pi * 3.0 * t + k * np.pi / 2)
        cols[name] = (x + swing + 0.01 * (k < 2), 0.1 + 0.01 * side, 0.002 * np.abs(swing))
    header = ["time"] + [f"{m}_{a}" for m in MARKERS for a in "xyz"]
    data = np.column_stack(
        [t] + [np.broadcast_to(v, t.shape) * 1000.0 for m in MARKERS for v in cols[m]]
    )
    data[:, 1:] += rng.normal(scale=0.01, size=data[:, 1:].shape)  # 0.01 mm marker noise
    out = io.StringIO()
    out.write(",".join(header) + "\n")
    np.savetxt(out, data, delimiter=",", fmt="%.6f")
    return out.getvalue().encode()


@pytest.fixture
def lab(tmp_path: Path, rng):
    app = create_app(get_settings(data_dir=tmp_path / "data", workers=0))
    store = app.state.store
    with app.state.sessionmaker() as s:
        _, secret = repo.create_token(session=s, scopes=["read"], label="t")
        arena = repo.create_arena(session=s, name="half rough", kind="open_field")
        subject = repo.create_subject(session=s, label="Q1", marker_roles=ROLES)
        params = {"movement": {"embedding_delay_samples": 10, "embedding_dimension": 3}}
        repo.create_recipe(session=s, name="default", parameters=params)
        z = _ground()
        npy = io.BytesIO()
        np.save(npy, z, allow_pickle=False)
        scan, _ = repo.ingest_scan(
            session=s,
            store=store,
            arena_id=arena.id,
            staged=store.put_stream([npy.getvalue()], filename="ground.npy"),
            filename="ground.npy",
            meta={"units": "m", "dx": DX_M, "dy": DX_M},
        )
        repo.attach_heightmap(
            session=s,
            store=store,
            scan_id=scan.id,
            z=z,
            valid=np.ones(z.shape, bool),
            dx_m=DX_M,
            dy_m=DX_M,
        )
        trial, _ = repo.ingest_trial(
            session=s,
            store=store,
            staged=store.put_stream([_walk_csv(rng)], filename="w.csv"),
            filename="w.csv",
            meta={"arena_id": arena.id, "subject_id": subject.id, "units": "mm"},
        )
    client = TestClient(app, headers={"Authorization": f"Bearer {secret}"})
    return client, trial.id


def test_route_maps_path_onto_heightmap(lab):
    client, trial_id = lab
    res = client.get(
        f"/v1/trials/{trial_id}/local-correspondence",
        params={"recipe": "default", "window_s": 2.0, "margin_m": 0.02, "n_permutations": 99},
    )
    assert res.status_code == 200, res.text
    body = res.json()
    windows = body["trials"][0]["windows"]
    assert len(windows) >= 4
    by_x = {round(w["centre_xy_m"][0], 2): w for w in windows}
    rough = [w for x, w in by_x.items() if x + 0.07 < ROUGH_UNTIL_M]
    smooth = [w for x, w in by_x.items() if x - 0.07 > ROUGH_UNTIL_M]
    assert rough and smooth
    # Analytic: Sq of the checkerboard half is the amplitude (to 1/n^2 ~ 1e-6 for n > 1000
    # cells, hence rtol 1e-5); the flat half has Sq = 0.
    for w in rough:
        assert_allclose(w["patch_sq_m"], AMPLITUDE_M, rtol=1e-5)
    for w in smooth:
        assert_allclose(w["patch_sq_m"], 0.0, atol=1e-15)
    assert {r["terrain_measure"] for r in body["rows"]} >= {"patch_sq_m"}
    assert {"rqa_det", "entropy_rate_bits"} <= {r["movement_measure"] for r in body["rows"]}


def test_route_unknown_and_treadmill_trials(lab):
    client, trial_id = lab
    params = {"recipe": "default", "n_permutations": 99}
    res = client.get(f"/v1/trials/{trial_id + 99}/local-correspondence", params=params)
    assert res.status_code == 404
    app = client.app
    with app.state.sessionmaker() as s:
        trial = repo.get_trial(session=s, trial_id=trial_id)
        trial.treadmill_speed_m_s = 0.1  # test-only edit of the row: a treadmill trial
        s.commit()
    res = client.get(f"/v1/trials/{trial_id}/local-correspondence", params=params)
    assert res.status_code == 400 and "treadmill" in res.json()["detail"]


def test_stored_windows_are_read_for_every_trial_in_one_query(lab, rng):
    # What the scoring job stores (derived kind "movement_windows") is what the view uses:
    # two trials with stored windows give the same rows as when the view computed them, the
    # result says "stored", and the derived table is read by one statement for both trials.
    from sqlalchemy import event

    from service.analysis.local import _computed_windows

    client, first = lab
    app = client.app
    params = {"recipe": "default", "window_s": 2.0, "margin_m": 0.02, "n_permutations": 99}
    with app.state.sessionmaker() as s:
        trial = repo.get_trial(session=s, trial_id=first)
        second, _ = repo.ingest_trial(
            session=s,
            store=app.state.store,
            staged=app.state.store.put_stream([_walk_csv(rng)], filename="w2.csv"),
            filename="w2.csv",
            meta={"arena_id": trial.arena_id, "subject_id": trial.subject_id, "units": "mm"},
        )
        ids = [first, second.id]
    computed = client.get("/v1/correspondence/local", params={**params, "trial_id": ids})
    assert computed.status_code == 200, computed.text
    assert {t["movement_source"] for t in computed.json()["trials"]} == {"computed"}
    with app.state.sessionmaker() as s:
        recipe = repo.get_recipe(session=s, name="default")
        for tid in ids:
            t = repo.get_trial(session=s, trial_id=tid)
            subject = repo.get_subject(session=s, subject_id=t.subject_id)
            w = _computed_windows(s, app.state.store, t, subject, recipe, 2.0)
            arrays = {
                "window_start_s": w["window_start_s"],
                "window_stop_s": w["window_stop_s"],
                "window_s": np.asarray(2.0),
                "delay_samples": np.asarray(w["delay"]),
                "dimension": np.asarray(w["dimension"]),
                "path_origin_m": w["path_m"],
                "path_time_s": w["path_time_s"],
            } | {f"m_{k}": v for k, v in w["movement"].items()}
            repo.save_derived(session=s, store=app.state.store, target_kind="trial",
                              target_id=tid, recipe_hash=recipe.hash,
                              kind="movement_windows", arrays=arrays)  # fmt: skip
    statements: list[str] = []
    engine = app.state.sessionmaker.kw["bind"]

    def count(conn, cursor, statement, *args):
        statements.append(statement)

    event.listen(engine, "before_cursor_execute", count)
    try:
        stored = client.get("/v1/correspondence/local", params={**params, "trial_id": ids})
    finally:
        event.remove(engine, "before_cursor_execute", count)
    assert stored.status_code == 200, stored.text
    assert {t["movement_source"] for t in stored.json()["trials"]} == {"stored"}
    assert sum("FROM derived" in q for q in statements) == 1
    assert stored.json()["rows"] == computed.json()["rows"]
