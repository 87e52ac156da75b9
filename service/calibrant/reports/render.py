"""One report, three forms: canonical JSON, HTML and PDF from the same document."""

from __future__ import annotations

from calibrant.reports import html, pdf
from calibrant.reports.build import Report, canonical


def render(report: Report, form: str) -> bytes:
    document = report.document()
    if form == "html":
        return html.render(document).encode()
    if form == "pdf":
        return pdf.render(document)
    return canonical(document)
