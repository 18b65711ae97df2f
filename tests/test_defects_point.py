"""Point defects: vacancies, substitutional solutes, Frenkel pairs."""
import numpy as np
import pytest

import crystalview as cv
build = cv.build  # the public function (see the report on the cv.build name clash)
from crystalview.errors import UserError


@pytest.fixture(scope="module")
def cu():
    return build("Cu", repeat=(4, 4, 4))          # 256 atoms


def test_vacancy_exact_count_and_record(cu):
    v = cv.add_vacancies(cu, count=7, seed=3)
    assert len(v) == len(cu) - 7
    rec = v.metadata["defects"][-1]
    assert rec["kind"] == "vacancy" and rec["count"] == 7 and len(rec["positions"]) == 7
    # every recorded position was an atom of the perfect crystal and is now empty
    for p in rec["positions"]:
        assert np.min(np.linalg.norm(cu.positions - p, axis=1)) < 1e-9
        assert np.min(np.linalg.norm(v.positions - p, axis=1)) > 1.0
    assert len(cu) == 256                          # input untouched


def test_vacancy_fraction_rounds_to_exact_count(cu):
    # 256 * 0.01 = 2.56 -> 3
    assert len(cv.add_vacancies(cu, fraction=0.01)) == 256 - 3
    assert len(cv.add_vacancies(cu, fraction=0.0)) == 256
    assert len(cv.add_vacancies(cu, fraction=1.0)) == 0


def test_vacancy_indices(cu):
    v = cv.add_vacancies(cu, indices=[0, 10])
    assert len(v) == 254
    assert v.metadata["defects"][-1]["positions"][1] == cu.positions[10].tolist()


def test_same_seed_same_result(cu):
    a = cv.add_vacancies(cu, count=5, seed=11)
    b = cv.add_vacancies(cu, count=5, seed=11)
    c = cv.add_vacancies(cu, count=5, seed=12)
    assert np.array_equal(a.positions, b.positions)
    assert not np.array_equal(a.positions, c.positions)
    s1 = cv.substitute(cu, "Ni", fraction=0.1, seed=4)
    s2 = cv.substitute(cu, "Ni", fraction=0.1, seed=4)
    assert np.array_equal(s1.numbers, s2.numbers)
    f1 = cv.frenkel_pairs(cu, 2, seed=5)
    f2 = cv.frenkel_pairs(cu, 2, seed=5)
    assert np.array_equal(f1.positions, f2.positions)


def test_substitution_count_role_radius(cu):
    s = cv.substitute(cu, "Ni", fraction=0.1, seed=1)
    # 0.1 * 256 = 25.6 -> 26
    assert s.counts() == {"Ni": 26, "Cu": 230}
    assert s.role_counts() == {"host": 230, "solute": 26}
    # CN12 metallic radius of Ni, checked against mendeleev's metallic_radius_c12 (pm)
    from mendeleev import element

    assert s.species_radii["Ni"] == pytest.approx(element("Ni").metallic_radius_c12 / 100.0, abs=0.02)
    assert len(s) == len(cu)
    s2 = cv.substitute(cu, "Zn", count=5)
    assert s2.counts()["Zn"] == 5


def test_substitution_only_on_host_sites(cu):
    s = cv.substitute(cu, "Ni", count=200, seed=0)
    s = cv.substitute(s, "Al", count=56, seed=0)     # exactly the remaining host sites
    assert s.counts() == {"Al": 56, "Ni": 200}
    with pytest.raises(UserError):
        cv.substitute(s, "Au", count=1)              # no host sites left


def test_frenkel_pair_fcc_octahedral():
    c = build("Cu", repeat=(3, 3, 3))
    f = cv.frenkel_pairs(c, 2, seed=0)
    assert len(f) == len(c)
    assert f.role_counts() == {"host": len(c) - 2, "interstitial": 2}
    rec = f.metadata["defects"][-1]
    assert rec["kind"] == "frenkel_pair" and len(rec["positions"]) == 2
    # the hole is the FCC octahedral hole: free radius / host radius = 0.414
    # source: Smallman & Ngan, Modern Physical Metallurgy, hole radius ratios
    r = c.radius_of("Cu")
    assert rec["hole_free_radius_A"] / r == pytest.approx(0.414, abs=0.003)
    # the interstitial sits a/2 from its emptied site (nearest octahedral hole)
    a = c.lattice.a
    for v, q in zip(rec["positions"], rec["interstitial_positions"]):
        d = np.asarray(q) - np.asarray(v)
        d -= np.round(d @ np.linalg.inv(c.cell)) @ c.cell
        assert np.linalg.norm(d) == pytest.approx(a / 2, abs=1e-6)


