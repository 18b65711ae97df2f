"""Interstitial solutes in named sites: fill_sites()."""
from __future__ import annotations


import numpy as np

from ..errors import UserError


def fill_sites(crystal, element, kind="octahedral", fraction=None, seed=0, max_atoms=None, count=None):
    """A new crystal with ``element`` atoms (role "interstitial") in a
    ``fraction`` of the empty ``kind`` sites, chosen at random with ``seed``.

    The count is ``count``, or round(fraction x number of sites) (every site
    when neither is given); the same seed gives the same result.  The solute's radius is its interstitial radius from the data
    file (or its metallic radius for a metal).  A defect record is added to
    ``metadata['defects']``.  ``max_atoms`` raises the cap on the hole
    analysis of large defected crystals.

    >>> import crystalview as cv
    >>> c = fill_sites(cv.build("Fe", phase="gamma", repeat=(2, 2, 2)), "C", fraction=0.25)
    >>> c.counts(), c.role_counts()
    ({'C': 8, 'Fe': 32}, {'host': 32, 'interstitial': 8})
    """
    from .. import elements as E
    from ..analysis.sites import interstitial_sites
    from .point import fraction_value

    if count is not None and fraction is not None:
        raise UserError("give the interstitials as a count or as a fraction of the sites, not both")
    frac = fraction_value(1.0 if fraction is None else fraction, what="of the sites", example="0.05")
    sym = E._canon(element)
    E.atomic_number(sym)
    radius, _mode, _src = E.solute_radius(sym)
    sites = interstitial_sites(crystal, max_atoms=max_atoms)
    kinds = sorted({s.kind for s in sites if s.kind != "vacancy"})
    kind_l = str(kind).strip().lower()
    if kind_l not in kinds:
        raise UserError(f"no '{kind}' sites in this crystal; its site kinds are: {', '.join(kinds) or 'none'}")
    chosen_from = [s for s in sites if s.kind == kind_l]
    if count is not None:
        from .point import _count_from

        n = _count_from(len(chosen_from), count=count, what=f"{sym} interstitials in {kind_l} sites")
        frac = n / len(chosen_from) if chosen_from else 0.0
    else:
        n = int(round(frac * len(chosen_from)))
    rng = np.random.default_rng(seed)
    pick = np.sort(rng.choice(len(chosen_from), size=n, replace=False)) if n else np.zeros(0, int)
    pos = np.array([chosen_from[i].position for i in pick]).reshape(-1, 3)
    rad = None if sym in crystal.species_radii else radius
    out = crystal.add_atoms(pos, sym, role="interstitial", radius=rad)
    out.record_defect("interstitial", element=sym, site=kind_l, count=n, fraction=frac, seed=seed,
                      sites_available=len(chosen_from))
    return out
