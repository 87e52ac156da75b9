"""The typed answers of the ingest calls: the server's counts, summed over every batch sent."""

from __future__ import annotations

from typing import TypedDict


class PredictionCounts(TypedDict):
    """``send_predictions``: new rows stored, and items the server already had (idempotent re-posts)."""

    accepted: int
    duplicates: int


class OutcomeCounts(TypedDict):
    """``send_outcomes``: as for predictions, plus labels that replaced an earlier one (corrections)."""

    accepted: int
    duplicates: int
    corrected: int
