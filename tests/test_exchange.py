"""Exchange files: glTF/GLB checked by the Khronos validator, 3MF colours and
units, STL, CIF round trip through gemmi and spglib, extended XYZ, and the
dispatch by extension."""
from __future__ import annotations

import json
import os
import shutil
import struct
import subprocess
import sys
import zipfile
from pathlib import Path

import numpy as np
import pytest
import trimesh

import crystalview as cv
from crystalview.errors import UserError
from crystalview.palette import ROLE_COLOURS, hex_to_rgb

ROOT = Path(__file__).resolve().parents[1]
VALIDATOR = "gltf-validator@2.0.0-dev.3.10"   # the Khronos glTF validator on npm (only 2.0.0-dev releases exist)


# ---------------------------------------------------------------- Khronos validator
@pytest.fixture(scope="module")
def validate():
    """A function running the Khronos glTF validator (node) on files; installs
    the npm package into the repository's node_modules/ if missing."""
    if shutil.which("node") is None or shutil.which("npm") is None:
        pytest.skip("node/npm not installed: cannot run the Khronos glTF validator")
    if not (ROOT / "node_modules" / "gltf-validator").is_dir():
        r = subprocess.run(["npm", "install", "--no-save", "--silent", VALIDATOR], cwd=ROOT,
                           capture_output=True, text=True, timeout=600)
        if r.returncode != 0:
            pytest.fail(f"npm install {VALIDATOR} failed: {r.stderr.strip()[-500:]}")

    def run(*files):
        r = subprocess.run(["node", str(ROOT / "tests" / "gltf_validate.js"), *map(str, files)], cwd=ROOT,
                           capture_output=True, text=True, timeout=120)
        out = [json.loads(line) for line in r.stdout.splitlines() if line.startswith("{")]
        assert len(out) == len(files), r.stderr
        return out

    return run


def _glb_json(path):
    data = Path(path).read_bytes()
    magic, version, total = struct.unpack("<III", data[:12])
    assert magic == 0x46546C67 and version == 2 and total == len(data)
    n, kind = struct.unpack("<II", data[12:20])
    assert kind == 0x4E4F534A
    doc = json.loads(data[20:20 + n])
    m, kind2 = struct.unpack("<II", data[20 + n:28 + n])
    assert kind2 == 0x004E4942
    return doc, data[28 + n:28 + n + m]


def _accessor(doc, blob, k):
    a = doc["accessors"][k]
    v = doc["bufferViews"][a["bufferView"]]
    width = {"SCALAR": 1, "VEC3": 3, "VEC4": 4}[a["type"]]
    dt = {5126: np.float32, 5123: np.uint16, 5125: np.uint32}[a["componentType"]]
    arr = np.frombuffer(blob, dtype=dt, count=a["count"] * width, offset=v["byteOffset"] + a.get("byteOffset", 0))
    return arr.reshape(a["count"], width) if width > 1 else arr


def test_gltf_files_pass_khronos_validator(tmp_path, validate):
    c = cv.build("Cu")
    files = [tmp_path / "cu.glb", tmp_path / "cu.gltf", tmp_path / "fe_inst.glb", tmp_path / "ni3al.glb",
             tmp_path / "big.glb", tmp_path / "real.glb"]
    cv.export(c, files[0])
    cv.export(c, files[1], style="space-filling")
    cv.export(cv.build("Fe"), files[2], instancing="on")
    cv.export(cv.build("Ni3Al"), files[3])
    cv.export(cv.build("Cu", repeat=(8, 8, 8)), files[4])       # over the threshold: instanced
    cv.export(cv.build("Ti"), files[5], real_scale=True)
    reports = validate(*files)
    for r in reports:
        assert r["errors"] == 0, r["messages"]       # source: Khronos glTF validator
        assert r["warnings"] == 0, r["messages"]


