"""Named interstitial sites: hole ratios, the iron worked example, supercells, defects, fill_sites."""
import math
import subprocess
import sys

import numpy as np
import pytest

import crystalview as cv
from crystalview.analysis.sites import site_table
from crystalview.errors import UserError


def _radii(c):
    return {r["kind"]: r for r in site_table(c)}


def test_fcc_hole_ratios():
    t = _radii(cv.build("Cu"))
    # source: Smallman & Ngan, Modern Physical Metallurgy, hole radius ratios (from memory)
    assert t["octahedral"]["ratio"] == pytest.approx(0.414, abs=5e-4)
    assert t["tetrahedral"]["ratio"] == pytest.approx(0.225, abs=5e-4)
    # common practice: 4 octahedral and 8 tetrahedral holes per FCC cell (1 and 2 per atom)
    assert t["octahedral"]["per_cell"] == 4 and t["tetrahedral"]["per_cell"] == 8
    assert t["tetrahedral"]["per_atom"] == 2


def test_bcc_hole_ratios():
    t = _radii(cv.build("Fe"))
    # source: Smallman & Ngan, Modern Physical Metallurgy, hole radius ratios (from memory)
    assert t["octahedral"]["ratio"] == pytest.approx(0.155, abs=5e-4)
    assert t["tetrahedral"]["ratio"] == pytest.approx(0.291, abs=5e-4)
    # common practice: 6 octahedral and 12 tetrahedral holes per BCC cell
    assert t["octahedral"]["per_cell"] == 6 and t["tetrahedral"]["per_cell"] == 12
    assert "saddle" in t["octahedral"]["note"]


def test_sc_cube_hole():
    t = _radii(cv.build("sc", element="Po"))
    # common practice: cube-centre hole of simple cubic, r/R = sqrt(3) - 1 = 0.732
    assert t["cubic"]["ratio"] == pytest.approx(0.732, abs=5e-4)
    assert t["cubic"]["per_cell"] == 1


def test_iron_worked_example():
    # source: Honeycombe & Bhadeshia, Steels: Microstructure and Properties, ch. 1 (from memory):
    # alpha-Fe octahedral 0.19 A, tetrahedral 0.36 A; gamma-Fe (a = 3.572) octahedral 0.52 A, tetrahedral 0.28 A
    a = _radii(cv.build("Fe", a=2.8665))
    assert a["octahedral"]["radius_A"] == pytest.approx(0.19, abs=0.005)
    assert a["tetrahedral"]["radius_A"] == pytest.approx(0.36, abs=0.005)
    g = _radii(cv.build("Fe", phase="gamma", a=3.572))
    assert g["octahedral"]["radius_A"] == pytest.approx(0.52, abs=0.005)
    assert g["tetrahedral"]["radius_A"] == pytest.approx(0.28, abs=0.005)


def test_hcp_sites_follow_c_over_a():
    # ideal c/a: same holes as FCC (common practice: close packings have the same holes)
    ideal = cv.build("hcp", element="Mg", a=3.2, c=3.2 * math.sqrt(8 / 3))
    t = _radii(ideal)
    assert t["octahedral"]["ratio"] == pytest.approx(math.sqrt(2) - 1, abs=1e-9)
    assert t["tetrahedral"]["ratio"] == pytest.approx(math.sqrt(1.5) - 1, abs=1e-9)
    assert t["tetrahedral"]["frac_conventional"][0][2] == pytest.approx(5 / 8, abs=1e-9)
    # stretched c/a: the tetrahedral site is the point equidistant from its four atoms
    c = cv.build("hcp", element="Mg", a=3.2, c=3.2 * 1.9)
    for s in cv.interstitial_sites(c, kinds="tetrahedral"):
        d = np.linalg.norm(c.positions[s.neighbours] - s.position, axis=1)
        # neighbour indices are atoms; compare with periodic images by taking the minimum image
        f = c.to_fractional(c.positions[s.neighbours] - s.position)
        d = np.linalg.norm((f - np.round(f)) @ c.cell, axis=1)
        assert np.ptp(d) < 1e-9
    z = [s.frac[2] for s in cv.interstitial_sites(c, kinds="tetrahedral")]
    assert not np.any(np.isclose(z, 5 / 8))


