"""The correspondence report, built from a small synthetic store with scores inserted directly.

The store's files come from the demo generators (invented data, labelled so); its scores are
written with ``storage.repo.save_scores`` so the test is quick and the expected values known.
What is checked against outside facts: the report holds no external resource (self-contained
means no ``src=``/``href=`` to another origin, HTML Living Standard), figures decode as PNG
(PNG signature, ISO/IEC 15948:2004 section 5.2), and the arena-permutation floor: with 4 arenas
the smallest two-sided permutation p is 2/4! = 0.083, so the report must warn (Good 2005,
*Permutation, Parametric and Bootstrap Tests of Hypotheses*, ch. 3; common practice).
"""

from __future__ import annotations

import base64
import itertools
import re
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from service.app import open_resources
from service.pipeline.recipes import ensure_default_recipe
from service.settings import get_settings
from storage import repo

N_ARENAS = 4
SUBJECTS = ("vole-a", "vole-b")
DX_M = 0.001
ROLES = {
    "anterior": "snout",
    "posterior": "tailbase",
    "feet": {f: f"foot_{f}" for f in ("LF", "RF", "LH", "RH")},
}


def _score(name: str, value: float, unit: str = "1", z: float | None = None) -> SimpleNamespace:
    return SimpleNamespace(
        name=name, value=float(value), unit=unit, ci_low=None, ci_high=None, surrogate_z=z
    )


def _save_plots(session, store, target: tuple[str, int], recipe_hash: str, summary) -> None:
    # The plot arrays a scoring job stores (service.pipeline.flows), which the report reads.
    from service.pipeline.tasks import plot_arrays

    kind = "terrain_plots" if target[0] == "scan" else "movement_plots"
    repo.save_derived(
        session=session, store=store, target_kind=target[0], target_id=target[1],
        recipe_hash=recipe_hash, kind=kind, arrays=plot_arrays(summary),
    )  # fmt: skip


