"""Many mergeable summaries at once: one per group of rows, by one vectorised group-by.

A refresh summarises thousands of (bucket, version, segment) groups. Building
each with :meth:`Summary.from_arrays` costs a dense (cells × fields) pass per
group; here every row's cell (fine bin × 3 + class, as ``Summary.cells``) is
combined with its group into one integer key, the keys are made dense with
``np.unique``, and each field of docs/methods.md §2 is summed per key with one
``np.bincount``. ``np.bincount`` adds in row order, as ``from_arrays`` does, so
a group of at most 65,536 rows gets bit-identical sums; a larger one differs
only by the order of float64 additions (every value in a cell has one sign, so
the relative difference stays within n · machine epsilon).

A row may belong to several groups (the "all" stream and one value of each
declared segment key): ``members`` lists (row, group) pairs, and the per-row
fields are computed once and gathered per membership.
"""

from __future__ import annotations

import numpy as np

from calibrant.stats.summary import (
    _FLAG_WEIGHTED,
    _HEADER,
    _MAGIC,
    _N_CELLS,
    _N_CLASSES,
    FORMAT_VERSION,
    N_BINS,
    N_FIELDS,
    NEGATIVE,
    POSITIVE,
    UNLABELED,
    Summary,
    _row_fields,
    bin_index,
)

__all__ = ["grouped_summaries", "merged_by_group", "merged_payloads"]


def grouped_summaries(
    y_proba: np.ndarray, y_state: np.ndarray, member_rows: np.ndarray, member_groups: np.ndarray
) -> tuple[np.ndarray, list[Summary]]:
    """Summaries of the rows of each group: (sorted group ids, one Summary per id).

    ``member_rows[i]`` belongs to group ``member_groups[i]`` (non-negative ints);
    ``y_state`` is 1, 0 or −1 per row as in :meth:`Summary.from_arrays`.
    """
    p = np.asarray(y_proba, dtype=np.float64)
    s = np.asarray(y_state)
    if p.size and not (np.all(np.isfinite(p)) and p.min() >= 0.0 and p.max() <= 1.0):
        raise ValueError("y_proba must be finite and within [0, 1]")
    if s.size and not np.all(np.isin(s, (POSITIVE, NEGATIVE, UNLABELED))):
        raise ValueError("y_state must be 1 (positive), 0 (negative) or -1 (unlabeled)")
    rows = np.asarray(member_rows, dtype=np.int64)
    groups = np.asarray(member_groups, dtype=np.int64)
    if rows.size == 0:
        return np.empty(0, np.int64), []
    cls_idx = np.where(s == UNLABELED, 2, s).astype(np.int64)
    cell = bin_index(p) * _N_CLASSES + cls_idx
    keys, inverse = np.unique(groups * _N_CELLS + cell[rows], return_inverse=True)
    fields = np.empty((keys.size, N_FIELDS))
    for j, column in enumerate(_row_fields(p, (s == POSITIVE).astype(np.float64))):
        fields[:, j] = np.bincount(inverse, weights=column[rows], minlength=keys.size)
    return _split(keys, fields)


def merged_by_group(parts: list[Summary], part_groups: np.ndarray) -> tuple[np.ndarray, list[Summary]]:
    """Field-wise sums of the summaries of each group (the merge of :meth:`Summary.merge_many`),
    for many groups in one pass: (sorted group ids, one Summary per id).

    Plain sums in the order of ``parts``; Summary.merge_many adds with Neumaier
    compensation, so the two agree to the rounding of a few dozen additions of
    same-signed values per cell.
    """
    if len(parts) != len(part_groups):
        raise ValueError("one group per summary")
    kept = [(s, int(g)) for s, g in zip(parts, part_groups, strict=True) if not s.is_empty()]
    if not kept:
        return np.empty(0, np.int64), []
    if len({s.weighted for s, _ in kept}) > 1:
        raise ValueError("cannot merge weighted with unweighted summaries (docs/methods.md §2)")
    weighted = kept[0][0].weighted
    cells = np.concatenate([s.cells for s, _ in kept])
    groups = np.concatenate([np.full(s.cells.size, g, np.int64) for s, g in kept])
    values = np.concatenate([s.fields for s, _ in kept])
    keys, inverse = np.unique(groups * _N_CELLS + cells, return_inverse=True)
    fields = np.empty((keys.size, N_FIELDS))
    for j in range(N_FIELDS):
        fields[:, j] = np.bincount(inverse, weights=values[:, j], minlength=keys.size)
    return _split(keys, fields, weighted=weighted)