def test_gltf_content_units_materials_instancing(tmp_path):
    c = cv.build("Cu", repeat=(8, 8, 8))
    out = tmp_path / "big.glb"
    info = cv.export(c, out)
    doc, blob = _glb_json(out)
    assert info["instancing"] and "EXT_mesh_gpu_instancing" in doc["extensionsRequired"]
    ex = doc["asset"]["extras"]
    assert ex["metres_per_angstrom"] == 0.01 and "1 cm" in ex["scale"]
    # one material per role / element, colours = palette sRGB converted to linear (glTF 2.0 spec, sRGB EOTF)
    mats = {m["name"]: m["pbrMetallicRoughness"]["baseColorFactor"][:3] for m in doc["materials"]}
    assert set(mats) == {"Cu (host)", "bond", "cell edges"}
    srgb = np.array(hex_to_rgb(ROLE_COLOURS["host"]))
    lin = np.where(srgb <= 0.04045, srgb / 12.92, ((srgb + 0.055) / 1.055) ** 2.4)
    np.testing.assert_allclose(mats["Cu (host)"], lin, rtol=1e-6)
    names = {n["name"] for n in doc["nodes"]}
    assert {"Cu atoms (host)", "bonds", "unit cell"} <= names
    atoms = [n for n in doc["nodes"] if n["name"] == "Cu atoms (host)"][0]
    inst = atoms["extensions"]["EXT_mesh_gpu_instancing"]["attributes"]
    t = _accessor(doc, blob, inst["TRANSLATION"])
    assert len(t) == ex["spheres"] == 9 * 9 * 9 + 3 * 8 * 8 * 9   # 8x8x8 FCC with its boundary images
    assert ex["atoms"] == len(c) == 4 * 8 ** 3
    # metres, +Y up: the crystal's 8a edge is 8 x 3.6149 A x 0.01 m/A
    a8 = c.cell[0, 0] * 0.01
    np.testing.assert_allclose(t.max(axis=0) - t.min(axis=0), [a8, a8, a8], atol=1e-5)
    bonds = [n for n in doc["nodes"] if n["name"] == "bonds"][0]["extensions"]["EXT_mesh_gpu_instancing"]["attributes"]
    q = _accessor(doc, blob, bonds["ROTATION"])
    np.testing.assert_allclose(np.linalg.norm(q, axis=1), 1.0, atol=1e-5)
    s = _accessor(doc, blob, bonds["SCALE"])
    # every bond is one nearest-neighbour distance a / sqrt(2) long (FCC geometry)
    np.testing.assert_allclose(s[:, 1], c.cell[0, 0] / 8 / 2 ** 0.5 * 0.01, rtol=1e-5)
    # large crystals stay small: well under 100 bytes per atom + bond
    assert out.stat().st_size < 100 * (ex["spheres"] + ex["bonds"])


def test_gltf_sphere_faces_outward():
    from crystalview.exchange.gltf import unit_rod, unit_sphere

    p, n, i = unit_sphere()
    m = trimesh.Trimesh(p, i.reshape(-1, 3), process=True)
    assert m.is_watertight and m.volume > 0                 # outward winding (trimesh)
    p, n, i = unit_rod()
    cen = trimesh.Trimesh(p, i.reshape(-1, 3), process=False).triangles_center
    fn = trimesh.Trimesh(p, i.reshape(-1, 3), process=False).face_normals
    radial = cen * [1, 0, 1]
    assert np.all(np.einsum("ij,ij->i", fn, radial) > 0)


# ---------------------------------------------------------------- 3MF and STL through export()
def test_export_3mf_colours_and_stl(tmp_path):
    c = cv.build("Ni3Al")
    out = tmp_path / "n.3mf"
    info = cv.export(c, out, style="space-filling")
    assert info["watertight"] and info["bodies"] == 1
    assert not (tmp_path / "n.report.txt").exists()       # export writes only the file asked for
    with zipfile.ZipFile(out) as z:
        xml = z.read("3D/3dmodel.model").decode()
    import xml.etree.ElementTree as ET

    root = ET.fromstring(xml)
    assert root.get("unit") == "millimeter"
    ns = {"m": "http://schemas.microsoft.com/3dmanufacturing/material/2015/02"}
    names = {b.get("name"): b.get("displaycolor") for b in root.findall(".//m:base", ns)}
    # two host elements: element series colours; both present
    assert {"Ni (host)", "Al (host)"} <= set(names)
    used = {int(t.get("p1")) for t in root.iter() if t.tag.endswith("triangle")}
    assert len(used) >= 2
    stl = tmp_path / "n.stl"
    cv.export(c, stl, scale=8)
    m = trimesh.load(str(stl), force="mesh")
    assert m.is_watertight and m.is_volume


