"""Webhook signing by the Standard Webhooks specification.

Headers: ``webhook-id`` (the message id, the same on every retry),
``webhook-timestamp`` (integer seconds since the epoch) and
``webhook-signature`` = ``v1,`` + base64(HMAC-SHA256(key, f"{id}.{timestamp}.{body}")),
where the secret is ``whsec_`` + base64(key).
"""
from __future__ import annotations

import base64
import hashlib
import hmac
import secrets

SECRET_PREFIX = "whsec_"


def new_secret() -> str:
    return SECRET_PREFIX + base64.b64encode(secrets.token_bytes(32)).decode("ascii")


def secret_key(secret: str) -> bytes:
    if not secret.startswith(SECRET_PREFIX):
        raise ValueError("a webhook secret starts with 'whsec_'")
    try:
        key = base64.b64decode(secret[len(SECRET_PREFIX):], validate=True)
    except ValueError:
        raise ValueError("a webhook secret is 'whsec_' followed by base64") from None
    if len(key) < 24:
        raise ValueError("a webhook secret must hold at least 24 random bytes")
    return key


def sign(secret: str, msg_id: str, timestamp: int, body: str) -> str:
    mac = hmac.new(secret_key(secret), f"{msg_id}.{timestamp}.{body}".encode("utf-8"),
                   hashlib.sha256).digest()
    return "v1," + base64.b64encode(mac).decode("ascii")


def headers(secret: str, msg_id: str, timestamp: int, body: str) -> dict[str, str]:
    return {"webhook-id": msg_id, "webhook-timestamp": str(timestamp),
            "webhook-signature": sign(secret, msg_id, timestamp, body),
            "content-type": "application/json", "user-agent": "seqaudit-webhooks/0.1"}
