"""Score drift from summaries vs scipy on the raw rows and docs/methods.md §21 drift checks."""

from __future__ import annotations

import numpy as np
import pytest
from metrics_reference import breast_cancer, ref, synthetic
from scipy import stats
from scipy.spatial.distance import jensenshannon

from calibrant.stats.result import Status
from calibrant.stats.summary import EDGES_P, Summary
from calibrant.stats.summary_drift import frozen_bins, score_drift

DATA = {"synthetic": synthetic, "breast_cancer": breast_cancer}
CHECK = {"synthetic": ("synthetic_drift_vs_reference", "psi_ref_deciles_laplace0.5"),
         "breast_cancer": ("breast_cancer_drift_train_vs_test_scores", "psi_ref_deciles_laplace0.5")}


def _pair(name: str):
    p_cur, _, p_ref = DATA[name]()
    unl = np.full(p_ref.size, -1)
    cur = Summary.from_arrays(p_cur, np.full(p_cur.size, -1))
    return p_cur, p_ref, cur, Summary.from_arrays(p_ref, unl)


@pytest.mark.parametrize("name", DATA)
def test_psi_and_js_exact_on_snapped_edges(name: str) -> None:
    p_cur, p_ref, cur, refs = _pair(name)
    d = score_drift(cur, refs)
    edges = np.array(d.bins.edges_p)
    assert set(edges[1:-1].tolist()) <= set(EDGES_P.tolist())  # snapped to fine edges
    rc = np.histogram(p_ref, edges)[0] + 0.5  # np.histogram is left-closed, as the fine grid
    cc = np.histogram(p_cur, edges)[0] + 0.5
    a, e = cc / cc.sum(), rc / rc.sum()
    # source: PSI = KL(a||e) + KL(e||a) with scipy.stats.entropy, on the same bins
    assert d.psi.value == pytest.approx(stats.entropy(a, e) + stats.entropy(e, a), rel=1e-10)
    r0, c0 = rc - 0.5, cc - 0.5
    # source: scipy.spatial.distance.jensenshannon(base=2), unsmoothed, same bins
    assert d.js_distance.value == pytest.approx(
        jensenshannon(r0 / r0.sum(), c0 / c0.sum(), base=2), rel=1e-10)
    # source: docs/methods.md §17.2 null level chi2_{0.95,B-1}(1/n + 1/m) via scipy.stats.chi2.ppf
    b = edges.size - 1
    assert d.psi.extra["null_95"] == pytest.approx(
        stats.chi2.ppf(0.95, b - 1) * (1 / p_ref.size + 1 / p_cur.size), rel=1e-12)


@pytest.mark.parametrize("name", DATA)
def test_psi_near_unsnapped_deciles(name: str) -> None:
    _, _, cur, refs = _pair(name)
    key, field = CHECK[name]
    # source: docs/methods.md §21 PSI at exact reference deciles with +0.5 smoothing; snapping moves
    # each edge by at most one fine bin: tolerance 0.01 chosen for that
    assert score_drift(cur, refs).psi.value == pytest.approx(ref(key, field), abs=0.01)


@pytest.mark.parametrize("name", DATA)
def test_ks_lower_bound(name: str) -> None:
    p_cur, p_ref, cur, refs = _pair(name)
    ks = score_drift(cur, refs).ks
    exact = stats.ks_2samp(p_ref, p_cur).statistic  # source: scipy.stats.ks_2samp on rows
    assert ks.value <= exact + 1e-12
    assert ks.value >= exact - ks.extra["max_shortfall"] - 1e-12


def test_frozen_bins_reused_and_edge_cases() -> None:
    _, _, cur, refs = _pair("synthetic")
    bins = frozen_bins(refs)
    assert len(bins.starts) == 10  # deciles of 2000 continuous scores do not collide
    assert score_drift(cur, refs, bins=bins).bins is bins
    # same sample on both sides: no drift (definition: PSI = 0, JS = 0, KS = 0 iff a = e)
    same = score_drift(refs, refs, n_null=0)
    assert same.psi.value == pytest.approx(0.0, abs=1e-15)
    assert same.ks.value == pytest.approx(0.0, abs=1e-15)
    empty = score_drift(Summary.empty(), refs)
    assert empty.psi.status is Status.NO_VALUE
    assert empty.ks.status is Status.NO_VALUE
    with pytest.raises(ValueError, match="empty"):
        frozen_bins(Summary.empty())
