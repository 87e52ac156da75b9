"""calibrant-client: post predictions and outcomes to a Calibrant server from a scoring service.

Only httpx is needed; nothing of the server (FastAPI, SQLAlchemy, numpy) is installed with it.

    from calibrant_client import BatchingSender, Client
"""

from __future__ import annotations

from calibrant_client.batching import BatchingSender, FailedBatch
from calibrant_client.client import (
    MAX_BATCH_ITEMS,
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
    "BatchingSender",
    "CalibrantError",
    "CalibrantJobError",
    "CalibrantRequestError",
    "CalibrantUnavailableError",
    "Client",
    "FailedBatch",
    "OutcomeCounts",
    "PredictionCounts",
    "encode_item",
    "retry_after_seconds",
    "rfc3339",
]
__version__ = "0.1.0"
