"""Point defects: vacancies, substitutional solutes (random solid solution)
and Frenkel pairs.

Every function takes a Crystal and returns a new Crystal (the input is left
as it was) with a record of what was done appended to
``metadata['defects']``.  Random choices use ``numpy.random.default_rng(seed)``:
the same seed on the same crystal gives the same result.

Vacancy records keep the Cartesian positions of the emptied sites
(``positions``: a list of [x, y, z] in A) so figures can mark them.

The helpers at the bottom of this module (parent_crystal, oriented, ...) are
shared by the other defect builders.
"""
from __future__ import annotations

import itertools
import math
import numbers

import numpy as np

from ..crystal import Crystal, role_code
from ..errors import UserError

# ------------------------------------------------------------------ choosing how many


def fraction_value(fraction, what="of the sites", example="0.01"):
    """A fraction in [0, 1] from user input, or a one-line UserError.

    >>> fraction_value("0.25")
    0.25
    >>> try:
    ...     fraction_value(1.5)
    ... except UserError:
    ...     print("refused")
    ...
    refused
    """
    try:
        f = float(fraction)
    except (TypeError, ValueError):
        raise UserError(f"fraction {fraction!r} must be a number between 0 and 1, e.g. {example}") from None
    if not math.isfinite(f) or f < 0 or f > 1:
        raise UserError(f"fraction {fraction} is outside [0, 1]; give e.g. {example} for "
                        f"{float(example) * 100:g} % {what}")
    return f


def _count_from(n_available, count=None, fraction=None, what="vacancies"):
    """Exact count from a count or a fraction of the available sites."""
    if count is not None and fraction is not None:
        raise UserError(f"give the {what} as a count or as a fraction, not both")
    if count is None and fraction is None:
        raise UserError(f"say how many {what}: a count (e.g. count=5) or a fraction of the sites (e.g. fraction=0.01)")
    if fraction is not None:
        n = int(round(fraction_value(fraction) * n_available))
    else:
        if isinstance(count, bool) or not isinstance(count, (numbers.Integral, float, str)):
            raise UserError(f"count {count!r} must be a whole number, e.g. 5")
        try:
            cf = float(count)
        except ValueError:
            raise UserError(f"count {count!r} must be a whole number, e.g. 5") from None
        if not math.isfinite(cf) or cf != int(cf):
            raise UserError(f"count {count!r} must be a whole number, e.g. 5")
        n = int(cf)
        if n < 0:
            raise UserError(f"count {n} is negative; give 0 or more {what}")
    if n > n_available:
        raise UserError(f"{n} {what} asked for but only {n_available} sites are available; "
                        f"give at most {n_available} or a bigger crystal (e.g. repeat=(4, 4, 4))")
    return n


class _All(int):
    """Every atom is a candidate: the pool is range(n), never materialised
    (an index array of a 50-million-atom crystal is 400 MB)."""

    def __len__(self):
        return int(self)


def _choose(rng, pool, n):
    """``n`` distinct picks from ``pool`` (an index array or _All), as numpy's
    Generator.choice(pool, n, replace=False) gives them.

    >>> a = _choose(np.random.default_rng(0), _All(10), 3)
    >>> a.tolist() == np.random.default_rng(0).choice(np.arange(10), 3, replace=False).tolist()
    True
    """
    if isinstance(pool, _All):
        return rng.choice(int(pool), size=n, replace=False)
    return rng.choice(pool, size=n, replace=False)


def _candidates(crystal, element=None, role=None):
    if element is None and (role is None or not np.any(crystal.roles != role_code(role))):
        return _All(len(crystal))
    mask = np.ones(len(crystal), bool)
    if element is not None:
        from ..elements import atomic_number

        z = atomic_number(element)
        mask &= crystal.numbers == z
        if not mask.any():
            raise UserError(f"there is no {element} in this crystal; it holds {', '.join(crystal.elements) or 'no atoms'}")
    if role is not None:
        mask &= crystal.roles == role_code(role)
    return np.nonzero(mask)[0]


