"""One error body for every route: RFC 9457 problem details (application/problem+json)."""
from __future__ import annotations

import logging

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from ..errors import ServiceError
from ..operations import error_message, field_path, validation_errors

PROBLEM_TYPE = "application/problem+json"
log = logging.getLogger("seqaudit.api")

_TITLES = {400: "Bad request", 401: "Not authenticated", 403: "Forbidden", 404: "Not found",
           405: "Method not allowed", 409: "Conflict", 413: "Request too large",
           415: "Unsupported media type", 422: "Invalid input", 429: "Too many requests",
           500: "Internal error"}
_SLUGS = {400: "bad-request", 401: "unauthenticated", 403: "forbidden", 404: "not-found",
          405: "method-not-allowed", 409: "conflict", 413: "too-large",
          415: "unsupported-media-type", 422: "validation-error", 429: "rate-limited",
          500: "internal-error"}


def problem(request: Request, status: int, detail: str, slug: str | None = None,
            title: str | None = None, headers: dict | None = None, **extra) -> JSONResponse:
    body = {"type": f"/problems/{slug or _SLUGS.get(status, 'error')}",
            "title": title or _TITLES.get(status, "Error"), "status": status,
            "detail": detail, "instance": request.url.path}
    body.update({k: v for k, v in extra.items() if v is not None})
    return JSONResponse(body, status_code=status, media_type=PROBLEM_TYPE, headers=headers)


class AuthProblem(Exception):
    """401/403 raised by the auth dependencies."""

    def __init__(self, status: int, detail: str):
        super().__init__(detail)
        self.status, self.detail = status, detail


def install(app: FastAPI) -> None:
    @app.exception_handler(ServiceError)
    async def _service(request: Request, exc: ServiceError):
        return problem(request, exc.status, exc.detail, exc.slug, exc.title, headers=exc.headers,
                       **exc.extra)

    @app.exception_handler(AuthProblem)
    async def _auth(request: Request, exc: AuthProblem):
        headers = {"WWW-Authenticate": 'Bearer realm="seqaudit"'} if exc.status == 401 else None
        return problem(request, exc.status, exc.detail, headers=headers)

    from .deps import RateLimited
    from .limits import retry_after

    @app.exception_handler(RateLimited)
    async def _rate(request: Request, exc: RateLimited):
        wait = retry_after(exc.wait_s)
        return problem(request, 429, f"too many requests with this key; retry after {wait} s",
                       headers={"Retry-After": wait})

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError):
        errors = []
        for err in exc.errors():
            loc = [p for p in err.get("loc", ()) if p not in ("body",)]
            msg = error_message(err)
            errors.append({"field": field_path(loc[1:] if loc and loc[0] in ("query", "path")
                                               else loc) or "body",
                           "in": loc[0] if loc and loc[0] in ("query", "path") else "body",
                           "message": msg})
        first = errors[0] if errors else {"field": "body", "message": "invalid"}
        return problem(request, 422, f"{first['field']}: {first['message']}", errors=errors)

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException):
        detail = exc.detail if isinstance(exc.detail, str) else _TITLES.get(exc.status_code, "")
        if exc.status_code == 404 and detail == "Not Found":
            detail = f"no route {request.url.path}"
        if exc.status_code == 405:
            detail = f"{request.method} is not allowed on {request.url.path}"
        return problem(request, exc.status_code, detail, headers=getattr(exc, "headers", None))

    @app.exception_handler(Exception)
    async def _crash(request: Request, exc: Exception):
        log.exception("unhandled error on %s %s", request.method, request.url.path)
        return problem(request, 500, "the service failed to handle this request; it was logged")


__all__ = ["problem", "install", "AuthProblem", "PROBLEM_TYPE", "validation_errors"]
