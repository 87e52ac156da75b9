"""The typed answers of the ingest calls: the server's counts, summed over every batch sent."""

from __future__ import annotations

from typing import NotRequired, TypedDict


class PredictionCounts(TypedDict):
    """``send_predictions``: new rows stored, and items the server already had (idempotent re-posts)."""

    accepted: int
    duplicates: int
    # Rows for before the model's retention boundary, not stored; absent from servers older than
    # retention, so not required.
    expired: NotRequired[int]


class OutcomeCounts(TypedDict):
    """``send_outcomes``: as for predictions, plus labels that replaced an earlier one (corrections)."""

    accepted: int
    duplicates: int
    corrected: int
    expired: NotRequired[int]  # outcomes of cases retention removed: not stored
