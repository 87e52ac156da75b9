"""Compare freshly computed reference values with the ones stored in a file.

Walks the computed structure; every leaf is looked up at the same path in
the stored one. Numbers are compared by relative difference
|a − b| / max(|a|, |b|) (0 when both are 0), everything else for equality.
Provenance (``provenance``, ``_provenance``, ``producer``) is not compared.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

SKIPPED_KEYS = frozenset({"provenance", "_provenance", "producer"})
# Tolerances of a passing check. Deterministic values (library calls, numpy formulas)
# reproduce to ~1e-13 (BLAS summation order); 1e-9 leaves room for that and still catches
# any change of a recipe or formula. Seeded simulations reproduce exactly unless numpy's
# generators change; 5 % is well inside what would alter a test that uses them.
DETERMINISTIC_RTOL = 1e-9
MONTE_CARLO_RTOL = 0.05
# Values that come out of a seeded Monte-Carlo simulation rather than a formula.
MONTE_CARLO_MARKERS = ("psi_null_95pct_simulated", "_simulated", "two_charts_first_false_alarm")


@dataclass
class Difference:
    path: str
    stored: Any
    computed: Any
    relative: float | None  # None: not comparable as numbers (missing, type or text change)

    @property
    def monte_carlo(self) -> bool:
        return any(m in self.path for m in MONTE_CARLO_MARKERS)


@dataclass
class Comparison:
    differences: list[Difference] = field(default_factory=list)
    n_compared: int = 0
    # (path, |Δ mean| / sqrt(se_file² + se_new²)) for simulated means with standard errors
    standardised: list[tuple[str, float]] = field(default_factory=list)

    def largest(self, *, monte_carlo: bool) -> Difference | None:
        numeric = [d for d in self.differences
                   if d.relative is not None and d.monte_carlo == monte_carlo]
        return max(numeric, key=lambda d: d.relative, default=None)

    def mismatches(self) -> list[Difference]:
        return [d for d in self.differences if d.relative is None]

    def beyond(self, deterministic: float, monte_carlo: float) -> list[Difference]:
        """Differences above the tolerance of their kind, plus every non-numeric mismatch."""
        return [d for d in self.differences
                if d.relative is None
                or d.relative > (monte_carlo if d.monte_carlo else deterministic)]


def _is_number(x: Any) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool)


def relative_difference(a: float, b: float) -> float:
    scale = max(abs(a), abs(b))
    return 0.0 if scale == 0 else abs(a - b) / scale


def compare(computed: Any, stored: Any, path: str = "", out: Comparison | None = None) -> Comparison:
    out = Comparison() if out is None else out
    if isinstance(computed, dict):
        if not isinstance(stored, dict):
            out.differences.append(Difference(path, stored, "<object>", None))
            return out
        for key, value in computed.items():
            if key in SKIPPED_KEYS:
                continue
            if key not in stored:
                out.differences.append(Difference(f"{path}/{key}", "<missing>", value, None))
                continue
            compare(value, stored[key], f"{path}/{key}", out)
        return out
    if isinstance(computed, list):
        if not isinstance(stored, list) or len(stored) != len(computed):
            out.differences.append(Difference(path, stored, computed, None))
            return out
        for i, (c, s) in enumerate(zip(computed, stored, strict=True)):
            compare(c, s, f"{path}[{i}]", out)
        return out
    out.n_compared += 1
    if _is_number(computed) and _is_number(stored):
        if isinstance(computed, int) != isinstance(stored, int):
            out.differences.append(Difference(path, stored, computed, None))  # 774 vs 774.0
        else:
            out.differences.append(Difference(path, stored, computed,
                                              relative_difference(computed, stored)))
    elif computed != stored:
        out.differences.append(Difference(path, stored, computed, None))
    return out


def missing_in_computed(computed: Any, stored: Any, path: str = "") -> list[str]:
    """Paths the stored file has and the computed structure lacks (outside provenance)."""
    if not (isinstance(computed, dict) and isinstance(stored, dict)):
        return []
    gone = []
    for key, value in stored.items():
        if key in SKIPPED_KEYS:
            continue
        if key not in computed:
            gone.append(f"{path}/{key}")
        else:
            gone += missing_in_computed(computed[key], value, f"{path}/{key}")
    return gone


def standardised_differences(computed: Any, stored: Any, path: str = "") -> list[tuple[str, float]]:
    """|Δ mean| in units of the combined Monte-Carlo SE, wherever both sides carry mean and se."""
    if not (isinstance(computed, dict) and isinstance(stored, dict)):
        return []
    if {"mean", "se"} <= computed.keys() and {"mean", "se"} <= stored.keys():
        se = (computed["se"] ** 2 + stored["se"] ** 2) ** 0.5
        return [(path, abs(computed["mean"] - stored["mean"]) / se)]
    out = []
    for key, value in computed.items():
        if key in stored and key not in SKIPPED_KEYS:
            out += standardised_differences(value, stored[key], f"{path}/{key}")
    return out
