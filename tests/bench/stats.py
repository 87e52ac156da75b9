"""Benchmark of the statistics core: array metrics vs scikit-learn, summary build,
merge and metrics-from-summaries, peak memory.

    python tests/bench/stats.py [--small]

Prints figures with units; :func:`run` returns them as a dict (used by
``test_stats_bench_small.py``).
"""

from __future__ import annotations

import argparse
import time
import tracemalloc
from collections.abc import Callable

import numpy as np
from scipy.special import expit
from sklearn.metrics import brier_score_loss, roc_auc_score
from sklearn.metrics import log_loss as sk_log_loss

from calibrant.stats import scoring
from calibrant.stats.discrimination import roc_auc
from calibrant.stats.summary import Summary
from calibrant.stats.summary_metrics import all_metrics

MiB = 2**20


def _timed(fn: Callable[[], object], repeat: int = 3) -> tuple[float, object]:
    best, out = float("inf"), None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def _data(n: int, seed: int = 1) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.normal(-1.0, 1.2, n)
    y = (rng.random(n) < expit(0.3 + 0.7 * x)).astype(np.int8)
    return expit(x), y


def compare_with_sklearn(n: int) -> dict[str, float]:
    """Our array log-loss, Brier and AUC vs scikit-learn on the same arrays (seconds)."""
    p, y = _data(n)
    out: dict[str, float] = {}
    cases = {
        "log_loss": (lambda: scoring.log_loss(y, p).value, lambda: sk_log_loss(y, p)),
        "brier": (lambda: scoring.brier_score(y, p).value, lambda: brier_score_loss(y, p)),
        "auc": (lambda: roc_auc(y, p).value, lambda: roc_auc_score(y, p)),
    }
    for name, (ours, theirs) in cases.items():
        t_ours, v_ours = _timed(ours, repeat=2)
        t_sk, v_sk = _timed(theirs, repeat=2)
        out[f"{name}_ours_s"] = t_ours
        out[f"{name}_sklearn_s"] = t_sk
        out[f"{name}_ratio"] = t_ours / t_sk
        out[f"{name}_max_abs_diff"] = abs(float(v_ours) - float(v_sk))  # type: ignore[arg-type]
    return out


def summary_build(n: int) -> dict[str, float]:
    """Rows per second of Summary.from_arrays, and traced peak memory vs the input size."""
    p, y = _data(n)
    state = np.where(np.arange(n) % 5 == 0, -1, y).astype(np.int8)  # a fifth still unlabeled
    t, _ = _timed(lambda: Summary.from_arrays(p, state), repeat=2)
    tracemalloc.start()
    Summary.from_arrays(p, state)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    input_bytes = p.nbytes + state.nbytes
    return {"build_rows_per_s": n / t, "build_s": t, "input_MiB": input_bytes / MiB,
            "build_peak_MiB": peak / MiB, "build_peak_over_input": peak / input_bytes}


def hourly_year(hours: int = 24 * 365, rows_per_hour: int = 500, seed: int = 2) -> list[Summary]:
    """One year of hourly summaries: traffic with a daily cycle, drifting risk, 20 % unlabeled."""
    rng = np.random.default_rng(seed)
    out = []
    for h in range(hours):
        n = int(rows_per_hour * (1.0 + 0.6 * np.sin(2 * np.pi * (h % 24) / 24)))
        x = rng.normal(-1.0 + 0.2 * h / hours, 1.2, n)
        y = (rng.random(n) < expit(0.3 + 0.7 * x)).astype(np.int8)
        y[rng.random(n) < 0.2] = -1
        out.append(Summary.from_arrays(expit(x), y))
    return out


def merge_and_metrics(summaries: list[Summary]) -> dict[str, float]:
    """merge_many throughput, then all metrics (with a reference month) from the merged year."""
    t_merge, merged = _timed(lambda: Summary.merge_many(summaries), repeat=2)
    reference = Summary.merge_many(summaries[: 24 * 30])
    t_all, metrics = _timed(lambda: all_metrics(merged, reference), repeat=2)
    t_total = t_merge + t_all
    finite = all(v.value is not None for v in metrics.values())  # type: ignore[union-attr]
    stored = sum(len(s.to_bytes()) for s in summaries)
    return {"n_summaries": float(len(summaries)), "merge_s": t_merge,
            "merge_summaries_per_s": len(summaries) / t_merge, "all_metrics_s": t_all,
            "year_total_ms": 1e3 * t_total, "stored_MiB": stored / MiB,
            "all_metrics_ok": float(finite)}


def run(small: bool = False) -> dict[str, dict[str, float]]:
    sizes = [100_000] if small else [1_000_000, 10_000_000]
    out: dict[str, dict[str, float]] = {}
    for n in sizes:
        out[f"n={n}"] = {**compare_with_sklearn(n), **summary_build(n)}
    hours = 24 * 30 if small else 24 * 365
    out["hourly"] = merge_and_metrics(hourly_year(hours=hours))
    return out


def _print(results: dict[str, dict[str, float]]) -> None:
    for group, figs in results.items():
        print(f"== {group}")
        for key in ("log_loss", "brier", "auc"):
            if f"{key}_ours_s" in figs:
                print(f"  {key:9s} ours {1e3 * figs[key + '_ours_s']:9.1f} ms   sklearn "
                      f"{1e3 * figs[key + '_sklearn_s']:9.1f} ms   ratio {figs[key + '_ratio']:.2f}"
                      f"   max |diff| {figs[key + '_max_abs_diff']:.1e}")
        if "build_rows_per_s" in figs:
            print(f"  summary build {figs['build_rows_per_s'] / 1e6:.2f} M rows/s; peak "
                  f"{figs['build_peak_MiB']:.1f} MiB for {figs['input_MiB']:.1f} MiB input "
                  f"(ratio {figs['build_peak_over_input']:.2f})")
        if "merge_s" in figs:
            print(f"  {figs['n_summaries']:.0f} hourly summaries ({figs['stored_MiB']:.1f} MiB "
                  f"stored): merge {1e3 * figs['merge_s']:.0f} ms "
                  f"({figs['merge_summaries_per_s']:.0f} summaries/s), all metrics "
                  f"{1e3 * figs['all_metrics_s']:.0f} ms, total {figs['year_total_ms']:.0f} ms")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", action="store_true", help="100k rows and 30 days only")
    _print(run(small=parser.parse_args().small))
