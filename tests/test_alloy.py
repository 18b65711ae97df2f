"""Alloys as engineers write them: weight / atom percent, alloy strings, exact counts, Vegard's law,
trade phase names, screening tables for many pairs."""
import csv
import io
import json

import pytest

import crystalview as cv
from crystalview.alloy import alloy_crystal, at_to_wt, counts_for, parse_alloy, vegard, wt_to_at
from crystalview.errors import UserError


def test_weight_to_atom_percent_worked_example():
    # source: Callister & Rethwisch, Materials Science and Engineering, Example Problem 4.3 (from memory):
    # an alloy of 97 wt% Al and 3 wt% Cu is 98.7 at% Al and 1.30 at% Cu
    at = wt_to_at({"Al": 97.0, "Cu": 3.0})
    assert at["Al"] * 100 == pytest.approx(98.7, abs=0.05) and at["Cu"] * 100 == pytest.approx(1.30, abs=0.05)
    back = at_to_wt(at)
    assert back["Cu"] == pytest.approx(0.03, abs=1e-12)
    # the masses behind it are periodictable's standard atomic weights (independent library)
    import periodictable

    x = (3 / periodictable.Cu.mass) / (3 / periodictable.Cu.mass + 97 / periodictable.Al.mass)
    assert at["Cu"] == pytest.approx(x, rel=1e-12)


def test_alloy_string_exact_counts_and_report(cli):
    """304-type austenite Fe-18Cr-8Ni (wt%): exact counts over the supercell, the made composition
    within the default tolerance in wt%, reported in wt% and at%."""
    c = alloy_crystal("Fe", "Fe-18Cr-8Ni", phase="gamma", repeat=(5, 5, 5))
    counts = c.counts()
    assert sum(counts.values()) == 500
    rec = c.metadata["alloy"]
    assert rec["made_wt_percent"]["Cr"] == pytest.approx(18, abs=0.9)
    assert rec["made_wt_percent"]["Ni"] == pytest.approx(8, abs=0.4)
    # the counts are the rounding of the atom fractions (periodictable masses) of 500 sites
    at = parse_alloy("Fe-18Cr-8Ni").atom_fractions()
    assert abs(counts["Cr"] - at["Cr"] * 500) <= 1 and abs(counts["Ni"] - at["Ni"] * 500) <= 1
    rc, out, err = cli("build", "Fe", "--phase", "austenite", "--alloy", "Fe-18Cr-8Ni", "--json")
    assert rc == 0, err
    info = json.loads(out)
    assert info["alloy"]["repeat"] == [3, 3, 3]            # the smallest n x n x n within tolerance
    rc, out, err = cli("info", "Fe", "--phase", "gamma", "--alloy", "Ni-20Cr")
    assert rc == 2 and "is Ni-based but SPEC is Fe" in err


def test_interstitials_in_alloys_and_on_the_command_line(cli):
    c = alloy_crystal("Fe", "Fe-0.4C-1Mn", phase="gamma")
    rec = c.metadata["alloy"]
    assert c.role_counts()["interstitial"] == rec["counts"]["C"] > 0
    assert rec["made_wt_percent"]["C"] == pytest.approx(0.4, abs=0.02)
    # --interstitial by weight percent: C mass fraction of the crystal made
    rc, out, err = cli("build", "Fe", "--repeat", "6", "6", "6", "--interstitial", "C:0.1wt%", "--json")
    assert rc == 0, err
    comp = json.loads(out)["composition"]
    import periodictable

    w = comp["C"] * periodictable.C.mass / (comp["C"] * periodictable.C.mass + comp["Fe"] * periodictable.Fe.mass)
    assert w * 100 == pytest.approx(0.1, abs=0.03)
    rc, out, err = cli("build", "Fe", "--repeat", "3", "3", "3", "--interstitial", "N:2", "--site", "tetrahedral",
                       "--json")
    assert rc == 0 and json.loads(out)["defects"][-1]["site"] == "tetrahedral"
    rc, out, err = cli("build", "Fe", "--interstitial", "Cr:2")
    assert rc == 2 and "substitutes rather than sitting in holes" in err


def test_repeated_substitutions_are_shares_of_the_whole_crystal(cli):
    rc, out, err = cli("build", "Fe", "--phase", "gamma", "--repeat", "5", "5", "5", "--substitute", "Cr:0.18",
                       "--substitute", "Ni:0.08", "--json")
    assert rc == 0, err
    assert json.loads(out)["composition"] == {"Cr": 90, "Fe": 370, "Ni": 40}


# source for the measured values: Pearson, Handbook of Lattice Spacings and Structures of Metals and Alloys
# (from memory): Cu-50Ni 3.566 A, Ag-50Au 4.077 A, Fe-50Cr (bcc) 2.875 A, all at room temperature
@pytest.mark.parametrize("spec,phase,alloy,measured", [("Cu", None, "Cu-50Ni", 3.566), ("Ag", None, "Ag-50Au", 4.077),
                                                      ("Fe", None, "Fe-50Cr", 2.875)])