def test_frenkel_pair_bcc_tetrahedral():
    c = build("Fe", repeat=(4, 4, 4))
    f = cv.frenkel_pairs(c, 1, seed=2)
    rec = f.metadata["defects"][-1]
    # the largest BCC hole is tetrahedral, ratio 0.291
    # source: Smallman & Ngan, Modern Physical Metallurgy, hole radius ratios
    assert rec["hole_free_radius_A"] / c.radius_of("Fe") == pytest.approx(0.291, abs=0.003)


@pytest.mark.parametrize("kw", [dict(fraction=1.5), dict(fraction=-0.1), dict(count=257), dict(count=-1),
                                dict(count=2.5), dict(), dict(count=1, fraction=0.1)])
def test_bad_vacancy_input(cu, kw):
    with pytest.raises(UserError) as e:
        cv.add_vacancies(cu, **kw)
    assert "\n" not in str(e.value)


def test_bad_substitution_input(cu):
    for kw in (dict(fraction=2.0), dict(count=300)):
        with pytest.raises(UserError):
            cv.substitute(cu, "Ni", **kw)
    with pytest.raises(UserError):
        cv.substitute(cu, "Xx", count=1)
    with pytest.raises(UserError):
        cv.frenkel_pairs(cu, 1000)


def test_cli_point_defects(cli):
    import crystalview.cli.defect_args  # noqa: F401  (registers the options)

    rc, out, err = cli("info", "Cu", "--repeat", "4", "4", "4", "--vacancies", "1%", "--substitute", "Ni:0.1",
                       "--seed", "2")
    assert rc == 0, err
    assert "kind=vacancy" in out and "count=3" in out and "kind=substitution" in out and "Ni 26" in out
    rc, out, err = cli("info", "Cu", "--vacancies", "1.5")
    assert rc == 2 and "outside [0, 1]" in err and err.count("\n") == 1
    rc, out, err = cli("info", "Cu", "--vacancies", "9")
    assert rc == 2 and "only 4 sites" in err


def test_frenkel_record_keeps_vacancy_and_interstitial_positions():
    # figures mark both ends of each pair: 'positions' (emptied sites) and
    # 'interstitial_positions' (where the atoms went), key names fixed
    c = build("Cu", repeat=(3, 3, 3))
    f = cv.frenkel_pairs(c, 3, seed=4)
    rec = f.metadata["defects"][-1]
    assert set(rec) >= {"kind", "count", "positions", "interstitial_positions", "seed"}
    from crystalview.crystal import role_code

    moved = np.nonzero(f.roles == role_code("interstitial"))[0]
    assert len(moved) == rec["count"] == len(rec["positions"]) == len(rec["interstitial_positions"]) == 3
    # the emptied sites are the moved atoms' old sites, now empty; the
    # interstitial positions are where those atoms are now
    from scipy.spatial import cKDTree

    assert cKDTree(c.positions[moved]).query(np.array(rec["positions"]))[0].max() < 1e-9
    assert cKDTree(f.positions[moved]).query(np.array(rec["interstitial_positions"]))[0].max() < 1e-9
    assert cKDTree(f.positions).query(np.array(rec["positions"]))[0].min() > 1.0
    # plain lists of [x, y, z], so the record survives JSON
    import json

    back = json.loads(json.dumps(rec))
    assert back["positions"] == rec["positions"] and len(back["interstitial_positions"][0]) == 3
    zero = cv.frenkel_pairs(c, 0).metadata["defects"][-1]
    assert zero["positions"] == [] and zero["interstitial_positions"] == []


@pytest.mark.parametrize("seed", [-1, 2.5, "x", True])
def test_bad_seed_says_zero_or_more(cu, seed):
    # numpy.random.default_rng accepts only non-negative integer seeds (numpy docs)
    for call in (lambda: cv.add_vacancies(cu, count=1, seed=seed),
                 lambda: cv.substitute(cu, "Ni", count=1, seed=seed),
                 lambda: cv.frenkel_pairs(cu, 0, seed=seed)):
        with pytest.raises(UserError) as e:
            call()
        assert "whole number of 0 or more" in str(e.value) and "\n" not in str(e.value)


def test_cli_negative_seed(cli):
    import crystalview.cli.defect_args  # noqa: F401

    rc, out, err = cli("info", "Cu", "--repeat", "2", "2", "2", "--vacancies", "1", "--seed", "-1")
    assert rc == 2 and "whole number of 0 or more" in err and err.count("\n") == 1
    rc, out, err = cli("info", "Cu", "--repeat", "2", "2", "2", "--vacancies", "1", "--seed", "0")
    assert rc == 0, err
