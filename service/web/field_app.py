"""The inspectors' field app at /field: a static, offline-first page for field keys.

The page, its script, style, manifest and icon are plain files in ``web/field/``; the service
worker's cache name carries a digest of those files, so a new release replaces the tablets'
cached copy on their next visit while the network is up. The app talks to the ordinary API
(``GET /v1/assignments``, ``POST /v1/records``) with the field key as a bearer token; it has
no routes of its own beyond these files.
"""
from __future__ import annotations

import hashlib
from pathlib import Path

from fastapi import APIRouter, FastAPI
from fastapi.responses import Response

FIELD = Path(__file__).resolve().parent / "field"
# (URL under /field, file, media type); the first is the page itself.
SHELL = (
    ("", "index.html", "text/html; charset=utf-8"),
    ("/field.js", "field.js", "text/javascript; charset=utf-8"),
    ("/outbox.js", "outbox.js", "text/javascript; charset=utf-8"),
    ("/field.css", "field.css", "text/css; charset=utf-8"),
    ("/manifest.webmanifest", "manifest.webmanifest", "application/manifest+json"),
    ("/icon.svg", "icon.svg", "image/svg+xml"),
)
CSP = ("default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'; "
       "connect-src 'self'; worker-src 'self'; manifest-src 'self'; object-src 'none'; "
       "base-uri 'none'; form-action 'self'; frame-ancestors 'none'")
HEADERS = {
    "Content-Security-Policy": CSP,
    "X-Content-Type-Options": "nosniff",
    "X-Frame-Options": "DENY",
    "Referrer-Policy": "same-origin",
    # Always asked again when online; offline, the service worker answers from its cache.
    "Cache-Control": "no-cache",
}


def _files() -> tuple[dict[str, tuple[bytes, str]], str]:
    files = {url: ((FIELD / name).read_bytes(), media) for url, name, media in SHELL}
    digest = hashlib.sha256(b"".join(body for body, _ in files.values())).hexdigest()[:16]
    worker = (FIELD / "sw.js").read_text(encoding="utf-8")
    shell_urls = ", ".join(f'"/field{url}"' for url, _, _ in SHELL)
    worker = worker.replace("__CACHE__", f"seqaudit-field-{digest}").replace(
        "__SHELL__", shell_urls)
    files["/sw.js"] = (worker.encode("utf-8"), "text/javascript; charset=utf-8")
    return files, digest


def install_field_app(app: FastAPI) -> None:
    files, _ = _files()
    router = APIRouter(include_in_schema=False)

    def serve(url: str):
        body, media = files[url]
        headers = dict(HEADERS)
        if url == "/sw.js":
            # the worker lives under /field/ but controls /field itself too
            headers["Service-Worker-Allowed"] = "/field"

        async def handler():
            return Response(body, media_type=media, headers=headers)
        return handler

    for url in files:
        router.add_api_route("/field" + url, serve(url), methods=["GET"])
    app.include_router(router)
