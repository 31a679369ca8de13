"""The dashboard in a real headless Chromium (Debian's, driven by Playwright) on a live server.

Skipped when Chromium or Playwright is missing, unless GAITSCAPE_REQUIRE_SERVICES=1.
Screenshots go to test-artifacts/ (gitignored).
"""

from __future__ import annotations

import html
import os
import re
import shutil
from pathlib import Path

import pytest
from test_report import N_ARENAS, build_small_store

from service.app import create_app
from storage import repo

pytestmark = pytest.mark.browser

CHROMIUM = os.environ.get("GAITSCAPE_CHROMIUM", "/usr/bin/chromium")
ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    # WebGL (the 3D replay) without a GPU: Chromium's software rasteriser.
    "--use-angle=swiftshader",
    "--enable-unsafe-swiftshader",
]
ARTIFACTS = Path(__file__).resolve().parent.parent / "test-artifacts"
REQUIRED = os.environ.get("GAITSCAPE_REQUIRE_SERVICES") == "1"
STUDY = "three trays"


def _need(ok: bool, why: str) -> None:
    if not ok:
        if REQUIRED:
            pytest.fail(why + " (GAITSCAPE_REQUIRE_SERVICES=1)")
        pytest.skip(why)


@pytest.fixture(scope="module")
def live(tmp_path_factory: pytest.TempPathFactory):
    _need(Path(CHROMIUM).exists() or shutil.which(CHROMIUM) is not None, f"no {CHROMIUM}")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _need(False, "playwright is not installed")
    from service.demo import _serving

    store = build_small_store(tmp_path_factory.mktemp("browser") / "data", duration_s=2.0)
    app = create_app(store["settings"])
    with app.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=["read"])
        _, admin = repo.create_token(session=session, scopes=["admin"])
        # Three of the arenas with both subjects: 3 arenas, 3 x 2 trials in the study.
        study = repo.create_study(session=session, name=STUDY)
        subjects, _ = repo.list_subjects(session=session)
        repo.add_study_members(
            session=session,
            study_id=study.id,
            arena_ids=store["arenas"][:3],
            subject_ids=[s.id for s in subjects],
        )
    ARTIFACTS.mkdir(exist_ok=True)
    with _serving(app) as base, sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=ARGS, headless=True)
        context = browser.new_context(viewport={"width": 1280, "height": 900})
        page = context.new_page()
        problems: list[str] = []
        page.on("console", lambda m: problems.append(m.text) if m.type == "error" else None)
        page.on("pageerror", lambda e: problems.append(str(e)))
        yield {
            "base": base,
            "page": page,
            "secret": secret,
            "admin": admin,
            "problems": problems,
            "store": store,
        }
        context.close()
        browser.close()


def _shot(page, name: str) -> None:
    page.screenshot(path=str(ARTIFACTS / f"dashboard-{name}.png"), full_page=True)


def test_failed_login_is_refused(live) -> None:
    page = live["page"]
    page.goto(live["base"] + "/ui/login")
    page.fill("#token", "gaitscape_not-a-real-token")
    page.click("button[type=submit]")
    page.wait_for_selector("#login-msg.error")
    assert "Token refused" in page.inner_text("#login-msg")
    assert page.evaluate("sessionStorage.getItem('gaitscape-token')") is None
    _shot(page, "login-refused")
    live["problems"].clear()  # the browser logs the refused 401 itself; that one is expected


