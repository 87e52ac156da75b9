"""``BatchingSender`` now ships in ``calibrant-client`` (``calibrant_client.batching``); re-exported here
so code written against the server package keeps working."""

from __future__ import annotations

from calibrant_client.batching import BatchingSender, FailedBatch

__all__ = ["BatchingSender", "FailedBatch"]