# ------------------------------------------------------------------ vacancies
def add_vacancies(crystal: Crystal, count=None, fraction=None, indices=None, seed=0, element=None) -> Crystal:
    """Remove atoms: ``count`` of them, a ``fraction`` of the sites (rounded to
    the nearest whole number), or the given ``indices``.

    ``element`` limits the random choice to one species (e.g. the Al sites of
    NiAl).  Recorded as ``{'kind': 'vacancy', 'count', 'positions', 'seed', ...}``.

    >>> import crystalview as cv
    >>> c = add_vacancies(cv.build("Cu", repeat=(2, 2, 2)), count=3)
    >>> len(c), c.metadata["defects"][0]["kind"], c.metadata["defects"][0]["count"]
    (29, 'vacancy', 3)
    >>> add_vacancies(cv.build("NiAl", repeat=(2, 2, 2)), count=2, element="Al").counts()
    {'Al': 6, 'Ni': 8}
    """
    if not isinstance(crystal, Crystal):
        raise UserError("add_vacancies needs a Crystal, e.g. add_vacancies(build('Cu', repeat=(4, 4, 4)), count=3)")
    info = {}
    if indices is not None:
        if count is not None or fraction is not None:
            raise UserError("give vacancies as indices, a count or a fraction: only one of them")
        try:
            idx = np.asarray(indices, dtype=float).reshape(-1)
        except (TypeError, ValueError):
            raise UserError("indices must be whole atom numbers, e.g. indices=[0, 5]") from None
        if np.any(idx != np.round(idx)):
            raise UserError("indices must be whole atom numbers, e.g. indices=[0, 5]")
        idx = idx.astype(np.int64)
        if len(idx) and (idx.min() < 0 or idx.max() >= len(crystal)):
            raise UserError(f"vacancy index out of range: the crystal has atoms 0 to {len(crystal) - 1}")
        if len(np.unique(idx)) != len(idx):
            raise UserError("vacancy indices repeat; give each atom once")
        chosen = idx
        info["indices"] = idx.tolist()
    else:
        pool = _candidates(crystal, element=element)
        n = _count_from(len(pool), count=count, fraction=fraction, what="vacancies")
        rng = _rng(seed)
        chosen = np.sort(_choose(rng, pool, n)) if n else np.zeros(0, np.int64)
        info["seed"] = seed
        if fraction is not None:
            info["fraction"] = float(fraction)
        if element is not None:
            info["element"] = str(element)
    from ..elements import symbol_of

    removed = crystal.positions[chosen]
    removed_symbols = [symbol_of(int(z)) for z in crystal.numbers[chosen]]
    keep = np.ones(len(crystal), bool)
    keep[chosen] = False
    out = _subset(crystal, keep)
    out.record_defect("vacancy", count=int(len(chosen)), positions=removed.tolist(),
                      symbols=removed_symbols, **info)
    return out