def test_login_and_every_page(live) -> None:
    from playwright.sync_api import expect

    page, base, store = live["page"], live["base"], live["store"]
    page.goto(base + "/ui/login")
    page.fill("#token", live["secret"])
    page.click("button[type=submit]")
    page.wait_for_url("**/ui/arenas")
    page.wait_for_selector("table tbody tr")
    assert page.locator("table tbody tr").count() == N_ARENAS
    assert "tray-0" in page.inner_text("table")
    _shot(page, "arenas")

    page.goto(base + "/ui/trials")
    page.wait_for_selector("#trial-table tbody tr")
    assert page.locator("#trial-table tbody tr").count() == len(store["trials"])
    page.select_option("#f-arena_id", str(store["arenas"][0]))
    page.click("#trial-filters button[type=submit]")
    # Locator assertions run in Playwright's own world, so the page's strict CSP
    # (no eval) does not block them the way wait_for_function strings are.
    expect(page.locator("#trial-table tbody tr")).to_have_count(2)
    _shot(page, "trials")

    trial = store["trials"][0]
    page.goto(f"{base}/ui/trials/{trial}")
    page.wait_for_selector("#scores table")
    assert "stride_frequency_hz" in page.inner_text("#scores")
    page.wait_for_selector("#replay.js-plotly-plot", timeout=30_000)
    page.wait_for_selector("#replay canvas", state="attached", timeout=30_000)
    page.focus("#frame")
    page.keyboard.press("ArrowRight")  # keyboard moves the replay
    expect(page.locator("#clock")).to_have_text(re.compile(r"^t = "))
    assert page.inner_text("#clock") != "t = 0 s"
    _shot(page, "trial")

    page.goto(f"{base}/ui/scans/{store['scans'][0]}")
    page.wait_for_selector("#scores table")
    assert "sq_m" in page.inner_text("#scores")
    page.wait_for_selector("#surface.js-plotly-plot", timeout=30_000)
    # A tray is drawn in millimetres; the unit follows the extent (a field site in metres,
    # a terrain model in kilometres), the same on every axis and on the colour bar.
    assert "height (mm)" in page.inner_text("#surface")
    units = page.evaluate(
        "[lengthUnit([0, 0.3], [0, 0.2]), lengthUnit([0, 870], [0, 610]), lengthUnit([0, 12e3])]"
    )
    assert units == [[1000, "mm"], [1, "m"], [0.001, "km"]]
    _shot(page, "scan")

    page.goto(base + "/ui/jobs")
    page.wait_for_selector("#job-summary:has-text('jobs')")
    assert page.inner_text("#job-summary").startswith("0 jobs")
    _shot(page, "jobs")

    page.goto(base + "/ui/correspondence")
    page.wait_for_selector("#heatmap.js-plotly-plot", timeout=60_000)
    counts = page.inner_text("#corr-counts")
    assert counts.startswith(f"{N_ARENAS} arenas, 2 subjects, {len(store['trials'])} trials")
    assert "stride_frequency_hz" in page.inner_text("#corr-out table")
    assert page.locator("#terrain option").count() >= 2
    _shot(page, "correspondence")
    assert live["problems"] == [], live["problems"]


def test_study_selector_limits_lists_and_correspondence(live) -> None:
    from playwright.sync_api import expect

    page, base, store = live["page"], live["base"], live["store"]
    page.goto(base + "/ui/arenas")  # still signed in (sessionStorage of this tab)
    expect(page.locator("#content table tbody tr")).to_have_count(N_ARENAS)
    expect(page.locator("#study option")).to_have_count(2)  # all studies + the one study
    with page.expect_request(lambda r: "/v1/arenas?" in r.url and "study=three" in r.url):
        page.select_option("#study", STUDY)  # the page reloads with the study applied
    expect(page.locator("#content table tbody tr")).to_have_count(3)
    expect(page.locator("#study")).to_have_value(STUDY)

    page.goto(base + "/ui/trials")  # the choice is kept across pages
    expect(page.locator("#trial-table tbody tr")).to_have_count(6)
    expect(page.locator("#f-arena_id option")).to_have_count(1 + 3)  # "any" + study arenas

    page.goto(base + "/ui/correspondence")
    expect(page.locator("#corr-study")).to_have_text(f"Study: {STUDY}", timeout=60_000)
    expect(page.locator("#corr-counts")).to_have_text(
        re.compile(r"^3 arenas, 2 subjects, 6 trials"), timeout=60_000
    )
    with page.expect_request(lambda r: "/v1/correspondence/report?" in r.url) as report:
        page.get_by_role("button", name="Report (HTML)").click()
    assert "study=three%20trays" in report.value.url
    _shot(page, "correspondence-study")

    # The scan page's expected-movement panel fits on the chosen study, like the other pages.
    with page.expect_request(lambda r: "/expected-movement?" in r.url) as expected:
        page.goto(f"{base}/ui/scans/{store['scans'][0]}")
    assert "study=three%20trays" in expected.value.url

    page.goto(base + "/ui/arenas")
    expect(page.locator("#content table tbody tr")).to_have_count(3)
    with page.expect_request(lambda r: "/v1/arenas?" in r.url and "study=" not in r.url):
        page.select_option("#study", "")  # back to all studies
    expect(page.locator("#content table tbody tr")).to_have_count(len(store["arenas"]))
    assert live["problems"] == [], live["problems"]


