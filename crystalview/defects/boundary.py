"""Symmetric tilt grain boundaries in cubic crystals, with the
coincidence-site-lattice (CSL) Sigma value.

Construction: grain 1 is the crystal oriented with x = plane normal x tilt
axis, y = the boundary-plane normal (hkl), z = the tilt axis [uvw]; it fills
0 <= y < Ly.  Grain 2 is the mirror image of grain 1 in the boundary plane
y = 0 (filling -Ly < y <= 0).  Because a cubic Bravais lattice is
centrosymmetric, the mirror image is grain 1 rotated by 180 degrees about the
boundary normal, a proper rotation; the misorientation is a tilt about [uvw].
The bicrystal is shifted to 0 <= y < 2 Ly.

Periodic (default): the cell is periodic in x, y and z, so it holds two
equivalent boundaries, at y = Ly (the middle) and at y = 0 (the cell edge).
``periodic=False`` gives one boundary between free surfaces along y.

Overlap rule (our choice, common practice): after the grains are joined, of
every pair of atoms closer than ``overlap`` x the nearest-neighbour distance
(default 0.6) the atom of grain 2 is removed.  Atoms exactly on the mirror
plane are shared by both grains and kept once.

Sigma: the misorientation matrix M between the two grains' cubic axes has
rational entries; Sigma is the smallest positive integer N for which N M is
an integer matrix (the odd common denominator; for a cubic lattice it is the
ratio of the CSL cell volume to the crystal's lattice cell volume, the same
for sc, bcc and fcc).  For a symmetric [001] tilt with (hk0) it equals
h^2 + k^2 divided by 2 until odd; Sigma 5 for (310) or (210) [001].
"""
from __future__ import annotations

import itertools
import math

import numpy as np

from ..crystal import Crystal
from ..errors import UserError
from ..lattice import _gcd_reduce, format_indices, parse_indices
from .point import oriented, parent_crystal, repeats


def _cubic_rotations():
    """The 24 proper rotations of the cube (signed permutation matrices, det +1)."""
    out = []
    for perm in itertools.permutations(range(3)):
        for signs in itertools.product((1, -1), repeat=3):
            m = np.zeros((3, 3))
            for i, (p, s) in enumerate(zip(perm, signs)):
                m[i, p] = s
            if np.linalg.det(m) > 0:
                out.append(m)
    return out


def sigma_of(M, max_sigma=999):
    """Smallest N with N * M integral (M a rational rotation matrix in cubic axes).

    >>> sigma_of(mirror_rotation((3, 1, 0))), sigma_of(np.eye(3))
    (5, 1)
    """
    M = np.asarray(M, float)
    for n in range(1, max_sigma + 1):
        X = n * M
        if np.all(np.abs(X - np.round(X)) < 1e-6):
            return n
    return None


def tilt_angle(axis, plane):
    """The unfolded tilt angle (degrees) of a symmetric tilt boundary: twice
    the angle between the boundary plane and the lowest-index reference plane
    of the {100} family (else {110}) that contains the tilt axis, taking the
    nearer one.  Boundaries on different planes never share it, unlike the
    misorientation folded by the cubic symmetry: (310)[001] 36.87, (210)[001]
    53.13, (112)[1-10] 70.53, (111)[1-10] 109.47 (common practice: 2 atan of
    the index ratio).

    >>> round(tilt_angle((0, 0, 1), (3, 1, 0)), 2), round(tilt_angle((0, 0, 1), (2, 1, 0)), 2)
    (36.87, 53.13)
    >>> round(tilt_angle((1, -1, 0), (1, 1, 2)), 2), round(tilt_angle((1, -1, 0), (1, 1, 1)), 2)
    (70.53, 109.47)
    """
    import itertools

    t = np.asarray(axis, float)
    p = np.asarray(plane, float)
    p = p / np.linalg.norm(p)
    for family in ([1, 0, 0], [1, 1, 0]):
        refs = {tuple(np.array(v) * sgn) for v in set(itertools.permutations(family))
                for sgn in (1,)}
        refs |= {tuple(x * s for x, s in zip(v, signs)) for v in refs for signs in itertools.product((1, -1), repeat=3)}
        refs = [np.array(r, float) for r in refs if abs(np.dot(r, t)) < 1e-9]
        if refs:
            ang = min(math.degrees(math.acos(min(1.0, abs(np.dot(r / np.linalg.norm(r), p))))) for r in refs)
            # from the reference plane, the nearer way round: below 90 degrees of plane rotation
            return 2.0 * ang
    return float("nan")


