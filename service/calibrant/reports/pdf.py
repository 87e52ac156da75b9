"""The report as PDF, typeset with reportlab's platypus: contents, numbered pages, the same charts.

reportlab draws PDF itself in Python (no browser or external program at run time), and its
graphics shapes also give the SVG of the HTML form, so one drawing serves both. The table
of contents is filled by a two-pass build (``multiBuild``): headings report their page as
they are laid out.
"""

from __future__ import annotations

from io import BytesIO
from typing import Any
from xml.sax.saxutils import escape

from reportlab.graphics.shapes import Drawing
from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle, getSampleStyleSheet
from reportlab.lib.units import cm
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import (
    Flowable,
    KeepTogether,
    PageBreak,
    Paragraph,
    SimpleDocTemplate,
    Spacer,
    TableStyle,
)
from reportlab.platypus import Table as PdfTable
from reportlab.platypus.tableofcontents import TableOfContents

from calibrant.reports.outline import Table, outline

_STYLES = getSampleStyleSheet()
_HEADING = ParagraphStyle("SectionHeading", parent=_STYLES["Heading2"], spaceBefore=10)
_BODY = ParagraphStyle("ReportBody", parent=_STYLES["BodyText"], fontSize=9, leading=12)
_CELL = ParagraphStyle("ReportCell", parent=_STYLES["BodyText"], fontSize=7, leading=8.5)
_GRID = TableStyle([
    ("GRID", (0, 0), (-1, -1), 0.4, colors.HexColor("#c9cfd3")),
    ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#eef1f3")),
    ("VALIGN", (0, 0), (-1, -1), "TOP"),
])


class _Document(SimpleDocTemplate):
    def afterFlowable(self, flowable: Flowable) -> None:  # noqa: N802 — reportlab's hook name
        if isinstance(flowable, Paragraph) and flowable.style.name == _HEADING.name:
            self.notify("TOCEntry", (0, flowable.getPlainText(), self.page))


def _number_page(canvas: Canvas, document: SimpleDocTemplate) -> None:
    canvas.saveState()
    canvas.setFont("Helvetica", 8)
    canvas.drawRightString(A4[0] - 2 * cm, 1.2 * cm, f"Page {document.page}")
    canvas.drawString(2 * cm, 1.2 * cm, getattr(document, "footer_text", ""))
    canvas.restoreState()


def _table(table: Table) -> PdfTable:
    rows = [[Paragraph(escape(c), _CELL) for c in table.header]]
    rows += [[Paragraph(escape(c), _CELL) for c in row] for row in table.rows]
    width = (A4[0] - 4 * cm) / max(len(table.header), 1)
    out = PdfTable(rows, colWidths=[width] * len(table.header), repeatRows=1)
    out.setStyle(_GRID)
    return out


def _flowable(block: str | Table | Drawing) -> Flowable:
    if isinstance(block, Table):
        return _table(block)
    if isinstance(block, Drawing):
        return block
    return Paragraph(escape(block), _BODY)


def render(document: dict[str, Any]) -> bytes:
    buffer = BytesIO()
    title = f"Monitoring report: {document['model']}"
    doc = _Document(buffer, pagesize=A4, title=title, leftMargin=2 * cm, rightMargin=2 * cm,
                    topMargin=2 * cm, bottomMargin=2 * cm)
    doc.footer_text = f"{document['model']} · as of {document['as_of']} · {document['content_hash'][:16]}"
    contents = TableOfContents()
    contents.levelStyles = [ParagraphStyle("ContentsEntry", parent=_BODY, leftIndent=0)]
    story: list[Flowable] = [
        Paragraph(escape(title), _STYLES["Title"]),
        Paragraph(escape(f"{document['start']} to {document['end']}, as of {document['as_of']}"), _BODY),
        Spacer(1, 0.4 * cm), Paragraph("Contents", _STYLES["Heading2"]), contents, PageBreak(),
    ]
    for number, section in enumerate(outline(document), start=1):
        heading = Paragraph(escape(f"{number}. {section.title}"), _HEADING)
        flowables = [_flowable(block) for block in section.blocks]
        # A heading never ends a page alone: it stays with the section's first block.
        story.append(KeepTogether([heading, *flowables[:1]]))
        for flowable in flowables[1:]:
            story.append(Spacer(1, 0.2 * cm))
            story.append(flowable)
        story.append(Spacer(1, 0.2 * cm))
    doc.multiBuild(story, onFirstPage=_number_page, onLaterPages=_number_page)
    return buffer.getvalue()
