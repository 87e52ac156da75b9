"""Intervals for a mean of skewed per-case scores that keep their coverage at small n.

The per-case log-loss and squared error of a rare-event window are strongly
right-skewed (a few events with small p carry most of the mean). The plain
interval mean ± 1.96·SE then misses on the low side: a window that happens to
hold few events has both a low mean and a small SE. Hall's (1992) cubic
transformation of the studentised mean removes the first-order skewness term
of its Edgeworth expansion and stays monotone, so it inverts in closed form.
"""

from __future__ import annotations

import math

from calibrant.stats._numerics import Z95

__all__ = ["skew_corrected_interval"]


def skew_corrected_interval(
    mean: float, sd: float, third_central: float, n: float, *, z: float = Z95
) -> tuple[float, float] | None:
    """Hall's transformation interval for a population mean.

    With T = √n (x̄ − μ)/s (s with ddof 1), the sample skewness γ̂ = m₃/m₂^(3/2)
    (m_k = Σ(x − x̄)^k/n, scipy.stats.skew's default), a = γ̂/(3√n)
    and b = γ̂/(6√n), Hall's transformation is

        g(T) = T + a T² + a² T³/3 + b = ((1 + a T)³ − 1)/(3a) + b,

    which is N(0, 1) to order 1/n (the T² term cancels the n^(−1/2) term of
    the Edgeworth expansion P(T ≤ x) = Φ(x) + γ(2x² + 1)φ(x)/(6√n); the cubic
    term keeps g monotone). Inverting g(T) ∈ [−z, z]:

        g⁻¹(u) = ((1 + 3a(u − b))^(1/3) − 1)/a,
        μ ∈ [x̄ − s g⁻¹(z)/√n,  x̄ − s g⁻¹(−z)/√n].

    At γ̂ = 0 it is the normal interval x̄ ± z s/√n. None when n ≤ 1 or s is
    not positive and finite.

    References: Hall P (1992), On the removal of skewness by transformation,
    JRSS B 54(1):221–228; compared with bootstrap and Johnson's (1978)
    correction by Zhou XH & Dinh P (2005), Biostatistics 6(2):187–200 (both
    from memory). Coverage on our risk mixes: tests/bench/coverage.py.
    """
    if n <= 1 or not (math.isfinite(sd) and sd > 0.0) or not math.isfinite(third_central):
        return None
    se = sd / math.sqrt(n)
    gamma = third_central / (sd * sd * (n - 1.0) / n) ** 1.5
    a = gamma / (3.0 * math.sqrt(n))
    b = gamma / (6.0 * math.sqrt(n))

    def inverse(u: float) -> float:
        if abs(a) < 1e-12:
            return u - b
        return (math.copysign(abs(1.0 + 3.0 * a * (u - b)) ** (1.0 / 3.0),
                              1.0 + 3.0 * a * (u - b)) - 1.0) / a

    return (mean - se * inverse(z), mean - se * inverse(-z))
