"""Real CIF files written by others (tests/data/cif, origins and licences in
its README) through every command, checked against what the files state
themselves (density, formula units, space group), against gemmi and spglib,
and against the built-in structures of the same metals."""
import json
from pathlib import Path

import numpy as np
import pytest

import crystalview as cv
from crystalview.errors import UserError

DATA = Path(__file__).parent / "data" / "cif"
FILES = sorted(DATA.glob("*.cif"))

#: lattice type of each file that is one (the structure type its own header
#: names: Cu/Ag/Ni/gamma-Fe A1, alpha-Fe/W/Mo A2, Mg/Ti/Zn A3, FeNi3 L1_2;
#: space groups: International Tables Vol. A)
EXPECTED = {
    "Cu_cod9008468.cif": ("fcc", "Cu"), "Ag_cod9008459_pyobjcryst.cif": ("fcc", "Ag"),
    "Ni_diffpy_ref.cif": ("fcc", "Ni"), "Fe_gamma_austenite_cod9012710.cif": ("fcc", "Fe"),
    "Fe_alpha_cod9008536.cif": ("bcc", "Fe"), "W_cod9008558.cif": ("bcc", "W"),
    "Mo_bcc_amcsd_mtex.cif": ("bcc", "Mo"), "Mg_cod9008506.cif": ("hcp", "Mg"),
    "Ti_alpha_cod9008517.cif": ("hcp", "Ti"), "Zn_cod9008522.cif": ("hcp", "Zn"),
    "FeNi3_L12_P1_xrayutilities.cif": ("L1_2", None),
    "FeNi_fcc_solid_solution_xrayutilities.cif": ("fcc", None),
    # a computed Co cell in P 1 that names no type; spglib (symprec 0.01) gives I4/mmm (139): body-centred
    # tetragonal of c/a 1.440, near fcc's 1.414 (at symprec 1e-4 it is monoclinic C2/m)
    "Co8_P1_pymatgen.cif": ("bct", None),
}
#: files that are refused, with what the one-line error must say
REFUSED = {
    "CoZn7.8_cif2_modulated_pycifrw.cif": "modulated",            # superspace group: not a 3-D structure
    "gemmi_misc_syntax_blocks.cif": "no data block with a unit cell",
    "graphite_partial_symops_diffpy.cif": "complete space group",  # 6 operations that do not close into a group
    "grunerite_galena_2blocks_codtools.cif": "--block",            # two structures: the user must choose
    "V23Ni_superflat_pymatgen.cif": "not a crystal's cell",        # angles that leave the cell nearly no volume
}


def _value(path, tag):
    import gemmi

    doc = gemmi.cif.Document()
    doc.parse_string(path.read_text(encoding="utf-8", errors="replace"))
    for b in doc:
        v = b.find_value(tag)
        if v is not None and v not in ("?", "."):
            return gemmi.cif.as_number(v)
    return None


@pytest.mark.parametrize("path", FILES, ids=[p.name for p in FILES])
def test_every_file_reads_or_says_why(path, cli):
    rc, out, err = cli("info", path, "--json")
    if path.name in REFUSED:
        assert rc == 2 and REFUSED[path.name] in err and err.count("\n") == 1, err
        return
    assert rc == 0, err
    s = json.loads(out)
    want = EXPECTED.get(path.name, ("other", None))[0]
    assert s["lattice_type"] == want, (s["lattice_type"], s.get("recognition"))
    # the file's own measured density (_exptl_crystal_density_diffrn, written by its authors) where it
    # gives one; CuMnAs states the density of the fully occupied cell, not of its 0.86 / 0.96 occupancies
    rho = _value(path, "_exptl_crystal_density_diffrn")
    if rho and not path.name.startswith("CuMnAs"):
        assert s["density_g_cm3"] == pytest.approx(rho, abs=0.0015 * rho + 0.0015)
    assert s["packing_factor"] < 1.0
    if s["coordination_number"] is not None:
        assert s["coordination_number"] <= 14


