"""The mergeable summary: per (fine logit bin, outcome class) sufficient statistics.

A summary of a set of predictions holds, for every non-empty cell (fine bin k,
class c), the sums of docs/methods.md §2:

    n, S1..S4 = Σp..Σp⁴, Sx, Sxx = Σx, Σx², Sl, Sll = Σℓ, Σℓ², SH = ΣH(p),
    Sv = Σ p(1−p)x²,

plus the counts of clipped rows and of confident errors (docs/methods.md §1.2),
with x = logit(clip(p, ε, 1−ε)), ℓ the clipped per-observation log-loss and
ε = float64 machine epsilon (what ``sklearn.metrics.log_loss`` uses for
float64 input). Three classes are kept apart: labeled negative, labeled
positive and unlabeled. Unlabeled rows store ℓ as if y = 0, because the
only way they enter label metrics is as implicit negatives (docs/methods.md §19);
:meth:`Summary.labeled` decides at query time whether they count.

Merging is field-wise addition, so it is associative and commutative up to
float64 rounding, and the empty summary is its identity.

Fine grid (format version 1), fixed in :data:`EDGES_P`: the probabilities
expit(−16 + 0.05 k), k = 0..640, together with j/20, j = 1..19, sorted. Bin 0
holds p below expit(−16) (p = 0 included), bin i (1 ≤ i < len(EDGES_P)) holds
EDGES_P[i−1] ≤ p < EDGES_P[i], the last bin holds p ≥ expit(16) (p = 1
included). Binning compares p itself with these edges, so the equal-width
probability bins [k/B, (k+1)/B) for B dividing 20 are exact unions of fine
bins. The edges belong to the stored format: changing them needs a new
:data:`FORMAT_VERSION`.
"""

from __future__ import annotations

import struct
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
from scipy.special import expit, logit, xlogy

from calibrant.stats._validation import EPS

__all__ = [
    "EDGES_P",
    "EDGES_X",
    "EPS",
    "FIELDS",
    "FORMAT_VERSION",
    "NEGATIVE",
    "N_BINS",
    "POSITIVE",
    "UNLABELED",
    "LabeledBins",
    "Summary",
    "bin_index",
    "view",
]

FORMAT_VERSION = 1

# y_state encoding accepted by Summary.from_arrays.
POSITIVE = 1
NEGATIVE = 0
UNLABELED = -1
_N_CLASSES = 3  # internal class index: 0 negative, 1 positive, 2 unlabeled

# The 11 sums of docs/methods.md §2, then two counts it asks to report beside log-loss
# (0.1.4): rows with p clipped (p < ε or p > 1 − ε) and confident errors (y = 1 with
# p < 1e-6, y = 0 — or unlabeled — with p > 1 − 1e-6).
FIELDS = ("n", "s1", "s2", "s3", "s4", "sx", "sxx", "sl", "sll", "sh", "sv", "n_clip", "n_conf")
CONFIDENT_ERROR_THRESHOLD = 1e-6
N_FIELDS = len(FIELDS)
F = {name: i for i, name in enumerate(FIELDS)}


def _make_edges() -> np.ndarray:
    grid = expit(np.linspace(-16.0, 16.0, 641))
    aligned = np.arange(1, 20) / 20.0
    edges = np.union1d(grid, aligned)  # logit(1/2) = 0 is on both lists; union1d keeps one
    edges.setflags(write=False)
    return edges


EDGES_P = _make_edges()
EDGES_X = logit(EDGES_P)
EDGES_X.setflags(write=False)
N_BINS = EDGES_P.size + 1  # underflow + interior bins + overflow
_N_CELLS = N_BINS * _N_CLASSES

_HEADER = struct.Struct("<4sHHHHI")  # magic, version, flags, n_fields, n_bins, n_cells
_MAGIC = b"CBSM"
_FLAG_WEIGHTED = 1
_CHUNK_ROWS = 1 << 16  # rows binned per pass: bounds temporaries and per-bin summation length


def bin_index(y_proba: np.ndarray) -> np.ndarray:
    """Fine-bin id of each probability (0 = underflow, N_BINS − 1 = overflow)."""
    return np.searchsorted(EDGES_P, y_proba, side="right")


