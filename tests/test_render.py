"""Report figures: pixels, file formats, bad input.  Offscreen (pyvista.OFF_SCREEN)."""
from __future__ import annotations

import os
import shutil
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
    # cairo's SVG: every ball a radially shaded path, the text as glyph outlines (symbols placed by <use>),
    # the caption as the figure's <title> and <desc>
    assert tags.count("radialGradient") >= 27 and tags.count("path") >= 27
    assert "symbol" in tags and "use" in tags and "title" in tags
    assert root.find("{http://www.w3.org/2000/svg}title").text.startswith("Fe: body-centred cubic")
    pdf = tmp_path / "fe.pdf"
    cv.render(c, pdf, view="[111]", size=(600, 450))
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-1.") and data.rstrip().endswith(b"%%EOF")


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
    (dict(size=(100000, 100)), "size"), (dict(view="[001]", up="[001]"), "parallel"), (dict(style="bogus"), "style"),
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


# ------------------------------------------------------------------ figure review fixes
from crystalview.crystal import Crystal  # noqa: E402


def _bonded_share(sc):
    """Share of the drawn atoms with at least one stick."""
    return len(np.unique(sc.bond_atoms)) / sc.n_atoms


@pytest.fixture(scope="module")
def defect_crystals():
    from crystalview.defects.boundary import tilt_boundary
    from crystalview.defects.dislocation import dislocation
    from crystalview.defects.point import frenkel_pairs
    from crystalview.defects.surface import slab

    cu = cv.build("Cu")
    return dict(frenkel=frenkel_pairs(cv.build("Cu", repeat=(2, 2, 2)), 1),
                dislocation=dislocation(cu, "edge"),
                tilt=tilt_boundary(cu, axis="[001]", plane="(310)"),
                slab=slab(cu, "(111)", layers=6))


def test_bonds_survive_one_close_pair(defect_crystals):
    # source: Callister & Rethwisch, FCC nearest-neighbour distance a/sqrt(2) (a = 2R / sqrt(2) ... R = a sqrt(2)/4)
    a = cv.build("Cu").lattice.a
    for name in ("frenkel", "dislocation", "tilt"):
        c = defect_crystals[name]
        assert abs(G._nn_distance(c) - a / np.sqrt(2)) < 1e-6, name
        sc = G.build_scene(c, "ball-and-stick", "[001]")
        assert _bonded_share(sc) > 0.9, (name, _bonded_share(sc))
        assert len(sc.bonds) > 3 * sc.n_atoms * 0.9 / 2, name       # most atoms keep several sticks
    # the interstitial (closer than a/sqrt(2) to its cage: a/2 in the octahedral hole) keeps its sticks
    c = defect_crystals["frenkel"]
    sc = G.build_scene(c, "ball-and-stick", "[001]")
    from crystalview.crystal import ROLES
    inter = np.nonzero(c.roles[sc.atom_src] == ROLES.index("interstitial"))[0]
    assert len(inter) and np.isin(sc.bond_atoms, inter).any(axis=1).sum() >= 6


def test_bond_length_falls_back_to_the_atoms(defect_crystals):
    # an imported structure: no lattice record, no metadata; the median nearest-neighbour distance stands in
    f = defect_crystals["frenkel"]
    bare = Crystal(f.cell, f.positions, f.numbers, pbc=f.pbc)
    a = cv.build("Cu").lattice.a
    assert abs(G._nn_distance(bare) - a / np.sqrt(2)) < 1e-6
    # and the shortest distance (interstitial to cage, a/2) is not what it uses
    from crystalview.analysis.neighbours import nearest_neighbour_distance
    assert nearest_neighbour_distance(bare) < 0.8 * a / np.sqrt(2)


def test_site_spheres_drawn_at_the_atoms_scale():
    pytest.importorskip("crystalview.analysis.sites")
    c = cv.build("Cu")
    R = float(c.atom_radii()[0])
    sc = G.build_scene(c, "ball-and-stick", "[001]", sites=True)
    k = G.S.get_style("ball-and-stick").atom_scale
    sites = [s for s in sc.overlay_spheres if s["group"] == "sites"]
    assert sites
    for s in sites:
        assert np.allclose(s["radius"], np.asarray(s["true_radius"]) * k)
        assert np.max(s["radius"]) < np.min(sc.atom_radius)            # a hole never outgrows its atoms
    oct_r = [s for s in sites if "octahedral" in s["label"]][0]["true_radius"][0]
    # source: Smallman & Ngan, Modern Physical Metallurgy, hole radius ratios: octahedral 0.414 R in fcc
    assert abs(oct_r / R - 0.414) < 0.002
    assert any("as the atoms" in e[0] for e in sc.legend)
    full = G.build_scene(c, "space-filling", "[001]", sites=True)
    for s in (s for s in full.overlay_spheres if s["group"] == "sites"):
        assert np.allclose(s["radius"], s["true_radius"])
    assert not any("as the atoms" in e[0] for e in full.legend)


