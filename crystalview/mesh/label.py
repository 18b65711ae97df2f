"""Labels on the base plate: a short text drawn from a real font outline,
embossed on (or engraved into) a label strip of the base.

* Font: DejaVu Sans Bold, the TrueType file that ships inside matplotlib
  (``matplotlib/mpl-data/fonts/ttf``, Bitstream Vera / DejaVu licence); its
  outline comes from ``matplotlib.textpath.TextPath``.  Only the outline is
  used (no figure, no pyplot).
* Curves: the font's quadratic (and any cubic) Bezier segments are cut into
  chords here, with the chord error kept within the printer's resolution.
* Legibility: the smallest stroke width of the text is measured on its 2-D
  outline by a morphological opening: a stroke is at least ``w`` wide where
  a disc of diameter ``w`` fits inside it.  The outline is eroded by
  ``w / 2`` and dilated back (round joins); what the opening takes away is
  the parts narrower than ``w`` plus the tips of convex corners.  Corner tips
  lie within ``0.75 w`` of the opened shape (interior angles over ~50
  degrees, which this font's outlines keep), while a stroke thinner than
  ``w`` and longer than ``1.5 w`` does not; so the text is legible at ``w``
  when no area of it lies farther than ``0.75 w`` from its opening.  The
  width is found by bisection at a reference size and scales linearly with
  the font size; the text is then set at the size whose smallest stroke is
  the minimum feature (and checked again at that size).
* Layout: 1 to 4 lines (split between words), the arrangement that adds the
  least area to the base; the strip runs along the front (-y) edge of the
  base, under the model, the text read from the front.
"""
from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np

from ..errors import UserError

FONT_FILE = "DejaVuSans-Bold.ttf"
FONT_NAME = "DejaVu Sans Bold"
REF_SIZE = 10.0            # font size (em, mm) at which the stroke width is measured, then scaled
LINE_SPACING = 1.2         # baseline to baseline, in em (common practice for body text)
RELIEF_MM = 1.0            # emboss height / engrave depth: 0.6-1 mm reads well on FDM prints (common practice)
MAX_LINES = 4
MAX_CHARS = 60
STYLES = ("emboss", "engrave")
FAR = 0.75                 # corner tips lie within FAR x w of the opening; thin strokes reach farther
_STROKE_CACHE = {}


def font_path():
    """Path of the label font (DejaVu Sans Bold, shipped inside matplotlib).

    >>> import os
    >>> os.path.basename(font_path()), os.path.isfile(font_path())
    ('DejaVuSans-Bold.ttf', True)
    """
    import matplotlib

    return os.path.join(matplotlib.get_data_path(), "fonts", "ttf", FONT_FILE)


def _font():
    from matplotlib.font_manager import FontProperties

    return FontProperties(fname=font_path())


def auto_text(crystal, scale, short=False):
    """'Cu fcc a=3.615 A 10 mm/A' from the crystal's name, lattice and scale
    (``short``: 'Cu fcc', the name and structure only).

    >>> import crystalview as cv
    >>> auto_text(cv.build("Fe"), 10), auto_text(cv.build("Mg"), 5, short=True)
    ('Fe bcc a=2.866 A 10 mm/A', 'Mg hcp')
    """
    md = crystal.metadata or {}
    name = md.get("name") or "".join(crystal.elements)
    lat = crystal.lattice
    words = [str(name)]
    if lat is not None and lat.prototype and lat.prototype != "cif":
        words.append(str(lat.prototype))
    if short:
        return " ".join(words)
    a = getattr(lat, "a", None) if lat is not None else md.get("a")
    c = getattr(lat, "c", None) if lat is not None else md.get("c")
    if a:
        words.append(f"a={a:.3f}" + ("" if c else " A"))
    if c:
        words.append(f"c={c:.3f} A")
    words.append(f"{scale:g} mm/A")
    return " ".join(words)


