"""The look of every report: a calm palette, five paragraph styles, one table style,
and the page frame (study name, audit date, page number, caution line)."""

from __future__ import annotations

import datetime as dt
import os
from xml.sax.saxutils import escape

from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.platypus import BaseDocTemplate, CondPageBreak, Frame, PageTemplate, Paragraph, TableStyle

# Palette: slate ink on white, a sea-green accent, a warm sand for "look here".
INK = colors.HexColor("#27323a")
MUTED = colors.HexColor("#6b7780")
RULE = colors.HexColor("#c9d1d6")
PALE = colors.HexColor("#eef2f3")
ACCENT = colors.HexColor("#2f7d74")      # the reader's own figures
ACCENT_LIGHT = colors.HexColor("#a9d3cc")
PANEL = colors.HexColor("#9aa7b0")       # anonymous panel figures
RUBRIC = colors.HexColor("#c8924a")      # the rubric
ATTENTION = colors.HexColor("#b5651d")
ATTENTION_PALE = colors.HexColor("#f6e7d6")

PAGE_SIZE = A4
MARGIN = 18 * mm
CONTENT_WIDTH = PAGE_SIZE[0] - 2 * MARGIN

def _register_fonts() -> tuple[str, str, str]:
    """Embed DejaVu Sans (shipped with matplotlib, a dependency) so rater ids and study
    names in any Latin, Greek or Cyrillic script print as written; the standard PDF
    fonts only know Latin-1. Falls back to Helvetica if the font files are missing."""
    from pathlib import Path

    from reportlab.lib.fonts import addMapping
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    try:
        import matplotlib

        folder = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
        faces = {"CalibrateSans": "DejaVuSans.ttf", "CalibrateSans-Bold": "DejaVuSans-Bold.ttf",
                 "CalibrateSans-Oblique": "DejaVuSans-Oblique.ttf",
                 "CalibrateSans-BoldOblique": "DejaVuSans-BoldOblique.ttf"}
        if "CalibrateSans" not in pdfmetrics.getRegisteredFontNames():
            for name, file in faces.items():
                pdfmetrics.registerFont(TTFont(name, str(folder / file)))
            addMapping("CalibrateSans", 0, 0, "CalibrateSans")
            addMapping("CalibrateSans", 1, 0, "CalibrateSans-Bold")
            addMapping("CalibrateSans", 0, 1, "CalibrateSans-Oblique")
            addMapping("CalibrateSans", 1, 1, "CalibrateSans-BoldOblique")
        return "CalibrateSans", "CalibrateSans-Bold", "CalibrateSans-Oblique"
    except (ImportError, OSError):
        return "Helvetica", "Helvetica-Bold", "Helvetica-Oblique"


BASE_FONT, BOLD_FONT, ITALIC_FONT = _register_fonts()

CJK_FONT = "CalibrateCJK"


def _cjk_font_file():
    """WenQuanYi Micro Hei (TrueType outlines, which reportlab embeds; Apache 2.0 / GPLv3 with
    the font exception), installed with calibrate as the font-only package
    ``paperang-p2-fonts-cjk``. None when it is missing."""
    from pathlib import Path

    try:
        import paperang_p2_fonts_cjk
    except ImportError:
        return None
    path = Path(paperang_p2_fonts_cjk.__file__).parent / "fonts" / "wqy-microhei.ttc"
    return path if path.is_file() else None


def _register_cjk() -> tuple[frozenset, frozenset]:
    """Register the CJK font beside the base font; return (base covers, CJK covers) as sets of
    code points, so that a run of characters the base font lacks is set in the CJK font."""
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    base = frozenset()
    if BASE_FONT in pdfmetrics.getRegisteredFontNames():
        base = frozenset(pdfmetrics.getFont(BASE_FONT).face.charToGlyph)
    path = _cjk_font_file()
    if path is None:
        return base, frozenset()
    try:
        if CJK_FONT not in pdfmetrics.getRegisteredFontNames():
            pdfmetrics.registerFont(TTFont(CJK_FONT, str(path), subfontIndex=0))
        return base, frozenset(pdfmetrics.getFont(CJK_FONT).face.charToGlyph)
    except Exception:  # a damaged font file must not stop a report: the ids then show as boxes
        return base, frozenset()


_BASE_COVERS, _CJK_COVERS = _register_cjk()


