"""Summary as a value type: merge algebra, storage round trip, classes, degenerate input.

Property tests (hypothesis) check the algebra a rollup relies on; the
"summary statistic = array statistic" properties compare with the array
version and with scikit-learn.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import log_loss as sk_log_loss
from sklearn.metrics import roc_auc_score

from calibrant.stats import calibration as cal
from calibrant.stats import scoring as sc
from calibrant.stats import summary_binned as sb
from calibrant.stats import summary_metrics as sm_
from calibrant.stats.result import Estimate, Status
from calibrant.stats.summary import EDGES_P, EDGES_X, N_BINS, Summary, bin_index

_P = st.one_of(st.floats(0.0, 1.0, allow_nan=False), st.sampled_from([0.0, 1.0, 0.5, 0.1, 1e-9]))


@st.composite
def rows(draw, min_size: int = 0, max_size: int = 40):
    n = draw(st.integers(min_size, max_size))
    p = np.array(draw(st.lists(_P, min_size=n, max_size=n)), dtype=np.float64)
    s = np.array(draw(st.lists(st.sampled_from([-1, 0, 1]), min_size=n, max_size=n)))
    return p, s


def _close(a: Summary, b: Summary) -> None:
    """Fields equal within rtol 1e-9 plus an absolute tolerance scaled to the data."""
    da, db = a.class_dense(), b.class_dense()
    scale = max(1.0, float(np.abs(da).max(initial=0.0)), float(np.abs(db).max(initial=0.0)))
    np.testing.assert_allclose(da, db, rtol=1e-9, atol=1e-12 * scale)


@settings(max_examples=60, deadline=None)
@given(rows(), rows(), rows())
def test_merge_associative_and_commutative(r1, r2, r3) -> None:
    a, b, c = (Summary.from_arrays(*r) for r in (r1, r2, r3))
    _close((a + b) + c, a + (b + c))
    assert a + b == b + a  # float addition is commutative bit for bit
    _close(Summary.merge_many([a, b, c]), (a + b) + c)


@settings(max_examples=60, deadline=None)
@given(rows(), st.integers(0, 40))
def test_summary_of_parts_is_summary_of_union(r, cut) -> None:
    p, s = r
    cut = min(cut, p.size)
    parts = Summary.from_arrays(p[:cut], s[:cut]) + Summary.from_arrays(p[cut:], s[cut:])
    _close(parts, Summary.from_arrays(p, s))


@settings(max_examples=60, deadline=None)
@given(rows())
def test_bytes_round_trip_exact_and_empty_is_identity(r) -> None:
    a = Summary.from_arrays(*r)
    assert Summary.from_bytes(a.to_bytes()) == a
    assert a + Summary.empty() == a
    assert Summary.empty() + a == a
    assert len(a.to_bytes()) == 16 + a.cells.size * (2 + 8 * 13)


@settings(max_examples=60, deadline=None)
@given(rows())
def test_unlabeled_as_negative_equals_labeled_zero(r) -> None:
    p, s = r
    implicit = Summary.from_arrays(p, s).labeled(True)
    relabeled = Summary.from_arrays(p, np.where(s == -1, 0, s)).labeled(False)
    np.testing.assert_array_equal(implicit.bins, relabeled.bins)
    np.testing.assert_allclose(implicit.neg, relabeled.neg, rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(implicit.pos, relabeled.pos, rtol=1e-12, atol=1e-300)
    dropped = Summary.from_arrays(p[s != -1], s[s != -1]).labeled(False)
    np.testing.assert_allclose(Summary.from_arrays(p, s).labeled(False).neg.sum(axis=0),
                               dropped.neg.sum(axis=0), rtol=1e-12, atol=1e-300)


@settings(max_examples=40, deadline=None)
@given(rows(), st.lists(st.integers(0, 4), min_size=40, max_size=40))
def test_integer_weights_equal_repeated_rows(r, k) -> None:
    p, s = r
    w = np.array(k[: p.size], dtype=float)
    weighted = Summary.from_arrays(p, s, sample_weight=w)
    repeated = Summary.from_arrays(np.repeat(p, w.astype(int)), np.repeat(s, w.astype(int)))
    _close(weighted, repeated)


@settings(max_examples=60, deadline=None)
@given(rows(min_size=2))
def test_summary_statistics_equal_array_statistics(r) -> None:
    p, s = r
    lab = s != -1
    y, q = s[lab], p[lab]
    v = Summary.from_arrays(p, s).labeled(False)
    pairs = [(sm_.log_loss(v), sc.log_loss(y, q)), (sm_.brier(v), sc.brier_score(y, q)),
             (sm_.observed_expected(v), cal.observed_expected(y, q))]
    if np.all(np.isin(q, (0.0, 0.5, 1.0))):
        # null variance Σ(1 − 2p)²p(1 − p) is exactly 0: undefined (docs/methods.md §10 edge case)
        assert sm_.spiegelhalter_z(v).status is Status.NO_VALUE
    elif np.all((q > 1e-6) & (q < 1 - 1e-6)):
        # the power-sum variance Σ(p − 5p² + 8p³ − 4p⁴) cancels to absolute error ~ε·Σp, so
        # windows made only of p within 1e-6 of 0 or 1 lose relative precision there
        pairs.append((sm_.spiegelhalter_z(v), cal.spiegelhalter_z(y, q)))
    for from_summary, array in pairs:
        assert from_summary.status is array.status
        if array.value is not None:
            assert from_summary.value == pytest.approx(array.value, rel=1e-9, abs=1e-12)
    if y.size:
        # source: sklearn.metrics.log_loss on the labeled rows
        assert sm_.log_loss(v).value == pytest.approx(sk_log_loss(y, q, labels=[0, 1]), rel=1e-9)
    if 0 < y.sum() < y.size:
        a = sb.auc(v, min_per_class=2)
        # source: sklearn roc_auc_score on rows; bins-as-ties bound of docs/methods.md §2
        assert abs(a.value - roc_auc_score(y, q)) <= a.extra["binning_error_bound"] + 1e-12


def test_grid_constants() -> None:
    # docs/methods.md §2: 641 edges of width 0.05 on [-16, 16] + 19 edges j/20 (j = 10 is shared)
    assert EDGES_P.size == 641 + 18
    assert N_BINS == 660
    assert all(j / 20 in set(EDGES_P.tolist()) for j in range(1, 20))
    assert np.all(np.diff(EDGES_P) > 0)
    assert np.all(np.diff(EDGES_X) > 0)
    assert bin_index(np.array([0.0]))[0] == 0
    assert bin_index(np.array([1.0]))[0] == N_BINS - 1
    assert bin_index(np.array([0.3]))[0] == np.searchsorted(EDGES_P, 0.3) + 1  # left-closed


def test_from_bytes_rejects_damage() -> None:
    b = Summary.from_arrays(np.array([0.2, 0.7]), np.array([1, -1])).to_bytes()
    with pytest.raises(ValueError, match="length"):
        Summary.from_bytes(b[:-1])
    with pytest.raises(ValueError, match="version"):
        Summary.from_bytes(b[:4] + b"\x02\x00" + b[6:])
    with pytest.raises(ValueError, match="too short"):
        Summary.from_bytes(b"")


def test_invalid_input_raises() -> None:
    with pytest.raises(ValueError, match="within"):
        Summary.from_arrays(np.array([1.5]), np.array([1]))
    with pytest.raises(ValueError, match="y_state"):
        Summary.from_arrays(np.array([0.5]), np.array([2]))
    w = Summary.from_arrays(np.array([0.5]), np.array([1]), sample_weight=np.array([2.0]))
    with pytest.raises(ValueError, match="weighted"):
        w + Summary.from_arrays(np.array([0.5]), np.array([1]))


def _no_nan(results: dict[str, Estimate]) -> None:
    for key, e in results.items():
        for x in (e.value, e.se, *(e.ci or ())):
            assert x is None or math.isfinite(x), key
        assert (e.value is None) == (e.status is not Status.MEASURED), key


def test_empty_summary_gives_statuses() -> None:
    out = sm_.all_metrics(Summary.empty(), Summary.empty())
    _no_nan(out)
    assert out["n_predictions"].value == 0.0
    for key in ("log_loss", "brier", "auc", "calibration_slope", "ece", "psi", "oe_ratio"):
        assert out[key].status is Status.NO_VALUE, key


def test_one_class_window() -> None:
    rng = np.random.default_rng(3)
    s = Summary.from_arrays(rng.random(50), np.zeros(50, dtype=int))
    out = sm_.all_metrics(s)
    _no_nan(out)
    assert out["log_loss"].measured
    assert out["brier"].measured
    assert out["auc"].status is Status.NO_VALUE  # docs/methods.md §15: never 0.5
    assert out["calibration_slope"].status is Status.NO_VALUE
    assert out["calibration_intercept"].status is Status.NO_VALUE
    assert out["psi"].status is Status.NO_VALUE  # no reference given


def test_all_rows_in_one_bin() -> None:
    p = np.full(60, 0.3)
    y = np.r_[np.ones(25, dtype=int), np.zeros(35, dtype=int)]
    out = sm_.all_metrics(Summary.from_arrays(p, y), Summary.from_arrays(p, y))
    _no_nan(out)
    # one tied score: AUC ½ (source: sklearn roc_auc_score on tied scores)
    assert out["auc"].value == pytest.approx(roc_auc_score(y, p))
    assert out["calibration_slope"].status is Status.TOO_FEW_CASES  # no spread in x
    assert out["psi"].value == pytest.approx(0.0, abs=1e-15)


def test_only_unlabeled_rows() -> None:
    s = Summary.from_arrays(np.array([0.1, 0.4, 0.9]), np.array([-1, -1, -1]))
    out = sm_.all_metrics(s)
    _no_nan(out)
    assert out["label_coverage"].value == 0.0
    assert out["log_loss"].status is Status.NO_VALUE
    assert sm_.expected_log_loss(s).measured  # needs no labels
    implicit = sm_.all_metrics(s, implicit_negatives=True)
    assert implicit["log_loss"].value == pytest.approx(
        sk_log_loss([0, 0, 0], [0.1, 0.4, 0.9], labels=[0, 1]), rel=1e-12)