def merged_payloads(payloads: list[bytes], part_groups: np.ndarray) -> tuple[np.ndarray, list[Summary]]:
    """:func:`merged_by_group` of stored summaries (``Summary.to_bytes``), decoded in bulk.

    Each payload's header is checked as :meth:`Summary.from_bytes` checks it; the cell ids
    and field values of all payloads are then checked and summed at once, without building
    a Summary per payload.
    """
    if len(payloads) != len(part_groups):
        raise ValueError("one group per summary")
    cells_parts, field_parts, group_parts = [], [], []
    weighted: set[bool] = set()
    for payload, group in zip(payloads, np.asarray(part_groups, dtype=np.int64).tolist(), strict=True):
        if len(payload) < _HEADER.size:
            raise ValueError("summary bytes too short")
        magic, version, flags, n_fields, n_bins, m = _HEADER.unpack_from(payload)
        if magic != _MAGIC or version != FORMAT_VERSION:
            raise ValueError(f"not a version-{FORMAT_VERSION} summary")
        if n_fields != N_FIELDS or n_bins != N_BINS:
            raise ValueError("summary was written with a different grid or field list")
        if len(payload) != _HEADER.size + m * (2 + 8 * N_FIELDS):
            raise ValueError("summary bytes have the wrong length")
        if m == 0:
            continue
        weighted.add(bool(flags & _FLAG_WEIGHTED))
        cells_parts.append(np.frombuffer(payload, dtype="<i2", count=m, offset=_HEADER.size))
        field_parts.append(np.frombuffer(payload, dtype="<f8", count=m * N_FIELDS,
                                         offset=_HEADER.size + 2 * m))
        group_parts.append(np.full(m, group, np.int64))
    if not cells_parts:
        return np.empty(0, np.int64), []
    if len(weighted) > 1:
        raise ValueError("cannot merge weighted with unweighted summaries (docs/methods.md §2)")
    cells = np.concatenate(cells_parts).astype(np.int64)
    values = np.concatenate(field_parts).reshape(-1, N_FIELDS)
    if cells.min() < 0 or cells.max() >= _N_CELLS or not np.all(np.isfinite(values)):
        raise ValueError("stored summaries hold cells outside the grid or non-finite sums")
    keys, inverse = np.unique(np.concatenate(group_parts) * _N_CELLS + cells, return_inverse=True)
    fields = np.empty((keys.size, N_FIELDS))
    for j in range(N_FIELDS):
        fields[:, j] = np.bincount(inverse, weights=values[:, j], minlength=keys.size)
    return _split(keys, fields, weighted=weighted.pop())


def _split(keys: np.ndarray, fields: np.ndarray, *,
           weighted: bool = False) -> tuple[np.ndarray, list[Summary]]:
    nonempty = fields[:, 0] > 0  # as merge_many: a cell of zero weight is not kept
    keys, fields = keys[nonempty], fields[nonempty]
    if keys.size == 0:
        return np.empty(0, np.int64), []
    if not np.all(np.isfinite(fields)):
        raise ValueError("summary fields must be finite")
    group_of_key = keys // _N_CELLS
    starts = np.concatenate(([0], np.flatnonzero(np.diff(group_of_key)) + 1))
    ends = np.append(starts[1:], keys.size)
    # keys are sorted and unique, so within a group the cell ids strictly increase, and each
    # is in [0, _N_CELLS): the checks of Summary's constructor hold for every group at once
    cells = keys % _N_CELLS
    summaries = [Summary._checked_elsewhere(cells[a:b], np.ascontiguousarray(fields[a:b]), weighted)
                 for a, b in zip(starts.tolist(), ends.tolist(), strict=True)]
    return group_of_key[starts], summaries
