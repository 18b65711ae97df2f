"""Printable models: watertight solids, packing factors of clipped cells,
printability checks, kit mode, the print report and the command line."""
from __future__ import annotations

import json
import re
import os
import subprocess
import sys
import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path

import numpy as np
import pytest
import trimesh

import crystalview as cv
from crystalview.errors import LimitError, UserError
from crystalview.palette import ROLE_COLOURS

ROOT = Path(__file__).resolve().parents[1]
SCALE = 10.0


def _stl(path):
    m = trimesh.load(str(path), force="mesh")   # trimesh's own STL reader, independent of our writer
    return m


def _read_3mf(path):
    """Vertices, faces, per-face colour and the units of every object in a 3MF,
    read with zipfile + ElementTree (not with our writer's code)."""
    ns = {"c": "http://schemas.microsoft.com/3dmanufacturing/core/2015/02",
          "m": "http://schemas.microsoft.com/3dmanufacturing/material/2015/02"}
    with zipfile.ZipFile(path) as z:
        names = z.namelist()
        root = ET.fromstring(z.read("3D/3dmodel.model"))
    assert "[Content_Types].xml" in names and "_rels/.rels" in names
    bases = [b.get("displaycolor") for b in root.findall(".//m:basematerials/m:base", ns)]
    objects = []
    for obj in root.findall(".//c:object", ns):
        v = np.array([[float(e.get(k)) for k in "xyz"] for e in obj.findall(".//c:vertex", ns)])
        tris = obj.findall(".//c:triangle", ns)
        f = np.array([[int(t.get(k)) for k in ("v1", "v2", "v3")] for t in tris])
        default = int(obj.get("pindex", 0))
        col = [bases[int(t.get("p1", default))] for t in tris]
        objects.append((trimesh.Trimesh(v, f, process=True), col))
    return root.get("unit"), bases, objects


# ---------------------------------------------------------------- packing factors of clipped cells
@pytest.mark.parametrize("spec,kw,apf", [
    ("fcc", dict(element="Cu"), 0.7405),   # source: Callister & Rethwisch, APF of FCC = 0.74
    ("bcc", dict(element="Fe"), 0.6802),   # source: Callister & Rethwisch, APF of BCC = 0.68
    ("sc", dict(element="Po"), 0.5236),    # source: Callister & Rethwisch, APF of SC = 0.52 (pi/6)
])
def test_clipped_cell_volume_is_packing_factor(tmp_path, spec, kw, apf):
    c = cv.build(spec, **kw)
    out = tmp_path / f"{spec}.stl"
    rep = cv.print_model(c, out, style="space-filling", clip_to_cell=True, scale=SCALE)
    m = _stl(out)
    # checked by trimesh on the file as written
    assert m.is_watertight and m.is_volume
    assert m.body_count == 1
    cell_mm3 = c.volume * SCALE ** 3
    assert m.volume / cell_mm3 == pytest.approx(apf, rel=0.01)
    assert rep["volume_fraction_of_cell"] == pytest.approx(apf, rel=0.01)
    # extents equal the scaled cubic cell
    np.testing.assert_allclose(m.extents, [c.cell[0, 0] * SCALE] * 3, atol=0.02)
    # laid flat: bottom face on z = 0
    assert m.bounds[0, 2] == pytest.approx(0.0, abs=1e-4)


# ---------------------------------------------------------------- ball-and-stick, 3MF colours, report
def test_ball_and_stick_3mf_colours_units_report(tmp_path):
    c = cv.build("Cu")
    out = tmp_path / "cu.3mf"
    rep = cv.print_model(c, out, base=False, edges=False)   # the bare balls and rods
    unit, bases, objects = _read_3mf(out)
    assert unit == "millimeter"
    assert len(objects) == 1
    mesh, col = objects[0]
    assert mesh.is_watertight and mesh.is_volume and mesh.body_count == 1
    # the palette's host and bond colours survive, per triangle
    host = ROLE_COLOURS["host"].upper() + "FF"
    bond = ROLE_COLOURS["bond"].upper() + "FF"
    assert set(col) == {host, bond}
    # report facts agree with trimesh's measurements of the file
    assert rep["watertight"] and rep["bodies"] == 1
    assert rep["triangles"] == len(mesh.faces)
    assert rep["volume_cm3"] == pytest.approx(mesh.volume / 1000, rel=1e-6)
    assert rep["mass_g"] == pytest.approx(rep["volume_cm3"] * 1.24, rel=1e-9)   # PLA 1.24 g/cm^3, common practice
    np.testing.assert_allclose(rep["bounding_box_mm"], mesh.extents, atol=1e-3)
    # cube of balls: a + 2 x ball radius along each axis, laid flat on a cube face
    ball = 0.45 * c.species_radii["Cu"] * SCALE
    # (within 0.2 mm: the volume-preserving tessellation reaches slightly past the nominal sphere)
    np.testing.assert_allclose(mesh.extents, [c.cell[0, 0] * SCALE + 2 * ball] * 3, atol=0.2)
    text = (tmp_path / "cu.report.txt").read_text()
    assert re.search(r"watertight +yes", text) and re.search(r"bodies +1\n", text)
    assert cv.CAUTION in text and "load-bearing" in text


