"""Result types shared by every statistic.

A statistic never raises on valid-but-degenerate input (one class, an empty
window, perfect separation) and never hands NaN or infinity to a caller: it
returns a result whose ``status`` says why there is no number.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from enum import StrEnum
from typing import Literal, get_args

import numpy as np


class Status(StrEnum):
    """Why a value is, or is not, there."""

    MEASURED = "measured"
    TOO_FEW_CASES = "too_few_cases"  # defined in principle, too little data to trust
    NO_VALUE = "no_value"  # no value exists for this input (e.g. AUC with one class)


# The values of Status as a type, for schemas; importing fails if the two ever list different names.
StatusName = Literal["measured", "too_few_cases", "no_value"]
if tuple(s.value for s in Status) != get_args(StatusName):
    raise RuntimeError("calibrant.stats.result: StatusName and Status list different names")


@dataclass(frozen=True, slots=True)
class Estimate:
    """One number with an optional 95 % interval and standard error.

    ``value`` is ``None`` whenever ``status`` is not ``ok``; ``reason`` says why
    in words a reader of the API can act on.
    """

    value: float | None
    status: Status = Status.MEASURED
    reason: str = ""
    se: float | None = None
    ci: tuple[float, float] | None = None
    n: float | None = None
    extra: dict[str, float | int | str | None] = field(default_factory=dict)

    def __post_init__(self) -> None:
        for name in ("value", "se", "n"):
            v = getattr(self, name)
            if v is not None and not math.isfinite(v):
                raise ValueError(f"{name} must be finite, got {v!r}")
        if self.ci is not None and not all(math.isfinite(b) for b in self.ci):
            raise ValueError(f"ci must be finite, got {self.ci!r}")
        for key, v in self.extra.items():
            if isinstance(v, float) and not math.isfinite(v):
                raise ValueError(f"extra[{key!r}] must be finite, got {v!r}")

    @property
    def measured(self) -> bool:
        return self.status is Status.MEASURED


def missing(
    status: Status,
    reason: str,
    n: float | None = None,
    extra: Mapping[str, float | int | str | None] | None = None,
) -> Estimate:
    """An estimate with no value, stating why."""
    return Estimate(value=None, status=status, reason=reason, n=finite_or_none(n),
                    extra=clean_extra(extra))


def clean_extra(
    extra: Mapping[str, float | int | str | None] | None,
) -> dict[str, float | int | str | None]:
    """Copy ``extra`` with floats passed through :func:`finite_or_none`, ints kept as ints."""
    clean: dict[str, float | int | str | None] = {}
    for key, v in (extra or {}).items():
        if v is None or isinstance(v, str):
            clean[key] = v
        elif isinstance(v, bool | int | np.integer):
            clean[key] = int(v)
        else:
            clean[key] = finite_or_none(v)
    return clean


def estimate(
    value: float | None,
    *,
    se: float | None = None,
    ci: tuple[float, float] | None = None,
    n: float | None = None,
    extra: Mapping[str, float | int | str | None] | None = None,
    reason: str = "",
    no_value_reason: str = "not finite for this input",
) -> Estimate:
    """Build a ``measured`` estimate, mapping every non-finite number to ``None``.

    If ``value`` itself is not finite the result is ``no_value`` with
    ``no_value_reason``; a non-finite ``se`` or ``ci`` bound just drops the
    interval. ``extra`` values that are floats pass through
    :func:`finite_or_none`; ints and strings are kept.
    """
    clean = clean_extra(extra)
    nn = finite_or_none(n)
    val = finite_or_none(value)
    if val is None:
        return Estimate(value=None, status=Status.NO_VALUE, reason=no_value_reason, n=nn,
                        extra=clean)
    s = finite_or_none(se)
    interval = None
    if ci is not None:
        lo, hi = finite_or_none(ci[0]), finite_or_none(ci[1])
        if lo is not None and hi is not None:
            interval = (lo, hi)
    return Estimate(value=val, se=s, ci=interval, n=nn, extra=clean, reason=reason)


def finite_or_none(x: float | None) -> float | None:
    """Map NaN and infinities to ``None`` so nothing non-finite escapes."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None
