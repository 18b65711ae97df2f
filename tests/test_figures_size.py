"""Figure sizes in real units: --width / --height / --dpi, text in points,
SVG and PDF pages of the real size, tight height."""
from __future__ import annotations

import subprocess
import sys
import xml.etree.ElementTree as ET

import numpy as np
import pytest

import crystalview as cv
from crystalview.errors import UserError
from crystalview.render import figure as F

pytest.importorskip("pyvista")

MM_PER_IN = 25.4          # source: the international inch, defined as exactly 25.4 mm (1959)
PT_PER_IN = 72.0          # source: ISO 32000-1 (PDF 1.7) 8.3.2.3, default user space unit = 1/72 inch


def _pdf(path):
    """(page box in points, the set of text sizes in points as set on the page, the fonts used), read by
    pypdf (a PDF library independent of the writer, cairo): each text run's size is its Tf size times the
    scale of its text matrix and of the current transformation matrix."""
    pypdf = pytest.importorskip("pypdf", reason="pypdf (pip install pypdf; in the test extras) reads the PDF back")
    page = pypdf.PdfReader(str(path)).pages[0]
    box = [float(x) for x in page.mediabox]
    sizes, fonts = set(), set()

    def visit(text, cm, tm, font, size):
        if not text.strip():
            return
        m = np.array([[tm[0], tm[1]], [tm[2], tm[3]]]) @ np.array([[cm[0], cm[1]], [cm[2], cm[3]]])
        sizes.add(round(float(size) * abs(np.linalg.det(m)) ** 0.5, 3))
        fonts.add(str(font.get("/BaseFont")) if font else None)

    page.extract_text(visitor_text=visit)
    return box, sizes, fonts


@pytest.mark.parametrize("width, mm", [("85mm", 85.0), ("180mm", 180.0), ("3.5in", 3.5 * MM_PER_IN)])
def test_pdf_page_is_the_requested_width_and_fonts_are_points(tmp_path, width, mm):
    for dpi in (150, 600):
        out = tmp_path / f"f{dpi}.pdf"
        info = cv.render(cv.build("Cu"), out, width=width, dpi=dpi)
        box, sizes, fonts = _pdf(out)
        assert box[0] == 0 and box[1] == 0
        assert abs(box[2] - mm / MM_PER_IN * PT_PER_IN) < 0.01
        assert abs(box[3] / PT_PER_IN * MM_PER_IN - info["height_mm"]) < 0.01
        assert sizes == {8.0, 7.0}                     # legend 8 pt, caption 7 pt, at any dpi
        assert fonts and all("DejaVuSans" in f or "LiberationSans" in f for f in fonts)   # the embedded face
    out = tmp_path / "big.pdf"
    cv.render(cv.build("Cu"), out, width=width, font_size=10)
    assert _pdf(out)[1] == {10.0, 8.75}


def test_svg_page_in_mm_and_png_pixels(tmp_path):
    svg = tmp_path / "a.svg"
    info = cv.render(cv.build("Cu"), svg, width="85mm", dpi=300)
    root = ET.parse(svg).getroot()          # the SVG parses (xml.etree) and its page is in mm
    assert root.get("width").endswith("mm") and abs(float(root.get("width")[:-2]) - 85.0) < 1e-6
    assert root.get("height").endswith("mm") and abs(float(root.get("height")[:-2]) - info["height_mm"]) < 0.01
    vb = [float(x) for x in root.get("viewBox").split()]
    assert abs(vb[2] - 85.0) < 1e-6                  # user units are mm
    png = tmp_path / "a.png"
    info_png = cv.render(cv.build("Cu"), png, width="85mm", dpi=300)
    assert info_png["size"][0] == round(85 / MM_PER_IN * 300)
    # one layout: the PNG's pixel aspect is the SVG page's
    assert abs(vb[3] / vb[2] - info_png["size"][1] / info_png["size"][0]) < 1e-6
    assert abs(F.png_dpi(png) - 300) < 0.1
    # text keeps its size in points at any dpi: the legend text is 8 pt = 8/72 in
    sc = F.build_scene(cv.build("Cu"), "ball-and-stick")
    for dpi in (100, 300, 600):
        lay = F.make_layout(sc, (round(85 / MM_PER_IN * dpi), None), dpi=dpi, font_pt=8)
        assert abs(lay.legend_font / dpi * PT_PER_IN - 8) < 1e-9
        assert abs(lay.caption_font / dpi * PT_PER_IN - 7) < 1e-9


def test_tight_height_follows_the_content():
    sc = F.build_scene(cv.build("Cu"), "space-filling", "[001]")
    lay = F.make_layout(sc, (1000, None), dpi=300)
    x0, y0, x1, y1 = lay.rect
    pts, rad = sc.extent_points()
    q = sc.view.project(pts)
    span = (q[:, :2] + rad[:, None]).max(axis=0) - (q[:, :2] - rad[:, None]).min(axis=0)
    # the drawing fills the width and is exactly as tall as the crystal's picture: no empty band
    assert abs(span[0] * lay.scale - (x1 - x0)) < 0.5 and abs(span[1] * lay.scale - (y1 - y0)) < 1.0
    assert lay.H < 1000 * 1.5
    # a wide crystal makes a short figure
    wide = F.build_scene(cv.build("Cu", repeat=(4, 1, 1)), "space-filling", "[001]")
    assert F.make_layout(wide, (1000, None), dpi=300).H < lay.H


def test_compact_legend_rows_fit_the_width():
    sc = F.build_scene(cv.build("Cu"), "ball-and-stick", sites=True, layers=True)
    lay = F.make_layout(sc, (600, None), dpi=300)
    for (lab, col, shape, x, y), lines in zip(lay.legend, lay.legend_lines):
        assert " ".join(lines) == lab
        for t in lines:
            assert x + lay.legend_font + F._text_width(t, lay.legend_font) <= lay.W - lay.margin + 1
    for t, x, y in lay.caption:
        assert x + F._text_width(t, lay.caption_font) <= lay.W - lay.margin + 1
        assert y <= lay.H


@pytest.mark.parametrize("args, msg", [
    (["--width", "85"], "no unit"), (["--width", "85mm", "--size", "100", "100"], "not both"),
    (["--width", "2m"], "not a length"), (["--width", "5mm"], "out of range"),
    (["--width", "900mm", "--dpi", "1200"], "out of range"), (["--font-size", "200"], "font size"),
])
def test_bad_sizes_exit_2_with_one_line(tmp_path, args, msg):
    out = tmp_path / "x.png"
    r = subprocess.run([sys.executable, "-m", "crystalview", "render", "Cu", "-o", str(out), *args],
                       capture_output=True, text=True)
    assert r.returncode == 2 and msg in r.stderr and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert not out.exists()
    with pytest.raises(UserError):
        cv.render(cv.build("Cu"), tmp_path / "y.pdf", width=args[1] if args[0] == "--width" and len(args) == 2
                  else "85", font_size=args[1] if args[0] == "--font-size" else None)
