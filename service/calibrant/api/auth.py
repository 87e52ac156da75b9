"""Bearer API keys with scopes, optionally limited to one model.

Keys are demanded when ``Settings.keys_required`` (a non-loopback address,
or auth=required). On a loopback-only server without keys configured the
caller is the local operator, so the README walk-through works without one;
a key that is sent is still checked. The FastAPI dependency that applies this
to a route is ``api.deps.requires`` (and its ``Reader``, ``Ingester``, ``Admin``).
"""

from __future__ import annotations

from dataclasses import dataclass

from fastapi import Request

from calibrant.errors import Forbidden, Unauthenticated
from calibrant.store import keys_repo
from calibrant.store.keys_repo import Scope
from calibrant.store.unit import SessionFactory


@dataclass(frozen=True, slots=True)
class Principal:
    actor: str  # "key:<key_id>" or "local"
    scope: Scope
    model_name: str | None = None

    def check(self, needed: Scope, model: str | None) -> None:
        if not self.scope.allows(needed):
            raise Forbidden(f"this key has scope {self.scope.value!r}; {needed.value!r} is needed")
        if self.model_name is not None and model != self.model_name:
            raise Forbidden(f"this key is limited to model {self.model_name!r}")


LOCAL = Principal(actor="local", scope=Scope.ADMIN)


def bearer_token(request: Request) -> str | None:
    """The key sent as ``Authorization: Bearer <key>``, or None when no Authorization is sent."""
    header = request.headers.get("authorization")
    if header is None:
        return None
    scheme, _, token = header.partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        raise Unauthenticated("send the key as 'Authorization: Bearer <key>'")
    return token.strip()


def authenticate(sessions: SessionFactory, token: str) -> Principal:
    """The holder of ``token``; blocking (a database read), so called from the thread pool."""
    with sessions() as session:
        key = keys_repo.authenticate(session, token)
    if key is None:
        raise Unauthenticated("the API key is unknown or revoked")
    return Principal(f"key:{key.key_id}", Scope(key.scope), key.model_name)