@pytest.mark.parametrize("path", [p for p in FILES if p.name not in REFUSED], ids=lambda p: p.name)
def test_composition_is_formula_units_times_formula(path):
    """Z x the formula (_cell_formula_units_Z, _chemical_formula_sum: the file's own statement) is the
    cell's content, occupancies included."""
    import re

    import gemmi

    z = _value(path, "_cell_formula_units_Z")
    doc = gemmi.cif.read(str(path))
    form = None
    for b in doc:
        v = b.find_value("_chemical_formula_sum")
        if v not in (None, "?", "."):
            form = gemmi.cif.as_string(v)
    if not z or not form:
        pytest.skip("the file states no formula units or formula")
    if path.name.startswith("CuMnAs"):
        pytest.skip("its formula As0.84 Cu1.08 Mn0.94 disagrees with its own atom sites (As 0.96, Mn 0.86, Cu 1); "
                    "the sites are read")
    if path.name.startswith("Co8_P1"):
        pytest.skip("its formula Co8 with Z = 8 counts 64 atoms for its 8 sites (pymatgen writes the cell's "
                    "formula beside the reduced formula's Z); the sites are read")
    c = cv.read_cif(path)
    comp = c.counts()
    for el, n in re.findall(r"([A-Z][a-z]?)\s*([\d.]*)", form):
        if el == "H" and "H" not in comp:       # hydrogen given only as attached-hydrogen counts
            continue
        n = float(n) if n not in ("", ".") else 1.0
        assert comp.get(el, 0.0) == pytest.approx(z * n, rel=2e-3, abs=2e-3), (el, comp, z, form)


@pytest.mark.parametrize("name", [k for k, v in EXPECTED.items() if v[1]], ids=str)
def test_metal_files_match_the_built_in_structure(name, cli):
    """A CIF of a plain metal gives the numbers of the built-in structure with the file's lattice
    parameters: holes, fit, slip, planes (the file and the built-in cell differ only in origin)."""
    path = DATA / name
    lattice, el = EXPECTED[name]
    c = cv.read_cif(path)
    a, cc = c.metadata["a"], c.metadata["c"]
    ref = cv.build(el, lattice=lattice, a=a, c=cc if lattice == "hcp" else None)
    got = {(s["kind"], s["per_cell"]): s["radius_A"] for s in
           json.loads(cli("sites", path, "--json")[1])["sites"]}
    exp = {(s["kind"], s["per_cell"]): s["radius_A"] for s in
           json.loads(cli("sites", el, "--lattice", lattice, "-a", a, *(["-c", cc] if lattice == "hcp" else []),
                          "--json")[1])["sites"]}
    assert got.keys() == exp.keys()
    for k in got:
        assert got[k] == pytest.approx(exp[k], abs=1e-6)
    # every hole of a 2x2x2 repeat, one by one: the same places as the built-in crystal's (shifted by the
    # lattice origin the file uses)
    sc = cv.build(path, repeat=(2, 2, 2))
    sr = cv.build(el, lattice=lattice, a=a, c=cc if lattice == "hcp" else None, repeat=(2, 2, 2))
    s1, s2 = cv.interstitial_sites(sc), cv.interstitial_sites(sr)
    assert len(s1) == len(s2)
    assert sorted(round(s.radius, 6) for s in s1) == sorted(round(s.radius, 6) for s in s2)
    # fit and slip
    for solute in ("C", "N", "H"):
        f1 = cv.fit(solute, c)
        f2 = cv.fit(solute, ref)
        assert f1["preferred_site"] == f2["preferred_site"] if "preferred_site" in f1 else True
    rc1, out1, _ = cli("slip", path, "--axis", "[001]", "--json")
    rc2, out2, _ = cli("slip", el, "--lattice", lattice, "-a", a, *(["-c", cc] if lattice == "hcp" else []),
                       "--axis", "[001]", "--json")
    assert rc1 == rc2 == 0
    m1 = sorted((r["plane"], r["direction"], round(r["schmid_factor"], 6)) for r in json.loads(out1)["systems"])
    m2 = sorted((r["plane"], r["direction"], round(r["schmid_factor"], 6)) for r in json.loads(out2)["systems"])
    assert m1 == m2
    # density to the precision of the file's lattice constants (same atoms, same cell)
    assert cv.density(c) == pytest.approx(cv.density(ref), rel=1e-9)


