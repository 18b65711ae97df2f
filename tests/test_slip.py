"""Slip systems, Schmid factors, Schmid's law (crystalview.analysis.slip, `crystalview slip`)."""
import json
import math
import subprocess
import sys

import numpy as np
import pytest

import crystalview as cv
from crystalview.analysis.slip import (family_names, independent_slip_systems, load_axis,
                                       schmid_factors, slip_overlay, slip_systems, taylor_factor)
from crystalview.cli import main
from crystalview.errors import UserError


@pytest.fixture(scope="module")
def cu():
    return cv.build("Cu")


@pytest.fixture(scope="module")
def fe():
    return cv.build("Fe")


@pytest.fixture(scope="module")
def mg():
    return cv.build("Mg")


def _top(res):
    m = res[0].schmid_factor
    return m, sum(r.most_favoured for r in res)


# ------------------------------------------------------------------ tables
@pytest.mark.parametrize("spec,kw,family,count", [
    # source: Hull & Bacon, Introduction to Dislocations, table of slip systems (from memory)
    ("Cu", {}, "{111}<110>", 12),
    ("Fe", {}, "{110}<111>", 12),
    ("Fe", {}, "{112}<111>", 12),
    ("Fe", {}, "{123}<111>", 24),
    ("Mg", {}, "basal", 3),
    ("Mg", {}, "prismatic", 3),
    ("Mg", {}, "pyramidal <a>", 6),
    ("Mg", {}, "pyramidal <c+a>", 6),
    ("Ti", {}, "pyramidal <c+a> 1st order", 12),
    # ordered lattices: B2 as BCC {110}<111>, NiAl-type {110}<100> (3 x 2 = 6, cube axes in the
    # {110} planes containing them; common practice), L1_2 / L1_0 octahedral slip
    ("B2", {"elements": ("Ni", "Al"), "a": 2.887}, "{110}<111>", 12),
    ("B2", {"elements": ("Ni", "Al"), "a": 2.887}, "{110}<100>", 6),
    ("Ni3Al", {}, "{111}<110>", 12),
    ("L1_0", {"elements": ("Ti", "Al"), "a": 3.99, "c": 4.07}, "{111}<110>", 12),
])
def test_family_counts(spec, kw, family, count):
    c = cv.build(spec, **kw)
    systems = slip_systems(c, family)
    assert len(systems) == count
    assert {s.family for s in systems} == {family}


def test_default_families_and_totals(cu, fe, mg):
    # Hull & Bacon (from memory): FCC 12; BCC 12 + 12 + 24 = 48; HCP 3 + 3 + 6 + 6 = 18
    assert len(slip_systems(cu)) == 12
    assert len(slip_systems(fe)) == 48
    assert len(slip_systems(mg)) == 18
    assert family_names(mg)[:4] == ["basal", "prismatic", "pyramidal <a>", "pyramidal <c+a>"]


@pytest.mark.parametrize("spec", ["Cu", "Fe", "Mg", "Ti", "Zn", "Ni3Al"])
def test_direction_in_plane_and_no_duplicates(spec):
    c = cv.build(spec)
    fams = family_names(c)
    systems = slip_systems(c, fams)
    keys = set()
    for s in systems:
        # zone law h u + k v (+ i t) + l w = 0, on the index strings themselves  # common practice
        p = cv.parse_indices(s.plane).values
        d = cv.parse_indices(s.direction).values
        assert sum(a * b for a, b in zip(p, d)) == 0
        assert abs(np.dot(s.unit_normal, s.unit_direction)) < 1e-12
        assert np.isclose(np.linalg.norm(s.unit_normal), 1) and np.isclose(np.linalg.norm(s.unit_direction), 1)
        # b and -b (and n and -n) are the same system: compare up to sign
        n = tuple(np.round(s.unit_normal * np.sign(s.unit_normal[np.argmax(np.abs(s.unit_normal) > 1e-9)]), 9))
        v = tuple(np.round(s.unit_direction * np.sign(s.unit_direction[np.argmax(np.abs(s.unit_direction) > 1e-9)]), 9))
        assert (n, v) not in keys
        keys.add((n, v))
    assert len(keys) == len(systems)


