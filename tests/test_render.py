"""Report figures: pixels, file formats, bad input.  Offscreen (pyvista.OFF_SCREEN)."""
from __future__ import annotations

import os
import subprocess
import sys
import xml.etree.ElementTree as ET

import numpy as np
import pytest

import crystalview as cv
from crystalview import palette
from crystalview.errors import UserError
from crystalview.render import figure as F
from crystalview.render import scene_graph as G

pv = pytest.importorskip("pyvista")
pv.OFF_SCREEN = True


def _img(scene, size=(320, 320), **kw):
    lay = F.make_layout(scene, size, **kw)
    img, _ = F.raster(scene, lay, transparent=kw.get("transparent", False))
    return img


def _has_colour(img, hexc, tol=40, min_px=20):
    rgb = np.array(palette.hex_to_rgb(hexc)) * 255
    d = np.abs(img[..., :3].astype(float) - rgb).sum(axis=2)
    return int((d < tol).sum()) >= min_px


def test_png_not_blank_and_dpi(tmp_path):
    c = cv.build("Cu")
    out = tmp_path / "cu.png"
    info = cv.render(c, out, view="[112]", size=(400, 300), dpi=150)
    assert out.exists() and info["size"] == [400, 300]
    assert abs(F.png_dpi(out) - 150) < 0.1          # pHYs chunk records the dpi
    arr = pv.read(str(out))
    a = np.asarray(arr.point_data[arr.point_data.keys()[0]])
    assert a.std() > 10                               # not one flat colour


def test_role_colours_present():
    c = cv.build("Ni", repeat=(2, 2, 2))
    c.roles[0] = 1          # one solute (palette role colours)
    sc = G.build_scene(c, "space-filling", "[001]")
    img = _img(sc, (400, 400), legend=False, scale_bar=False, caption=False)
    # shaded spheres: look for pixels near each role colour at their lit centres
    assert _has_colour(img, palette.ROLE_COLOURS["host"], tol=60)
    assert _has_colour(img, palette.ROLE_COLOURS["solute"], tol=90)


def test_transparent_background_alpha():
    sc = G.build_scene(cv.build("Cu"), "ball-and-stick", "[001]")
    lay = F.make_layout(sc, (200, 200), legend=False, scale_bar=False, caption=False)
    img, _ = F.raster(sc, lay, transparent=True)
    assert img.shape[2] == 4
    assert img[0, 0, 3] == 0 and img[100, 100, 3] == 255


def test_four_fold_symmetry_of_cubic_001():
    # common practice: a cubic cell seen along [001] has the projected 4-fold axis
    sc = G.build_scene(cv.build("Cu"), "space-filling", "[001]")
    img = _img(sc, (300, 300), legend=False, scale_bar=False, caption=False)[..., :3].astype(float)
    grey = img.mean(axis=2)
    mask = grey < 245
    rot = np.rot90(mask)
    assert (mask != rot).mean() < 0.01
    # shading differs (the key light sits top-left) but shapes agree


def test_svg_and_pdf_vector(tmp_path):
    c = cv.build("Fe", repeat=(2, 2, 2))
    svg = tmp_path / "fe.svg"
    cv.render(c, svg, view="[111]", size=(600, 450))
    root = ET.parse(svg).getroot()
    tags = [e.tag.split("}")[-1] for e in root.iter()]
    assert tags.count("circle") >= 27 and "line" in tags and "text" in tags
    pdf = tmp_path / "fe.pdf"
    cv.render(c, pdf, view="[111]", size=(600, 450))
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-1.4") and data.rstrip().endswith(b"%%EOF")


def test_vector_too_big_is_refused(tmp_path):
    c = cv.build("Cu", repeat=(20, 20, 20))
    with pytest.raises(UserError, match="png"):
        cv.render(c, tmp_path / "x.svg", style="space-filling")
    assert not (tmp_path / "x.svg").exists()


