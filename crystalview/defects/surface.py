"""Surface slabs: an (hkl) slab (four-index (hkil) for hexagonal cells) with
the plane normal along z, a given number of atomic layers (or thickness) and a
vacuum gap.

How the cell is found: the in-plane cell vectors are the two shortest
independent lattice translations (centring translations included) lying in
the plane, Gauss-reduced; the out-of-plane vector is the lattice translation
with the smallest positive height above the plane (and then the smallest
in-plane part).  These three span a primitive cell of the lattice, which is
filled with the structure's atoms, stacked along the third vector and cut to
the requested number of atomic planes.  The result's cell is (in-plane a1
along x, a2 in the xy plane, c along z) with c = slab height + vacuum; the
slab sits in the middle (vacuum/2 below and above); periodic in x and y,
not in z (pbc = (True, True, False)).
"""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..crystal import Crystal
from ..errors import UserError
from ..lattice import _gcd_reduce, as_indices, reciprocal
from .point import parent_crystal, repeats, rotation_to_frame


def _plane(hkl, lat):
    ind = as_indices(hkl, "plane", what="the slab plane")
    if ind.four and not lat.is_hexagonal:
        raise UserError(f"four-index plane {ind} is only for hexagonal cells; use (hkl)")
    return ind, np.array(_gcd_reduce(ind.three().values), dtype=float)


def _lattice_translations(lat, span=4):
    from ..build import centering_vectors

    cents = centering_vectors(lat.basis_frac, list(lat.basis_symbols))
    r = np.arange(-span, span + 1)
    M = np.stack(np.meshgrid(r, r, r, indexing="ij"), -1).reshape(-1, 3).astype(float)
    T = (M[:, None, :] + cents[None, :, :]).reshape(-1, 3)
    T = T[np.linalg.norm(T, axis=1) > 1e-9]
    return T                                          # conventional fractional units


def _cell_rows(lat, hkl):
    """(P rows in conventional fractional units, layer height) for (hkl)."""
    T = _lattice_translations(lat)
    cart = T @ lat.cell
    L = np.linalg.norm(cart, axis=1)
    n = hkl @ reciprocal(lat.cell)
    n = n / np.linalg.norm(n)
    h = cart @ n
    inpl = np.abs(h) < 1e-7
    order = np.argsort(L[inpl] + 1e-9 * np.arange(inpl.sum()), kind="stable")
    Ti, Ci = T[inpl][order], cart[inpl][order]
    if not len(Ti):
        raise UserError(f"plane {hkl} has no short lattice vectors in it; use lower indices")
    t1, c1 = Ti[0], Ci[0]
    t2 = None
    for t, c in zip(Ti[1:], Ci[1:]):
        if np.linalg.norm(np.cross(c1, c)) > 1e-6 * np.linalg.norm(c) * np.linalg.norm(c1):
            t2, c2 = t, c
            break
    if t2 is None:
        raise UserError(f"plane {hkl}: indices too high for a slab (no second in-plane vector found); use lower indices")
    # Gauss reduction of the 2D basis
    for _ in range(50):
        if np.linalg.norm(c2) < np.linalg.norm(c1):
            t1, t2, c1, c2 = t2, t1, c2, c1
        mu = round(float(c1 @ c2) / float(c1 @ c1))
        if mu == 0:
            break
        t2, c2 = t2 - mu * t1, c2 - mu * c1
    if np.cross(c1, c2) @ n < 0:
        t2, c2 = -t2, -c2
    up = h > 1e-7
    hmin = h[up].min()
    cand = np.nonzero(up & (h < hmin + 1e-7))[0]
    k = cand[np.argmin(L[cand])]
    P = np.array([t1, t2, T[k]])
    return P, n, float(hmin)


def plane_spacings(heights, period, tol=1e-4):
    """Distinct spacings (A, ascending) between neighbouring atomic planes of
    the bulk, from the atom heights along the normal in one period of the
    stack (``period`` = height of the out-of-plane cell vector).  One value
    when the planes are evenly spaced (Cu (111)), several when they are not
    (Mg (10-10): a/(2 sqrt 3) and a/sqrt 3 alternate).

    >>> plane_spacings([0.0, 2.0871, 4.1741], 6.2612)
    [2.087]
    >>> plane_spacings([0.0, 0.5, 2.0], 3.0)
    [0.5, 1.0, 1.5]
    """
    h = np.sort(np.mod(np.asarray(heights, float), period))
    levels = [h[0]]
    for x in h[1:]:
        if x - levels[-1] > tol:
            levels.append(x)
    if len(levels) > 1 and levels[0] + period - levels[-1] <= tol:
        levels.pop()                                   # the same plane seen at 0 and at the period
    gaps = np.diff(np.append(levels, levels[0] + period))
    out = []
    for g in np.sort(gaps):
        if not out or g - out[-1] > 1e-3:
            out.append(float(g))
    return out


#: Largest vacuum gap accepted (A): far more than any surface model needs.
MAX_VACUUM = 1000.0
#: Thickest slab (A): 1 micrometre, far past any atomistic slab.
MAX_THICKNESS = 10000.0


