"""Sticker sheets for sample bags: one label per sample id, with a QR code.

A sheet layout is pure geometry: page size, columns x rows, label size,
left and top margins, and the gaps between labels. Two presets describe
common blank sheets; ``COLSxROWS`` (e.g. ``4x10``) spreads equal labels over
an A4 or letter page with 10 mm margins and 2.5 mm gaps.

The drawing is computed once as a list of shapes (QR module runs and text
lines, in millimetres from the page's bottom-left corner) and then rendered
either to PDF with reportlab or to a PNG with Pillow, so the preview and the
printed sheet cannot drift apart.
"""

from __future__ import annotations

import io
import math
import re
import unicodedata
from dataclasses import dataclass

import numpy as np
import pandas as pd

from fieldplan.errors import OptionError
from fieldplan.samples.ids import round_sample_ids
from fieldplan.samples.lab import SPARE_STATUS, sample_rows

__all__ = [
    "MM_PER_IN",
    "PT_PER_MM",
    "PAGES",
    "SheetLayout",
    "LAYOUTS",
    "parse_layout",
    "label_boxes",
    "label_records",
    "label_shapes",
    "labels_pdf",
    "labels_png",
]

MM_PER_IN = 25.4
PT_PER_MM = 72.0 / MM_PER_IN
#: Page sizes in mm: ISO 216 A4 and US letter (8.5 x 11 in).
PAGES = {"a4": (210.0, 297.0), "letter": (8.5 * MM_PER_IN, 11.0 * MM_PER_IN)}

_PAD_MM = 1.5
_QR_BORDER = 4  # modules of quiet zone, as the QR code standard (ISO/IEC 18004) asks
_MIN_LABEL_MM = (30.0, 15.0)


@dataclass(frozen=True)
class SheetLayout:
    """Geometry of a label sheet, all lengths in millimetres.

    Labels are numbered row by row from the top-left corner.
    """

    name: str
    page_w: float
    page_h: float
    cols: int
    rows: int
    label_w: float
    label_h: float
    left: float
    top: float
    gap_x: float
    gap_y: float

    @property
    def per_page(self) -> int:
        return self.cols * self.rows


#: Preset sheets, by geometry (values from memory of common blank label sheets).
LAYOUTS: dict[str, SheetLayout] = {
    # A4, 3 x 8 labels of 63.5 x 33.9 mm, 2.5 mm between columns, centred on the page.
    "a4-3x8": SheetLayout("a4-3x8", *PAGES["a4"], 3, 8, 63.5, 33.9, 7.25, 12.9, 2.5, 0.0),
    # US letter, 3 x 10 labels of 2 5/8 x 1 in, 1/8 in between columns, 1/2 in top margin.
    "letter-3x10": SheetLayout(
        "letter-3x10",
        *PAGES["letter"],
        3,
        10,
        2.625 * MM_PER_IN,
        1.0 * MM_PER_IN,
        0.1875 * MM_PER_IN,
        0.5 * MM_PER_IN,
        0.125 * MM_PER_IN,
        0.0,
    ),
}

_CUSTOM = re.compile(r"^(?:(a4|letter)-)?(\d{1,2})x(\d{1,2})$")


def parse_layout(text: str, *, page: str = "a4", margin: float = 10.0, gap: float = 2.5) -> SheetLayout:
    """A preset name, or ``[a4-|letter-]COLSxROWS`` for equal labels filling the page.

    Examples
    --------
    >>> parse_layout("letter-3x10").rows
    10
    >>> round(parse_layout("2x5").label_w, 2)
    93.75
    """
    key = str(text).strip().lower()
    if key in LAYOUTS:
        return LAYOUTS[key]
    match = _CUSTOM.match(key)
    if not match:
        raise OptionError(
            f"--label-sheet {text!r} is not known; use {', '.join(LAYOUTS)} or COLSxROWS "
            "(columns across x rows down, e.g. 4x10 or letter-2x7)"
        )
    page = match.group(1) or page
    if page not in PAGES:
        raise OptionError(f"page must be one of {', '.join(PAGES)}, got {page!r}")
    cols, rows = int(match.group(2)), int(match.group(3))
    page_w, page_h = PAGES[page]
    if cols < 1 or rows < 1:
        raise OptionError(f"--label-sheet {text!r}: columns and rows must be at least 1")
    label_w = (page_w - 2 * margin - (cols - 1) * gap) / cols
    label_h = (page_h - 2 * margin - (rows - 1) * gap) / rows
    if label_w < _MIN_LABEL_MM[0] or label_h < _MIN_LABEL_MM[1]:
        raise OptionError(
            f"--label-sheet {text!r} gives labels of {label_w:.1f} x {label_h:.1f} mm; a label needs at "
            f"least {_MIN_LABEL_MM[0]:g} x {_MIN_LABEL_MM[1]:g} mm for a readable QR code and text, "
            "so use fewer columns or rows"
        )
    return SheetLayout(
        f"{page}-{cols}x{rows}", page_w, page_h, cols, rows, label_w, label_h, margin, margin, gap, gap
    )


