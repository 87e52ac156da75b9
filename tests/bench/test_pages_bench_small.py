"""CI version of tests/bench/pages.py: its figures are finite and the model page's segment
table counts what was loaded (each segment's predictions in the table's 28-day window,
counted directly from the generated rows with numpy)."""

from __future__ import annotations

import math
import re
from datetime import timedelta
from pathlib import Path

import numpy as np
from tests.bench.pages import run


def test_small_pages_benchmark(tmp_path: Path) -> None:
    result = run(f"sqlite:///{tmp_path / 'pages.db'}", weeks=4, segments=3, per_day=60, repeats=2)
    for name in ("model_page", "overview"):
        figures = (*result[f"{name}_server_ms"], *result[f"{name}_wall_ms"], *result[f"{name}_cpu_ms"])
        assert all(math.isfinite(v) and v > 0 for v in figures), figures
    assert result["load_s"] > 0
    assert result["refresh_s"] > 0

    # The table's window: the 28 days before the week start at or before the page's end
    # (the day after "now", by default).
    data = result["data"]
    end_day = result["now"].replace(hour=0) + timedelta(days=1)
    window_end = end_day - timedelta(days=end_day.weekday())
    window_start = window_end - timedelta(days=28)
    scored = np.array([t.timestamp() for t in data.scored_at])
    inside = (scored >= window_start.timestamp()) & (scored < window_end.timestamp())
    segment = np.array(data.segment)
    html = result["model_page_html"]
    rows = re.findall(r'<tr data-testid="segment-row".*?</tr>', html, flags=re.S)
    assert len(rows) == 3
    for row in rows:
        value = re.search(r"shop=(s\d\d)", row).group(1)
        numbers = re.findall(r'<td class="num">(\d+)</td>', row)
        expected = int(np.sum(inside & (segment == value)))
        assert int(numbers[0]) == expected > 0  # predictions
        assert int(numbers[1]) == expected  # every case is labeled and mature
