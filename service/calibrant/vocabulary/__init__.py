"""The words every layer shares: names and their patterns, instants, segments, metric keys.

The bottom floor with ``config``, ``clock`` and ``errors``: it imports nothing
else of Calibrant's, so any package may use it (docs/architecture.md).
"""
