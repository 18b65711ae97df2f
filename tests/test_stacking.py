"""Close-packed stacking sequences: building and reading them back."""
import math

import numpy as np
import pytest
import spglib

import crystalview as cv
build = cv.build  # the public function (see the report on the cv.build name clash)
from crystalview.defects.planar import NAMED_SEQUENCES, hc_notation
from crystalview.errors import UserError


def spg(c):
    ds = spglib.get_symmetry_dataset((c.cell, c.frac, c.numbers.astype(int)), symprec=1e-3)
    return ds.number, ds.pointgroup


# orders of the crystallographic point groups used below (International Tables Vol. A)
POINT_GROUP_ORDER = {"m-3m": 48, "6/mmm": 24, "-3m": 12, "-6m2": 12, "3m": 6}


def test_perfect_stacks_space_groups():
    # source: International Tables for Crystallography Vol. A: Fm-3m is 225, P6_3/mmc is 194
    assert spg(cv.stack("Cu", "ABC"))[0] == 225
    assert spg(cv.stack("Cu", "AB"))[0] == 194        # ideal c/a (FCC metal -> ideal spacing)
    assert spg(cv.stack("Mg", "AB"))[0] == 194        # Mg's own c/a
    assert spg(cv.stack("Cu", "ACB"))[0] == 225       # the other handedness is FCC too


def test_faulted_stacks_lower_symmetry():
    assert spg(cv.stack("Cu", "ABC"))[1] == "m-3m"
    for name in ("intrinsic", "extrinsic", "twin"):
        num, pg = spg(cv.stack("Cu", name))
        assert num != 225
        assert POINT_GROUP_ORDER[pg] < 48
    # an intrinsic fault in a periodic cell: trigonal P-3m1 (164), International Tables Vol. A
    assert spg(cv.stack("Cu", "ABCABABC"))[0] == 164
    assert spg(cv.stack("Cu", "intrinsic"))[0] == 164


def test_stack_geometry_cu():
    c = cv.stack("Cu", "ABCABABC")
    a = build("Cu").lattice.a
    d = a / math.sqrt(2)
    # in-plane nearest-neighbour distance and ideal layer spacing d111 = a/sqrt(3)
    # source: Callister & Rethwisch (FCC geometry), common practice
    assert np.linalg.norm(c.cell[0]) == pytest.approx(d)
    assert c.cell[2, 2] == pytest.approx(8 * a / math.sqrt(3))
    assert len(c) == 8
    from crystalview.analysis.neighbours import coordination_numbers

    assert set(coordination_numbers(c).tolist()) == {12}   # close-packed everywhere: CN 12 (common practice)


def test_stack_hcp_uses_element_c():
    c = cv.stack("Mg", "AB")
    mg = build("Mg").lattice
    assert c.cell[2, 2] == pytest.approx(mg.c)
    assert np.linalg.norm(c.cell[0]) == pytest.approx(mg.a)


@pytest.mark.parametrize("name", list(NAMED_SEQUENCES))
def test_stacking_sequence_reads_every_named_stack(name):
    seq = NAMED_SEQUENCES[name][0]
    # FCC fault names need an fcc parent, HCP ones an hcp parent (Co: hcp alpha, fcc beta)
    parents = {"intrinsic": [("Cu", None), ("Co", "beta")], "extrinsic": [("Cu", None), ("Co", "beta")],
               "twin": [("Cu", None), ("Co", "beta")], "I1": [("Co", None), ("Mg", None)],
               "I2": [("Co", None), ("Mg", None)], "E": [("Co", None), ("Mg", None)]}
    for el, phase in parents.get(name, [("Cu", None), ("Co", None)]):
        c = cv.stack(el, name, repeat=(2, 2), phase=phase)
        assert cv.stacking_sequence(c) == seq
        assert c.metadata["defects"][-1]["sequence"] == seq


def test_named_sequences_have_the_faults_they_claim():
    # h/c notation of faults (Hirth & Lothe, Theory of Dislocations, ch. 10):
    # intrinsic = two adjacent h layers in c; extrinsic = h c h; twin = single h
    hc = {k: hc_notation(v[0]) for k, v in NAMED_SEQUENCES.items()}
    assert hc["fcc"] == "ccc" and hc["hcp"] == "hh"
    assert hc["intrinsic"].count("h") == 2 and "hh" in hc["intrinsic"]
    assert hc["extrinsic"].count("h") == 2 and "hch" in hc["extrinsic"]
    assert hc["twin"].count("h") == 2 and "hh" not in hc["twin"] + hc["twin"]
    # HCP faults: I1 one c layer, I2 two, E three (each pair/run counted per fault)
    assert hc["I1"].count("c") == 2 and "cc" not in hc["I1"] + hc["I1"]
    assert hc["I2"].count("c") == 4 and "ccc" not in hc["I2"] + hc["I2"]
    assert "ccc" in hc["E"] + hc["E"] and hc["E"].count("c") == 3


def test_stacking_sequence_independent_of_construction():
    assert cv.stacking_sequence(build("Cu", orient=("[1-10]", "[11-2]", "[111]"))) == "ABC"
    assert cv.stacking_sequence(build("Mg")) == "AB"
    assert cv.stacking_sequence(build("Co")) == "AB"
    assert cv.stacking_sequence(build("Cu")) == "ABC"            # cubic cell, normal not along a cell vector
    assert cv.stacking_sequence(build("Ni", repeat=(2, 2, 2))) == "ABC"
    assert cv.stacking_sequence(build("Zn", repeat=(2, 2, 2))) == "AB"
    # a rotated and shifted copy of a faulted stack reads the same
    c = cv.stack("Cu", "intrinsic", repeat=(2, 2))
    th = 0.7
    R = np.array([[math.cos(th), -math.sin(th), 0], [math.sin(th), math.cos(th), 0], [0, 0, 1]])
    moved = c.copy()
    moved.cell = c.cell @ R.T
    moved.positions = c.positions @ R.T + 0.3
    assert cv.stacking_sequence(moved) == NAMED_SEQUENCES["intrinsic"][0]


