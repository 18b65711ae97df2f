"""Text for figures: the font file, real advance widths from it, wrapping,
and sizes in real units (mm, in, pt) turned into pixels at a dpi.

No vtk or pyvista here (Pillow's FreeType binding measures the text; where
it or the font is missing, an average width per character stands in).
"""
from __future__ import annotations

import functools
import os
import re

from ..errors import UserError

_FONTS = ["/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf",
          "/usr/share/fonts/truetype/liberation/LiberationSans-Regular.ttf",
          "/usr/share/fonts/dejavu/DejaVuSans.ttf", "/Library/Fonts/Arial.ttf", "C:/Windows/Fonts/arial.ttf"]

#: Millimetres per unit of the lengths a figure size may be given in.
MM_PER = {"mm": 1.0, "cm": 10.0, "in": 25.4, "pt": 25.4 / 72.0}
#: Widest and narrowest figure we accept, mm.
MIN_WIDTH_MM, MAX_WIDTH_MM = 20.0, 1000.0
#: Smallest and largest text, points.
MIN_FONT_PT, MAX_FONT_PT = 4.0, 36.0
#: Default text size of a figure, points (legend, scale bar; the caption is 7/8 of it).
FONT_PT = 8.0


@functools.lru_cache(maxsize=1)
def font_file():
    """A system sans-serif font whose square brackets look square (VTK's
    built-in face draws [ and ] like parentheses, which would misstate Miller
    indices); else the DejaVu Sans that matplotlib (a pyvista dependency)
    ships, found without importing it; or None.

    >>> f = font_file()
    >>> f is None or f.endswith(".ttf")
    True
    """
    for f in _FONTS:
        if os.path.isfile(f):
            return f
    import importlib.util

    spec = importlib.util.find_spec("matplotlib")
    if spec is not None and spec.origin:
        f = os.path.join(os.path.dirname(spec.origin), "mpl-data", "fonts", "ttf", "DejaVuSans.ttf")
        if os.path.isfile(f):
            return f
    return None


@functools.lru_cache(maxsize=64)
def _pil_font(size_px):
    f = font_file()
    if f is None:
        return None
    try:
        from PIL import ImageFont
    except ImportError:          # pragma: no cover - pillow comes with pyvista's matplotlib
        return None
    return ImageFont.truetype(f, max(1, int(round(size_px))))


@functools.lru_cache(maxsize=1)
def font_family():
    """The family name of :func:`font_file` (what the cairo drawing asks
    fontconfig for, so the text drawn has the metrics the layout measured).

    >>> isinstance(font_family(), str)
    True
    """
    f = _pil_font(12)
    if f is not None:
        try:
            return f.getname()[0]
        except (OSError, AttributeError):          # pragma: no cover
            pass
    return "DejaVu Sans"


@functools.lru_cache(maxsize=1)
def font_vmetrics():
    """(ascent, descent) of the figure font per em (the middle of a line of
    text lies (ascent - descent) / 2 above its baseline).

    >>> a, d = font_vmetrics()
    >>> 0.6 < a < 1.2 and 0.1 < d < 0.4
    True
    """
    f = _pil_font(1000)
    if f is None:
        return 0.93, 0.24
    a, d = f.getmetrics()
    return a / 1000.0, d / 1000.0


def text_width(text, size_px):
    """Advance width of ``text`` in pixels at ``size_px`` (the em size), from the font's own metrics.

    >>> text_width("iiii", 20) < text_width("MMMM", 20)
    True
    """
    f = _pil_font(size_px)
    if f is None:
        return 0.56 * size_px * len(text)
    return float(f.getlength(text)) * size_px / max(1, int(round(size_px)))


def wrap(text, size_px, width_px):
    """Lines of ``text`` no wider than ``width_px`` (broken at spaces after ';' or ',' first, then at any space).

    >>> lines = wrap("4 atoms; view along [001], [010] up; lattice", 10, 130)
    >>> len(lines) > 1, all(text_width(t, 10) <= 130 for t in lines), lines[0]
    (True, True, '4 atoms;')
    """
    if text_width(text, size_px) <= width_px:
        return [text]
    words = re.split(r"(?<=[;,]) ", text)
    if len(words) == 1 or any(text_width(w, size_px) > width_px for w in words):
        words = text.split(" ")
        sep = " "
    else:
        sep = " "
    lines, cur = [], ""
    for w in words:
        cand = w if not cur else cur + sep + w
        if cur and text_width(cand, size_px) > width_px:
            lines.append(cur)
            cur = w
        else:
            cur = cand
    if cur:
        lines.append(cur)
    return lines


def parse_length(text, what="--width"):
    """A length with its unit ('85mm', '8.5cm', '3.5in', '240pt') -> millimetres, or a one-line UserError.

    >>> parse_length("85mm"), parse_length("3.5in")
    (85.0, 88.89999999999999)
    """
    s = str(text).strip().lower().replace(" ", "")
    m = re.fullmatch(r"([0-9]*\.?[0-9]+)(mm|cm|in|pt|inch|inches|\")?", s)
    if not m:
        raise UserError(f"{what} '{text}' is not a length; give a number with its unit, e.g. {what} 85mm, "
                        f"{what} 180mm or {what} 3.5in")
    unit = m.group(2)
    if unit is None:
        raise UserError(f"{what} '{text}' has no unit; say mm, cm, in or pt, e.g. {what} 85mm")
    unit = {"inch": "in", "inches": "in", '"': "in"}.get(unit, unit)
    mm = float(m.group(1)) * MM_PER[unit]
    if not (MIN_WIDTH_MM <= mm <= MAX_WIDTH_MM):
        raise UserError(f"{what} {text} is out of range; use {MIN_WIDTH_MM:g} mm to {MAX_WIDTH_MM:g} mm, "
                        f"e.g. {what} 85mm (one column) or {what} 180mm (full page width)")
    return mm


def check_font_pt(pt):
    """A font size in points within the accepted range, or a one-line UserError.

    >>> check_font_pt("8")
    8.0
    """
    try:
        v = float(pt)
    except (TypeError, ValueError):
        raise UserError(f"font size '{pt}' is not a number of points; use e.g. --font-size 8") from None
    if not (MIN_FONT_PT <= v <= MAX_FONT_PT):
        raise UserError(f"font size {pt} pt is out of range; use {MIN_FONT_PT:g} to {MAX_FONT_PT:g} pt, "
                        f"e.g. --font-size 8")
    return v


def fmt_mm(mm):
    """A length in mm, four significant digits.

    >>> fmt_mm(85.0), fmt_mm(112.6349)
    ('85', '112.6')
    """
    return f"{mm:.4g}"
