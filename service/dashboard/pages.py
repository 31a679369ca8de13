"""Dashboard pages: static HTML shells under ``/ui``; their data calls carry the token.

The shells hold no data and need no token (a browser cannot send a Bearer header when it
follows a link); ``app.js`` asks for the token once, keeps it in ``sessionStorage`` and sends it
as ``Authorization: Bearer`` on every ``fetch``. The header's study selector (``#study``, filled
from ``GET /v1/studies``, kept in ``sessionStorage``) adds ``study=`` to the list,
correspondence, report and download requests; empty means all studies. Every page answer
carries a strict CSP.
"""

from __future__ import annotations

import html
from pathlib import Path

from fastapi import APIRouter, HTTPException
from fastapi.responses import FileResponse, HTMLResponse, RedirectResponse

__all__ = ["PAGE_HEADERS", "PAGE_PATHS", "router"]

STATIC_DIR = Path(__file__).parent / "static"
# plotly.js does its own styling through inline style attributes and <style> elements, so
# style-src needs 'unsafe-inline'; scripts, data and images come from this origin only.
CSP = (
    "default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
    "img-src 'self' data: blob:; connect-src 'self'; font-src 'self'; object-src 'none'; "
    "base-uri 'none'; form-action 'self'; frame-ancestors 'none'"
)
PAGE_HEADERS = {
    "Content-Security-Policy": CSP,
    "X-Content-Type-Options": "nosniff",
    "X-Frame-Options": "DENY",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
}
NAV = (
    ("arenas", "/ui/arenas", "Arenas"),
    ("trials", "/ui/trials", "Trials"),
    ("jobs", "/ui/jobs", "Jobs"),
    ("correspondence", "/ui/correspondence", "Correspondence"),
    ("setup", "/ui/setup", "Set up"),
)
TITLES = {
    "login": "Sign in",
    "arenas": "Arenas",
    "trials": "Trials",
    "trial": "Trial",
    "scan": "Scan",
    "jobs": "Jobs",
    "correspondence": "Correspondence",
    "setup": "Set up",
}


def _plotly_js() -> Path | None:
    try:
        import plotly
    except ImportError:
        return None
    path = Path(plotly.__file__).parent / "package_data" / "plotly.min.js"
    return path if path.is_file() else None


STATIC_FILES = {"app.js": "text/javascript", "app.css": "text/css"}


def shell(page: str, ident: int | None = None) -> HTMLResponse:
    """The HTML shell of one page; ``app.js`` fills ``<main>``."""
    nav = "".join(
        f'<a href="{href}"{" aria-current=page" if key == page else ""}>{label}</a>'
        for key, href, label in NAV
    )
    title = html.escape(TITLES.get(page, page) + ("" if ident is None else f" {ident}"))
    body = f"""<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{title} - gaitscape</title>
<link rel="stylesheet" href="/ui/static/app.css">
<script src="/ui/static/plotly.min.js" defer></script>
<script src="/ui/static/app.js" defer></script>
</head><body data-page="{page}" data-id="{"" if ident is None else ident}">
<a class="skip" href="#main">Skip to content</a>
<header><span class="brand">gaitscape</span><nav aria-label="main">{nav}</nav>
<label id="study-pick" for="study" hidden>study <select id="study" name="study">
<option value="">all studies</option></select></label>
<span id="who" aria-live="polite"></span>
<button id="signout" type="button" hidden>Sign out</button></header>
<main id="main" tabindex="-1"><h1>{title}</h1><div id="content" aria-live="polite">
<noscript>This dashboard needs JavaScript.</noscript></div></main>
</body></html>"""
    return HTMLResponse(body, headers=PAGE_HEADERS)


router = APIRouter(prefix="/ui", include_in_schema=False)


@router.get("")
def ui_root() -> RedirectResponse:
    return RedirectResponse("/ui/arenas", status_code=307)


@router.get("/login")
def login_page() -> HTMLResponse:
    return shell("login")


@router.get("/arenas")
def arenas_page() -> HTMLResponse:
    return shell("arenas")


@router.get("/trials")
def trials_page() -> HTMLResponse:
    return shell("trials")


@router.get("/trials/{trial_id}")
def trial_page(trial_id: int) -> HTMLResponse:
    return shell("trial", trial_id)


@router.get("/scans/{scan_id}")
def scan_page(scan_id: int) -> HTMLResponse:
    return shell("scan", scan_id)


@router.get("/jobs")
def jobs_page() -> HTMLResponse:
    return shell("jobs")


@router.get("/correspondence")
def correspondence_page() -> HTMLResponse:
    return shell("correspondence")


@router.get("/setup")
def setup_page() -> HTMLResponse:
    return shell("setup")


@router.get("/static/{name}")
def static_file(name: str) -> FileResponse:
    # A fixed list: no path from the request ever reaches the file system.
    if name == "plotly.min.js":
        path = _plotly_js()
        media = "text/javascript"
    elif name in STATIC_FILES:
        path, media = STATIC_DIR / name, STATIC_FILES[name]
    else:
        path = None
    if path is None:
        raise HTTPException(status_code=404, detail=f"no static file {name!r}")
    headers = {"X-Content-Type-Options": "nosniff", "Cache-Control": "public, max-age=3600"}
    return FileResponse(path, media_type=media, headers=headers)


#: Page routes that need no token (HTML shells and static assets; their data calls do).
PAGE_PATHS = frozenset(
    "/ui" + r.path.removeprefix("/ui") for r in router.routes if hasattr(r, "path")
)
