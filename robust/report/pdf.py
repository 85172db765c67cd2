"""The dossier as a typeset PDF (reportlab): real tables, page numbers, figures at full width.

Tables wrap their cells (nothing is cut), repeat their header row on every
page they run onto, and size their columns from their content; the caption
stays with its table.  Figures are rasterised once from the matplotlib figure
(the SVG files in the dossier folder stay the vector originals).  Every page
carries the case title, "page N of M" and a one-line reminder that the
document analyses a model.  The output is byte-reproducible (reportlab's
invariant mode: no creation date, fixed document id).
"""

from __future__ import annotations

import io
from pathlib import Path
from xml.sax.saxutils import escape

FOOTER = "Model analysis only; not a safety case."
FAIL_COLOUR = "#9b1c1c"  # the dossier's one warning colour (also the HTML's)
HEADER_FILL = "#e8e6df"
RULE = "#8a8778"
FIGURE_DPI = 100


def _styles():
    from reportlab.lib.styles import ParagraphStyle, getSampleStyleSheet

    base = getSampleStyleSheet()
    body = ParagraphStyle("body", parent=base["BodyText"], fontName="Helvetica", fontSize=8.5, leading=11)
    return {
        "body": body,
        "h1": ParagraphStyle("h1", parent=body, fontName="Helvetica-Bold", fontSize=15, leading=19, spaceAfter=6),
        "h2": ParagraphStyle(
            "h2", parent=body, fontName="Helvetica-Bold", fontSize=11.5, leading=15, spaceBefore=8, keepWithNext=1
        ),
        "h3": ParagraphStyle(
            "h3", parent=body, fontName="Helvetica-Bold", fontSize=9.5, leading=12, spaceBefore=5, keepWithNext=1
        ),
        "caption": ParagraphStyle(
            "caption", parent=body, fontName="Helvetica-Oblique", fontSize=8, leading=10, keepWithNext=1
        ),
        "cell": ParagraphStyle("cell", parent=body, fontSize=6.8, leading=8.2),
        "head": ParagraphStyle("head", parent=body, fontName="Helvetica-Bold", fontSize=6.8, leading=8.2),
        "pre": ParagraphStyle("pre", parent=body, fontName="Courier", fontSize=6.5, leading=7.8),
        "fail": ParagraphStyle("fail", parent=body, fontSize=6.8, leading=8.2, textColor=FAIL_COLOUR),
    }


def _column_widths(headers, rows, avail: float) -> list[float]:
    """Widths from content: every column at least its longest word, the rest shared by content length."""
    from reportlab.pdfbase.pdfmetrics import stringWidth

    cols = list(zip(*([headers] + rows)))
    pad = 6.0
    natural, least = [], []
    for col in cols:
        widest = max(
            [stringWidth(str(col[0]), "Helvetica-Bold", 6.8)] + [stringWidth(str(c), "Helvetica", 6.8) for c in col[1:]]
        )
        natural.append(min(widest, 260.0) + pad)
        words = [w for c in col for w in str(c).split()] or [""]
        least.append(max(stringWidth(w, "Helvetica-Bold", 6.8) for w in words) + pad)
    least = [min(x, avail / max(len(cols), 1)) if sum(least) > avail else x for x in least]
    if sum(natural) <= avail:
        return natural
    spare = avail - sum(least)
    extra = [max(n - m, 0.0) for n, m in zip(natural, least)]
    total = sum(extra) or 1.0
    return [m + spare * e / total for m, e in zip(least, extra)]


