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

    @property
    def headers(self) -> dict | None:
        """HTTP headers the problem response carries (e.g. Retry-After), if any."""
        return None


class NotFound(ServiceError):
    status, slug, title = 404, "not-found", "Not found"


class Conflict(ServiceError):
    status, slug, title = 409, "conflict", "Conflict"


class Invalid(ServiceError):
    status, slug, title = 422, "validation-error", "Invalid input"


class TooLarge(ServiceError):
    status, slug, title = 413, "too-large", "Request too large"


class Busy(ServiceError):
    """The heavy-work pool is full (service/heavy.py): 503 with Retry-After."""

    status, slug, title = 503, "busy", "Service busy"

    def __init__(self, detail: str, retry_after: int = 1, **extra):
        super().__init__(detail, retry_after_s=retry_after, **extra)

    @property
    def headers(self) -> dict:
        return {"Retry-After": str(self.extra["retry_after_s"])}


class TimedOut(Busy):
    """A heavy job ran past its time limit and was stopped: 503 with Retry-After."""

    slug, title = "timed-out", "Took too long"


class Unavailable(ServiceError):
    """The service cannot do this now for a reason outside the request (storage trouble)."""

    status, slug, title = 503, "unavailable", "Service unavailable"

    def __init__(self, detail: str, slug: str = "unavailable", retry_after_s: int | None = None,
                 **extra):
        super().__init__(detail, **extra)
        self.slug = slug
        self.retry_after_s = retry_after_s


class SchemaTooNew(RuntimeError):
    """The database file was written by a newer seqaudit: this build would misread it (not
    a request's fault, so not a ServiceError)."""
