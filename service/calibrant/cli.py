"""The ``calibrant`` command: serve, wait, migrate, refresh, scheduler, keys, report.

A composition root: it reads Settings once and wires the layers together.
"""

from __future__ import annotations

import argparse
import contextlib
import logging.config
import os
import sys
import time
import zoneinfo
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from pydantic import ValidationError

from calibrant.clock import SystemClock
from calibrant.config import Settings
from calibrant.errors import CalibrantError, InvalidInput, field_errors
from calibrant.files.importing import import_file, reject_path
from calibrant.files.reading import FIELDS, FileProblem, Layout
from calibrant.logs import FORMATS, log_config
from calibrant.store import audit, keys_repo, migrate
from calibrant.store.engine import make_engine, make_session_factory
from calibrant.store.keys_repo import Scope
from calibrant.store.unit import DatabaseError, Engine, ping

if TYPE_CHECKING:
    from fastapi import FastAPI

    from calibrant.jobs import JobContext

# The server, the jobs and the reports are imported by the commands that use them, not here:
# `calibrant import` of a large file must stay small in memory, and these imports alone (scipy,
# plotly, reportlab, uvicorn) took its process from 166 to 267 MiB resident before reading a row.

_WHOLE = "settings"
REFRESH_TIMEOUT_S = 6 * 3600.0  # the longest `calibrant refresh` waits for its job to end
# How long uvicorn waits for a worker to answer its health ping (its default is 5 s). A worker
# imports numpy, scipy and FastAPI before it can answer; on a busy host that took longer than 5 s
# here, and uvicorn then killed and restarted each worker in a loop.
WORKER_HEALTHCHECK_SECONDS = 30  # the field name field_errors gives a check on the settings as a whole


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
    try:
        if args.wait and not _wait_for_database(engine, args.wait, interval=1.0):
            return 1
        migrate.upgrade(engine)
    finally:
        engine.dispose()
    print(f"database at {engine.url.render_as_string(hide_password=True)} is up to date")
    return 0


def cmd_serve(args: argparse.Namespace) -> int:
    settings = _settings(
        host=args.host, port=args.port, workers=args.workers, log_format=args.log_format,
        jobs_in_server=False if args.no_scheduler else None,
    )
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
    import uvicorn  # noqa: PLC0415 — see the note on lazy imports at the top

    from calibrant.app import create_app  # noqa: PLC0415

    logging_config = log_config(settings.log_level, settings.log_format)
    if settings.workers == 1:
        app = create_app(settings, engine=engine, run_scheduler=settings.jobs_in_server)
        uvicorn.run(app, host=settings.host, port=settings.port, log_level=settings.log_level,
                    log_config=logging_config)
        return 0
    engine.dispose()
    # Each worker is a fresh process that builds its app from the environment (worker_app):
    # hand it the settings the command line chose, so every worker agrees with this check.
    os.environ.update({
        "CALIBRANT_HOST": settings.host, "CALIBRANT_PORT": str(settings.port),
        "CALIBRANT_WORKERS": str(settings.workers), "CALIBRANT_LOG_FORMAT": settings.log_format,
        "CALIBRANT_JOBS_IN_SERVER": str(settings.jobs_in_server).lower(),
    })
    uvicorn.run("calibrant.cli:worker_app", factory=True, host=settings.host, port=settings.port,
                workers=settings.workers, log_level=settings.log_level, log_config=logging_config,
                timeout_worker_healthcheck=WORKER_HEALTHCHECK_SECONDS)
    return 0


def worker_app() -> FastAPI:
    """The app of one ``serve --workers N`` process, from the ``CALIBRANT_*`` environment."""
    from calibrant.app import create_app  # noqa: PLC0415 — see the note on lazy imports at the top

    settings = _settings()
    return create_app(settings, run_scheduler=settings.jobs_in_server)


def cmd_wait(args: argparse.Namespace) -> int:
    """Return once the database answers, or fail after ``--timeout`` seconds (container start-up)."""
    engine = make_engine(_settings())
    try:
        return 0 if _wait_for_database(engine, args.timeout, args.interval) else 1
    finally:
        engine.dispose()


def _wait_for_database(engine: Engine, timeout: float, interval: float) -> bool:
    shown = engine.url.render_as_string(hide_password=True)
    deadline = time.monotonic() + timeout
    while True:
        try:
            ping(engine)
        except DatabaseError as exc:
            if time.monotonic() >= deadline:
                print(f"calibrant: database at {shown} still unreachable after {timeout:g} s: "
                      f"{str(exc).splitlines()[0]}", file=sys.stderr)
                return False
            time.sleep(interval)
            continue
        print(f"database at {shown} answers")
        return True


def _job_context(settings: Settings) -> JobContext:
    from calibrant.jobs import JobContext  # noqa: PLC0415 — see the note on lazy imports at the top

    return JobContext(make_engine(settings), SystemClock(), settings)