def test_solid_solution_realised_exactly_and_reproducibly(tmp_path, cli):
    """Fe0.9Ni0.1 on one fcc site: composition from the occupancies; a 5x5x5 realisation holds
    exactly 450 Fe and 50 Ni (0.9 and 0.1 of 500 sites), the same for the same seed."""
    path = DATA / "FeNi_fcc_solid_solution_xrayutilities.cif"
    avg = cv.read_cif(path)
    assert avg.counts() == pytest.approx({"Fe": 3.6, "Ni": 0.4})
    r1 = cv.build(path, repeat=(5, 5, 5), seed=3)
    r2 = cv.build(path, repeat=(5, 5, 5), seed=3)
    r3 = cv.build(path, repeat=(5, 5, 5), seed=4)
    assert r1.counts() == {"Fe": 450, "Ni": 50}
    assert np.array_equal(r1.numbers, r2.numbers) and not np.array_equal(r1.numbers, r3.numbers)
    assert r1.metadata["realisation"]["seed"] == 3
    # the report says it was realised, and with which seed; density from the occupancies
    rc, out, err = cli("info", path, "--repeat", "5", "5", "5", "--seed", "3")
    assert rc == 0 and "drawn with seed 3" in out and "Fe 450, Ni 50" in out
    s = json.loads(cli("info", path, "--json")[1])
    assert s["formula_average"] == "Fe3.6Ni0.4"
    # every hole of the realised crystal: the sites of the fcc lattice
    rc, out, err = cli("sites", path, "--repeat", "2", "2", "2", "--json")
    rows = {r["kind"]: r for r in json.loads(out)["sites"]}
    assert rows["octahedral"]["in_crystal"] == 32 and rows["tetrahedral"]["in_crystal"] == 64


def test_exports_keep_occupancies_and_every_reader_expands_them(tmp_path, cli):
    """CIF exports read back by gemmi's small-structure path (setup_cell_images +
    get_all_unit_cell_sites) and by spglib: every atom, the composition, the occupancies."""
    import gemmi
    import spglib

    cases = [("Ti", ["--repeat", "2", "2", "2"], 16), ("Cu", ["--orient", "[1-10]", "[11-2]", "[111]"], 6),
             ("Cu", ["--repeat", "2", "1", "1"], 8), (DATA / "MgB2_cod1000026_codtools.cif", [], 3),
             (DATA / "FeNi_fcc_solid_solution_xrayutilities.cif", [], 8),
             (DATA / "MnO2_diffpy.cif", [], None), (DATA / "Zn_cod9008522.cif", [], 2)]
    for k, (spec, extra, n) in enumerate(cases):
        out = tmp_path / f"x{k}.cif"
        rc, _, err = cli("export", spec, *extra, "-o", out)
        assert rc == 0, err
        st = gemmi.read_small_structure(str(out))
        st.setup_cell_images()
        sites = st.get_all_unit_cell_sites()
        src = cv.build(spec, realise=False, **({"repeat": (2, 2, 2)} if "--repeat" in extra and spec == "Ti" else {}))
        if n is not None:
            assert len(sites) == n, (spec, extra)
        comp = {}
        for s in sites:
            comp[s.element.name] = comp.get(s.element.name, 0.0) + s.occ
        if not extra:
            assert comp == pytest.approx(src.counts(), abs=1e-5)
        back = cv.read_cif(out)
        assert back.counts() == pytest.approx(cv.build(spec, realise=False, **_kw(extra)).counts(), abs=1e-5)
        if back.occupancy is None:
            ds = spglib.get_symmetry_dataset((back.cell, back.frac, back.numbers), symprec=1e-3)
            assert ds is not None and len(back) == len(sites)


def _kw(extra):
    if not extra:
        return {}
    if extra[0] == "--repeat":
        return {"repeat": tuple(int(x) for x in extra[1:4])}
    return {"orient": extra[1:4]}


def test_thirds_written_as_four_decimals_are_thirds():
    """MgB2 (AlB2 type, P6/mmm, B at 2d 1/3 2/3 1/2; International Tables Vol. A) written with 0.3333:
    read exactly, so the symmetry is the file's and no atom is duplicated."""
    c = cv.read_cif(DATA / "MgB2_cod1000026_codtools.cif")
    assert len(c) == 3
    f = np.sort(c.frac[c.symbols == "B"][:, 0])
    assert f == pytest.approx([1 / 3, 2 / 3], abs=1e-12)