def build_small_store(data_dir: Path, *, duration_s: float = 3.0) -> dict:
    """4 arenas x 2 subjects, one trial each, heightmaps attached, scores saved directly.

    Movement scores are a known linear function of the arena's Sq (plus subject offsets), so
    the correspondence has one strong pair: stride_frequency_hz ~ sq_m.
    """
    from demo_arena import SUBJECTS as SPECS
    from demo_arena import self_affine_surface, walk_over
    from demo_arena.files import write_csv_wide, write_heightmap_npy
    from measures import movement_summary, terrain_summary

    settings = get_settings(data_dir=data_dir, job_runner=False)
    res = open_resources(settings)
    files = data_dir / "files"
    files.mkdir(parents=True, exist_ok=True)
    out: dict = {"settings": settings, "arenas": [], "trials": [], "scans": [], "sq": {}}
    with res.sessionmaker() as session:
        prof = ensure_default_recipe(session)
        subjects = [
            repo.create_subject(
                session=session, label=label, species="demo vole (invented)", marker_roles=ROLES
            )
            for label in SUBJECTS
        ]
        for a in range(N_ARENAS):
            arena = repo.create_arena(
                session=session,
                name=f"tray-{a}",
                kind="runway",
                scale_band_m=(0.005, 0.08),
                notes="invented test tray",
            )
            rms = 0.0002 * (a + 1) ** 2
            z = self_affine_surface((96, 320), DX_M, hurst=0.8, rms_m=rms, seed=100 + a)
            path = files / f"tray-{a}.npy"
            write_heightmap_npy(path, z)
            staged = res.store.put_file(path)
            scan, _ = repo.ingest_scan(
                session=session,
                store=res.store,
                arena_id=arena.id,
                staged=staged,
                filename=path.name,
                meta={"units": "m", "dx": DX_M, "dy": DX_M},
            )
            repo.attach_heightmap(
                session=session,
                store=res.store,
                scan_id=scan.id,
                z=z,
                valid=np.ones_like(z, bool),
                dx_m=DX_M,
                dy_m=DX_M,
            )
            sq = float(np.std(z))
            out["sq"][arena.id] = sq
            repo.save_scores(
                session=session,
                target_kind="scan",
                target_id=scan.id,
                recipe_hash=prof.hash,
                scores=[
                    _score("sq_m", sq, "m"),
                    _score("hurst_psd", 0.8),
                    _score("permutation_entropy_2d", 0.80 + 0.03 * a, z=5.0 + a),
                    _score("js_complexity_2d", 0.25 - 0.02 * a),
                ],
                code_version="test",
                input_sha256=scan.sha256,
            )
            _save_plots(session, res.store, ("scan", scan.id), prof.hash, terrain_summary(z, DX_M))
            out["arenas"].append(arena.id)
            out["scans"].append(scan.id)
            for s, subject in enumerate(subjects):
                rec = walk_over(z, DX_M, SPECS[s], duration_s=duration_s, seed=10 * a + s)
                tpath = files / f"tray-{a}-{subject.label}.csv"
                write_csv_wide(tpath, rec.markers, rec.marker_names, rec.frame_rate_hz)
                trial, _ = repo.ingest_trial(
                    session=session,
                    store=res.store,
                    staged=res.store.put_file(tpath),
                    filename=tpath.name,
                    meta={
                        "arena_id": arena.id,
                        "subject_id": subject.id,
                        "units": "mm",
                        "frame_rate_hz": rec.frame_rate_hz,
                        "condition": "overground",
                    },
                )
                freq = 2.0 + 1000.0 * sq + 0.05 * s  # the known relation
                repo.save_scores(
                    session=session,
                    target_kind="trial",
                    target_id=trial.id,
                    recipe_hash=prof.hash,
                    scores=[
                        _score("stride_frequency_hz", freq, "Hz"),
                        _score("duty_factor", 0.6 + 0.01 * ((a + s) % 3)),
                        _score("n_strides", 6.0),
                        _score("permutation_entropy", 0.7 + 0.02 * a + 0.01 * s),
                        _score("js_complexity", 0.3 - 0.01 * a),
                    ],
                    code_version="test",
                    input_sha256=trial.sha256,
                )
                if s == 0:  # the report draws the first trial of an arena
                    summary = movement_summary(
                        rec.markers,
                        frame_rate_hz=rec.frame_rate_hz,
                        marker_names=list(rec.marker_names),
                        roles=ROLES,
                        params={"n_surrogates": 0},
                    )
                    _save_plots(session, res.store, ("trial", trial.id), prof.hash, summary)
                out["trials"].append(trial.id)
    res.engine.dispose()
    return out


@pytest.fixture(scope="module")
def small_store(tmp_path_factory: pytest.TempPathFactory) -> dict:
    return build_small_store(tmp_path_factory.mktemp("report") / "data")


@pytest.fixture(scope="module")
def report_html(small_store: dict) -> str:
    from service.report import render_report

    res = open_resources(small_store["settings"])
    try:
        with res.sessionmaker() as session:
            return render_report(session=session, store=res.store, n_permutations=999, n_boot=199)
    finally:
        res.engine.dispose()


def test_report_has_every_section(report_html: str) -> None:
    for section in (
        "summary",
        "warnings",
        "terrain",
        "movement",
        "correspondence",
        "complexity-entropy",
    ):
        assert f'<section id="{section}">' in report_html, section
    assert "Invented data" in report_html
    assert "default@1" in report_html  # recipe name and version, one label format


def test_report_is_self_contained(report_html: str) -> None:
    # Only data: URIs; no script, no stylesheet link, no remote image (HTML Living Standard).
    assert "<script" not in report_html.lower()
    assert re.search(r'(src|href)="(?!data:)', report_html) is None
    images = re.findall(r'src="data:image/png;base64,([^"]+)"', report_html)
    assert len(images) >= 6  # thumbnails, spectra, movement, heatmap, scatter, plane
    for b64 in images:
        assert base64.b64decode(b64)[:8] == b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948 signature


def test_report_counts_and_warnings(report_html: str) -> None:
    assert "<code>4 / 4</code>" in report_html  # arenas scored / registered
    assert "<code>8 / 8</code>" in report_html  # trials scored / uploaded
    # 4 arenas: smallest two-sided permutation p is 2/4! = 0.0833 (Good 2005, ch. 3).
    assert "Only 4 arenas" in report_html and "0.0833" in report_html
    assert "Short trials" in report_html  # 3 s trials < MIN_TRIAL_S
    assert "fewer than 10 strides" in report_html