# ---------------------------------------------------------------- CIF
def test_cif_round_trip_gemmi_and_spglib(tmp_path):
    import gemmi
    import spglib

    for spec in ("Ti", "Fe", "Ni3Al", "Cu"):
        c = cv.build(spec)
        out = tmp_path / f"{spec}.cif"
        cv.export(c, out)
        # independent reader: gemmi
        st = gemmi.make_small_structure_from_block(gemmi.cif.read(str(out)).sole_block())
        from crystalview.lattice import cell_parameters

        a, b, cc, al, be, ga = cell_parameters(c.cell)
        assert st.cell.a == pytest.approx(a, abs=1e-5) and st.cell.c == pytest.approx(cc, abs=1e-5)
        assert st.cell.gamma == pytest.approx(ga, abs=1e-4)
        assert len(st.get_all_unit_cell_sites()) == len(c)
        # symmetry unchanged (spglib)
        back = cv.read_cif(out)
        s0 = spglib.get_symmetry_dataset((c.cell, c.frac, c.numbers.astype(int)), symprec=1e-3)
        s1 = spglib.get_symmetry_dataset((back.cell, back.frac, back.numbers.astype(int)), symprec=1e-3)
        assert s0.number == s1.number
        assert sorted(back.symbols) == sorted(c.symbols)
        assert back.lattice.prototype == c.lattice.prototype      # the lattice type is recognised from the atoms


def test_cif_asymmetric_unit_expanded(tmp_path):
    p = tmp_path / "cu.cif"
    # Cu, a = 3.6149 A (source: Kittel, Introduction to Solid State Physics), one site 4a at 0 0 0
    p.write_text("data_Cu\n_cell_length_a 3.6149\n_cell_length_b 3.6149\n_cell_length_c 3.6149\n"
                 "_cell_angle_alpha 90\n_cell_angle_beta 90\n_cell_angle_gamma 90\n"
                 "_symmetry_space_group_name_H-M 'F m -3 m'\n"
                 "loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n_atom_site_fract_y\n"
                 "_atom_site_fract_z\nCu1 Cu 0 0 0\n")
    c = cv.build(str(p))
    assert len(c) == 4          # source: International Tables Vol. A, Fm-3m Wyckoff 4a multiplicity 4
    assert c.lattice.family == "cubic" and c.lattice.space_group == 225
    assert cv.symmetry(c)[1] == 225
    # one species: half the nearest-neighbour distance a / (2 sqrt 2)
    assert c.species_radii["Cu"] == pytest.approx(3.6149 / (2 * 2 ** 0.5), rel=1e-6)
    # a CIF is a SPEC everywhere: it prints
    rep = cv.print_model(c, tmp_path / "cu.stl")
    assert rep["watertight"]


