"""API keys: add, list, revoke, look up by hash."""
from __future__ import annotations

import secrets

from ..errors import Conflict, Invalid, NotFound
from .common import KEY_PREFIX, ROLES, hash_key


class KeysMixin:
    def add_key(self, role: str, label: str, now: str, actor=("cli", "admin"),
                expires_at: str | None = None) -> tuple[dict, str]:
        """A new key; ``expires_at`` (UTC text as the clock writes it, later than ``now``)
        makes it stop working at that instant."""
        if role not in ROLES:
            raise Invalid(f"role must be one of {', '.join(ROLES)}, got {role!r}", field="role")
        if not label or not label.strip():
            raise Invalid("label must not be empty", field="label")
        if expires_at is not None and expires_at <= now:
            raise Invalid(f"expires_at must lie in the future, got {expires_at}",
                          field="expires_at")
        key = KEY_PREFIX + secrets.token_urlsafe(32)
        with self.write() as conn:
            cur = conn.execute("INSERT INTO keys (label, role, key_hash, prefix, created_at, "
                               "expires_at) VALUES (?, ?, ?, ?, ?, ?)",
                               (label, role, hash_key(key), key[:10], now, expires_at))
            key_id = cur.lastrowid
            detail = {"key_id": key_id, "role": role, "label": label}
            if expires_at is not None:
                detail["expires_at"] = expires_at
            self._log(conn, now, actor, "key_added", detail, target=str(key_id))
        return self.key(key_id), key

    def key(self, key_id: int) -> dict:
        rows = self.read("SELECT id, label, role, prefix, created_at, revoked_at, expires_at "
                         "FROM keys WHERE id = ?", (key_id,))
        if not rows:
            raise NotFound(f"no key with id {key_id}")
        return rows[0]

    def keys(self) -> list[dict]:
        return self.read("SELECT id, label, role, prefix, created_at, revoked_at, expires_at "
                         "FROM keys ORDER BY id")

    def revoke_key(self, key_id: int, now: str, actor=("cli", "admin")) -> dict:
        with self.write() as conn:
            row = conn.execute("SELECT revoked_at, role FROM keys WHERE id = ?",
                               (key_id,)).fetchone()
            if row is None:
                raise NotFound(f"no key with id {key_id}")
            if row[0] is not None:
                raise Conflict(f"key {key_id} was already revoked at {row[0]}")
            if row[1] == "admin" and conn.execute(
                    "SELECT COUNT(*) FROM keys WHERE role = 'admin' AND revoked_at IS NULL "
                    "AND id != ?", (key_id,)).fetchone()[0] == 0:
                # checked inside the write transaction: two admins cannot revoke each other
                raise Conflict(f"key {key_id} is the last active admin key; revoking it would "
                               "lock every admin out. Create another admin key first.")
            conn.execute("UPDATE keys SET revoked_at = ? WHERE id = ?", (now, key_id))
            self._log(conn, now, actor, "key_revoked", {"key_id": key_id}, target=str(key_id))
        return self.key(key_id)

    def key_by_hash(self, key_hash: str) -> dict | None:
        rows = self.read("SELECT id, label, role, key_hash, revoked_at, expires_at FROM keys "
                         "WHERE key_hash = ?", (key_hash,))
        return rows[0] if rows else None
