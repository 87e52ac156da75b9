"""Fixtures for webhook tests: a receiver on 127.0.0.1 and helpers to set up targets and events."""

from __future__ import annotations

from collections.abc import Iterator
from datetime import UTC, datetime

import pytest

from tests.notify.receiver import Receiver

START = datetime(2026, 12, 1, 9, 0, tzinfo=UTC)


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    r = Receiver().start()
    yield r
    r.stop()