def test_cif2_dotted_names_and_blocks(tmp_path):
    """CIF 2.0 (dotted DDLm names) reads like CIF 1.1; several structures need --block; a null name
    is never the structure's name (IUCr CIF 2.0 and DDLm core dictionary names)."""
    c = cv.read_cif(DATA / "salicylic_acid_cif2_CrystalInfoFramework.cif")
    assert len(c) == 40 and c.metadata["space_group_number"] == 14      # P 1 21/a 1 (14), Z = 4, 10 sites
    path = DATA / "grunerite_galena_2blocks_codtools.cif"
    with pytest.raises(UserError, match="--block"):
        cv.read_cif(path)
    galena = cv.read_cif(path, block="2")
    assert galena.counts() == {"Pb": 4, "S": 4}                          # PbS, rock salt, Z = 4
    p = tmp_path / "q.cif"
    p.write_text((DATA / "Cu_cod9008468.cif").read_text().replace("_chemical_formula_sum", "_chemical_formula_sum ?\n#"))
    assert cv.read_cif(p).metadata["name"] not in ("?", ".")
    # two copies of one symmetry-equivalent atom listed in the file are read once
    nd = cv.read_cif(DATA / "NdCo_hydrate_ITnumber_only_cod2000000_codtools.cif")
    assert "read once" in nd.metadata["note"]


def test_bad_files_one_line_exit_2(tmp_path, cli):
    head = ("data_bad\n_cell_length_a 3.6\n_cell_length_b 3.6\n_cell_length_c 3.6\n_cell_angle_alpha 90\n"
            "_cell_angle_beta 90\n_cell_angle_gamma 90\n_symmetry_space_group_name_H-M 'F m -3 m'\n"
            "loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n_atom_site_fract_y\n"
            "_atom_site_fract_z\n_atom_site_occupancy\n")
    cases = {
        "over.cif": (head + "Fe1 Fe 0 0 0 0.7\nNi1 Ni 0 0 0 0.6\n", "summing to 1.300"),
        "close.cif": (head + "Fe1 Fe 0 0 0 1\nNi1 Ni 0.05 0 0 1\n", "apart after symmetry"),
        "flat.cif": (head.replace("_cell_angle_gamma 90", "_cell_angle_gamma 180") + "Fe1 Fe 0 0 0 1\n",
                     "no valid unit cell"),
        "nocell.cif": ("data_x\n_journal_name_full 'x'\n", "no data block with a unit cell"),
    }
    for name, (text, msg) in cases.items():
        p = tmp_path / name
        p.write_text(text)
        out = tmp_path / (name + ".glb")
        rc, _, err = cli("export", p, "-o", out)
        assert rc == 2 and msg in err and err.count("\n") == 1 and name in err, (name, err)
        assert not out.exists()
    rc, _, err = cli("info", DATA / "Cu_cod9008468.cif", "--block", "nosuch")
    assert rc == 2 and "no data block 'nosuch'" in err


@pytest.mark.parametrize("name", ["Cu_cod9008468.cif", "Mg_cod9008506.cif", "FeNi_fcc_solid_solution_xrayutilities.cif",
                                  "MnO2_diffpy.cif", "Fe3O4_magnetite_Fd-3m_origin2_mtex.cif"])
def test_files_render_export_and_print(name, tmp_path, cli):
    """Figures, glTF and print models of real files (watertight, checked with trimesh)."""
    import trimesh

    path = DATA / name
    rc, out, err = cli("render", path, "-o", tmp_path / "f.png", "--size", "400", "300")
    assert rc == 0, err
    rc, out, err = cli("export", path, "-o", tmp_path / "f.glb")
    assert rc == 0, err
    if name.startswith(("Cu", "FeNi")):
        rc, out, err = cli("print", path, "-o", tmp_path / "f.stl")
        assert rc == 0, err
        assert trimesh.load(tmp_path / "f.stl").is_watertight


def test_lightly_defected_file_recognised_and_measured_like_the_original(tmp_path):
    """A P 1 file of a defected supercell (interstitial C, substituted Ni, vacancies; no role column,
    as a file from elsewhere would be): the host lattice is recognised from the most common
    translations, the roles follow from where the atoms sit, and every hole is the original's."""
    c = cv.fill_sites(cv.build("Fe", phase="gamma", repeat=(3, 3, 3)), "C", fraction=0.03, seed=1)
    c = cv.substitute(c, "Ni", count=4, seed=2)
    c = cv.add_vacancies(c, count=2, seed=3)
    out = tmp_path / "fe_c_ni.cif"
    cv.export(cv.Crystal(c.cell, c.positions, c.numbers), out, symmetry=False)     # atoms only, no roles
    assert "_[local]" not in out.read_text()
    back = cv.read_cif(out)
    assert back.lattice.prototype == "fcc" and "lightly defected" in back.metadata["recognition"]["note"]
    assert back.role_counts() == c.role_counts()
    s0 = sorted((s.kind, round(s.radius, 6)) for s in cv.interstitial_sites(c))
    s1 = sorted((s.kind, round(s.radius, 6)) for s in cv.interstitial_sites(back))
    assert s0 == s1
    # an ordered supercell with two vacancies: recognised as L1_2 (International Tables: Pm-3m 221)
    ni3al = cv.build("Ni3Al", repeat=(3, 3, 3)).delete([0, 5])
    from crystalview.recognise import recognise

    assert recognise(cv.Crystal(ni3al.cell, ni3al.positions, ni3al.numbers)).lattice == "L1_2"


