"""The reference-value files in tests/stats are what tests/reference recomputes.

Runs the cheap parts of ``make_reference_values --check`` (about 10 s): every
array-metric and summary value, the CUSUM chart on the synthetic stream and
the Markov-chain run lengths at the recorded limits. Skipped parts (Markov
limit search, Monte-Carlo run lengths) are checked by running the script by
hand. Sources: scikit-learn, statsmodels, scipy and numpy formulas, as each
entry's ``source`` says; nothing from Calibrant is imported.
"""

from __future__ import annotations

from tests.reference.compare import DETERMINISTIC_RTOL, MONTE_CARLO_RTOL, compare
from tests.reference.make_reference_values import CHEAP_PARTS, run_check

# Tolerances (defined and explained in tests/reference/compare.py): relative 1e-9 for
# values from library calls and numpy formulas, 5 % for seeded Monte-Carlo values.


def test_cheap_parts_reproduce_the_stored_values() -> None:
    results = run_check(CHEAP_PARTS)
    drifted = [f"{path}{d.path}: file {d.stored!r}, recomputed {d.computed!r} (rel {d.relative})"
               for path, r in results.items()
               for d in r.beyond(DETERMINISTIC_RTOL, MONTE_CARLO_RTOL)]
    assert not drifted, "\n".join(drifted)
    # the three files were all reached, with every value of the first two
    assert set(results) == {"tests/stats/metrics_reference_values.json",
                            "tests/stats/summary_reference_values.json",
                            "tests/stats/cusum_reference_values.json"}
    assert results["tests/stats/metrics_reference_values.json"].n_compared > 500
    assert results["tests/stats/summary_reference_values.json"].n_compared == 62


def test_check_flags_a_changed_number_a_changed_type_and_a_missing_key() -> None:
    # The check must be able to fail: a value off by 1e-6, 774 stored as 774.0, a lost key.
    stored = {"a": {"value": 1.0}, "n": 774.0}
    computed = {"a": {"value": 1.0 + 1e-6}, "n": 774, "b": 2.0}
    result = compare(computed, stored)
    flagged = {d.path for d in result.beyond(DETERMINISTIC_RTOL, MONTE_CARLO_RTOL)}
    assert flagged == {"/a/value", "/n", "/b"}
