"""Fit analysis: interstitial hole fit and the Hume-Rothery rules."""
import json

import pytest

import crystalview as cv
from crystalview.errors import UserError


def test_carbon_in_ferrite_and_austenite():
    a = cv.fit("C", cv.build("Fe"))
    # source: Honeycombe & Bhadeshia, Steels: Microstructure and Properties (from memory): r_C = 0.77 A,
    # alpha-Fe octahedral hole 0.19 A, tetrahedral 0.36 A
    assert a["solute_radius_A"] == pytest.approx(0.77)
    by = {s["kind"]: s for s in a["sites"]}
    assert by["octahedral"]["hole_radius_A"] == pytest.approx(0.19, abs=0.005)
    assert by["octahedral"]["misfit_ratio"] == pytest.approx(0.77 / by["octahedral"]["hole_radius_A"])
    # strain definition: (r_s - r_h) / (R + r_h)
    R = a["host_radius_A"]
    rh = by["tetrahedral"]["hole_radius_A"]
    assert by["tetrahedral"]["linear_strain"] == pytest.approx((0.77 - rh) / (R + rh))
    # common practice: BCC has 3 octahedral and 6 tetrahedral sites per atom
    assert by["octahedral"]["sites_per_host_atom"] == 3 and by["tetrahedral"]["sites_per_host_atom"] == 6
    assert a["largest_hole"] == "tetrahedral"
    # source: Honeycombe & Bhadeshia (from memory): C occupies the octahedral sites of ferrite
    assert a["preferred_site"] == "octahedral"
    assert a["caution"] == cv.CAUTION
    g = cv.fit("C", "Fe", phase="gamma")
    # source: Honeycombe & Bhadeshia (from memory): carbon sits in the octahedral holes of austenite
    assert g["preferred_site"] == "octahedral"
    # hydrogen in ferrite: the larger tetrahedral hole
    assert cv.fit("H", "Fe")["preferred_site"] == "tetrahedral"


def test_fit_spread_on_defected_crystal():
    c = cv.build("Fe", repeat=(3, 3, 3))
    d = c.delete([5])
    d.record_defect("vacancy", count=1)
    f = cv.fit("N", d)
    assert not f["perfect"]
    kinds = {s["kind"]: s for s in f["sites"]}
    assert "vacancy" in kinds
    oct_ = kinds["octahedral"]
    assert oct_["hole_radius_min_A"] <= oct_["hole_radius_median_A"] <= oct_["hole_radius_max_A"]


@pytest.mark.parametrize("host,solute", [
    ("Cu", "Ni"), ("Ni", "Cu"),   # source: Callister & Rethwisch, isomorphous Cu-Ni system
    ("Ag", "Au"), ("Au", "Ag"),   # source: Ag-Au complete solid solution (ASM Handbook Vol. 3, from memory)
    ("Mo", "W"), ("W", "Mo"),     # source: Mo-W complete solid solution (ASM Handbook Vol. 3, from memory)
])
def test_hume_rothery_miscible(host, solute):
    r = cv.fit(solute, cv.build(host))
    assert r["mode"] == "substitutional"
    assert r["verdict_code"] in ("complete", "extensive")
    rules = {c["rule"]: c for c in r["criteria"]}
    assert rules["atomic size"]["pass"] and rules["crystal structure"]["pass"]
    assert r["caution"] == cv.CAUTION


@pytest.mark.parametrize("host,solute", [
    ("Cu", "Pb"),   # source: ASM Handbook Vol. 3, Cu-Pb monotectic, practically immiscible in the solid (from memory)
    ("Fe", "Pb"),   # source: ASM Handbook Vol. 3, Fe-Pb immiscible (from memory)
])
def test_hume_rothery_immiscible(host, solute):
    r = cv.fit(solute, cv.build(host))
    assert r["verdict_code"] == "limited"
    size = r["criteria"][0]
    assert size["rule"] == "atomic size" and not size["pass"] and size["value"] > 15


def test_cu_ni_numbers():
    r = cv.fit("Ni", "Cu")
    size = r["criteria"][0]
    # source: Callister & Rethwisch (from memory): Cu 0.128 nm, Ni 0.125 nm -> about 2-3 % difference
    assert size["value"] == pytest.approx(abs(1.24 - 1.28) / 1.28 * 100, abs=1e-9)
    assert r["verdict_code"] == "complete"


def test_bad_input():
    with pytest.raises(UserError):
        cv.fit("Xx", "Fe")
    with pytest.raises(UserError):
        cv.fit("Sn", "Fe")          # an element with no radius data
    with pytest.raises(UserError):
        cv.fit("C", "Qq")           # unknown host


def test_cli_fit(cli):
    rc, out, err = cli("fit", "C", "Fe", "--json")
    assert rc == 0
    data = json.loads(out)
    assert data["caution"] == cv.CAUTION and data["preferred_site"] == "octahedral"
    rc, out, err = cli("fit", "Ni", "Cu")
    assert rc == 0 and cv.CAUTION in out and "pass" in out
    rc, out, err = cli("fit", "C", "Fe", "--phase", "gamma")
    assert rc == 0 and cv.CAUTION in out
    rc, out, err = cli("fit", "Zz", "Fe")
    assert rc == 2 and err.count("\n") == 1
