"""The claim report laid out as an A4 PDF with reportlab.

Takes the plain-text :class:`assistant.report.ReportContent` and escapes every text for
reportlab's paragraph markup, so that a note reading ``<b>`` prints as written. The text is set
in the Bitstream Vera fonts that ship with reportlab (they have Ω, µ and the dashes, and embed
with a text layer that PDF readers and pypdf can extract). The trail drawing, rendered to PNG,
is cut into page-high slices between its nodes so that a long trail stays at full width.
"""

from __future__ import annotations

import io
import logging
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any
from xml.sax.saxutils import escape

from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import (
    Flowable,
    Image,
    KeepTogether,
    Paragraph,
    SimpleDocTemplate,
    Spacer,
    Table,
    TableStyle,
)

from assistant.display import CANNOT_TELL_APART
from assistant.trail import PNG_DPI

if TYPE_CHECKING:
    from assistant.report import ReportContent

log = logging.getLogger("ohmtrail.report_pdf")

MARGIN = 15 * mm
FRAME_WIDTH = A4[0] - 2 * MARGIN  # 180 mm, about 510 pt
FRAME_HEIGHT = A4[1] - 2 * MARGIN - 10 * mm  # less the running header and footer
_FONTS = {"regular": "OhmtrailSans", "bold": "OhmtrailSans-Bold",
          "italic": "OhmtrailSans-Italic", "bolditalic": "OhmtrailSans-BoldItalic"}
_FILES = {"regular": "Vera.ttf", "bold": "VeraBd.ttf", "italic": "VeraIt.ttf",
          "bolditalic": "VeraBI.ttf"}


def _register_fonts() -> None:
    if _FONTS["regular"] in pdfmetrics.getRegisteredFontNames():
        return
    for key, name in _FONTS.items():
        pdfmetrics.registerFont(TTFont(name, _FILES[key]))
    pdfmetrics.registerFontFamily(_FONTS["regular"], normal=_FONTS["regular"],
                                  bold=_FONTS["bold"], italic=_FONTS["italic"],
                                  boldItalic=_FONTS["bolditalic"])


# A table row cannot break across pages in reportlab: a cell taller than a page stops the whole
# report (LayoutError). No cell is let grow past this many characters of user text; the HTML
# report and the JSON export keep the whole text. (Found by tests/test_injection.py: a 10 KB
# technician name made the PDF fail.)
MAX_CELL_CHARS = 1200
MAX_CELL_LINES = 30


def _p(text: str) -> str:
    """Plain text as reportlab paragraph markup: escaped, line breaks kept, overlong text cut."""
    lines = text.split("\n")
    if len(lines) > MAX_CELL_LINES:  # the rest run on, so that a cell stays shorter than a page
        text = "\n".join(lines[: MAX_CELL_LINES - 1] + [" ".join(lines[MAX_CELL_LINES - 1:])])
    if len(text) > MAX_CELL_CHARS:
        text = (f"{text[:MAX_CELL_CHARS]} ... [{len(text) - MAX_CELL_CHARS} more characters; "
                "the HTML report and the JSON export hold the whole text]")
    return escape(text).replace("\n", "<br/>")


def _styles() -> dict[str, ParagraphStyle]:
    base = ParagraphStyle("base", fontName=_FONTS["regular"], fontSize=9.5, leading=12)
    return {
        "body": base,
        "small": ParagraphStyle("small", parent=base, fontSize=8, leading=10),
        "cell": ParagraphStyle("cell", parent=base, fontSize=8, leading=9.6),
        "head": ParagraphStyle("head", parent=base, fontName=_FONTS["bold"], fontSize=8,
                               leading=9.6),
        "h1": ParagraphStyle("h1", parent=base, fontName=_FONTS["bold"], fontSize=14,
                             leading=18, spaceAfter=4 * mm),
        "h2": ParagraphStyle("h2", parent=base, fontName=_FONTS["bold"], fontSize=11.5,
                             leading=14, spaceBefore=5 * mm, spaceAfter=2 * mm),
        "diagnosis": ParagraphStyle("diagnosis", parent=base, fontName=_FONTS["bold"],
                                    fontSize=12, leading=15, spaceAfter=2 * mm),
        "banner": ParagraphStyle("banner", parent=base, fontName=_FONTS["bold"],
                                 backColor=colors.HexColor("#fff4e5"), borderPadding=4,
                                 borderColor=colors.HexColor("#b45309"), borderWidth=1.5,
                                 spaceAfter=5 * mm),
        "mono": ParagraphStyle("mono", parent=base, fontName="Courier", fontSize=8.5,
                               leading=10.5),
    }