def test_cell_cut_shares_add_up():
    # source: Callister & Rethwisch, atoms per unit cell: FCC 4 (8 x 1/8 + 6 x 1/2), BCC 2
    for el, n in (("Cu", 4), ("Fe", 2)):
        sc = G.build_scene(cv.build(el), "cell-cut", "[123]")
        assert abs(sum(sc.info["shares"].values()) - n) < 1e-3


def test_stacking_layers_fcc_and_hcp():
    # source: Callister & Rethwisch, close-packed stacking: FCC ABCABC on {111}, HCP ABAB on (0001)
    c = cv.build("Cu", repeat=(2, 2, 2))
    cls, _ = G.classify_layers(c)
    assert set(cls.tolist()) == {0, 1, 2}
    m = cv.build("Mg", repeat=(2, 2, 2))
    cls, _ = G.classify_layers(m)
    assert set(cls.tolist()) == {0, 1}


def test_culling_keeps_the_visible_front():
    c = cv.build("Cu", repeat=(10, 10, 10))
    v = G.make_view(c, "[001]")
    q = v.project(c.positions)
    keep = G.visible_atoms(q, c.atom_radii())
    assert keep.sum() < 0.5 * len(c)
    front = q[:, 2] > q[:, 2].max() - 1e-6          # the top (001) layer is all visible
    assert keep[front].all()


@pytest.mark.parametrize("kw, msg", [
    (dict(view="1x0"), "malformed"), (dict(view="000"), "zero"), (dict(size=(0, 100)), "size"),
    (dict(size=(100000, 100)), "size"), (dict(up="[001]"), "parallel"), (dict(style="bogus"), "style"),
])
def test_bad_input(tmp_path, kw, msg):
    with pytest.raises(UserError, match=msg):
        cv.render(cv.build("Cu"), tmp_path / "x.png", **kw)
    assert not (tmp_path / "x.png").exists()


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "crystalview", *args], capture_output=True, text=True)


def test_cli_errors_and_force(tmp_path):
    out = tmp_path / "a.png"
    r = _cli("render", "Cu", "-o", str(out), "--view", "1x0")
    assert r.returncode == 2 and "malformed" in r.stderr and not out.exists()
    r = _cli("render", "Cu", "-o", str(tmp_path / "no" / "a.png"))
    assert r.returncode == 2 and "does not exist" in r.stderr
    out.write_bytes(b"keep")
    r = _cli("render", "Cu", "-o", str(out))
    assert r.returncode == 2 and out.read_bytes() == b"keep"
    r = _cli("render", "Cu", "-o", str(out), "--force", "--size", "200", "150", "--json")
    assert r.returncode == 0 and out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not [p for p in os.listdir(tmp_path) if ".tmp-cv" in p]


def test_show_without_display(monkeypatch):
    monkeypatch.delenv("DISPLAY", raising=False)
    monkeypatch.delenv("WAYLAND_DISPLAY", raising=False)
    env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "WAYLAND_DISPLAY")}
    r = subprocess.run([sys.executable, "-m", "crystalview", "show", "Cu"], capture_output=True, text=True, env=env)
    assert r.returncode == 2 and "render" in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_non_drawing_commands_do_not_import_vtk():
    code = ("import sys; from crystalview.cli import main; main(['info', 'Cu', '--json']); "
            "assert 'vtk' not in sys.modules and 'pyvista' not in sys.modules and "
            "not any(m.startswith('vtkmodules') for m in sys.modules)")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr


def test_sites_overlay_if_available():
    pytest.importorskip("crystalview.analysis.sites")
    sc = G.build_scene(cv.build("Cu"), "ball-and-stick", "[001]", sites=True)
    assert any(s["group"] == "sites" for s in sc.overlay_spheres)


def test_slip_overlay_if_available(tmp_path):
    pytest.importorskip("crystalview.analysis.slip")
    from crystalview.analysis import slip
    if not hasattr(slip, "slip_overlay"):
        pytest.skip("slip_overlay not written yet")
    sc = G.build_scene(cv.build("Cu"), "ball-and-stick", "[011]", slip_axis="[001]")
    assert any(a["group"] == "slip" for a in sc.arrows)
    assert any(m["group"] == "planes" for m in sc.meshes)