def _needs_cjk(ch: str) -> bool:
    code = ord(ch)
    return code > 0x7F and code not in _BASE_COVERS and code in _CJK_COVERS


def with_fallback_font(markup_text: str) -> str:
    """Wrap each run of characters the base font lacks (Chinese, Japanese, Korean) in the
    CJK font, so that 王小明 prints as written, not as empty boxes. Safe on markup: tags and
    entities are ASCII and never wrapped."""
    if not _CJK_COVERS or markup_text.isascii():
        return markup_text
    out: list[str] = []
    run: list[str] = []
    for ch in markup_text:
        if _needs_cjk(ch):
            run.append(ch)
            continue
        if run:
            out.append(f'<font name="{CJK_FONT}">{"".join(run)}</font>')
            run = []
        out.append(ch)
    if run:
        out.append(f'<font name="{CJK_FONT}">{"".join(run)}</font>')
    return "".join(out)


_MPL_FAMILIES: list[str] = []


def matplotlib_families() -> list[str]:
    """Font families for matplotlib figures: DejaVu Sans, then the CJK font when installed
    (added to matplotlib's font list once)."""
    if not _MPL_FAMILIES:
        _MPL_FAMILIES.append("DejaVu Sans")
        path = _cjk_font_file()
        if path is not None:
            try:
                from matplotlib import font_manager

                font_manager.fontManager.addfont(str(path))
                _MPL_FAMILIES.append(font_manager.FontProperties(fname=str(path)).get_name())
            except (OSError, RuntimeError, ValueError):
                pass
    return list(_MPL_FAMILIES)


def line_font(value: str, font: str) -> str:
    """The font for a single drawn line (page header): the CJK font when ``font`` lacks one
    of its characters and the CJK font has them all."""
    if _CJK_COVERS and any(_needs_cjk(ch) for ch in value):
        return CJK_FONT
    return font

TITLE = ParagraphStyle("title", fontName=BOLD_FONT, fontSize=17, leading=21, textColor=INK,
                       spaceAfter=4)
# keepWithNext: a heading never ends a page without the first lines of its section
# (KEEP_WITH_HEADING points of it, about four lines; ReportDocument.handle_keepWithNext).
KEEP_WITH_HEADING = 50.0
HEADING = ParagraphStyle("heading", fontName=BOLD_FONT, fontSize=12, leading=15, textColor=ACCENT,
                         spaceBefore=10, spaceAfter=4, keepWithNext=1)
BODY = ParagraphStyle("body", fontName=BASE_FONT, fontSize=9.5, leading=12.5, textColor=INK,
                      alignment=TA_LEFT, spaceAfter=4)
SMALL = ParagraphStyle("small", parent=BODY, fontSize=8, leading=10, textColor=MUTED, spaceAfter=2)
CELL = ParagraphStyle("cell", parent=BODY, fontSize=8.5, leading=10.5, spaceAfter=0)
CELL_BOLD = ParagraphStyle("cell_bold", parent=CELL, fontName=BOLD_FONT)
NOTE = ParagraphStyle("note", parent=BODY, backColor=ATTENTION_PALE, borderPadding=(4, 5, 4, 5),
                      spaceBefore=4, spaceAfter=8)


def table_style(*extra) -> TableStyle:
    """The one table style: a ruled header, light row bands, no vertical lines."""
    commands = [
        ("FONT", (0, 0), (-1, 0), BOLD_FONT, 8.5),
        ("FONT", (0, 1), (-1, -1), BASE_FONT, 8.5),
        ("TEXTCOLOR", (0, 0), (-1, -1), INK),
        ("LINEBELOW", (0, 0), (-1, 0), 0.8, INK),
        ("LINEBELOW", (0, -1), (-1, -1), 0.5, RULE),
        ("ROWBACKGROUNDS", (0, 1), (-1, -1), [colors.white, PALE]),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("TOPPADDING", (0, 0), (-1, -1), 2.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2.5),
        ("LEFTPADDING", (0, 0), (-1, -1), 4),
        ("RIGHTPADDING", (0, 0), (-1, -1), 4),
    ]
    commands.extend(extra)
    return TableStyle(commands)


def text(value: str, style: ParagraphStyle = BODY) -> Paragraph:
    """A paragraph of plain text (escaped: ids and messages may hold < or &)."""
    return Paragraph(with_fallback_font(escape(str(value))), style)


