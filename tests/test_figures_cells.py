"""Which cell a figure draws: the hexagonal prism of hcp / simple hexagonal
(render and glTF, with --cell primitive), and the stacking-layer colour of
every atom drawn, the copies on the cell faces included."""
from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import crystalview as cv
from crystalview import palette
from crystalview.errors import UserError
from crystalview.render import figure as F
from crystalview.render import scene_graph as G

pv = pytest.importorskip("pyvista")
pv.OFF_SCREEN = True
ROOT = Path(__file__).parents[1]


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "crystalview", *args], capture_output=True, text=True)


# ------------------------------------------------------------------ the hexagonal prism
def test_hcp_prism_atoms_places_and_shares():
    # common practice (any materials-science textbook's hcp cell, e.g. Callister & Rethwisch, from memory):
    # 12 corners shared by 6 prisms, 2 face centres by 2, 3 atoms inside: 12/6 + 2/2 + 3 = 6 atoms
    c = cv.build("Mg")
    sc = G.build_scene(c, "ball-and-stick")
    assert sc.n_atoms == 17
    places = sc.atom_place
    assert places.count("corner") == 12 and places.count("face centre") == 2 and places.count("inside") == 3
    shares = {p: set(np.round(sc.atom_frac_shown[[k for k, q in enumerate(places) if q == p]], 9))
              for p in set(places)}
    assert shares == {"corner": {round(1 / 6, 9)}, "face centre": {0.5}, "inside": {1.0}}
    assert abs(sc.atom_frac_shown.sum() - 6) < 1e-12
    # geometry, checked independently of crystalview.prism: the corners form two regular hexagons of side a,
    # c apart; the face centres sit on their axis; the inside atoms are half way up, a/sqrt(3) off the axis
    a, cc = c.lattice.a, c.lattice.c
    pos = sc.atom_pos
    fc = pos[[k for k, q in enumerate(places) if q == "face centre"]]
    axis = (fc[1] - fc[0]) / np.linalg.norm(fc[1] - fc[0])
    assert abs(np.linalg.norm(fc[1] - fc[0]) - cc) < 1e-9
    for k, q in enumerate(places):
        rel = pos[k] - fc[0]
        h = rel @ axis
        r = np.linalg.norm(rel - h * axis)
        if q == "corner":
            assert abs(r - a) < 1e-9 and min(abs(h), abs(h - cc)) < 1e-9
        elif q == "inside":
            assert abs(r - a / np.sqrt(3)) < 1e-9 and abs(h - cc / 2) < 1e-9
    assert len(sc.cell_edges) == 18
    assert "12 corners x 1/6 + 2 face centres x 1/2 + 3 inside x 1 = 6 atoms" in "\n".join(sc.caption)


def test_simple_hexagonal_prism_and_cut_shares():
    # common practice: the simple hexagonal prism holds 12/6 + 2/2 = 3 atoms
    h = cv.build("hex", element="Mg", a=3.2, c=3.0)
    sc = G.build_scene(h, "lattice")
    assert sc.n_atoms == 14 and abs(sc.atom_frac_shown.sum() - 3) < 1e-12
    # the spheres cut by the prism's 8 faces add up to the same atoms (volume is conserved: 3 primitive cells)
    m = G.build_scene(cv.build("Mg"), "cell-cut")
    assert abs(m.info["shares"]["Mg"] - 6) < 1e-3