def check_text(text):
    """The label text, checked: printable, the font has every glyph, short.

    >>> check_text("Cu fcc")
    'Cu fcc'
    >>> try:
    ...     check_text("x" * 200)
    ... except UserError:
    ...     print("refused")
    ...
    refused
    """
    if not isinstance(text, str):
        raise UserError("the label must be a text, 'auto' or 'none'")
    t = " ".join(text.split())
    if not t:
        raise UserError("the label is empty; give a short text, 'auto' or 'none'")
    if len(t) > MAX_CHARS:
        raise UserError(f"the label has {len(t)} characters; keep it to {MAX_CHARS} or fewer (e.g. 'Cu fcc 10 mm/A')")
    if any(not ch.isprintable() for ch in t):
        raise UserError("the label holds control characters; give plain printable text")
    from matplotlib.ft2font import FT2Font

    f = FT2Font(font_path())
    missing = sorted({ch for ch in t if ch != " " and f.get_char_index(ord(ch)) == 0})
    if missing:
        raise UserError(f"the label font ({FONT_NAME}) has no glyph for {''.join(missing)!r}; "
                        f"use letters, digits and common signs")
    return t


def _flatten(path, tol):
    """Closed polygons of a matplotlib path, curves cut into chords whose
    largest gap to the curve is within ``tol`` (same units as the path)."""
    from matplotlib.path import Path as MPath

    polys, cur = [], []
    for verts, code in path.iter_segments(curves=True, simplify=False):
        v = np.asarray(verts, float).reshape(-1, 2)
        if code == MPath.MOVETO:
            if len(cur) > 2:
                polys.append(np.array(cur))
            cur = [v[0]]
        elif code == MPath.LINETO:
            cur.append(v[0])
        elif code in (MPath.CURVE3, MPath.CURVE4):
            p = np.vstack([cur[-1], v])
            if code == MPath.CURVE3:
                m = 2.0 * np.linalg.norm(p[0] - 2 * p[1] + p[2])          # |B''|
            else:
                m = 6.0 * max(np.linalg.norm(p[0] - 2 * p[1] + p[2]), np.linalg.norm(p[1] - 2 * p[2] + p[3]))
            n = max(1, int(math.ceil(math.sqrt(m / (8.0 * tol)))))        # chord error <= |B''| h^2 / 8
            t = np.linspace(0.0, 1.0, n + 1)[1:, None]
            if code == MPath.CURVE3:
                pts = (1 - t) ** 2 * p[0] + 2 * (1 - t) * t * p[1] + t ** 2 * p[2]
            else:
                pts = ((1 - t) ** 3 * p[0] + 3 * (1 - t) ** 2 * t * p[1] + 3 * (1 - t) * t ** 2 * p[2]
                       + t ** 3 * p[3])
            cur.extend(pts)
        elif code == MPath.CLOSEPOLY:
            if len(cur) > 2:
                polys.append(np.array(cur))
            cur = []
    if len(cur) > 2:
        polys.append(np.array(cur))
    out = []
    for q in polys:
        if np.allclose(q[0], q[-1]):
            q = q[:-1]
        if len(q) > 2:
            out.append(q)
    return out


def text_polygons(lines, size, tol=0.01):
    """Closed outline polygons (mm, even-odd fill) of the lines of text at
    font ``size`` (em), each line centred on x = 0, the first line on top,
    the block's lower-left at y = 0.  Returns (polygons, width, height).

    >>> polys, width, height = text_polygons(["Cu"], 10.0)
    >>> len(polys), round(width, 2), round(height, 2)
    (2, 13.12, 7.56)
    """
    from matplotlib.textpath import TextPath

    fp = _font()
    rows = []
    for k, line in enumerate(lines):
        tp = TextPath((0.0, -k * LINE_SPACING * size), line, size=size, prop=fp)
        rows.append(_flatten(tp, tol))
    allp = [p for r in rows for p in r]
    if not allp:
        return [], 0.0, 0.0
    out = []
    for r in rows:
        if not r:
            continue
        pts = np.vstack(r)
        cx = 0.5 * (pts[:, 0].min() + pts[:, 0].max())
        out.extend(q - [cx, 0.0] for q in r)
    pts = np.vstack(out)
    lo = pts.min(axis=0)
    out = [q - [0.0, lo[1]] for q in out]
    w, h = np.ptp(pts, axis=0)
    return out, float(w), float(h)