def test_strongest_pair_is_the_planted_one(report_html: str) -> None:
    # stride_frequency_hz = 2 + 1000 Sq + subject offset: the arena means lie exactly on a
    # line of slope 1000 Hz/m (analytic), i.e. 1 Hz per mm with Sq of 0.2-3.2 mm shown in mm.
    table = report_html.split("<h3>Strongest pairs</h3>")[1]
    first = table.split("<tr>")[2]
    assert "sq_m" in first and "stride_frequency_hz" in first
    assert ">1 Hz per mm [1, 1]<" in first


def test_units_carry_si_prefixes(report_html: str) -> None:
    # Sq of these trays runs 0.2-3.2 mm (rms_m = 0.2 mm x (a + 1)^2): the table says mm.
    assert "<th>Sq (mm)</th>" in report_html
    assert "e-0" not in report_html.split('<section id="summary">')[1].split("</section>")[0]
    assert "purple = positive" in report_html  # the palette's sign is stated


def test_view_of_the_main_result(small_store: dict) -> None:
    """Arena means of the planted pair lie on the fit; intervals hold the mean; labels named."""
    from service.analysis.grid import Selection, correspondence_report
    from service.report import correspondence_view, load_study

    res = open_resources(small_store["settings"])
    try:
        with res.sessionmaker() as session:
            corr = correspondence_report(
                session=session,
                recipe="default",
                selection=Selection(),
                n_permutations=99,
                n_boot=99,
            )
            view = correspondence_view(load_study(session=session), corr)
    finally:
        res.engine.dispose()
    pair = view["pairs"]["sq_m x stride_frequency_hz"]
    assert pair["x_label"] == "sq_m (mm)" and pair["y_label"] == "stride_frequency_hz (Hz)"
    names = [a["name"] for a in pair["arenas"]]
    assert names == [f"tray-{a}" for a in range(N_ARENAS)]  # ordered by Sq, named
    (x0, y0), (x1, y1) = pair["fit_line"]
    for a in pair["arenas"]:
        # y = 2.025 + 1 Hz/mm * Sq (mm) for the mean of subjects 0 and 1 (analytic)
        assert a["y"] == pytest.approx(2.025 + a["x"], abs=1e-9)
        assert a["y_low"] <= a["y"] <= a["y_high"]
    assert (y1 - y0) / (x1 - x0) == pytest.approx(1.0)
    assert len(pair["subjects"]) == len(SUBJECTS)
    assert view["grid"]["terrain"][0] == "sq_m"  # the fixed order: Sq first


def test_report_route_needs_a_token_and_serves_html(small_store: dict) -> None:
    from fastapi.testclient import TestClient

    from service.app import create_app

    app = create_app(small_store["settings"])
    with app.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=["read"])
    client = TestClient(app)
    assert client.get("/v1/correspondence/report").status_code == 401
    r = client.get(
        "/v1/correspondence/report?n_permutations=199&n_boot=99",
        headers={"Authorization": f"Bearer {secret}"},
    )
    assert r.status_code == 200, r.text[:300]
    assert r.headers["content-type"].startswith("text/html")
    assert "frame-ancestors 'none'" in r.headers["content-security-policy"]
    assert r.headers["x-content-type-options"] == "nosniff"
    assert '<section id="correspondence">' in r.text


