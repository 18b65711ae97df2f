"""Hard-sphere radii of the species of a crystal read from a file, chosen by
its bonding (metallic lattice, other metallic, non-metallic).  Kept apart from
the element data loader (``elements``) because it looks at the structure.
"""
from __future__ import annotations

import math

import numpy as np

from .elements import COVALENT_SOURCE, _data, bonding_of, covalent_radius, element, interstitial


def _interstitial_data():
    return _data()["interstitials"]


def _element_data():
    return _data()["elements"]


def structure_radii(crystal):
    """Hard-sphere radius of every species of a crystal read from a file,
    chosen by its bonding, as {symbol: {radius_A, kind, source}}:

    * a recognised metal lattice (fcc, bcc, hcp, ..., also ordered or
      disordered alloys on it): half the nearest-neighbour distance for every
      species (touching spheres), as for the built-in structures;
    * one species on any other structure: half the nearest-neighbour distance;
    * metallic bonding otherwise: the CN12 metallic radius of each metal
      (the covalent radius where the data has none, said so) and the
      interstitial radius of H, B, C, N;
    * non-metallic structures (oxides, halides, ...): covalent radii.

    >>> import crystalview as cv
    >>> structure_radii(cv.build("Cu"))["Cu"]["kind"]
    'touching spheres of the lattice'
    """
    from .analysis.neighbours import nearest_neighbour_distance

    comp = crystal.counts()
    species = list(comp)
    bonding = bonding_of(comp)
    lat = crystal.lattice
    out = {}
    recognised = lat is not None and lat.prototype != "cif"
    if recognised and bonding == "metallic" and len(species) > 1:
        # the lattice's own species touch; atoms off it or foreign to it get their own radius
        from .lattice import cell_nn_distance
        from .occupancy import parse_signature

        on = {s for sig in (lat.site_species or lat.elements) for s, _ in parse_signature(sig)}
        dnn = cell_nn_distance(np.asarray(lat.cell, float), np.asarray(lat.basis_frac, float))
        for s in species:
            if s in on:
                out[s] = {"radius_A": dnn / 2.0, "kind": "touching spheres of the lattice",
                          "source": "half the nearest-neighbour distance of this structure"}
            elif s in _interstitial_data():
                i = interstitial(s)
                out[s] = {"radius_A": float(i.radius), "kind": "interstitial", "source": i.source}
            elif s in _element_data() and element(s).metallic_radius is not None:
                e = element(s)
                out[s] = {"radius_A": float(e.metallic_radius), "kind": "metallic (CN12)",
                          "source": e.sources["metallic_radius"]}
            else:
                out[s] = {"radius_A": covalent_radius(s), "kind": "covalent (no metallic radius in the data)",
                          "source": COVALENT_SOURCE}
        return out
    if (recognised and bonding == "metallic") or len(species) == 1:
        if recognised:
            from .lattice import cell_nn_distance

            dnn = cell_nn_distance(np.asarray(lat.cell, float), np.asarray(lat.basis_frac, float))
        else:
            from .occupancy import realise

            dnn = nearest_neighbour_distance(realise(crystal, 0) if len(crystal) > 1 else crystal)
        if math.isfinite(dnn) and dnn > 0:
            kind = "touching spheres of the lattice" if recognised else "touching spheres (half the shortest distance)"
            for s in species:
                out[s] = {"radius_A": dnn / 2.0, "kind": kind,
                          "source": "half the nearest-neighbour distance of this structure"}
            return out
    for s in species:
        if bonding == "metallic" and s in _interstitial_data():
            i = interstitial(s)
            out[s] = {"radius_A": float(i.radius), "kind": "interstitial", "source": i.source}
            continue
        if bonding == "metallic" and s in _element_data() and element(s).metallic_radius is not None:
            e = element(s)
            out[s] = {"radius_A": float(e.metallic_radius), "kind": "metallic (CN12)",
                      "source": e.sources["metallic_radius"]}
            continue
        kind = "covalent" if bonding != "metallic" else "covalent (no metallic radius in the data)"
        out[s] = {"radius_A": covalent_radius(s), "kind": kind, "source": COVALENT_SOURCE}
    return out
