"""Offline interactive API docs: /docs (Swagger UI) and /redoc (ReDoc) from local files.

The scripts and styles come from the ``fastapi-offline`` package's bundled copies (a registry
package, pinned in pyproject.toml) and are served by this service under ``/docs/static``;
the pages load nothing from another origin and carry no inline script, so they work on a lab
network with no internet and under a script-src 'self' policy.
"""

from __future__ import annotations

import html
from pathlib import Path

from fastapi import FastAPI, HTTPException
from fastapi.responses import FileResponse, HTMLResponse

__all__ = ["DOCS_PATHS", "install_docs"]

_OWN = Path(__file__).parent / "docs_assets"
_TYPES = {".js": "text/javascript", ".css": "text/css", ".png": "image/png"}
DOCS_PATHS = ("/docs", "/redoc", "/docs/static")


def _bundled() -> Path | None:
    try:
        import fastapi_offline
    except ImportError:
        return None
    path = Path(fastapi_offline.__file__).parent / "static"
    return path if path.is_dir() else None


def _asset(name: str) -> Path | None:
    # A fixed list of names: nothing from the request reaches the file system.
    own = {"swagger-init.js", "redoc-init.js"}
    bundled = {"swagger-ui-bundle.js", "swagger-ui.css", "redoc.standalone.js", "favicon.png"}
    if name in own:
        return _OWN / name
    base = _bundled()
    if name in bundled and base is not None and (base / name).is_file():
        return base / name
    return None


def _page(title: str, openapi_url: str, head: str, body: str) -> HTMLResponse:
    return HTMLResponse(
        f"""<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{html.escape(title)}</title>
<link rel="icon" href="/docs/static/favicon.png">{head}
</head><body data-openapi="{html.escape(openapi_url)}">{body}</body></html>""",
        headers={"Cache-Control": "no-store"},
    )


def install_docs(app: FastAPI, *, openapi_url: str = "/openapi.json") -> None:
    """Add /docs, /redoc and their static files to ``app`` (create it with docs_url=None)."""
    title = app.title

    @app.get("/docs", include_in_schema=False)
    def swagger_ui() -> HTMLResponse:
        if _bundled() is None:
            raise HTTPException(503, "interactive docs need the fastapi-offline package")
        return _page(
            f"{title} - API docs",
            openapi_url,
            '<link rel="stylesheet" href="/docs/static/swagger-ui.css">'
            '<script src="/docs/static/swagger-ui-bundle.js" defer></script>'
            '<script src="/docs/static/swagger-init.js" defer></script>',
            '<div id="swagger-ui"></div>',
        )

    @app.get("/redoc", include_in_schema=False)
    def redoc() -> HTMLResponse:
        if _bundled() is None:
            raise HTTPException(503, "interactive docs need the fastapi-offline package")
        return _page(
            f"{title} - API reference",
            openapi_url,
            '<script src="/docs/static/redoc.standalone.js" defer></script>'
            '<script src="/docs/static/redoc-init.js" defer></script>',
            '<div id="redoc"></div>',
        )

    @app.get("/docs/static/{name}", include_in_schema=False)
    def docs_static(name: str) -> FileResponse:
        path = _asset(name)
        if path is None:
            raise HTTPException(404, f"no docs asset {name!r}")
        return FileResponse(
            path,
            media_type=_TYPES.get(path.suffix, "application/octet-stream"),
            headers={"Cache-Control": "public, max-age=86400", "X-Content-Type-Options": "nosniff"},
        )