def markup(value: str, style: ParagraphStyle = BODY) -> Paragraph:
    """A paragraph whose text is already reportlab markup (escape the parts you insert)."""
    return Paragraph(with_fallback_font(value), style)


def audit_date() -> str:
    """The printed date: from SOURCE_DATE_EPOCH when set (reproducible builds), else today."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch and epoch.strip().lstrip("-").isdigit():
        return dt.datetime.fromtimestamp(int(epoch), tz=dt.timezone.utc).date().isoformat()
    return dt.date.today().isoformat()


def to_latin1(value: str) -> str:
    """What the standard PDF fonts can show: other characters become '?'."""
    return str(value).encode("latin-1", "replace").decode("latin-1")


class ReportDocument(BaseDocTemplate):
    """A4 pages framed by the study name and report title above, and the audit date,
    page number and caution line below. ``invariant=True`` keeps builds byte-identical."""

    def __init__(self, target, *, study_name: str, title: str, caution: str, author: str = "calibrate"):
        super().__init__(target, pagesize=PAGE_SIZE, leftMargin=MARGIN, rightMargin=MARGIN,
                         topMargin=MARGIN + 6 * mm, bottomMargin=MARGIN + 10 * mm,
                         title=to_latin1(title), author=author, subject=to_latin1(study_name),
                         creator="calibrate", invariant=True)
        # Helvetica (the fallback when no font could be embedded) only knows Latin-1
        self.study_name = to_latin1(study_name) if BASE_FONT == "Helvetica" else str(study_name)
        self.report_title = to_latin1(title)
        self.caution = caution
        self.date = audit_date()
        frame = Frame(self.leftMargin, self.bottomMargin, self.width, self.height, id="body",
                      leftPadding=0, rightPadding=0, topPadding=0, bottomPadding=0)
        self.addPageTemplates([PageTemplate(id="page", frames=[frame], onPage=self._frame)])

    def build(self, flowables, **kwargs) -> None:
        """Build as reportlab does, with the streams (fonts, images, pages) written as binary
        rather than in ASCII85: the encoder runs in pure Python here and took about a tenth of
        each rater report's time; every PDF reader reads both, and the files are smaller."""
        from reportlab import rl_config

        before = rl_config.useA85
        rl_config.useA85 = 0
        try:
            super().build(flowables, **kwargs)
        finally:
            rl_config.useA85 = before

    def handle_keepWithNext(self, flowables) -> None:
        """A heading (keepWithNext) starts a new page only when it and the first lines of its
        section do not fit on this one. reportlab's own rule keeps the heading with the whole
        next flowable, which sends a heading over a long table to a new page and leaves the
        rest of this one empty."""
        count = 0
        while count < len(flowables) and flowables[count].getKeepWithNext():
            flowables[count].__dict__["keepWithNext"] = 0
            count += 1
        if not count:
            return
        need = 0.0
        for f in flowables[:count]:
            need += f.wrap(self.width, self.height)[1] + f.getSpaceBefore() + f.getSpaceAfter()
        if count < len(flowables):
            need += min(flowables[count].wrap(self.width, self.height)[1], KEEP_WITH_HEADING)
        flowables.insert(0, CondPageBreak(need))

    def _frame(self, canvas, doc) -> None:
        width, height = PAGE_SIZE
        canvas.saveState()
        top = height - MARGIN
        canvas.setFont(line_font(self.study_name, BOLD_FONT), 8)
        canvas.setFillColor(INK)
        canvas.drawString(MARGIN, top, _clip(self.study_name, 80))
        canvas.setFont(BASE_FONT, 8)
        canvas.setFillColor(MUTED)
        canvas.drawRightString(width - MARGIN, top, self.report_title)
        canvas.setStrokeColor(RULE)
        canvas.setLineWidth(0.6)
        canvas.line(MARGIN, top - 3, width - MARGIN, top - 3)
        bottom = MARGIN
        canvas.line(MARGIN, bottom + 19, width - MARGIN, bottom + 19)
        canvas.drawString(MARGIN, bottom + 10, f"Audit date {self.date}")
        canvas.drawRightString(width - MARGIN, bottom + 10, f"Page {doc.page}")
        canvas.setFont(ITALIC_FONT, 7.5)
        canvas.drawCentredString(width / 2, bottom, self.caution)
        canvas.restoreState()


def _clip(value: str, limit: int) -> str:
    return value if len(value) <= limit else value[: limit - 3] + "..."