def test_sites_of_supercell_and_oriented_cell():
    base = cv.build("Cu")
    sup = cv.build("Cu", repeat=(2, 3, 1))
    s = cv.interstitial_sites(sup)
    kinds = [x.kind for x in s]
    assert kinds.count("octahedral") == 4 * 6 and kinds.count("tetrahedral") == 8 * 6
    ori = cv.build("Cu", orient=("[1-10]", "[11-2]", "[111]"))
    so = cv.interstitial_sites(ori)
    n_cells = ori.volume / base.volume
    assert sum(x.kind == "octahedral" for x in so) == round(4 * n_cells)
    assert sum(x.kind == "tetrahedral" for x in so) == round(8 * n_cells)
    r_oct = _radii(base)["octahedral"]["radius_A"]
    for x in so:
        # every site has the free radius of its kind, checked against the atoms by brute force
        f = ori.to_fractional(ori.positions - x.position)
        d = np.linalg.norm((f - np.round(f)) @ ori.cell, axis=1)
        assert d.min() - ori.atom_radii()[0] == pytest.approx(x.radius, abs=1e-9)
        if x.kind == "octahedral":
            assert x.radius == pytest.approx(r_oct, abs=1e-9)


def test_other_lattices_have_sites():
    for spec, kw, kinds in [("Si", {}, {"tetrahedral", "hexagonal"}), ("hex", {"element": "Mg"}, {"trigonal prismatic"}),
                            ("NiAl", {}, {"octahedral", "tetrahedral"}), ("Ni3Al", {}, {"octahedral", "tetrahedral"}),
                            ("TiAl", {}, {"octahedral", "tetrahedral"})]:
        got = {r["kind"] for r in site_table(cv.build(spec, **kw))}
        assert got == kinds, spec
    # common practice: diamond cubic's big holes equal the atom size (r/R = 1)
    assert _radii(cv.build("Si"))["tetrahedral"]["ratio"] == pytest.approx(1.0, abs=1e-9)


def test_vacancy_hole_and_solute_changes():
    c = cv.build("Cu", repeat=(3, 3, 3))
    d = c.delete([13])
    d.record_defect("vacancy", count=1)
    s = cv.interstitial_sites(d)
    vac = [x for x in s if x.kind == "vacancy"]
    assert len(vac) == 1
    assert np.allclose(vac[0].position, c.positions[13])
    assert len(vac[0].neighbours) == 12
    # the vacancy hole: nearest-neighbour distance minus R = R (r/R = 1)
    assert vac[0].ratio == pytest.approx(1.0, abs=1e-9)
    # a bigger substitutional atom shrinks the holes around it
    e = c.copy()
    e.numbers[0] = 82
    e.species_radii["Pb"] = 1.75
    e.record_defect("solute", element="Pb")
    t = {r["kind"]: r for r in site_table(e)}
    assert t["octahedral"]["radius_min_A"] == pytest.approx(c.cell[0, 0] / 6 - 1.75, abs=1e-9)
    assert t["octahedral"]["radius_max_A"] == pytest.approx(_radii(c)["octahedral"]["radius_A"], abs=1e-9)


def test_fill_sites():
    c = cv.build("Fe", repeat=(3, 3, 3))
    f1 = cv.fill_sites(c, "C", kind="octahedral", fraction=0.1, seed=4)
    f2 = cv.fill_sites(c, "C", kind="octahedral", fraction=0.1, seed=4)
    n_sites = 6 * 27
    assert f1.role_counts()["interstitial"] == round(0.1 * n_sites)
    assert np.array_equal(f1.positions, f2.positions)
    assert f1.metadata["defects"][-1]["kind"] == "interstitial"
    assert f1.radius_of("C") == pytest.approx(0.77)
    # filled sites are no longer reported as holes
    left = [x for x in cv.interstitial_sites(f1) if x.kind == "octahedral"]
    assert len(left) == n_sites - round(0.1 * n_sites)
    with pytest.raises(UserError):
        cv.fill_sites(c, "C", fraction=1.5)
    with pytest.raises(UserError):
        cv.fill_sites(c, "C", kind="cubic")
    with pytest.raises(UserError):
        cv.fill_sites(c, "Xx")


def test_cli_sites(cli):
    import json

    rc, out, err = cli("sites", "Cu", "--json")
    assert rc == 0
    data = json.loads(out)
    assert {r["kind"] for r in data["sites"]} == {"octahedral", "tetrahedral"}
    rc, out, err = cli("sites", "Fe")
    assert rc == 0 and "octahedral" in out and "0.155" in out and "0.291" in out
    rc, out, err = cli("sites", "Qq")
    assert rc == 2 and err.count("\n") == 1


def test_sites_fast_start():
    code = ("import sys; from crystalview.cli import main; main(['sites', 'Fe', '--json']); "
            "bad = [m for m in ('vtk', 'pyvista', 'scipy', 'spglib') if m in sys.modules]; "
            "sys.stderr.write(repr(bad))")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert r.returncode == 0
    assert r.stderr.strip().endswith("[]"), r.stderr


