"""Many summaries by one group-by: each equals Summary.from_arrays of its rows, and merging stored
summaries in bulk equals Summary.merge_many; totals against plain numpy sums of the rows."""

from __future__ import annotations

import numpy as np
import pytest

from calibrant.stats.summary import Summary
from calibrant.stats.summary_grouped import grouped_summaries, merged_payloads


def rows(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    p = rng.beta(0.6, 1.4, n)
    p[:5] = [0.0, 1.0, 0.05, 0.5, 1e-300]  # the grid's ends, two edges, a clipped value
    y = rng.choice([1, 0, -1], n, p=[0.3, 0.5, 0.2])
    return p, y


def test_each_group_equals_from_arrays_of_its_rows() -> None:
    p, y = rows(20_000, 1)
    group_of_row = np.random.default_rng(2).integers(0, 40, p.size)
    # every row in its group, and the even rows a second time in group 100 + its group
    even = np.flatnonzero(np.arange(p.size) % 2 == 0)
    member_rows = np.concatenate([np.arange(p.size), even])
    member_groups = np.concatenate([group_of_row, 100 + group_of_row[even]])
    ids, summaries = grouped_summaries(p, y, member_rows, member_groups)
    assert ids.tolist() == sorted(set(member_groups.tolist()))
    for g, summary in zip(ids.tolist(), summaries, strict=True):
        mine = member_rows[member_groups == g]
        reference = Summary.from_arrays(p[mine], y[mine])
        assert np.array_equal(summary.cells, reference.cells)
        np.testing.assert_allclose(summary.fields, reference.fields, rtol=1e-12, atol=0)
        # outside the project: the count and Σp of the group's rows
        assert summary.field_total("n") == mine.size
        assert summary.field_total("s1") == pytest.approx(np.sum(p[mine]), rel=1e-12)
        assert summary.counts()["unlabeled"] == np.sum(y[mine] == -1)


def test_bulk_merge_of_stored_summaries_equals_merge_many() -> None:
    p, y = rows(9_000, 3)
    parts = [Summary.from_arrays(p[i::30], y[i::30]) for i in range(30)]
    groups = np.arange(30) % 4
    ids, merged = merged_payloads([s.to_bytes() for s in parts], groups)
    assert ids.tolist() == [0, 1, 2, 3]
    for g, summary in zip(ids.tolist(), merged, strict=True):
        reference = Summary.merge_many([s for s, k in zip(parts, groups, strict=True) if k == g])
        assert np.array_equal(summary.cells, reference.cells)
        np.testing.assert_allclose(summary.fields, reference.fields, rtol=1e-12, atol=0)
        assert summary.field_total("n") == sum(p[i::30].size for i in range(30) if i % 4 == g)


def test_bad_input_is_refused() -> None:
    with pytest.raises(ValueError, match="within"):
        grouped_summaries(np.array([1.5]), np.array([1]), np.array([0]), np.array([0]))
    with pytest.raises(ValueError, match="y_state"):
        grouped_summaries(np.array([0.5]), np.array([2]), np.array([0]), np.array([0]))
    with pytest.raises(ValueError, match="wrong length"):
        merged_payloads([Summary.from_arrays(np.array([0.3]), np.array([1])).to_bytes()[:-1]], np.array([0]))
