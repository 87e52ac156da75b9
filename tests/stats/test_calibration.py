"""O/E, Spiegelhalter's z and Hosmer–Lemeshow (calibrant.stats.calibration)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from metrics_reference import DATASETS, REF, dataset, ref
from scipy import stats

from calibrant.stats import calibration as cal
from calibrant.stats.result import Status


@pytest.mark.parametrize("name", DATASETS)
def test_observed_expected(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    r = cal.observed_expected(y, p)
    # source: docs/methods.md §21 `O_over_E`, `O_over_E_95ci`, `O_minus_E_z` (numpy formulas)
    assert r.value == pytest.approx(ref(key, "O_over_E"), rel=1e-12)
    # the check value uses z = 1.96, we use norm.ppf(0.975) = 1.959964: 2e-6 relative apart
    assert r.ci == pytest.approx(tuple(ref(key, "O_over_E_95ci")), rel=1e-5)
    assert r.extra["z"] == pytest.approx(ref(key, "O_minus_E_z"), rel=1e-10)
    assert r.extra["observed"] == ref(key, "observed_events")
    assert r.extra["expected"] == pytest.approx(ref(key, "expected_events"), rel=1e-12)


def test_observed_expected_edges() -> None:
    assert cal.observed_expected([], []).status is Status.NO_VALUE
    assert cal.observed_expected([0, 1], [0.0, 0.0]).status is Status.NO_VALUE  # E = 0
    r = cal.observed_expected([0, 0], [0.2, 0.3])  # O = 0: value, no log-scale interval
    assert r.measured
    assert r.value == 0.0
    assert r.ci is None
    assert r.reason


@pytest.mark.parametrize("name", DATASETS)
def test_spiegelhalter_check_values(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    z = cal.spiegelhalter_z(y, p)
    # source: docs/methods.md §21 `spiegelhalter_z` (numpy) and p from scipy.stats.norm.sf
    assert z.value == pytest.approx(ref(key, "spiegelhalter_z"), rel=1e-10)
    assert z.extra["p_value"] == pytest.approx(ref(key, "spiegelhalter_p_two_sided"), rel=1e-7)
    # summary path: power sums give the same z ([D] docs/methods.md §10)
    pos = y == 1
    num, var = cal.spiegelhalter_sums_from_power_sums(
        pos.sum(), p[pos].sum(), p.sum(), (p**2).sum(), (p**3).sum(), (p**4).sum())
    s = cal.spiegelhalter_from_sums(num, var, scale=float(np.sum(p * (1 - p))))
    assert s.value == pytest.approx(z.value, rel=1e-9)


def test_spiegelhalter_published_example() -> None:
    # source: Rufibach (2010) J Clin Epidemiol 63:938, Table 1 (1.06 and 1.22, two decimals)
    m1 = cal.spiegelhalter_z([1, 0], [0.2, 0.2]).value
    m2 = cal.spiegelhalter_z([1, 0], [0.4, 0.5]).value
    assert round(m1, 2) == REF["published"]["spiegelhalter_rufibach_2010_model1"]["value"]
    assert round(m2, 2) == REF["published"]["spiegelhalter_rufibach_2010_model2"]["value"]
    # full precision: docs/methods.md §21 edge_cases (numpy formula)
    assert m1 == pytest.approx(ref("edge_cases", "spiegelhalter_rufibach_model1"), rel=1e-12)
    assert m2 == pytest.approx(ref("edge_cases", "spiegelhalter_rufibach_model2"), rel=1e-12)


def test_spiegelhalter_all_half_undefined() -> None:
    z = cal.spiegelhalter_z([0, 1, 1], [0.5, 0.5, 0.5])
    assert z.status is Status.NO_VALUE
    assert z.value is None
    assert cal.spiegelhalter_z([], []).status is Status.NO_VALUE


@pytest.mark.parametrize("name", DATASETS)
def test_hosmer_lemeshow_check_values(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    h = cal.hosmer_lemeshow(y, p, min_expected=0.0)
    r = ref(key, "hosmer_lemeshow_equal_count_groups")
    # source: docs/methods.md §21 `hosmer_lemeshow_equal_count_groups` (numpy formula)
    assert h.statistic == pytest.approx(r["C"], rel=1e-10)
    assert h.df == r["df_external(g)"] == 10
    assert [t[:2] for t in h.table] == [tuple(map(float, t[:2])) for t in r["table_n_O_E"]]
    assert h.measured
    # the p-value needs every group at P_VALUE_MIN_EXPECTED expected events and non-events,
    # read here from the reference table (synthetic: 9.18; breast_cancer: 5e-6)
    n_j, _, e_j = (np.array(c, dtype=float) for c in zip(*r["table_n_O_E"], strict=True))
    if np.min(np.minimum(e_j, n_j - e_j)) >= cal.P_VALUE_MIN_EXPECTED:
        # source: docs/methods.md §21 `p_df10` (scipy.stats.chi2.sf with g = 10 df)
        assert h.p_value == pytest.approx(r["p_df10"], rel=1e-7)
        assert h.reason == ""
    else:
        assert h.p_value is None
        assert "no p-value" in h.reason
    q = cal.hosmer_lemeshow(y, p, grouping="quantile", min_expected=0.0)
    # source: docs/methods.md §21 `hosmer_lemeshow_quantile_edges`
    assert q.statistic == pytest.approx(ref(key, "hosmer_lemeshow_quantile_edges")["C"], rel=1e-10)


def _pandas_hosmer_lemeshow(p: np.ndarray, y: np.ndarray, g: int) -> tuple[pd.DataFrame, float]:
    """Independent computation: pandas deciles of rank, groupby totals, the 1980 formula."""
    frame = pd.DataFrame({"p": p, "y": y})
    frame["group"] = pd.qcut(frame["p"].rank(method="first"), g, labels=False)
    t = frame.groupby("group").agg(n=("y", "size"), O=("y", "sum"), E=("p", "sum"))
    c = float((((t.O - t.E) ** 2) / (t.E * (1.0 - t.E / t.n))).sum())
    return t, c


def test_hosmer_lemeshow_against_pandas_and_scipy() -> None:
    rng = np.random.default_rng(314)
    p = rng.beta(2.0, 5.0, 3_000)  # n divisible by 10: every decile holds exactly 300 rows
    y = (rng.random(3_000) < p).astype(int)
    table, c = _pandas_hosmer_lemeshow(p, y, 10)
    assert (table.n == 300).all()
    h = cal.hosmer_lemeshow(y, p)
    assert h.measured
    assert h.statistic == pytest.approx(c, rel=1e-10)
    assert h.df == 10
    # source: scipy.stats.chi2 upper tail with g = 10 degrees of freedom (model fitted elsewhere)
    assert h.p_value == pytest.approx(stats.chi2.sf(c, 10), rel=1e-9)
    assert h.min_expected >= cal.P_VALUE_MIN_EXPECTED
    assert h.reason == ""
    # the group-totals entry point gives the same answer from the pandas table
    hg = cal.hosmer_lemeshow_from_groups(table.n, table.O, table.E)
    assert hg.statistic == pytest.approx(c, rel=1e-10)
    assert hg.p_value == pytest.approx(h.p_value, rel=1e-9)
    # continuous p: quantile-edge groups are the same deciles
    q = cal.hosmer_lemeshow(y, p, grouping="quantile")
    assert q.statistic == pytest.approx(c, rel=1e-10)


def test_hosmer_lemeshow_p_value_floor_and_df() -> None:
    n_j = np.full(4, 100.0)
    o_j = np.array([12.0, 20.0, 35.0, 52.0])
    e_j = np.array([10.0, 25.0, 40.0, 50.0])
    c = float(np.sum((o_j - e_j) ** 2 / (e_j * (1 - e_j / n_j))))  # Hosmer & Lemeshow (1980)
    h = cal.hosmer_lemeshow_from_groups(n_j, o_j, e_j)
    assert h.statistic == pytest.approx(c, rel=1e-12)
    assert (h.df, h.n_groups) == (4, 4)
    assert h.p_value == pytest.approx(stats.chi2.sf(c, 4), rel=1e-12)  # scipy, g df
    # below the p-value floor: statistic kept when the caller lowers min_expected
    e_low = e_j.copy()
    e_low[0] = 4.5
    low = cal.hosmer_lemeshow_from_groups(n_j, o_j, e_low, min_expected=0.0)
    assert low.measured
    assert low.statistic is not None
    assert low.p_value is None
    assert "5 expected" in low.reason
    at_floor = e_j.copy()
    at_floor[0] = cal.P_VALUE_MIN_EXPECTED
    assert cal.hosmer_lemeshow_from_groups(n_j, o_j, at_floor, min_expected=0).p_value is not None
    # and with the default floor the same table is too_few_cases
    assert cal.hosmer_lemeshow_from_groups(n_j, o_j, e_low).status is Status.TOO_FEW_CASES
    # an empty group drops out and takes its degree of freedom with it
    five = cal.hosmer_lemeshow_from_groups(np.append(n_j, 0.0), np.append(o_j, 0.0),
                                           np.append(e_j, 0.0))
    assert (five.df, five.p_value) == (h.df, h.p_value)


def test_hosmer_lemeshow_holds_its_level() -> None:
    """Calibrated windows, model fitted elsewhere: rejection at 5 % and 1 % in a binomial band."""
    rng = np.random.default_rng(20240615)
    reps, n = 2_000, 1_300
    p_values, stat = [], []
    for _ in range(reps):
        # near the p-value floor: the lowest decile expects 4-6 events, so about 60 %
        # of the windows get a p-value; the level must hold there too
        p = rng.beta(2.0, 8.0, n)
        y = (rng.random(n) < p).astype(float)
        h = cal.hosmer_lemeshow(y, p, min_expected=0.0)
        stat.append(h.statistic)
        if h.p_value is not None:
            p_values.append(h.p_value)
    m = len(p_values)
    assert 0.3 * reps <= m <= 0.9 * reps
    # central interval of Binomial(m, alpha) that a test exactly at level misses w.p. 1e-4
    for alpha in (0.05, 0.01):
        lo, hi = stats.binom.ppf(5e-5, m, alpha), stats.binom.isf(5e-5, m, alpha)
        assert lo <= int(np.sum(np.array(p_values) < alpha)) <= hi
    # the development-sample reference χ²_{g−2} would over-reject on the same windows
    dev = int(np.sum(stats.chi2.sf(np.array(stat), 8) < 0.05))
    assert dev > stats.binom.isf(5e-5, reps, 0.05)


def test_hosmer_lemeshow_floors() -> None:
    p, y = dataset("synthetic")
    h = cal.hosmer_lemeshow(y, p)  # lowest decile has 9.2 expected events < 10
    assert h.status is Status.TOO_FEW_CASES
    assert h.statistic is None
    assert h.p_value is None
    assert h.min_expected == pytest.approx(9.1824, rel=1e-4)
    assert cal.hosmer_lemeshow([], []).status is Status.NO_VALUE
    assert cal.hosmer_lemeshow([0, 1], [0.2, 0.4]).status is Status.TOO_FEW_CASES
