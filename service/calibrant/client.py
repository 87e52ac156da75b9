"""The light client now ships as its own distribution, ``calibrant-client`` (clients/python/).

Re-exported here so ``from calibrant.client import Client`` keeps working in code
written against the server package; new code imports ``calibrant_client``.
"""

from __future__ import annotations

from calibrant_client.client import (
    MAX_BATCH_ITEMS,
    RETRY_EXCEPTIONS,
    RETRY_STATUSES,
    CalibrantError,
    CalibrantJobError,
    CalibrantRequestError,
    CalibrantUnavailableError,
    Client,
    encode_item,
    retry_after_seconds,
    rfc3339,
)
from calibrant_client.results import OutcomeCounts, PredictionCounts

__all__ = [
    "MAX_BATCH_ITEMS",
    "RETRY_EXCEPTIONS",
    "RETRY_STATUSES",
    "CalibrantError",
    "CalibrantJobError",
    "CalibrantRequestError",
    "CalibrantUnavailableError",
    "Client",
    "OutcomeCounts",
    "PredictionCounts",
    "encode_item",
    "retry_after_seconds",
    "rfc3339",
]