@pytest.mark.parametrize("spec", ["Cu", "Fe", "Mg"])
def test_tables_closed_under_spglib_symmetry(spec):
    # independent oracle: the point-group rotations spglib finds for the built crystal map every
    # slip system onto another one of the same family (up to sign)
    import spglib

    c = cv.build(spec)
    sym = spglib.get_symmetry((c.cell, c.frac, c.numbers), symprec=1e-5)
    rots = {tuple(r.ravel()) for r in sym["rotations"]}
    assert len(rots) == (48 if spec != "Mg" else 24)   # m-3m and 6/mmm, International Tables Vol. A
    A = c.cell.T                                        # fractional -> Cartesian for column vectors
    for fam in family_names(c):
        systems = slip_systems(c, fam)

        def key(n, d):
            n = n / np.linalg.norm(n)
            d = d / np.linalg.norm(d)
            n = n * (1 if n[np.argmax(np.abs(n) > 1e-9)] > 0 else -1)
            d = d * (1 if d[np.argmax(np.abs(d) > 1e-9)] > 0 else -1)
            return tuple(np.round(n, 6)), tuple(np.round(d, 6))

        table = {key(s.unit_normal, s.unit_direction) for s in systems}
        for r in rots:
            R = A @ np.array(r, float).reshape(3, 3) @ np.linalg.inv(A)   # Cartesian rotation
            for s in systems:
                assert key(R @ s.unit_normal, R @ s.unit_direction) in table


def test_burgers_vectors(cu, fe, mg):
    # source: Hull & Bacon, Introduction to Dislocations (from memory): FCC b = a/2<110>, |b| = a/sqrt2;
    # BCC b = a/2<111>, |b| = a sqrt3 / 2; HCP <a> = 1/3<11-20>, |b| = a; <c+a> = 1/3<11-23>, |b| = sqrt(a^2+c^2)
    a = cu.lattice.a
    s = slip_systems(cu)[0]
    assert s.burgers_vector.startswith("1/2[") and math.isclose(s.burgers_length_A, a / math.sqrt(2), rel_tol=1e-9)
    a = fe.lattice.a
    s = slip_systems(fe)[0]
    assert s.burgers_vector.startswith("1/2[") and math.isclose(s.burgers_length_A, a * math.sqrt(3) / 2, rel_tol=1e-9)
    a, c = mg.lattice.a, mg.lattice.c
    basal = slip_systems(mg, "basal")[0]
    assert basal.burgers_vector.startswith("1/3[") and math.isclose(basal.burgers_length_A, a, rel_tol=1e-9)
    ca = slip_systems(mg, "pyramidal <c+a>")[0]
    assert ca.burgers_vector.startswith("1/3[") and math.isclose(ca.burgers_length_A, math.hypot(a, c), rel_tol=1e-9)
    # ordered L1_2: the perfect translation along <110> is a<110> (a superdislocation), Hull & Bacon
    ni3al = cv.build("Ni3Al")
    assert math.isclose(slip_systems(ni3al)[0].burgers_length_A, ni3al.lattice.a * math.sqrt(2), rel_tol=1e-9)


# ------------------------------------------------------------------ Schmid factors
@pytest.mark.parametrize("axis,m,n", [
    # source: Schmid & Boas; Hull & Bacon, Introduction to Dislocations: FCC single crystals
    ("[001]", 1 / math.sqrt(6), 8),     # 0.408 on 8 systems
    ("[111]", 2 / (3 * math.sqrt(6)), 6),  # 0.272 on 6 systems
    ("[011]", 1 / math.sqrt(6), 4),     # 0.408 on 4 systems
])
def test_fcc_schmid_factors(cu, axis, m, n):
    res = schmid_factors(cu, axis)
    top, count = _top(res)
    assert math.isclose(top, m, rel_tol=1e-9)
    assert round(top, 3) == {8: 0.408, 6: 0.272, 4: 0.408}[n]
    assert count == n
    assert all(res[i].schmid_factor >= res[i + 1].schmid_factor for i in range(len(res) - 1))
    assert all(0 <= r.schmid_factor <= 0.5 for r in res)


def test_fcc_general_axis_by_hand(cu):
    # independent hand computation of cos(phi) cos(lambda) with integer vectors for [123]:
    # best system (-111)[101]... computed here over all {111}<110> pairs, cubic metric
    t = np.array([1, 2, 3], float)
    planes = [(1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)]
    dirs = [(1, -1, 0), (1, 0, -1), (0, 1, -1), (1, 1, 0), (1, 0, 1), (0, 1, 1)]
    best = max(abs(np.dot(p, t) * np.dot(d, t)) / (np.linalg.norm(p) * np.linalg.norm(d) * np.dot(t, t))
               for p in planes for d in dirs if np.dot(p, d) == 0)
    assert math.isclose(schmid_factors(cu, "123")[0].schmid_factor, best, rel_tol=1e-12)
    assert round(best, 3) == 0.467   # Hull & Bacon worked value for [123] (from memory)