def cross_section(polys):
    """The manifold3d CrossSection (even-odd fill) of closed outline polygons.

    >>> square = [[0, 0], [10, 0], [10, 10], [0, 10]]
    >>> hole = [[4, 4], [6, 4], [6, 6], [4, 6]]
    >>> round(cross_section([square, hole]).area(), 6)
    96.0
    """
    import manifold3d as m3

    return m3.CrossSection([np.asarray(p, float) for p in polys], m3.FillRule.EvenOdd)


def _opening(cs, r):
    import manifold3d as m3

    return cs.offset(-r, m3.JoinType.Round, 2.0, 64).offset(r, m3.JoinType.Round, 2.0, 64)


def thin_area(cs, w):
    """Area of the text lying farther than FAR x w from its opening by a disc
    of diameter w (mm^2): zero when every stroke is at least w wide.

    >>> cs = cross_section([[[0, 0], [20, 0], [20, 2], [0, 2]]])
    >>> thin_area(cs, 1.0), round(thin_area(cs, 4.0), 1)
    (0.0, 40.0)
    """
    import manifold3d as m3

    if w <= 0:
        return 0.0
    op = _opening(cs, w / 2)
    return float((cs - op.offset(FAR * w, m3.JoinType.Round, 2.0, 64)).area())


def stroke_width(cs, lo=None, hi=None, rel=2e-3):
    """The smallest stroke width (mm) of a text outline: the largest w whose
    opening leaves no thin area (see the module notes), by bisection.

    >>> cs = cross_section([[[0, 0], [20, 0], [20, 2], [0, 2]]])
    >>> round(stroke_width(cs), 1)
    2.0
    """
    b = cs.bounds()
    size = max(b[2] - b[0], b[3] - b[1], 1e-9)
    lo = 0.0 if lo is None else lo
    hi = size if hi is None else hi
    eps = 1e-4 * cs.area()
    while hi - lo > rel * hi:
        mid = 0.5 * (lo + hi)
        if thin_area(cs, mid) <= eps:
            lo = mid
        else:
            hi = mid
    return lo


def stroke_per_em(text):
    """Smallest stroke width of ``text`` per unit font size (measured at REF_SIZE).

    >>> round(stroke_per_em("Cu fcc"), 3)
    0.12
    """
    got = _STROKE_CACHE.get(text)
    if got is None:
        polys, _, _ = text_polygons([text], REF_SIZE, tol=0.002)
        got = _STROKE_CACHE[text] = stroke_width(cross_section(polys), hi=0.5 * REF_SIZE) / REF_SIZE
    return got


UNITS = {"A", "mm/A", "mm", "nm", "pm", "g/cm3", "K", "%"}


def phrases(text):
    """Words of the label, a unit kept on the line of its number
    ('a=2.866 A', '10 mm/A').

    >>> phrases("Fe bcc a=2.866 A 10 mm/A")
    ['Fe', 'bcc', 'a=2.866 A', '10 mm/A']
    """
    out = []
    for w in text.split(" "):
        if out and w in UNITS:
            out[-1] += " " + w
        else:
            out.append(w)
    return out


def _splits(words, n):
    """Every way of cutting the word list into n consecutive lines."""
    import itertools

    for cuts in itertools.combinations(range(1, len(words)), n - 1):
        b = (0,) + cuts + (len(words),)
        yield [" ".join(words[b[k]:b[k + 1]]) for k in range(n)]


@dataclass
class LabelPlan:
    """Where and how big the label is set: its lines, font size, stroke, outline and style.

    >>> plan = plan_label("Cu fcc", 0.8, "emboss", 60.0, 2.0)
    >>> plan.lines, round(plan.size, 2), plan.style
    (['Cu fcc'], 6.69, 'emboss')
    """
    text: str
    lines: list
    size: float              # font size (em) in mm
    cap_height: float        # height of a capital letter, mm
    width: float             # text block, mm
    height: float
    stroke: float            # smallest stroke width at this size, mm
    polygons: list
    style: str
    relief: float


