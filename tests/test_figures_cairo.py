"""Figures drawn by cairo: one drawing routine for PNG, SVG and PDF (the
same layout in each), small PNGs without vtk, the fallback where libcairo
is missing, wrapped legends and alloy captions."""
from __future__ import annotations

import json
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET

import numpy as np
import pytest

import crystalview as cv
from crystalview import palette
from crystalview.render import draw2d as D
from crystalview.render import figure as F
from crystalview.render import scene_graph as G
from test_figures_marks import _near  # the same pixel test as the VTK figures (tests/ is on the path)

MM_PER_IN = 25.4          # source: the international inch, defined as exactly 25.4 mm (1959)

pytestmark = pytest.mark.skipif(D.load_cairo()[0] is None, reason="libcairo is not installed here")


def _cli(*args, env=None):
    return subprocess.run([sys.executable, "-m", "crystalview", *args], capture_output=True, text=True, env=env)


def _read_png(path):
    from PIL import Image

    im = Image.open(path)
    return np.asarray(im.convert("RGBA")), im.info


def _layout_as_render(scene, width_mm=85.0, dpi=200):
    """The layout cv.render makes for ``width`` at ``dpi`` (text 8 pt)."""
    size, w = F.figure_size(None, f"{width_mm}mm", None, dpi)
    return F.make_layout(scene, size, dpi=dpi, font_pt=8, width_mm=w)


def test_small_png_is_drawn_by_cairo_without_vtk(tmp_path):
    out = tmp_path / "cu.png"
    code = ("import sys, json; from crystalview.cli import main; "
            f"main(['render', 'Cu', '--width', '85mm', '--dpi', '300', '-o', {str(out)!r}, '--json']); "
            "bad = [m for m in sys.modules if m.startswith(('vtk', 'pyvista', 'matplotlib'))]; "
            "assert not bad, bad[:5]")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    info = json.loads(r.stdout)
    assert info["drawn_by"] == "cairo" and info["size"][0] == round(85 / MM_PER_IN * 300)
    img, meta = _read_png(out)
    # Pillow reads the pHYs chunk back as dots per inch
    assert abs(meta["dpi"][0] - 300) < 0.01 and abs(meta["dpi"][1] - 300) < 0.01
    assert abs(F.png_dpi(out) - 300) < 0.01
    assert img.shape[:2] == (info["size"][1], info["size"][0]) and img[..., :3].std() > 10


def test_large_scene_png_goes_to_vtk(tmp_path, monkeypatch):
    pytest.importorskip("pyvista")
    monkeypatch.setattr(F, "CAIRO_PNG_MAX", 10)
    info = cv.render(cv.build("Cu"), tmp_path / "v.png", size=(300, 240))
    assert info["drawn_by"] == "vtk"
    img, _ = _read_png(tmp_path / "v.png")
    assert img.shape[:2] == (240, 300) and img[..., :3].std() > 10


