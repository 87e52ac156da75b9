"""The weekly degradation rule on simulated weeks: its false alarms in control and its detection delay.

Each simulated week of ``volume`` cases is judged by the service's own decision,
``alarms.kinds.excess_log_loss.excess_log_loss`` with the rule's default parameters
(``ExcessLogLossParams``: level 0.01, minimum relative effect 0.05, 200 labeled,
10 per class), on the week's exact sums (docs/methods.md §2): n, events, Σℓ, ΣH(p) and
Σ p(1 − p) logit(p)², with ℓ the log-loss of a case and H(p) its entropy. No
labeled reference: the week is compared with calibration, as for a model
without one.

Delay: the change happens at a uniformly random case of week 0 (the stream ran
in control before it); the delay is the number of cases from the change to the
end of the first week that fires, the moment the closed week can be judged
(maturity waits are left out, as they are for the charts).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy.special import logit

from calibrant.alarms.kinds.excess_log_loss import ExcessLogLossParams, excess_log_loss
from calibrant.stats.window_tests import LogLossSums

Sampler = Callable[[np.random.Generator, int], np.ndarray]
Shift = Callable[[np.ndarray], np.ndarray]
PARAMS = ExcessLogLossParams()


def week_sums(p: np.ndarray, y: np.ndarray) -> LogLossSums:
    """The labeled-row sums the rule reads from a week's summary (docs/methods.md §2)."""
    loss = -(y * np.log(p) + (1 - y) * np.log1p(-p))
    entropy = -(p * np.log(p) + (1 - p) * np.log1p(-p))
    return LogLossSums(n=float(p.size), n1=float(y.sum()), sl=float(loss.sum()), sh=float(entropy.sum()),
                       sv=float(np.sum(p * (1 - p) * logit(p) ** 2)))


def fires(p: np.ndarray, q: np.ndarray, rng: np.random.Generator) -> bool:
    """One week with true risks q judged by the rule (scores p)."""
    y = (rng.random(p.size) < q).astype(float)
    return bool(excess_log_loss(week_sums(p, y), None, PARAMS).crossed)


def false_alarms(sampler: Sampler, rng: np.random.Generator, weeks: int, volume: int) -> int:
    """Weeks that fire when every case is calibrated (y ~ Bernoulli(p))."""
    count = 0
    for _ in range(weeks):
        p = sampler(rng, volume)
        count += fires(p, p, rng)
    return count


def delay(sampler: Sampler, shift: Shift, rng: np.random.Generator, runs: int, volume: int,
          max_weeks: int = 104) -> tuple[float, int]:
    """Mean cases from the change to the end of the first firing week, and runs never detected."""
    delays, missed = [], 0
    for _ in range(runs):
        change = int(rng.integers(0, volume))
        for week in range(max_weeks):
            p = sampler(rng, volume)
            q = shift(p)
            if week == 0:
                q[:change] = p[:change]
            if fires(p, q, rng):
                delays.append((week + 1) * volume - change)
                break
        else:
            missed += 1
    return (float(np.mean(delays)) if delays else float("nan")), missed
