"""The risk-adjusted CUSUM chart (calibrant.stats.cusum)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from cusum_reference import REFERENCE, synthetic_stream

from calibrant.stats.cusum import (
    CusumState,
    advance,
    cusum_weights,
    new_chart,
    odds_shifted_risk,
    reset,
)


def loop_cusum(p, y, r_a, s0=0.0):
    """Independent case-by-case recursion of docs/methods.md §18, in plain Python."""
    eps = 2.220446049250313e-16
    s, out = s0, []
    for pi, yi in zip(p, y, strict=True):
        pc = min(max(float(pi), eps), 1.0 - eps)
        w = yi * math.log(r_a) - math.log(1.0 - pc + r_a * pc)
        s = max(0.0, s + w)
        out.append(s)
    return np.array(out)


def test_synthetic_stream_recipe_matches_methods():
    # docs/methods.md §21: first five p of the synthetic stream.
    p, _ = synthetic_stream()
    np.testing.assert_allclose(p[:5], REFERENCE["synthetic_first_five_p"], atol=5e-7)


@pytest.mark.parametrize(("key", "r_a"), [("cusum_RA_2", 2.0), ("cusum_RA_0.5", 0.5)])
def test_synthetic_stream_check_values(key, r_a):
    # docs/methods.md §21 `cusum_RA_2` / `cusum_RA_0.5` (cusum_reference_values.json).
    ref = REFERENCE[key]
    p, y = synthetic_stream()
    step = advance(new_chart(h=ref["h_used"], r_a=r_a), p, y)
    st = step.state
    assert st.s == pytest.approx(ref["final_S"], rel=1e-10)
    assert st.max_s == pytest.approx(ref["max_S"], rel=1e-10)
    assert st.argmax_case == ref["argmax_1based"]
    assert st.signal_case == ref["first_signal_1based"]
    expected_index = None if ref["first_signal_1based"] is None else ref["first_signal_1based"] - 1
    assert step.signal_index == expected_index
    assert st.n_cases == 2000


@pytest.mark.parametrize("r_a", [2.0, 0.5, 3.0])
def test_vectorised_path_equals_plain_loop(r_a):
    # Independent implementation: the recursion S_t = max(0, S_{t-1} + W_t) case by case.
    p, y = synthetic_stream()
    state = CusumState(r_a=r_a, h=5.0, s=1.25, n_cases=10, max_s=2.0, argmax_case=3)
    step = advance(state, p, y, return_path=True)
    np.testing.assert_allclose(step.path, loop_cusum(p, y, r_a, s0=1.25), rtol=0, atol=1e-11)


def test_resuming_in_chunks_through_json_equals_one_pass():
    # Property of the recursion: the state after the stream does not depend on batching.
    p, y = synthetic_stream()
    whole = advance(new_chart(h=5.698), p, y).state
    state, signals = new_chart(h=5.698), []
    start = 0
    for stop in (1, 300, 523, 524, 1000, 1000, 1999, 2000):
        step = advance(state, p[start:stop], y[start:stop])
        if step.signal_index is not None:
            signals.append(start + step.signal_index)
        saved = json.dumps(step.state.to_dict())
        state = CusumState.from_dict(json.loads(saved))
        start = stop
    assert state.s == pytest.approx(whole.s, abs=1e-10)
    assert state.max_s == pytest.approx(whole.max_s, abs=1e-10)
    assert (state.argmax_case, state.signal_case, state.n_cases) == (
        whole.argmax_case,
        whole.signal_case,
        whole.n_cases,
    )
    # The signal is reported once, by the batch holding case 524 (docs/methods.md §21).
    assert signals == [523]


def test_signal_is_reported_once_until_reset():
    p, y = synthetic_stream()
    first = advance(new_chart(h=5.698), p[:600], y[:600])
    again = advance(first.state, p[600:], y[600:])
    assert first.signal_index == 523
    assert again.signal_index is None
    assert again.state.signal_case == 524
    restarted = reset(again.state, h=7.5)
    assert (restarted.s, restarted.n_cases, restarted.signal_case, restarted.h) == (
        0.0,
        0,
        None,
        7.5,
    )
    assert restarted.r_a == 2.0


def test_weights_hand_example():
    # Hand calculation (docs/methods.md §18): p = 0.2, R_A = 2: y=0 -> -ln 1.2, y=1 -> ln 2 - ln 1.2.
    w = cusum_weights([0.2, 0.2], [0, 1], 2.0)
    np.testing.assert_allclose(w, [-math.log(1.2), math.log(2.0) - math.log(1.2)], rtol=1e-14)


def test_probability_zero_and_one_are_clipped_to_eps():
    # docs/methods.md §1.2 clipping policy: p in [eps, 1 - eps] with eps = float64 machine epsilon.
    eps = np.finfo(np.float64).eps
    w = cusum_weights([0.0, 1.0, 0.0, 1.0], [1, 0, 0, 1], 2.0)
    assert np.all(np.isfinite(w))
    expected = [
        math.log(2.0) - math.log1p(eps),
        -math.log1p(1.0 - eps),
        -math.log1p(eps),
        math.log(2.0) - math.log1p(1.0 - eps),
    ]
    np.testing.assert_allclose(w, expected, rtol=1e-15)


def test_empty_batch_leaves_state_unchanged():
    state = CusumState(r_a=2.0, h=4.0, s=1.0, n_cases=5, max_s=1.5, argmax_case=2)
    step = advance(state, [], [], return_path=True)
    assert step.state == state
    assert step.signal_index is None
    assert step.path is not None
    assert step.path.shape == (0,)


def test_odds_shifted_risk_doubles_the_odds():
    # Definition: q/(1-q) = OR * p/(1-p).
    p = np.array([0.1, 0.2, 0.5])
    q = odds_shifted_risk(p, 2.0)
    np.testing.assert_allclose(q / (1 - q), 2.0 * p / (1 - p), rtol=1e-14)


@pytest.mark.parametrize(
    ("p", "y"),
    [([0.5, 1.2], [0, 1]), ([0.5, np.nan], [0, 1]), ([0.5, 0.5], [0, 2]), ([0.5], [0, 1])],
)
def test_bad_batches_are_rejected(p, y):
    with pytest.raises(ValueError, match="y_"):
        advance(new_chart(h=5.0), p, y)


@pytest.mark.parametrize(
    "kwargs",
    [{"r_a": 1.0, "h": 5.0}, {"r_a": 2.0, "h": 0.0}, {"r_a": 2.0, "h": 5.0, "s": -1.0}],
)
def test_invalid_state_is_rejected(kwargs):
    with pytest.raises(ValueError, match="must"):
        CusumState(**kwargs)


def test_from_dict_refuses_unknown_keys():
    data = new_chart(h=5.0).to_dict() | {"extra": 1}
    with pytest.raises(ValueError, match="keys"):
        CusumState.from_dict(data)