def cmd_refresh(args: argparse.Namespace) -> int:
    settings = _settings()
    logging.config.dictConfig(log_config(settings.log_level, settings.log_format))
    # see the note on lazy imports at the top
    from calibrant import refresh_progress  # noqa: PLC0415
    from calibrant.refresh_job import RefreshJobs  # noqa: PLC0415

    ctx = _job_context(settings)
    try:
        runner = RefreshJobs(ctx, lease_seconds=settings.refresh_job_lease_seconds)
        job, ending = refresh_progress.run(runner, args.timeout, quiet=args.quiet)
    except DatabaseError as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        print(f"calibrant: the database did not answer within {args.timeout:g} s: {first}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("calibrant: interrupted; a job this command started is abandoned once its lease lapses "
              f"({settings.refresh_job_lease_seconds:g} s)", file=sys.stderr)
        return 130
    finally:
        ctx.engine.dispose()
    print(ending, file=sys.stderr)
    for name, figures in ((job.result or {}).get("jobs") or {}).items():
        shown = ", ".join(f"{k}={v}" for k, v in figures.items()) or "nothing to do"
        print(f"{name}: {shown}")
    return 0 if job.state == "succeeded" else 1


def cmd_scheduler(args: argparse.Namespace) -> int:
    settings = _settings()
    logging.config.dictConfig(log_config(settings.log_level, settings.log_format))
    print(f"running scheduled jobs every {settings.refresh_seconds:g} s; Ctrl-C stops", file=sys.stderr)
    from calibrant import scheduler  # noqa: PLC0415 — see the note on lazy imports at the top

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
    from calibrant.reports import build as report_build  # noqa: PLC0415 — see the lazy-import note
    from calibrant.reports import render as report_render  # noqa: PLC0415
    engine = make_engine(_settings())
    clock = SystemClock()
    with make_session_factory(engine)() as session:
        try:
            report = report_build.build(session, args.model, start=args.start, end=args.end, as_of=args.as_of,
                                        now=clock.now(), actor="cli")
        except CalibrantError as exc:
            return _refused(exc)
        session.commit()
    engine.dispose()
    content = report_render.render(report, args.format)
    with open(args.out, "wb") as handle:
        handle.write(content)
    print(f"report of {args.model} ({args.format}, {len(content)} bytes, content hash "
          f"{report.body['content_hash']}) written to {args.out}")
    return 0


IMPORT_SQLITE_CACHE_MIB = 32
IMPORT_CHUNK_ROWS = 20_000  # tests/bench/import.py: 10,000 paid a commit and dirty marks twice as often


def _column_map(pairs: list[str] | None, kind: str) -> dict[str, str]:
    mapping: dict[str, str] = {}
    for pair in pairs or []:
        name, sep, column = pair.partition("=")
        if not sep or name not in FIELDS[kind] or not column:
            raise SystemExit(f"calibrant: --column takes FIELD=COLUMN with FIELD one of "
                             f"{', '.join(FIELDS[kind])}; got {pair!r}")
        mapping[name] = column
    return mapping


def cmd_import(args: argparse.Namespace) -> int:
    """Import a CSV or Parquet file through the ingest service (not the web server)."""
    settings = _settings()
    # The import writes one chunk at a time: a SQLite page cache of IMPORT_SQLITE_CACHE_MIB keeps
    # its process under 300 MiB at a million rows (64 MiB, the server's default, took it past).
    settings = settings.model_copy(update={"sqlite_cache_mib": min(settings.sqlite_cache_mib,
                                                                   IMPORT_SQLITE_CACHE_MIB)})
    if args.time_zone:
        try:
            zoneinfo.ZoneInfo(args.time_zone)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError):
            print(f"calibrant: --time-zone: unknown time zone {args.time_zone!r}", file=sys.stderr)
            return 2
    layout = Layout(args.kind, _column_map(args.column, args.kind), args.time_zone)
    engine = make_engine(settings)
    try:
        counts = import_file(Path(args.file), layout, model=args.model, sessions=make_session_factory(engine),
                             settings=settings, clock=SystemClock(), chunk_rows=args.chunk_rows,
                             progress=not args.quiet)
    except (FileProblem, FileNotFoundError) as exc:
        print(f"calibrant: {exc}", file=sys.stderr)
        return 2
    except InvalidInput as exc:
        print(f"calibrant: {exc.detail}: " + "; ".join(f"{e.field}: {e.message}" for e in exc.errors),
              file=sys.stderr)
        return 2
    finally:
        engine.dispose()
    shown = ", ".join(f"{k} {v}" for k, v in counts.as_dict().items())
    print(f"{args.kind} of {args.model} from {args.file}: {shown}")
    if counts.rejected:
        print(f"refused rows, with their line and reason: {reject_path(Path(args.file))}", file=sys.stderr)
    return 1 if counts.rejected else 0