def test_vegard_estimate_against_measured(spec, phase, alloy, measured):
    host = cv.build(spec, phase=phase)
    v = vegard(parse_alloy(alloy, unit="at"), host.lattice.prototype, host.lattice.a)
    assert v["a"] == pytest.approx(measured, rel=0.003)
    c = alloy_crystal(spec, alloy, unit="at")
    assert c.lattice.a == pytest.approx(v["a"])
    assert "Vegard" in c.metadata["source"] and c.metadata["temperature_K"] is None
    # -a always wins
    assert alloy_crystal(spec, alloy, unit="at", a=3.0 if spec == "Fe" else 3.7).lattice.a in (3.0, 3.7)


def test_given_lattice_parameter_is_reported_as_given(cli):
    rc, out, err = cli("info", "Fe", "--phase", "gamma", "-a", "3.572", "--json")
    s = json.loads(out)
    assert s["parameter_source"] == "given by the user" and s["temperature_K"] is None
    for bad in ("36.15", "0.36"):
        rc, out, err = cli("info", "Cu", "-a", bad)
        assert rc == 2 and err.count("\n") == 1 and "angstrom" in err
    rc, out, err = cli("info", "Cu", "--lattice", "bcc")
    assert rc == 0 and "no bcc phase in the data: a estimated" in out


def test_trade_phase_names(cli):
    # common practice: austenite = gamma-Fe (fcc), ferrite = alpha-Fe (bcc), gamma-prime = Ni3Al (L1_2)
    assert cv.build("Fe", phase="austenite").lattice.prototype == "fcc"
    assert cv.build("Fe", phase="ferrite").lattice.prototype == "bcc"
    assert cv.build("Fe", phase="delta-ferrite").metadata["phase"] == "delta"
    assert cv.build("Ni", phase="gamma-prime").lattice.prototype == "L1_2"
    rc, out, err = cli("info", "Fe", "--phase", "martensite")
    assert rc == 2 and "body-centred tetragonal" in err and err.count("\n") == 1
    rc, out, err = cli("info", "Mn")
    assert rc == 2 and "58 atoms" in err


def test_every_alloying_element_has_data():
    from crystalview import elements as E

    for sym in ["Mn", "Si", "Nb", "V", "W", "Mo", "Cr", "Ni", "Co", "Cu", "Ti", "Zr", "Hf", "Ta", "Re", "Al", "Sn",
                "Zn", "Mg", "Li", "Be", "Ag", "Fe", "P", "S"]:
        e = E.element(sym)
        assert e.metallic_radius and e.electronegativity and e.valence, sym
        assert all(e.sources[f] for f in ("metallic_radius", "electronegativity", "valence")), sym
    for sym in ["C", "N", "O", "H", "B"]:
        assert E.interstitial(sym).radius > 0


def test_screening_table_many_pairs(cli):
    rc, out, err = cli("fit", "C,N,B,Cr,Mo,Mn", "Fe,Fe:gamma,Ni", "--format", "csv")
    assert rc == 0, err
    rows = list(csv.DictReader(io.StringIO(out)))
    assert len(rows) == 18
    # the single-pair results, row by row
    for r in rows:
        host, _, phase = r["host"].partition(":")
        single = cv.fit(r["solute"], cv.build(host, phase=phase or None))
        if single["mode"] == "interstitial":
            assert r["verdict"] == f"{single['preferred_site']} site"
        else:
            assert r["verdict"].split(" ")[0] == single["verdict_code"]
    assert "Caution" in err
    rc, out, err = cli("fit", "C,Cr", "Fe", "--format", "md")
    assert out.startswith("| solute | host |") and "Caution" in out
    rc, out, err = cli("fit", "C,Cr", "Fe,Ni", "--format", "json")
    assert len(json.loads(out)["rows"]) == 4
    rc, out, err = cli("fit", "C,n,xB", "Fe")
    assert rc == 2 and "'xB'" in err                       # the user's own spelling in the message


# source: ASM Handbook Vol. 3, Alloy Phase Diagrams, and Callister & Rethwisch ch. 4 and 9 (from memory):
# Cu-Ni and Ag-Au are completely miscible; Cu-Ag is a eutectic with limited solubility; Cu-Zn (alpha brass),
# Ni-Cr and Al-Cu have limited solubility; Fe-Cr (bcc) is completely miscible at high temperature
@pytest.mark.parametrize("solute,host,code", [("Ni", "Cu", "extensive"), ("Au", "Ag", "extensive"),
                                              ("Ag", "Au", "extensive"), ("Ag", "Cu", "limited"),
                                              ("Zn", "Cu", "limited"), ("Cr", "Fe", "extensive"),
                                              ("Cr", "Ni", "limited"), ("Cu", "Al", "limited")])
