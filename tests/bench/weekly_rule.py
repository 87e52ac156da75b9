"""The weekly degradation rule on simulated weeks: its false alarms in control and its detection delay.

Each simulated week of ``volume`` cases is judged by the service's own decision,
``alarms.kinds.excess_log_loss.excess_log_loss`` with the rule's default parameters
(``ExcessLogLossParams``: minimum relative effect 0.05, 200 labeled, 10 per class) at
the level the default budget gives it on one stream (``LEVEL``: its share of one false
alarm a year, 2/9, over 365.25/7 weeks; docs/methods.md §18.5), on the week's sums as
the service builds them from a summary (``stats.window_tests.log_loss_sums``, with its
per-bin part, so the saddlepoint tail is used). No labeled reference: the week is
compared with calibration, as for a model without one.

Delay: the change happens at a uniformly random case of week 0 (the stream ran
in control before it); the delay is the number of cases from the change to the
end of the first week that fires, the moment the closed week can be judged
(maturity waits are left out, as they are for the charts).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from calibrant.alarms import budget
from calibrant.alarms.kinds import DEFAULT_RULES
from calibrant.alarms.kinds.base import EVALUATIONS_PER_YEAR
from calibrant.alarms.kinds.excess_log_loss import ExcessLogLossParams, excess_log_loss
from calibrant.stats.summary import Summary
from calibrant.stats.window_tests import LogLossSums, log_loss_sums

Sampler = Callable[[np.random.Generator, int], np.ndarray]
Shift = Callable[[np.ndarray], np.ndarray]
PARAMS = ExcessLogLossParams()
_DEFAULTS = budget.split(1.0, [budget.RuleEntry(n, k.value, p, True) for n, k, p in DEFAULT_RULES])
SHARE = _DEFAULTS.share_of("excess-log-loss-weekly") or 0.0
LEVEL = budget.per_test_level(SHARE, EVALUATIONS_PER_YEAR["week"], 1)


def week_sums(p: np.ndarray, y: np.ndarray) -> LogLossSums:
    """The labeled-row sums the rule reads from a week's summary (docs/methods.md §2)."""
    return log_loss_sums(Summary.from_arrays(p, y.astype(np.int8)), False)


def fires(p: np.ndarray, q: np.ndarray, rng: np.random.Generator) -> bool:
    """One week with true risks q judged by the rule (scores p)."""
    y = (rng.random(p.size) < q).astype(float)
    return bool(excess_log_loss(week_sums(p, y), None, PARAMS, LEVEL).crossed)


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