def test_primitive_option_and_bad_cell_requests(tmp_path):
    c = cv.build("Mg")
    prim = G.build_scene(c, "ball-and-stick", "[001]", cell_shape="primitive")
    assert prim.n_atoms == 2 and len(prim.cell_edges) == 12
    with pytest.raises(UserError, match="hcp and"):
        G.build_scene(cv.build("Cu"), "ball-and-stick", cell_shape="prism")
    with pytest.raises(UserError, match="repeats"):
        G.build_scene(cv.build("Mg", repeat=(2, 2, 1)), "ball-and-stick", cell_shape="prism")
    with pytest.raises(UserError, match="unknown"):
        G.build_scene(c, "ball-and-stick", cell_shape="rhombus-ish")
    # repeats are drawn in their own cell
    assert G.build_scene(cv.build("Mg", repeat=(2, 2, 1)), "ball-and-stick").info.get("cell") is None
    r = _cli("render", "Cu", "--cell", "prism", "-o", str(tmp_path / "x.png"))
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and not (tmp_path / "x.png").exists()


def test_cli_render_mg_draws_the_prism_and_reports_the_view_used(tmp_path):
    # DESIGN contract: crystalview render Mg -> the hexagonal prism: 17 spheres drawn
    out = tmp_path / "mg.png"
    r = _cli("render", "Mg", "-o", str(out), "--size", "400", "300")
    assert r.returncode == 0, r.stderr
    assert "17 spheres drawn" in r.stdout
    info = cv.render(cv.build("Mg"), tmp_path / "mg.svg")
    sc = G.build_scene(cv.build("Mg"))
    assert info["view"] == sc.view.label and f"view along {info['view']}" in "\n".join(sc.caption)
    # the view is oblique: c up, looking a little down on the prism
    assert 10 < np.degrees(np.arcsin(sc.view.toward @ np.array([0, 0, 1.0]))) < 35
    assert info["view"] in r.stdout


def test_gltf_prism_and_primitive(tmp_path):
    from crystalview.exchange.gltf import gltf_document

    c = cv.build("Mg")
    doc, _ = gltf_document(c)
    ex = doc["asset"]["extras"]
    assert ex["spheres"] == 17 and ex["cell_drawn"] == "hexagonal prism"
    edges = [m for m in doc["meshes"] if m["name"] == "cell edges"][0]
    idx = doc["accessors"][edges["primitives"][0]["indices"]]
    assert idx["count"] == 36                                    # 18 edges
    doc, _ = gltf_document(c, cell_shape="primitive")
    assert doc["asset"]["extras"]["spheres"] == 2
    out = tmp_path / "mg.glb"
    cv.export(c, out)
    node = shutil.which("node")
    if node and (ROOT / "node_modules" / "gltf-validator").is_dir():
        # source: the Khronos glTF 2.0 validator (npm gltf-validator)
        rep = json.loads(subprocess.run([node, str(ROOT / "tests" / "gltf_validate.js"), str(out)],
                                        capture_output=True, text=True, timeout=120).stdout.splitlines()[0])
        assert rep["errors"] == 0


# ------------------------------------------------------------------ layer colours of every drawn atom
def _layer_letter_fcc(pos, a):
    """Independent stacking position of an fcc atom on (111): the (111) planes of an fcc cell with an
    atom at the origin are x + y + z = m a, stacked A, B, C, A ... (common practice: ABC stacking on {111})."""
    m = np.rint(pos.sum(axis=1) / a).astype(int)
    assert np.allclose(pos.sum(axis=1) / a, m, atol=1e-6)
    return np.array(list("ABC"))[m % 3]


@pytest.mark.parametrize("n", [1, 2, 3])
def test_layer_colour_of_every_drawn_atom(n):
    c = cv.build("Cu", repeat=(n, n, n))
    sc = G.build_scene(c, "ball-and-stick", "[001]", layers=True)
    want = _layer_letter_fcc(sc.atom_pos, c.lattice.a)
    got = np.array([{palette.LAYER_COLOURS[k]: k for k in "ABC"}[sc.colours[i]] for i in sc.atom_colour])
    assert (got == want).all(), (n, int((got != want).sum()))
    # one edge-on layer, one colour: seen along [1-10] with [111] up each row of the picture is one layer
    sc2 = G.build_scene(c, "ball-and-stick", "[1-10]", up="[111]", layers=True)
    h = np.round(sc2.view.project(sc2.atom_pos)[:, 1], 4)
    for level in np.unique(h):
        assert len({sc2.atom_colour[k] for k in np.nonzero(h == level)[0]}) == 1