def test_oriented_crystal_gives_same_factors(cu):
    # the frame follows the crystal: an oriented supercell gives the same numbers  # common practice
    rot = cv.build("Cu", orient=["[1-10]", "[11-2]", "[111]"])
    a = [round(r.schmid_factor, 9) for r in schmid_factors(cu, "[123]")]
    b = [round(r.schmid_factor, 9) for r in schmid_factors(rot, "[123]")]
    assert a == b


def test_hcp_along_c(mg):
    # source: Hull & Bacon (from memory): loading along [0001] puts no shear on basal or prismatic slip
    res = schmid_factors(mg, "[0001]")
    for r in res:
        if r.family in ("basal", "prismatic", "pyramidal <a>"):
            assert r.schmid_factor == 0.0
    assert res[0].family == "pyramidal <c+a>" and res[0].schmid_factor > 0.4
    # 3-index [001] is the same axis
    assert [r.schmid_factor for r in schmid_factors(mg, "[001]")] == [r.schmid_factor for r in res]


def test_hcp_basal_45_degrees_by_hand(mg):
    # hand computation: axis 45 deg from c in the plane of c and a1 = 1/3[2-1-10]:
    # cos(phi) = cos(lambda) = cos 45 -> m = 0.5 on (0001)[2-1-10]; the other two <a> are 120 deg
    # away in the basal plane: m = 0.5 * |cos 120| = 0.25
    axis = np.array([1.0, 0.0, 1.0])          # a1 is along x, c along z in the crystal frame
    res = schmid_factors(mg, axis, families="basal", cartesian=True)
    assert math.isclose(res[0].schmid_factor, 0.5, rel_tol=1e-12)
    assert res[0].direction == "[2-1-10]"
    assert [round(r.schmid_factor, 12) for r in res[1:]] == [0.25, 0.25]
    # the same with whole-number indices on a cell with c = 2a: [201] = [4-2-23] = 2 a1 + c at 45 deg to c
    c2 = cv.build("hcp", element="Mg", a=3.0, c=6.0)
    assert math.isclose(schmid_factors(c2, "[4-2-23]", families="basal")[0].schmid_factor, 0.5, rel_tol=1e-12)
    assert math.isclose(schmid_factors(c2, "[201]", families="basal")[0].schmid_factor, 0.5, rel_tol=1e-12)
    # and the real c/a of Mg: axis [2-1-13] = a1 + c, m = a c / (a^2 + c^2) by hand
    a, c = mg.lattice.a, mg.lattice.c
    assert math.isclose(schmid_factors(mg, "[2-1-13]", families="basal")[0].schmid_factor,
                        a * c / (a * a + c * c), rel_tol=1e-12)


def test_hcp_prismatic_along_a(mg):
    # hand computation: load along a1 = [2-1-10]: the prismatic planes (1-100) and (01-10) are at
    # 30 deg / 90 deg ... the best prismatic system has phi = lambda ... m = cos30 cos60 = sqrt3/4
    res = schmid_factors(mg, "[2-1-10]", families="prismatic")
    assert math.isclose(res[0].schmid_factor, math.sqrt(3) / 4, rel_tol=1e-12)
    assert sum(r.most_favoured for r in res) == 2
    assert all(r.schmid_factor == 0 for r in schmid_factors(mg, "[2-1-10]", families="basal"))


def test_stress_and_crss(cu, mg):
    # Schmid's law (Schmid & Boas): tau = m sigma; yield at sigma = CRSS / m
    res = schmid_factors(cu, "001", stress=100, crss=0.5)
    m = 1 / math.sqrt(6)
    assert math.isclose(res[0].resolved_shear_stress_MPa, 100 * m, rel_tol=1e-9)
    assert math.isclose(res[0].yield_stress_MPa, 0.5 / m, rel_tol=1e-9)
    assert res[-1].schmid_factor == 0 and res[-1].yield_stress_MPa is None
    # compression: the same magnitude
    assert math.isclose(schmid_factors(cu, "001", stress=-100)[0].resolved_shear_stress_MPa, 100 * m, rel_tol=1e-9)
    # per-family CRSS (Mg: basal much softer than prismatic) -> the first system to yield
    from crystalview.analysis.slip import first_to_yield

    r = schmid_factors(mg, "[2-1-13]", families=["basal", "prismatic"], crss={"basal": 0.5, "prismatic": 40})
    f = first_to_yield(r)
    assert f.family == "basal"
    assert math.isclose(f.yield_stress_MPa, 0.5 / f.schmid_factor, rel_tol=1e-12)


