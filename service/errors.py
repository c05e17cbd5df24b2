"""Domain errors; the API turns each into one RFC 9457 problem response."""
from __future__ import annotations


class ServiceError(Exception):
    status = 400
    slug = "bad-request"
    title = "Bad request"

    def __init__(self, detail: str, **extra):
        super().__init__(detail)
        self.detail = detail
        self.extra = extra


class NotFound(ServiceError):
    status, slug, title = 404, "not-found", "Not found"


class Conflict(ServiceError):
    status, slug, title = 409, "conflict", "Conflict"


class Invalid(ServiceError):
    status, slug, title = 422, "validation-error", "Invalid input"


class TooLarge(ServiceError):
    status, slug, title = 413, "too-large", "Request too large"


class Unavailable(ServiceError):
    """The service cannot do this now for a reason outside the request (storage trouble)."""

    status, slug, title = 503, "unavailable", "Service unavailable"

    def __init__(self, detail: str, slug: str = "unavailable", retry_after_s: int | None = None,
                 **extra):
        super().__init__(detail, **extra)
        self.slug = slug
        self.retry_after_s = retry_after_s