def test_base_plate_flat_bottom(tmp_path):
    c = cv.build("Fe")
    out = tmp_path / "fe.stl"
    rep = cv.print_model(c, out, base=True)
    m = _stl(out)
    assert m.is_watertight and m.body_count == 1
    z0 = m.vertices[:, 2].min()
    assert z0 == pytest.approx(0.0, abs=1e-4)
    # the plate gives a flat bottom wider than the balls' footprint
    bottom = m.vertices[np.abs(m.vertices[:, 2] - z0) < 1e-4]
    assert np.ptp(bottom[:, 0]) > c.cell[0, 0] * SCALE
    assert any("base plate" in a for a in rep["adjustments"])


def test_orientation_needs_least_support(tmp_path):
    # an oriented Cu bar: the face chosen to stand on gives no more overhang
    # than any other box face down, measured independently with trimesh
    c = cv.build("Cu", repeat=(3, 1, 1))
    out = tmp_path / "bar.stl"
    rep = cv.print_model(c, out, scale=6, base=False, edges=False)
    m = _stl(out)
    s = np.sin(np.radians(45))            # common practice: 45 deg from vertical prints unsupported

    def overhang(normals):
        return m.area_faces[normals[:, 2] < -s].sum()

    chosen = overhang(m.face_normals)
    for axis in range(3):
        for sign in (1, -1):
            R = trimesh.geometry.align_vectors(np.eye(3)[axis] * sign, [0, 0, -1])[:3, :3]
            # (within 2 % of the least overhang the largest, steadiest face wins)
            assert chosen <= overhang(m.face_normals @ R.T) * 1.025 + 1e-6
    assert "face down" in rep["orientation"]


# ---------------------------------------------------------------- printability
def test_thin_rods_are_thickened(tmp_path):
    c = cv.build("Cu")
    rep = cv.print_model(c, tmp_path / "s.stl", scale=4.0, min_feature=2.0)
    assert any("thickened" in a for a in rep["adjustments"])
    assert rep["watertight"]


def test_balls_below_min_feature_refused(tmp_path):
    out = tmp_path / "tiny.stl"
    with pytest.raises(UserError, match="minimum feature"):
        cv.print_model(cv.build("Cu"), out, scale=1.0)
    assert not out.exists() and not (tmp_path / "tiny.report.txt").exists()


def test_bed_and_one_metre_refused(tmp_path):
    out = tmp_path / "big.stl"
    with pytest.raises(UserError, match="larger than the bed"):
        cv.print_model(cv.build("Cu", repeat=(3, 3, 3)), out, scale=30)
    with pytest.raises(UserError, match="over 1 m"):
        cv.print_model(cv.build("Cu", repeat=(3, 3, 3)), out, scale=200, bed=(5000, 5000, 5000))
    assert not out.exists()


def test_triangle_cap_refused_before_work(tmp_path):
    import time

    c = cv.build("Cu", repeat=(40, 40, 40))
    out = tmp_path / "never.stl"
    t = time.perf_counter()
    with pytest.raises(LimitError, match=r"about [\d,]+ triangles"):
        cv.print_model(c, out, scale=1.0, min_feature=0.4, bed=(5000, 5000, 5000))
    assert time.perf_counter() - t < 5
    assert not out.exists()
    # the cap is overridable: a small model under a tiny cap is refused, then passes with a larger one
    with pytest.raises(LimitError, match="--max-triangles"):
        cv.print_model(cv.build("Fe"), out, max_triangles=1000)
    assert cv.print_model(cv.build("Fe"), out, max_triangles=10**6)["watertight"]


