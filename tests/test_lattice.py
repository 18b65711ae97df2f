"""Indices, d-spacings, planar and linear densities, angles."""
import math

import pytest

import crystalview as cv
from crystalview import lattice as L
from crystalview.errors import UserError


def test_parse_forms():
    assert L.parse_indices("[1-10]").values == (1, -1, 0)
    assert L.parse_indices("<110>").family
    assert L.parse_indices("{111}").kind == "plane"
    assert L.parse_indices("[2-1-10]").three().values == (1, 0, 0)
    assert L.parse_indices("(10-12)").three().values == (1, 0, 2)
    assert L.parse_indices("[1,-1,10]").values == (1, -1, 10)


@pytest.mark.parametrize("bad", ["[1x0]", "(000)", "[000]", "[11]", "[1-1", "(1,a,0)", "[2-1-21]", "(10-10-0)"])
def test_parse_bad(bad):
    with pytest.raises(UserError):
        L.parse_indices(bad)


# source: Callister & Rethwisch, ch. 3, Miller-Bravais conversion (e.g. [010] -> [-12-10]; [100] -> [2-1-10])
@pytest.mark.parametrize("three,four", [((1, 0, 0), (2, -1, -1, 0)), ((0, 1, 0), (-1, 2, -1, 0)),
                                       ((1, 1, 0), (1, 1, -2, 0)), ((0, 0, 1), (0, 0, 0, 1)),
                                       ((1, 1, 1), (1, 1, -2, 3))])
def test_three_four_round_trip(three, four):
    assert L.miller_to_mb_direction(three) == four
    assert L.mb_to_miller_direction(four) == three


def test_plane_round_trip():
    for hkl in [(1, 0, 0), (1, 0, 1), (1, 1, 2), (0, 0, 1)]:
        assert L.mb_to_miller_plane(L.miller_to_mb_plane(hkl)) == hkl


def test_d_spacing_worked_example():
    # source: Callister & Rethwisch, Example Problem (X-ray diffraction): BCC iron, a = 0.2866 nm,
    # d_220 = 0.1013 nm (from memory)
    c = cv.build("Fe", a=2.866)
    assert L.d_spacing(c.lattice.cell, "(220)") == pytest.approx(1.013, abs=5e-4)


def test_hexagonal_d_spacing_formula():
    # common practice: 1/d^2 = 4/3 (h^2 + hk + k^2)/a^2 + l^2/c^2
    c = cv.build("Ti")
    a, cc = c.lattice.a, c.lattice.c
    for hkl in [(1, 0, 0), (1, 0, 1), (1, 1, 0), (0, 0, 2), (1, 0, 2)]:
        h, k, l = hkl
        ref = 1 / math.sqrt(4 / 3 * (h * h + h * k + k * k) / a ** 2 + l * l / cc ** 2)
        assert L.d_spacing(c.lattice.cell, hkl) == pytest.approx(ref, rel=1e-12)
    assert L.d_spacing(c.lattice.cell, "(10-11)") == pytest.approx(L.d_spacing(c.lattice.cell, "(101)"))


def test_planar_densities_worked_examples():
    # source: Callister & Rethwisch, Example Problem 3.? (planar density of FCC (110) = 1/(4 R^2 sqrt2)),
    # and the end-of-chapter results for FCC (100) = 1/(4R^2), BCC (100) = 3/(16R^2), BCC (110) = 3/(8R^2 sqrt2)
    fcc = cv.build("Ni")
    R = fcc.metadata["hard_sphere_radius"]
    pd = lambda c, p: L.planar_density(c.lattice.cell, c.lattice.basis_frac, p)
    assert pd(fcc, "(110)") == pytest.approx(1 / (4 * R * R * math.sqrt(2)))
    assert pd(fcc, "(100)") == pytest.approx(1 / (4 * R * R))
    assert pd(fcc, "(111)") == pytest.approx(1 / (2 * math.sqrt(3) * R * R))
    bcc = cv.build("W")
    R = bcc.metadata["hard_sphere_radius"]
    assert pd(bcc, "(100)") == pytest.approx(3 / (16 * R * R))
    assert pd(bcc, "(110)") == pytest.approx(3 / (8 * math.sqrt(2) * R * R))
    # the close-packed plane is the densest: FCC {111}, BCC {110} (common practice)
    assert pd(fcc, "(111)") > pd(fcc, "(100)") > pd(fcc, "(110)")
    assert pd(bcc, "(110)") > pd(bcc, "(100)")


