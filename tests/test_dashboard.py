"""Dashboard pages and their data routes (served by the app; no browser here).

Header expectations follow the standards that define them: CSP ``frame-ancestors 'none'``
forbids framing (W3C CSP Level 2, section 7.7), ``X-Content-Type-Options: nosniff`` (WHATWG
Fetch, "X-Content-Type-Options" header).
"""

from __future__ import annotations

import numpy as np
import pytest
from fastapi.testclient import TestClient
from test_report import DX_M, build_small_store

from service.app import create_app
from service.dashboard import PAGE_PATHS
from storage import repo

PAGES = [
    "/ui/login",
    "/ui/arenas",
    "/ui/trials",
    "/ui/trials/1",
    "/ui/scans/1",
    "/ui/jobs",
    "/ui/correspondence",
    "/ui/setup",
]


@pytest.fixture(scope="module")
def client_and_token(tmp_path_factory: pytest.TempPathFactory):
    store = build_small_store(tmp_path_factory.mktemp("dash") / "data", duration_s=2.0)
    app = create_app(store["settings"])
    with app.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=["read"])
    return TestClient(app), {"Authorization": f"Bearer {secret}"}, store


@pytest.mark.parametrize("path", PAGES)
def test_pages_are_static_shells_with_strict_headers(client_and_token, path: str) -> None:
    client, _, _ = client_and_token
    r = client.get(path)
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/html")
    csp = r.headers["content-security-policy"]
    assert "frame-ancestors 'none'" in csp and "script-src 'self'" in csp
    assert "default-src 'self'" in csp and "unsafe-eval" not in csp
    assert r.headers["x-content-type-options"] == "nosniff"
    assert 'src="/ui/static/plotly.min.js"' in r.text and 'src="/ui/static/app.js"' in r.text
    assert "gaitscape_" not in r.text  # a shell never carries a token or data


def test_static_assets_are_served_and_others_are_not(client_and_token) -> None:
    client, _, _ = client_and_token
    js = client.get("/ui/static/plotly.min.js")
    assert js.status_code == 200 and js.headers["content-type"].startswith("text/javascript")
    assert len(js.content) > 1_000_000  # the full bundle, not a stub
    assert client.get("/ui/static/app.css").status_code == 200
    assert client.get("/ui/static/..%2Fpages.py").status_code == 404
    assert client.get("/ui/static/pages.py").status_code == 404


def test_page_paths_cover_only_ui_routes() -> None:
    assert PAGE_PATHS and all(p.startswith("/ui") for p in PAGE_PATHS)


def test_data_routes_need_a_token(client_and_token) -> None:
    client, _, store = client_and_token
    trial = store["trials"][0]
    assert client.get(f"/v1/dashboard/trials/{trial}/replay").status_code == 401
    assert client.get(f"/v1/dashboard/scans/{store['scans'][0]}/heightmap").status_code == 401


def test_heightmap_payload_is_block_averaged(client_and_token) -> None:
    client, auth, store = client_and_token
    r = client.get(f"/v1/dashboard/scans/{store['scans'][0]}/heightmap?max_px=40", headers=auth)
    assert r.status_code == 200
    body = r.json()
    z = np.array(body["z_m"], dtype=float)
    # 96 x 320 cells at 1 mm, blocks of ceil(320 / 40) = 8 -> 12 x 40.
    assert z.shape == (12, 40) and body["block"] == 8
    assert body["x_m"][1] - body["x_m"][0] == pytest.approx(8 * DX_M)


