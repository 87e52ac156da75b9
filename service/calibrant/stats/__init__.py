"""Every formula Calibrant reports: pure numpy/scipy, no I/O.

This package imports nothing from the rest of Calibrant, nor any web or
database library (a test guards this).
"""