def _neumaier_add(total: np.ndarray, comp: np.ndarray, add: np.ndarray) -> None:
    """total += add in place, carrying the rounding error in comp (Neumaier 1974)."""
    t = total + add
    big = np.abs(total) >= np.abs(add)
    comp += np.where(big, (total - t) + add, (add - t) + total)
    total[...] = t


def _row_fields(p: np.ndarray, y_loss: np.ndarray) -> Iterator[np.ndarray]:
    """Per-row values of every field, one column at a time in :data:`FIELDS` order
    (one at a time so that only a few row-length temporaries are alive).

    ``y_loss`` is 1 for positives and 0 for negatives and unlabeled rows.
    """
    yield np.ones_like(p)
    yield p
    p2 = p * p
    yield p2
    yield p2 * p
    yield p2 * p2
    del p2
    pc = np.clip(p, EPS, 1.0 - EPS)
    x = logit(pc)
    yield x
    yield x * x
    # ℓ = −ln(1 − p) − y·x on the clipped p (docs/methods.md §5)
    loss = -np.log1p(-pc) - y_loss * x
    del pc
    yield loss
    yield loss * loss
    del loss
    yield -(xlogy(p, p) + xlogy(1.0 - p, 1.0 - p))
    yield p * (1.0 - p) * x * x
    del x
    yield ((p < EPS) | (p > 1.0 - EPS)).astype(np.float64)
    yield np.where(y_loss == 1.0, p < CONFIDENT_ERROR_THRESHOLD,
                   p > 1.0 - CONFIDENT_ERROR_THRESHOLD).astype(np.float64)


@dataclass(frozen=True, slots=True)
class LabeledBins:
    """The two-class view a label metric needs: per fine bin, positives and negatives.

    ``bins`` are sorted fine-bin ids where at least one class is non-empty;
    ``pos`` and ``neg`` are (len(bins), N_FIELDS) field sums in :data:`FIELDS` order.
    """

    bins: np.ndarray
    pos: np.ndarray
    neg: np.ndarray

    def total(self, cls: str, field: str) -> float:
        """Σ over bins of one field for ``cls`` in {"pos", "neg", "all"}."""
        j = F[field]
        if cls == "all":
            return float(np.sum(self.pos[:, j]) + np.sum(self.neg[:, j]))
        return float(np.sum(getattr(self, cls)[:, j]))


