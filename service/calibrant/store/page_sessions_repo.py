"""Page sign-in sessions: open one for a key, find the key behind a cookie, end one.

The cookie carries a 256-bit random token from ``secrets``; only its SHA-256 is
stored (as for API keys, ``keys_repo``), so a copy of the database opens no session.
A session is valid while it has not expired and its key is not revoked.
"""

from __future__ import annotations

import hashlib
import secrets
from datetime import datetime, timedelta

from sqlalchemy import delete, select
from sqlalchemy.orm import Session

from calibrant.store.page_session_tables import PageSession
from calibrant.store.tables import ApiKey


def _hash(token: str) -> str:
    return hashlib.sha256(token.encode()).hexdigest()


def open_session(session: Session, key_id: str, now: datetime, lifetime: timedelta) -> str:
    """A new session for ``key_id``; returns the token (the cookie's value, never stored).

    Expired sessions are deleted here, so the table holds only live ones and a few stale.
    """
    session.execute(delete(PageSession).where(PageSession.expires_at <= now))
    token = secrets.token_urlsafe(32)
    session.add(PageSession(token_hash=_hash(token), key_id=key_id, created_at=now,
                            expires_at=now + lifetime))
    session.flush()
    return token


def key_of(session: Session, token: str, now: datetime) -> ApiKey | None:
    """The active key behind a live session token, or None (unknown, expired or key revoked).

    The lookup is by the token's hash: an equality on a 256-bit hash gives nothing to time.
    """
    return session.execute(
        select(ApiKey)
        .join(PageSession, PageSession.key_id == ApiKey.key_id)
        .where(PageSession.token_hash == _hash(token), PageSession.expires_at > now,
               ApiKey.revoked_at.is_(None))
    ).scalar_one_or_none()


def close_session(session: Session, token: str) -> None:
    session.execute(delete(PageSession).where(PageSession.token_hash == _hash(token)))
