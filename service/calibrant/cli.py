"""The ``calibrant`` command: serve, migrate, keys, report.

A composition root: it reads Settings once and wires the layers together.
"""

from __future__ import annotations

import argparse
import contextlib
import sys
from collections.abc import Sequence
from typing import Any

import uvicorn
from pydantic import ValidationError

from calibrant import scheduler
from calibrant.app import create_app
from calibrant.clock import SystemClock
from calibrant.config import Settings
from calibrant.errors import CalibrantError, InvalidInput, field_errors
from calibrant.jobs import JobContext, run_all
from calibrant.reports import build as report_build
from calibrant.reports import render as report_render
from calibrant.store import audit, keys_repo, migrate
from calibrant.store.engine import make_engine, make_session_factory
from calibrant.store.keys_repo import Scope

_WHOLE = "settings"  # the field name field_errors gives a check on the settings as a whole


def _settings(**overrides: Any) -> Settings:
    try:
        return Settings(**{k: v for k, v in overrides.items() if v is not None})
    except ValidationError as exc:
        # A model-level check has no field: it is about the settings as a whole, not one variable.
        lines = [
            f"  settings: {e.message}" if e.field == _WHOLE
            else f"  CALIBRANT_{e.field.replace('.', '_').upper()}: {e.message}"
            for e in field_errors(exc, whole=_WHOLE)
        ]
        raise SystemExit("calibrant: invalid settings\n" + "\n".join(lines)) from None


def cmd_migrate(args: argparse.Namespace) -> int:
    settings = _settings()
    engine = make_engine(settings)
    migrate.upgrade(engine)
    engine.dispose()
    print(f"database at {engine.url.render_as_string(hide_password=True)} is up to date")
    return 0


def cmd_serve(args: argparse.Namespace) -> int:
    settings = _settings(host=args.host, port=args.port)
    engine = make_engine(settings)
    if settings.keys_required:
        with make_session_factory(engine)() as session:
            if keys_repo.active_count(session) == 0:
                print(
                    f"calibrant: refusing to serve on {settings.host}: API keys are required there "
                    "and none exists. Create one with `calibrant keys create --scope admin`.",
                    file=sys.stderr,
                )
                return 2
    app = create_app(settings, engine=engine, run_scheduler=not args.no_scheduler)
    uvicorn.run(app, host=settings.host, port=settings.port, log_level=settings.log_level)
    return 0


def _job_context(settings: Settings) -> JobContext:
    return JobContext(make_engine(settings), SystemClock(), settings)


def cmd_refresh(args: argparse.Namespace) -> int:
    ctx = _job_context(_settings())
    report = run_all(ctx)
    for job, figures in report["jobs"].items():
        shown = ", ".join(f"{k}={v}" for k, v in figures.items()) or "nothing to do"
        print(f"{job}: {shown}")
    ctx.engine.dispose()
    return 0


def cmd_scheduler(args: argparse.Namespace) -> int:
    settings = _settings()
    print(f"running scheduled jobs every {settings.refresh_seconds:g} s; Ctrl-C stops", file=sys.stderr)
    with contextlib.suppress(KeyboardInterrupt):
        scheduler.run_forever(_job_context(settings))
    return 0


def cmd_keys_create(args: argparse.Namespace) -> int:
    settings = _settings()
    engine = make_engine(settings)
    clock = SystemClock()
    with make_session_factory(engine)() as session:
        issued = keys_repo.create(
            session, Scope(args.scope), clock.now(), model_name=args.model, label=args.label or ""
        )
        audit.record(
            session,
            at=clock.now(),
            actor="cli",
            action="key.created",
            target=issued.key_id,
            detail={"scope": args.scope, "model": args.model, "label": args.label or ""},
        )
        session.commit()
    engine.dispose()
    print(issued.token)
    print(
        f"key {issued.key_id} ({args.scope}{', model ' + args.model if args.model else ''}) "
        "created; the line above is shown only once",
        file=sys.stderr,
    )
    return 0


