"""The tests a window rule makes on one closed period: excess log-loss and PSI against no shift.

Pure functions of a period's sums; the rule kinds (``alarms.kinds``) add their
data floors and effect floors and turn the result into a verdict.

Excess log-loss (docs/methods.md §5.2-5.3). For the labeled rows of a window,
ℓ_i the row log-loss, H(p_i) its expectation under calibration (the binary
entropy) and x_i = logit p_i:

    D       = (Σℓ − ΣH) / n                 excess log-loss
    Var0 D  = Σ p(1 − p) x² / n²             its variance if the model is calibrated
    Δ       = D − D_ref
    z       = Δ / sqrt(Var0 D + Var0 D_ref)  one-sided: large z, more loss than the reference

because E[ℓ_i] = H(p_i) and Var ℓ_i = p_i(1 − p_i)x_i² when y_i ~ Bernoulli(p_i).
Without a labeled reference D_ref = Var0 D_ref = 0: the window is compared with
perfect calibration.

PSI no-shift level (docs/methods.md §17.2). Under "no shift" PSI on B frozen
bins is approximately (1/n + 1/m) χ²_{B−1} (a second-order expansion; Yurdakul
2018 studies its sampling distribution), so its 1 − α point is

    χ²_{1−α, B−1} · (1/n + 1/m).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy.stats import chi2, norm

__all__ = ["ExcessLogLossTest", "LogLossSums", "excess_log_loss_test", "psi_no_shift_level"]

# The two-sided 95 % normal point to six decimals, as the evidence of stored alarms has always used it.
_Z95_ROUNDED = 1.959964


@dataclass(frozen=True, slots=True)
class LogLossSums:
    """Labeled-row sums of a window: n, events, Σℓ, ΣH(p), Σ p(1−p)x² (docs/methods.md §2)."""

    n: float
    n1: float
    sl: float
    sh: float
    sv: float


@dataclass(frozen=True, slots=True)
class ExcessLogLossTest:
    """The one-sided z test of Δ = D − D_ref > 0 and its context (module docstring)."""

    excess: float  # D
    reference_excess: float  # D_ref; 0 without a labeled reference
    difference: float  # Δ
    se: float  # sqrt(Var0 D + Var0 D_ref)
    z: float
    z_critical: float  # z_{1−α}
    p_value: float  # one-sided, normal
    expected_log_loss: float  # E0[LL] = ΣH / n
    log_loss: float  # Σℓ / n
    reference_log_loss: float | None  # None without a labeled reference
    interval: tuple[float, float]  # Δ ± 1.96 SE


def excess_log_loss_test(current: LogLossSums, reference: LogLossSums | None,
                         level: float) -> ExcessLogLossTest:
    """z = Δ / sqrt(Var0 D + Var0 D_ref), Δ the excess log-loss over the reference's (docs/methods.md §5.3).

    A reference with no labeled row counts as none. ``current`` needs n > 0 and
    Σ p(1−p)x² > 0 (every p at 0, ½ or 1 leaves no null variance).
    """
    if current.n <= 0 or current.sv <= 0:
        raise ValueError("the window needs labeled rows and a positive null variance")
    d = (current.sl - current.sh) / current.n
    var = current.sv / current.n**2
    d_ref = var_ref = 0.0
    ll_ref = None
    if reference is not None and reference.n > 0:
        d_ref = (reference.sl - reference.sh) / reference.n
        var_ref = reference.sv / reference.n**2
        ll_ref = reference.sl / reference.n
    delta = d - d_ref
    se = math.sqrt(var + var_ref)
    z = delta / se
    return ExcessLogLossTest(
        excess=d, reference_excess=d_ref, difference=delta, se=se, z=z,
        z_critical=float(norm.ppf(1.0 - level)), p_value=float(norm.sf(z)),
        expected_log_loss=current.sh / current.n, log_loss=current.sl / current.n,
        reference_log_loss=ll_ref,
        interval=(delta - _Z95_ROUNDED * se, delta + _Z95_ROUNDED * se),
    )


def psi_no_shift_level(level: float, n_bins: int, n_reference: float, n_current: float) -> float:
    """χ²_{1−α, B−1} · (1/m + 1/n): PSI's 1 − ``level`` point when nothing shifted (docs/methods.md §17.2)."""
    return float(chi2.ppf(1.0 - level, n_bins - 1)) * (1.0 / n_reference + 1.0 / n_current)