@pytest.mark.parametrize("path", [p for p in FILES if p.name not in REFUSED], ids=lambda p: p.name)
def test_every_command_on_every_readable_file(path, tmp_path, cli):
    """sites, fit, slip, build and the exchange files: each works, or says in one line (exit 2) why
    it cannot (slip of a structure of no built-in lattice type)."""
    for argv in (("sites", path, "--json"), ("fit", "C", path, "--json"), ("fit", "Ni", path, "--json"),
                 ("slip", path, "--axis", "[001]", "--json"), ("build", path, "-o", tmp_path / "b.xyz"),
                 ("export", path, "-o", tmp_path / "e.cif"), ("export", path, "-o", tmp_path / "e.glb")):
        rc, out, err = cli(*argv)
        assert rc in (0, 2), (argv, err)
        if rc == 2:
            assert err.count("\n") == 1 and argv[0] in ("slip", "fit"), (argv, err)
            if argv[0] == "slip":
                assert "not one of the lattice types" in err or "no slip systems are tabulated" in err
        else:
            assert out


def test_cif_values_checked_and_text_sanitised(tmp_path, cli):
    """A cell given only in part, occupancies that are not numbers, escape codes in names, a multi-line
    formula: refused in one line, or kept off the terminal and out of other files' structure."""
    head = ("data_x\n_cell_length_a 3.6\n_cell_length_b 3.6\n_cell_length_c 3.6\n_cell_angle_alpha 90\n"
            "_cell_angle_beta 90\n_cell_angle_gamma 90\n_symmetry_space_group_name_H-M 'F m -3 m'\n")
    loop = ("loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n_atom_site_fract_y\n"
            "_atom_site_fract_z\n_atom_site_occupancy\n")
    p = tmp_path / "a.cif"
    p.write_text("data_x\n_cell_length_a 3.6\n" + loop + "Cu1 Cu 0 0 0 1\n")
    rc, out, err = cli("info", p)
    assert rc == 2 and "whole cell" in err
    for occ in ("abc", "nan", "-5", "1.7"):
        p.write_text(head + loop + f"Cu1 Cu 0 0 0 {occ}\n")
        rc, out, err = cli("info", p)
        assert rc == 2 and "occupancy" in err and err.count("\n") == 1, (occ, err)
    p.write_text(head + "_chemical_formula_sum\n;\nCu4\n8\nX 0 0 0\n;\n_chemical_name_common 'a\x1b[31mred'\n"
                 + loop + "Cu1 Cu 0 0 0 1\n")
    rc, out, err = cli("export", p, "-o", tmp_path / "x.xyz")
    assert rc == 0, err
    lines = (tmp_path / "x.xyz").read_text().splitlines()
    assert lines[0] == "4" and len(lines) == 6                  # count, one comment line, four atoms
    rc, out, err = cli("info", p)
    assert "\x1b" not in out and "\x1b" not in err


def test_too_few_sites_for_the_average_composition_said_in_one_note(cli):
    """A 4-site cell of Fe0.9Ni0.1 (xrayutilities' test file) cannot hold 10 % Ni: build and info say so and
    name a repeat that comes within 0.5 percentage points (3 x 3 x 3: 11 Ni of 108 sites, 10.2 %)."""
    f = DATA / "FeNi_fcc_solid_solution_xrayutilities.cif"
    rc, out, _ = cli("build", f)
    assert rc == 0 and "4 sites cannot hold the average composition (Fe 90.0 %, Ni 10.0 %)" in out
    assert "3 x 3 x 3: 108 atoms" in out
    rc, out, _ = cli("info", f)
    assert rc == 0 and "cannot hold the average composition" in out
    rc, out, _ = cli("build", f, "--repeat", "3", "3", "3")
    assert rc == 0 and "Fe 97, Ni 11" in out and "cannot hold" not in out