# ------------------------------------------------------------------ substitution
def substitute(crystal: Crystal, element, fraction=None, count=None, seed=0, host=None) -> Crystal:
    """Random substitutional solid solution: replace host atoms by ``element``.

    The number replaced is exact: ``count``, or ``round(fraction x number of
    lattice sites of the whole crystal)`` (every atom but the interstitials),
    so repeated substitutions each take their share of the whole crystal.
    ``fraction`` is an atom fraction; for weight percent see
    :func:`crystalview.alloy.alloy_crystal`.

    >>> import crystalview as cv
    >>> c = substitute(substitute(cv.build("Fe", phase="gamma", repeat=(5, 5, 5)), "Cr", fraction=0.18), "Ni",
    ...                fraction=0.08, seed=1)
    >>> c.counts()
    {'Cr': 90, 'Fe': 370, 'Ni': 40}

    ``host`` limits the choice to one species of the host
    (default: every atom whose role is 'host').  The solute's role becomes
    'solute' and its hard-sphere radius its CN12 metallic radius from the
    element data (crystalview.elements).
    """
    from ..elements import atomic_number
    from ..elements import element as element_data

    if not isinstance(crystal, Crystal):
        raise UserError("substitute needs a Crystal, e.g. substitute(build('Cu', repeat=(4, 4, 4)), 'Ni', fraction=0.1)")
    sym = element_data(element).symbol         # UserError for unknown metals
    radius = element_data(sym).metallic_radius
    if radius is None:
        raise UserError(f"no CN12 metallic radius for {sym} in the element data; choose another solute")
    pool = _candidates(crystal, element=host, role="host")
    if fraction is not None and count is None:
        # a fraction of the whole crystal's lattice sites (every atom but the interstitials), so several
        # substitutions in a row each take their own share: Cr 0.18 then Ni 0.08 is 18 % Cr and 8 % Ni
        sites = int(np.count_nonzero(crystal.roles != role_code("interstitial")))
        count = int(round(fraction_value(fraction) * sites))
        if count > len(pool):
            raise UserError(f"{fraction:g} of the {sites} lattice sites is {count} {sym} atoms, but only "
                            f"{len(pool)} host sites are left; give a smaller fraction")
        n = count
    else:
        n = _count_from(len(pool), count=count, fraction=None, what=f"{sym} solute atoms")
    rng = _rng(seed)
    chosen = np.sort(_choose(rng, pool, n)) if n else np.zeros(0, np.int64)
    out = crystal.copy()
    out.numbers[chosen] = atomic_number(sym)
    out.roles[chosen] = role_code("solute")
    out.species_radii[sym] = float(radius)
    info = {"element": sym, "count": int(n), "seed": seed, "radius_A": float(radius)}
    if fraction is not None:
        info["fraction"] = float(fraction)
        info["fraction_made"] = n / len(pool) if len(pool) else 0.0
    if host is not None:
        info["host"] = str(host)
    out.record_defect("substitution", **info)
    return out


# ------------------------------------------------------------------ Frenkel pairs
def _holes_near(points, site, reach, exclude=()):
    """Empty positions near ``site``: circumcentres of the Delaunay tetrahedra
    of the surrounding atoms (``points``), with the distance from each to its
    nearest atom.  Returns (centres, centre-to-atom distances)."""
    from scipy.spatial import Delaunay, cKDTree

    if len(points) < 5:
        return np.zeros((0, 3)), np.zeros(0)
    try:
        tri = Delaunay(points)
    except Exception:  # degenerate (flat) neighbourhoods
        return np.zeros((0, 3)), np.zeros(0)
    tet = points[tri.simplices]                          # (m, 4, 3)
    p0 = tet[:, 0]
    A = tet[:, 1:] - p0[:, None, :]                      # (m, 3, 3)
    rhs = 0.5 * np.sum(A * A, axis=2)                    # (m, 3)
    det = np.linalg.det(A)
    ok = np.abs(det) > 1e-8
    centres = np.zeros((len(tet), 3))
    centres[ok] = p0[ok] + np.linalg.solve(A[ok], rhs[ok][..., None])[..., 0]
    centres = centres[ok]
    near = np.linalg.norm(centres - site, axis=1) <= reach
    centres = centres[near]
    if not len(centres):
        return centres, np.zeros(0)
    # merge circumcentres shared by several tetrahedra (octahedra split in four)
    key = np.round(centres / 0.05).astype(np.int64)
    _, first = np.unique(key, axis=0, return_index=True)
    centres = centres[np.sort(first)]
    dist, _ = cKDTree(points).query(centres)
    return centres, dist


