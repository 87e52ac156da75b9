"""Import a prediction or outcome file through the ingest service, chunk by chunk.

Each chunk is one unit of work, as one HTTP batch is: checked by the same ingest functions (the
time window of ``vocabulary.instants`` included), written with the same dirty marks, committed.
A refused row does not refuse its chunk: its line, field and reason go to the reject file beside
the input (``<input>.rejected.csv``) and the rest of the chunk is stored. Predictions are
immutable and outcomes are upserts, so running the same import again stores nothing new.
"""

from __future__ import annotations

import csv
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from tqdm import tqdm

from calibrant.clock import Clock
from calibrant.config import Settings
from calibrant.errors import Conflict, InvalidInput
from calibrant.files.prefetch import read_ahead
from calibrant.files.reading import Chunk, Layout, csv_chunks, file_format, parquet_chunks, parquet_rows
from calibrant.ingest import service
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import InstantWindow

REJECT_SUFFIX = ".rejected.csv"


@dataclass
class ImportCounts:
    rows: int = 0
    accepted: int = 0
    duplicates: int = 0
    corrected: int = 0
    expired: int = 0  # for before the model's retention boundary: not stored (docs/retention.md)
    rejected: int = 0

    def as_dict(self) -> dict[str, int]:
        return dict(vars(self))


def reject_path(source: Path) -> Path:
    return source.with_name(source.name + REJECT_SUFFIX)


class _Rejects:
    """The reject file, created at the first refused row (and an old one removed otherwise)."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.handle: Any = None
        path.unlink(missing_ok=True)

    def write(self, line: int, field: str, reason: str) -> None:
        if self.handle is None:
            self.handle = self.path.open("w", newline="", encoding="utf-8")
            self.writer = csv.writer(self.handle)
            self.writer.writerow(["line", "field", "reason"])
        self.writer.writerow([line, field, reason])

    def close(self) -> None:
        if self.handle is not None:
            self.handle.close()


def import_file(
    source: Path, layout: Layout, *, model: str, sessions: Callable[[], Session], settings: Settings,
    clock: Clock, chunk_rows: int, progress: bool = True, actor: str = "cli",
) -> ImportCounts:
    """Store every acceptable row of ``source``; return what happened to the rows.

    Raises ``FileProblem`` when the file itself cannot be read as ``layout`` says, and
    ``InvalidInput`` for a problem not tied to a row (the model name)."""
    counts = ImportCounts()
    rejects = _Rejects(reject_path(source))
    try:
        with _Progress(source, progress) as (chunks_of, bar):
            chunks = chunks_of(layout, chunk_rows)
            for chunk in read_ahead(chunks) if _waits_for_server(sessions) else chunks:
                _store_chunk(chunk, layout.kind, model, sessions, settings, clock, actor, counts, rejects)
                counts.rows += len(chunk.lines)
                bar(len(chunk.lines))
    finally:
        rejects.close()
    with sessions() as session:
        detail = {"file": source.name, **counts.as_dict()}
        service.record_import(session, model, layout.kind, detail, clock=clock, actor=actor)
        session.commit()
    return counts


def _waits_for_server(sessions: Callable[[], Session]) -> bool:
    """Whether a chunk's write mostly waits for a database server (PostgreSQL), so that reading
    the next chunk meanwhile pays. SQLite writes in this process, holding the interpreter: a
    reader thread there measured no gain (fifth session) and costs a chunk of memory."""
    with sessions() as session:
        return session.get_bind().dialect.name == "postgresql"


class _Progress:
    """tqdm over the rows of a Parquet file, or over the bytes of a CSV read so far."""

    def __init__(self, source: Path, shown: bool) -> None:
        self.source, self.shown = source, shown

    def __enter__(self) -> tuple[Callable[[Layout, int], Iterator[Chunk]], Callable[[int], None]]:
        if file_format(self.source) == "parquet":
            self.bar = tqdm(total=parquet_rows(self.source), unit="rows", unit_scale=True,
                            disable=not self.shown, desc=self.source.name)
            return (lambda layout, rows: parquet_chunks(self.source, layout, rows)), self.bar.update
        self.handle = self.source.open("rb")
        self.bar = tqdm(total=self.source.stat().st_size, unit="B", unit_scale=True,
                        disable=not self.shown, desc=self.source.name)
        return (lambda layout, rows: csv_chunks(self.handle, layout, rows)), self._bytes_read

    def _bytes_read(self, _rows: int) -> None:
        self.bar.update(min(self.handle.tell(), self.bar.total) - self.bar.n)

    def __exit__(self, *exc: object) -> None:
        self.bar.close()
        if hasattr(self, "handle"):
            self.handle.close()


def _store_chunk(
    chunk: Chunk, kind: str, model: str, sessions: Callable[[], Session], settings: Settings,
    clock: Clock, actor: str, counts: ImportCounts, rejects: _Rejects,
) -> None:
    """Store the chunk; take refused rows out (into the reject file) and store the rest."""
    items, lines = chunk.items, chunk.lines
    while items:
        refused: dict[int, list[tuple[str, str]]] = {}
        with sessions() as session:
            try:
                window = InstantWindow.of(settings, clock.now())
                if kind == "predictions":
                    stored = service.ingest_prediction_items(session, model, items, window=window,
                                                             clock=clock, actor=actor)
                else:
                    written = service.ingest_outcome_items(session, model, items, window=window,
                                                           clock=clock, actor=actor)
                    counts.corrected += written.corrected
                    stored = service.PredictionResult(written.accepted, written.duplicates, written.expired)
                session.commit()
                counts.accepted += stored.accepted
                counts.duplicates += stored.duplicates
                counts.expired += stored.expired
                return
            except InvalidInput as exc:
                session.rollback()
                if any(e.index is None for e in exc.errors):
                    raise
                for e in exc.errors:
                    refused.setdefault(int(e.index), []).append((e.field, e.message))  # type: ignore[arg-type]
            except Conflict as exc:
                session.rollback()
                for c in exc.conflicts:
                    reason = (f"already stored for version {c['version']!r} with different content "
                              "(predictions are immutable)")
                    refused.setdefault(int(c["index"]), []).append(("id", reason))
        for index in sorted(refused):
            for field, reason in refused[index]:
                rejects.write(lines[index], field, reason)
        counts.rejected += len(refused)
        items = [it for i, it in enumerate(items) if i not in refused]
        lines = [ln for i, ln in enumerate(lines) if i not in refused]
