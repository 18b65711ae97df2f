"""The numbers an engineer quotes about a crystal: coordination, hard-sphere
radius, packing factor, density, atom counts, d-spacings, planar and linear
densities and angles."""
from __future__ import annotations

import math

import numpy as np

from .. import lattice as L
from ..crystal import Crystal
from ..errors import UserError
from .neighbours import with_images

AMU_G = 1.66053906660e-24        # g per atomic mass unit (CODATA 2018)
A3_CM3 = 1e-24                   # cm^3 per A^3
#: Neighbours within this fraction above the nearest distance count towards
#: the coordination number, so hcp metals whose c/a is off the ideal value
#: (Zn, Cd: second six about 9-10 % further) still count 6 + 6 = 12, while the
#: bcc second shell (15.5 % further) stays out.  Common practice.
SHELL_MERGE = 0.12


def conventional(crystal: Crystal) -> Crystal:
    """The conventional cell the crystal was built from (or the crystal itself,
    realised, for a structure of no known lattice type).

    >>> import crystalview as cv
    >>> conventional(cv.build("Cu", repeat=(3, 3, 3)))
    <Crystal fcc Cu4 (4 atoms) cell 3.6149 x 3.6149 x 3.6149 A>
    """
    lat = crystal.lattice
    if lat is None or lat.prototype == "cif":
        from ..occupancy import realise

        return realise(crystal, 0)
    from ..elements import atomic_number

    z = np.array([atomic_number(s) for s in lat.basis_symbols], np.uint8)
    return Crystal(lat.cell, lat.basis_frac @ lat.cell, z, lattice=lat, species_radii=crystal.species_radii)


def neighbour_shells(crystal: Crystal, nshells=3, sample=2000):
    """[(distance, mean count)] of the first coordination shells.

    >>> import crystalview as cv
    >>> [(round(d, 4), float(n)) for d, n in neighbour_shells(cv.build("Cu"))]
    [(2.5561, 12.0), (3.6149, 6.0), (4.4273, 24.0)]
    """
    n = len(crystal)
    if n == 0:
        return []
    idx = np.arange(n) if n <= sample else np.linspace(0, n - 1, sample).astype(int)
    cutoff = 2.2 * (crystal.volume / n) ** (1 / 3) + 0.5
    pts, _ = with_images(crystal.positions, crystal.cell, crystal.pbc, cutoff)
    if len(idx) * len(pts) <= 4_000_000:       # small cells: plain numpy, no scipy import
        d = np.linalg.norm(pts[None, :, :] - crystal.positions[idx][:, None, :], axis=-1).ravel()
        alld = np.sort(d[(d > 1e-8) & (d <= cutoff)])
    else:
        from scipy.spatial import cKDTree

        lists = cKDTree(pts).query_ball_point(crystal.positions[idx], cutoff)
        dists = []
        for k, lst in zip(idx, lists):
            d = np.linalg.norm(pts[lst] - crystal.positions[k], axis=1)
            dists.append(d[d > 1e-8])
        alld = np.sort(np.concatenate(dists))
    shells = []
    start = 0
    while start < len(alld) and len(shells) < nshells:
        d0 = alld[start]
        end = np.searchsorted(alld, d0 * (1 + 1e-3) + 1e-6, side="right")
        shells.append((float(alld[start:end].mean()), (end - start) / len(idx)))
        start = end
    return shells


def coordination(crystal: Crystal):
    """(coordination number, [(distance, count), ...]) with the shell merge rule.

    >>> import crystalview as cv
    >>> cn, shells = coordination(cv.build("Fe"))
    >>> float(cn), [(round(d, 4), float(n)) for d, n in shells]
    (8.0, [(2.4825, 8.0)])
    """
    shells = neighbour_shells(crystal, nshells=4)
    if not shells:
        return 0, []
    d0 = shells[0][0]
    inside = [(d, c) for d, c in shells if d <= d0 * (1 + SHELL_MERGE)]
    cn = sum(c for _, c in inside)
    return round(cn, 2), inside


def _average(crystal):
    """The average-structure record of a crystal read with partly occupied
    sites (None when there is none, or defects changed the atoms)."""
    avg = crystal.metadata.get("average")
    if avg and not crystal.metadata.get("defects") and abs(avg.get("volume_A3", 0) - crystal.volume) < 1e-6 * crystal.volume:
        return avg
    return None


