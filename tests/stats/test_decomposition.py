"""Murphy / Stephenson decomposition (calibrant.stats.decomposition) against docs/methods.md §21."""

from __future__ import annotations

import numpy as np
import pytest
from metrics_reference import DATASETS, dataset, ref
from sklearn.metrics import brier_score_loss

from calibrant.stats.decomposition import murphy_decomposition
from calibrant.stats.result import Status


@pytest.mark.parametrize("name", DATASETS)
def test_murphy_check_values(name: str) -> None:
    p, y = dataset(name)
    m = murphy_decomposition(y, p)
    # source: docs/methods.md §21 `murphy_10bins` (numpy; bins [k/10, (k+1)/10), last closed)
    r = ref(DATASETS[name], "murphy_10bins")
    assert m.reliability == pytest.approx(r["REL"], rel=1e-10)
    assert m.resolution == pytest.approx(r["RES"], rel=1e-10)
    assert m.uncertainty == pytest.approx(r["UNC"], rel=1e-12)
    assert m.within_bin_variance == pytest.approx(r["WBV"], rel=1e-9)
    assert m.within_bin_covariance == pytest.approx(r["WBC"], rel=1e-9)
    # the identity BS = REL - RES + UNC + WBV - WBC, against sklearn.metrics.brier_score_loss
    assert m.brier == pytest.approx(brier_score_loss(y, p), rel=1e-12)
    gen = m.generalised_resolution
    assert gen == pytest.approx(r["RES"] - r["WBV"] + r["WBC"], rel=1e-9)


def test_murphy_edge_cases() -> None:
    assert murphy_decomposition([], []).status is Status.NO_VALUE
    one = murphy_decomposition([0, 0, 0], [0.1, 0.15, 0.9])
    assert one.measured
    assert one.uncertainty == 0.0
    assert one.brier == pytest.approx(brier_score_loss([0, 0, 0], [0.1, 0.15, 0.9]), rel=1e-12)
    # p exactly on an edge: left-closed puts 0.2 in [0.2, 0.3); right-closed in (0.1, 0.2]
    left = murphy_decomposition([0, 1], [0.2, 0.25], n_bins=10, closed="left")
    right = murphy_decomposition([0, 1], [0.2, 0.25], n_bins=10, closed="right")
    assert left.n_bins_nonempty == 1
    assert right.n_bins_nonempty == 2
    assert left.brier == pytest.approx(right.brier, rel=1e-12)
    with pytest.raises(ValueError, match="closed"):
        murphy_decomposition([0], [0.1], closed="both")
    with pytest.raises(ValueError, match="n_bins"):
        murphy_decomposition([0], [0.1], n_bins=0)
    assert np.isfinite(murphy_decomposition([1], [1.0]).brier)
