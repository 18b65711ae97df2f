"""Partly occupied and shared sites: the average structure and its realisations.

A CIF describes the *average* structure of a disordered crystal: a site may be
shared by several species (a mixed site, ``Fe0.5Ni0.5``) or be partly empty
(``Fe0.9``).  Such a crystal is kept as an *average* :class:`Crystal`: one
entry per (site, species) with its occupancy in ``crystal.occupancy``; entries
of one site sit at the same place.  Composition, formula and density use the
occupancies.

Geometry that needs real atoms (holes, neighbours, figures, print models)
works on a *realised* crystal: every shared site gets one species or stays
empty.  Sites are drawn class by class (the sites with the same occupancy
signature, i.e. the symmetry-equivalent ones), and each class gets exactly
round(occupancy x sites) atoms of each species (largest remainders), so the
realisation matches the occupancies exactly over the supercell.  The draw is
reproducible with ``seed``.  A realised atom keeps, in ``occupancy``, the
occupancy its species had on its site, so figures can mark atoms that stand
on shared sites.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from .errors import UserError

#: Entries of partly occupied sites closer than this (A) belong to one site
#: (split positions of one disordered atom); a real bond is never this short.
SPLIT_SITE_DISTANCE = 0.5
#: Occupancies summing to at most 1 + this on a site are accepted (rounded files).
OCCUPANCY_SLACK = 0.01


@dataclass
class SiteGroups:
    """How the entries of a crystal group into sites.

    first : (S,) index of one entry of each site.
    site_of : (N,) site index of each entry.
    site_type : (S,) class index of each site (same occupancy signature).
    signatures : class index -> signature text ("Fe", "Fe0.5Ni0.5", "O0.9").

    >>> import crystalview as cv
    >>> g = site_groups(cv.build("NiAl"))
    >>> g.n_sites, g.site_type.tolist(), g.signatures
    (2, [1, 0], ['Al', 'Ni'])
    """

    first: np.ndarray
    site_of: np.ndarray
    site_type: np.ndarray
    signatures: list

    @property
    def n_sites(self):
        return len(self.first)


def _occ_text(x):
    return f"{x:.4f}".rstrip("0").rstrip(".")


def signature(species_occ):
    """Text naming a site's occupation: 'Cu' (full), 'Fe0.5Ni0.5', 'O0.9'.

    >>> signature([("Ni", 0.5), ("Fe", 0.5)])
    'Fe0.5Ni0.5'
    >>> signature([("Cu", 1.0)])
    'Cu'
    """
    merged = {}
    for s, o in species_occ:
        merged[s] = merged.get(s, 0.0) + float(o)
    if len(merged) == 1:
        (s, o), = merged.items()
        if abs(o - 1.0) < 1e-6:
            return s
    return "".join(f"{s}{_occ_text(o)}" for s, o in sorted(merged.items()))


_SIG = re.compile(r"([A-Z][a-z]?)(\d*\.?\d*)")


def parse_signature(text):
    """[(species, occupancy)] of a signature ('Fe0.5Ni0.5' -> [('Fe', 0.5), ('Ni', 0.5)]).

    >>> parse_signature("Fe0.6Ni0.4")
    [('Fe', 0.6), ('Ni', 0.4)]
    """
    out = []
    for s, o in _SIG.findall(str(text)):
        out.append((s, float(o) if o not in ("", ".") else 1.0))
    return out


def is_average(crystal):
    """True when the crystal is an average structure (partly occupied or
    shared sites not yet realised).

    >>> import crystalview as cv
    >>> is_average(cv.build("Cu"))
    False
    """
    occ = getattr(crystal, "occupancy", None)
    return occ is not None and not crystal.metadata.get("realisation")


def site_groups(crystal, tol=SPLIT_SITE_DISTANCE, labels=None):
    """Group a crystal's entries into sites (see :class:`SiteGroups`).

    Fully occupied entries are sites of their own; entries with occupancy
    below 1 within ``tol`` A of each other (periodic) form one site.
    ``labels`` (one per entry) name the sites in the error for occupancies
    summing above 1.

    >>> import crystalview as cv
    >>> site_groups(cv.build("Cu")).n_sites
    4
    """
    from .elements import symbol_of

    n = len(crystal)
    occ = crystal.occupancy if is_average(crystal) else None
    site_of = np.arange(n)
    if occ is not None and n:
        part = np.nonzero(occ < 1.0 - 1e-6)[0]
        if len(part):
            # connected components of the close pairs of partly occupied entries (vectorised)
            from scipy.sparse import coo_matrix
            from scipy.sparse.csgraph import connected_components

            pairs = _close_pairs(crystal, part, tol)
            if len(pairs):
                g = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
                _, comp = connected_components(g, directed=False)
                # each component named by its smallest entry index
                smallest = np.full(comp.max() + 1, n, dtype=np.int64)
                np.minimum.at(smallest, comp, np.arange(n))
                site_of = smallest[comp]
    roots, site_of = np.unique(site_of, return_inverse=True)
    site_of = site_of.reshape(-1)
    first = np.zeros(len(roots), int)
    first[site_of[::-1]] = np.arange(n)[::-1]
    if occ is None:
        # every entry a full site: the class is the species (and role)
        key = crystal.numbers.astype(int) * 8 + crystal.roles.astype(int)
        uk, site_type = np.unique(key[first], return_inverse=True)
        sigs = [symbol_of(int(k) // 8) for k in uk]
        return SiteGroups(first, site_of, site_type.reshape(-1), sigs)
    # each site's occupation as a sorted tuple of (species, occupancy) codes; the distinct tuples are few
    code = crystal.numbers.astype(np.int64) * 1_000_000 + np.round(np.asarray(occ) * 1e5).astype(np.int64)
    order = np.lexsort((code, site_of))
    bounds = np.flatnonzero(np.diff(site_of[order])) + 1
    groups = np.split(code[order], bounds)
    keys = [tuple(g.tolist()) for g in groups]
    uniq = {}
    site_type = np.empty(len(roots), int)
    for sidx, k in enumerate(keys):
        t = uniq.get(k)
        if t is None:
            t = uniq[k] = len(uniq)
        site_type[sidx] = t
    sigs = []
    for k, t in sorted(uniq.items(), key=lambda kv: kv[1]):
        members = [(symbol_of(c // 1_000_000), (c % 1_000_000) / 1e5) for c in k]
        total = sum(o for _, o in members)
        if total > 1.0 + OCCUPANCY_SLACK:
            sidx = int(np.nonzero(site_type == t)[0][0])
            ents = order[bounds[sidx - 1] if sidx else 0: bounds[sidx] if sidx < len(bounds) else n]
            who = ", ".join(f"'{labels[e] if labels is not None else crystal.symbols[e]}' {float(occ[e]):g}"
                            for e in ents)
            raise UserError(f"the site shared by {who} has occupancies summing to {total:.3f}, over 1; "
                            f"correct _atom_site_occupancy")
        sigs.append(signature(members))
    return SiteGroups(first, site_of, site_type, sigs)


def _close_pairs(crystal, idx, tol):
    """(P, 2) array of entry pairs (i < j) among ``idx`` closer than ``tol`` (periodic)."""
    from scipy.spatial import cKDTree

    from .analysis.neighbours import with_images

    pos = crystal.positions[idx]
    pts, which = with_images(pos, crystal.cell, crystal.pbc, tol)
    pairs = cKDTree(pts).query_pairs(tol, output_type="ndarray")
    if len(pairs) == 0:
        return np.zeros((0, 2), np.int64)
    a, b = which[pairs[:, 0]], which[pairs[:, 1]]
    keep = a != b
    a, b = idx[a[keep]], idx[b[keep]]
    out = np.stack([np.minimum(a, b), np.maximum(a, b)], axis=1)
    return np.unique(out, axis=0) if len(out) else out


def composition(crystal):
    """Species -> number of atoms in the cell, weighted by occupancy for an
    average structure.

    >>> import crystalview as cv
    >>> composition(cv.build("Cu"))
    {'Cu': 4.0}
    """
    from .elements import symbol_of

    occ = crystal.occupancy if is_average(crystal) else None
    w = np.ones(len(crystal)) if occ is None else np.asarray(occ, float)
    out = {}
    for z in np.unique(crystal.numbers):
        out[symbol_of(int(z))] = float(w[crystal.numbers == z].sum())
    return out


def formula(comp):
    """Formula text of a composition, smallest whole-number ratio where the
    numbers allow, else the counts with up to 4 decimals.

    >>> formula({"Fe": 2.0, "Ni": 2.0})
    'FeNi'
    >>> formula({"Fe": 1.8, "Ni": 2.2})
    'Fe1.8Ni2.2'
    """
    items = [(s, n) for s, n in comp.items() if n > 1e-9]
    if not items:
        return "empty"
    if all(abs(n - round(n)) < 1e-6 for _, n in items):
        from math import gcd

        g = 0
        for _, n in items:
            g = gcd(g, int(round(n)))
        return "".join(f"{s}{'' if round(n) // g == 1 else round(n) // g}" for s, n in items)
    return "".join(f"{s}{_occ_text(n)}" for s, n in items)


def realise(crystal, seed=0):
    """A realised crystal: each shared or partly occupied site of an average
    structure gets one species or stays empty, matching the occupancies
    exactly class by class (see the module docstring); reproducible with
    ``seed``.  A crystal that is not an average structure comes back as it is.

    >>> import numpy as np, crystalview as cv
    >>> avg = cv.Crystal(np.diag([3.6] * 3), [[0, 0, 0]] * 2 + [[0, 1.8, 1.8]] * 2 + [[1.8, 0, 1.8]] * 2
    ...                  + [[1.8, 1.8, 0]] * 2, symbols=["Fe", "Ni"] * 4, occupancy=[0.5] * 8)
    >>> real = realise(avg, seed=1)
    >>> real.counts(), real.metadata["realisation"]["seed"]
    ({'Fe': 2, 'Ni': 2}, 1)
    """
    if not is_average(crystal):
        return crystal
    if seed is None or isinstance(seed, bool) or int(seed) != seed or seed < 0:
        raise UserError(f"seed {seed} must be a whole number of 0 or more, e.g. seed=42")
    g = site_groups(crystal)
    occ = np.asarray(crystal.occupancy, float)
    rng = np.random.default_rng(int(seed))
    from .elements import atomic_number

    chosen_z = np.zeros(g.n_sites, np.int64)          # the species drawn on each site (0: vacant)
    classes = []
    for t, sig in enumerate(g.signatures):
        sites = np.nonzero(g.site_type == t)[0]
        spec = parse_signature(sig)
        n = len(sites)
        want = {s: o * n for s, o in spec}
        vac = max(0.0, n - sum(want.values()))
        labels = list(want) + ["vacant"]
        exact = np.array(list(want.values()) + [vac])
        cnt = np.floor(exact + 1e-9).astype(int)
        rest = n - cnt.sum()
        if rest > 0:
            order = np.argsort(-(exact - cnt), kind="stable")
            cnt[order[:rest]] += 1
        draw = np.repeat(np.arange(len(labels)), cnt)
        rng.shuffle(draw)
        zs = np.array([atomic_number(lab) for lab in labels[:-1]] + [0], np.int64)
        chosen_z[sites] = zs[draw]
        classes.append({"site": sig, "sites": int(n),
                        "drawn": {lab: int(c) for lab, c in zip(labels, cnt) if c or lab != "vacant"}})
    # keep, on each site, the entry of the drawn species (the most occupied one where a species has several)
    cand = np.nonzero(crystal.numbers.astype(np.int64) == chosen_z[g.site_of])[0]
    order = np.lexsort((-occ[cand], g.site_of[cand]))
    cand = cand[order]
    firsts = np.ones(len(cand), bool)
    firsts[1:] = g.site_of[cand][1:] != g.site_of[cand][:-1]
    keep = cand[firsts]
    keep = np.sort(np.array(keep, int))
    out = crystal.select(keep)
    shared = sum(c["sites"] for c in classes if parse_signature(c["site"]) != [(c["site"], 1.0)])
    out.metadata["realisation"] = {"seed": int(seed), "shared_sites": int(shared), "classes": classes}
    return out


def average_record(crystal):
    """The composition, formula and mass of an average structure, recorded in
    metadata so a realised crystal still reports them.

    >>> import crystalview as cv
    >>> average_record(cv.build("Cu"))["formula"]
    'Cu'
    """
    from .elements import atomic_mass

    comp = composition(crystal)
    return {"composition": comp, "formula": formula(comp),
            "mass_amu": float(sum(atomic_mass(s) * n for s, n in comp.items())),
            "volume_A3": crystal.volume}


def realisation_gap(crystal, threshold=0.005):
    """One line when a realised crystal's composition misses the file's
    average by more than ``threshold`` (a fraction, per species), else None:
    a few shared sites cannot hold every composition (4 sites of Fe0.9Ni0.1
    are drawn as 4 Fe), and a larger repeat comes closer.

    >>> import crystalview as cv
    >>> import pathlib
    >>> f = pathlib.Path(cv.__file__).parents[1] / "tests/data/cif/FeNi_fcc_solid_solution_xrayutilities.cif"
    >>> realisation_gap(cv.build(f))
    'note: 4 sites cannot hold the average composition (Fe 90.0 %, Ni 10.0 %): drawn Fe 100.0 %, Ni 0.0 %; a larger --repeat comes closer (3 x 3 x 3: 108 atoms)'
    >>> realisation_gap(cv.build(f, repeat=(5, 5, 5))) is None
    True
    """
    avg = (crystal.metadata.get("average") or {}).get("composition")
    if not avg or not crystal.metadata.get("realisation") or crystal.metadata.get("defects") or len(crystal) == 0:
        return None
    total = sum(avg.values())
    want = {k: v / total for k, v in avg.items()}
    syms = list(crystal.symbols)
    got = {k: syms.count(k) / len(syms) for k in want}
    if max(abs(got[k] - want[k]) for k in want) <= threshold:
        return None
    # the smallest n x n x n repeat whose site count rounds every species within the threshold
    n_cell = len(syms) / max(1, math.prod(crystal.metadata.get("repeat") or (1, 1, 1)))
    n = 1
    while n < 20:
        n += 1
        sites = n_cell * n ** 3
        if all(abs(round(want[k] * sites) / sites - want[k]) <= threshold for k in want):
            break
    order = sorted(want)
    fmt = ", ".join(f"{k} {100 * want[k]:.1f} %" for k in order)
    drawn = ", ".join(f"{k} {100 * got[k]:.1f} %" for k in order)
    return (f"note: {len(syms):,} sites cannot hold the average composition ({fmt}): drawn {drawn}; a larger "
            f"--repeat comes closer ({n} x {n} x {n}: {int(round(n_cell * n ** 3)):,} atoms)")