def test_report_limited_to_a_study(small_store: dict) -> None:
    """Three of the four arenas and both subjects: 3 arenas and 3 x 2 = 6 trials reported."""
    from fastapi.testclient import TestClient

    from service.app import create_app
    from service.report import render_report

    chosen = small_store["arenas"][:3]
    res = open_resources(small_store["settings"])
    try:
        with res.sessionmaker() as session:
            if repo.list_studies(session=session)[1] == 0:
                study = repo.create_study(session=session, name="three trays")
                subjects, _ = repo.list_subjects(session=session)
                repo.add_study_members(
                    session=session,
                    study_id=study.id,
                    arena_ids=chosen,
                    subject_ids=[s.id for s in subjects],
                )
            html = render_report(
                session=session, store=res.store, n_permutations=99, n_boot=99, study="three trays"
            )
    finally:
        res.engine.dispose()
    summary = html.split('<section id="summary">')[1].split("</section>")[0]
    assert "<dt>study</dt><dd><code>three trays</code></dd>" in summary
    assert "<code>3 / 3</code>" in summary  # arenas scored / registered, in the study
    assert "<code>6 / 6</code>" in summary  # trials scored / uploaded, in the study
    assert "tray-3" not in html and "tray-2" in html  # the fourth arena is not in the study
    # 3 arenas: the smallest two-sided permutation p is 2/3! = 0.333 (Good 2005, ch. 3).
    assert "Only 3 arenas" in html
    # Every member arena is left out of its own prediction: said once, naming them all.
    expected = html.split('<section id="expected">')[1].split("</section>")[0]
    assert expected.count("belongs to the study") == 1
    assert "Each of tray-0, tray-1, tray-2 belongs to the study" in expected

    app = create_app(small_store["settings"])
    with app.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=["read"])
    client = TestClient(app, headers={"Authorization": f"Bearer {secret}"})
    r = client.get("/v1/correspondence/report", params={"study": "nope", "n_permutations": 99})
    assert r.status_code == 404 and "nope" in r.json()["detail"]
    r = client.get(
        "/v1/correspondence/report",
        params={"study": "three trays", "n_permutations": 99, "n_boot": 99},
    )
    assert r.status_code == 200 and "<code>three trays</code>" in r.text


def test_crowded_labels_are_pushed_apart_with_leaders() -> None:
    """Three points at one spot: labels end at least 7 % of the height apart (the rule in
    place_labels), the moved ones with a leader line; a lone point keeps its label."""
    from service.report.view import place_labels

    spots = place_labels([(0.5, 0.5)] * 3 + [(0.1, 0.9)], (0.0, 1.0), (0.0, 1.0))
    ys = sorted(y for _, y, _ in spots[:3])
    assert all(b - a >= 0.07 - 1e-12 for a, b in itertools.pairwise(ys))
    assert sum(leader for *_, leader in spots[:3]) == 2
    assert spots[3][2] is False and spots[3][1] == pytest.approx(0.9)


def test_numbers_are_printed_without_e_notation() -> None:
    from service.report.convention import fmt_number, si_scale

    assert fmt_number(1550.3) == "1550"  # 3 significant digits, plain
    assert fmt_number(-98765.4) == "-98800"
    assert fmt_number(float("nan")) == "n/a" and fmt_number(None) == "n/a"
    # SI prefixes (BIPM SI Brochure, 9th ed., table 7): 36 um, 1.6 mm, 300 Hz stay readable.
    assert si_scale([3.6e-5, 4.0e-5], "m") == (1e6, "um")
    assert si_scale([1.6e-3], "m") == (1e3, "mm")
    assert si_scale([300.0], "Hz") == (1.0, "Hz")
    assert si_scale([2.0], "bits") == (1.0, "bits")


def test_movement_panels_read_the_plot_arrays_the_job_stored(small_store: dict) -> None:
    # Views read what jobs stored: the arrays saved under (trial, recipe, "movement_plots")
    # come back as they were; with none stored there is no panel (nothing is recomputed).
    from service.report.panels import _derived, _NotStored

    res = open_resources(small_store["settings"])
    trial_id, recipe_hash = small_store["trials"][0], "ef" * 32  # a recipe no other test uses
    keys = ("recurrence_image", "ssa_pair", "class_sequence", "signal_time_s")
    arrays = {k: np.arange(6.0).reshape(2, 3) + i for i, k in enumerate(keys)}
    target = ("trial", trial_id)
    try:
        with res.sessionmaker() as session:
            with pytest.raises(_NotStored, match="rescore"):
                _derived(session, res.store, "movement_plots", target, recipe_hash)
            repo.save_derived(session=session, store=res.store, target_kind="trial",
                              target_id=trial_id, recipe_hash=recipe_hash,
                              kind="movement_plots", arrays=arrays)  # fmt: skip
            got = _derived(session, res.store, "movement_plots", target, recipe_hash)
    finally:
        res.engine.dispose()
    for k in keys:
        np.testing.assert_array_equal(got[k], arrays[k])
