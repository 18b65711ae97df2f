"""Straight dislocations in FCC and BCC crystals, from the isotropic elastic
(Volterra) displacement fields, and a Burgers-circuit check.

Orientation (x, y, z = crystal directions; the line is along z for both
characters; y is the glide-plane normal):

=========  ==========  ===========  ============  ===========  ============
lattice    character   x            y (normal)    z (line)     b
=========  ==========  ===========  ============  ===========  ============
FCC        edge        [1-10]       [111]         [-1-12]      a/2[1-10]
FCC        screw       [11-2]       [111]         [1-10]       a/2[1-10]
BCC        edge        [111]        [-110]        [-1-12]      a/2[111]
BCC        screw       [11-2]       [-110]        [111]        a/2[111]
=========  ==========  ===========  ============  ===========  ============

Displacements (Hirth & Lothe, Theory of Dislocations, 2nd ed., eqs. 3-45 and
3-2; x, y measured from the dislocation line, theta = atan2(y, x) in
(-pi, pi], nu the Poisson ratio):

  edge (b along x):
    u_x = b/(2 pi) [theta + x y / (2 (1 - nu) (x^2 + y^2))]
    u_y = -b/(2 pi) [(1 - 2 nu)/(4 (1 - nu)) ln(x^2 + y^2)
                     + (x^2 - y^2)/(4 (1 - nu) (x^2 + y^2))]      (x, y in A)
  screw (b along z):
    u_z = b theta / (2 pi)

The additive constant in u_y (the length unit inside the logarithm) is a
rigid shift of the whole crystal.  The cut is the half-plane x < x0 at
y = y0 where theta jumps by 2 pi; since b is a lattice vector the crystal
rejoins across it.  The line sits midway between two atomic planes normal to
y and midway between two atom columns along x, so no atom lies on it.

Boundaries: the cell is periodic only along the line (z); x and y are free
surfaces (pbc = (False, False, True)), because the displacement field of a
single dislocation is not periodic across the cell.

Poisson ratio: 0.3 for every element unless given (a common round value for
metals; common practice).  Only u_x, u_y of the edge depend on it.
"""
from __future__ import annotations

import math

import numpy as np

from ..crystal import Crystal
from ..errors import UserError
from .point import indices_text, oriented, parent_crystal, repeats

DEFAULT_POISSON = 0.3

_ORIENT = {
    ("fcc", "edge"): (("[1-10]", "[111]", "[-1-12]"), (0.5, -0.5, 0.0), "(111)"),
    ("fcc", "screw"): (("[11-2]", "[111]", "[1-10]"), (0.5, -0.5, 0.0), "(111)"),
    ("bcc", "edge"): (("[111]", "[-110]", "[-1-12]"), (0.5, 0.5, 0.5), "(-110)"),
    ("bcc", "screw"): (("[11-2]", "[-110]", "[111]"), (0.5, 0.5, 0.5), "(-110)"),
}


