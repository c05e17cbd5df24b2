"""Dashboard sign-in: an analyst or admin key buys a session cookie; forms carry a CSRF token."""
from __future__ import annotations

import hashlib
import hmac
import secrets
import time
from dataclasses import dataclass

from fastapi import Request

from ..clock import parse_rfc3339
from ..store import hash_key

COOKIE = "seqaudit_session"
LOGIN_CSRF_COOKIE = "seqaudit_signin_csrf"
SESSION_S = 8 * 3600


@dataclass(frozen=True)
class UiUser:
    label: str
    role: str
    csrf: str
    token_hash: str

    @property
    def actor(self) -> tuple[str, str]:
        return self.label, self.role


class SignInRequired(Exception):
    pass


class BadCsrf(Exception):
    pass


def _token_hash(token: str) -> str:
    return hashlib.sha256(token.encode()).hexdigest()


def sign_in(store, key: str, now: str) -> tuple[str | None, str]:
    """(cookie token or None, message). Field keys and unknown or revoked keys are refused."""
    row = store.key_by_hash(hash_key(key.strip())) if key and key.strip() else None
    if row is None:
        return None, "That key is not known. Check it and try again."
    if row["revoked_at"] is not None:
        return None, "That key was revoked."
    if row["expires_at"] is not None and row["expires_at"] <= now:
        return None, f"That key expired at {row['expires_at']}."
    if row["role"] not in ("analyst", "admin"):
        return None, "Field keys can only post records; the dashboard needs an analyst or admin key."
    token = secrets.token_urlsafe(32)
    ends = time.time() + SESSION_S
    if row["expires_at"] is not None:      # a session never outlives its key
        ends = min(ends, parse_rfc3339(row["expires_at"]).timestamp())
    store.create_session(_token_hash(token), row["id"], secrets.token_urlsafe(24), now, ends)
    return token, "signed in"


def current_user(request: Request) -> UiUser:
    token = request.cookies.get(COOKIE)
    if not token:
        raise SignInRequired()
    th = _token_hash(token)
    row = request.app.state.monitor.store.session(th, time.time())
    if row is None:
        raise SignInRequired()
    return UiUser(label=row["label"], role=row["role"], csrf=row["csrf"], token_hash=th)


def check_csrf(user: UiUser, sent: str | None) -> None:
    if not sent or not hmac.compare_digest(user.csrf, sent):
        raise BadCsrf()


def cookie_args(request: Request) -> dict:
    secure = request.url.scheme == "https" or \
        request.headers.get("x-forwarded-proto", "").lower() == "https"
    return {"httponly": True, "samesite": "strict", "secure": secure, "path": "/ui"}