def cmd_export(args: argparse.Namespace) -> int:
    """Write metrics or cases to a CSV or Parquet file, with the API's ranges and filters."""
    from calibrant.files import exporting  # noqa: PLC0415 — it needs the rollup; see the lazy-import note
    engine = make_engine(_settings())
    out = Path(args.out or f"{args.model}-{args.kind}.{args.format}")
    try:
        with make_session_factory(engine)() as session:
            if args.kind == "metrics":
                written = exporting.export_metrics(
                    session, args.model, out, args.format, start=args.start, end=args.end,
                    granularity=args.granularity, window=args.window, version=args.version,
                    tag=args.tag or [], now=SystemClock().now())
            else:
                written = exporting.export_cases(session, args.model, out, args.format, start=args.start,
                                                 end=args.end, version=args.version, tag=args.tag or [])
    except CalibrantError as exc:
        return _refused(exc)
    finally:
        engine.dispose()
    unit = "period(s)" if args.kind == "metrics" else "case(s)"
    print(f"{written} {unit} of {args.model} written to {out}")
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
        "--workers", type=int,
        help="server processes (CALIBRANT_WORKERS, default 1); more than 1 needs PostgreSQL",
    )
    serve.add_argument(
        "--log-format", choices=FORMATS, help="text or json (CALIBRANT_LOG_FORMAT, default text)"
    )
    serve.add_argument(
        "--no-scheduler", action="store_true", help="serve only; run `calibrant scheduler` elsewhere"
    )
    serve.set_defaults(func=cmd_serve)

    wait = sub.add_parser("wait", help="wait until the database answers (for container start-up)")
    wait.add_argument("--timeout", type=float, default=60.0, help="give up after this many seconds")
    wait.add_argument("--interval", type=float, default=1.0, help="seconds between two tries")
    wait.set_defaults(func=cmd_wait)

    refresh = sub.add_parser("refresh", help="run every job until no work is left (a refresh job, with "
                             "progress; joins the one running if any)")
    refresh.add_argument("--timeout", type=float, default=REFRESH_TIMEOUT_S,
                         help=f"give up waiting after this many seconds (default {REFRESH_TIMEOUT_S:g})")
    refresh.add_argument("--quiet", action="store_true", help="no progress bar")
    refresh.set_defaults(func=cmd_refresh)
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

    imp = sub.add_parser("import", help="store predictions or outcomes from a CSV or Parquet file")
    imp.add_argument("kind", choices=tuple(FIELDS))
    imp.add_argument("file", help="a .csv or .parquet file; refused rows go to FILE.rejected.csv")
    imp.add_argument("--model", required=True)
    imp.add_argument("--column", action="append", metavar="FIELD=COLUMN",
                     help="read FIELD from COLUMN (repeatable); by default columns are named like the "
                          "JSON fields, tags as tag.<key>")
    imp.add_argument("--time-zone", dest="time_zone", metavar="ZONE",
                     help="IANA zone of times written without an offset (else they are refused)")
    imp.add_argument("--chunk-rows", dest="chunk_rows", type=int, default=IMPORT_CHUNK_ROWS,
                     help=f"rows read, checked and committed at a time (default {IMPORT_CHUNK_ROWS})")
    imp.add_argument("--quiet", action="store_true", help="no progress bar")
    imp.set_defaults(func=cmd_import)

    exp = sub.add_parser("export", help="write a model's metrics or cases to a CSV or Parquet file")
    exp.add_argument("kind", choices=("metrics", "cases"))
    exp.add_argument("--model", required=True)
    exp.add_argument("--format", choices=("csv", "parquet"), default="csv")
    exp.add_argument("--out", help="file to write (default MODEL-KIND.FORMAT here)")
    exp.add_argument("--start", required=True, help="RFC 3339, inclusive")
    exp.add_argument("--end", required=True, help="RFC 3339, exclusive")
    exp.add_argument("--granularity", default="week", help="metrics: day | week | month")
    exp.add_argument("--window", help="metrics: trailing window Nd (1-366) ending at each period's end")
    exp.add_argument("--version", help="one model version; without it all versions are pooled")
    exp.add_argument("--tag", action="append", metavar="KEY:VALUE", help="one filter key:value")
    exp.set_defaults(func=cmd_export)

    mig = sub.add_parser("migrate", help="create or upgrade the database schema")
    mig.add_argument("--wait", type=float, default=0.0, metavar="SECONDS",
                     help="first wait up to this long for the database to answer (container start-up)")
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


def _refused(exc: CalibrantError) -> int:
    """Say on stderr why the service refused a command (each field named), and exit with 2."""
    details = exc.detail
    if isinstance(exc, InvalidInput):
        details += ": " + "; ".join(f"{e.field}: {e.message}" for e in exc.errors)
    print(f"calibrant: {details}", file=sys.stderr)
    return 2


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    return int(args.func(args) or 0)


if __name__ == "__main__":
    sys.exit(main())

