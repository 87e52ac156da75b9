"""Bearer API keys with scopes, optionally limited to one model.

Keys are demanded when ``Settings.keys_required`` (a non-loopback address,
or auth=required). On a loopback-only server without keys configured the
caller is the local operator, so the README walk-through works without one;
a key that is sent is still checked.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable
from dataclasses import dataclass

from fastapi import Request
from starlette.concurrency import run_in_threadpool

from calibrant.api.runtime import Runtime
from calibrant.errors import Forbidden, Unauthenticated
from calibrant.store import keys_repo
from calibrant.store.keys_repo import Scope


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


def _bearer(request: Request) -> str | None:
    header = request.headers.get("authorization")
    if header is None:
        return None
    scheme, _, token = header.partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        raise Unauthenticated("send the key as 'Authorization: Bearer <key>'")
    return token.strip()


def _authenticate(runtime: Runtime, token: str) -> Principal:
    with runtime.sessions() as session:
        key = keys_repo.authenticate(session, token)
    if key is None:
        raise Unauthenticated("the API key is unknown or revoked")
    return Principal(f"key:{key.key_id}", Scope(key.scope), key.model_name)


def requires(scope: Scope) -> Callable[[Request], Awaitable[Principal]]:
    """A FastAPI dependency that admits callers holding ``scope`` for the path's model."""

    async def dependency(request: Request) -> Principal:
        runtime: Runtime = request.app.state.runtime
        token = _bearer(request)
        if token is None:
            if runtime.settings.keys_required:
                raise Unauthenticated("an API key is required: 'Authorization: Bearer <key>'")
            principal = LOCAL
        else:
            principal = await run_in_threadpool(_authenticate, runtime, token)
        principal.check(scope, request.path_params.get("model"))
        return principal

    return dependency