def label_boxes(layout: SheetLayout) -> np.ndarray:
    """``(cols*rows, 4)`` array of ``x, y, w, h`` in mm, ``(x, y)`` the bottom-left corner
    measured from the page's bottom-left, labels row by row from the top-left."""
    row, col = np.divmod(np.arange(layout.per_page), layout.cols)
    x = layout.left + col * (layout.label_w + layout.gap_x)
    top = layout.page_h - layout.top - row * (layout.label_h + layout.gap_y)
    y = top - layout.label_h
    return np.column_stack([x, y, np.full_like(x, layout.label_w), np.full_like(x, layout.label_h)])


def label_records(
    points: pd.DataFrame, *, plan_id: str, round_no: int = 1, include_spares: bool = False
) -> pd.DataFrame:
    """One row per sample: ``sample_id, block, detail, plan_id, round, status``.

    Samples of active points in plan order (points marked inaccessible get no
    label); with ``include_spares`` the spares follow in the order they would
    come into use, each marked ``SPARE`` on its block and detail lines.
    ``detail`` says what the sample is: "soil 0-15 cm", "ripeness", ...
    Rounds after the first get their own ids (:func:`~fieldplan.samples.ids.round_sample_ids`).
    """
    first = sample_rows(points, include_spares=include_spares)
    purpose = first["purpose"].astype(str) if "purpose" in first else pd.Series("", index=first.index)
    depth = first["depth_cm"].fillna("").astype(str) if "depth_cm" in first else ""
    detail = np.where(depth != "", purpose + " " + depth + " cm", purpose)
    spare = (first["status"] == SPARE_STATUS).to_numpy()
    block = first["block"].astype(str).to_numpy(dtype=object)
    return pd.DataFrame(
        {
            "sample_id": round_sample_ids(first["sample_id"].astype(str).to_numpy(), round_no),
            "block": np.where(spare, block + " - SPARE", block),
            "detail": np.where(spare, "SPARE: use only if told - " + detail.astype(str), detail).astype(
                object
            ),
            "plan_id": str(plan_id),
            "round": int(round_no),
            "status": first["status"].to_numpy(),
        }
    )


def _printable(text: str) -> str:
    """Text the PDF base fonts can show (Windows-1252); other characters become '?'."""
    try:
        text.encode("cp1252")
        return text
    except UnicodeEncodeError:
        folded = unicodedata.normalize("NFKC", text)
        return folded.encode("cp1252", errors="replace").decode("cp1252")


def _fit(text: str, font: str, size: float, width_mm: float) -> str:
    from reportlab.pdfbase.pdfmetrics import stringWidth

    text = _printable(" ".join(str(text).split()))
    limit = width_mm * PT_PER_MM
    if stringWidth(text, font, size) <= limit:
        return text
    while text and stringWidth(text + "…", font, size) > limit:
        text = text[:-1]
    return text + "…"


def _qr_runs(sample_id: str) -> tuple[np.ndarray, int]:
    """Dark runs of a QR code as ``(row, start, length)`` rows, and the side in modules."""
    import segno

    qr = segno.make_qr(sample_id, error="m")
    matrix = np.array(qr.matrix, dtype=bool)
    matrix = np.pad(matrix, _QR_BORDER)
    side = matrix.shape[0]
    edges = np.diff(np.pad(matrix, ((0, 0), (1, 1))).astype(np.int8), axis=1)
    r_start, c_start = np.nonzero(edges == 1)
    _, c_end = np.nonzero(edges == -1)
    return np.column_stack([r_start, c_start, c_end - c_start]), side