def test_verdicts_agree_with_the_textbook_cases(solute, host, code):
    assert cv.fit(solute, host)["verdict_code"] == code


def test_tilt_boundaries_of_different_planes_have_different_labels(cli):
    # common practice: symmetric [001] tilt angle = 2 atan(k/h): (310) 36.87, (210) 53.13 degrees
    a = cv.tilt_boundary("Cu", axis="[001]", plane="(310)")
    b = cv.tilt_boundary("Cu", axis="[001]", plane="(210)")
    ta = a.metadata["defects"][-1]["tilt_angle_deg"]
    tb = b.metadata["defects"][-1]["tilt_angle_deg"]
    assert ta == pytest.approx(36.8699, abs=1e-3) and tb == pytest.approx(53.1301, abs=1e-3)


def test_scene_alloy(tmp_path, cli):
    scene = tmp_path / "a.toml"
    scene.write_text('[scene]\nname = "a"\n[structure]\nelement = "Ni"\nalloy = "Ni-20Cr"\n[analysis]\ninfo = true\n')
    rc, out, err = cli("run", scene, "--out", tmp_path / "o")
    assert rc == 0, err
    info = json.loads((tmp_path / "o" / "info.json").read_text())
    assert info["alloy"]["made_wt_percent"]["Cr"] == pytest.approx(20, abs=1.0)
    scene.write_text('[scene]\nname = "b"\n[structure]\nelement = "Ni"\nalloy_unit = "at"\n')
    rc, out, err = cli("run", scene, "--out", tmp_path / "p")
    assert rc == 2 and "go with alloy" in err


def test_bad_alloys_one_line():
    for text, msg in [("Fe-60Cr-50Ni", "sum to 110"), ("Fe-18Qq", "'Qq'"), ("Fe-18Cr-8Cr", "twice"),
                      ("C-1Fe", "interstitial element"), ("18Cr-Fe", "base")]:
        with pytest.raises(UserError, match=msg):
            parse_alloy(text)
    with pytest.raises(UserError, match="cannot hold"):
        alloy_crystal("Fe", "Fe-18Cr-8Ni", phase="gamma", repeat=(1, 1, 1))
    assert counts_for(parse_alloy("Ni-20Cr", unit="at"), 500) == {"Ni": 400, "Cr": 100}


def test_format_on_every_table_command(cli):
    for argv in (("sites", "Fe"), ("slip", "Cu", "--axis", "[001]"), ("fit", "C", "Fe")):
        rc, out, err = cli(*argv, "--format", "csv")
        assert rc == 0, err
        rows = list(csv.reader(io.StringIO(out)))
        assert len(rows) >= 2 and all(len(r) == len(rows[0]) for r in rows)
        rc, out, err = cli(*argv, "--format", "md")
        assert rc == 0 and out.startswith("| ")


def test_martensite_tetragonality_from_carbon(cli):
    # source: Roberts, Trans. AIME 197 (1953) 203 (from memory): c/a = 1 + 0.045 x for x wt% C,
    # a = 2.866 - 0.013 x, c = 2.866 + 0.116 x A
    from crystalview.alloy import martensite_parameters

    for x in (0.2, 0.4, 0.8, 1.2):
        a, c = martensite_parameters(x)
        assert c / a == pytest.approx(1 + 0.045 * x, abs=0.002)
    m = alloy_crystal("Fe", "Fe-0.4C", phase="martensite")
    assert m.lattice.prototype == "bct" and m.metadata["phase"] == "martensite"
    assert m.lattice.c / m.lattice.a == pytest.approx(1.018, abs=1e-3)
    # carbon sits in the z octahedral sites: its two nearest iron atoms lie along c
    import numpy as np

    ci = np.nonzero(m.symbols == "C")[0]
    fe = m.positions[m.symbols == "Fe"]
    for i in ci:
        d = fe - m.positions[i]
        f = np.linalg.solve(m.cell.T, d.T).T
        d = (f - np.round(f)) @ m.cell
        near = d[np.argsort(np.linalg.norm(d, axis=1))[:2]]
        assert np.all(np.abs(near[:, 2]) > 0.99 * np.linalg.norm(near, axis=1))
    # the z sites are the larger octahedral holes when c/a > 1 (geometry)
    rows = {r["kind"]: r for r in json.loads(cli("sites", "bct", "--element", "Fe", "-a", "2.8608", "-c", "2.9124",
                                                 "--json")[1])["sites"]}
    assert rows["octahedral"]["radius_A"] > rows["octahedral-xy"]["radius_A"]
    rc, out, err = cli("info", "Fe", "--phase", "martensite")
    assert rc == 2 and "--alloy" in err and err.count("\n") == 1