# ---------------------------------------------------------------- diamond cubic: tetrahedral and hexagonal sites
def test_diamond_sites_are_tetrahedral_and_hexagonal():
    c = cv.build("Si")
    a = c.cell[0, 0]
    rows = {r["kind"]: r for r in site_table(c)}
    assert set(rows) == {"tetrahedral", "hexagonal"}          # no "octahedral" in diamond cubic
    hexf = np.array(rows["hexagonal"]["frac_conventional"])
    tetf = np.array(rows["tetrahedral"]["frac_conventional"])
    assert any(np.allclose(f, (5 / 8, 5 / 8, 5 / 8)) for f in hexf)
    assert any(np.allclose(f, (1 / 2, 1 / 2, 1 / 2)) for f in tetf)
    assert len(hexf) == 16 and len(tetf) == 8

    # independent geometry from the atom positions (numpy only, periodic images)
    shifts = np.array([(i, j, k) for i in (-1, 0, 1) for j in (-1, 0, 1) for k in (-1, 0, 1)], float)
    img = ((c.frac[None, :, :] + shifts[:, None, :]).reshape(-1, 3)) @ c.cell
    bond = a * np.sqrt(3) / 4                                 # common practice: diamond bond length a*sqrt(3)/4

    x = np.array([5 / 8, 5 / 8, 5 / 8]) @ c.cell
    d = np.linalg.norm(img - x, axis=1)
    o = np.argsort(d)
    six = img[o[:6]]
    # common practice (from memory): the hexagonal site has 6 atoms at sqrt(11)/8 a, then a clear gap
    assert np.allclose(d[o[:6]], np.sqrt(11) / 8 * a, atol=1e-9) and d[o[6]] > d[o[5]] + 0.1
    # the six form a ring: each is bonded to exactly two of the others
    dd = np.linalg.norm(six[:, None] - six[None], axis=2)
    bonded = np.abs(dd - bond) < 1e-6
    assert np.all(bonded.sum(axis=1) == 2)
    # ... a single six-membered cycle, puckered: alternately above and below the mean plane, normal to <111>
    ring, prev = [0], None
    while len(ring) < 6:
        nxt = [j for j in np.nonzero(bonded[ring[-1]])[0] if j != prev and j not in ring]
        prev = ring[-1]
        ring.append(int(nxt[0]))
    assert bonded[ring[-1], ring[0]]
    n = np.array([1.0, 1.0, 1.0]) / np.sqrt(3)
    h = (six[ring] - x) @ n
    assert np.allclose(np.abs(h), np.abs(h[0])) and abs(h[0]) > 0.05 * a
    assert np.all(np.sign(h) == np.sign(h[0]) * np.array([1, -1, 1, -1, 1, -1]))
    # reported radius and bounding atoms agree
    assert rows["hexagonal"]["coordination"] == 6
    assert rows["hexagonal"]["radius_A"] == pytest.approx(np.sqrt(11) / 8 * a - c.radius_of("Si"), abs=1e-9)
    assert "six-ring" in rows["hexagonal"]["note"]

    # the tetrahedral site: 4 atoms at the bond length
    y = np.array([0.5, 0.5, 0.5]) @ c.cell
    dt = np.sort(np.linalg.norm(img - y, axis=1))
    assert np.allclose(dt[:4], bond, atol=1e-9) and dt[4] > bond + 0.1


def test_diamond_site_wyckoff_letters_from_spglib():
    import spglib

    c = cv.build("Si")
    rows = {r["kind"]: r for r in site_table(c)}
    hexf = np.array(rows["hexagonal"]["frac_conventional"])
    tetf = np.array(rows["tetrahedral"]["frac_conventional"])
    frac = np.vstack([c.frac, hexf, tetf])
    nums = [14] * len(c) + [1] * len(hexf) + [2] * len(tetf)
    ds = spglib.get_symmetry_dataset((c.cell, frac, nums))
    # source: International Tables Vol. A, Fd-3m (227): atoms 8a, tetrahedral hole 8b, hexagonal hole 16d
    # (spglib's standard setting; independent of our site tables)
    assert ds.number == 227
    w = list(ds.wyckoffs)
    assert set(w[:8]) == {"a"} and set(w[8:24]) == {"d"} and set(w[24:]) == {"b"}
    assert "16d" in rows["hexagonal"]["note"] and "8b" in rows["tetrahedral"]["note"]


def test_cli_sites_diamond(cli):
    rc, out, err = cli("sites", "Si")
    assert rc == 0 and "hexagonal" in out and "octahedral" not in out


def test_site_repr_is_plain():
    s = cv.interstitial_sites(cv.build("Cu"))[0]
    r = repr(s)
    assert "np." not in r and "array(" not in r and r.startswith("<Site ")
    assert all(type(v) is float for v in s.frac)