# ------------------------------------------------------------------ polycrystal numbers
@pytest.mark.parametrize("spec,family,n", [
    # source: von Mises criterion; Groves & Kelly (1963) counts of independent slip systems (from memory)
    ("Cu", None, 5),
    ("Fe", None, 5),
    ("Mg", "basal", 2),
    ("Mg", "prismatic", 2),
    ("Mg", ["basal", "prismatic"], 4),
    ("Mg", "pyramidal <a>", 4),
    ("Mg", "pyramidal <c+a>", 5),
    ("B2", "{110}<100>", 3),    # NiAl: only 3 independent <100>{110} systems (from memory)
])
def test_independent_slip_systems(spec, family, n):
    kw = {"elements": ("Ni", "Al"), "a": 2.887} if spec == "B2" else {}
    assert independent_slip_systems(cv.build(spec, **kw), family) == n


def _taylor_lp(crystal, families, n=150, seed=1):
    """Independent check: Taylor's minimum-shear model solved as a linear programme for random
    grain orientations (uniaxial tension, volume-preserving strain)."""
    from scipy.optimize import linprog
    from scipy.spatial.transform import Rotation

    S = slip_systems(crystal, families)
    P = [0.5 * (np.outer(s.unit_direction, s.unit_normal) + np.outer(s.unit_normal, s.unit_direction)) for s in S]
    idx = [(0, 0), (1, 1), (0, 1), (0, 2), (1, 2)]
    A = np.array([[p[i, j] for i, j in idx] for p in P]).T
    A = np.hstack([A, -A])
    out = []
    for R in Rotation.random(n, random_state=seed).as_matrix():
        t = R[:, 2]
        E = 1.5 * np.outer(t, t) - 0.5 * np.eye(3)
        r = linprog(np.ones(A.shape[1]), A_eq=A, b_eq=[E[i, j] for i, j in idx], bounds=(0, None), method="highs")
        assert r.status == 0
        out.append(r.fun)
    return float(np.mean(out))


def test_taylor_factor_constants(cu, fe, mg):
    # source: Taylor (1938), Bishop & Hill (1951): M = 3.06 for FCC (from memory)
    t = taylor_factor(cu)
    assert t["value"] == 3.06 and "from memory" in t["source"]
    assert abs(_taylor_lp(cu, None) - 3.06) < 0.1
    # source: Chin & Mammel (1967), BCC pencil glide M ~ 2.73 (from memory)
    t = taylor_factor(fe)
    assert t["value"] == 2.73
    assert abs(_taylor_lp(fe, None) - 2.73) < 0.1
    # HCP basal + prismatic: fewer than five independent systems -> no Taylor factor
    t = taylor_factor(mg, ["basal", "prismatic"])
    assert t["value"] is None and t["independent_systems"] == 4


# ------------------------------------------------------------------ overlay
def test_slip_overlay(cu, mg):
    o = slip_overlay(cu, "[001]")
    assert o["load_axis"] == "[001]"
    assert o["ties"] == 8
    res = schmid_factors(cu, "[001]")
    assert o["planes"] == [res[0].plane] and o["directions"] == [res[0].direction]
    assert o["label"] == f"{res[0].plane}{res[0].direction}  m = 0.408"
    o = slip_overlay(mg, "[2-1-13]", families="basal")
    assert o["label"] == "(0001)[2-1-10]  m = 0.447" and o["load_axis"] == "[2-1-13]"


# ------------------------------------------------------------------ bad input
@pytest.mark.parametrize("axis,words", [
    ("[000]", "zero"),
    ((0, 0, 0), "zero"),
    ("[1x0]", "malformed"),
    ("[12]", "need 3 indices"),
    ("(111)", "plane"),
    ("[0001]", "hexagonal"),
    ((0.5, 1, 0), "whole numbers"),
])
def test_bad_axis(cu, axis, words):
    with pytest.raises(UserError) as e:
        schmid_factors(cu, axis)
    assert words in str(e.value) and "\n" not in str(e.value)


def test_bad_family_and_numbers(cu, mg):
    with pytest.raises(UserError, match="fcc lattice has no 'basal'"):
        slip_systems(cu, "basal")
    with pytest.raises(UserError, match="unknown slip family"):
        slip_systems(cu, "{999}<111>")
    with pytest.raises(UserError, match="ambiguous"):
        slip_systems(mg, "{10-11}")
    with pytest.raises(UserError, match="above zero"):
        schmid_factors(cu, "001", crss=0)
    with pytest.raises(UserError, match="not a number"):
        schmid_factors(cu, "001", stress="lots")
    with pytest.raises(UserError, match="no slip systems are tabulated"):
        slip_systems(cv.build("sc", element="Po", a=3.35))
    with pytest.raises(UserError, match="four-index"):
        load_axis(mg, "[2-1-21]")