def test_layer_colours_in_the_pixels():
    # the rendered disc of each front atom (nearest the viewer along [001]) shows its own layer's colour
    c = cv.build("Cu")
    sc = G.build_scene(c, "ball-and-stick", "[001]", layers=True)
    lay = F.make_layout(sc, (400, 400), legend=False, scale_bar=False, caption=False)
    img, _ = F.raster(sc, lay)
    q = lay.to_px(sc.view, sc.atom_pos)
    front = np.isclose(sc.atom_pos[:, 2], sc.atom_pos[:, 2].max())
    want = _layer_letter_fcc(sc.atom_pos, c.lattice.a)
    ref = {k: np.array(palette.hex_to_rgb(palette.LAYER_COLOURS[k])) * 255 for k in "ABC"}
    for k in np.nonzero(front)[0]:
        x, y = int(round(q[k, 0])), int(round(q[k, 1]))
        r = max(2, int(0.4 * sc.atom_radius[k] * lay.scale))
        px = np.median(img[y - r:y + r, x - r:x + r, :3].reshape(-1, 3).astype(float), axis=0)
        nearest = min(ref, key=lambda L: np.abs(px - ref[L]).sum())
        assert nearest == want[k], (k, px, want[k])


def test_hcp_prism_layers():
    # common practice: hcp stacks AB on (0001); in the prism the top and bottom hexagons are A, the inside B
    sc = G.build_scene(cv.build("Mg"), "ball-and-stick", layers=True)
    letters = [{palette.LAYER_COLOURS[k]: k for k in "ABC"}[sc.colours[i]] for i in sc.atom_colour]
    for p, L in zip(sc.atom_place, letters):
        assert L == ("B" if p == "inside" else "A")


def test_small_cubic_cells_drawn_obliquely_with_c_up(tmp_path):
    """One or two cells of a cubic metal are drawn from a little above, c up, off the mirror planes (the
    usual oblique picture of a unit cell; common practice), and the view drawn is the one reported; a
    3 x 3 x 3 crystal is seen down [001] as before."""
    import math
    import re

    from crystalview.render.cells import oblique_cell_view
    from crystalview.render.figure import render

    for spec, kw in (("Cu", {}), ("Fe", {}), ("Cu", {"repeat": (2, 2, 2)}), ("NiAl", {})):
        c = cv.build(spec, **kw)
        view, up = oblique_cell_view(c)
        assert up == "[001]"
        u, v, w = (int(x) for x in re.findall(r"-?\d", view))        # one digit each: indices up to 5
        elevation = math.degrees(math.asin(w / math.sqrt(u * u + v * v + w * w)))
        azimuth = math.degrees(math.atan2(v, u)) % 45.0
        assert 12 <= elevation <= 28 and min(azimuth, 45 - azimuth) >= 8, (spec, view)
        info = render(c, tmp_path / f"{spec}{len(c)}.svg", caption=True)
        assert info["view"] == view and info["up"] == "[001]"
    assert render(cv.build("Cu", repeat=(3, 3, 3)), tmp_path / "big.svg")["view"] == "[001]"
    assert render(cv.build("Cu"), tmp_path / "asked.svg", view="[001]")["view"] == "[001]"
    # every atom drawn in the default view of one Cu cell stands apart on the page
    from crystalview.render.scene_graph import build_scene

    sc = build_scene(cv.build("Cu"))
    q = sc.atom_pos @ np.stack([sc.view.right, sc.view.up], axis=1)
    d = np.linalg.norm(q[:, None] - q[None], axis=2) + np.eye(len(q)) * 1e9
    assert len(q) == 14 and d.min() > 0.6 * cv.build("Cu").atom_radii().min()
