"""Plot specifications for the pages: plain dicts the browser's plotting library draws.

Built here rather than through the plotting library's Python API: a figure is a few lists,
and building dicts keeps the model page's server time small (tests/bench/pages.py).
Each scatter trace may name a ``testid``; the page script puts it on the drawn trace, so a
browser test can find the limit line or the crossing marker in the rendered SVG.
Times are written as UTC wall-clock strings (the library ignores offsets); axes say UTC.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from calibrant.pages.palette import ALARM, BAND, GRID, INK, MUTED, PROVISIONAL, SECOND, TRACE

Figure = dict[str, Any]


def plot_time(value: datetime | str) -> str:
    instant = datetime.fromisoformat(value) if isinstance(value, str) else value
    return instant.astimezone(UTC).strftime("%Y-%m-%d %H:%M:%S")


def _layout(y_title: str, *, x_title: str = "UTC", height: int = 240, **extra: Any) -> dict[str, Any]:
    return {
        "height": height,
        "margin": {"l": 56, "r": 12, "t": 12, "b": 40},
        "paper_bgcolor": "rgba(0,0,0,0)",
        "plot_bgcolor": "rgba(0,0,0,0)",
        "font": {"family": "system-ui, sans-serif", "size": 12, "color": INK},
        "xaxis": {"title": {"text": x_title}, "gridcolor": GRID, "zeroline": False},
        "yaxis": {"title": {"text": y_title}, "gridcolor": GRID, "zeroline": False},
        "legend": {"orientation": "h", "y": -0.3, "x": 0},
        "showlegend": True,
        **extra,
    }


def is_provisional(period: dict[str, Any]) -> bool:
    """A period whose figures can still change: the metrics' own ``provisional`` flag (labels
    still arriving, or completeness below its level; ``rollup.outcome_delay``)."""
    return bool(period.get("provisional"))


def _band(periods: list[dict[str, Any]], key: str, name: str, color: str) -> Figure | None:
    """The 95 % interval as a filled band: upper edge forward, lower edge back."""
    points = [(plot_time(p["start"]), p[f"{key}_ci"]) for p in periods if p.get(f"{key}_ci")]
    if not points:
        return None
    xs = [x for x, _ in points]
    return {
        "type": "scatter", "mode": "lines", "name": f"{name}: 95 % interval",
        "x": xs + xs[::-1], "y": [ci[1] for _, ci in points] + [ci[0] for _, ci in points[::-1]],
        "fill": "toself", "fillcolor": color, "line": {"width": 0}, "hoverinfo": "skip", "showlegend": False,
    }


def _series_traces(periods: list[dict[str, Any]], key: str, name: str, line: str, band: str,
                   testid: str) -> list[Figure]:
    traces: list[Figure] = []
    filled = _band(periods, key, name, band)
    if filled is not None:
        traces.append(filled)
    provisional = [is_provisional(p) for p in periods]
    traces.append({
        "type": "scatter", "mode": "lines+markers", "name": name, "testid": testid,
        "x": [plot_time(p["start"]) for p in periods], "y": [p.get(key) for p in periods],
        "line": {"color": line, "width": 2},
        "marker": {"size": 7, "color": [PROVISIONAL if flag else line for flag in provisional],
                   "symbol": ["circle-open" if flag else "circle" for flag in provisional]},
        "text": [_state_text(p, key) for p in periods],
        "hovertemplate": "%{x}<br>%{y:.4f}<br>%{text}<extra>" + name + "</extra>",
    })
    return traces


def _state_text(period: dict[str, Any], key: str) -> str:
    parts = [f"{period.get('n_labeled', 0)} labeled"]
    status = (period.get("status") or {}).get(key)
    if status:
        parts.append(status["state"])
    if period.get("state"):  # the period's own state, when the metrics report one
        parts.append(str(period["state"]))
    if is_provisional(period):
        parts.append("provisional")
    return ", ".join(parts)


def series(periods: list[dict[str, Any]], key: str, label: str,
           segments: list[tuple[str, list[dict[str, Any]]]], alarm_times: list[str],
           reference_line: float | None = None) -> Figure:
    """One metric per period: all cases, each segment in alarm, bands, provisional points hollow."""
    data = _series_traces(periods, key, "all cases", TRACE, BAND, f"trace-{key}-all")
    for name, seg_periods in segments:
        data += _series_traces(seg_periods, key, name, ALARM, "rgba(180,67,43,0.12)", f"trace-{key}-segment")
    shapes = [{"type": "line", "xref": "x", "yref": "paper", "x0": t, "x1": t, "y0": 0, "y1": 1,
               "line": {"color": ALARM, "width": 1, "dash": "dot"}} for t in alarm_times]
    if reference_line is not None:
        shapes.append({"type": "line", "xref": "paper", "x0": 0, "x1": 1, "y0": reference_line,
                       "y1": reference_line, "line": {"color": MUTED, "width": 1, "dash": "dash"}})
    return {"data": data, "layout": _layout(label, shapes=shapes)}


def coverage(periods: list[dict[str, Any]]) -> Figure:
    """Labels per period: the labeled share of predictions (bars) and, where the outcome delay is
    measured, the estimated share of the period's eventual outcomes already reported (line)."""
    xs = [plot_time(p["start"]) for p in periods]
    data: list[dict[str, Any]] = [{
        "type": "bar", "name": "labeled share", "x": xs, "y": [p.get("label_coverage") for p in periods],
        "marker": {"color": [PROVISIONAL if is_provisional(p) else SECOND for p in periods]},
        "hovertemplate": "%{x}<br>%{y:.1%}<extra>labeled share</extra>",
    }]
    completeness = [p.get("label_completeness") for p in periods]
    if any(value is not None for value in completeness):
        data.append({
            "type": "scatter", "mode": "lines+markers", "name": "label completeness", "x": xs,
            "y": completeness, "line": {"color": INK},
            "hovertemplate": "%{x}<br>%{y:.1%}<extra>label completeness</extra>",
        })
    return {
        "data": data,
        "layout": _layout("labels", yaxis={"range": [0, 1.05], "tickformat": ".0%", "gridcolor": GRID},
                          showlegend=len(data) > 1),
    }