def plan_label(text, min_feature, style, avail_width, strip_margin, resolution=0.05, fits=None,
               depth=0.0):
    """Font size for strokes of at least ``min_feature``, and the line
    arrangement adding the least area to a base ``avail_width`` wide (among
    those for which ``fits(base width, strip depth)`` holds, where any does).

    >>> plan = plan_label("Cu fcc a=3.615 A 10 mm/A", 0.8, "emboss", 30.0, 2.0)
    >>> plan.lines, plan.stroke >= 0.8
    (['Cu fcc a=3.615 A 10 mm/A'], True)
    """
    from matplotlib.textpath import TextPath

    per_em = stroke_per_em(text)
    if per_em <= 0:
        raise UserError(f"the label {text!r} has no strokes to print; give letters or digits")
    size = min_feature / per_em * 1.005
    words = phrases(text)
    fp = _font()
    best = None
    for n in range(1, min(MAX_LINES, len(words)) + 1):
        for lines in _splits(words, n):
            w = max(TextPath((0, 0), ln, size=size, prop=fp).get_extents().width for ln in lines)
            h = size * (LINE_SPACING * (n - 1) + 1.0)
            bw, sd = max(avail_width, w + 2 * strip_margin), h + strip_margin
            key = (0 if fits is None or fits(bw, sd) else 1, bw * (depth + sd), n)
            if best is None or key < best[0]:
                best = (key, lines)
    lines = best[1]
    for _ in range(4):               # checked again at the size chosen (curves cut into chords thin a stroke)
        polys, w, h = text_polygons(lines, size, tol=min(resolution, 0.05))
        cs = cross_section(polys)
        stroke = stroke_width(cs, lo=0.5 * min_feature, hi=2.0 * min_feature)
        if stroke >= min_feature:
            break
        size *= min_feature / max(stroke, 1e-9) * 1.002
    else:
        raise RuntimeError(f"label strokes came out {stroke:.3f} mm, under {min_feature:g} mm")
    cap = TextPath((0, 0), "H", size=size, prop=fp).get_extents().height
    return LabelPlan(text=text, lines=lines, size=size, cap_height=float(cap), width=w, height=h,
                     stroke=float(stroke), polygons=polys, style=style, relief=RELIEF_MM)


def label_solid(plan, x0, y0, z_top, depth_limit):
    """The text as a solid: for emboss, from ``z_top`` - 0.5 mm (inside the
    plate) up to ``z_top`` + relief; for engrave, the cutter from ``z_top`` -
    depth to above the plate.  The text block's lower-left corner at (x0, y0),
    lines centred on x0 + width / 2.

    >>> plan = plan_label("Cu", 0.8, "emboss", 60.0, 2.0)
    >>> solid = label_solid(plan, 0.0, 0.0, 3.0, 2.0)
    >>> box = solid.bounding_box()
    >>> round(box[2], 3), round(box[5], 3)
    (2.5, 4.0)
    """
    import manifold3d as m3

    cs = cross_section(plan.polygons)
    b = cs.bounds()
    cs = cs.translate((float(x0 - b[0]), float(y0 - b[1])))
    if plan.style == "emboss":
        below = min(0.5, depth_limit)
        return m3.Manifold.extrude(cs, plan.relief + below).translate((0.0, 0.0, float(z_top - below)))
    depth = min(plan.relief, depth_limit)
    plan.relief = depth
    return m3.Manifold.extrude(cs, depth + 1.0).translate((0.0, 0.0, float(z_top - depth)))


def text_area(plan):
    """Area (mm^2) of the planned label's text outline.

    >>> plan = plan_label("Cu", 0.8, "emboss", 60.0, 2.0)
    >>> round(text_area(plan), 1)
    15.9
    """
    return float(cross_section(plan.polygons).area())