def test_linear_densities_worked_examples():
    # source: Callister & Rethwisch, Example Problem (linear density of FCC [110] = 1/(2R));
    # BCC [111] = 1/(2R) (close-packed direction), BCC [110] = sqrt(3)/(4 R sqrt2) ... 1 atom per a*sqrt2
    fcc = cv.build("Cu")
    R = fcc.metadata["hard_sphere_radius"]
    ld = lambda c, d: L.linear_density(c.lattice.cell, c.lattice.basis_frac, d)
    assert ld(fcc, "[110]") == pytest.approx(1 / (2 * R))
    assert ld(fcc, "[100]") == pytest.approx(1 / fcc.lattice.a)
    bcc = cv.build("Fe")
    R = bcc.metadata["hard_sphere_radius"]
    assert ld(bcc, "[111]") == pytest.approx(1 / (2 * R))
    assert ld(bcc, "[110]") == pytest.approx(1 / (bcc.lattice.a * math.sqrt(2)))
    hcp = cv.build("Mg")
    assert ld(hcp, "[2-1-10]") == pytest.approx(1 / hcp.lattice.a)


def test_angles():
    c = cv.build("Cu")
    # common practice: angles between cubic directions
    assert L.angle_between(c.lattice.cell, "[100]", "[111]") == pytest.approx(54.7356, abs=1e-4)
    assert L.angle_between(c.lattice.cell, "[110]", "[111]") == pytest.approx(35.2644, abs=1e-4)
    h = cv.build("Mg")
    assert L.angle_between(h.lattice.cell, "[2-1-10]", "[-12-10]") == pytest.approx(120.0)
    assert L.angle_between(h.lattice.cell, "[2-1-10]", "[0001]") == pytest.approx(90.0)


def test_atomic_layer_spacings():
    # common practice: fcc (100) atom layers are a/2 apart although d_100 = a (the first fcc
    # reflection is (200)); bcc (100) likewise; hcp (10-10) layers alternate a/(2 sqrt3) and a/sqrt3
    cu, fe, mg = cv.build("Cu"), cv.build("Fe"), cv.build("Mg")
    lay = lambda c, p: L.atomic_layer_spacings(c.lattice.cell, c.lattice.basis_frac, p)
    assert lay(cu, "(100)") == [pytest.approx(cu.lattice.a / 2)]
    assert lay(cu, "(111)") == [pytest.approx(cu.lattice.a / math.sqrt(3))]
    assert lay(fe, "(100)") == [pytest.approx(fe.lattice.a / 2)]
    a = mg.lattice.a
    assert lay(mg, "(10-10)") == [pytest.approx(a / (2 * math.sqrt(3)), abs=1e-6), pytest.approx(a / math.sqrt(3), abs=1e-6)]
    assert lay(mg, "(0001)") == [pytest.approx(mg.lattice.c / 2)]


def test_direction_repeat_is_the_lattice_period():
    # source: Hull & Bacon, Introduction to Dislocations: shortest lattice vectors (Burgers vectors)
    # a/2<110> in fcc and a/2<111> in bcc
    from crystalview.analysis.properties import direction_numbers

    cu, fe = cv.build("Cu"), cv.build("Fe")
    assert direction_numbers(cu, "[110]")["repeat_length_A"] == pytest.approx(cu.lattice.a / math.sqrt(2))
    assert direction_numbers(fe, "[111]")["repeat_length_A"] == pytest.approx(fe.lattice.a * math.sqrt(3) / 2)
    assert direction_numbers(cu, "[100]")["repeat_length_A"] == pytest.approx(cu.lattice.a)
    # B2 NiAl: the body centre holds the other species, so [111] repeats only after the full diagonal
    nial = cv.build("NiAl")
    assert direction_numbers(nial, "[111]")["repeat_length_A"] == pytest.approx(nial.lattice.a * math.sqrt(3))
