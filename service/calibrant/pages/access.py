"""Who may read the pages: the local operator, or a browser signed in with a key.

On a loopback server without keys the pages open freely, as the API does. With keys
required, a reader signs in once (``POST /sign-in`` with the key as JSON); the answer
sets an HttpOnly, SameSite=Strict cookie holding a random session token whose hash is
stored with the key it stands for (``store.page_sessions_repo``). Only page routes read
that cookie: the API authenticates by the Authorization header alone, so the cookie
grants nothing there. A session ends when it expires or its key is revoked, and a key
limited to one model gives a session limited to that model.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

from starlette.requests import Request

from calibrant.store import page_sessions_repo
from calibrant.store.keys_repo import Scope
from calibrant.store.unit import Session

COOKIE = "calibrant_pages"


@dataclass(frozen=True, slots=True)
class PageReader:
    actor: str  # "local" or "key:<key_id>"
    model_name: str | None = None  # the one model a limited key may read

    def may_read(self, model: str) -> bool:
        return self.model_name is None or self.model_name == model


LOCAL_READER = PageReader("local")


def reader_from_cookie(session: Session, request: Request, now: datetime) -> PageReader | None:
    """The reader behind the request's session cookie, or None (no cookie, expired, revoked)."""
    token = request.cookies.get(COOKIE)
    if not token:
        return None
    key = page_sessions_repo.key_of(session, token, now)
    if key is None or not Scope(key.scope).allows(Scope.READ):
        return None
    return PageReader(f"key:{key.key_id}", key.model_name)