def test_slip_axis_picks_an_oblique_view():
    pytest.importorskip("crystalview.analysis.slip")
    c = cv.build("Cu")
    sc = G.build_scene(c, "ball-and-stick", None, slip_axis="[123]")
    axis, _ = G.direction(c, "[123]")
    t = sc.view.toward
    assert np.degrees(np.arccos(abs(t @ axis))) > 45          # the loading axis lies across the view
    slip = sc.info["slip"]
    from crystalview.lattice import parse_indices, plane_normal
    n = plane_normal(c.lattice.cell, parse_indices(slip["planes"][0], kind="plane"))
    tilt = np.degrees(np.arcsin(abs(t @ n) / np.linalg.norm(n)))
    assert 12 < tilt < 45                                     # the slip plane seen obliquely, not edge-on
    d, _ = G.direction(c, slip["directions"][0])
    assert abs(t @ d) < 0.5
    assert np.allclose(sc.view.up, axis - (axis @ t) * t, atol=1e-9) or abs(sc.view.up @ axis) > 0.99
    assert not sc.lines
    # asked for a view that has the plane edge-on: it is drawn as a line and the legend says so
    edge = G.build_scene(c, "ball-and-stick", "[110]", slip_axis="[123]")      # [110] lies in (1-1-1)
    assert any(ln["group"] == "planes" for ln in edge.lines)
    assert any("edge-on" in e[0] and e[2] == "line" for e in edge.legend)


def test_frenkel_vacancy_marked(defect_crystals):
    c = defect_crystals["frenkel"]
    rec = [d for d in c.metadata["defects"] if d["kind"] == "frenkel_pair"][0]
    sc = G.build_scene(c, "ball-and-stick", "[001]")
    marks = np.vstack([m["pos"] for m in sc.markers])
    assert np.allclose(marks, np.asarray(rec["positions"]).reshape(-1, 3))
    assert ("vacancy (1)", palette.ROLE_COLOURS["vacancy"], "ring") in sc.legend
    assert not G.build_scene(c, "ball-and-stick", "[001]", defects=False).markers


def test_defect_captions(defect_crystals):
    cap = {k: "\n".join(G.build_scene(c, "lattice", "[001]").caption) for k, c in defect_crystals.items()}
    # source: Sutton & Balluffi, Interfaces in Crystalline Materials: a cubic (310)[001] tilt boundary is
    # Sigma 5 (h^2 + k^2 = 10, halved while even), misorientation 2 atan(1/3) = 36.87 deg
    assert "\u03a35 (310)[001] tilt boundary, tilt 36.87\u00b0" in cap["tilt"]
    # source: Hull & Bacon, Introduction to Dislocations: fcc perfect dislocation b = a/2<110> on {111}
    assert "edge dislocation, b = a/2[1-10], line [-1-12], glide plane (111)" in cap["dislocation"]
    assert "(111) slab, 6 layers" in cap["slab"]
    assert "1 Frenkel pair" in cap["frenkel"]