def _facts_table(rows: tuple[tuple[str, str], ...], st: dict[str, ParagraphStyle]) -> Table:
    data = [[Paragraph(_p(k), st["small"]), Paragraph(_p(v), st["body"])] for k, v in rows]
    table = Table(data, colWidths=[0.3 * FRAME_WIDTH, 0.7 * FRAME_WIDTH], hAlign="LEFT")
    table.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                               ("TEXTCOLOR", (0, 0), (0, -1), colors.HexColor("#444444")),
                               ("LINEBELOW", (0, 0), (-1, -1), 0.25, colors.HexColor("#dddddd"))]))
    return table


_STEP_COLUMNS = (("#", 16), ("time (UTC)", 58), ("step", 150), ("reading", 52), ("healthy", 62),
                 ("verdict", 46), ("leading after", 126))


def _steps_table(content: ReportContent, st: dict[str, ParagraphStyle]) -> Table:
    data: list[list[Paragraph]] = [[Paragraph(_p(h), st["head"]) for h, _ in _STEP_COLUMNS]]
    grey_rows = []
    for n, row in enumerate(content.steps, start=1):
        what = _p(row.what) + (f"<br/><i>{_p(row.note)}</i>" if row.note else "")
        cells = [row.index, row.time, None, row.reading, row.expected, row.verdict, row.leading]
        marked = [what if text is None else _p(text) for text in cells]
        if row.taken_back:
            marked = [f"<strike>{m}</strike>" for m in marked]
            grey_rows.append(n)
        data.append([Paragraph(m, st["cell"]) for m in marked])
    table = Table(data, colWidths=[w for _, w in _STEP_COLUMNS], repeatRows=1, hAlign="LEFT")
    style: list[Any] = [("VALIGN", (0, 0), (-1, -1), "TOP"),
             ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#eeeeee")),
             ("LINEBELOW", (0, 0), (-1, -1), 0.25, colors.HexColor("#cccccc")),
             ("LEFTPADDING", (0, 0), (-1, -1), 2), ("RIGHTPADDING", (0, 0), (-1, -1), 2)]
    style += [("TEXTCOLOR", (0, n), (-1, n), colors.HexColor("#777777")) for n in grey_rows]
    table.setStyle(TableStyle(style))
    return table