def reliability(diagram: dict[str, Any]) -> Figure:
    """Observed rate against mean predicted per bin, Wilson intervals, point size by count."""
    bins = [b for b in diagram["bins"] if b["count"] > 0 and b["mean_predicted"] is not None]
    largest = max((b["count"] for b in bins), default=1)
    points: Figure = {
        "type": "scatter", "mode": "markers", "name": "bins", "testid": "reliability-bins",
        "x": [b["mean_predicted"] for b in bins], "y": [b["observed_rate"] for b in bins],
        "error_y": {"type": "data", "symmetric": False, "color": TRACE,
                    "array": [b["observed_rate_ci"][1] - b["observed_rate"] for b in bins],
                    "arrayminus": [b["observed_rate"] - b["observed_rate_ci"][0] for b in bins]},
        "marker": {"color": TRACE, "size": [8 + 14 * (b["count"] / largest) ** 0.5 for b in bins]},
        "text": [f"{b['count']} cases" for b in bins],
        "hovertemplate": "predicted %{x:.3f}<br>observed %{y:.3f}<br>%{text}<extra></extra>",
    }
    diagonal: Figure = {"type": "scatter", "mode": "lines", "name": "perfect calibration",
                        "x": [0, 1], "y": [0, 1], "line": {"color": MUTED, "dash": "dash", "width": 1},
                        "hoverinfo": "skip"}
    top = max([1e-3] + [b["observed_rate_ci"][1] for b in bins] + [b["mean_predicted"] for b in bins])
    edge = min(1.0, top * 1.1)
    return {"data": [diagonal, points],
            "layout": _layout("observed rate", x_title="mean predicted probability", height=320,
                              xaxis={"range": [0, edge], "gridcolor": GRID,
                                     "title": {"text": "mean predicted probability"}},
                              yaxis={"range": [0, edge], "gridcolor": GRID,
                                     "title": {"text": "observed rate"}})}


def cusum(evidence: dict[str, Any]) -> Figure:
    """The chart's path to the crossing, its control limit h, and the crossing marked."""
    path = evidence.get("chart_path") or []
    xs = [plot_time(t) for t, _ in path]
    ys = [s for _, s in path]
    limit = float(evidence["control_limit"])
    crossed = plot_time(evidence["crossed_at"])
    return {
        "data": [
            {"type": "scatter", "mode": "lines", "name": "CUSUM statistic S", "testid": "cusum-path",
             "x": xs, "y": ys, "line": {"color": TRACE, "width": 2, "shape": "hv"}},
            {"type": "scatter", "mode": "lines", "name": f"control limit h = {limit:.3f}",
             "testid": "limit-line", "x": [xs[0] if xs else crossed, crossed], "y": [limit, limit],
             "line": {"color": ALARM, "width": 2, "dash": "dash"}},
            {"type": "scatter", "mode": "markers", "name": "crossing", "testid": "crossing-marker",
             "x": [crossed], "y": [float(evidence["statistic"])],
             "marker": {"color": ALARM, "size": 14, "symbol": "diamond", "line": {"color": INK, "width": 1}}},
        ],
        "layout": _layout("S", height=320, yaxis={"rangemode": "tozero", "gridcolor": GRID,
                                                  "title": {"text": "S"}}),
    }


def drift(periods: list[dict[str, Any]]) -> Figure:
    """PSI of each period's scores against the reference, with the common-practice marks 0.1 and 0.25."""
    xs = [plot_time(p["start"]) for p in periods]
    shapes = [{"type": "line", "xref": "paper", "x0": 0, "x1": 1, "y0": mark, "y1": mark,
               "line": {"color": MUTED, "width": 1, "dash": "dot"}} for mark in (0.1, 0.25)]
    return {
        "data": [{"type": "scatter", "mode": "lines+markers", "name": "PSI against the reference",
                  "testid": "trace-psi", "x": xs, "y": [p.get("psi") for p in periods],
                  "line": {"color": SECOND, "width": 2}}],
        "layout": _layout("PSI", shapes=shapes, showlegend=False),
    }