def misorientation(M, axis=None):
    """(smallest misorientation angle in degrees over the cubic symmetry,
    its axis in cubic axes).  With ``axis`` given, the smallest angle whose
    rotation axis is parallel to it.

    >>> angle, axis = misorientation(mirror_rotation((3, 1, 0)))
    >>> round(angle, 2), np.abs(axis).round(4).tolist()
    (36.87, [0.0, 0.0, 1.0])
    """
    best = None
    for S in _cubic_rotations():
        R = M @ S
        c = np.clip((np.trace(R) - 1.0) / 2.0, -1.0, 1.0)
        ang = math.degrees(math.acos(c))
        w = np.array([R[2, 1] - R[1, 2], R[0, 2] - R[2, 0], R[1, 0] - R[0, 1]])
        if np.linalg.norm(w) > 1e-8:
            ax = w / np.linalg.norm(w)
        else:   # 0 or 180 degrees: axis from R + I
            B = R + np.eye(3)
            k = int(np.argmax(np.linalg.norm(B, axis=0)))
            ax = B[:, k] / max(np.linalg.norm(B[:, k]), 1e-12)
        if axis is not None:
            t = np.asarray(axis, float) / np.linalg.norm(axis)
            if abs(abs(ax @ t) - 1.0) > 1e-6 and ang > 1e-6:
                continue
        if best is None or ang < best[0] - 1e-9:
            best = (ang, ax)
    return best


def mirror_rotation(plane):
    """The misorientation of the two grains in cubic axes: grain 2 is grain 1
    mirrored in the boundary plane, i.e. (the lattice being centrosymmetric)
    rotated 180 degrees about the plane normal n: R = 2 n n^T - I (for a
    cubic lattice the normal of (hkl) is [hkl]).

    >>> (mirror_rotation((1, 1, 1)) * 3).round(6).tolist()
    [[-1.0, 2.0, 2.0], [2.0, -1.0, 2.0], [2.0, 2.0, -1.0]]
    """
    n = np.asarray(plane, float)
    n = n / np.linalg.norm(n)
    return 2.0 * np.outer(n, n) - np.eye(3)


def mirror_sigma(plane):
    """Sigma of the symmetric tilt boundary on ``plane`` (hkl); 1 when the
    plane is a mirror plane of the cube ({100}, {110}), i.e. no boundary.

    >>> mirror_sigma((3, 1, 0)), mirror_sigma((1, 1, 1)), mirror_sigma((1, 1, 0))
    (5, 3, 1)
    """
    return sigma_of(mirror_rotation(plane))


def boundary_planes(axis, count=3, span=5):
    """Up to ``count`` low-index planes (hkl) containing ``axis`` [uvw] that
    give a real boundary (Sigma > 1), lowest Sigma first, then lowest indices.

    >>> boundary_planes((0, 0, 1))
    ['(210)', '(310)', '(320)']
    >>> boundary_planes((1, -1, 0), count=2)
    ['(111)', '(112)']
    """
    t = np.asarray(axis, int)
    found = {}
    r = range(-span, span + 1)
    for h, k, l in itertools.product(r, r, r):
        p = np.array(_gcd_reduce((h, k, l)), int) if (h, k, l) != (0, 0, 0) else None
        if p is None or int(p @ t) != 0 or not np.any(np.cross(p, t)):
            continue
        key = tuple(sorted(np.abs(p)))
        sig = mirror_sigma(p)
        if sig is None or sig == 1:
            continue
        # one plane per family, with positive leading index, preferring the listed form
        p = p if p[np.nonzero(p)[0][0]] > 0 else -p
        cand = (sig, int(np.abs(p).sum()), tuple(-p))
        if key not in found or cand < found[key][0]:
            found[key] = (cand, format_indices(p, "plane"))
    return [text for _, text in sorted(found.values())[:count]]