def test_malformed_cif_one_line(tmp_path):
    bad = tmp_path / "bad.cif"
    bad.write_text('this is "not a cif\n')
    with pytest.raises(UserError) as e:
        cv.read_cif(bad)
    assert "\n" not in str(e.value)
    empty = tmp_path / "empty.cif"
    empty.write_text("data_x\n_cell_length_a 3\n_cell_length_b 3\n_cell_length_c 3\n")
    with pytest.raises(UserError, match="no atoms|no valid unit cell|whole cell"):
        cv.read_cif(empty)
    r = subprocess.run([sys.executable, "-m", "crystalview", "export", str(bad), "-o", str(tmp_path / "x.xyz")],
                       capture_output=True, text=True, env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert r.returncode == 2 and r.stderr.count("\n") == 1
    assert not (tmp_path / "x.xyz").exists()


# ---------------------------------------------------------------- XYZ
def test_extended_xyz(tmp_path):
    c = cv.build("Fe", repeat=(2, 1, 1))
    out = tmp_path / "fe.xyz"
    cv.export(c, out)
    lines = out.read_text().splitlines()
    assert int(lines[0]) == len(c)
    import shlex

    head = dict(kv.split("=", 1) for kv in shlex.split(lines[1]))
    np.testing.assert_allclose(np.array(head["Lattice"].split(), float).reshape(3, 3), c.cell, atol=1e-7)
    assert head["Properties"] == "species:S:1:pos:R:3:role:S:1"
    rows = [ln.split() for ln in lines[2:]]
    assert len(rows) == len(c) and all(r[0] == "Fe" and r[4] == "host" for r in rows)
    np.testing.assert_allclose(np.array([r[1:4] for r in rows], float), c.positions, atol=1e-7)


# ---------------------------------------------------------------- dispatch and bad input
def test_dispatch_and_bad_input(tmp_path):
    from crystalview.exchange import FORMATS

    assert set(FORMATS) == {".glb", ".gltf", ".cif", ".xyz", ".stl", ".3mf", ".html"}
    c = cv.build("Fe")
    with pytest.raises(UserError, match="unknown file type"):
        cv.export(c, tmp_path / "a.pdb")
    with pytest.raises(UserError, match="does not apply"):
        cv.export(c, tmp_path / "a.cif", real_scale=True)
    p = tmp_path / "a.glb"
    p.write_bytes(b"keep")
    with pytest.raises(UserError, match="already exists"):
        cv.export(c, p)
    assert p.read_bytes() == b"keep"
    cv.export(c, p, force=True)
    assert p.read_bytes()[:4] == b"glTF"
    with pytest.raises(UserError, match="does not exist"):
        cv.export(c, tmp_path / "missing" / "a.xyz")
    # no temporary files left behind
    assert not [f for f in os.listdir(tmp_path) if ".tmp-" in f]


def test_cli_export(tmp_path):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    r = subprocess.run([sys.executable, "-m", "crystalview", "export", "Cu", "-o", "cu.glb", "--json"], cwd=tmp_path,
                       capture_output=True, text=True, env=env)
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["atoms"] == 4 and json.loads(r.stdout)["spheres"] == 14   # with face images
    r = subprocess.run([sys.executable, "-m", "crystalview", "export", "Cu", "-o", "cu.glb"], cwd=tmp_path,
                       capture_output=True, text=True, env=env)
    assert r.returncode == 2 and "already exists" in r.stderr


# ---------------------------------------------------------------- CIF with its space group
# Space-group numbers: International Tables for Crystallography Vol. A (Cu, Ni Fm-3m 225; alpha-Fe Im-3m 229;
# alpha-Ti P6_3/mmc 194; Ni3Al L1_2 Pm-3m 221; TiAl L1_0 P4/mmm 123; Si diamond Fd-3m 227).
# Independent oracles: gemmi reads and expands the file, spglib finds the group of what gemmi expanded.
SPACE_GROUPS = [("Cu", {}, 225), ("Fe", {}, 229), ("Ti", {}, 194), ("Ni3Al", {}, 221), ("Si", {}, 227)]


def _gemmi_expand(path):
    import gemmi

    st = gemmi.make_small_structure_from_block(gemmi.cif.read(str(path)).sole_block())
    sites = st.get_all_unit_cell_sites()
    frac = np.array([[s.fract.x, s.fract.y, s.fract.z] for s in sites]) % 1.0
    nums = np.array([s.element.atomic_number for s in sites])
    return st, np.array(st.cell.orth.mat).T, frac, nums


@pytest.mark.parametrize("spec,kw,number", SPACE_GROUPS, ids=[f"{s}{'x2' if k else ''}" for s, k, _ in SPACE_GROUPS])
def test_cif_written_with_space_group(tmp_path, spec, kw, number):
    import spglib

    c = cv.build(spec, **kw)
    out = tmp_path / f"{spec}.cif"
    info = cv.export(c, out)
    assert info["space_group_number"] == number and info["sites_listed"] < len(c)
    text = out.read_text()
    assert "_space_group_symop_operation_xyz" in text and f"_space_group_IT_number {number}" in text
    st, cell, frac, nums = _gemmi_expand(out)
    # gemmi (independent reader) expands the asymmetric unit back to every atom of the same cell
    assert len(st.sites) == info["sites_listed"]
    assert len(frac) == len(c)
    assert st.cell.volume == pytest.approx(c.volume, rel=1e-6)
    assert sorted(nums) == sorted(c.numbers.astype(int))
    # spglib: the same space group before and after
    s0 = spglib.get_symmetry_dataset((c.cell, c.frac, c.numbers.astype(int)), symprec=1e-3)
    s1 = spglib.get_symmetry_dataset((cell, frac, nums), symprec=1e-3)
    assert s0.number == s1.number == number
    # the atoms are the same ones, not just as many: every expanded atom sits on an original one
    from scipy.spatial import cKDTree

    f0 = c.frac % 1.0
    f0[f0 > 1 - 1e-9] = 0
    d, _ = cKDTree(f0, boxsize=1.0).query(np.where(frac > 1 - 1e-9, 0, frac))
    assert d.max() < 1e-6
    # our reader: the right group number and family in the lattice info
    back = cv.read_cif(out)
    assert back.lattice.space_group == number and back.metadata["space_group_number"] == number
    fam = {225: "cubic", 229: "cubic", 221: "cubic", 227: "cubic", 194: "hexagonal", 123: "tetragonal"}[number]
    assert back.lattice.family == fam
    assert len(back) == len(c)


def test_cif_tabulated_setting_has_symbol(tmp_path):
    import gemmi

    for spec, hm in (("Cu", "F m -3 m"), ("Fe", "I m -3 m"), ("Ti", "P 63/m m c"), ("Si", "F d -3 m:1")):
        out = tmp_path / f"{spec}.cif"
        cv.export(cv.build(spec), out)
        st = gemmi.make_small_structure_from_block(gemmi.cif.read(str(out)).sole_block())
        # gemmi recognises the listed operations as the tabulated setting named in the file
        assert st.spacegroup is not None and st.spacegroup.xhm() == hm
        assert f"_space_group_name_H-M_alt '{hm}'" in out.read_text()


@pytest.mark.parametrize("spec,kw,number", [("Cu", {"repeat": (2, 2, 2)}, 225), ("TiAl", {}, 123),
                                             ("Ti", {"repeat": (2, 2, 2)}, 194),
                                             ("Cu", {"orient": ("[1-10]", "[11-2]", "[111]")}, 225)])
def test_cif_cells_that_are_no_tabulated_setting_listed_in_p1(tmp_path, spec, kw, number):
    """A supercell, an oriented cell or the face-centred setting of L1_0 is no tabulated setting of its
    space group: written in P 1 with every atom (common practice), so gemmi's small-structure path
    (setup_cell_images + get_all_unit_cell_sites) and spglib recover every atom; the group spglib finds
    is named in a comment (International Tables Vol. A numbers)."""
    import gemmi
    import spglib

    c = cv.build(spec, **kw)
    out = tmp_path / "x.cif"
    info = cv.export(c, out)
    assert info["space_group_number"] == 1 and info["sites_listed"] == len(c)
    assert f"(No. {number})" in out.read_text()
    st = gemmi.read_small_structure(str(out))
    st.setup_cell_images()
    sites = st.get_all_unit_cell_sites()
    assert len(sites) == len(c)
    np.testing.assert_allclose(st.cell.volume, c.volume, rtol=1e-6)
    cell = np.array(st.cell.orth.mat).T
    frac = np.array([[s.fract.x, s.fract.y, s.fract.z] for s in sites])
    nums = [s.element.atomic_number for s in sites]
    assert spglib.get_symmetry_dataset((cell, frac, nums), symprec=1e-3).number == number
    back = cv.read_cif(out)
    assert len(back) == len(c) and back.lattice.prototype == c.lattice.prototype


def test_cif_defects_p1_roles_kept(tmp_path):
    c = cv.fill_sites(cv.build("Fe", phase="gamma", repeat=(2, 2, 2)), "C", fraction=0.25, seed=1)
    out = tmp_path / "fec.cif"
    info = cv.export(c, out)
    assert info["space_group_number"] == 1 and "defects" in info["note"]
    back = cv.read_cif(out)
    assert back.role_counts() == c.role_counts() == {"host": 32, "interstitial": 8}
    assert back.lattice.space_group == 1
    # roles survive a symmetric file too: every octahedral site filled (no defect record) stays Fm-3m
    full = cv.fill_sites(cv.build("Fe", phase="gamma"), "C", fraction=1.0)
    full.metadata.pop("defects")
    info = cv.export(full, tmp_path / "fec_full.cif")
    # source: International Tables Vol. A, rock-salt arrangement Fm-3m (225), sites 4a + 4b
    assert info["space_group_number"] == 225 and info["sites_listed"] == 2
    back = cv.read_cif(tmp_path / "fec_full.cif")
    assert back.role_counts() == {"host": 4, "interstitial": 4}
    assert set(back.symbols[back.roles == 2]) == {"C"}
    # symmetry switched off: P 1
    assert cv.export(cv.build("Cu"), tmp_path / "p1.cif", symmetry=False)["sites_listed"] == 4


def test_cif_reader_symbol_number_and_incomplete_ops(tmp_path):
    head = ("data_x\n_cell_length_a 2.8665\n_cell_length_b 2.8665\n_cell_length_c 2.8665\n"
            "_cell_angle_alpha 90\n_cell_angle_beta 90\n_cell_angle_gamma 90\n")
    atoms = ("loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n_atom_site_fract_y\n"
             "_atom_site_fract_z\nFe1 Fe 0 0 0\n")
    # only the number: its standard setting (Im-3m, Wyckoff 2a: 2 atoms; International Tables Vol. A)
    p = tmp_path / "n.cif"
    p.write_text(head + "_space_group_IT_number 229\n" + atoms)
    c = cv.read_cif(p)
    assert len(c) == 2 and c.lattice.space_group == 229 and c.lattice.family == "cubic"
    # operations that do not close into a group are refused, not silently ignored
    p.write_text(head + "loop_\n_space_group_symop_operation_xyz\nx,y,z\ny,z,x\n" + atoms)
    with pytest.raises(UserError, match="complete space group"):
        cv.read_cif(p)
    # a cubic cell written in a tetragonal group: the file's group is kept in the metadata, and the
    # atoms (one per cubic cell) are recognised as simple cubic (spglib: Pm-3m, 221)
    p.write_text(head + "_symmetry_space_group_name_H-M 'P 4/m m m'\n" + atoms)
    c = cv.read_cif(p)
    assert c.metadata["space_group_number"] == 123 and c.lattice.prototype == "sc" and c.lattice.space_group == 221
    # the atom cap is applied to (operations x sites) before gemmi expands anything
    p.write_text(head + "_symmetry_space_group_name_H-M 'F m -3 m'\n" + atoms)
    from crystalview.errors import LimitError

    with pytest.raises(LimitError, match="192 symmetry operations"):
        cv.read_cif(p, max_atoms=100)


def test_cli_info_reads_space_group(tmp_path, cli):
    out = tmp_path / "ti.cif"
    cv.export(cv.build("Ti"), out)
    rc, text, err = cli("info", out, "--json")
    assert rc == 0, err
    s = json.loads(text)
    assert s["space_group"] == 194 and s["atoms"] == 2      # International Tables Vol. A: P6_3/mmc, 2c
