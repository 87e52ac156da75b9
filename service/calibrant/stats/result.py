"""Result types shared by every statistic.

A statistic never raises on valid-but-degenerate input (one class, an empty
window, perfect separation) and never hands NaN or infinity to a caller: it
returns a result whose ``status`` says why there is no number.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from enum import StrEnum


class Status(StrEnum):
    """Why a value is, or is not, there."""

    OK = "ok"
    INSUFFICIENT_DATA = "insufficient_data"  # defined in principle, too little data to trust
    UNDEFINED = "undefined"  # no value exists for this input (e.g. AUC with one class)


@dataclass(frozen=True, slots=True)
class Estimate:
    """One number with an optional 95 % interval and standard error.

    ``value`` is ``None`` whenever ``status`` is not ``ok``; ``reason`` says why
    in words a reader of the API can act on.
    """

    value: float | None
    status: Status = Status.OK
    reason: str = ""
    se: float | None = None
    ci: tuple[float, float] | None = None
    n: float | None = None
    extra: dict[str, float | int | None] = field(default_factory=dict)

    def __post_init__(self) -> None:
        for name in ("value", "se"):
            v = getattr(self, name)
            if v is not None and not math.isfinite(v):
                raise ValueError(f"{name} must be finite, got {v!r}")
        if self.ci is not None and not all(math.isfinite(b) for b in self.ci):
            raise ValueError(f"ci must be finite, got {self.ci!r}")

    @property
    def ok(self) -> bool:
        return self.status is Status.OK


def missing(status: Status, reason: str, n: float | None = None) -> Estimate:
    """An estimate with no value, stating why."""
    return Estimate(value=None, status=status, reason=reason, n=n)


def finite_or_none(x: float | None) -> float | None:
    """Map NaN and infinities to ``None`` so nothing non-finite escapes."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None
