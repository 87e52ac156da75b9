"""The typed answers of the ingest calls: the server's counts, summed over every batch sent."""

from __future__ import annotations

from typing import TypedDict


class _PredictionCountsAlways(TypedDict):
    accepted: int
    duplicates: int


class PredictionCounts(_PredictionCountsAlways, total=False):
    """``send_predictions``: new rows stored, and items the server already had (idempotent re-posts).

    ``expired`` (rows for a period the model's retention removed, not stored) is absent from the
    answers of servers older than retention, so it is not required."""

    expired: int


class _OutcomeCountsAlways(TypedDict):
    accepted: int
    duplicates: int
    corrected: int


class OutcomeCounts(_OutcomeCountsAlways, total=False):
    """``send_outcomes``: as for predictions, plus labels that replaced an earlier one (corrections);
    ``expired`` counts outcomes of cases retention removed."""

    expired: int