def test_defected_hole_measurement_is_capped():
    import time

    from crystalview.errors import LimitError

    c = cv.build("Fe", repeat=(3, 3, 3))
    d = c.delete([0])
    d.record_defect("vacancy", count=1)
    with pytest.raises(LimitError, match="defected crystal"):
        cv.interstitial_sites(d, max_atoms=50)
    assert len(cv.interstitial_sites(d, max_atoms=53)) > 0
    from crystalview.analysis.sites import sites_report

    with pytest.raises(LimitError, match=r"about .* MB of memory"):
        sites_report(d, max_atoms=50)
    # 4 million atoms with one vacancy: refused at once, before any site array is built
    big = cv.build("Cu", repeat=(100, 100, 100))
    gone = big.delete([0])
    gone.record_defect("vacancy", count=1)
    t = time.perf_counter()
    with pytest.raises(LimitError, match=r"3,999,999 atoms would need about 16.0 GB"):
        site_table(gone)
    assert time.perf_counter() - t < 2.0


def test_body_centred_tetragonal_named_sites_checked_against_the_holes():
    """The named bct sites are those of a martensite-like cell.  Checked against the void analysis of the
    perfect cell (tests/test_voids.py checks that against brute force): at c/a 1.07 both octahedral kinds are
    saddles, as in bcc (said in their notes), and the tetrahedral sites fall into two classes of different
    size (one kind before, reported at the smaller radius); at c/a 1.3 the z octahedral hole splits 0.22 A
    off-centre (said, with its radius); at c/a 1.8 there are holes at no named site, so the holes come from
    the void analysis, which says why."""
    from crystalview.analysis.sites import interstitial_sites, site_table

    m = cv.build("bct", element="Fe", a=2.85, c=2.85 * 1.07)
    rows = {r["label"]: r for r in site_table(m)}
    assert "saddle" in rows["octahedral"]["note"] and "saddle" in rows["octahedral-xy"]["note"]
    assert "saddle" not in rows["tetrahedral"]["note"] and "saddle" not in rows["tetrahedral-xy"]["note"]
    v = cv.find_voids(m)
    assert sorted({round(float(r), 4) for r in v.radii}) == sorted(
        round(rows[k]["radius_A"], 4) for k in ("tetrahedral", "tetrahedral-xy"))
    assert rows["tetrahedral"]["per_cell"] + rows["tetrahedral-xy"]["per_cell"] == 12     # bcc's 12 (6 per atom)
    split = {r["label"]: r["note"] for r in site_table(cv.build("bct", element="Fe", a=2.85, c=2.85 * 1.3))}
    assert "splits into 4, each 0.221 A off the centre with r = 0.4970 A" in split["octahedral"]
    tall = cv.build("bct", element="Fe", a=2.85, c=2.85 * 1.8, repeat=(2, 2, 2))
    sites = interstitial_sites(tall)
    assert all("named bct sites miss holes" in s.note for s in sites)
    v = cv.find_voids(tall)
    assert len(sites) == len(v) and max(s.radius for s in sites) == pytest.approx(v.radii.max(), abs=1e-9)


def test_bct_cell_from_a_calculation_gets_its_real_holes(cli):
    """A computed Co cell (pymatgen's test file, bct of c/a 1.440 near fcc): its holes are those of a slightly
    distorted fcc (tetrahedral r/R 0.233 about fcc's 0.225, octahedral 0.415 about 0.414: Smallman & Ngan);
    the other named bct sites are saddles and say so (one lumped 'tetrahedral' kind used to report r/R 0.118
    for all twelve)."""
    from pathlib import Path

    path = Path(__file__).parent / "data" / "cif" / "Co8_P1_pymatgen.cif"
    rc, out, err = cli("sites", path)
    assert rc == 0, err
    rows = {r["label"]: r for r in __import__("json").loads(cli("sites", path, "--json")[1])["sites"]}
    assert rows["tetrahedral"]["ratio"] == pytest.approx(0.233, abs=0.005)
    assert rows["octahedral"]["ratio"] == pytest.approx(0.415, abs=0.005)
    assert "not a hole of its own" in rows["tetrahedral-xy"]["note"]          # r/R 0.118: a saddle here
    assert "not a hole of its own" in rows["octahedral-xy"]["note"]           # r = 0: two atoms touching
    assert "-0.0000" not in out


def test_fit_says_which_named_sites_are_saddles(cli):
    """fit lists every named site; those the check against the perfect cell found to be saddles, or whose
    hole moved off-centre, are said so below the table (sites gives where and how large)."""
    from pathlib import Path

    rc, out, err = cli("fit", "C", Path(__file__).parent / "data" / "cif" / "Co8_P1_pymatgen.cif")
    assert rc == 0, err
    assert "note: octahedral-xy, tetrahedral-xy: saddle(s) of the empty-sphere function" in out
    assert "note: octahedral: at this c/a the hole lies off the site's centre" in out