def test_existing_file_needs_force(tmp_path):
    out = tmp_path / "m.stl"
    out.write_bytes(b"old")
    with pytest.raises(UserError, match="already exists"):
        cv.print_model(cv.build("Fe"), out)
    assert out.read_bytes() == b"old"
    cv.print_model(cv.build("Fe"), out, force=True)
    assert _stl(out).is_watertight


def test_bad_options(tmp_path):
    c = cv.build("Fe")
    with pytest.raises(UserError, match="space-filling"):
        cv.print_model(c, tmp_path / "a.stl", clip_to_cell=True)
    with pytest.raises(UserError, match="unknown style"):
        cv.print_model(c, tmp_path / "a.stl", style="sticks")
    with pytest.raises(UserError, match="unknown file type"):
        cv.print_model(c, tmp_path / "a.obj")
    with pytest.raises(UserError, match="does not exist"):
        cv.print_model(c, tmp_path / "no" / "a.stl")


# ---------------------------------------------------------------- kit
def test_kit_parts(tmp_path):
    c = cv.build("Cu")
    out = tmp_path / "kit.3mf"
    rep = cv.print_model(c, out, kit=True, clearance=0.25)
    unit, bases, objects = _read_3mf(out)
    assert unit == "millimeter"
    # FCC conventional cell: 8 corners + 6 face centres, 24 corner-face + 12
    # face-face nearest-neighbour bonds (counted by hand from the cell geometry)
    balls = [o for o in objects if len(o[0].faces) > 500]
    assert len(objects) == 14 + 36 == rep["bodies"]
    for mesh, _ in objects:
        assert mesh.is_watertight and mesh.is_volume and mesh.body_count == 1
    counts = {p["part"]: p["count"] for p in rep["parts"]}
    assert sum(v for k, v in counts.items() if k.startswith("ball")) == 14
    assert counts["rod"] == 36
    rod = [p for p in rep["parts"] if p["part"] == "rod"][0]
    ball = [p for p in rep["parts"] if p["part"].startswith("ball")][0]
    # hole = rod + 2 x clearance; rods no thinner than the minimum feature
    assert ball["hole_diameter_mm"] == pytest.approx(rod["diameter_mm"] + 0.5, abs=0.01)
    assert rod["diameter_mm"] >= 2.0
    # holes remove material: a bored ball weighs less than a whole one with the flat
    assert len(balls) == 14
    # every part fits the bed
    assert all(x <= 220 for x in rep["bounding_box_mm"][:2])


# ---------------------------------------------------------------- command line
def _cli(*args, cwd):
    return subprocess.run([sys.executable, "-m", "crystalview", *args], cwd=cwd, capture_output=True, text=True,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})


def test_cli_print_json_and_errors(tmp_path):
    r = _cli("print", "Fe", "-o", "fe.stl", "--json", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    rep = json.loads(r.stdout)
    assert rep["watertight"] is True and rep["bodies"] == 1
    assert (tmp_path / "fe.stl").exists() and (tmp_path / "fe.report.txt").exists()
    r = _cli("print", "Fe", "-o", "fe.stl", cwd=tmp_path)
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "--force" in r.stderr
    r = _cli("print", "Cu", "--repeat", "3", "3", "3", "--scale", "40", "-o", "b.stl", cwd=tmp_path)
    assert r.returncode == 2 and "bed" in r.stderr and not (tmp_path / "b.stl").exists()
    r = _cli("print", "Cu", "--min-feature", "0.1", "-o", "c.stl", cwd=tmp_path)
    assert r.returncode == 2 and "minimum feature" in r.stderr and not (tmp_path / "c.stl").exists()


def test_no_renderer_imports():
    code = ("import sys, tempfile, os, crystalview as cv\n"
            "d = tempfile.mkdtemp()\n"
            "cv.print_model(cv.build('Fe'), os.path.join(d, 'a.stl'))\n"
            "cv.export(cv.build('Fe'), os.path.join(d, 'a.glb'))\n"
            "bad = [m for m in sys.modules if m.startswith(('vtk', 'pyvista', 'crystalview.render'))]\n"
            "assert not bad, bad\n")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                       env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert r.returncode == 0, r.stderr