def tilt_boundary(element, axis="[001]", plane="(310)", size=None, overlap=0.6, periodic=True, phase=None,
                  a=None, max_atoms=None) -> Crystal:
    """A symmetric tilt grain boundary (bicrystal) in an FCC, BCC or simple
    cubic crystal.

    Parameters
    ----------
    element : element symbol or a Crystal (its lattice is used).
    axis : tilt axis [uvw] (along z).
    plane : boundary plane (hkl) of grain 1; must contain the axis.
    size : (nx, ny, nz) copies of the oriented cell per grain (ny per grain);
        default about 10 A in x and z and 20 A of each grain in y.
    overlap : remove the grain-2 atom of pairs closer than this fraction of
        the nearest-neighbour distance.
    periodic : periodic along y (two boundaries) or free surfaces (one).

    >>> c = tilt_boundary("Cu", axis="[001]", plane="(310)")
    >>> len(c), c.metadata["defects"][0]["kind"], c.metadata["defects"][0]["sigma"]
    (468, 'tilt_boundary', 5)
    """

    from ..analysis.neighbours import nearest_neighbour_distance, neighbour_pairs

    parent = parent_crystal(element, phase=phase, a=a, what="a tilt boundary")
    lat = parent.lattice
    if lat.family != "cubic" or lat.atoms_per_cell not in (1, 2, 4) or lat.prototype not in ("sc", "bcc", "fcc"):
        raise UserError(f"tilt boundaries are built for cubic metals (fcc, bcc, sc); this one is {lat.prototype}")
    t = parse_indices(axis, kind="direction") if isinstance(axis, str) else None
    p = parse_indices(plane, kind="plane") if isinstance(plane, str) else None
    tv = np.array(_gcd_reduce(t.values if t else axis), int)
    pv = np.array(_gcd_reduce(p.values if p else plane), int)
    if len(tv) != 3 or len(pv) != 3:
        raise UserError("a cubic tilt boundary needs a three-index axis [uvw] and plane (hkl)")
    if not np.any(tv) or not np.any(pv):
        raise UserError("tilt axis and boundary plane must not be all zero; e.g. axis [001], plane (310)")
    if int(tv @ pv) != 0:
        raise UserError(f"plane {format_indices(pv, 'plane')} does not contain the tilt axis "
                        f"{format_indices(tv)} (h u + k v + l w must be 0); e.g. axis [001] with plane (310)")
    xv = np.array(_gcd_reduce(np.cross(pv, tv)), int)
    if np.all(np.abs(np.cross(pv, tv)) == 0):
        raise UserError("the tilt axis lies along the plane normal; that is a twist, not a tilt")
    if mirror_sigma(pv) == 1:
        ideas = boundary_planes(tv, count=3)
        hint = f"; planes that do, about {format_indices(tv)}: {', '.join(ideas)}" if ideas else ""
        raise UserError(f"plane {format_indices(pv, 'plane')} is a mirror plane of the cubic lattice: it gives no "
                        f"misorientation about {format_indices(tv)} (Sigma 1, no boundary){hint}")
    orient = (format_indices(xv), format_indices(pv), format_indices(tv))
    # exact count before anything is built: the oriented (coincidence) cell grows with the indices
    from ..build import orient_count
    from ..limits import check_atom_count

    n_cell, P = orient_count(parent, orient)
    L = np.linalg.norm(np.asarray(P, float) @ np.asarray(parent.lattice.cell, float), axis=1)
    if size is None:
        size = (max(1, math.ceil(10.0 / L[0])), max(1, math.ceil(20.0 / L[1])), max(1, math.ceil(10.0 / L[2])))
    nx, ny, nz = repeats(size, 3, "size", "(1, 4, 3)")
    n_grain = n_cell * nx * ny * nz
    # both grains: grain 1 plus its mirror image (before the few overlapping atoms are removed)
    check_atom_count(2 * n_grain, max_atoms,
                     what=f"this tilt boundary (two grains of {n_cell:,} atoms per oriented cell x {nx}x{ny}x{nz})")
    g1 = oriented(parent, orient, repeat=(nx, ny, nz), max_atoms=max_atoms)
    Ly = g1.cell[1, 1]
    if abs(g1.cell[1, 0]) > 1e-6 or abs(g1.cell[2, 0]) > 1e-6 or abs(g1.cell[2, 1]) > 1e-6:
        raise UserError("internal: the oriented grain cell is not orthogonal")
    pos1 = g1.positions.copy()
    shared = np.abs(pos1[:, 1]) < 1e-6            # atoms on the mirror plane belong to both grains
    pos2 = pos1[~shared] * np.array([1.0, -1.0, 1.0])
    # wrap mirrored atoms in x (its cell row is along x) and shift both grains up by Ly
    pos2[:, 0] = np.mod(pos2[:, 0], g1.cell[0, 0])
    pos1[:, 1] += Ly
    pos2[:, 1] += Ly
    pos = np.vstack([pos1, pos2])
    grain = np.concatenate([np.ones(len(pos1), np.uint8), np.full(len(pos2), 2, np.uint8)])
    numbers = np.concatenate([g1.numbers, g1.numbers[~shared]])
    if periodic:
        # the second boundary (at the cell edge) holds grain 1's periodic copy
        # of its mirror-plane atoms: y = 2 Ly, wrapped to 0 below
        pos = np.vstack([pos, pos1[shared] + np.array([0.0, Ly, 0.0])])
        grain = np.concatenate([grain, np.ones(int(shared.sum()), np.uint8)])
        numbers = np.concatenate([numbers, g1.numbers[shared]])
    cell = np.array([g1.cell[0], [0.0, 2 * Ly, 0.0], g1.cell[2]])
    pbc = (True, bool(periodic), True)
    # wrap y (periodic) / keep
    if periodic:
        pos[:, 1] = np.mod(pos[:, 1], 2 * Ly)
        pos[pos[:, 1] >= 2 * Ly - 1e-9, 1] = 0.0
    del pos1, pos2
    out = Crystal(cell, pos, numbers, pbc=pbc, metadata=dict(parent.metadata), lattice=g1.lattice,
                  species_radii=parent.species_radii)
    del pos
    dnn = nearest_neighbour_distance(parent)
    cut = float(overlap) * dnn
    removed = 0
    if cut > 0:
        # overlaps can only be across a boundary (each grain is a perfect lattice): look in the bands
        # within cut of y = Ly (and of y = 0 / 2 Ly, periodic) only, so the search is a thin slab
        y = out.positions[:, 1]
        band = np.abs(y - Ly) <= cut + 1e-6
        band |= (y <= cut + 1e-6) | (y >= 2 * Ly - cut - 1e-6)
        sel = np.flatnonzero(band)
        del band, y
        slab = Crystal(cell, out.positions[sel], out.numbers[sel], pbc=pbc)
        i, j, _, d = neighbour_pairs(slab, cut)
        i, j = sel[i], sel[j]
        del slab
        drop = np.zeros(len(out), bool)
        # exact duplicates and close pairs: drop the grain-2 atom (lowest index wins within a grain)
        order = np.argsort(d, kind="stable")
        for a_, b_ in zip(i[order].tolist(), j[order].tolist()):
            if a_ == b_ or drop[a_] or drop[b_]:
                continue
            if grain[a_] == grain[b_]:
                victim = max(a_, b_)
            else:
                victim = a_ if grain[a_] == 2 else b_
            drop[victim] = True
        removed = int(drop.sum())
        out = out.select(~drop)
    # Sigma and misorientation from the grains' cubic axes
    e1 = g1.lattice.cell / np.linalg.norm(g1.lattice.cell, axis=1)[:, None]   # cubic axes in the lab (rows)
    rot_y = np.diag([-1.0, 1.0, -1.0])                                          # 180 deg about the normal (y)
    e2 = e1 @ rot_y.T
    M = e1 @ e2.T                                                               # M_ij = e1_i . e2_j
    sigma = sigma_of(M)
    mis = misorientation(M, axis=tv)
    angle = mis[0] if mis else None
    out.record_defect(
        "tilt_boundary", axis=format_indices(tv), plane=format_indices(pv, "plane"), sigma=sigma,
        misorientation_deg=None if angle is None else round(angle, 4),
        tilt_angle_deg=round(tilt_angle(tv, pv), 4), orient=list(orient),
        boundaries_y_A=[0.0, float(Ly)] if periodic else [float(Ly)], removed_atoms=removed,
        shared_plane_atoms=int(shared.sum()),
        overlap_rule=f"grain-2 atom of each pair closer than {overlap:g} x nearest-neighbour distance removed",
        size=[nx, ny, nz], periodic=bool(periodic),
    )
    return out