def _table(t, styles, avail: float):
    from reportlab.lib import colors
    from reportlab.platypus import Paragraph, Spacer, TableStyle
    from reportlab.platypus import Table as RLTable

    from robust.report.dossier import is_flagged

    head = [Paragraph(escape(str(h)), styles["head"]) for h in t.headers]
    body = [[Paragraph(escape(str(c)), styles["fail" if is_flagged(c) else "cell"]) for c in row] for row in t.rows]
    widths = _column_widths([str(h) for h in t.headers], [[str(c) for c in r] for r in t.rows], avail)
    tab = RLTable([head, *body], colWidths=widths, repeatRows=1, hAlign="LEFT")
    tab.setStyle(
        TableStyle(
            [
                ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor(HEADER_FILL)),
                ("LINEBELOW", (0, 0), (-1, 0), 0.8, colors.HexColor(RULE)),
                ("LINEBELOW", (0, 1), (-1, -1), 0.25, colors.HexColor(RULE)),
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 3),
                ("RIGHTPADDING", (0, 0), (-1, -1), 3),
                ("TOPPADDING", (0, 0), (-1, -1), 1.5),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 1.5),
            ]
        )
    )
    out = [Paragraph(escape(t.title), styles["caption"]), tab]
    if t.note:
        out.append(Paragraph(escape(t.note), styles["cell"]))
    out.append(Spacer(1, 6))
    return out


def _figure(f, styles, avail_w: float, avail_h: float):
    from reportlab.platypus import Image, Paragraph, Spacer

    buf = io.BytesIO(f.png)
    w_in, h_in = f.size_in
    width = avail_w
    height = width * h_in / w_in
    if height > avail_h - 40:
        height = avail_h - 40
        width = height * w_in / h_in
    return [Image(buf, width=width, height=height), Paragraph(escape(f.caption), styles["caption"]), Spacer(1, 8)]


def render_pdf(blocks, figs, path: Path, title: str) -> None:
    """Write the dossier's blocks (headings, paragraphs, tables) and figures as a typeset PDF."""
    from reportlab.lib.pagesizes import A4, landscape
    from reportlab.lib.units import mm
    from reportlab.pdfgen import canvas as rl_canvas
    from reportlab.platypus import PageBreak, Paragraph, Preformatted, SimpleDocTemplate

    from robust.report.dossier import Table

    styles = _styles()
    page = landscape(A4)
    margin = 14 * mm

    class NumberedCanvas(rl_canvas.Canvas):
        """Two passes over the pages so every footer can say "page N of M"."""

        def __init__(self, *a, **k):
            super().__init__(*a, **k)
            self._pages = []

        def showPage(self):
            self._pages.append(dict(self.__dict__))
            self._startPage()

        def save(self):
            total = len(self._pages)
            for state in self._pages:
                self.__dict__.update(state)
                self.setFont("Helvetica", 7)
                self.setFillColorRGB(0.35, 0.35, 0.33)
                self.drawString(margin, 8 * mm, f"{title}  |  {FOOTER}")
                self.drawRightString(page[0] - margin, 8 * mm, f"page {self._pageNumber} of {total}")
                super().showPage()
            super().save()

    doc = SimpleDocTemplate(
        str(path),
        pagesize=page,
        leftMargin=margin,
        rightMargin=margin,
        topMargin=margin,
        bottomMargin=16 * mm,
        title=title,
        author="robust",
        creator="robust",
        invariant=1,
    )
    avail_w, avail_h = doc.width, doc.height
    story = []
    for b in blocks:
        if isinstance(b, Table):
            story += _table(b, styles, avail_w)
        elif b[0] == "h":
            story.append(Paragraph(escape(b[2]), styles[f"h{min(b[1], 3)}"]))
        elif b[0] == "pre":
            story.append(Preformatted(b[1].rstrip("\n"), styles["pre"], maxLineLength=170, newLineChars="  "))
        else:
            story.append(Paragraph(escape(b[1]), styles["body"]))
    shown = [f for f in figs if f.png is not None]
    if shown:
        story.append(PageBreak())
        story.append(Paragraph("Figures", styles["h2"]))
        for f in shown:
            story += _figure(f, styles, avail_w, avail_h)
    from reportlab import rl_config

    a85 = rl_config.useA85
    rl_config.useA85 = 0  # binary image streams: the ASCII-85 text encoding is pure Python and slow
    try:
        doc.build(story, canvasmaker=NumberedCanvas)
    finally:
        rl_config.useA85 = a85
