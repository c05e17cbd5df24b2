"""API documentation pages served from this host: Swagger UI at /docs, Redoc at /redoc.

The JavaScript and CSS of both come from the ``fastapi-offline`` package (a dependency from
the registry that ships them), so the pages work on a network without internet access. The
pages themselves are ours: no inline script, so /docs runs under the dashboard's
Content-Security-Policy. The OpenAPI document is given a bearer-key security scheme and each
operation the role its key needs (see :func:`describe_security`).
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from html import escape
from importlib.resources import files
from pathlib import Path

from fastapi import FastAPI
from fastapi.responses import HTMLResponse
from fastapi.routing import APIRoute
from fastapi.staticfiles import StaticFiles

ASSETS_URL = "/docs-assets"
OWN_URL = "/docs-static"
OWN = Path(__file__).resolve().parent / "docs_static"
SCHEME = "bearerKey"
# /docs runs under the dashboard's policy (service/web/install.py). Redoc styles its page
# with <style> elements it writes at run time and searches in a worker made from a blob, so
# its page also allows those two; nothing is loaded from outside the host on either page.
REDOC_CSP = ("default-src 'self'; img-src 'self' data:; style-src 'self' 'unsafe-inline'; "
             "script-src 'self'; worker-src 'self' blob:; object-src 'none'; base-uri 'none'; "
             "form-action 'self'; frame-ancestors 'none'")
ROLE_TEXT = {"field": "any key (field, analyst or admin)", "analyst": "an analyst or admin key",
             "admin": "an admin key"}


def asset_dir() -> Path:
    """Folder of the packaged Swagger UI and Redoc files."""
    return Path(str(files("fastapi_offline") / "static"))


def docs_csp() -> str:
    from ..web.install import UI_HEADERS
    return UI_HEADERS["Content-Security-Policy"]


def _headers(csp: str) -> dict[str, str]:
    return {"Content-Security-Policy": csp, "X-Content-Type-Options": "nosniff",
            "X-Frame-Options": "DENY", "Referrer-Policy": "same-origin"}


@dataclass(frozen=True)
class DocsPage:
    """One documentation page: its title's end, the element the viewer fills, the viewer's
    script (and stylesheet) from the package's files, and our own script that starts it."""

    label: str
    mount: str
    bundle: str
    init: str
    stylesheet: str | None = None

    def html(self, title: str, openapi_url: str) -> str:
        style = (f'<link rel="stylesheet" href="{ASSETS_URL}/{self.stylesheet}">\n'
                 if self.stylesheet else "")
        return f"""<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>{escape(title)} - {self.label}</title>
{style}<link rel="icon" href="{ASSETS_URL}/favicon.png">
</head>
<body>
<div id="{self.mount}" data-openapi-url="{escape(openapi_url)}"></div>
<script src="{ASSETS_URL}/{self.bundle}"></script>
<script src="{OWN_URL}/{self.init}"></script>
</body>
</html>
"""


SWAGGER = DocsPage("API documentation", "swagger-ui", "swagger-ui-bundle.js", "swagger-init.js",
                   stylesheet="swagger-ui.css")
REDOC = DocsPage("API reference", "redoc", "redoc.standalone.js", "redoc-init.js")


def _route_role(route: APIRoute) -> str | None:
    """The role a route's key dependency asks for (deps.require marks it), or None."""
    stack = list(route.dependant.dependencies)
    while stack:
        dep = stack.pop()
        role = getattr(dep.call, "seqaudit_role", None)
        if role is not None:
            return role
        stack.extend(dep.dependencies)
    return None


def _api_routes(app: FastAPI):
    """(full path, APIRoute) of every route in the OpenAPI document."""
    try:
        from fastapi.routing import iter_route_contexts   # FastAPI >= 0.16x: routers kept
    except ImportError:                                    # older: routes copied into the app
        for route in app.routes:
            if isinstance(route, APIRoute) and route.include_in_schema:
                yield route.path_format, route
        return
    for ctx in iter_route_contexts(app.routes):
        route = ctx.original_route
        if isinstance(route, APIRoute) and route.include_in_schema and ctx.path_format:
            yield ctx.path_format, route


def describe_security(app: FastAPI, schema: dict) -> dict:
    """Add the bearer-key scheme and, per operation, ``security`` and the role it needs."""
    comps = schema.setdefault("components", {})
    comps.setdefault("securitySchemes", {})[SCHEME] = {
        "type": "http", "scheme": "bearer",
        "description": "An API key made with `seqaudit keys add` (or POST /v1/keys), sent as "
                       "`Authorization: Bearer KEY`. Roles rank field < analyst < admin."}
    for path, route in _api_routes(app):
        ops = schema.get("paths", {}).get(path, {})
        role = _route_role(route)
        for method in route.methods:
            op = ops.get(method.lower())
            if op is None:
                continue
            if role is None:
                op["security"] = []
                op["x-role"] = "none"
                text = "Open: no key needed."
            else:
                op["security"] = [{SCHEME: []}]
                op["x-role"] = role
                text = f"Role: needs {ROLE_TEXT[role]}."
            op["description"] = (text + "\n\n" + op["description"]) if op.get("description") \
                else text
    return schema


def install_docs(app: FastAPI, docs_url: str | None = "/docs",
                 redoc_url: str | None = "/redoc") -> None:
    """Serve the docs pages (either may be None to leave it out) and describe security in
    the OpenAPI document. Create the app with ``docs_url=None, redoc_url=None``."""

    made = app.openapi   # FastAPI's own (bound) builder

    def openapi() -> dict:
        if app.openapi_schema is None:
            app.openapi_schema = describe_security(app, made())
        return app.openapi_schema

    app.openapi = openapi
    if docs_url is None and redoc_url is None:
        return
    app.mount(ASSETS_URL, StaticFiles(directory=str(asset_dir())), name="docs-assets")
    app.mount(OWN_URL, StaticFiles(directory=str(OWN)), name="docs-static")
    openapi_url = app.openapi_url or "/openapi.json"

    for url, page, csp, name in ((docs_url, SWAGGER, docs_csp, "swagger_ui"),
                                 (redoc_url, REDOC, lambda: REDOC_CSP, "redoc")):
        if url is not None:
            _serve_page(app, url, page, csp, name, openapi_url)


def _serve_page(app: FastAPI, url: str, page: DocsPage, csp: Callable[[], str], name: str,
                openapi_url: str) -> None:
    """GET ``url``: the page over the app's OpenAPI document, with its security headers."""

    @app.get(url, include_in_schema=False, name=name)
    async def docs_page() -> HTMLResponse:
        return HTMLResponse(page.html(app.title, openapi_url), headers=_headers(csp()))