def test_svg_bonds_behind_their_nearer_ball_and_shaded_balls(tmp_path):
    c = cv.build("Cu")
    sc = G.build_scene(c, "ball-and-stick", "[112]")
    lay = F.make_layout(sc, (600, 450), dpi=100)          # as cv.render lays it out (text in points)
    items = F.display_list(sc, lay)
    where = {it["atom"]: k for k, it in enumerate(items) if it["kind"] == "ball"}
    bonds = [(k, it) for k, it in enumerate(items) if it.get("ends") is not None]
    assert bonds
    depth = sc.view.project(sc.atom_pos)[:, 2]
    checked = 0
    for k, it in bonds:
        i, j = it["ends"]
        near, far = (i, j) if depth[i] >= depth[j] else (j, i)
        assert k < where[near]                         # the nearer ball is painted over the stick
        if depth[near] - depth[far] > 1e-6:
            assert k > where[far]                      # the stick is painted over the farther ball
        # the stroke starts and ends inside the two discs (no gap), not at their centres
        for (x, y), b in zip(it["pts"], (i, j)):
            ball = items[where[b]]
            r = np.hypot(x - ball["x"], y - ball["y"])
            assert r <= ball["r"] + 1e-6
        checked += 1
    assert checked > 10
    out = tmp_path / "cu.svg"
    cv.render(c, out, view="[112]", size=(600, 450), dpi=100)
    text = out.read_text()
    root = ET.fromstring(text)
    ns = "{http://www.w3.org/2000/svg}"
    ids = {e.get("id") for e in root.iter() if e.get("id")}
    for e in root.iter():
        style = dict(kv.split(":", 1) for kv in (e.get("style") or "").split(";") if ":" in kv)
        for attr in ("fill", "stroke", "stop-color"):
            val = e.get(attr) or style.get(attr)
            if val is None:
                continue
            if val.startswith("url("):
                assert val[5:-1] in ids                # every paint server referenced exists
            else:
                assert val == "none" or val.startswith("#") or val.startswith("rgb("), (e.tag, attr, val)
    # balls are shaded by radial gradients (one per ball), each with its colour stops
    grads = root.findall(f".//{ns}radialGradient")
    balls = [it for it in items if it["kind"] == "ball"]
    assert len(grads) >= len(balls) and all(len(g.findall(f"{ns}stop")) >= 2 for g in grads)
    convert = shutil.which("rsvg-convert")
    if convert is None and shutil.which("convert"):
        # some machines carry a stand-in `convert` that is not ImageMagick: use it only when it says it is
        ver = subprocess.run([shutil.which("convert"), "-version"], capture_output=True, text=True, timeout=30)
        convert = shutil.which("convert") if "ImageMagick" in ver.stdout else None
    if convert:
        png = tmp_path / "cu_conv.png"
        # the SVG page is in mm (600 px at 100 dpi): convert at 100 dpi to get the pixels back
        cmd = [convert, "-d", "100", "-p", "100", "-o", str(png), str(out)] if convert.endswith("rsvg-convert") \
            else [convert, "-density", "100", str(out), "-depth", "8", f"PNG24:{png}"]
        r = subprocess.run(cmd, capture_output=True, text=True, timeout=60)
        assert r.returncode == 0, r.stderr
        from PIL import Image

        img = np.asarray(Image.open(png).convert("RGB"))
        # a reader may round the page (114.3 mm at 100 dpi) up to one more pixel row
        assert abs(img.shape[0] - 450) <= 1 and abs(img.shape[1] - 600) <= 1, img.shape
        img = img[:450, :600]
        host = np.array(palette.hex_to_rgb(palette.ROLE_COLOURS["host"])) * 255
        near_host = 0
        for b in balls:                                # the ball's body shows its colour, not black
            y, x = int(round(b["y"] + 0.2 * b["r"])), int(round(b["x"] + 0.2 * b["r"]))
            px = np.median(img[y - 2:y + 3, x - 2:x + 3, :3].reshape(-1, 3).astype(float), axis=0)
            assert px.sum() > 150, px
            near_host += np.abs(px - host).sum() < 120
        assert near_host >= 0.8 * len(balls)


def test_free_surfaces_no_images_no_box(defect_crystals):
    d = defect_crystals["dislocation"]
    sc = G.build_scene(d, "ball-and-stick", None)
    # default view: along the dislocation line (z), the glide-plane normal [111] (y) up
    assert abs(sc.view.toward @ np.array([0, 0, 1.0])) > 0.999
    assert abs(sc.view.up @ np.array([0, 1.0, 0])) > 0.999
    assert sc.cell_edges is None                       # one periodic axis: a box would mean nothing
    lo, hi = d.positions.min(axis=0), d.positions.max(axis=0)
    assert np.all(sc.atom_pos[:, :2] >= lo[:2] - 1e-9) and np.all(sc.atom_pos[:, :2] <= hi[:2] + 1e-9)
    s = defect_crystals["slab"]
    sc = G.build_scene(s, "ball-and-stick", "[1-10]")
    e = sc.cell_edges
    assert e is not None and len(e) == 8
    assert np.allclose(e[:, 0, 2], e[:, 1, 2])          # no edges across the free surfaces (z)
    zs = np.unique(np.round(e[:, :, 2], 6))
    assert np.allclose(zs, [s.positions[:, 2].min(), s.positions[:, 2].max()], atol=1e-6)
    assert np.all(sc.atom_pos[:, 2] <= s.positions[:, 2].max() + 1e-9)


def test_cli_dislocation_default_view(tmp_path):
    r = _cli("render", "Cu", "--dislocation", "edge", "--defect-size", "8", "4", "1", "--style", "lattice",
             "--size", "300", "200", "-o", str(tmp_path / "d.png"), "--json")
    assert r.returncode == 0, r.stderr
    import json
    info = json.loads(r.stdout)
    assert info["view"] == "[-1-12]" and info["up"] == "[111]"


def test_tilt_boundary_default_view_lays_the_boundary_flat():
    # common practice: a tilt boundary is shown along its tilt axis, boundary plane edge-on and level
    from crystalview.render.scene_graph import auto_view

    c = cv.tilt_boundary("Fe", axis="[001]", plane="(310)")
    rec = [d for d in c.metadata["defects"] if d["kind"] == "tilt_boundary"][0]
    view, up = auto_view(c)
    assert view == rec["orient"][2] and up == rec["orient"][1]
    assert rec["sigma"] == 5
