"""Dislocations: Volterra displacement fields and Burgers circuits."""
import math

import numpy as np
import pytest

import crystalview as cv
build = cv.build  # the public function (see the report on the cv.build name clash)
from crystalview.defects.dislocation import _ORIENT, burgers_circuit, edge_displacement, screw_displacement
from crystalview.errors import UserError


def _b_along(result, cell, expect_frac):
    """True when the circuit's b equals the expected conventional-cell vector."""
    return np.allclose(result["in_cell"], expect_frac, atol=1e-6)


@pytest.mark.parametrize("character", ["edge", "screw"])
def test_fcc_burgers_circuit_gives_a_half_110(character):
    d = cv.dislocation("Cu", character)
    r = burgers_circuit(d)
    a = build("Cu").lattice.a
    # b = a/2<110>, |b| = a/sqrt(2) -- source: Hull & Bacon, Introduction to Dislocations, ch. 1/5
    assert r["magnitude_A"] == pytest.approx(a / math.sqrt(2), abs=1e-9)
    assert sorted(np.abs(r["in_cell"])) == pytest.approx([0.0, 0.5, 0.5])
    assert r["text"] == d.metadata["defects"][-1]["burgers_vector"] == "a/2[1-10]"
    assert np.allclose(r["burgers_vector_A"], d.metadata["defects"][-1]["burgers_vector_A"])
    assert r["real_closure_A"] < 1e-9           # the circuit in the real crystal is closed


@pytest.mark.parametrize("character", ["edge", "screw"])
def test_bcc_burgers_circuit_gives_a_half_111(character):
    d = cv.dislocation("Fe", character)
    r = burgers_circuit(d)
    a = build("Fe").lattice.a
    # b = a/2<111>, |b| = a sqrt(3)/2 -- source: Hull & Bacon, Introduction to Dislocations
    assert r["magnitude_A"] == pytest.approx(a * math.sqrt(3) / 2, abs=1e-9)
    assert sorted(np.abs(r["in_cell"])) == pytest.approx([0.5, 0.5, 0.5])


def test_perfect_crystal_circuit_closes():
    p = build("Cu", orient=_ORIENT[("fcc", "edge")][0], repeat=(14, 6, 2))
    r = burgers_circuit(p)
    assert r["magnitude_A"] < 1e-9


def test_line_and_burgers_directions():
    d = cv.dislocation("Cu", "screw").metadata["defects"][-1]
    # screw: b parallel to the line; edge: b normal to the line (Hull & Bacon ch. 1)
    assert np.allclose(np.abs(np.asarray(d["burgers_vector_A"]) / d["burgers_magnitude_A"]), [0, 0, 1])
    e = cv.dislocation("Cu", "edge").metadata["defects"][-1]
    assert abs(np.dot(e["burgers_vector_A"], e["line_vector"])) < 1e-9
    assert cv.dislocation("Cu", "edge").pbc == (False, False, True)


def test_edge_field_matches_closed_form():
    # Hirth & Lothe, Theory of Dislocations, eq. 3-45, evaluated independently here
    b, nu = 2.556, 0.3
    pts = [(3.0, 2.0), (-4.0, 1.5), (-2.5, -3.0), (5.0, -0.5), (0.7, 6.0)]
    for x, y in pts:
        r2 = x * x + y * y
        th = math.atan2(y, x)
        ux = b / (2 * math.pi) * (th + x * y / (2 * (1 - nu) * r2))
        uy = -b / (2 * math.pi) * ((1 - 2 * nu) / (4 * (1 - nu)) * math.log(r2) + (x * x - y * y) / (4 * (1 - nu) * r2))
        gx, gy = edge_displacement(x, y, b, nu)
        assert float(gx) == pytest.approx(ux, rel=1e-12) and float(gy) == pytest.approx(uy, rel=1e-12)
    # the jump of u_x across the cut (x < 0, y = 0) is b: Volterra cut (Hirth & Lothe ch. 3)
    up, _ = edge_displacement(-3.0, 1e-9, b, nu)
    dn, _ = edge_displacement(-3.0, -1e-9, b, nu)
    assert float(up - dn) == pytest.approx(b, rel=1e-6)


def test_screw_field_matches_closed_form():
    b = 2.4825
    for x, y in [(1.0, 1.0), (-2.0, 0.5), (0.3, -4.0)]:
        assert float(screw_displacement(x, y, b)) == pytest.approx(b * math.atan2(y, x) / (2 * math.pi))


def test_built_crystal_displacements_match_field():
    nu = 0.34
    d = cv.dislocation("Al", "edge", poisson=nu, size=(12, 5, 1))
    rec = d.metadata["defects"][-1]
    p = build("Al", orient=rec["orient"], repeat=tuple(rec["size"]))
    x0, y0 = rec["core_A"]
    ux, uy = edge_displacement(p.positions[:, 0] - x0, p.positions[:, 1] - y0, rec["burgers_magnitude_A"], nu)
    assert np.allclose(d.positions[:, 0] - p.positions[:, 0], ux)
    assert np.allclose(d.positions[:, 1] - p.positions[:, 1], uy)
    assert np.allclose(d.positions[:, 2], p.positions[:, 2])
    assert rec["poisson_ratio"] == nu


def test_bad_dislocation_input():
    for args, kw in ((("Cu", "mixed"), {}), (("Mg", "edge"), {}), (("Cu", "edge"), {"poisson": 0.7})):
        with pytest.raises(UserError):
            cv.dislocation(*args, **kw)


def test_cli_dislocation(cli):
    import crystalview.cli.defect_args  # noqa: F401

    rc, out, err = cli("info", "Fe", "--dislocation", "screw")
    assert rc == 0, err
    assert "kind=dislocation" in out and "burgers_vector=a/2[111]" in out
    rc, out, err = cli("info", "Cu", "--dislocation", "edge", "--orient", "[100]", "[010]", "[001]")
    assert rc == 2
