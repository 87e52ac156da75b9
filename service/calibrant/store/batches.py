"""Validated ingest batches as plain columns, the hand-over from ingest to store."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime


@dataclass(frozen=True, slots=True)
class PredictionColumns:
    case_id: list[str]
    version: list[str]
    probability: list[float]
    scored_at: list[datetime]
    tags: list[str | None]  # canonical JSON (sorted keys) or None

    def __len__(self) -> int:
        return len(self.case_id)


@dataclass(frozen=True, slots=True)
class OutcomeColumns:
    case_id: list[str]
    label: list[int]
    observed_at: list[datetime]
    # When the event happened, if the sender knows (None: not sent). Not after observed_at.
    occurred_at: list[datetime | None]

    def __len__(self) -> int:
        return len(self.case_id)