def frenkel_pairs(crystal: Crystal, count, seed=0) -> Crystal:
    """Move ``count`` randomly chosen atoms from their sites into interstitial
    holes, leaving a vacancy behind each (a Frenkel pair).

    The hole is found geometrically: around the chosen site, the empty
    positions are the circumcentres of the Delaunay tetrahedra of the
    neighbouring atoms (within 1.5 nearest-neighbour distances of the site);
    of those, the largest holes (free space within 0.02 A of the biggest) are
    kept and the one nearest the site is taken.  Emptied sites, and holes
    closer than half a neighbour distance to them, are never used.  In FCC
    this puts the atom in a neighbouring octahedral hole, in BCC in a
    tetrahedral hole (the largest there).

    The moved atom keeps its element and gets the role 'interstitial'.
    Recorded as ``{'kind': 'frenkel_pair', 'count', 'positions' (emptied
    sites), 'interstitial_positions', 'seed'}``.

    >>> import crystalview as cv
    >>> c = frenkel_pairs(cv.build("Cu", repeat=(2, 2, 2)), 1)
    >>> len(c), c.metadata["defects"][-1]["kind"]
    (32, 'frenkel_pair')
    """
    from ..analysis.neighbours import nearest_neighbour_distance, with_images

    if not isinstance(crystal, Crystal):
        raise UserError("frenkel_pairs needs a Crystal, e.g. frenkel_pairs(build('Cu', repeat=(4, 4, 4)), 2)")
    pool = _candidates(crystal, role="host")
    n = _count_from(len(pool), count=count, what="Frenkel pairs")
    rng = _rng(seed)
    out = crystal.copy()
    if n == 0:
        out.record_defect("frenkel_pair", count=0, positions=[], interstitial_positions=[], seed=seed)
        return out
    movers = _choose(rng, pool, n)
    dnn = _nn_distance(crystal) if len(crystal) > _LOCAL_ABOVE else nearest_neighbour_distance(crystal)
    reach = 1.5 * dnn
    vac, inter, free_r = [], [], []
    inv = np.linalg.inv(out.cell)
    # the atoms near the chosen sites only (a moved atom stays within reach of its site): memory and
    # time grow with the number of pairs, not with the crystal
    bins = _Bins(out, out.positions[movers], reach + 2.0 * dnn + reach) if len(out) > _LOCAL_ABOVE else None
    for i in movers:
        site = out.positions[i].copy()
        if bins is None:
            pts, idx = with_images(out.positions, out.cell, out.pbc, reach + 2.0 * dnn)
        else:
            local = bins.near(site)
            pts, idx = with_images(out.positions[local], out.cell, out.pbc, reach + 2.0 * dnn)
            idx = local[idx]
        keep = (idx != i) & (np.linalg.norm(pts - site, axis=1) <= reach + 2.0 * dnn)
        cluster = pts[keep]
        centres, dist = _holes_near(cluster, site, reach)
        if len(centres):
            bad = np.linalg.norm(centres - site, axis=1) < 0.5 * dnn
            bad |= dist > 0.95 * dnn                      # outside a surface, or an emptied site
            if vac:                                        # earlier emptied sites (periodic images too)
                d = (centres[:, None, :] - np.asarray(vac)[None, :, :]) @ inv
                for k in range(3):
                    if out.pbc[k]:
                        d[..., k] -= np.round(d[..., k])
                bad |= np.any(np.linalg.norm(d @ out.cell, axis=2) < 0.5 * dnn, axis=1)
            centres, dist = centres[~bad], dist[~bad]
        if not len(centres):
            raise UserError("found no empty interstitial hole next to a chosen atom; use a bigger crystal "
                            "(e.g. repeat=(4, 4, 4)) or fewer Frenkel pairs")
        big = dist >= dist.max() - 0.02
        centres, dist = centres[big], dist[big]
        d_site = np.round(np.linalg.norm(centres - site, axis=1), 6)
        order = np.lexsort((np.round(centres[:, 2], 6), np.round(centres[:, 1], 6),
                            np.round(centres[:, 0], 6), d_site))
        q = centres[order[0]]
        fq = q @ inv
        for k in range(3):
            if out.pbc[k]:
                fq[k] -= math.floor(fq[k])
                if fq[k] >= 1.0 - 1e-9:
                    fq[k] = 0.0
        q = fq @ out.cell
        vac.append(site)
        inter.append(q)
        free_r.append(float(dist[order[0]]))
        out.positions[i] = q
        out.roles[i] = role_code("interstitial")
    z, cnt = np.unique(crystal.numbers, return_counts=True)
    from ..elements import symbol_of

    r_host = (float(sum(crystal.radius_of(symbol_of(int(a))) * int(b) for a, b in zip(z, cnt)) / len(crystal))
              if len(crystal) else 0.0)
    out.record_defect("frenkel_pair", count=int(n), positions=np.array(vac).tolist(),
                      interstitial_positions=np.array(inter).tolist(), seed=seed,
                      hole_centre_to_atom_A=round(float(np.mean(free_r)), 4),
                      hole_free_radius_A=round(float(np.mean(free_r)) - r_host, 4))
    return out