def packing_factor(crystal: Crystal):
    """Volume of the hard spheres / cell volume (occupancy-weighted for a
    structure with partly occupied sites).

    >>> import crystalview as cv
    >>> round(packing_factor(cv.build("Cu")), 4)
    0.7405
    """
    avg = _average(crystal)
    if avg is not None or (crystal.occupancy is not None and not crystal.metadata.get("realisation")):
        comp = avg["composition"] if avg is not None else crystal.counts()
        vol = sum(n * crystal.radius_of(s) ** 3 for s, n in comp.items())
        return float((4.0 / 3.0) * math.pi * vol / crystal.volume)
    r = crystal.atom_radii()
    return float((4.0 / 3.0) * math.pi * np.sum(r ** 3) / crystal.volume)


def density(crystal: Crystal):
    """Theoretical density (g/cm^3) = mass of the cell / its volume (from the
    occupancies for a structure with partly occupied sites).

    >>> import crystalview as cv
    >>> round(density(cv.build("Cu")), 2)
    8.94
    """
    avg = _average(crystal)
    mass = avg["mass_amu"] if avg is not None else crystal.mass_amu
    return mass * AMU_G / (crystal.volume * A3_CM3)


def atoms_per_mm3(crystal: Crystal):
    """Number of atoms per mm^3 of the crystal.

    >>> import crystalview as cv
    >>> f"{atoms_per_mm3(cv.build('Cu')):.4g}"
    '8.468e+19'
    """
    return len(crystal) / crystal.volume * 1e21


def plane_numbers(crystal: Crystal, hkl):
    """d-spacing, atom layer spacings and planar density of the plane (hkl) of the lattice.

    >>> import crystalview as cv
    >>> p = plane_numbers(cv.build("Cu"), "(111)")
    >>> p["plane"], round(p["d_spacing_A"], 4), round(float(p["planar_density_per_nm2"]), 2)
    ('(111)', 2.0871, 17.67)
    """
    lat = crystal.lattice
    if lat is None:
        raise UserError("planes need a crystal with a known lattice")
    ind = L.parse_indices(hkl, kind="plane") if isinstance(hkl, str) else hkl
    if isinstance(ind, L.Indices) and ind.four and not lat.is_hexagonal:
        raise UserError(f"four-index plane {ind} is only for hexagonal cells; use (hkl)")
    d = L.d_spacing(lat.cell, ind)
    pd = L.planar_density(lat.cell, lat.basis_frac, ind)
    layers = L.atomic_layer_spacings(lat.cell, lat.basis_frac, ind)
    return {"plane": str(ind), "d_spacing_A": d, "atomic_layer_spacings_A": layers,
            "planar_density_per_nm2": pd * 100.0}


def direction_numbers(crystal: Crystal, uvw):
    """Repeat length and linear density of the direction [uvw] of the crystal's lattice.

    >>> import crystalview as cv
    >>> d = direction_numbers(cv.build("Cu"), "[110]")
    >>> d["direction"], round(d["repeat_length_A"], 4), round(float(d["linear_density_per_nm"]), 3)
    ('[110]', 2.5561, 3.912)
    """
    lat = crystal.lattice
    if lat is None:
        raise UserError("directions need a crystal with a known lattice")
    ind = L.parse_indices(uvw, kind="direction") if isinstance(uvw, str) else uvw
    if isinstance(ind, L.Indices) and ind.four and not lat.is_hexagonal:
        raise UserError(f"four-index direction {ind} is only for hexagonal cells; use [uvw]")
    from ..build import centering_vectors, lattice_period

    ind3 = L.as_indices(ind, "direction").three().values
    period = lattice_period(ind3, centering_vectors(lat.basis_frac, list(lat.basis_symbols)))
    ld = L.linear_density(lat.cell, lat.basis_frac, ind)
    return {"direction": str(ind), "repeat_length_A": float(np.linalg.norm(period @ lat.cell)),
            "linear_density_per_nm": ld * 10.0}


