"""Webhook delivery: payloads and signing (pure), target checks, senders, the outbox and its job.

Producers of events call ``enqueue`` inside their own transaction; the
``deliver_due`` job sends what is due. Imports only ``store`` below it.
"""

from __future__ import annotations

from calibrant.notify.jobs import DeliveryStats, deliver_due
from calibrant.notify.outbox import enqueue
from calibrant.notify.senders import HttpSender, LoggingSender, RecordingSender, Sender

__all__ = [
    "DeliveryStats",
    "HttpSender",
    "LoggingSender",
    "RecordingSender",
    "Sender",
    "deliver_due",
    "enqueue",
]
