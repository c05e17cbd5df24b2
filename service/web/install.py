"""Wire the dashboard into the app: routes, static files, HTML errors, security headers."""
from __future__ import annotations

from pathlib import Path

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import RedirectResponse
from fastapi.staticfiles import StaticFiles
from starlette.exceptions import HTTPException as StarletteHTTPException

from ..errors import ServiceError
from .routes import router, templates
from .sessions import BadCsrf, SignInRequired, current_user

STATIC = Path(__file__).resolve().parent / "static"
UI_HEADERS = {
    "Content-Security-Policy": "default-src 'self'; img-src 'self' data:; style-src 'self'; "
                               "script-src 'self'; object-src 'none'; base-uri 'none'; "
                               "form-action 'self'; frame-ancestors 'none'",
    "X-Content-Type-Options": "nosniff",
    "X-Frame-Options": "DENY",
    "Referrer-Policy": "same-origin",
    "Cache-Control": "no-store",
}


def _is_ui(request: Request) -> bool:
    return request.url.path == "/ui" or request.url.path.startswith("/ui/")


def _user_or_none(request: Request):
    try:
        return current_user(request)
    except SignInRequired:
        return None


def error_page(request: Request, status: int, title: str, detail: str):
    return templates.TemplateResponse(request, "error.html",
                                      {"user": _user_or_none(request), "title": title,
                                       "detail": detail}, status_code=status)


class SecurityHeaders:
    """Pure ASGI middleware adding the UI headers to /ui responses (no per-request task)."""

    def __init__(self, app):
        self.app = app

    async def __call__(self, scope, receive, send):
        path = scope.get("path", "") if scope["type"] == "http" else ""
        if not (path == "/ui" or path.startswith("/ui/")):
            await self.app(scope, receive, send)
            return
        static = path.startswith("/ui/static/")
        extra = [(k.lower().encode(), v.encode()) for k, v in UI_HEADERS.items()
                 if not (static and k == "Cache-Control")]

        async def add_headers(message):
            if message["type"] == "http.response.start":
                have = {k.lower() for k, _ in message.get("headers", [])}
                message = {**message, "headers": list(message.get("headers", []))
                           + [(k, v) for k, v in extra if k not in have]}
            await send(message)

        await self.app(scope, receive, add_headers)


def install_ui(app: FastAPI) -> None:
    from .downloads import router as downloads
    app.include_router(router)
    from .program_pages import router as program_router
    app.include_router(program_router)
    from .draws import router as draws_router
    app.include_router(draws_router)
    app.include_router(downloads)

    @app.get("/", include_in_schema=False)
    async def _home():
        return RedirectResponse("/ui", status_code=307)
    app.mount("/ui/static", StaticFiles(directory=str(STATIC)), name="ui-static")

    app.add_middleware(SecurityHeaders)

    @app.exception_handler(SignInRequired)
    async def _signin(request: Request, exc: SignInRequired):
        return RedirectResponse("/ui/signin", status_code=303)

    @app.exception_handler(BadCsrf)
    async def _csrf(request: Request, exc: BadCsrf):
        return error_page(request, 403, "Form refused",
                          "This form was missing its security token or carried a wrong one. "
                          "Reload the page and try again.")

    # API errors stay problem+json; on /ui the same errors become pages.
    api_service = app.exception_handlers[ServiceError]
    api_http = app.exception_handlers[StarletteHTTPException]
    api_validation = app.exception_handlers[RequestValidationError]

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError):
        if _is_ui(request):
            fields = ", ".join(".".join(str(p) for p in e.get("loc", ())[1:]) or "input"
                               for e in exc.errors())
            return error_page(request, 422, "Request refused",
                              f"These values could not be read: {fields}.")
        return await api_validation(request, exc)

    @app.exception_handler(ServiceError)
    async def _service(request: Request, exc: ServiceError):
        if _is_ui(request):
            page = error_page(request, exc.status, exc.title, exc.detail)
            page.headers.update(exc.headers or {})
            return page
        return await api_service(request, exc)

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException):
        if _is_ui(request):
            detail = str(exc.detail)
            if exc.status_code == 404 and detail == "Not Found":   # no such route
                detail = (f"There is no page at {request.url.path}. Check the address, or "
                          "go back to the overview.")
            return error_page(request, exc.status_code, "Not found" if exc.status_code == 404
                              else "Request refused", detail)
        return await api_http(request, exc)