def summary(crystal: Crystal, part_volume_mm3=None, planes=(), directions=(), angles=()):
    """Everything `crystalview info` prints, as a plain dict (JSON-ready).

    >>> import crystalview as cv
    >>> s = summary(cv.build("Cu"))
    >>> s["lattice_type"], s["space_group"], s["atoms"], round(s["packing_factor"], 4)
    ('fcc', 225, 4, 0.7405)
    """
    conv = conventional(crystal)
    lat = crystal.lattice
    cn, shells = coordination(conv)
    known = lat is not None and lat.prototype != "cif"
    if not known and len(crystal.elements) > 1:
        cn = None            # one number means nothing for a structure of several kinds of site
    avg = _average(crystal)
    out = {
        "name": crystal.metadata.get("name"),
        "structure": lat.title if known else "structure of no built-in lattice type",
        "lattice_type": lat.prototype if known else "other",
        "space_group": lat.space_group if lat else None,
        "phase": crystal.metadata.get("phase"),
        "temperature_K": crystal.metadata.get("temperature_K"),
        "parameter_source": crystal.metadata.get("source"),
        "note": crystal.metadata.get("note") or None,
        "a_A": lat.a if lat else None,
        "c_A": lat.c if lat and lat.c else None,
        "c_over_a": (lat.c / lat.a) if lat and lat.c else None,
        "atoms_per_conventional_cell": len(conv),
        "nearest_neighbour_distance_A": shells[0][0] if shells else None,
        "coordination_number": cn,
        "coordination_shells": [{"distance_A": d, "count": c} for d, c in shells],
        "hard_sphere_radius_A": {s: crystal.radius_of(s) for s in crystal.elements},
        "packing_factor": packing_factor(conv) if known else packing_factor(crystal),
        "density_g_cm3": density(crystal),
        "atoms": len(crystal),
        "cell_lengths_A": [float(x) for x in np.linalg.norm(crystal.cell, axis=1)],
        "cell_volume_A3": crystal.volume,
        "atoms_per_mm3": atoms_per_mm3(crystal),
        "composition": avg["composition"] if avg is not None else crystal.counts(),
        "defects": crystal.metadata.get("defects") or [],
    }
    if avg is not None:
        out["formula_average"] = avg["formula"]
    if crystal.metadata.get("realisation"):
        out["realisation"] = crystal.metadata["realisation"]
        out["realised_composition"] = {s: int(n) for s, n in
                                       zip(*np.unique(crystal.symbols, return_counts=True))}
        from ..occupancy import realisation_gap

        note = realisation_gap(crystal)
        if note:
            out["realisation_note"] = note
    if lat is not None and lat.site_species:
        out["sublattice_occupation"] = list(lat.site_species)
    if crystal.metadata.get("recognition"):
        out["recognition"] = crystal.metadata["recognition"]
    if crystal.metadata.get("radii"):
        out["radii"] = crystal.metadata["radii"]
    if crystal.metadata.get("alloy"):
        out["alloy"] = crystal.metadata["alloy"]
    if crystal.metadata.get("repeat"):
        out["repeat"] = crystal.metadata["repeat"]
    if crystal.metadata.get("orient"):
        out["orient"] = crystal.metadata["orient"]
    if crystal.metadata.get("supercell"):
        out["supercell"] = crystal.metadata["supercell"]
    if part_volume_mm3 is not None:
        if not (part_volume_mm3 > 0 and math.isfinite(part_volume_mm3)):
            raise UserError(f"part volume {part_volume_mm3} must be a positive number of mm^3")
        out["part_volume_mm3"] = part_volume_mm3
        out["atoms_in_part"] = atoms_per_mm3(crystal) * part_volume_mm3
    if planes:
        out["planes"] = [plane_numbers(crystal, p) for p in planes]
    if directions:
        out["directions"] = [direction_numbers(crystal, d) for d in directions]
    if angles:
        res = []
        for d1, d2 in angles:
            if lat is None:
                raise UserError("angles need a crystal with a known lattice")
            res.append({"from": str(d1), "to": str(d2), "angle_deg": L.angle_between(lat.cell, d1, d2)})
        out["angles"] = res
    return out


def symmetry(crystal: Crystal, symprec=1e-3):
    """(international symbol, number) from spglib.

    >>> import crystalview as cv
    >>> symmetry(cv.build("Mg"))
    ('P6_3/mmc', 194)
    """
    import spglib

    cell = (crystal.cell, crystal.frac, crystal.numbers.astype(int))
    ds = spglib.get_symmetry_dataset(cell, symprec=symprec)
    if ds is None:
        return None, None
    return ds.international, int(ds.number)
