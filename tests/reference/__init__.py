"""Regenerates the reference-value files under tests/stats from their recipes.

The values come from scikit-learn, statsmodels, scipy and plain numpy of the
published formulas; nothing here imports Calibrant, so the files stay an
outside check on it. Run ``python -m tests.reference.make_reference_values``
to rewrite the files, ``--check`` to compare without writing.
"""