class Summary:
    """Sparse per-(fine bin, class) sums; immutable once built.

    Use :meth:`from_arrays` to build, ``a + b`` / :meth:`merge` / :meth:`merge_many`
    to combine, :meth:`to_bytes` / :meth:`from_bytes` to store.
    """

    __slots__ = ("_cells", "_fields", "_weighted")

    def __init__(self, cells: np.ndarray, fields: np.ndarray, *, weighted: bool = False) -> None:
        cells = np.asarray(cells, dtype=np.int64)
        fields = np.asarray(fields, dtype=np.float64)
        if fields.shape != (cells.size, N_FIELDS):
            raise ValueError(f"fields must have shape ({cells.size}, {N_FIELDS})")
        if cells.size and (np.any(np.diff(cells) <= 0) or cells[0] < 0 or cells[-1] >= _N_CELLS):
            raise ValueError("cell ids must be strictly increasing and within the grid")
        if not np.all(np.isfinite(fields)):
            raise ValueError("summary fields must be finite")
        cells.setflags(write=False)
        fields.setflags(write=False)
        self._cells = cells
        self._fields = fields
        self._weighted = bool(weighted) and cells.size > 0

    # ------------------------------------------------------------------ building
    @classmethod
    def _checked_elsewhere(cls, cells: np.ndarray, fields: np.ndarray, weighted: bool) -> Summary:
        """Wrap int64 cell ids and float64 sums whose checks (strictly increasing ids in the grid,
        finite sums, the right shape) the caller made once for many summaries at a time
        (``stats.summary_grouped``): 25 µs a summary of checks was a tenth of a refresh."""
        summary = cls.__new__(cls)
        cells.setflags(write=False)
        fields.setflags(write=False)
        summary._cells = cells
        summary._fields = fields
        summary._weighted = bool(weighted) and cells.size > 0
        return summary

    @classmethod
    def empty(cls) -> Summary:
        return cls(np.empty(0, np.int64), np.empty((0, N_FIELDS)))

    @classmethod
    def from_arrays(
        cls,
        y_proba: np.ndarray,
        y_state: np.ndarray,
        *,
        sample_weight: np.ndarray | None = None,
    ) -> Summary:
        """Summarise predictions.

        ``y_state`` per row: :data:`POSITIVE` (1), :data:`NEGATIVE` (0) or
        :data:`UNLABELED` (−1, no outcome yet). ``sample_weight`` are frequency
        weights (non-negative): every sum is weighted and n becomes Σw.
        Rows are processed in chunks so temporaries stay small; chunk totals
        are added with Neumaier compensation.
        """
        p = np.asarray(y_proba, dtype=np.float64).ravel()
        s = np.asarray(y_state).ravel()
        if s.shape != p.shape:
            raise ValueError("y_proba and y_state must have the same length")
        if p.size and not (np.all(np.isfinite(p)) and p.min() >= 0.0 and p.max() <= 1.0):
            raise ValueError("y_proba must be finite and within [0, 1]")
        if s.size and not np.all(np.isin(s, (POSITIVE, NEGATIVE, UNLABELED))):
            raise ValueError("y_state must be 1 (positive), 0 (negative) or -1 (unlabeled)")
        w = None
        if sample_weight is not None:
            w = np.asarray(sample_weight, dtype=np.float64).ravel()
            if w.shape != p.shape or not np.all(np.isfinite(w)) or (w.size and w.min() < 0):
                raise ValueError("sample_weight must be finite, non-negative, one per row")
        total = np.zeros((_N_CELLS, N_FIELDS))
        comp = np.zeros_like(total)
        for start in range(0, p.size, _CHUNK_ROWS):
            sl = slice(start, start + _CHUNK_ROWS)
            pc, sc = p[sl], s[sl]
            cls_idx = np.where(sc == UNLABELED, 2, sc).astype(np.int64)
            cell = bin_index(pc) * _N_CLASSES + cls_idx
            wc = None if w is None else w[sl]
            part = np.empty_like(total)
            for j, col in enumerate(_row_fields(pc, (sc == POSITIVE).astype(np.float64))):
                part[:, j] = np.bincount(cell, weights=col if wc is None else col * wc,
                                         minlength=_N_CELLS)
            _neumaier_add(total, comp, part)
        dense = total + comp
        keep = np.flatnonzero(dense[:, 0] > 0)
        return cls(keep, dense[keep], weighted=w is not None)

    # ------------------------------------------------------------------ merging
    def merge(self, other: Summary) -> Summary:
        """Field-wise sum of two summaries (refuses to mix weighted and unweighted)."""
        return Summary.merge_many([self, other])

    def __add__(self, other: object) -> Summary:
        if not isinstance(other, Summary):
            return NotImplemented
        return self.merge(other)

    @staticmethod
    def merge_many(summaries: list[Summary]) -> Summary:
        """Sum many summaries at once.

        Vectorised: each summary is added into a dense (cells × fields) total
        with Neumaier's compensated summation, so the rounding error does not
        grow with the number of summaries (e.g. 24 × 366 hourly summaries).
        """
        parts = [s for s in summaries if s._cells.size]
        if not parts:
            return Summary.empty()
        weighted = {s._weighted for s in parts}
        if len(weighted) > 1:
            raise ValueError("cannot merge weighted with unweighted summaries (docs/methods.md §2)")
        if len(parts) == 1:
            return parts[0]
        total = np.zeros((_N_CELLS, N_FIELDS))
        comp = np.zeros_like(total)
        for s in parts:
            idx = s._cells
            t = total[idx]
            c = comp[idx]
            _neumaier_add(t, c, s._fields)
            total[idx] = t
            comp[idx] = c
        dense = total + comp
        keep = np.flatnonzero(dense[:, 0] > 0)
        return Summary(keep, dense[keep], weighted=weighted.pop())

    # ------------------------------------------------------------------ views
    @property
    def weighted(self) -> bool:
        return self._weighted

    @property
    def cells(self) -> np.ndarray:
        """Sorted cell ids, cell = fine bin × 3 + class (0 neg, 1 pos, 2 unlabeled)."""
        return self._cells

    @property
    def fields(self) -> np.ndarray:
        """(len(cells), N_FIELDS) sums in :data:`FIELDS` order."""
        return self._fields

    def is_empty(self) -> bool:
        return self._cells.size == 0

    def class_dense(self) -> np.ndarray:
        """Dense (N_BINS, 3, N_FIELDS) array; classes ordered negative, positive, unlabeled."""
        dense = np.zeros((_N_CELLS, N_FIELDS))
        dense[self._cells] = self._fields
        return dense.reshape(N_BINS, _N_CLASSES, N_FIELDS)

    def counts(self) -> dict[str, float]:
        """Totals n per class: ``positive``, ``negative``, ``unlabeled``."""
        n = np.bincount(self._cells % _N_CLASSES, weights=self._fields[:, 0], minlength=3)
        return {"negative": float(n[0]), "positive": float(n[1]), "unlabeled": float(n[2])}

    def field_total(self, field: str) -> float:
        """Σ of one field over every class and bin (``field_total("s1")`` = Σ p of all rows)."""
        return float(self._fields[:, F[field]].sum())

    def all_rows(self) -> tuple[np.ndarray, np.ndarray]:
        """(bins, fields) over every class, for statistics that need no label."""
        dense = self.class_dense().sum(axis=1)
        bins = np.flatnonzero(dense[:, 0] > 0)
        return bins, dense[bins]

    def labeled(self, implicit_negatives: bool) -> LabeledBins:
        """Two-class view. With ``implicit_negatives`` unlabeled rows count as y = 0
        (their loss fields were stored as if y = 0); otherwise they are left out."""
        dense = self.class_dense()
        neg = dense[:, 0] + dense[:, 2] if implicit_negatives else dense[:, 0]
        pos = dense[:, 1]
        bins = np.flatnonzero((pos[:, 0] + neg[:, 0]) > 0)
        return LabeledBins(bins=bins, pos=pos[bins], neg=neg[bins])

    # ------------------------------------------------------------------ storage
    def to_bytes(self) -> bytes:
        """Little-endian layout, version :data:`FORMAT_VERSION`.

        16-byte header ``<4sHHHHI``: magic b"CBSM", format version, flags (bit 0:
        weighted), number of fields (13), number of fine bins (660), number of
        cells m; then m int16 cell ids (strictly increasing), then m × 13 float64
        field values row by row in :data:`FIELDS` order.
        """
        flags = _FLAG_WEIGHTED if self._weighted else 0
        head = _HEADER.pack(_MAGIC, FORMAT_VERSION, flags, N_FIELDS, N_BINS, self._cells.size)
        return (head + self._cells.astype("<i2").tobytes()
                + self._fields.astype("<f8").tobytes())

    @classmethod
    def from_bytes(cls, data: bytes) -> Summary:
        """Inverse of :meth:`to_bytes`; rejects other versions, grids or a wrong length."""
        if len(data) < _HEADER.size:
            raise ValueError("summary bytes too short")
        magic, version, flags, n_fields, n_bins, m = _HEADER.unpack_from(data)
        if magic != _MAGIC or version != FORMAT_VERSION:
            raise ValueError(f"not a version-{FORMAT_VERSION} summary")
        if n_fields != N_FIELDS or n_bins != N_BINS:
            raise ValueError("summary was written with a different grid or field list")
        if len(data) != _HEADER.size + m * (2 + 8 * N_FIELDS):
            raise ValueError("summary bytes have the wrong length")
        off = _HEADER.size
        cells = np.frombuffer(data, dtype="<i2", count=m, offset=off).astype(np.int64)
        fields = np.frombuffer(data, dtype="<f8", count=m * N_FIELDS, offset=off + 2 * m)
        return cls(cells, fields.reshape(m, N_FIELDS).copy(), weighted=bool(flags & _FLAG_WEIGHTED))

    # ------------------------------------------------------------------ misc
    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Summary):
            return NotImplemented
        return (self._weighted == other._weighted and np.array_equal(self._cells, other._cells)
                and np.array_equal(self._fields, other._fields))

    __hash__ = None  # type: ignore[assignment]  # mutable-looking value type: no hashing

    def __repr__(self) -> str:
        c = self.counts()
        return (f"Summary(cells={self._cells.size}, positive={c['positive']:g}, "
                f"negative={c['negative']:g}, unlabeled={c['unlabeled']:g})")


def view(data: Summary | LabeledBins, implicit_negatives: bool = False) -> LabeledBins:
    """The two-class view of ``data``; a view is returned unchanged."""
    if isinstance(data, LabeledBins):
        return data
    return data.labeled(implicit_negatives)
