"""The pages' colours, in one place: warm paper, slate ink, a pine line, rust for alarms, ochre for
figures that can still change."""

from __future__ import annotations

INK = "#22303a"
MUTED = "#7b8790"
GRID = "#e4ddcf"
TRACE = "#2d6a5f"  # pine: all cases
BAND = "rgba(45,106,95,0.16)"
SECOND = "#5b6fa8"  # slate blue: coverage and drift
ALARM = "#b4432b"  # rust: segments in alarm, the limit, the crossing
PROVISIONAL = "#c29a2e"  # ochre: periods whose labels are still arriving
