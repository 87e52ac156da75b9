"""Static charts drawn on the server with reportlab's graphics shapes.

A chart is a ``Drawing``: the PDF places it as it is, the HTML embeds the same drawing as
SVG (``svg``), so both forms show one picture of one set of numbers.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from reportlab.graphics import renderSVG
from reportlab.graphics.shapes import Circle, Drawing, Line, PolyLine, Rect, String
from reportlab.lib import colors

WIDTH, HEIGHT = 460, 200
_LEFT, _RIGHT, _TOP, _BOTTOM = 52, 14, 22, 34
INK = colors.HexColor("#1f3b4d")
BAND = colors.HexColor("#8a5a2b")
GRID = colors.HexColor("#d5d9dc")
FAINT = colors.HexColor("#7b8a95")


def svg(drawing: Drawing) -> str:
    """The drawing as an inline SVG element (the XML declaration dropped)."""
    text = renderSVG.drawToString(drawing)
    return text[text.index("<svg"):]


def _ticks(lo: float, hi: float, count: int = 5) -> list[float]:
    if hi <= lo:
        return [lo]
    raw = (hi - lo) / count
    step = 10 ** math.floor(math.log10(raw))
    for factor in (1, 2, 2.5, 5, 10):
        if raw <= factor * step:
            step *= factor
            break
    first = math.ceil(lo / step) * step
    return [first + i * step for i in range(int((hi - first) / step) + 1)]


def _frame(drawing: Drawing, title: str, y_lo: float, y_hi: float) -> None:
    drawing.add(String(_LEFT, HEIGHT - 14, title, fontName="Helvetica-Bold", fontSize=9, fillColor=INK))
    for tick in _ticks(y_lo, y_hi):
        y = _y(tick, y_lo, y_hi)
        drawing.add(Line(_LEFT, y, WIDTH - _RIGHT, y, strokeColor=GRID, strokeWidth=0.5))
        drawing.add(String(_LEFT - 4, y - 3, f"{tick:.4g}", fontName="Helvetica", fontSize=7,
                           fillColor=FAINT, textAnchor="end"))
    drawing.add(Rect(_LEFT, _BOTTOM, WIDTH - _LEFT - _RIGHT, HEIGHT - _TOP - _BOTTOM,
                     strokeColor=FAINT, strokeWidth=0.5, fillColor=None))


def _y(value: float, lo: float, hi: float) -> float:
    span = hi - lo or 1.0
    return _BOTTOM + (value - lo) / span * (HEIGHT - _TOP - _BOTTOM)


def _x(index: int, count: int) -> float:
    inner = WIDTH - _LEFT - _RIGHT
    return _LEFT + (index + 0.5) * inner / max(count, 1)


def weekly_metric(periods: Sequence[dict[str, Any]], key: str, *, lower: float | None = None,
                  upper: float | None = None) -> Drawing:
    """One metric per week with its 95 % interval as a vertical bar; tolerance bounds dashed."""
    drawing = Drawing(WIDTH, HEIGHT)
    values = [p.get(key) for p in periods]
    intervals = [p.get(f"{key}_ci") for p in periods]
    seen = [v for v in values if v is not None]
    seen += [c for ci in intervals if ci for c in ci]
    seen += [b for b in (lower, upper) if b is not None]
    if not seen:
        _frame(drawing, f"{key} per week: no value in this span", 0.0, 1.0)
        return drawing
    lo, hi = min(seen), max(seen)
    pad = (hi - lo) * 0.08 or abs(hi) * 0.1 or 0.1
    lo, hi = lo - pad, hi + pad
    _frame(drawing, f"{key} per week (95 % interval)", lo, hi)
    for bound in (lower, upper):
        if bound is not None:
            y = _y(bound, lo, hi)
            drawing.add(Line(_LEFT, y, WIDTH - _RIGHT, y, strokeColor=BAND, strokeWidth=1,
                             strokeDashArray=[4, 3]))
    points: list[float] = []
    for i, (value, ci) in enumerate(zip(values, intervals, strict=True)):
        x = _x(i, len(values))
        if ci:
            drawing.add(Line(x, _y(ci[0], lo, hi), x, _y(ci[1], lo, hi), strokeColor=FAINT, strokeWidth=1))
        if value is not None:
            points += [x, _y(value, lo, hi)]
            drawing.add(Circle(x, _y(value, lo, hi), 1.8, fillColor=INK, strokeColor=None))
    if len(points) >= 4:
        drawing.add(PolyLine(points, strokeColor=INK, strokeWidth=1))
    step = max(1, len(periods) // 6)
    for i in range(0, len(periods), step):
        label = str(periods[i]["start"])[:10]
        drawing.add(String(_x(i, len(periods)), _BOTTOM - 12, label, fontName="Helvetica", fontSize=7,
                           fillColor=FAINT, textAnchor="middle"))
    return drawing


def reliability(diagram: dict[str, Any]) -> Drawing:
    """Observed rate against mean predicted probability per bin, with Wilson intervals; the
    diagonal is perfect calibration."""
    drawing = Drawing(WIDTH, HEIGHT)
    _frame(drawing, f"Reliability diagram ({diagram.get('n', 0)} mature labeled predictions)", 0.0, 1.0)
    inner_w = WIDTH - _LEFT - _RIGHT

    def x_of(p: float) -> float:
        return _LEFT + p * inner_w

    drawing.add(Line(x_of(0), _y(0, 0, 1), x_of(1), _y(1, 0, 1), strokeColor=BAND, strokeWidth=1,
                     strokeDashArray=[4, 3]))
    for b in diagram.get("bins", []):
        if b.get("mean_predicted") is None or b.get("observed_rate") is None:
            continue
        x = x_of(b["mean_predicted"])
        if b.get("observed_rate_ci"):
            low, high = b["observed_rate_ci"]
            drawing.add(Line(x, _y(low, 0, 1), x, _y(high, 0, 1), strokeColor=FAINT, strokeWidth=1))
        drawing.add(Circle(x, _y(b["observed_rate"], 0, 1), 2.4, fillColor=INK, strokeColor=None))
    for tick in _ticks(0.0, 1.0):
        drawing.add(String(x_of(tick), _BOTTOM - 12, f"{tick:.1f}", fontName="Helvetica", fontSize=7,
                           fillColor=FAINT, textAnchor="middle"))
    drawing.add(String(_LEFT + inner_w / 2, _BOTTOM - 24, "mean predicted probability", fontName="Helvetica",
                       fontSize=7, fillColor=FAINT, textAnchor="middle"))
    return drawing
