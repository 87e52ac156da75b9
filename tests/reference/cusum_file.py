"""Builds tests/stats/cusum_reference_values.json, part by part.

Parts (each a nested dict in the file's shape, so a check can run a few):
``cusum_stream`` (plain loop on the synthetic stream), ``cusum_chain_at_h``
(midpoint Markov chain at the recorded limits), ``cusum_chain_limits``
(Markov limits for ARL0 = 10,000; about 30 s) and ``cusum_simulation``
(Monte-Carlo run lengths; about 15 s).

The limits 5.698 (upper, R_A = 2) and 5.487 (lower, R_A = ½) are inputs
here: they are the limits the earlier simulated search found, and the
tests use 5.698 as a literal. Every value *at* them is recomputed; the
search itself is repeated and its result is written into the provenance
beside the recorded limits, not over them.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from tests.reference import cusum_chain, cusum_simulation
from tests.reference.entries import SCRIPT, VERSIONS, plain
from tests.reference.recipes import BETA_POINTS_RECIPE, SYNTHETIC_RECIPE, synthetic

PATH = "tests/stats/cusum_reference_values.json"
LIMITS = {"upper": 5.698, "lower": 5.487}
SIDES = {"upper": ("upper_RA_2", 2.0), "lower": ("lower_RA_0.5", 0.5)}
CHAIN_STATES = (300, 600, 1200)


def cusum_stream() -> dict[str, Any]:
    p, y, _ = synthetic()
    return {"synthetic_first_five_p": np.round(p[:5], 6),
            "cusum_RA_2": cusum_chain.plain_chart(p, y, 2.0, LIMITS["upper"]),
            "cusum_RA_0.5": cusum_chain.plain_chart(p, y, 0.5, LIMITS["lower"])}


def cusum_chain_at_h() -> dict[str, Any]:
    out = {}
    for side, (key, r_a) in SIDES.items():
        h = LIMITS[side]
        out[key] = {"arl0_markov_1200_states_at_h": cusum_chain.midpoint_arl(h, r_a, 1200),
                    "arl1_zero_state_markov_1200_states":
                        cusum_chain.midpoint_arl(h, r_a, 1200, odds_ratio=r_a)}
    return {"beta_2_8": out}


def cusum_chain_limits() -> dict[str, Any]:
    return {"beta_2_8": {key: {"h_markov_by_states": {
        str(m): round(cusum_chain.midpoint_h(r_a, m), 4) for m in CHAIN_STATES}}
        for key, r_a in SIDES.values()}}


SEARCHED: dict[str, float] = {}  # the last simulated search, for the provenance text


def cusum_simulation_part() -> dict[str, Any]:
    sim = cusum_simulation.simulate(LIMITS)
    SEARCHED.update(sim["searched_h"])
    out: dict[str, Any] = {key: {"arl0_simulated_at_h": sim[f"{side}_arl0"],
                                 "arl1_zero_state_simulated": sim[f"{side}_arl1"]}
                           for side, (key, _) in SIDES.items()}
    two = sim["two_charts"]
    out["two_charts_first_false_alarm"] = {"mean": two["mean"], "se": two["se"],
                                           "h_upper": LIMITS["upper"], "h_lower": LIMITS["lower"]}
    return {"beta_2_8": out}


PARTS = {"cusum_stream": cusum_stream, "cusum_chain_at_h": cusum_chain_at_h,
         "cusum_chain_limits": cusum_chain_limits, "cusum_simulation": cusum_simulation_part}


def merge(into: dict[str, Any], part: dict[str, Any]) -> dict[str, Any]:
    """Deep-merge ``part`` into ``into`` (nested dicts joined, leaves replaced)."""
    for key, value in part.items():
        if isinstance(value, dict) and isinstance(into.get(key), dict):
            merge(into[key], value)
        else:
            into[key] = value
    return into


def _inputs() -> dict[str, Any]:
    """The settings of each chart: not computed, they define what is computed."""
    return {key: {"r_a": r_a, "target_arl0": 10000, "h_simulation": LIMITS[side],
                  "true_odds_ratio": r_a} for side, (key, r_a) in SIDES.items()}


def _provenance() -> dict[str, str]:
    runs, two = cusum_simulation.N_RUNS, cusum_simulation.N_RUNS_TWO_CHARTS
    searched = ", ".join(f"{s} {SEARCHED[s]:.3f}" for s in ("upper", "lower")) \
        if SEARCHED else "not run"
    se_h = 1.0 / math.sqrt(runs)  # SE of ln ARL0 for near-geometric run lengths; dh ≈ d ln ARL0
    versions = ", ".join(f"{k} {v}" for k, v in VERSIONS.items())
    return {
        "synthetic_stream": (
            f"written by {SCRIPT} ({versions}): a plain Python loop of S_t = max(0, S_(t-1) + "
            "y ln R - ln(1 - p + R p)) over the stream in index order, p clipped to [eps, 1-eps], "
            "no reset; h_used are fixed illustrative limits (the Beta(2,8) limits below; the "
            "stream's own risk mix is not Beta(2,8))"),
        "stream_recipe": SYNTHETIC_RECIPE,
        "beta_2_8_design": (
            f"written by {SCRIPT} ({versions}). Risks: {BETA_POINTS_RECIPE}. "
            "h_simulation (5.698 upper, 5.487 lower) are fixed inputs: the limits an earlier "
            "simulated search found for ARL0 = 10,000 (4000 paths); the tests use 5.698 as a "
            f"literal. This script repeats that search ({runs} paths per chart, grid 5.20-6.20 "
            "step 0.02, ln ARL0 interpolated linearly) and found "
            f"{searched}, which agrees within the search's Monte-Carlo error (about "
            f"+/-{se_h:.3f} in h). Markov values: Brook-Evans chain with midpoint states "
            "(width 2h/(2m-1)) in numpy, ARL from (I - Q) L = 1; h_markov_by_states = root "
            "of ln ARL0(h) = ln 10000 by scipy brentq on [4, 7], rounded to 4 decimals. "
            f"Simulated values: numpy, one generator numpy.random.default_rng(20240611) used in "
            f"this order: search upper, search lower, {runs} runs verifying ARL0 at each "
            f"h_simulation, {runs} runs of zero-state ARL1 with the true odds x2 (upper) and x0.5 "
            f"(lower) from the first case, then {two} runs of both charts on one in-control "
            "stream (two_charts_first_false_alarm: cases to the first signal of either); "
            "se = sd/sqrt(runs)"),
    }


def build() -> dict[str, Any]:
    values: dict[str, Any] = {"beta_2_8": _inputs()}
    for part in PARTS.values():
        merge(values, part())
    beta = values["beta_2_8"]
    order = ("r_a", "target_arl0", "h_markov_by_states", "h_simulation", "arl0_simulated_at_h",
             "arl0_markov_1200_states_at_h", "true_odds_ratio", "arl1_zero_state_simulated",
             "arl1_zero_state_markov_1200_states")
    for key, _ in SIDES.values():
        beta[key] = {k: beta[key][k] for k in order}
    beta["two_charts_first_false_alarm"] = beta.pop("two_charts_first_false_alarm")
    return plain({"provenance": _provenance(),
                  **{k: values[k] for k in ("synthetic_first_five_p", "cusum_RA_2",
                                            "cusum_RA_0.5")},
                  "beta_2_8": beta})
