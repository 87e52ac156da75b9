"""Score drift of a current summary against a reference summary, on frozen bins.

Score drift needs no labels, so every prediction counts (all three classes).
Bins are frozen from the reference: its B-quantiles (default deciles) snapped
to the nearest fine edge, so PSI and Jensen–Shannon are exact on those bins
(docs/methods.md §2 and 6.1); the snapped edges are part of the result. KS is
evaluated at every fine edge: a lower bound on the row-level D, short by at
most the largest fine-bin mass (reported). The statistics are the array
module's ``*_from_counts`` kernels (:mod:`calibrant.stats.drift`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calibrant.stats.drift import js_distance_from_counts, ks_from_counts, psi_from_counts
from calibrant.stats.result import Estimate, Status, missing
from calibrant.stats.summary import EDGES_P, N_BINS, Summary

__all__ = ["FrozenBins", "ScoreDrift", "frozen_bins", "psi", "score_drift"]


@dataclass(frozen=True, slots=True)
class FrozenBins:
    """Coarse drift bins as unions of fine bins.

    ``starts[i]`` is the first fine-bin id of coarse bin i (``starts[0] == 0``);
    ``edges_p`` are the coarse edges in probability, 0 and 1 at the ends.
    """

    starts: tuple[int, ...]
    edges_p: tuple[float, ...]

    def coarse_index(self, fine_bins: np.ndarray) -> np.ndarray:
        return np.searchsorted(np.asarray(self.starts), fine_bins, side="right") - 1


@dataclass(frozen=True, slots=True)
class ScoreDrift:
    """PSI, KS and Jensen–Shannon distance of current vs reference, with the bins used."""

    psi: Estimate
    ks: Estimate
    js_distance: Estimate
    bins: FrozenBins | None


def _fine_counts(s: Summary) -> np.ndarray:
    bins, fields = s.all_rows()
    out = np.zeros(N_BINS)
    out[bins] = fields[:, 0]
    return out


def frozen_bins(reference: Summary, *, n_bins: int = 10) -> FrozenBins:
    """Reference B-quantiles snapped to fine edges (cumulative share nearest k/B).

    Quantiles that snap to the same edge merge, so fewer than ``n_bins`` bins
    can result when the reference is concentrated in a few fine bins.
    """
    if isinstance(n_bins, bool) or not isinstance(n_bins, int | np.integer) or n_bins < 2:
        raise ValueError(f"n_bins must be an integer ≥ 2, got {n_bins!r}")
    counts = _fine_counts(reference)
    total = counts.sum()
    if total <= 0:
        raise ValueError("reference summary is empty: drift bins need reference data")
    share = np.cumsum(counts)[:-1] / total  # share below the upper edge of fine bin b
    targets = np.arange(1, n_bins) / n_bins
    last = np.unique(np.abs(share[None, :] - targets[:, None]).argmin(axis=1))
    # a coarse bin starts after the last fine bin of the previous one
    starts = np.concatenate([[0], last + 1])
    edges = np.concatenate([[0.0], EDGES_P[last], [1.0]])
    return FrozenBins(tuple(int(s) for s in starts), tuple(float(e) for e in edges))


def score_drift(
    current: Summary,
    reference: Summary,
    *,
    bins: FrozenBins | None = None,
    n_bins: int = 10,
    smoothing: float = 0.5,
    n_null: int = 1000,
    seed: int = 0,
) -> ScoreDrift:
    """PSI (+½ per bin by default), KS and Jensen–Shannon distance (base 2, unsmoothed).

    Reference levels for the sample sizes: PSI ``extra['null_95']`` =
    χ²_{0.95,B−1}(1/n + 1/m) (docs/methods.md §17.2, [D]); JS ``extra['null_95']`` from
    ``n_null`` seeded multinomial draws; KS p-value from the asymptotic
    two-sample law. Pass ``bins`` to keep them frozen across windows.

    Edge cases: an empty reference or current summary → every statistic undefined.
    """
    ref_fine, cur_fine = _fine_counts(reference), _fine_counts(current)
    if ref_fine.sum() <= 0 or cur_fine.sum() <= 0:
        m = missing(Status.NO_VALUE, "reference or current summary is empty")
        return ScoreDrift(m, m, m, bins)
    if bins is None:
        bins = frozen_bins(reference, n_bins=n_bins)
    idx = bins.coarse_index(np.arange(N_BINS))
    k = len(bins.starts)
    r = np.bincount(idx, weights=ref_fine, minlength=k)
    c = np.bincount(idx, weights=cur_fine, minlength=k)
    edges = ",".join(f"{e:.17g}" for e in bins.edges_p)
    p = psi_from_counts(r, c, smoothing=smoothing)
    p.extra.update(edges=edges, binning="reference quantiles snapped to fine edges")
    js = js_distance_from_counts(r, c, n_null=n_null, seed=seed)
    js.extra.update(edges=edges)
    ks = ks_from_counts(ref_fine, cur_fine)
    if ks.measured:
        mass = max(float((ref_fine / ref_fine.sum()).max()), float((cur_fine / cur_fine.sum()).max()))
        ks.extra["max_shortfall"] = mass
    return ScoreDrift(p, ks, js, bins)


def psi(current: Summary, reference: Summary, *, bins: FrozenBins | None = None,
        n_bins: int = 10, smoothing: float = 0.5) -> Estimate:
    """PSI alone; see :func:`score_drift`."""
    return score_drift(current, reference, bins=bins, n_bins=n_bins, smoothing=smoothing,
                       n_null=0).psi
