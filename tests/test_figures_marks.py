"""The feature a figure is about is marked, inside the frame and not hidden
(pixel tests on the PNG), and the view reported is the view drawn."""
from __future__ import annotations

import numpy as np
import pytest

import crystalview as cv
from crystalview import palette
from crystalview.render import figure as F
from crystalview.render import scene_graph as G

pv = pytest.importorskip("pyvista")
pv.OFF_SCREEN = True


def _near(img, pts, hexc, tol=90):
    """Share of the points (pixels) whose 3x3 neighbourhood holds the colour ``hexc``."""
    rgb = np.array(palette.hex_to_rgb(hexc)) * 255
    H, W = img.shape[:2]
    hit = 0
    for x, y in pts:
        x, y = int(round(x)), int(round(y))
        assert 0 <= x < W and 0 <= y < H, (x, y, W, H)            # inside the frame
        patch = img[max(0, y - 1):y + 2, max(0, x - 1):x + 2, :3].reshape(-1, 3).astype(float)
        hit += bool((np.abs(patch - rgb).sum(axis=1) < tol).any())
    return hit / max(len(pts), 1)


def _draw(crystal, style="ball-and-stick", **kw):
    sc = G.build_scene(crystal, style, **kw)
    lay = F.make_layout(sc, (700, None), dpi=200)
    img, _ = F.raster(sc, lay)
    return sc, lay, img


def _line_pixels(sc, lay, group_label):
    out = []
    for ln in sc.lines:
        if ln["label"] != group_label:
            continue
        for a, b in np.asarray(ln["segments"], float):
            for t in np.linspace(0.2, 0.8, 3):
                out.append(lay.to_px(sc.view, (a + t * (b - a))[None])[0, :2])
    return out


def test_vacancies_visible_behind_space_filling_atoms():
    c = cv.add_vacancies(cv.build("Cu", repeat=(2, 2, 2)), count=2, seed=3)
    sc, lay, img = _draw(c, "space-filling", view="[001]")
    mk = sc.markers[0]
    assert len(mk["pos"]) == 2
    for p in mk["pos"]:
        x, y, _ = lay.to_px(sc.view, p[None])[0]
        r = mk["radius"] * lay.scale
        ring = [(x + r * np.cos(t), y + r * np.sin(t)) for t in np.linspace(0, 2 * np.pi, 24, endpoint=False)]
        assert _near(img, ring, palette.ROLE_COLOURS["vacancy"]) > 0.8


@pytest.mark.parametrize("what", ["dislocation", "tilt", "fault"])
def test_defect_features_marked_and_visible(what):
    colour = palette.ROLE_COLOURS["direction"]
    if what == "dislocation":
        from crystalview.defects.dislocation import dislocation
        c, label = dislocation(cv.build("Cu"), "edge"), "dislocation core"
    elif what == "tilt":
        c, label = cv.tilt_boundary("Cu", axis="[001]", plane="(310)"), "grain boundary"
    else:
        c, label = cv.stack("Ni", "intrinsic", repeat=(4, 3)), "stacking fault"
    sc, lay, img = _draw(c, "lattice")          # the default view
    pts = _line_pixels(sc, lay, label)
    assert pts, f"no {label} mark"
    assert _near(img, pts, colour) > 0.9
    assert any(e[0].startswith(label.split()[0]) or label.split()[1] in e[0] for e in sc.legend)


def test_stacking_fault_default_view_is_edge_on():
    # common practice: a stacking fault is shown edge-on, along a close-packed row, stacking normal up
    c = cv.stack("Ni", "intrinsic", repeat=(4, 3))
    sc = G.build_scene(c)
    n = np.array([0, 0, 1.0])                 # the stack's layers lie in xy
    assert abs(sc.view.toward @ n) < 1e-9 and sc.view.up @ n > 0.999


def test_one_interstitial_keeps_the_host_sticks():
    # source: Callister & Rethwisch, BCC nearest neighbours at a sqrt(3)/2 (8 of them)
    fe = cv.build("Fe")
    c = fe.add_atoms([[fe.lattice.a / 2, fe.lattice.a / 2, 0.0]], ["C"], role="interstitial")
    sc = G.build_scene(c, "ball-and-stick", "[001]")
    host = c.roles[sc.atom_src] == 0
    d = np.linalg.norm(sc.atom_pos[sc.bond_atoms[:, 0]] - sc.atom_pos[sc.bond_atoms[:, 1]], axis=1)
    hh = host[sc.bond_atoms[:, 0]] & host[sc.bond_atoms[:, 1]]
    assert np.sum(hh & (np.abs(d - fe.lattice.a * np.sqrt(3) / 2) < 1e-6)) >= 8


def test_site_polyhedra_name_their_true_corners():
    # source: Smallman & Ngan: a tetrahedral hole has 4 neighbours, an octahedral hole 6
    for el in ("Cu", "Fe"):
        sc = G.build_scene(cv.build(el), "ball-and-stick", "[001]", polyhedra="sites")
        labels = [e[0] for e in sc.legend if "polyhedron" in e[0]]
        for lab in labels:
            if lab.startswith("tetrahedral"):
                assert "(4 corners)" in lab, lab
            if lab.startswith("octahedral"):
                assert "(6 corners)" in lab, lab


def test_plane_visible_over_space_filling_and_shown_obliquely():
    c = cv.build("Cu")
    sc, lay, img = _draw(c, "space-filling", planes=["(111)"])
    # not along [001], where (111) would be seen flat; the cell reads as a box
    assert abs(sc.view.toward @ np.array([0, 0, 1.0])) < 0.95
    pts = _line_pixels(sc, lay, "plane (111) (outline)")
    assert _near(img, pts, G.S.darker_hex(palette.ROLE_COLOURS["plane"], 0.75)) > 0.9
    assert f"view along {sc.view.label}" in "\n".join(sc.caption)


def test_reported_view_is_the_view_drawn(tmp_path):
    # sites in a cubic crystal are shown along [013]: the info, the caption and the command's line say so
    info = cv.render(cv.build("Cu"), tmp_path / "s.svg", sites=True)
    sc = G.build_scene(cv.build("Cu"), sites=True)
    assert info["view"] == sc.view.label == "[013]"
    assert "view along [013]" in "\n".join(sc.caption)
    assert "[013]" in (tmp_path / "s.svg").read_text()
