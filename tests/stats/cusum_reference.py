"""Reference values for the CUSUM tests and the synthetic stream of the reference recipes.

The numbers live in ``cusum_reference_values.json`` beside this file, with
their provenance (docs/methods.md §21; the producing scripts and versions).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy.special import expit
from scipy.stats import beta

REFERENCE: dict[str, Any] = json.loads(
    (Path(__file__).with_name("cusum_reference_values.json")).read_text()
)


def synthetic_stream() -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """docs/methods.md §21 synthetic data: p = expit(x), true logit 0.3 + 0.7 x."""
    rng = np.random.default_rng(20240611)
    x = rng.normal(-1.0, 1.2, 2000)
    p = expit(x)
    u = rng.random(2000)
    y = (u < expit(0.3 + 0.7 * x)).astype(np.int64)
    return p, y


def beta_2_8_quantile_points(k: int = 2000) -> NDArray[np.float64]:
    """Equal-weight Beta(2, 8) points at probabilities (i + ½)/k, as in docs/methods.md §21."""
    return beta.ppf((np.arange(k) + 0.5) / k, 2.0, 8.0)