def test_signed_out_page_asks_for_the_token(live) -> None:
    page = live["page"]
    page.evaluate("sessionStorage.clear()")
    page.goto(live["base"] + "/ui/jobs")
    page.wait_for_selector("#login-form")
    assert page.locator("#token").is_visible()


def _sign_in(page, base: str, secret: str) -> None:
    page.goto(base + "/ui/login")
    page.evaluate("sessionStorage.clear()")
    page.fill("#token", secret)
    page.click("button[type=submit]")
    page.wait_for_url("**/ui/arenas")


def test_main_result_figure_and_one_truth_with_the_report(live) -> None:
    """The figure a person sees: arena names, axis titles with SI-prefixed units, the legend;
    and the strongest-pairs table and settings read exactly as in the report."""
    from playwright.sync_api import expect

    page, base = live["page"], live["base"]
    _sign_in(page, base, live["secret"])
    page.goto(base + "/ui/correspondence")
    page.wait_for_selector("#main-result.js-plotly-plot", timeout=120_000)
    expect(page.locator("#pair")).to_have_value("sq_m x stride_frequency_hz")
    svg = page.inner_text("#main-result")
    for name in (f"tray-{a}" for a in range(N_ARENAS)):
        assert name in svg  # every arena named beside its point
    assert "sq_m (mm)" in svg and "stride_frequency_hz (Hz)" in svg
    assert "arena-level fit" in svg and "subjects (mean per arena)" in svg
    assert "1 Hz per mm" in page.inner_text("#main-caption")
    assert "purple = positive" in page.inner_text("#grid-legend")
    _shot(page, "main-result")

    dash_rows = [
        [c.strip() for c in row.split("\t")]
        for row in page.inner_text("#corr-out table tbody").strip().split("\n")
    ]
    settings = page.inner_text("#corr-settings").removeprefix("Statistics: ")
    r = page.request.get(
        base + "/v1/correspondence/report",
        headers={"Authorization": f"Bearer {live['secret']}"},
        timeout=600_000,
    )
    assert r.ok
    report = r.text()
    table = report.split("<table id='strongest'>")[1].split("</table>")[0]
    report_rows = [
        [html.unescape(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", row)]
        for row in table.split("<tr>")[2:]
    ]
    assert dash_rows == report_rows  # every number shown in both
    assert settings in html.unescape(report)
    assert live["problems"] == [], live["problems"]


def test_setup_forms_create_records(live) -> None:
    from playwright.sync_api import expect

    page, base, store = live["page"], live["base"], live["store"]
    _sign_in(page, base, live["secret"])  # read only: the forms say which scope they need
    page.goto(base + "/ui/setup")
    expect(page.locator("#scopes")).to_have_text("This token may: read.")
    expect(page.locator("#arena-name")).to_be_disabled()
    assert "Needs a token with the 'upload' scope." in page.inner_text("#arena-form")

    _sign_in(page, base, live["admin"])
    page.goto(base + "/ui/setup")
    expect(page.locator("#arena-name")).to_be_enabled()
    page.fill("#arena-name", "form tray")
    page.fill("#arena-band-lo", "4")
    page.fill("#arena-band-hi", "60")
    page.click("#arena-form button[type=submit]")
    expect(page.locator("#arena-form-msg")).to_have_text(re.compile(r"^Created arena 'form tray'"))

    page.select_option("#subject-from-trial", str(store["trials"][0]))
    expect(page.locator("#marker-names option")).to_have_count(8)  # the demo rig's markers
    expect(page.locator("#role-LF")).to_have_value("foot_LF")
    page.fill("#subject-label", "vole-form")
    page.fill("#role-anterior", "snout")
    page.fill("#role-posterior", "tailbase")
    page.click("#subject-form button[type=submit]")
    expect(page.locator("#subject-form-msg")).to_have_text(
        re.compile(r"^Created subject 'vole-form'")
    )
    page.fill("#study-name", "form study")
    page.click("#study-form button[type=submit]")
    expect(page.locator("#study-form-msg")).to_have_text(re.compile(r"^Created study 'form study'"))
    page.fill("#recipe-name", "coarse")
    page.fill("#recipe-params", '{"movement": {"ordinal_order": 3}}')
    page.click("#recipe-form button[type=submit]")
    expect(page.locator("#recipe-form-msg")).to_have_text(re.compile(r"coarse@1"))
    _shot(page, "setup")
    page.goto(base + "/ui/arenas")
    expect(page.locator("#content table")).to_contain_text("4 to 60")  # band shown in mm
    assert live["problems"] == [], live["problems"]


def test_replay_controls(live) -> None:
    from playwright.sync_api import expect

    page, base, store = live["page"], live["base"], live["store"]
    _sign_in(page, base, live["secret"])
    page.goto(f"{base}/ui/trials/{store['trials'][0]}")
    expect(page.locator("main h1")).to_have_text(re.compile(r"^Trial \d+: vole-a on tray-0$"))
    page.wait_for_selector("#replay canvas", state="attached", timeout=30_000)
    assert [o.strip() for o in page.locator("#speed option").all_inner_texts()] == [
        "0.25x",
        "0.5x",
        "1x (real time)",
    ]
    expect(page.locator("#speed")).to_have_value("1")
    page.select_option("#exaggeration", "10")
    expect(page.locator("#replay-note")).to_contain_text("Heights drawn 10x")
    expect(page.locator("#scores tbody")).to_contain_text("default@1")
    # Recipe labels, never hash prefixes (10 hex digits).
    assert not re.search(r"\b[0-9a-f]{10}\b", page.inner_text("#scores"))
    # Marker names are not printed in the scene (they overlap); they show on hover.
    assert "foot_LF" not in page.inner_text("#replay")
    import time

    # The button is enabled once the scene is drawn and wired; the clock then reads 0.
    expect(page.locator("#play")).to_be_enabled(timeout=30_000)
    expect(page.locator("#clock")).to_have_text("t = 0 s")
    began = time.monotonic()
    page.click("#play")
    expect(page.locator("#play")).to_have_text("Pause")
    # Playback stops by itself at the last frame (the trial lasts 2 s); on a loaded machine
    # software-rendered redraws are slow, so frames are skipped, never slowed down.
    expect(page.locator("#play")).to_have_text("Play", timeout=60_000)
    wall = time.monotonic() - began
    t = float(page.inner_text("#clock").removeprefix("t = ").removesuffix(" s"))
    # Real time: the last frame (t near 2 s) is shown, and it was not reached sooner than
    # the recording time that it shows (the clock follows the wall clock, never runs ahead).
    assert 1.5 < t <= 2.0 + 1e-9, t
    assert wall >= t - 0.1, (t, wall)
    _shot(page, "replay")
    assert live["problems"] == [], live["problems"]
