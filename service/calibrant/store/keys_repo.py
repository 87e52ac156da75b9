"""API keys: only a SHA-256 hash of the secret part is stored.

A key reads ``cal_<key_id>_<secret>``. The key id is public (it names the key
in lists and in the audit trail); the secret has 256 bits from ``secrets``,
so an unsalted fast hash is enough: there is nothing to brute-force.
"""

from __future__ import annotations

import hashlib
import hmac
import secrets
from dataclasses import dataclass
from datetime import datetime
from enum import StrEnum

from sqlalchemy import select
from sqlalchemy.orm import Session

from calibrant.store.tables import ApiKey

PREFIX = "cal_"


class Scope(StrEnum):
    INGEST = "ingest"  # post predictions and outcomes
    READ = "read"  # read models, cases and metrics
    ADMIN = "admin"  # everything, including settings and refresh

    def allows(self, needed: Scope) -> bool:
        return self is Scope.ADMIN or self is needed


@dataclass(frozen=True, slots=True)
class IssuedKey:
    key_id: str
    token: str  # shown once, never stored


def hash_secret(secret: str) -> str:
    return hashlib.sha256(secret.encode()).hexdigest()


def create(
    session: Session, scope: Scope, now: datetime, model_name: str | None = None, label: str = ""
) -> IssuedKey:
    key_id = secrets.token_hex(6)
    secret = secrets.token_urlsafe(32)
    session.add(
        ApiKey(
            key_id=key_id,
            secret_hash=hash_secret(secret),
            scope=scope.value,
            model_name=model_name,
            label=label,
            created_at=now,
        )
    )
    return IssuedKey(key_id, f"{PREFIX}{key_id}_{secret}")


def authenticate(session: Session, token: str) -> ApiKey | None:
    """The active key this token belongs to, or None. Constant-time on the secret."""
    if not token.startswith(PREFIX):
        return None
    key_id, sep, secret = token.removeprefix(PREFIX).partition("_")
    if not sep or not secret:
        return None
    key = session.scalars(select(ApiKey).where(ApiKey.key_id == key_id)).one_or_none()
    # Hash even when the key id is unknown, so timing does not reveal which ids exist.
    presented = hash_secret(secret)
    stored = key.secret_hash if key is not None else hash_secret("")
    if not hmac.compare_digest(presented, stored) or key is None or key.revoked_at is not None:
        return None
    return key


def list_keys(session: Session) -> list[ApiKey]:
    return list(session.scalars(select(ApiKey).order_by(ApiKey.id)))


def revoke(session: Session, key_id: str, now: datetime) -> ApiKey | None:
    key = session.scalars(select(ApiKey).where(ApiKey.key_id == key_id)).one_or_none()
    if key is not None and key.revoked_at is None:
        key.revoked_at = now
    return key


def active_count(session: Session) -> int:
    return len(session.scalars(select(ApiKey.id).where(ApiKey.revoked_at.is_(None))).all())