# ================================================================== shared helpers
#: Crystals larger than this (atoms) are searched through _Bins (local neighbourhoods only).
_LOCAL_ABOVE = 200_000


def _subset(crystal, keep):
    """The crystal with only the atoms of the boolean mask ``keep``: each
    array indexed once (no full copy first, as Crystal.select makes).

    >>> import crystalview as cv
    >>> len(_subset(cv.build("Cu"), np.array([True, False, True, True])))
    3
    """
    import copy as _copy

    out = Crystal.__new__(Crystal)
    out.cell = crystal.cell.copy()
    out.positions = crystal.positions[keep]
    out.numbers = crystal.numbers[keep]
    out.roles = crystal.roles[keep]
    out.pbc = crystal.pbc
    out.metadata = _copy.deepcopy(crystal.metadata)
    out.lattice = crystal.lattice
    out.species_radii = dict(crystal.species_radii)
    out.occupancy = None if crystal.occupancy is None else crystal.occupancy[keep]
    out._symbols_cache = None
    return out


class _Bins:
    """The atoms near a few chosen places of a large crystal, found in one
    chunked pass (memory: the chosen neighbourhoods, not the crystal).  Space
    is cut into bins at least ``reach`` A high along each cell axis; the atoms
    within ``reach`` of a centre lie in the 27 bins around it.

    >>> import crystalview as cv
    >>> c = cv.build("Cu", repeat=(6, 6, 6))
    >>> k = int(np.argmin(np.linalg.norm(c.positions - c.cell.sum(0) / 2, axis=1)))   # an inner atom
    >>> b = _Bins(c, c.positions[[k]], 3.0)
    >>> d = np.linalg.norm(c.positions[b.near(c.positions[k])] - c.positions[k], axis=1)
    >>> int(np.sum(d < 2.6))                # itself and its 12 neighbours
    13
    """

    def __init__(self, crystal, centres, reach, chunk=1_000_000):
        from ..analysis.neighbours import cell_heights

        self.cell = crystal.cell
        self.pbc = crystal.pbc
        self.inv = np.linalg.inv(crystal.cell)
        h = cell_heights(crystal.cell)
        self.nb = np.array([max(1, int(h[k] // reach)) for k in range(3)], np.int64)
        want = set()
        for c in np.asarray(centres, float).reshape(-1, 3):
            want.update(self._around(self._bin(c[None])[0]))
        want = np.array(sorted(want), np.int64)
        sel = []
        n = len(crystal)
        for a in range(0, n, chunk):
            b = self._bin(crystal.positions[a:a + chunk])
            sel.append(a + np.flatnonzero(np.isin(b, want)))
        self.idx = np.concatenate(sel) if sel else np.zeros(0, np.int64)
        bins = self._bin(crystal.positions[self.idx])
        order = np.argsort(bins, kind="stable")
        self.idx, self.bins = self.idx[order], bins[order]

    def _cells(self, pos):
        f = np.asarray(pos, float) @ self.inv
        k = np.floor(f * self.nb).astype(np.int64)
        for ax in range(3):
            k[:, ax] = np.mod(k[:, ax], self.nb[ax]) if self.pbc[ax] else np.clip(k[:, ax], 0, self.nb[ax] - 1)
        return k

    def _bin(self, pos):
        k = self._cells(pos)
        return (k[:, 0] * self.nb[1] + k[:, 1]) * self.nb[2] + k[:, 2]

    def _around(self, b):
        k = [b // (self.nb[1] * self.nb[2]), (b // self.nb[2]) % self.nb[1], b % self.nb[2]]
        out = set()
        for d in itertools.product((-1, 0, 1), repeat=3):
            q = []
            for ax in range(3):
                v = k[ax] + d[ax]
                if self.pbc[ax]:
                    v %= self.nb[ax]
                elif not 0 <= v < self.nb[ax]:
                    break
                q.append(int(v))
            else:
                out.add((q[0] * int(self.nb[1]) + q[1]) * int(self.nb[2]) + q[2])
        return out

    def near(self, centre):
        """Indices of the atoms (by where they were when binned) in the 27 bins around ``centre``."""
        parts = []
        for b in sorted(self._around(int(self._bin(np.asarray(centre, float)[None])[0]))):
            lo, hi = np.searchsorted(self.bins, [b, b + 1])
            parts.append(self.idx[lo:hi])
        return np.concatenate(parts) if parts else np.zeros(0, np.int64)


def _nn_distance(crystal, sample=2000):
    """Shortest distance from a sample of atoms to their neighbours
    (periodic), found through :class:`_Bins` so a large crystal is never
    copied or padded whole.

    >>> import crystalview as cv
    >>> round(_nn_distance(cv.build("Cu", repeat=(4, 4, 4))), 4)
    2.5561
    """
    from ..analysis.neighbours import with_images

    n = len(crystal)
    which = np.arange(0, n, max(1, n // sample))
    cut = max(2.0 * (crystal.volume / max(n, 1)) ** (1 / 3), 1.0)
    for _ in range(6):
        bins = _Bins(crystal, crystal.positions[which], cut)
        best = np.inf
        for i in which:
            local = bins.near(crystal.positions[i])
            pts, idx = with_images(crystal.positions[local], crystal.cell, crystal.pbc, cut)
            d = np.linalg.norm(pts - crystal.positions[i], axis=1)
            d = d[(d > 1e-9) & (d <= cut)]
            if len(d):
                best = min(best, float(d.min()))
        if np.isfinite(best):
            return best
        cut *= 2
    return float("nan")


def _rng(seed):
    """numpy Generator for a seed that is None or a whole number >= 0."""
    msg = f"seed {seed!r} must be a whole number of 0 or more, e.g. 0 or 42"
    if seed is None:
        return np.random.default_rng()
    if isinstance(seed, bool):
        raise UserError(msg)
    try:
        f = float(seed)
    except (TypeError, ValueError):
        raise UserError(msg) from None
    if not math.isfinite(f) or f != int(f) or f < 0:
        raise UserError(msg)
    return np.random.default_rng(int(f))


#: metadata keys that describe a particular supercell, not the material
_CELL_KEYS = ("repeat", "orient", "supercell", "defects")


def parent_crystal(source, phase=None, a=None, what="this defect") -> Crystal:
    """The conventional cell of an element name or of a Crystal's lattice.

    A string is built with :func:`crystalview.build` (``phase``/``a`` passed
    on); a Crystal gives its lattice (the conventional cell it was built from),
    not its atoms, so supercells and defects already in it are not carried.

    >>> import crystalview as cv
    >>> parent_crystal(cv.build("Cu", repeat=(3, 3, 3)))
    <Crystal fcc Cu4 (4 atoms) cell 3.6149 x 3.6149 x 3.6149 A>
    >>> parent_crystal("Fe", phase="gamma")
    <Crystal fcc Fe4 (4 atoms) cell 3.6467 x 3.6467 x 3.6467 A>
    """
    if isinstance(source, Crystal):
        lat = source.lattice
        if lat is None:
            raise UserError(f"{what} needs a crystal with a known lattice (built from an element or lattice type)")
        from ..elements import atomic_number

        z = np.array([atomic_number(s) for s in lat.basis_symbols], np.uint8)
        meta = {k: v for k, v in source.metadata.items() if k not in _CELL_KEYS}
        return Crystal(lat.cell, lat.basis_frac @ lat.cell, z, lattice=lat, metadata=meta,
                       species_radii=source.species_radii)
    if not isinstance(source, str):
        raise UserError(f"{what} needs an element symbol (e.g. 'Cu') or a Crystal, not {type(source).__name__}")
    from ..build import build

    return build(source, phase=phase, a=a)


def oriented(parent: Crystal, orient, repeat=None, max_atoms=None) -> Crystal:
    """The parent's lattice as an oriented (and repeated) supercell.

    >>> import crystalview as cv
    >>> c = oriented(cv.build("Cu"), ["[1-10]", "[11-2]", "[111]"])
    >>> len(c), np.linalg.norm(c.cell, axis=1).round(4).tolist()
    (6, [2.5561, 4.4273, 6.2612])
    """
    from ..build import _supercell_of

    return _supercell_of(parent, repeat=repeat, orient=orient, max_atoms=max_atoms)


def repeats(values, n, what, example):
    """n whole numbers >= 1.

    >>> repeats([2, 2, 1], 3, "repeat", "[2, 2, 2]")
    (2, 2, 1)
    >>> try:
    ...     repeats([2, 0], 2, "repeat", "[1, 1]")
    ... except UserError:
    ...     print("refused")
    ...
    refused
    """
    try:
        vals = tuple(int(v) for v in values)
        if any(float(v) != int(v) for v in values):
            raise ValueError
    except (TypeError, ValueError):
        raise UserError(f"{what} {values!r} must be {n} whole numbers, e.g. {example}") from None
    if len(vals) != n:
        raise UserError(f"{what} {values!r} must be {n} whole numbers, e.g. {example}")
    if any(v < 1 for v in vals):
        raise UserError(f"{what} {vals} must be at least 1 each, e.g. {example}")
    return vals


def rotation_to_frame(x_axis, z_axis):
    """3x3 matrix Rm with v_new = v_old @ Rm, taking z_axis to +z and the part
    of x_axis normal to it to +x.

    >>> Rm = rotation_to_frame([1, -1, 0], [1, 1, 1])
    >>> (np.array([1, 1, 1]) @ Rm).round(4).tolist()
    [0.0, 0.0, 1.7321]
    """
    z = np.asarray(z_axis, float)
    z = z / np.linalg.norm(z)
    x = np.asarray(x_axis, float)
    x = x - np.dot(x, z) * z
    x = x / np.linalg.norm(x)
    y = np.cross(z, x)
    return np.column_stack([x, y, z])


def indices_text(frac_vec, tol=1e-6):
    """'a/2[1-10]'-style text for a vector given in conventional fractional units.

    >>> indices_text([0.5, -0.5, 0]), indices_text([1 / 6, 1 / 6, -1 / 3])
    ('a/2[1-10]', 'a/6[11-2]')
    >>> indices_text([1, 0, 0])
    'a[100]'
    """
    from fractions import Fraction
    from math import gcd

    v = np.asarray(frac_vec, float)
    fr = [Fraction(float(x)).limit_denominator(12) for x in v]
    if max(abs(float(f) - x) for f, x in zip(fr, v)) > tol:
        return "[" + ", ".join(f"{x:.4f}" for x in v) + "]"
    den = 1
    for f in fr:
        den = den * f.denominator // gcd(den, f.denominator)
    ints = [int(f * den) for f in fr]
    g = 0
    for i in ints:
        g = gcd(g, abs(i))
    g = g or 1
    ints = [i // g for i in ints]
    num = Fraction(g, den)
    from ..lattice import format_indices

    body = format_indices(ints, "direction")
    if num == 1:
        return "a" + body
    if num.numerator == 1:
        return f"a/{num.denominator}{body}"
    return f"{num.numerator}a/{num.denominator}{body}"
