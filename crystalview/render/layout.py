"""Where everything in a report figure goes: the drawing's rectangle and
scale, the legend, the caption and the scale bar, in pixels of the PNG (the
vector pages use the same numbers at their real size).

No vtk, pyvista or cairo here.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import UserError
from . import style as S


@dataclass
class Layout:
    """Positions of a figure's parts in pixels (top-left origin), from :func:`make_layout`.

    >>> lay = Layout(200, 100, 11.0, 7, (7, 7, 193, 60), 10.0, None, [], 11.0, [], 9.6, None, dpi=72)
    >>> [round(x, 3) for x in lay.page_mm]           # 200 x 100 px at 72 dpi
    [70.556, 35.278]
    """
    W: int
    H: int
    font: float
    margin: float
    rect: tuple            # content rectangle (x0, y0, x1, y1), top-left origin, pixels
    scale: float           # pixels per angstrom
    centre: np.ndarray     # world point drawn at the rectangle's centre
    legend: list           # (label, hex, shape, x, y) swatch centre (the first line's middle), top-left origin
    legend_font: float
    caption: list          # (text, x, y) baseline positions
    caption_font: float
    bar: tuple | None      # (x0, x1, y, length_A)
    dpi: float | None = None        # None: a pixel-only layout (1 px = 1 pt in vector files)
    font_pt: float | None = None    # the legend / scale-bar text size in points
    width_mm: float | None = None   # the page width asked for (the PNG rounds it to whole pixels)
    legend_lines: list | None = None   # per legend entry, its text lines (a long entry wraps)

    @property
    def pt_per_px(self):
        """Points per pixel on the vector page (1 without a dpi)."""
        if self.width_mm:
            return self.width_mm / 25.4 * 72.0 / self.W
        return 72.0 / self.dpi if self.dpi else 1.0

    @property
    def page_mm(self):
        """(width, height) of the vector page in mm (None without a dpi)."""
        if not self.dpi:
            return None
        k = self.pt_per_px * 25.4 / 72.0
        return self.W * k, self.H * k

    def to_px(self, view, pts):
        """World -> pixel (x right, y down) and depth (larger is nearer)."""
        q = view.project(pts) - view.project(self.centre[None])[0]
        xc = (self.rect[0] + self.rect[2]) / 2
        yc = (self.rect[1] + self.rect[3]) / 2
        return np.stack([xc + q[:, 0] * self.scale, yc - q[:, 1] * self.scale, q[:, 2]], axis=1)


def _text_width(text, font):
    from .text import text_width

    return text_width(text, font)


#: Largest height of the drawing in a figure sized by its width, as a multiple of the width.
MAX_ASPECT = 1.4


def make_layout(scene, size, legend=True, scale_bar=True, caption=True, dpi=None, font_pt=None, width_mm=None):
    """Where everything goes.  ``size`` (W, H) in pixels; H None sizes the
    figure by its content (tight: the drawing fills the width, the height
    follows).  With ``dpi`` text sizes are points (``font_pt``, default 8 pt,
    the caption 7/8 of it) and keep their size at any dpi; without, text
    scales with the image (a pixel-only layout).

    >>> import crystalview as cv
    >>> from crystalview.render.scene_graph import build_scene
    >>> lay = make_layout(build_scene(cv.build("Cu"), "lattice", "[001]"), (1004, None), dpi=300, width_mm=85.0)
    >>> lay.W, round(lay.legend_font / 300 * 72, 6), round(lay.page_mm[0], 6)
    (1004, 8.0, 85.0)
    """
    from . import text as T

    W, H = size
    tight = H is None
    if dpi:
        k = float(dpi) / 72.0
        font = float(font_pt or T.FONT_PT) * k
        m = round(5.0 * k)
    else:
        font = max(11.0, round(min(W, H) * 0.024))
        m = round(min(W, H) * 0.035)
    x0, x1 = m, W - m
    entries = list(scene.legend) if legend and scene.legend else []
    bar_w = (0.22 * (W - 2 * m) + font * 1.5) if scale_bar else 0.0
    legend_under_bar = False
    lfont = font
    leg = []
    leg_lines = []
    beside = False
    below_rows = []
    gap = lfont * 1.2                 # between entries in a row
    if entries:
        lw = lfont * 1.6 + max(_text_width(e[0], lfont) for e in entries)
        if not tight and not dpi and lw > 0.32 * W:          # pixel-only layout: shrink to fit beside
            lfont = max(9.0, lfont * 0.32 * W / lw)
            lw = lfont * 1.6 + max(_text_width(e[0], lfont) for e in entries)
            gap = lfont * 1.2
        beside = not tight and lw <= 0.32 * W
        if beside:
            lh = lfont * 1.55
            lx = W - m - lw
            for kk, (lab, col, shape) in enumerate(entries):
                leg.append((lab, col, shape, lx + lfont * 0.6, m + lfont * 0.7 + kk * lh))
                leg_lines.append([lab])
            x1 = lx - m * 0.6
        else:                    # compact: entries flow in rows under the drawing, right of the scale bar
            widest = max(lfont * 1.6 + _text_width(e[0], lfont) for e in entries)
            if widest > W - 2 * m - bar_w:          # too narrow beside the bar: rows of their own under it
                legend_under_bar = True
            avail = W - 2 * m - (0.0 if legend_under_bar else bar_w)
            row, xw = [], 0.0
            for e in entries:
                lines = [e[0]]
                if lfont * 1.6 + _text_width(e[0], lfont) > avail:       # a long entry wraps, at its own size
                    lines = T.wrap(e[0], lfont, avail - lfont * 1.6)
                ew = lfont * 1.6 + max(_text_width(t, lfont) for t in lines)
                if row and xw + ew > avail:
                    below_rows.append(row)
                    row, xw = [], 0.0
                row.append((e, lines, xw))
                xw += ew + gap
            if row:
                below_rows.append(row)
    cfont = font * 0.875
    cap_lines = []
    if caption:
        lines = scene.caption if caption is True else [str(caption)]
        if dpi or tight:
            for t in lines:
                cap_lines.extend(T.wrap(t, cfont, W - 2 * m))
        else:
            cap_lines = list(lines)
            widest = max(_text_width(t, cfont) for t in cap_lines)
            if widest > W - 2 * m:
                cfont = max(8.0, cfont * (W - 2 * m) / widest)
    clh = cfont * 1.4
    cap_h = (len(cap_lines) * clh + cfont * 0.3) if cap_lines else 0.0
    llh = lfont * 1.5                 # one legend row
    wlh = lfont * 1.2                 # the lines of a wrapped entry
    row_h = [llh + wlh * (max(len(lines) for _, lines, _ in row) - 1) for row in below_rows]
    leg_h = sum(row_h) + (lfont * 0.3 if below_rows else 0.0)
    bar_h = font * 2.6 if scale_bar else 0.0
    if below_rows and not legend_under_bar:    # the legend beside the scale bar: one block, the taller's height
        bar_h = max(bar_h, leg_h)
        leg_h = 0.0
    ext = scene.projected_extent()          # in chunks: no copy of a large crystal's atoms
    lo, hi = ext["lo"], ext["hi"]
    span = np.maximum(hi - lo, 1e-6)
    y0 = m
    rw = max(x1 - x0, 10)
    if tight:
        rh = min(rw * span[1] / span[0], MAX_ASPECT * W)
        H = int(round(y0 + rh + bar_h + leg_h + cap_h + m))
    y1 = H - m - cap_h - leg_h - bar_h
    rh = max(y1 - y0, 10)
    scale = float(min(rw / span[0], rh / span[1]))
    mid = (lo + hi) / 2
    wmid = (ext["zlo"] + ext["zhi"]) / 2
    v = scene.view
    centre = v.right * mid[0] + v.up * mid[1] + v.toward * wmid
    bar = None
    if scale_bar:
        length = S.round_length(0.22 * (x1 - x0) / scale)
        bar = (m, m + length * scale, y1 + font * 2.6 * 0.75, length)
    top = (y1 + bar_h if legend_under_bar else y1) + lfont * 0.3
    for r, row in enumerate(below_rows):
        y = top + sum(row_h[:r]) + llh * 0.5
        for (lab, col, shape), lines, xo in row:
            leg.append((lab, col, shape, m + (0.0 if legend_under_bar else bar_w) + xo + lfont * 0.6, y))
            leg_lines.append(lines)
    ytop = y1 + bar_h
    cap = []
    yc = ytop + leg_h
    for kk, t in enumerate(cap_lines):
        cap.append((t, m, yc + clh * (kk + 1) - cfont * 0.1))
    return Layout(W, H, font, m, (x0, y0, x1, y1), scale, centre, leg, lfont, cap, cfont, bar,
                  dpi=float(dpi) if dpi else None, font_pt=float(font_pt or T.FONT_PT) if dpi else None,
                  width_mm=width_mm if dpi else None, legend_lines=leg_lines)


# ================================================================ public API
def figure_size(size, width, height, dpi, what="figure"):
    """(pixel size, width in mm or None) from --size W H (pixels) or
    --width/--height with units (85 mm wide by default); a height of None
    means "what the content needs".

    >>> figure_size(None, "85mm", None, 300)
    ((1004, None), 85.0)
    """
    from . import text as T

    if size is not None and (width is not None or height is not None):
        raise UserError(f"give the {what}'s size either as --width/--height (mm, cm, in) or as --size W H "
                        f"(pixels), not both")
    if size is not None:
        return S.check_size(size), None
    w_mm = T.parse_length(width if width is not None else "85mm", "--width")
    h_mm = T.parse_length(height, "--height") if height is not None else None
    size = S.check_size((w_mm / 25.4 * dpi, (h_mm if h_mm else w_mm) / 25.4 * dpi))
    return (size if h_mm is not None else (size[0], None)), w_mm