# ------------------------------------------------------------------ command line
def test_cli_text(capsys):
    assert main(["slip", "Cu", "--axis", "001"]) == 0
    out = capsys.readouterr().out
    rows = [ln for ln in out.splitlines() if ln.startswith("*")]
    assert len(rows) == 8
    assert "0.4082 on 8 systems" in out
    assert cv.CAUTION not in out          # nothing predicted without --stress / --crss
    assert main(["slip", "Cu", "--axis", "[111]", "--crss", "0.5"]) == 0
    out = capsys.readouterr().out
    assert "0.2722 on 6 systems" in out and cv.CAUTION in out
    assert f"{0.5 / (2 / (3 * math.sqrt(6))):.4g} MPa" in out


def test_cli_json(capsys):
    assert main(["slip", "Mg", "--axis", "[0001]", "--json", "--stress", "10", "--crss", "basal=0.5"]) == 0
    rep = json.loads(capsys.readouterr().out)
    assert rep["axis"] == "[0001]" and rep["caution"] == cv.CAUTION
    assert rep["systems_at_highest"] == 6 and rep["independent_slip_systems"] == 5
    # no basal yield along c: basal m = 0 (Schmid's law; common practice)
    assert rep["first_to_yield"] is None
    data = rep["systems"]
    assert len(data) == 18
    for d in data:
        assert {"family", "plane", "direction", "schmid_factor", "resolved_shear_stress_MPa"} <= set(d)
        if d["family"] == "basal":
            assert d["schmid_factor"] == 0 and d["yield_stress_MPa"] is None
    assert sum(d["most_favoured"] for d in data) == 6


def test_cli_json_taylor_and_format_json_agree(capsys):
    assert main(["slip", "Cu", "--axis", "[001]", "--json"]) == 0
    rep = json.loads(capsys.readouterr().out)
    # source: Taylor factor 3.06 for a random FCC polycrystal with {111}<110> slip (Taylor 1938,
    # Bishop & Hill 1951; from memory); m = 1/sqrt(6) = 0.408 on 8 systems along [001] (common practice)
    assert rep["taylor_factor"]["value"] == pytest.approx(3.06)
    assert rep["highest_schmid_factor"] == pytest.approx(1 / math.sqrt(6)) and rep["systems_at_highest"] == 8
    assert "caution" not in rep            # no stress, no yield: nothing that feeds a decision
    assert main(["slip", "Cu", "--axis", "[001]", "--format", "json"]) == 0
    assert json.loads(capsys.readouterr().out) == rep


@pytest.mark.parametrize("argv,words", [
    (["slip", "Cu", "--axis", "000"], "all zero"),
    (["slip", "Cu", "--axis", "[1a0]"], "malformed"),
    (["slip", "Cu", "--axis", "001", "--family", "basal"], "no 'basal'"),
    (["slip", "Cu", "--axis", "001", "--crss", "-1"], "above zero"),
    (["slip", "Cu", "--axis", "001", "--crss", "1", "--crss", "basal=2"], "not both"),
])
def test_cli_errors(capsys, argv, words):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert words in err and err.count("\n") == 1


def test_cli_imports_nothing_heavy():
    code = ("import sys; from crystalview.cli import main; main(['slip', 'Ti', '--axis', '[0001]', '--json']); "
            "bad = [m for m in sys.modules if m.split('.')[0] in ('vtk', 'vtkmodules', 'pyvista', 'scipy')]; "
            "sys.stderr.write(repr(bad))")
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert p.returncode == 0
    assert p.stderr.strip() == "[]"


def test_nial_hard_orientation():
    # source: Noebe, Bowman & Nathal, review of NiAl (1993), from memory: along [001] every
    # <100>{110} system has zero Schmid factor (the "hard" orientation); along [011] m = 0.354
    nial = cv.build("NiAl")
    assert nial.lattice.prototype == "B2"
    res = schmid_factors(nial, "[001]", families="{110}<100>")
    assert len(res) == 6 and all(r.schmid_factor == 0 for r in res)
    assert not any(r.most_favoured for r in res)
    assert math.isclose(schmid_factors(nial, "[011]", families="cube")[0].schmid_factor,
                        math.sqrt(2) / 4, rel_tol=1e-12)   # hand: cos60 cos45