def test_stacking_sequence_rejects_bcc():
    with pytest.raises(UserError):
        cv.stacking_sequence(build("Fe"))


@pytest.mark.parametrize("seq", ["AAB", "ABA", "ABCA", "ABD", "A", "", "xyz"])
def test_bad_sequences(seq):
    with pytest.raises(UserError) as e:
        cv.stack("Cu", seq)
    assert "\n" not in str(e.value)


def test_stack_needs_close_packed_element():
    with pytest.raises(UserError):
        cv.stack("Cr", "ABC")                    # BCC only in the data
    assert len(cv.stack("Fe", "ABC")) == 3      # gamma iron is FCC


def test_cli_stack_shows_defect(cli):
    import crystalview.cli.defect_args  # noqa: F401

    rc, out, err = cli("info", "Cu", "--stack", "ABCABABC")
    assert rc == 0, err
    assert "kind=stacking" in out and "sequence=ABCABABC" in out
    rc, out, err = cli("info", "Cu", "--stack", "AAB")
    assert rc == 2 and "not close-packed" in err
    rc, out, err = cli("info", "Mg", "--fault", "I2")
    assert rc == 0 and "ABABABCACACACB" in out


# Fault names belong to one parent lattice: intrinsic / extrinsic / twin are
# faults of the FCC ABC stacking, I1 / I2 / E basal faults of the HCP AB
# stacking (source: Hirth & Lothe, Theory of Dislocations, ch. 10, from memory).
@pytest.mark.parametrize("el,name,valid", [("Mg", "intrinsic", ("I1", "I2", "E")), ("Zn", "twin", ("I1", "I2", "E")),
                                           ("Co", "extrinsic", ("I1", "I2", "E")),
                                           ("Cu", "I1", ("intrinsic", "extrinsic", "twin")),
                                           ("Al", "E", ("intrinsic", "extrinsic", "twin"))])
def test_fault_names_must_match_parent_lattice(el, name, valid):
    with pytest.raises(UserError) as e:
        cv.stack(el, name)
    msg = str(e.value)
    assert "\n" not in msg and f"'{name}'" in msg and all(v in msg for v in valid)
    with pytest.raises(UserError):
        cv.stack(build(el), name)                 # a Crystal parent too


def test_fault_names_on_matching_parents_and_raw_sequences_anywhere():
    # Co: hcp alpha, fcc beta in the element data; each takes its own faults
    assert cv.stack("Co", "intrinsic", phase="beta").metadata["defects"][-1]["parent_lattice"] == "fcc"
    assert cv.stack("Co", "I1").metadata["defects"][-1]["parent_lattice"] == "hcp"
    # a raw sequence stays allowed on any close-packed metal; the layer spacing follows the parent:
    # Mg ABC is spaced c/2 of Mg, c = 5.21 A (Pearson's handbook, from memory)
    m = cv.stack("Mg", "ABCABABCABC")
    rec = m.metadata["defects"][-1]
    assert rec["sequence"] == "ABCABABCABC" and rec["parent_lattice"] == "hcp" and "name" not in rec
    assert rec["layer_spacing_A"] == pytest.approx(5.21 / 2, abs=0.01)
    assert cv.stacking_sequence(m) == "ABCABABCABC"
    # Cu AB is spaced ideally: sqrt(2/3) d (common practice)
    d = build("Cu").lattice.a / math.sqrt(2)
    assert cv.stack("Cu", "AB").metadata["defects"][-1]["layer_spacing_A"] == pytest.approx(math.sqrt(2 / 3) * d)
    for neutral in ("fcc", "hcp", "dhcp"):
        assert len(cv.stack("Mg", neutral)) == len(NAMED_SEQUENCES[neutral][0])


@pytest.mark.parametrize("seq,words", [("", "empty"), ("  ", "empty"), ("A", "one layer"), ("b", "one layer")])
def test_empty_and_single_layer_sequences_refused(seq, words):
    with pytest.raises(UserError) as e:
        cv.stack("Cu", seq)
    assert words in str(e.value) and "two layers" in str(e.value)


def test_cli_fault_names_and_empty_stack(cli):
    import crystalview.cli.defect_args  # noqa: F401

    rc, out, err = cli("info", "Mg", "--fault", "intrinsic")
    assert rc == 2 and "I1, I2 or E" in err and err.count("\n") == 1
    rc, out, err = cli("info", "Cu", "--fault", "I2")
    assert rc == 2 and "intrinsic, extrinsic or twin" in err
    rc, out, err = cli("info", "Co", "--phase", "beta", "--fault", "twin")
    assert rc == 0, err
    assert "sequence=ABCABCACBACB" in out
    rc, out, err = cli("info", "Mg", "--stack", "ABCABABCABC")
    assert rc == 0 and "parent_lattice=hcp" in out
    for args, words in ((("--stack", ""), "empty"), (("--stack", "A"), "one layer"), (("--fault", ""), "not a named"),
                        (("--fault", "ABC"), "not a named")):
        rc, out, err = cli("info", "Cu", *args)
        assert rc == 2 and words in err and err.count("\n") == 1, (args, err)
