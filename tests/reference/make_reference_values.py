"""Recompute the reference-value files of tests/stats, or check them.

    .venv/bin/python -m tests.reference.make_reference_values            # rewrite all three
    .venv/bin/python -m tests.reference.make_reference_values --check    # compare, write nothing
    .venv/bin/python -m tests.reference.make_reference_values --check --parts metrics,summary

Parts: metrics (~6 s), summary (<1 s), cusum_stream (<1 s), cusum_chain_at_h
(~3 s), cusum_chain_limits (~30 s), cusum_simulation (~15 s). Writing always
computes every part. A check prints, per file, the largest relative
difference among deterministic values and, separately, among seeded
Monte-Carlo values, plus any value whose type, text or presence differs; it
exits with 1 when anything is beyond the tolerances of ``compare``.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

from tests.reference import cusum_file, metrics_file, summary_file
from tests.reference.compare import (
    DETERMINISTIC_RTOL,
    MONTE_CARLO_RTOL,
    Comparison,
    Difference,
    compare,
    missing_in_computed,
    standardised_differences,
)
from tests.reference.entries import plain

ROOT = Path(__file__).resolve().parents[2]
PART_FILES: dict[str, tuple[str, Callable[[], dict[str, Any]]]] = {
    "metrics": (metrics_file.PATH, metrics_file.build),
    "summary": (summary_file.PATH, summary_file.build),
    **{name: (cusum_file.PATH, fn) for name, fn in cusum_file.PARTS.items()},
}
CHEAP_PARTS = ("metrics", "summary", "cusum_stream", "cusum_chain_at_h")


def write_all() -> list[Path]:
    written = []
    for path, build in ((metrics_file.PATH, metrics_file.build),
                        (summary_file.PATH, summary_file.build),
                        (cusum_file.PATH, cusum_file.build)):
        target = ROOT / path
        target.write_text(json.dumps(build(), indent=1) + "\n")
        written.append(target)
    return written


def run_check(parts: tuple[str, ...] = tuple(PART_FILES)) -> dict[str, Comparison]:
    """Compare the chosen parts with the files on disk; one Comparison per file."""
    unknown = set(parts) - set(PART_FILES)
    if unknown:
        raise ValueError(f"unknown parts {sorted(unknown)}; choose from {sorted(PART_FILES)}")
    results: dict[str, Comparison] = {}
    for part in parts:
        path, build = PART_FILES[part]
        stored = json.loads((ROOT / path).read_text())
        computed = plain(build())
        result = compare(computed, stored, out=results.get(path))
        result.standardised += standardised_differences(computed, stored)
        if part in ("metrics", "summary"):  # whole files: also list what the file has extra
            result.differences += [Difference(p, "<present>", "<not computed>", None)
                                   for p in missing_in_computed(computed, stored)]
        results[path] = result
    return results


def _describe(result: Comparison) -> list[str]:
    lines = [f"  {result.n_compared} values compared"]
    for label, mc in (("deterministic", False), ("Monte-Carlo (seeded)", True)):
        d = result.largest(monte_carlo=mc)
        if d is not None:
            lines.append(f"  largest relative difference, {label}: {d.relative:.3g} at {d.path} "
                         f"(file {d.stored!r}, recomputed {d.computed!r})")
    for where, z in result.standardised:
        lines.append(f"  simulated mean at {where}: {z:.2f} combined Monte-Carlo SE from the file")
    for d in result.mismatches():
        lines.append(f"  MISMATCH {d.path}: file {d.stored!r}, recomputed {d.computed!r}")
    return lines


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true", help="compare with the files, write nothing")
    parser.add_argument("--parts", default=",".join(PART_FILES),
                        help=f"comma-separated parts for --check (default all): {', '.join(PART_FILES)}")
    args = parser.parse_args(argv)
    if not args.check:
        for path in write_all():
            print(f"wrote {path.relative_to(ROOT)}")
        return 0
    results = run_check(tuple(p for p in args.parts.split(",") if p))
    for path, result in results.items():
        print(path)
        print("\n".join(_describe(result)))
    if cusum_file.SEARCHED:
        print("simulated search for ARL0 = 10,000 found h = "
              + ", ".join(f"{k} {v:.4f}" for k, v in cusum_file.SEARCHED.items())
              + f" (recorded limits {cusum_file.LIMITS})")
    failed = [d for r in results.values() for d in r.beyond(DETERMINISTIC_RTOL, MONTE_CARLO_RTOL)]
    print(f"{len(failed)} value(s) beyond the tolerances (relative {DETERMINISTIC_RTOL:g} "
          f"deterministic, {MONTE_CARLO_RTOL:g} Monte-Carlo) or changed in type, text or presence")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
