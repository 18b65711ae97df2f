"""Generic void analysis: agrees with the named sites and with a brute-force search."""
import numpy as np
import pytest

import crystalview as cv
from crystalview.analysis.sites import site_table
from crystalview.errors import UserError


def _named(c):
    return {r["kind"]: r for r in site_table(c)}


@pytest.mark.parametrize("spec,kw,kinds", [
    ("Cu", {}, {"octahedral", "tetrahedral"}),
    ("Mg", {}, {"octahedral", "tetrahedral"}),
    ("Fe", {}, {"tetrahedral"}),            # BCC octahedral: a saddle, not a maximum
])
def test_voids_reproduce_named_sites(spec, kw, kinds):
    c = cv.build(spec, repeat=(3, 3, 3), **kw)
    v = cv.find_voids(c)
    named = _named(cv.build(spec, **kw))
    summ = v.summary()
    assert set(summ) == kinds
    for k in kinds:
        # independent construction (Delaunay tangent spheres) vs analytic named sites, to 1e-6 A
        assert summ[k]["radius_min_A"] == pytest.approx(named[k]["radius_A"], abs=1e-6)
        assert summ[k]["radius_max_A"] == pytest.approx(named[k]["radius_A"], abs=1e-6)
        assert summ[k]["count"] == named[k]["per_cell"] * 27


def test_fcc_channel_bottleneck():
    c = cv.build("Cu", repeat=(2, 2, 2))
    v = cv.find_voids(c)
    R = c.atom_radii()[0]
    d = 2 * R
    # common practice: the triangular window between a tetrahedral and an octahedral hole of a close
    # packing has the circumradius d/sqrt(3) of its equilateral triangle of touching atoms
    assert np.allclose(v.bottlenecks, d / np.sqrt(3) - R, atol=1e-9)
    # each tetrahedral hole opens to 4 octahedral holes
    assert len(v.channels) == 4 * 8 * 8


def _brute_force_largest(c, n=18):
    """Largest empty sphere by grid search plus local refinement (scipy.optimize), periodic."""
    from scipy.optimize import minimize

    R = c.atom_radii()
    g = (np.stack(np.meshgrid(*[np.arange(n) / n] * 3, indexing="ij"), -1).reshape(-1, 3)) @ c.cell

    def free(x):
        f = c.to_fractional(c.positions - x)
        d = np.linalg.norm((f - np.round(f)) @ c.cell, axis=1)
        return (d - R).min()

    vals = np.array([free(x) for x in g])
    best = -1.0
    for i in np.argsort(vals)[-6:]:
        res = minimize(lambda x: -free(x), g[i], method="Nelder-Mead",
                       options={"xatol": 1e-7, "fatol": 1e-9, "maxiter": 4000})
        best = max(best, -res.fun)
    return best


def test_defected_cell_against_brute_force():
    c = cv.build("Cu", repeat=(2, 2, 2))
    rng = np.random.default_rng(3)
    d = c.delete(rng.choice(len(c), 2, replace=False))
    d.numbers[0] = 28
    d.species_radii["Ni"] = 1.22
    d.record_defect("vacancy", count=2)
    v = cv.find_voids(d)
    assert "vacancy" in set(v.kinds)
    assert v.radii.max() == pytest.approx(_brute_force_largest(d), abs=2e-4)
    # every reported radius is a true free radius at its position
    R = d.atom_radii()
    for x in v:
        f = d.to_fractional(d.positions - x.position)
        dist = np.linalg.norm((f - np.round(f)) @ d.cell, axis=1)
        assert (dist - R).min() == pytest.approx(x.radius, abs=1e-9)


def test_interstitial_sites_of_cif_like_crystal_use_voids():
    c = cv.build("Cu", repeat=(2, 2, 2))
    bare = cv.Crystal(c.cell, c.positions, c.numbers, species_radii=c.species_radii)
    s = cv.interstitial_sites(bare)
    kinds = [x.kind for x in s]
    assert kinds.count("octahedral") == 32 and kinds.count("tetrahedral") == 64


def test_bad_input():
    c = cv.build("Cu", repeat=(2, 2, 2))
    dup = c.add_atoms(c.positions[:1], "Cu")
    with pytest.raises(UserError, match="same place"):
        cv.find_voids(dup)
    close = c.add_atoms(c.positions[:1] + 0.3, "Cu")
    with pytest.raises(UserError, match="closer than physically possible"):
        cv.find_voids(close)
    flat = cv.Crystal(np.diag([10.0, 10.0, 10.0]), np.array([[0, 0, 5], [2.5, 0, 5], [0, 2.5, 5], [2.5, 2.5, 5],
                                                           [5, 5, 5]], float),
                      symbols=["Cu"] * 5, pbc=(False, False, False), species_radii={"Cu": 1.28})
    with pytest.raises(UserError, match="coplanar"):
        cv.find_voids(flat)
    empty = c.select(np.zeros(len(c), bool))
    with pytest.raises(UserError):
        cv.find_voids(empty)


def test_voids_repr_is_plain():
    v = cv.find_voids(cv.build("Cu"))
    assert repr(v) == "<Voids 12 holes {'octahedral': 4, 'tetrahedral': 8}, 32 channels>"
    r = repr(v[0])
    assert r.startswith("<Void 0 ") and "np." not in r and "array(" not in r


def test_huge_void_analysis_is_refused_fast():
    import time

    from crystalview.analysis.voids import DEFAULT_MAX_HOLE_ATOMS, void_estimate
    from crystalview.errors import LimitError

    c = cv.build("Cu", repeat=(100, 100, 100))                # 4,000,000 atoms: ~100 MB, fine to build
    assert len(c) == 4_000_000
    est = void_estimate(c)
    # bench/bench_voids.py: about 1 GB per 100,000 atoms -> tens of GB here
    assert est["points"] > len(c) and est["bytes"] > 20e9
    t = time.perf_counter()
    with pytest.raises(LimitError, match=r"void analysis of 4,000,000 atoms would need about .* GB of memory "
                                         r"and about .* min \(over the cap of 300,000 atoms\)"):
        cv.find_voids(c)
    assert time.perf_counter() - t < 2.0
    assert DEFAULT_MAX_HOLE_ATOMS == 300_000
    # the cap is the caller's to raise (checked on a small crystal so nothing big is built)
    small = cv.build("Cu", repeat=(2, 2, 2))
    with pytest.raises(LimitError, match="--max-atoms 32"):
        cv.find_voids(small, max_atoms=31)
    assert len(cv.find_voids(small, max_atoms=32)) == 96


def test_cli_sites_voids_cap(cli):
    import time

    t = time.perf_counter()
    rc, out, err = cli("sites", "Cu", "--voids", "--repeat", "100", "100", "100")
    dt = time.perf_counter() - t
    assert rc == 2 and out == "" and err.count("\n") == 1
    assert "4,000,000 atoms" in err and "GB" in err and "--max-atoms" in err
    assert dt < 5.0                                            # the build itself takes about 1 s
    # --max-atoms is one cap for the build and the hole analysis
    rc, out, err = cli("sites", "Cu", "--voids", "--repeat", "2", "2", "2", "--max-atoms", "31")
    assert rc == 2 and "--max-atoms 32" in err
    rc, out, err = cli("sites", "Cu", "--voids", "--repeat", "2", "2", "2", "--max-atoms", "32", "--json")
    assert rc == 0
    rc, out, err = cli("sites", "Cu", "--voids", "--repeat", "2", "2", "2", "--json")
    assert rc == 0
