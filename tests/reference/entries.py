"""How one reference value is recorded: its number, where it came from, and which kind it is."""

from __future__ import annotations

import math
import platform
from typing import Any

import numpy as np
import scipy
import sklearn
import statsmodels

LIB = "reference library"
FORMULA = "formula, not reference library"
PUBLISHED = "published"

SCRIPT = "tests/reference/make_reference_values.py"
VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "scikit-learn": sklearn.__version__,
    "statsmodels": statsmodels.__version__,
}
PRODUCER = (
    f"scikit-learn {VERSIONS['scikit-learn']} / scipy {VERSIONS['scipy']} / "
    f"statsmodels {VERSIONS['statsmodels']} / numpy {VERSIONS['numpy']} "
    f"(python {VERSIONS['python']})"
)


def plain(x: Any) -> Any:
    """numpy scalars and arrays as JSON-ready Python values; NaN becomes None."""
    if isinstance(x, dict):
        return {k: plain(v) for k, v in x.items()}
    if isinstance(x, list | tuple | np.ndarray):
        return [plain(v) for v in x]
    if isinstance(x, np.bool_ | bool):
        return bool(x)
    if isinstance(x, np.integer | int):
        return int(x)
    if isinstance(x, np.floating | float):
        return None if math.isnan(float(x)) else float(x)
    return x


def lib(value: Any, source: str, *, producer: bool = True, **more: Any) -> dict[str, Any]:
    """A value produced by the named scikit-learn / scipy / statsmodels call.

    ``producer`` adds the library versions to the entry (the metrics file does,
    the summary file keeps them in its provenance only).
    """
    entry = {"value": plain(value), "source": source, "kind": LIB, **plain(more)}
    return entry | {"producer": PRODUCER} if producer else entry


def formula(value: Any, source: str, **more: Any) -> dict[str, Any]:
    """A value computed here in plain numpy from the published formula named in ``source``."""
    return {"value": plain(value), "source": source, "kind": FORMULA, **plain(more)}
