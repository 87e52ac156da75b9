"""The typed dependencies every route declares: the runtime and the caller.

The only module that reads ``app.state``: a route names ``RuntimeDep`` for the
runtime (settings, clock, units of work, the job port) and one of ``Reader``,
``Ingester``, ``Admin`` for a caller holding that scope for the path's model.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable
from typing import Annotated

from fastapi import Depends, Request
from starlette.concurrency import run_in_threadpool

from calibrant.api.auth import LOCAL, Principal, authenticate, bearer_token
from calibrant.api.runtime import Runtime
from calibrant.errors import Unauthenticated
from calibrant.store.keys_repo import Scope


def get_runtime(request: Request) -> Runtime:
    """The runtime ``calibrant.app.create_app`` put on the application."""
    return request.app.state.runtime


RuntimeDep = Annotated[Runtime, Depends(get_runtime)]


def requires(scope: Scope) -> Callable[[Request, Runtime], Awaitable[Principal]]:
    """A dependency that admits callers holding ``scope`` for the path's model."""

    async def dependency(request: Request, runtime: RuntimeDep) -> Principal:
        token = bearer_token(request)
        if token is None:
            if runtime.settings.keys_required:
                raise Unauthenticated("an API key is required: 'Authorization: Bearer <key>'")
            principal = LOCAL
        else:
            principal = await run_in_threadpool(authenticate, runtime.sessions, token)
        principal.check(scope, request.path_params.get("model"))
        return principal

    return dependency


Reader = Annotated[Principal, Depends(requires(Scope.READ))]
Ingester = Annotated[Principal, Depends(requires(Scope.INGEST))]
Admin = Annotated[Principal, Depends(requires(Scope.ADMIN))]
