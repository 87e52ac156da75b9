"""Idempotent writes of predictions and outcomes (all SQL of the ingest path).

Predictions: on PostgreSQL a batch whose keys are all new is appended with
one ``COPY`` (``bulk.append_if_all_new``). Otherwise it is merged with ``INSERT … SELECT …
ON CONFLICT DO NOTHING`` from the staging table; its row count separates new
rows from re-posts. Rows that were not new
are compared with what is stored; any difference rejects the whole batch.
Concurrent writers of the same key are safe on PostgreSQL because the
conflicting INSERT waits for the other transaction and the comparison runs
as a new statement that sees the committed row.

Retention: rows for before the model's boundary (``models.pruned_before``) are counted
``expired`` and not written: the raw rows of that period are gone and its summaries are final
(``store.retention_repo``).

Outcomes: a model's outcome batches are serialised (a row lock on the model
on PostgreSQL, the single SQLite writer otherwise) so that classifying each
outcome as new, duplicate or correction cannot race.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import Connection, String, text

from calibrant.store import dirty, retention_repo
from calibrant.store.batches import OutcomeColumns, PredictionColumns
from calibrant.store.bulk import (
    OUTCOME_STAGING,
    PREDICTION_COLUMNS,
    PREDICTION_STAGING,
    append_if_all_new,
    db_instant,
    stage,
)
from calibrant.store.dirty import BucketKey, hour_of
from calibrant.store.types import UTCDateTime


@dataclass(frozen=True, slots=True)
class PredictionConflict:
    index: int
    case_id: str
    version: str


@dataclass(frozen=True, slots=True)
class PredictionWrite:
    accepted: int
    duplicates: int
    conflicts: list[PredictionConflict]
    expired: int = 0


@dataclass(frozen=True, slots=True)
class OutcomeWrite:
    accepted: int
    duplicates: int
    corrected: int
    # case ids whose label is new or changed, for whoever needs to recompute
    changed_case_ids: list[str]
    expired: int = 0  # for cases retention removed: not written


def insert_predictions(
    conn: Connection, model_id: int, batch: PredictionColumns, received_at: datetime
) -> PredictionWrite:
    boundary = retention_repo.boundary_for_ingest(conn, model_id)
    kept = None if boundary is None else [i for i, t in enumerate(batch.scored_at) if t >= boundary]
    if kept is not None and len(kept) < len(batch):
        written = _insert_predictions(conn, model_id, _subset(batch, kept), received_at)
        conflicts = [PredictionConflict(kept[c.index], c.case_id, c.version) for c in written.conflicts]
        return PredictionWrite(written.accepted, written.duplicates, conflicts, len(batch) - len(kept))
    return _insert_predictions(conn, model_id, batch, received_at)


def _subset(batch: PredictionColumns, kept: list[int]) -> PredictionColumns:
    return PredictionColumns([batch.case_id[i] for i in kept], [batch.version[i] for i in kept],
                             [batch.probability[i] for i in kept], [batch.scored_at[i] for i in kept],
                             [batch.tags[i] for i in kept])


def _insert_predictions(
    conn: Connection, model_id: int, batch: PredictionColumns, received_at: datetime
) -> PredictionWrite:
    if not len(batch):
        return PredictionWrite(0, 0, [])
    conflicts: list[PredictionConflict]
    if _append_clean_batch(conn, model_id, batch, received_at):
        inserted, conflicts = len(batch), []
    else:
        inserted, conflicts = _merge_via_staging(conn, model_id, batch, received_at)
    if inserted and not conflicts:
        buckets = {(v, hour_of(t)) for v, t in zip(batch.version, batch.scored_at, strict=True)}
        dirty.mark(conn, (BucketKey(model_id, v, h) for v, h in buckets), received_at)
    return PredictionWrite(inserted, len(batch) - inserted, conflicts)


def _append_clean_batch(
    conn: Connection, model_id: int, batch: PredictionColumns, received_at: datetime
) -> bool:
    """Most batches are entirely new: on PostgreSQL write them with one COPY, no staging or merge."""
    if conn.dialect.name != "postgresql":
        return False  # measured no gain on SQLite (bulk.py)
    # Key order (code points = the "C" collation of case_id) keeps concurrent overlapping
    # appends from deadlocking, as the ORDER BY of the merge does.
    order = sorted(range(len(batch)), key=lambda i: (batch.case_id[i], batch.version[i]))
    rows = [
        (
            model_id,
            batch.case_id[i],
            batch.version[i],
            batch.probability[i],
            batch.scored_at[i],
            batch.tags[i],
            received_at,
        )
        for i in order
    ]
    return append_if_all_new(conn, "predictions", PREDICTION_COLUMNS, rows)


def _merge_via_staging(
    conn: Connection, model_id: int, batch: PredictionColumns, received_at: datetime
) -> tuple[int, list[PredictionConflict]]:
    rows = list(
        zip(
            range(len(batch)),
            batch.case_id,
            batch.version,
            batch.probability,
            batch.scored_at,
            batch.tags,
            strict=True,
        )
    )
    stage(conn, "staging_predictions", PREDICTION_STAGING, rows)
    # "WHERE true" resolves SQLite's parsing ambiguity between a join's ON and ON CONFLICT;
    # inserting in key order keeps concurrent overlapping batches from deadlocking.
    inserted = conn.execute(
        text(
            "INSERT INTO predictions "
            "(model_id, case_id, version, probability, scored_at, tags, received_at) "
            "SELECT :model_id, case_id, version, probability, scored_at, tags, :received_at "
            "FROM staging_predictions WHERE true ORDER BY case_id, version "
            "ON CONFLICT (model_id, case_id, version) DO NOTHING"
        ),
        {"model_id": model_id, "received_at": db_instant(conn, received_at)},
    ).rowcount
    conflicts: list[PredictionConflict] = []
    if inserted < len(batch):
        found = conn.execute(
            text(
                "SELECT s.idx, s.case_id, s.version FROM staging_predictions s "
                "JOIN predictions p ON p.model_id = :model_id "
                "AND p.case_id = s.case_id AND p.version = s.version "
                "WHERE p.probability <> s.probability OR p.scored_at <> s.scored_at "
                "OR COALESCE(p.tags, '') <> COALESCE(s.tags, '') ORDER BY s.idx"
            ),
            {"model_id": model_id},
        )
        conflicts = [PredictionConflict(int(i), c, v) for i, c, v in found]
    return inserted, conflicts


def lock_model_for_outcomes(conn: Connection, model_id: int) -> None:
    if conn.dialect.name == "postgresql":
        conn.execute(text("SELECT id FROM models WHERE id = :id FOR UPDATE"), {"id": model_id})


def upsert_outcomes(
    conn: Connection, model_id: int, batch: OutcomeColumns, received_at: datetime
) -> OutcomeWrite:
    lock_model_for_outcomes(conn, model_id)
    rows = list(
        zip(range(len(batch)), batch.case_id, batch.label, batch.observed_at, batch.occurred_at,
            strict=True)
    )
    stage(conn, "staging_outcomes", OUTCOME_STAGING, rows)
    boundary = retention_repo.boundary_for_ingest(conn, model_id, locked=True)
    expired = set() if boundary is None else _drop_expired(conn, model_id, boundary)
    existing = conn.execute(
        text(
            "SELECT s.idx, o.label, o.revision FROM staging_outcomes s "
            "JOIN outcomes o ON o.model_id = :model_id AND o.case_id = s.case_id"
        ),
        {"model_id": model_id},
    )
    current = {int(idx): (int(label), int(rev)) for idx, label, rev in existing}
    received = db_instant(conn, received_at)
    new_ids: list[str] = []
    corrections: list[dict] = []
    duplicates = 0
    for idx in range(len(batch)):
        if idx in expired:
            continue
        if idx not in current:
            new_ids.append(batch.case_id[idx])
        elif current[idx][0] == batch.label[idx]:
            duplicates += 1  # the same label again, whatever its observed_at
        else:
            corrections.append({
                "model_id": model_id,
                "case_id": batch.case_id[idx],
                "label": batch.label[idx],
                "observed_at": db_instant(conn, batch.observed_at[idx]),
                "occurred_at": _optional_instant(conn, batch.occurred_at[idx]),
                "received_at": received,
                "revision": current[idx][1] + 1,
            })
    params = {"model_id": model_id, "received_at": received}
    if new_ids or corrections:
        # History first, while outcomes still hold the previous labels: one row per new or
        # changed label, set-based from staging (executemany cost ~20 µs a row on PostgreSQL).
        conn.execute(text(
            "INSERT INTO outcome_revisions "
            "(model_id, case_id, revision, label, observed_at, occurred_at, received_at) "
            "SELECT :model_id, s.case_id, COALESCE(o.revision, 0) + 1, s.label, s.observed_at, "
            "s.occurred_at, :received_at "
            "FROM staging_outcomes s "
            "LEFT JOIN outcomes o ON o.model_id = :model_id AND o.case_id = s.case_id "
            "WHERE o.case_id IS NULL OR o.label <> s.label ORDER BY s.case_id"
        ), params)
    if corrections:  # rare: row by row
        conn.execute(
            text(
                "UPDATE outcomes SET label = :label, observed_at = :observed_at, "
                "occurred_at = :occurred_at, received_at = :received_at, revision = :revision "
                "WHERE model_id = :model_id AND case_id = :case_id"
            ),
            corrections,
        )
    if new_ids:
        # "WHERE true" resolves SQLite's parsing ambiguity (see _merge_via_staging); no conflict
        # is possible: this model's outcome batches are serialised and ids are unique per batch.
        conn.execute(text(
            "INSERT INTO outcomes "
            "(model_id, case_id, label, observed_at, first_observed_at, occurred_at, received_at, revision) "
            "SELECT :model_id, s.case_id, s.label, s.observed_at, s.observed_at, s.occurred_at, "
            ":received_at, 1 "
            "FROM staging_outcomes s WHERE NOT EXISTS "
            "(SELECT 1 FROM outcomes o WHERE o.model_id = :model_id AND o.case_id = s.case_id) "
            "ORDER BY s.case_id"
        ), params)
    changed = new_ids + [r["case_id"] for r in corrections]
    if changed:
        _mark_outcome_buckets(conn, model_id, set(changed), received_at)
    return OutcomeWrite(
        accepted=len(new_ids),
        duplicates=duplicates,
        corrected=len(corrections),
        changed_case_ids=changed,
        expired=len(expired),
    )


def _drop_expired(conn: Connection, model_id: int, boundary: datetime) -> set[int]:
    """Take out of staging the outcomes of cases retention removed, and return their indexes.

    A case is gone when it has predictions, all scored before the boundary (being removed), or
    none at all and the outcome was observed before the boundary: its prediction, scored
    before the outcome was observed, lay before the boundary too. (A case that lost its
    prediction and gets an outcome observed after the boundary looks like a case whose
    prediction has not arrived yet; it is stored and ages out in turn; docs/retention.md.)
    """
    params = {"model_id": model_id, "boundary": db_instant(conn, boundary)}
    found = conn.execute(text(
        "SELECT s.idx FROM staging_outcomes s WHERE NOT EXISTS "
        "(SELECT 1 FROM predictions p WHERE p.model_id = :model_id AND p.case_id = s.case_id "
        "AND p.scored_at >= :boundary) "
        "AND (s.observed_at < :boundary OR EXISTS "
        "(SELECT 1 FROM predictions p WHERE p.model_id = :model_id AND p.case_id = s.case_id))"
    ), params)
    expired = {int(i) for (i,) in found}
    if expired:
        conn.execute(text("DELETE FROM staging_outcomes WHERE idx = :idx"),
                     [{"idx": i} for i in sorted(expired)])
    return expired


def _optional_instant(conn: Connection, value: datetime | None) -> object:
    return None if value is None else db_instant(conn, value)


def _mark_outcome_buckets(conn: Connection, model_id: int, changed: set[str], now: datetime) -> None:
    """Mark the buckets of every version's prediction of the cases whose label changed.

    A case without a prediction yet marks nothing: its prediction's ingest will.
    """
    # IN (subquery), not a join: SQLite planned the join as a scan of the model's
    # predictions with a scan of staging per row (45 s for 5,000 outcomes against
    # 160,000 predictions); the IN form searches the primary key per staged id.
    found = conn.execute(
        text(
            "SELECT p.case_id, p.version, p.scored_at FROM predictions p "
            "WHERE p.model_id = :model_id AND p.case_id IN (SELECT case_id FROM staging_outcomes)"
        ).columns(case_id=String, version=String, scored_at=UTCDateTime),
        {"model_id": model_id},
    )
    keys = {
        BucketKey(model_id, version, hour_of(scored_at))
        for case_id, version, scored_at in found
        if case_id in changed
    }
    dirty.mark(conn, keys, now)