def label_shapes(
    records: pd.DataFrame,
    layout: SheetLayout,
    *,
    date: str | None = None,
    skip: int = 0,
) -> list[dict]:
    """Pages of shapes: each page ``{"rects": (k, 4) array, "texts": [(x, y, font, size, text)]}``.

    Rectangles are filled QR modules, ``x, y, w, h`` in mm from the page's
    bottom-left; text positions are baselines in mm.

    Parameters
    ----------
    records : pandas.DataFrame
        From :func:`label_records`.
    layout : SheetLayout
    date : str, optional, keyword-only
        Printed on every label; a blank line to write on when not given.
    skip : int, keyword-only
        Label positions already used on the first sheet.
    """
    if skip < 0 or skip >= layout.per_page:
        raise OptionError(f"--skip must be between 0 and {layout.per_page - 1}, got {skip}")
    boxes = label_boxes(layout)
    slots = skip + np.arange(len(records))
    pages: list[dict] = [
        {"rects": [], "texts": []} for _ in range(max(1, math.ceil((skip + len(records)) / layout.per_page)))
    ]
    date_text = f"Date {date}" if date else "Date ____________"
    rounds = "round" in records.columns and (records["round"] > 1).any()
    for slot, rec in zip(slots, records.itertuples(index=False), strict=True):
        page = pages[slot // layout.per_page]
        x, y, w, h = boxes[slot % layout.per_page]
        runs, side = _qr_runs(rec.sample_id)
        q = min(h - 2 * _PAD_MM, 0.45 * w)
        module = q / side
        qx, qy = x + _PAD_MM, y + (h - q) / 2
        page["rects"].append(
            np.column_stack(
                [
                    qx + runs[:, 1] * module,
                    qy + q - (runs[:, 0] + 1) * module,
                    runs[:, 2] * module,
                    np.full(len(runs), module),
                ]
            )
        )
        tx = qx + q + 0.5
        tw = x + w - _PAD_MM - tx
        line = (h - 2 * _PAD_MM) / 5.2
        big = min(12.0, 1.35 * line * PT_PER_MM * 0.8)
        small = min(8.0, line * PT_PER_MM * 0.8)
        top = y + h - _PAD_MM
        lines = [
            ("Courier-Bold", big, rec.sample_id, 1.35),
            ("Helvetica", small, f"Block {rec.block}", 1.0),
            ("Helvetica", small, rec.detail, 1.0),
            ("Helvetica", small, date_text, 1.0),
            ("Helvetica", small, f"Plan {rec.plan_id}" + (f", round {rec.round}" if rounds else ""), 1.0),
        ]
        for font, size, text, scale in lines:
            top -= line * scale
            page["texts"].append((tx, top + 0.2 * line, font, size, _fit(text, font, size, tw)))
    for page in pages:
        page["rects"] = np.vstack(page["rects"]) if page["rects"] else np.empty((0, 4))
    return pages


def labels_pdf(
    records: pd.DataFrame, layout: SheetLayout, *, date: str | None = None, skip: int = 0
) -> bytes:
    """The label sheets as PDF bytes (reproducible: no time stamp, fixed document id)."""
    from reportlab.pdfgen import canvas

    buffer = io.BytesIO()
    pdf = canvas.Canvas(buffer, pagesize=(layout.page_w * PT_PER_MM, layout.page_h * PT_PER_MM), invariant=1)
    pdf.setTitle("fieldplan sample labels")
    pdf.setCreator("fieldplan")
    for page in label_shapes(records, layout, date=date, skip=skip):
        pdf.setFillGray(0)
        path = pdf.beginPath()
        for x, y, w, h in page["rects"] * PT_PER_MM:
            path.rect(x, y, w, h)
        pdf.drawPath(path, stroke=0, fill=1)
        for x, y, font, size, text in page["texts"]:
            pdf.setFont(font, size)
            pdf.drawString(x * PT_PER_MM, y * PT_PER_MM, text)
        pdf.showPage()
    pdf.save()
    return buffer.getvalue()


def labels_png(
    records: pd.DataFrame,
    layout: SheetLayout,
    *,
    date: str | None = None,
    skip: int = 0,
    page: int = 0,
    dpi: int = 200,
    outlines: bool = True,
):
    """One page of the sheet as a Pillow image (preview, and for tests that decode the QR codes)."""
    from PIL import Image, ImageDraw, ImageFont

    pages = label_shapes(records, layout, date=date, skip=skip)
    if not 0 <= page < len(pages):
        raise OptionError(f"page {page} does not exist; the sheet has {len(pages)} page(s)")
    scale = dpi / MM_PER_IN
    width, height = round(layout.page_w * scale), round(layout.page_h * scale)
    image = Image.new("L", (width, height), 255)
    draw = ImageDraw.Draw(image)
    if outlines:
        for x, y, w, h in label_boxes(layout):
            draw.rounded_rectangle(
                [x * scale, (layout.page_h - y - h) * scale, (x + w) * scale, (layout.page_h - y) * scale],
                radius=1.5 * scale,
                outline=190,
            )
    for x, y, w, h in pages[page]["rects"]:
        x0, y0 = round(x * scale), round((layout.page_h - y - h) * scale)
        x1, y1 = round((x + w) * scale), round((layout.page_h - y) * scale)
        draw.rectangle([x0, y0, x1 - 1, y1 - 1], fill=0)
    fonts: dict[tuple[str, float], object] = {}
    for x, y, font, size, text in pages[page]["texts"]:
        px = max(6, round(size / 72.0 * dpi))
        if (font, px) not in fonts:
            fonts[(font, px)] = ImageFont.load_default(size=px)
        draw.text((x * scale, (layout.page_h - y) * scale), text, fill=0, font=fonts[(font, px)], anchor="ls")
    return image
