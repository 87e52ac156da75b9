"""Reliability-diagram data (calibrant.stats.reliability) against sklearn and statsmodels."""

from __future__ import annotations

import numpy as np
import pytest
from metrics_reference import DATASETS, dataset
from sklearn.calibration import calibration_curve
from statsmodels.stats.proportion import proportion_confint

from calibrant.stats.reliability import reliability_diagram, wilson_interval
from calibrant.stats.result import Status


@pytest.mark.parametrize("name", DATASETS)
@pytest.mark.parametrize("strategy", ["uniform", "quantile"])
def test_matches_calibration_curve(name: str, strategy: str) -> None:
    p, y = dataset(name)
    d = reliability_diagram(y, p, strategy=strategy)
    full = [b for b in d.bins if b.count > 0]
    # source: sklearn.calibration.calibration_curve(n_bins=10, strategy), computed here
    pt, pp = calibration_curve(y, p, n_bins=10, strategy=strategy)
    np.testing.assert_allclose([b.observed_rate for b in full], pt, rtol=1e-12)
    np.testing.assert_allclose([b.mean_predicted for b in full], pp, rtol=1e-12)
    assert sum(b.count for b in d.bins) == y.size
    for b in full:
        # source: statsmodels proportion_confint(method="wilson"), computed here
        lo, hi = proportion_confint(round(b.observed_rate * b.count), b.count, method="wilson")
        assert (b.ci_low, b.ci_high) == pytest.approx((lo, hi), rel=1e-10, abs=1e-14)


def test_wilson_edges() -> None:
    assert wilson_interval(0, 0) is None
    lo, hi = wilson_interval(0, 10)
    assert lo == 0.0
    assert hi == pytest.approx(proportion_confint(0, 10, method="wilson")[1], rel=1e-12)
    d = reliability_diagram([], [])
    assert d.status is Status.NO_VALUE
    assert len(d.bins) == 10  # the default n_bins, each listed though empty
    assert all(b.count == 0 and b.observed_rate is None for b in d.bins)