def cmd_keys_list(args: argparse.Namespace) -> int:
    engine = make_engine(_settings())
    with make_session_factory(engine)() as session:
        for key in keys_repo.list_keys(session):
            state = "revoked" if key.revoked_at else "active"
            model = key.model_name or "(all models)"
            print(f"{key.key_id}\t{key.scope}\t{model}\t{state}\t{key.created_at:%Y-%m-%d}\t{key.label}")
    engine.dispose()
    return 0


def cmd_keys_revoke(args: argparse.Namespace) -> int:
    engine = make_engine(_settings())
    clock = SystemClock()
    with make_session_factory(engine)() as session:
        key = keys_repo.revoke(session, args.key_id, clock.now())
        if key is None:
            print(f"calibrant: no key {args.key_id}", file=sys.stderr)
            return 1
        audit.record(session, at=clock.now(), actor="cli", action="key.revoked", target=args.key_id)
        session.commit()
    engine.dispose()
    print(f"key {args.key_id} revoked")
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    """Build a report as the API does (stored as a snapshot too) and write it to a file."""
    engine = make_engine(_settings())
    clock = SystemClock()
    with make_session_factory(engine)() as session:
        try:
            report = report_build.build(session, args.model, start=args.start, end=args.end, as_of=args.as_of,
                                        now=clock.now(), actor="cli")
        except CalibrantError as exc:
            details = exc.detail
            if isinstance(exc, InvalidInput):
                details += ": " + "; ".join(f"{e.field}: {e.message}" for e in exc.errors)
            print(f"calibrant: {details}", file=sys.stderr)
            return 2
        session.commit()
    engine.dispose()
    content = report_render.render(report, args.format)
    with open(args.out, "wb") as handle:
        handle.write(content)
    print(f"report of {args.model} ({args.format}, {len(content)} bytes, content hash "
          f"{report.body['content_hash']}) written to {args.out}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="calibrant", description="Watch the probabilities your deployed classifiers emit."
    )
    sub = parser.add_subparsers(dest="command", required=True)

    serve = sub.add_parser("serve", help="run the HTTP API")
    serve.add_argument("--host", help="address to listen on (CALIBRANT_HOST, default 127.0.0.1)")
    serve.add_argument("--port", type=int, help="port (CALIBRANT_PORT, default 8000)")
    serve.add_argument(
        "--no-scheduler", action="store_true", help="serve only; run `calibrant scheduler` elsewhere"
    )
    serve.set_defaults(func=cmd_serve)

    sub.add_parser("refresh", help="run every job until no work is left").set_defaults(func=cmd_refresh)
    sub.add_parser("scheduler", help="run the scheduled jobs without serving").set_defaults(
        func=cmd_scheduler
    )

    report = sub.add_parser("report", help="write a model's governance report to a file")
    report.add_argument("model")
    report.add_argument("--start", required=True, help="RFC 3339, inclusive")
    report.add_argument("--end", required=True, help="RFC 3339, exclusive")
    report.add_argument("--as-of", dest="as_of", help="RFC 3339; default now")
    report.add_argument("--format", choices=("json", "html", "pdf"), default="pdf")
    report.add_argument("--out", required=True, help="file to write")
    report.set_defaults(func=cmd_report)

    mig = sub.add_parser("migrate", help="create or upgrade the database schema")
    mig.set_defaults(func=cmd_migrate)

    keys = sub.add_parser("keys", help="manage API keys").add_subparsers(dest="keys", required=True)
    create = keys.add_parser("create", help="create a key and print it once")
    create.add_argument("--scope", choices=[s.value for s in Scope], required=True)
    create.add_argument("--model", help="limit the key to one model")
    create.add_argument("--label", help="a note on who uses the key")
    create.set_defaults(func=cmd_keys_create)
    keys.add_parser("list", help="list keys (never their secrets)").set_defaults(func=cmd_keys_list)
    revoke = keys.add_parser("revoke", help="revoke a key by its id")
    revoke.add_argument("key_id")
    revoke.set_defaults(func=cmd_keys_revoke)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    return int(args.func(args) or 0)


if __name__ == "__main__":
    sys.exit(main())