def _cut_rows(height: int, spans: Sequence[tuple[float, float]], max_rows: int) -> list[int]:
    """Rows to cut a picture at: each slice at most ``max_rows`` high, cut between nodes."""
    covered = [(int(a * height) - 3, int(b * height) + 3) for a, b in spans]
    cuts: list[int] = []
    top = 0
    while height - top > max_rows:
        cut = top + max_rows
        # the lowest row above the limit that no node covers; failing that, the limit itself
        for row in range(cut, top + max_rows // 3, -1):
            if not any(lo <= row <= hi for lo, hi in covered):
                cut = row
                break
        cuts.append(cut)
        top = cut
    return cuts


def _trail_slices(png: bytes, spans: Sequence[tuple[float, float]] = ()) -> list[Flowable]:
    """The trail PNG as full-width images, cut between nodes to fit a page each."""
    from PIL import Image as PILImage

    drawn = PILImage.open(io.BytesIO(png)).convert("RGBA")
    picture = PILImage.new("RGB", drawn.size, "white")  # dot's PNG background is transparent
    picture.paste(drawn, mask=drawn.getchannel("A"))
    scale = min(1.0, FRAME_WIDTH / (picture.width * 72.0 / PNG_DPI))
    pt_per_px = 72.0 / PNG_DPI * scale
    max_rows = int(FRAME_HEIGHT * 0.92 / pt_per_px)
    bounds = [0, *_cut_rows(picture.height, spans, max_rows), picture.height]
    slices: list[Flowable] = []
    for top, bottom in zip(bounds, bounds[1:]):
        piece = picture.crop((0, top, picture.width, bottom))
        buffer = io.BytesIO()
        piece.save(buffer, format="PNG")
        buffer.seek(0)
        slices.append(Image(buffer, width=piece.width * pt_per_px,
                            height=piece.height * pt_per_px, hAlign="LEFT"))
    return slices


def pdf_from_content(content: ReportContent, trail_png: bytes | None,
                     trail_hint: str | None = None,
                     trail_spans: Sequence[tuple[float, float]] = ()) -> bytes:
    """The report as A4 PDF bytes; without a trail picture, a line says why it is missing."""
    _register_fonts()
    st = _styles()
    story: list[Flowable] = [Paragraph(_p(content.title), st["h1"])]
    if content.in_progress:
        story.append(Paragraph(_p(content.status_line), st["banner"]))
    if content.integrity_problem:
        story.append(Paragraph(_p("Integrity check failed: " + content.integrity_problem),
                               st["banner"]))
    story += [Paragraph("Session", st["h2"]), _facts_table(content.facts, st)]
    prob = f" ({content.diagnosis_probability})" if content.diagnosis_probability else ""
    block: list[Flowable] = [Paragraph("Diagnosis", st["h2"]),
                             Paragraph(_p(content.diagnosis + prob), st["diagnosis"])]
    if content.diagnosis_id:
        label = "Fault ids: " if ", " in content.diagnosis_id else "Fault id: "
        block.append(Paragraph(_p(label + content.diagnosis_id), st["body"]))
    if content.stopped_because:
        block.append(Paragraph(_p("Stopped because: " + content.stopped_because), st["body"]))
    if content.alternatives:
        block += [Spacer(1, 2 * mm), Paragraph("Alternatives left:", st["body"]),
                  _facts_table(content.alternatives, st)]
    if content.cannot_tell_apart:
        block.append(Paragraph(_p(CANNOT_TELL_APART + ": "
                                  + "; ".join(content.cannot_tell_apart) + "."), st["body"]))
    story.append(KeepTogether(block))
    story += [Paragraph("Repair", st["h2"]), Paragraph(_p(content.repair), st["body"]),
              Paragraph("Verification", st["h2"]), Paragraph(_p(content.verification), st["body"]),
              Paragraph("Steps", st["h2"]), _steps_table(content, st)]
    heading = Paragraph("Decision trail", st["h2"])
    if trail_png is not None:
        slices = _trail_slices(trail_png, trail_spans)
        story += [KeepTogether([heading, slices[0]]), *slices[1:]]
    else:
        story += [heading, Paragraph(_p(trail_hint or "The trail drawing is not available."),
                                     st["body"])]
    story.append(Paragraph("Cautions", st["h2"]))
    story += [Paragraph(_p("• " + text), st["body"]) for text in content.cautions]
    story += [Paragraph("Integrity", st["h2"]),
              Paragraph("Session digest (SHA-256):", st["body"]),
              Paragraph(_p(content.digest), st["mono"]),
              Paragraph(_p(f"{content.step_count} steps, each chained to the one before; last "
                           f"step digest {content.last_step_digest}. Check an exported copy with "
                           "`ohmtrail verify FILE`: it must say intact and show this digest."),
                        st["small"]),
              Spacer(1, 4 * mm), Paragraph(_p(f"Written by {content.generator}."), st["small"])]

    def decorate(canvas: Canvas, doc: SimpleDocTemplate) -> None:
        canvas.saveState()
        canvas.setFont(_FONTS["regular"], 7.5)
        footer = f"{content.title} · digest {content.digest[:16]}… · page {doc.page}"
        canvas.drawString(MARGIN, MARGIN - 6 * mm, footer)
        if content.in_progress:
            canvas.setFont(_FONTS["bold"], 9)
            canvas.setFillColor(colors.HexColor("#b45309"))
            canvas.drawRightString(A4[0] - MARGIN, A4[1] - MARGIN + 4 * mm,
                                   "IN PROGRESS: not a final report")
        canvas.restoreState()

    buffer = io.BytesIO()
    doc = SimpleDocTemplate(buffer, pagesize=A4, leftMargin=MARGIN, rightMargin=MARGIN,
                            topMargin=MARGIN, bottomMargin=MARGIN, title=content.title,
                            author=content.generator, subject="electrical fault diagnosis report")
    doc.build(story, onFirstPage=decorate, onLaterPages=decorate)
    log.info("PDF report: %d bytes", buffer.tell())
    return buffer.getvalue()
