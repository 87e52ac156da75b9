"""O/E, Spiegelhalter's z and Hosmer–Lemeshow (calibrant.stats.calibration)."""

from __future__ import annotations

import numpy as np
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
    # source: docs/methods.md §21 `hosmer_lemeshow_equal_count_groups` (numpy; scipy chi2 p-values)
    assert h.statistic == pytest.approx(r["C"], rel=1e-10)
    assert h.df_development == r["df_development(g-2)"]
    assert h.df_external == r["df_external(g)"]
    assert h.p_value_development == pytest.approx(r["p_df8"], rel=1e-7)
    assert h.p_value_external == pytest.approx(r["p_df10"], rel=1e-7)
    assert [t[:2] for t in h.table] == [tuple(map(float, t[:2])) for t in r["table_n_O_E"]]
    q = cal.hosmer_lemeshow(y, p, grouping="quantile", min_expected=0.0)
    # source: docs/methods.md §21 `hosmer_lemeshow_quantile_edges`
    assert q.statistic == pytest.approx(ref(key, "hosmer_lemeshow_quantile_edges")["C"], rel=1e-10)
    assert h.p_value_development == pytest.approx(stats.chi2.sf(h.statistic, 8), rel=1e-12)


def test_hosmer_lemeshow_floors() -> None:
    p, y = dataset("synthetic")
    h = cal.hosmer_lemeshow(y, p)  # lowest decile has 9.2 expected events < 10
    assert h.status is Status.TOO_FEW_CASES
    assert h.statistic is None
    assert h.min_expected == pytest.approx(9.1824, rel=1e-4)
    assert cal.hosmer_lemeshow([], []).status is Status.NO_VALUE
    assert cal.hosmer_lemeshow([0, 1], [0.2, 0.4]).status is Status.TOO_FEW_CASES