def edge_displacement(x, y, b, nu):
    """(u_x, u_y) of a straight edge dislocation along z with b along x
    (Hirth & Lothe eq. 3-45); x, y in A.

    >>> ux, uy = edge_displacement([5.0, -5.0], [0.1, 0.1], b=2.5561, nu=0.3)
    >>> ux.round(4).tolist(), uy.round(4).tolist()
    ([0.0139, 1.2641], [-0.3323, -0.3323])
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    r2 = x * x + y * y
    th = np.arctan2(y, x)
    ux = b / (2 * math.pi) * (th + x * y / (2 * (1 - nu) * r2))
    uy = -b / (2 * math.pi) * ((1 - 2 * nu) / (4 * (1 - nu)) * np.log(r2) + (x * x - y * y) / (4 * (1 - nu) * r2))
    return ux, uy


def screw_displacement(x, y, b):
    """u_z of a straight screw dislocation along z (Hirth & Lothe eq. 3-2).

    >>> screw_displacement([1.0, -1.0, 0.0], [0.0, 0.0, 1.0], b=2.4825).round(4).tolist()
    [0.0, 1.2412, 0.6206]
    """
    return b * np.arctan2(np.asarray(y, float), np.asarray(x, float)) / (2 * math.pi)


def _midway(values, centre, tol=1e-3):
    """A value midway between the two distinct values nearest ``centre``."""
    u = np.unique(np.round(values, 4))
    if len(u) < 2:
        return centre
    i = np.searchsorted(u, centre)
    i = min(max(i, 1), len(u) - 1)
    return 0.5 * (u[i - 1] + u[i])


def dislocation(element, character="edge", size=None, poisson=None, phase=None, a=None, max_atoms=None) -> Crystal:
    """A straight edge or screw dislocation in an FCC or BCC crystal.

    Parameters
    ----------
    element : element symbol (its reference phase, or ``phase``) or a Crystal
        whose lattice is fcc or bcc.
    character : 'edge' or 'screw'.
    size : (nx, ny, nz) copies of the oriented cell (see the module table);
        default about 36 A x 36 A across and at least 5 A along the line.
    poisson : Poisson ratio for the edge field (default 0.3).

    >>> c = dislocation("Cu", "edge")
    >>> len(c), c.metadata["defects"][0]["kind"], c.metadata["defects"][0]["character"]
    (1080, 'dislocation', 'edge')
    """
    ch = str(character).strip().lower()
    if ch not in ("edge", "screw"):
        raise UserError(f"dislocation character '{character}' is not known; use 'edge' or 'screw'")
    nu = DEFAULT_POISSON if poisson is None else poisson
    try:
        nu = float(nu)
    except (TypeError, ValueError):
        nu = float("nan")
    if not (-1.0 < nu < 0.5):
        raise UserError(f"Poisson ratio {poisson!r} must lie between -1 and 0.5 (metals about 0.3)")
    parent = parent_crystal(element, phase=phase, a=a, what="a dislocation")
    kind = parent.lattice.prototype
    if kind not in ("fcc", "bcc"):
        raise UserError(f"dislocations are built in FCC and BCC crystals; this one is {kind} "
                        f"(choose e.g. --phase gamma for Fe, or another metal)")
    orient, b_frac, plane = _ORIENT[(kind, ch)]
    cell1 = oriented(parent, orient)
    L = np.linalg.norm(cell1.cell, axis=1)
    if size is None:
        size = (max(1, math.ceil(36.0 / L[0])), max(1, math.ceil(36.0 / L[1])), max(1, math.ceil(5.0 / L[2])))
    nx, ny, nz = repeats(size, 3, "size", "(12, 6, 2)")
    crystal = oriented(parent, orient, repeat=(nx, ny, nz), max_atoms=max_atoms)
    lat = crystal.lattice
    b_vec = np.array(b_frac) @ lat.cell                     # Cartesian, in the oriented frame
    b = float(np.linalg.norm(b_vec))
    pos = crystal.positions
    cx, cy = 0.5 * crystal.cell[0, 0], 0.5 * crystal.cell[1, 1]
    y0 = _midway(pos[:, 1], cy)
    near = np.abs(pos[:, 1] - y0) < 0.75 * (np.abs(np.diff(np.unique(np.round(pos[:, 1], 4)))).min() + 1e-9)
    x0 = _midway(pos[near, 0], cx) if near.any() else cx
    x = pos[:, 0] - x0
    y = pos[:, 1] - y0
    out = crystal.copy()
    if ch == "edge":
        ux, uy = edge_displacement(x, y, b, nu)
        out.positions[:, 0] += ux
        out.positions[:, 1] += uy
        line = orient[2]
    else:
        uz = screw_displacement(x, y, b)
        out.positions[:, 2] += uz
        Lz = out.cell[2, 2]
        out.positions[:, 2] = np.mod(out.positions[:, 2], Lz)
        out.positions[out.positions[:, 2] >= Lz - 1e-9, 2] = 0.0
        line = orient[2]
    out.pbc = (False, False, True)
    out.record_defect(
        "dislocation", character=ch, burgers_vector=indices_text(b_frac), burgers_vector_A=b_vec.tolist(),
        burgers_magnitude_A=round(b, 6), line_direction=line, line_vector=[0.0, 0.0, 1.0],
        glide_plane=plane, orient=list(orient), core_A=[float(x0), float(y0)], poisson_ratio=nu,
        size=[nx, ny, nz], displacement="isotropic elastic (Volterra), Hirth & Lothe eqs. 3-45 / 3-2",
        boundaries="periodic along the line (z) only; free surfaces in x and y",
    )
    return out


# ------------------------------------------------------------------ Burgers circuit
def _ideal_bonds(lat):
    """Perfect-crystal nearest-neighbour vectors (the shortest lattice
    translations of the conventional cell with its centring) in the crystal's
    frame."""
    import itertools

    from ..build import centering_vectors

    cents = centering_vectors(lat.basis_frac, list(lat.basis_symbols))
    if len(cents) != len(lat.basis_frac):
        raise UserError("the Burgers circuit check needs a lattice with one atom per lattice point (FCC, BCC)")
    out = []
    for m in itertools.product(range(-2, 3), repeat=3):
        for t in cents:
            v = (np.array(m, float) + t) @ lat.cell
            if np.linalg.norm(v) > 1e-6:
                out.append(v)
    out = np.array(out)
    L = np.linalg.norm(out, axis=1)
    return out[L < 1.05 * L.min()]


def burgers_circuit(crystal: Crystal, centre=None, radius=None, tolerance=0.3):
    """Burgers vector from a closed circuit of neighbour steps around the
    dislocation line (the FS/RH convention, Hull & Bacon ch. 1).

    A circuit of atom-to-atom steps is drawn in the real crystal, right-handed
    about the line direction (+z), through atoms between ``radius``/2 and
    ``radius`` from the line (where the crystal is only elastically bent).
    Each step is mapped to the nearest perfect-crystal neighbour vector; the
    same steps taken in the perfect reference do not close, and the closure
    failure (finish to start) is the Burgers vector.

    Returns a dict: burgers_vector_A (Cartesian), magnitude_A, in_cell
    (conventional-cell units, e.g. [0.5, -0.5, 0]), text ('a/2[1-10]'),
    steps, atoms (indices of the circuit).

    >>> c = dislocation("Fe", "screw")
    >>> r = burgers_circuit(c)
    >>> r["text"], round(r["magnitude_A"], 4)
    ('a/2[111]', 2.4825)
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import shortest_path
    from scipy.spatial import cKDTree

    from ..analysis.neighbours import nearest_neighbour_distance

    lat = crystal.lattice
    if lat is None:
        raise UserError("the Burgers circuit check needs a crystal with a known lattice")
    rec = next((d for d in reversed(crystal.metadata.get("defects") or []) if d.get("kind") == "dislocation"), None)
    if centre is None:
        centre = rec["core_A"] if rec else [0.5 * crystal.cell[0, 0], 0.5 * crystal.cell[1, 1]]
    cx, cy = float(centre[0]), float(centre[1])
    dnn = nearest_neighbour_distance(crystal)
    if not np.isfinite(dnn):
        raise UserError("the crystal is too small for a Burgers circuit")
    ideal = _ideal_bonds(lat)
    # tile along the line so every step joins two distinct copies of atoms
    Lz = crystal.cell[2]
    nrep = 1
    if crystal.pbc[2]:
        nrep = max(3, 2 * math.ceil(3 * dnn / np.linalg.norm(Lz)) + 1)
    shifts = np.arange(nrep) - nrep // 2
    pos = np.vstack([crystal.positions + s * Lz for s in shifts])
    atom = np.tile(np.arange(len(crystal)), nrep)
    rho = np.hypot(pos[:, 0] - cx, pos[:, 1] - cy)
    if radius is None:
        free = min(cx - crystal.positions[:, 0].min(), crystal.positions[:, 0].max() - cx,
                   cy - crystal.positions[:, 1].min(), crystal.positions[:, 1].max() - cy)
        radius = free - 1.5 * dnn
    r_out = float(radius)
    r_in = 0.5 * r_out
    if r_in < 1.2 * dnn:
        raise UserError(f"the crystal is too small for a Burgers circuit (circuit radius {r_out:.1f} A); "
                        f"make it wider, e.g. size=(16, 8, 2)")
    zmid = crystal.cell[2, 2] * 0.5
    zspan = abs(Lz[2]) * (nrep / 2.0) - 1.0 * dnn
    ring = (rho >= r_in) & (rho <= r_out) & (np.abs(pos[:, 2] - zmid) <= zspan)
    idx = np.nonzero(ring)[0]
    p = pos[idx]
    tree = cKDTree(p)
    pairs = tree.query_pairs(1.25 * dnn, output_type="ndarray")
    vec = p[pairs[:, 1]] - p[pairs[:, 0]]
    dist = np.linalg.norm(ideal[None, :, :] - vec[:, None, :], axis=2)
    best = np.argmin(dist, axis=1)
    good = dist[np.arange(len(vec)), best] < tolerance * dnn
    pairs, best = pairs[good], best[good]
    w = np.linalg.norm(vec[good], axis=1)
    n = len(p)
    g = coo_matrix((np.concatenate([w, w]), (np.concatenate([pairs[:, 0], pairs[:, 1]]),
                                            np.concatenate([pairs[:, 1], pairs[:, 0]]))), shape=(n, n)).tocsr()
    bond_ideal = {}
    for (i, j), k in zip(pairs.tolist(), best.tolist()):
        bond_ideal[(i, j)] = ideal[k]
        bond_ideal[(j, i)] = -ideal[k]
    # four waypoints, counter-clockwise about +z, on the ring's mid radius
    rm = 0.5 * (r_in + r_out)
    way = []
    for ang in (45.0, 135.0, 225.0, 315.0):
        target = np.array([cx + rm * math.cos(math.radians(ang)), cy + rm * math.sin(math.radians(ang)), zmid])
        way.append(int(tree.query(target)[1]))
    path = []
    for s, t in zip(way, way[1:] + way[:1]):
        _, pred = shortest_path(g, directed=False, indices=s, return_predecessors=True)
        if pred[t] < 0:
            raise UserError("no closed circuit of good crystal found around the line; make the crystal wider")
        leg = [t]
        while leg[-1] != s:
            leg.append(int(pred[leg[-1]]))
        path += leg[::-1][:-1]
    path.append(path[0])
    steps = np.array([bond_ideal[(i, j)] for i, j in zip(path[:-1], path[1:])])
    real = np.sum(p[path[1:]] - p[path[:-1]], axis=0)
    b = -steps.sum(axis=0)                    # finish -> start in the perfect reference
    in_cell = np.linalg.solve(lat.cell.T, b)
    return {
        "burgers_vector_A": b.tolist(), "magnitude_A": float(np.linalg.norm(b)),
        "in_cell": [float(round(v, 6)) for v in in_cell], "text": indices_text(in_cell, tol=1e-3),
        "steps": len(steps), "atoms": [int(atom[idx[k]]) for k in path[:-1]],
        "real_closure_A": float(np.linalg.norm(real)), "radius_A": r_out,
    }