def test_png_and_svg_share_one_layout(tmp_path):
    rsvg = shutil.which("rsvg-convert")
    if rsvg is None:
        pytest.skip("rsvg-convert (librsvg) is not installed: no independent SVG reader to compare with")
    c = cv.add_vacancies(cv.build("Cu", repeat=(2, 2, 1)), count=1, seed=2)
    png, svg = tmp_path / "a.png", tmp_path / "a.svg"
    kw = dict(width="60mm", dpi=150, sites=True)
    info = cv.render(c, png, **kw)
    cv.render(c, svg, **kw)
    conv = tmp_path / "b.png"
    H, W = info["size"][1], info["size"][0]
    # the page is exactly 60 mm while the PNG has whole pixels (60 mm = 354.3 px at 150 dpi): read the SVG
    # at the PNG's pixel size
    r = subprocess.run([rsvg, "-w", str(W), "-h", str(H), "-o", str(conv), str(svg)], capture_output=True,
                       text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    a, _ = _read_png(png)
    b, _ = _read_png(conv)
    assert b.shape[:2] == (H, W)
    # the legend (swatches and text) and the caption sit at the same pixels: compare the ink below the drawing
    sc = G.build_scene(c, "ball-and-stick", sites=True)
    lay = _layout_as_render(sc, 60.0, 150)
    assert (lay.W, lay.H) == (W, H)
    y1 = int(lay.rect[3]) + 2
    ink_a = a[y1:, :, :3].astype(float).mean(axis=2) < 128
    ink_b = b[y1:, :, :3].astype(float).mean(axis=2) < 128
    assert ink_a.sum() > 500

    def grow(m):                  # the ink and its 8 neighbours: glyphs may land up to a pixel apart
        g = m.copy()                # (cairo's image surface puts each glyph on a whole pixel)
        for dy in (-1, 0, 1):
            for dx in (-1, 0, 1):
                g |= np.roll(np.roll(m, dy, axis=0), dx, axis=1)
        return g

    assert (ink_a & ~grow(ink_b)).sum() < 0.02 * ink_a.sum()
    assert (ink_b & ~grow(ink_a)).sum() < 0.02 * ink_b.sum()
    for ink in (ink_a, ink_b):              # the bounding boxes of the text agree within a pixel or two
        ys, xs = np.nonzero(ink)
        assert abs(ys.min() - np.nonzero(ink_a)[0].min()) <= 2 and abs(xs.max() - np.nonzero(ink_a)[1].max()) <= 2
    # and the drawing itself: nearly the same picture
    assert np.abs(a[:y1, :, :3].astype(float) - b[:y1, :, :3]).mean() < 4.0
    # the first legend swatch (the host ball) is where the layout put it, in both
    lab, col, shape, x, y = lay.legend[0]
    for img in (a, b):
        assert _near(img, [(x, y)], col, tol=120) == 1.0


def test_marked_features_inside_the_frame_on_the_cairo_png(tmp_path):
    # the vacancy ring (drawn in front of the space-filling atoms) and the dislocation mark, read from the file
    c = cv.add_vacancies(cv.build("Cu", repeat=(2, 2, 2)), count=2, seed=3)
    out = tmp_path / "v.png"
    info = cv.render(c, out, style="space-filling", view="[001]", width="85mm", dpi=200)
    assert info["drawn_by"] == "cairo"
    img, _ = _read_png(out)
    sc = G.build_scene(c, "space-filling", "[001]")
    lay = _layout_as_render(sc)
    mk = sc.markers[0]
    for p in mk["pos"]:
        x, y, _ = lay.to_px(sc.view, p[None])[0]
        r = mk["radius"] * lay.scale
        ring = [(x + r * np.cos(t), y + r * np.sin(t)) for t in np.linspace(0, 2 * np.pi, 24, endpoint=False)]
        assert _near(img, ring, palette.ROLE_COLOURS["vacancy"]) > 0.8
    from crystalview.defects.dislocation import dislocation

    d = dislocation(cv.build("Cu"), "edge")
    out = tmp_path / "d.png"
    info = cv.render(d, out, style="lattice", width="85mm", dpi=200)
    assert info["drawn_by"] == "cairo"
    img, _ = _read_png(out)
    sc = G.build_scene(d, "lattice")
    lay = _layout_as_render(sc)
    pts = []
    for ln in sc.lines:
        if ln["label"] == "dislocation core":
            for a, b in np.asarray(ln["segments"], float):
                for t in np.linspace(0.2, 0.8, 3):
                    pts.append(lay.to_px(sc.view, (a + t * (b - a))[None])[0, :2])
    assert pts and _near(img, pts, palette.ROLE_COLOURS["direction"]) > 0.9


def test_cairo_png_colours_depth_order_and_transparency(tmp_path):
    # a solute in front shows its own colour at its centre: the painter's order draws the near ball last
    c = cv.build("Ni", repeat=(2, 2, 2))
    sc = G.build_scene(c, "space-filling", "[001]")
    front = int(np.argmax(sc.atom_pos[:, 2] - 1e-3 * np.abs(sc.atom_pos[:, 0] - sc.atom_pos[:, 0].mean())))
    c.roles[sc.atom_src[front]] = 1
    sc = G.build_scene(c, "space-filling", "[001]")
    lay = F.make_layout(sc, (400, 400), legend=False, scale_bar=False, caption=False)
    img = D.image(D.display_list(sc, lay), lay)
    k = [i for i in range(sc.n_atoms) if sc.atom_src[i] == sc.atom_src[front] and
         np.isclose(sc.atom_pos[i, 2], sc.atom_pos[:, 2].max())][0]
    x, y, _ = lay.to_px(sc.view, sc.atom_pos[k][None])[0]
    px = img[int(y) - 2:int(y) + 3, int(x) - 2:int(x) + 3, :3].reshape(-1, 3).astype(float).mean(axis=0)
    sol = np.array(palette.hex_to_rgb(palette.ROLE_COLOURS["solute"])) * 255
    host = np.array(palette.hex_to_rgb(palette.ROLE_COLOURS["host"])) * 255
    assert np.abs(px - sol).sum() < np.abs(px - host).sum()
    # transparent background: clear corners, opaque atoms
    out = tmp_path / "t.png"
    cv.render(cv.build("Cu"), out, transparent=True, size=(300, 300), legend=False, caption=False, scale_bar=False)
    img, _ = _read_png(out)
    assert img[0, 0, 3] == 0 and img[150, 150, 3] == 255


def test_translucent_plane_shows_what_is_behind(tmp_path):
    # a plane is drawn translucent over the atoms behind it: their colour still shows through it
    c = cv.build("Cu")
    sc = G.build_scene(c, "ball-and-stick", "[001]", planes=["(001)"])
    planes = [m for m in sc.meshes if m["group"] == "planes"]
    assert planes and all(m["opacity"] < 1 for m in planes)
    lay = F.make_layout(sc, (400, 400), legend=False, scale_bar=False, caption=False)
    img = D.image(D.display_list(sc, lay), lay)
    sc0 = G.build_scene(c, "ball-and-stick", "[001]")
    img0 = D.image(D.display_list(sc0, lay), lay)
    diff = np.abs(img[..., :3].astype(float) - img0[..., :3]).sum(axis=2)
    assert (diff > 10).mean() > 0.05                      # the plane tints the picture
    assert img[..., :3].std() > 20                        # and does not paint it over flat


def test_vector_files_refused_in_one_line_without_libcairo(tmp_path):
    # a stand-in cairocffi that fails as the real one does when the system library is missing
    fake = tmp_path / "fake"
    fake.mkdir()
    (fake / "cairocffi.py").write_text("raise OSError(\"no library called 'cairo-2' was found\")\n")
    import os

    env = dict(os.environ, PYTHONPATH=str(fake) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    r = _cli("render", "Cu", "-o", str(tmp_path / "a.svg"), env=env)
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "cairo" in r.stderr and "apt install libcairo2" in r.stderr and "Traceback" not in r.stderr
    assert not (tmp_path / "a.svg").exists()
    r = _cli("render", "Cu", "-o", str(tmp_path / "a.pdf"), env=env)
    assert r.returncode == 2 and "libcairo2" in r.stderr and not (tmp_path / "a.pdf").exists()
    pytest.importorskip("pyvista")
    r = _cli("render", "Cu", "-o", str(tmp_path / "a.png"), "--size", "240", "200", "--json", env=env)
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["drawn_by"] == "vtk" and (tmp_path / "a.png").exists()


def test_long_legend_entries_wrap_and_the_legend_takes_only_the_room_it_needs():
    sc = G.build_scene(cv.build("Cu"), "ball-and-stick")
    long = ("octahedral interstitial site, r = 0.529 A, drawn as the atoms, with its polyhedron of the six nearest "
            "host atoms, which are the corners")
    sc.legend = [("Cu (host)", palette.ROLE_COLOURS["host"], "ball"), (long, palette.ROLE_COLOURS["site-octahedral"], "ball")]
    lay = _layout_as_render(sc)
    assert lay.legend_font / lay.dpi * 72 == pytest.approx(8.0)          # wrapped, not shrunk
    lines = lay.legend_lines[1]
    assert len(lines) > 1 and " ".join(lines) == long
    x = lay.legend[1][3]
    for t in lines:
        assert x + lay.legend_font + F._text_width(t, lay.legend_font) <= lay.W - lay.margin + 1
    # the wrapped entry's lines lie above the caption
    y = lay.legend[1][4] + (len(lines) - 1) * lay.legend_font * 1.2
    assert y + lay.legend_font < lay.caption[0][2]
    # one short entry sits beside the scale bar and adds no height to the figure
    sc.legend = sc.legend[:1]
    with_legend = _layout_as_render(sc)
    without = F.make_layout(sc, (with_legend.W, None), legend=False, dpi=200, font_pt=8, width_mm=85.0)
    assert with_legend.H == without.H and with_legend.rect == without.rect


def test_alloy_caption_names_the_alloy():
    from crystalview.alloy import alloy_crystal

    c = alloy_crystal("Fe", "Fe-18Cr-8Ni", "wt", phase="gamma")
    cap = "\n".join(G.build_scene(c, "lattice", "[001]").caption)
    assert "alloy Fe-18Cr-8Ni (wt%)" in cap
    rec = c.metadata["alloy"]
    assert f"{rec['counts']['Cr']} Cr + {rec['counts']['Ni']} Ni" in cap
    assert "substitutions" not in cap                  # told once, by the alloy's line
    # a solute added by hand on top of the alloy is still listed as a defect
    more = cv.add_vacancies(c, count=1, seed=1) if hasattr(cv, "add_vacancies") else None
    if more is not None:
        cap = "\n".join(G.build_scene(more, "lattice", "[001]").caption)
        assert "alloy Fe-18Cr-8Ni (wt%)" in cap and "1 vacancy" in cap


def test_pdf_and_svg_are_reproducible_and_titled(tmp_path):
    c = cv.build("Cu")
    for suffix in (".pdf", ".svg"):
        a, b = tmp_path / f"a{suffix}", tmp_path / f"b{suffix}"
        cv.render(c, a)
        cv.render(c, b)
        assert a.read_bytes() == b.read_bytes()          # no dates: the same figure, the same bytes
    root = ET.parse(tmp_path / "a.svg").getroot()
    ns = "{http://www.w3.org/2000/svg}"
    assert "face-centred cubic" in root.find(f"{ns}title").text
    assert "view along" in root.find(f"{ns}desc").text
    pypdf = pytest.importorskip("pypdf", reason="pypdf (pip install pypdf; in the test extras) reads the PDF back")
    meta = pypdf.PdfReader(str(tmp_path / "a.pdf")).metadata
    assert "face-centred cubic" in meta.title and meta.creator == "crystalview"


def test_control_characters_in_a_caption_keep_the_svg_valid(tmp_path):
    out = tmp_path / "c.svg"
    cv.render(cv.build("Cu"), out, caption="bad \x1b[31m caption\x00 with <tags> & \x07 bells")
    root = ET.parse(out).getroot()              # parses: the title and description carry no control characters
    ns = "{http://www.w3.org/2000/svg}"
    assert "<tags> &" in root.find(f"{ns}desc").text
