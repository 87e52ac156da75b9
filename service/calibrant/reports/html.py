"""The report as one self-contained HTML page: contents, sections, tables and inline SVG charts.

Its own small template (no template engine, no shared page styles): everything is escaped
with ``html.escape`` and the charts are the SVG form of ``reports.charts`` drawings.
"""

from __future__ import annotations

from html import escape
from typing import Any

from reportlab.graphics.shapes import Drawing

from calibrant.reports import charts
from calibrant.reports.outline import Section, Table, outline

_STYLE = """
body{font-family:Georgia,'DejaVu Serif',serif;max-width:60rem;margin:2rem auto;padding:0 1rem;color:#1f2a30}
h1{font-size:1.5rem}h2{font-size:1.15rem;border-bottom:1px solid #c9cfd3;padding-bottom:.2rem;margin-top:2rem}
table{border-collapse:collapse;margin:.6rem 0;font-size:.85rem}
th,td{border:1px solid #d5d9dc;padding:.2rem .45rem;text-align:left;vertical-align:top}
th{background:#eef1f3}nav ol{columns:2}.chart{margin:.6rem 0}
"""


def _block(block: str | Table | Drawing) -> str:
    if isinstance(block, Table):
        head = "".join(f"<th>{escape(h)}</th>" for h in block.header)
        body = "".join("<tr>" + "".join(f"<td>{escape(c)}</td>" for c in row) + "</tr>" for row in block.rows)
        return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"
    if isinstance(block, Drawing):
        return f'<div class="chart">{charts.svg(block)}</div>'
    return f"<p>{escape(block)}</p>"


def _section(number: int, section: Section) -> str:
    inner = "".join(_block(b) for b in section.blocks)
    return f'<section id="{section.anchor}"><h2>{number}. {escape(section.title)}</h2>{inner}</section>'


def render(document: dict[str, Any]) -> str:
    sections = outline(document)
    contents = "".join(f'<li><a href="#{s.anchor}">{escape(s.title)}</a></li>' for s in sections)
    title = f"Monitoring report: {document['model']}"
    return (
        f'<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><title>{escape(title)}</title>'
        f"<style>{_STYLE}</style></head><body><h1>{escape(title)}</h1>"
        f"<p>{escape(str(document['start']))} to {escape(str(document['end']))}, "
        f"as of {escape(str(document['as_of']))}</p>"
        f"<nav><h2>Contents</h2><ol>{contents}</ol></nav>"
        + "".join(_section(i, s) for i, s in enumerate(sections, start=1))
        + "</body></html>"
    )