def test_replay_payload_holds_markers_and_ground(client_and_token) -> None:
    client, auth, store = client_and_token
    r = client.get(f"/v1/dashboard/trials/{store['trials'][0]}/replay?max_frames=50", headers=auth)
    assert r.status_code == 200
    body = r.json()
    frames = np.array(body["markers_m"], dtype=float)
    assert frames.shape[0] <= 50 and frames.shape[1:] == (len(body["marker_names"]), 3)
    assert set(body["feet"]) == {"LF", "RF", "LH", "RH"}
    assert body["ground"] is not None and body["ground"]["arena_id"] == body["arena_id"]
    # 2 s at the demo's 300 Hz (common practice rate) decimated to <= 50 frames.
    assert body["frame_step"] == int(np.ceil(600 / 50))
    assert client.get("/v1/dashboard/trials/9999/replay", headers=auth).status_code == 404


def test_shell_has_a_study_selector_defaulting_to_all(client_and_token) -> None:
    client, _, _ = client_and_token
    page = client.get("/ui/arenas").text
    assert '<select id="study" name="study">' in page
    assert '<option value="">all studies</option>' in page  # the default sends no study=


def test_app_js_sends_the_study_on_lists_correspondence_report_and_downloads() -> None:
    import re

    from service.dashboard.pages import STATIC_DIR

    js = (STATIC_DIR / "app.js").read_text()
    assert "<script" not in js and "eval(" not in js and "new Function" not in js  # strict CSP
    assert "sessionStorage.getItem(STUDY_KEY)" in js and 'fetch("/v1/studies' not in js
    assert 'all("/v1/studies")' in js  # the selector is filled from GET /v1/studies
    # Every list fetch goes through scoped(), which appends study=<name> when one is chosen
    # (the sign-in probe, api("/v1/arenas?limit=1"), is no list and stays unscoped).
    lists = r'"/v1/(?:arenas|subjects|scans|trials)["?]'
    assert len(re.findall(r"all\(scoped\(" + lists, js)) >= 5
    assert re.findall(r"all\((?!scoped\()" + lists, js) == []
    # The set-up forms list the whole store on purpose, through everything() only.
    assert len(re.findall(r"everything\(" + lists, js)) == 3
    # Correspondence, report and download URLs are built from q(), which carries the study.
    q_def = re.search(r"const q = \(\) => (.+);", js).group(1)
    assert "studyParam()" in q_def
    for path in ("/v1/correspondence?", "/v1/export/scores?", "/v1/correspondence/report?"):
        lines = [ln for ln in js.splitlines() if path in ln]
        assert lines and all("q()" in ln for ln in lines), path


def test_lists_the_dashboard_calls_accept_a_study(client_and_token) -> None:
    client, auth, store = client_and_token
    with client.app.state.sessionmaker() as session:
        if repo.list_studies(session=session)[1] == 0:
            study = repo.create_study(session=session, name="first tray")
            repo.add_study_members(
                session=session, study_id=study.id, arena_ids=store["arenas"][:1]
            )
    # One arena as the only member: its scan is in, no trial is (no subject is a member).
    for path, n in (("/v1/arenas", 1), ("/v1/scans", 1), ("/v1/trials", 0), ("/v1/subjects", 0)):
        body = client.get(path, params={"study": "first tray"}, headers=auth).json()
        assert body["count"] == n, path


def test_whoami_reports_the_token_scopes(client_and_token) -> None:
    client, auth, _ = client_and_token
    assert client.get("/v1/dashboard/whoami").status_code == 401
    assert client.get("/v1/dashboard/whoami", headers=auth).json()["scopes"] == ["read"]
    with client.app.state.sessionmaker() as session:
        _, admin = repo.create_token(session=session, scopes=["admin"])
    scopes = client.get("/v1/dashboard/whoami", headers={"Authorization": f"Bearer {admin}"})
    assert set(scopes.json()["scopes"]) == {"read", "upload", "analyse", "admin"}


def test_setup_routes_check_the_scope_again(client_and_token) -> None:
    """A read token that bypasses the disabled form still cannot create (403)."""
    client, auth, _ = client_and_token
    r = client.post("/v1/arenas", json={"name": "sneaky", "kind": "runway"}, headers=auth)
    assert r.status_code == 403
