"""Calibrant: keeps deployed probability models honest."""

__version__ = "0.1.0"