def slab(crystal_or_element, hkl, layers=None, thickness=None, vacuum=10.0, repeat=(1, 1), phase=None,
         max_atoms=None) -> Crystal:
    """An (hkl) slab with the plane normal along z.

    Parameters
    ----------
    crystal_or_element : element symbol, or a Crystal (its lattice is used).
    hkl : '(111)', '(10-10)', (1, 1, 0) ...
    layers : number of atomic planes parallel to (hkl) (default 6 when
        neither layers nor thickness is given).
    thickness : instead of layers: keep the atomic planes within this many A
        of the bottom plane.
    vacuum : total vacuum gap (A) along z, half below and half above.
    repeat : (nx, ny) copies in the plane.

    >>> c = slab("Cu", "(111)", layers=4)
    >>> len(c), c.pbc
    (4, (True, True, False))
    >>> c.metadata["defects"][0]["kind"]
    'surface'
    """
    from ..build import _fill, check_atom_count

    parent = parent_crystal(crystal_or_element, phase=phase, what="a slab")
    lat = parent.lattice
    ind, hkl3 = _plane(hkl, lat)
    if layers is not None and thickness is not None:
        raise UserError("give the slab as a number of layers or a thickness, not both")
    if layers is None and thickness is None:
        layers = 6
    try:
        vac = float(vacuum)
    except (TypeError, ValueError):
        vac = float("nan")
    if not (math.isfinite(vac) and 0 <= vac <= MAX_VACUUM):
        raise UserError(f"vacuum {vacuum!r} must be a length from 0 to {MAX_VACUUM:g} A, e.g. 10")
    nx, ny = repeats(repeat, 2, "repeat", "(3, 3)")
    P, n, hstep = _cell_rows(lat, hkl3)
    frac, species = _fill(lat.cell, lat.basis_frac, parent.numbers, P)
    cellP = P @ lat.cell
    # atomic planes in one cell, to size the stack
    h_cell = (frac @ cellP) @ n
    planes_per_cell = len(np.unique(np.round(h_cell / 1e-4)))
    spacings = plane_spacings(h_cell, hstep)
    if layers is not None:
        try:
            nl = float(layers)
        except (TypeError, ValueError):
            nl = float("nan")
        if not (math.isfinite(nl) and nl == int(nl) and nl >= 1):
            raise UserError(f"layers {layers!r} must be a whole number of 1 or more, e.g. 6")
        nl = int(nl)
        ncopies = math.ceil(nl / planes_per_cell)
    else:
        try:
            th = float(thickness)
        except (TypeError, ValueError):
            th = float("nan")
        if not (math.isfinite(th) and 0 <= th <= MAX_THICKNESS):
            raise UserError(f"thickness {thickness!r} must be a length of 0 to {MAX_THICKNESS:g} A (1 micrometre), "
                            f"e.g. 12")
        ncopies = math.ceil((th + hstep) / hstep / planes_per_cell) + 1
    check_atom_count(len(frac) * ncopies * nx * ny, max_atoms, what="this slab")
    pos = np.vstack([frac @ cellP + m * cellP[2] for m in range(ncopies)])
    z = np.tile(species, ncopies)
    h = pos @ n
    hu = np.unique(np.round(h - h.min(), 5))
    if layers is not None:
        top = hu[nl - 1]
    else:
        top = hu[hu <= th + 1e-5].max()
    keep = (h - h.min()) <= top + 1e-4
    pos, z = pos[keep], z[keep]
    n_planes = int(np.sum(hu <= top + 1e-4))
    # rotate: a1 -> x, normal -> z
    Rm = rotation_to_frame(cellP[0], n)
    a1, a2 = cellP[0] @ Rm, cellP[1] @ Rm
    pos = pos @ Rm
    height = float(pos[:, 2].max() - pos[:, 2].min())
    pos[:, 2] += vac / 2.0 - pos[:, 2].min()
    # wrap into the in-plane cell
    B = np.array([a1[:2], a2[:2]])
    f2 = np.linalg.solve(B.T, pos[:, :2].T).T
    f2 -= np.floor(f2 + 1e-9)
    pos[:, :2] = f2 @ B
    # in-plane copies
    allp, allz = [], []
    for i in range(nx):
        for j in range(ny):
            allp.append(pos + i * a1 + j * a2)
            allz.append(z)
    pos, z = np.vstack(allp), np.concatenate(allz)
    c = height + vac
    if c <= 0:
        c = max(hstep, 1.0)
    cell = np.array([a1 * nx, a2 * ny, [0.0, 0.0, c]])
    order = np.lexsort((pos[:, 0], pos[:, 1], np.round(pos[:, 2], 5)))
    meta = dict(parent.metadata)
    meta["repeat"] = [nx, ny, 1]
    out = Crystal(cell, pos[order], z[order], pbc=(True, True, False), metadata=meta,
                  lattice=replace(lat, cell=lat.cell @ Rm), species_radii=parent.species_radii)
    if len(spacings) == 1:
        spacing_info = {"layer_spacing_A": round(spacings[0], 6), "layer_spacings_A": [round(spacings[0], 4)]}
    else:
        spacing_info = {"layer_spacings_A": [round(x, 4) for x in spacings],
                        "layer_spacing_average_A": round(hstep / planes_per_cell, 6),
                        "layer_spacing_note": "uneven: neighbouring atomic planes are "
                                              + " and ".join(f"{x:.4f}" for x in spacings)
                                              + " A apart; the average is the bulk period / planes per period"}
    out.record_defect("surface", plane=str(ind), layers=n_planes, thickness_A=round(height, 6), **spacing_info,
                      vacuum_A=vac, area_A2=round(float(np.linalg.norm(np.cross(cell[0], cell[1]))), 6),
                      normal="z", boundaries="periodic in x and y; free surfaces along z")
    return out
