"""Properties every array metric shares (hypothesis): order invariance, unit weights =
no weights, integer weights = repeated rows, zero weight = dropped row, nothing
non-finite escapes, degenerate input never raises."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from calibrant.stats import calibration as cal
from calibrant.stats import calibration_error as ce
from calibrant.stats import decomposition as dec
from calibrant.stats import discrimination as disc
from calibrant.stats import drift
from calibrant.stats import recalibration as rc
from calibrant.stats import reliability as rel
from calibrant.stats import scoring as sc
from calibrant.stats.result import Estimate, Status

REFERENCE = np.linspace(0.02, 0.98, 25)  # a fixed reference sample for the drift metrics

# keys whose values legitimately differ between equivalent inputs
_SKIP = {"n_iter", "p_method", "p_value_ks"}

METRICS: dict[str, Callable[..., Any]] = {
    "log_loss": sc.log_loss,
    "expected_log_loss": sc.expected_log_loss,
    "log_loss_z": sc.log_loss_calibration_z,
    "log_loss_skill": sc.log_loss_skill,
    "log_loss_skill_pi0": lambda y, p, **k: sc.log_loss_skill(y, p, pi0=0.3, **k),
    "brier": sc.brier_score,
    "expected_brier": sc.expected_brier,
    "brier_skill": sc.brier_skill_score,
    "murphy": dec.murphy_decomposition,
    "observed_expected": cal.observed_expected,
    "spiegelhalter": cal.spiegelhalter_z,
    "hosmer_lemeshow": lambda y, p, **k: cal.hosmer_lemeshow(y, p, min_expected=0, **k),
    "hosmer_lemeshow_quantile": lambda y, p, **k: cal.hosmer_lemeshow(
        y, p, grouping="quantile", min_expected=0, **k),
    "citl": rc.calibration_intercept,
    "recalibration": lambda y, p, **k: rc.logistic_recalibration(y, p, min_events=2, **k),
    "lr_tests": lambda y, p, **k: rc.recalibration_tests(y, p, min_events=2, **k),
    "ece_uniform": ce.expected_calibration_error,
    "ece_quantile": lambda y, p, **k: ce.expected_calibration_error(y, p, strategy="quantile", **k),
    "mce": ce.maximum_calibration_error,
    "ici": lambda y, p, **k: ce.integrated_calibration_index(y, p, min_events=0, **k),
    "auc": lambda y, p, **k: disc.roc_auc(y, p, min_per_class=2, **k),
    "average_precision": disc.average_precision,
    "reliability_quantile": lambda y, p, **k: rel.reliability_diagram(
        y, p, strategy="quantile", **k),
    "psi": lambda y, p, sample_weight=None: drift.psi(REFERENCE, p, current_weight=sample_weight),
    "js": lambda y, p, sample_weight=None: drift.js_distance(
        REFERENCE, p, current_weight=sample_weight, n_null=20),
    "ks_D": lambda y, p, sample_weight=None: drift.ks_2samp(
        REFERENCE, p, current_weight=sample_weight),
}
# equal-count HL groups split the sorted rows, so the order of tied rows matters by definition
ORDER_DEPENDENT = {"hosmer_lemeshow"}


def flatten(r: Any) -> list[Any]:
    """Every number in a result, in a fixed order; asserts each is finite."""
    out: list[Any] = []
    if isinstance(r, Estimate):
        out += [r.status, r.value, r.se, *(r.ci or (None, None))]
        out += [v for k, v in sorted(r.extra.items()) if k not in _SKIP and
                not (k == "p_value" and "n_current" in r.extra and "smoothing" not in r.extra)]
    elif dataclasses.is_dataclass(r):
        for f in dataclasses.fields(r):
            out += flatten(getattr(r, f.name))
    elif isinstance(r, tuple | list):
        for v in r:
            out += flatten(v)
    else:
        out.append(r)
    for v in out:
        if isinstance(v, float):
            assert math.isfinite(v)
    return out


def assert_same(a: Any, b: Any, *, rtol: float = 1e-9, atol: float = 1e-9) -> None:
    fa, fb = flatten(a), flatten(b)
    assert len(fa) == len(fb)
    for x, y in zip(fa, fb, strict=True):
        if isinstance(x, float) and isinstance(y, float):
            assert x == pytest.approx(y, rel=rtol, abs=atol)
        else:
            assert x == y


probs = st.one_of(
    st.sampled_from([0.0, 0.5, 1.0, 0.1, 0.9]),
    st.floats(0.0, 1.0, allow_nan=False),
    st.integers(1, 19).map(lambda k: k / 20),  # ties, and values on bin edges
)


@st.composite
def windows(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    n = draw(st.integers(0, 30))
    p = np.array(draw(st.lists(probs, min_size=n, max_size=n)), dtype=float)
    y = np.array(draw(st.lists(st.integers(0, 1), min_size=n, max_size=n)), dtype=float)
    w = np.array(draw(st.lists(st.integers(0, 3), min_size=n, max_size=n)), dtype=float)
    perm = np.array(draw(st.permutations(list(range(n)))), dtype=int)
    return y, p, w, perm


SETTINGS = settings(max_examples=60, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow])


# the fitted models converge to 1e-10 in their own steps: compare them a little more loosely
def _tol(name: str) -> dict[str, float]:
    if name in {"citl", "recalibration", "lr_tests"}:
        return {"rtol": 1e-6, "atol": 1e-7}
    # atol: second moments cancel (Σℓ² − (Σℓ)²/n), so SEs near 0 agree only to ~1e-8
    return {"rtol": 1e-9, "atol": 1e-8}


@pytest.mark.parametrize("name", METRICS)
@SETTINGS
@given(data=windows())
def test_unit_weights_equal_no_weights(name: str, data) -> None:
    y, p, _, _ = data
    f = METRICS[name]
    assert_same(f(y, p, sample_weight=np.ones_like(p)), f(y, p), **_tol(name))


@pytest.mark.parametrize("name", METRICS)
@SETTINGS
@given(data=windows())
def test_integer_weights_equal_repeated_rows(name: str, data) -> None:
    y, p, w, _ = data
    f = METRICS[name]
    idx = np.repeat(np.arange(p.size), w.astype(int))  # zero weight = row dropped
    assert_same(f(y, p, sample_weight=w), f(y[idx], p[idx]), **_tol(name))


@pytest.mark.parametrize("name", sorted(set(METRICS) - ORDER_DEPENDENT))
@SETTINGS
@given(data=windows())
def test_order_invariance(name: str, data) -> None:
    y, p, w, perm = data
    f = METRICS[name]
    assert_same(f(y, p, sample_weight=w), f(y[perm], p[perm], sample_weight=w[perm]),
                **_tol(name))


def test_degenerate_inputs_never_raise_or_leak() -> None:
    cases = [([], []), ([0] * 5, [0.1] * 5), ([1] * 4, [0.9] * 4), ([0, 1] * 3, [0.5] * 6),
             ([0, 0, 1, 1], [0.1, 0.2, 0.8, 0.9]), ([1, 0], [0.0, 1.0]), ([1], [0.0])]
    for y, p in cases:
        for name, f in METRICS.items():
            r = f(np.array(y, float), np.array(p, np.float32))
            flatten(r)  # asserts finiteness
            status = getattr(r, "status", None)
            assert status in set(Status), name
