"""Generic void analysis for any periodic structure.

Method (documented in docs/sections/sites-and-fit.md):

1. The atoms and their periodic images within a padding of the cell are
   triangulated with scipy's Delaunay (Qhull, joggled input so that the
   highly degenerate point sets of perfect lattices triangulate quickly; the
   joggle only decides which tetrahedra are made, every number below is
   computed from the exact coordinates).
2. For each tetrahedron the *exact tangent sphere* of its four atoms is
   solved: the sphere that just touches the four hard spheres (radius of each
   atom from ``crystal.atom_radii()``).  For equal radii this is the
   circumsphere.  Its centre is a candidate hole, its radius the free radius.
3. Tetrahedra with the same centre (degenerate, co-spherical atoms, e.g. the
   four tetrahedra that make up an octahedron) are merged into one hole.
4. A hole is kept when it is a maximum of the empty-sphere function: its
   centre lies inside the union of its tetrahedra (centres on the outer
   surface of that union are saddles, e.g. the old octahedral site beside a
   vacancy).  Every kept hole is checked against all nearby atoms, so the
   radius reported is always a true free radius at the reported position.
5. Each hole is classified from the atoms that bound it (those within 10 %
   of a host radius of touching it): 4 -> tetrahedral, 6 -> octahedral,
   8 or more with a radius at least 0.8 of the bounding atoms' radius ->
   vacancy, 8 -> cubic, anything else -> other.
6. Channels: for each triangle shared by two tetrahedra of different holes,
   the narrowest passage is the tangent circle of the three atoms in their
   plane (by mirror symmetry the empty-sphere function along the path
   between the two holes is smallest there) when the two hole centres lie on
   opposite sides of that plane, else the smaller of the two holes.  Holes
   joined through non-maximum points are linked through them (the passage is
   the narrower of the two steps).  Between two holes the widest of their
   passages is kept: the bottleneck radius of the channel.

With mixed radii the exact tangent spheres are solved on the ordinary
(unweighted) Delaunay topology; for the radii of metallic solid solutions
(within some 15 %) this finds the same holes as the additively weighted
construction, and the check of step 4 guarantees every reported radius.

The BCC octahedral site is a saddle of the empty-sphere function, not a
maximum, so this analysis does not list it; ``interstitial_sites`` does.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import LimitError, UserError

#: Classification codes.
KINDS = ("tetrahedral", "octahedral", "cubic", "vacancy", "other")

#: Atom cap of the per-hole analyses (the void analysis, and the hole-by-hole
#: measurement of a defected crystal); raise it with ``max_atoms=`` or the
#: command line's ``--max-atoms``.  At the cap the void analysis needs about
#: 2-3 GB and a few minutes.
DEFAULT_MAX_HOLE_ATOMS = 300_000
#: Cost of the void analysis per triangulated point (atoms plus the periodic
#: images in the padding), measured with bench/bench_voids.py: 30,000 atoms
#: (45,700 points) 12.4 s and 310 MB, 100,000 atoms (132,000 points) 68 s and
#: 950 MB above the interpreter, on the 2-core reference machine.
VOID_BYTES_PER_POINT = 7_500
VOID_SECONDS_PER_POINT = 5e-4


def _padding_factor(crystal):
    """Points the triangulation sees per atom (atoms + images in the padding)."""
    from .neighbours import cell_heights

    n = max(len(crystal), 1)
    h = cell_heights(crystal.cell)
    pad = 2.25 * (crystal.volume / n) ** (1.0 / 3.0)      # the first padding of find_voids
    pbc = np.asarray(crystal.pbc, bool)
    return float(np.prod(np.where(pbc, (h + 2.0 * pad) / h, 1.0)))


def _duration(seconds):
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def _size(nbytes):
    if nbytes >= 1e9:
        return f"{nbytes / 1e9:.1f} GB"
    return f"{nbytes / 1e6:.0f} MB"


def void_estimate(crystal):
    """Estimated cost of :func:`find_voids` on ``crystal`` (no allocation):
    dict with atoms, points (atoms + periodic images), bytes, seconds."""
    n = len(crystal)
    pts = int(round(n * _padding_factor(crystal))) if n else 0
    return {"atoms": n, "points": pts, "bytes": pts * VOID_BYTES_PER_POINT,
            "seconds": pts * VOID_SECONDS_PER_POINT}


def check_hole_atoms(n_atoms, est_bytes, est_seconds, max_atoms=None, what="the void analysis"):
    """Refuse a per-hole analysis over the atom cap (LimitError with the
    estimated memory and time), before anything is allocated."""
    cap = DEFAULT_MAX_HOLE_ATOMS if max_atoms is None else int(max_atoms)
    if n_atoms > cap:
        raise LimitError(
            f"{what} of {n_atoms:,} atoms would need about {_size(est_bytes)} of memory and about "
            f"{_duration(est_seconds)} (over the cap of {cap:,} atoms); use a smaller crystal (fewer repeats) "
            f"or raise the cap with max_atoms= / --max-atoms {n_atoms}")


def check_void_size(crystal, max_atoms=None):
    """:func:`check_hole_atoms` for the void analysis of ``crystal``."""
    e = void_estimate(crystal)
    check_hole_atoms(e["atoms"], e["bytes"], e["seconds"], max_atoms, "the void analysis")


# ---------------------------------------------------------------------- geometry
def tangent_spheres(c0, a, b, c, r0, ra, rb, rc):
    """Exact tangent spheres of tetrahedra (vectorised).

    ``c0`` (T, 3) first atom centre; ``a, b, c`` (T, 3) the other three
    centres *relative to c0*; radii (T,).  Returns (centre relative to c0,
    free radius, ok) where ok is False for flat (zero-volume) tetrahedra.
    """
    bc = np.cross(b, c)
    ca = np.cross(c, a)
    ab = np.cross(a, b)
    det = np.einsum("ij,ij->i", a, bc)
    scale = (np.einsum("ij,ij->i", a, a) * np.einsum("ij,ij->i", b, b) * np.einsum("ij,ij->i", c, c)) ** 0.5
    ok = np.abs(det) > 1e-10 * np.maximum(scale, 1e-300)
    det = np.where(ok, det, 1.0)
    # a_i . y = (|a_i|^2 - R_i^2 + R0^2)/2 - r (R_i - R0)
    v0 = (np.einsum("ij,ij->i", a, a) - ra ** 2 + r0 ** 2) / 2.0
    v1 = (np.einsum("ij,ij->i", b, b) - rb ** 2 + r0 ** 2) / 2.0
    v2 = (np.einsum("ij,ij->i", c, c) - rc ** 2 + r0 ** 2) / 2.0
    p = (v0[:, None] * bc + v1[:, None] * ca + v2[:, None] * ab) / det[:, None]
    w0, w1, w2 = -(ra - r0), -(rb - r0), -(rc - r0)
    if np.any(w0) or np.any(w1) or np.any(w2):
        q = (w0[:, None] * bc + w1[:, None] * ca + w2[:, None] * ab) / det[:, None]
        r = _solve_radius(p, q, r0)
        y = p + q * r[:, None]
    else:
        y = p
        r = np.sqrt(np.einsum("ij,ij->i", p, p)) - r0
    return y, r, ok


def _solve_radius(p, q, r0):
    """Largest root r of |p + q r|^2 = (r + r0)^2."""
    alpha = np.einsum("ij,ij->i", q, q) - 1.0
    beta = 2.0 * (np.einsum("ij,ij->i", p, q) - r0)
    gamma = np.einsum("ij,ij->i", p, p) - r0 ** 2
    disc = np.sqrt(np.maximum(beta ** 2 - 4 * alpha * gamma, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        s1 = (-beta + disc) / (2 * alpha)
        s2 = (-beta - disc) / (2 * alpha)
        lin = -gamma / beta
    r = np.where(np.abs(alpha) > 1e-12, np.fmax(s1, s2), lin)
    return r


def tangent_sphere(centres, radii):
    """Tangent sphere of four hard spheres: (centre (3,), free radius)."""
    C = np.asarray(centres, float).reshape(4, 3)
    R = np.asarray(radii, float).reshape(4)
    rel = C[1:] - C[0]
    y, r, ok = tangent_spheres(C[:1], rel[0:1], rel[1:2], rel[2:3], R[:1], R[1:2], R[2:3], R[3:4])
    if not ok[0]:
        raise UserError("the four atoms bounding a tetrahedral hole are coplanar; the hole is undefined")
    return C[0] + y[0], float(r[0])


def _face_bottleneck(p0, u, v, r0, ru, rv):
    """Tangent circle of three hard spheres in their plane: (point rel. p0, radius)."""
    uu = np.einsum("ij,ij->i", u, u)
    vv = np.einsum("ij,ij->i", v, v)
    uv = np.einsum("ij,ij->i", u, v)
    g = uu * vv - uv ** 2
    g = np.where(np.abs(g) > 1e-14 * uu * vv, g, np.nan)
    # y = s u + t v ; y.u = (uu - ru^2 + r0^2)/2 - r (ru - r0) ; same for v
    bu = (uu - ru ** 2 + r0 ** 2) / 2.0
    bv = (vv - rv ** 2 + r0 ** 2) / 2.0
    s = (bu * vv - bv * uv) / g
    t = (bv * uu - bu * uv) / g
    p = s[:, None] * u + t[:, None] * v
    du, dv = -(ru - r0), -(rv - r0)
    if np.any(du) or np.any(dv):
        sq = (du * vv - dv * uv) / g
        tq = (dv * uu - du * uv) / g
        q = sq[:, None] * u + tq[:, None] * v
        r = _solve_radius(p, q, r0)
        p = p + q * r[:, None]
    else:
        r = np.sqrt(np.einsum("ij,ij->i", p, p)) - r0
    return p, r


# ---------------------------------------------------------------------- result
@dataclass(frozen=True)
class Void:
    """One hole: kind, Cartesian position (A), free radius (A), bounding atoms."""

    index: int
    kind: str
    position: np.ndarray
    radius: float
    neighbours: np.ndarray       # indices of the atoms that bound it
    ratio: float                 # radius / mean radius of the bounding atoms

    def __repr__(self):
        x, y, z = (float(v) for v in self.position)
        return (f"<Void {int(self.index)} {self.kind} at ({x:.4f}, {y:.4f}, {z:.4f}) A, "
                f"r = {float(self.radius):.4f} A, r/R = {float(self.ratio):.3f}, {len(self.neighbours)} atoms>")


class Voids:
    """Result of :func:`find_voids`: arrays, plus list-like access to
    :class:`Void` records (``len``, indexing, iteration)."""

    def __init__(self, positions, radii, kinds, neighbours, ratios, channels, bottlenecks, method, crystal_atoms):
        self.positions = positions
        self.radii = radii
        self.kinds = kinds                 # (V,) array of str
        self.neighbours = neighbours       # (V, K) atom indices, -1 padded
        self.ratios = ratios
        self.channels = channels           # (M, 2) void indices
        self.bottlenecks = bottlenecks     # (M,) A
        self.method = method
        self.n_atoms = crystal_atoms

    def __len__(self):
        return len(self.radii)

    def __getitem__(self, i):
        if isinstance(i, slice):
            return [self[j] for j in range(*i.indices(len(self)))]
        i = int(i)
        if i < 0:
            i += len(self)
        nb = self.neighbours[i]
        return Void(i, str(self.kinds[i]), self.positions[i], float(self.radii[i]), nb[nb >= 0],
                    float(self.ratios[i]))

    def __iter__(self):
        return (self[i] for i in range(len(self)))

    def __repr__(self):
        counts = {str(k): int(n) for k, n in zip(*np.unique(self.kinds, return_counts=True))}
        return f"<Voids {len(self)} holes {counts}, {len(self.channels)} channels>"

    def summary(self):
        """Per kind: count, min/median/max free radius and ratio; channel bottlenecks."""
        out = {}
        for k in KINDS:
            m = self.kinds == k
            if not m.any():
                continue
            r = self.radii[m]
            row = {"count": int(m.sum()), "radius_min_A": float(r.min()), "radius_median_A": float(np.median(r)),
                   "radius_max_A": float(r.max()), "ratio_median": float(np.median(self.ratios[m]))}
            if len(self.channels):
                touch = m[self.channels[:, 0]] | m[self.channels[:, 1]]
                if touch.any():
                    b = self.bottlenecks[touch]
                    row["bottleneck_min_A"] = float(b.min())
                    row["bottleneck_median_A"] = float(np.median(b))
                    row["bottleneck_max_A"] = float(b.max())
            out[k] = row
        return out


# ---------------------------------------------------------------------- main
def _check_atoms(crystal, tree, idx, radii):
    """Refuse duplicate atoms and atoms closer than physically possible."""
    rmin = float(radii.min()) if len(radii) else 1.0
    lim = max(0.5, 0.6 * rmin)  # no two metal atom centres come closer than ~0.6 R (common practice)
    n = len(crystal)
    d, j = tree.query(crystal.positions, k=2, distance_upper_bound=lim)
    bad = np.nonzero(np.isfinite(d[:, 1]))[0]
    if len(bad):
        i = int(bad[0])
        k = int(idx[j[i, 1]])
        dist = float(d[i, 1])
        sym = crystal.symbols
        if dist < 1e-6:
            raise UserError(f"atoms {i} ({sym[i]}) and {k} ({sym[k]}) sit at the same place; "
                            f"remove the duplicate before looking for holes")
        raise UserError(f"atoms {i} ({sym[i]}) and {k} ({sym[k]}) are {dist:.3f} A apart, closer than physically "
                        f"possible (at least about {lim:.2f} A); check the structure")


def find_voids(crystal, *, channels=True, tolerance=0.1, max_atoms=None):
    """Holes (maxima of the empty-sphere function) of any structure, with
    periodic boundaries, classified and linked by channels.

    Parameters
    ----------
    crystal : Crystal
    channels : also compute the bottleneck radius between neighbouring holes.
    tolerance : an atom counts as bounding a hole when it comes within
        ``tolerance`` x its radius of touching it (classification only).
    max_atoms : atom cap (default :data:`DEFAULT_MAX_HOLE_ATOMS`, 300,000);
        a larger crystal is refused with a :class:`~crystalview.errors.LimitError`
        giving the estimated memory and time, before anything is allocated.

    Returns a :class:`Voids` (list-like of :class:`Void`).
    """
    from scipy.spatial import Delaunay
    from scipy.spatial import QhullError

    from .neighbours import cell_heights, with_images

    n = len(crystal)
    if n == 0:
        raise UserError("the crystal has no atoms; there are no holes to find")
    check_void_size(crystal, max_atoms)
    radii_atoms = crystal.atom_radii()
    if not np.all(np.isfinite(radii_atoms)) or np.any(radii_atoms <= 0):
        raise UserError("every atom needs a positive hard-sphere radius for the hole search; "
                        "set crystal.species_radii for the species without one")
    cell = crystal.cell
    pbc = np.array(crystal.pbc)
    h = cell_heights(cell)
    s = (crystal.volume / n) ** (1.0 / 3.0)
    ext = 0.75 * s
    pad = ext + 1.5 * s
    equal = float(radii_atoms.max() - radii_atoms.min()) < 1e-12
    for _attempt in range(6):
        pts, idx = with_images(crystal.positions, cell, pbc, pad)
        if len(pts) < 4:
            raise UserError(f"{len(pts)} atoms (with periodic images) cannot enclose a hole; give at least four "
                            f"atoms that are not coplanar")
        rad = radii_atoms[idx]
        sample = pts[:: max(1, len(pts) // 20000)] if len(pts) > 40000 else pts
        sv = np.linalg.svd(sample - sample.mean(axis=0), compute_uv=False)
        if sv[-1] <= 1e-8 * sv[0] or len(sv) < 3:
            raise UserError("the atoms are coplanar or collinear (no three-dimensional hole); give a "
                            "three-dimensional structure or make the cell periodic")
        try:
            tri = Delaunay(pts, qhull_options="QJ Qbb")
        except QhullError:
            raise UserError("the atoms are coplanar or collinear (no three-dimensional hole); give a "
                            "three-dimensional structure or make the cell periodic") from None
        simp = tri.simplices
        c0 = pts[simp[:, 0]]
        y, r, ok = tangent_spheres(c0, pts[simp[:, 1]] - c0, pts[simp[:, 2]] - c0, pts[simp[:, 3]] - c0,
                                   rad[simp[:, 0]], rad[simp[:, 1]], rad[simp[:, 2]], rad[simp[:, 3]])
        centre = c0 + y
        frac = np.linalg.solve(cell.T, centre.T).T
        lo = np.where(pbc, -ext / h, -np.inf)
        hi = np.where(pbc, 1 + ext / h, np.inf)
        keep = ok & np.all((frac >= lo) & (frac <= hi), axis=1) & np.isfinite(r)
        # non-periodic axes: the cell box bounds the search
        for k in range(3):
            if not pbc[k]:
                keep &= (frac[:, k] >= 0) & (frac[:, k] <= 1)
        rho = r[keep] + rad[simp[keep, 0]]
        if not keep.any() or (float(rho.max()) + ext <= pad) or not pbc.any():
            break
        pad = float(rho.max()) + ext + 0.5 * s
    else:
        raise UserError("the holes are too large for the cell (open space?); void analysis needs a filled cell")

    from scipy.spatial import cKDTree

    tree = cKDTree(pts)
    _check_atoms(crystal, tree, idx, radii_atoms)
    kt = np.nonzero(keep)[0]
    if len(kt) == 0:
        raise UserError("no enclosed hole found inside the cell; give a filled three-dimensional structure")
    f = frac[kt]
    snapped = np.where(np.abs(f - np.round(f)) < 1e-9, np.round(f), f)
    canon = np.all(~pbc | ((snapped >= 0) & (snapped < 1)), axis=1)
    wrapped = np.where(pbc, snapped - np.floor(snapped), snapped)
    wrapped = np.where(wrapped >= 1 - 1e-12, 0.0, wrapped)
    wc = wrapped @ cell
    # merge degenerate duplicates: same centre (to 1e-5 A)
    q = np.floor((wc + 3.1e-6) / 1e-5).astype(np.int64)
    _, gid_kept = np.unique(q, axis=0, return_inverse=True)
    gid_kept = gid_kept.reshape(-1)
    K = len(kt)
    rk = r[kt]
    kq = 16 if len(pts) >= 16 else len(pts)
    if not equal:
        # mixed radii: the tangent spheres of one hole split into a few close
        # points; join points closer than a quarter of the smallest radius and
        # keep the one with the largest true free radius
        dq, jq = tree.query(wc, k=kq)
        rk = np.minimum(rk, (dq - radii_atoms[idx[jq]]).min(axis=1))
        from scipy.sparse import coo_matrix
        from scipy.sparse.csgraph import connected_components

        lengths = np.linalg.norm(cell, axis=1)
        span = np.where(pbc, lengths, 1e9)
        xs = np.where(pbc, wrapped, wrapped - np.floor(wrapped.min(axis=0))) * lengths
        xs = np.where(pbc, np.mod(xs, span), xs)
        pairs = cKDTree(xs, boxsize=np.where(pbc, span, 0) if pbc.all() else None).query_pairs(
            0.25 * float(radii_atoms.min()), output_type="ndarray")
        ng0 = int(gid_kept.max()) + 1
        rows = np.concatenate([pairs[:, 0], np.arange(K)])
        cols = np.concatenate([pairs[:, 1], K + gid_kept])
        graph = coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(K + ng0, K + ng0))
        _, lab = connected_components(graph, directed=False)
        _, gid_kept = np.unique(lab[:K], return_inverse=True)
        gid_kept = gid_kept.reshape(-1)
    ng = int(gid_kept.max()) + 1
    group = np.full(len(simp), -1, np.int64)
    group[kt] = gid_kept

    # one representative per group: the largest radius, canonical copy first
    order = np.lexsort((~canon, -np.round(rk, 9), gid_kept))
    first = np.ones(len(order), bool)
    first[1:] = gid_kept[order][1:] != gid_kept[order][:-1]
    rep = order[first]                                     # index into kt, per group (sorted by gid)
    g_pos = wc[rep]
    g_r = rk[rep]

    # maximum test: the representative centre lies inside the union of its
    # group's tetrahedra (not on its outer surface)
    T = pts[simp[kt]]                                      # (K, 4, 3)
    M = np.stack([T[:, 1] - T[:, 0], T[:, 2] - T[:, 0], T[:, 3] - T[:, 0]], axis=2)   # columns
    point = centre[kt]
    if not equal:
        wf = np.linalg.solve(cell.T, wc.T).T
        df = wf[rep[gid_kept]] - wf
        df = np.where(pbc, df - np.round(df), df)
        point = point + df @ cell
    rel = point - T[:, 0]
    lam123 = np.linalg.solve(M, rel[:, :, None])[:, :, 0]
    lam = np.column_stack([1 - lam123.sum(1), lam123])     # (K, 4)
    tol = 1e-7
    inside = np.all(lam > -tol, axis=1)
    nb = tri.neighbors[kt]                                 # (K, 4): tet opposite vertex i
    nbg = np.where(nb >= 0, group[np.maximum(nb, 0)], -1)
    on_face = np.abs(lam) <= tol
    internal = (nbg == gid_kept[:, None])
    good = inside & np.all(~on_face | internal, axis=1)
    is_max = np.zeros(ng, bool)
    if good.any():
        is_max[gid_kept[good]] = True

    # check against nearby atoms (true free radius) and find the bounding atoms
    maxg = np.nonzero(is_max)[0]
    d, j = tree.query(g_pos[maxg], k=kq)
    slack = d - radii_atoms[idx[j]]
    true_r = slack.min(axis=1)
    g_r_max = np.minimum(g_r[maxg], true_r)
    rmean_all = float(radii_atoms.mean())
    bound = slack <= (g_r_max[:, None] + tolerance * rmean_all)
    ncont = bound.sum(1)
    nbr_atoms = np.where(bound, idx[j], -1)
    rb = np.where(bound, radii_atoms[idx[j]], 0.0)
    rbar = rb.sum(1) / np.maximum(ncont, 1)
    ratio = g_r_max / rbar
    kinds = np.full(len(maxg), "other", dtype="<U11")
    kinds[ncont == 4] = "tetrahedral"
    kinds[ncont == 6] = "octahedral"
    kinds[ncont == 8] = "cubic"
    kinds[(ncont >= 8) & (ratio >= 0.8)] = "vacancy"
    # sort neighbour columns so bounding atoms come first
    srt = np.argsort(~bound, axis=1, kind="stable")
    nbr_atoms = np.take_along_axis(nbr_atoms, srt, axis=1)[:, : max(int(ncont.max()), 1)]

    ch = np.zeros((0, 2), np.int64)
    bn = np.zeros(0)
    if channels and len(maxg) > 1:
        ch, bn = _channels(pts, rad, simp, kt, canon, gid_kept, group, centre, r, tri.neighbors, is_max, ng, ok)
        # renumber to void indices
        newid = np.full(ng, -1, np.int64)
        newid[maxg] = np.arange(len(maxg))
        ch = newid[ch]
        bn = np.minimum(bn, np.minimum(g_r_max[ch[:, 0]], g_r_max[ch[:, 1]]))
    method = ("exact tangent spheres of the Delaunay tetrahedra (scipy/Qhull), periodic images, "
              + ("equal radii" if equal else "per-atom radii") + "; maxima only")
    return Voids(g_pos[maxg], g_r_max, kinds, nbr_atoms, ratio, ch, bn, method, n)


def _channels(pts, rad, simp, kt, canon, gid_kept, group, centre, r, neighbors, is_max, ng, ok):
    """(pairs (M,2) of group ids, bottleneck radius (M,)) between maximum holes."""
    own = kt[canon]
    pairs, widths = [], []
    # flat (zero-volume) tetrahedra lie in a passage (e.g. the square face
    # between two simple-cubic holes): they join every hole around them.
    flat = np.nonzero(~ok)[0]
    if len(flat):
        ng4 = np.where(neighbors[flat] >= 0, group[np.maximum(neighbors[flat], 0)], -1)
        use = (ng4 >= 0).sum(1) >= 2
        flat, ng4 = flat[use], ng4[use]
        if len(flat):
            f3 = simp[flat][:, 1:]
            p0 = pts[f3[:, 0]]
            _, rf = _face_bottleneck(p0, pts[f3[:, 1]] - p0, pts[f3[:, 2]] - p0, rad[f3[:, 0]], rad[f3[:, 1]],
                                     rad[f3[:, 2]])
            for i in range(4):
                for k in range(i + 1, 4):
                    m = (ng4[:, i] >= 0) & (ng4[:, k] >= 0) & (ng4[:, i] != ng4[:, k]) & np.isfinite(rf)
                    if m.any():
                        pairs.append(np.column_stack([ng4[m, i], ng4[m, k]]))
                        widths.append(rf[m])
    for i in range(4):
        u = neighbors[own, i]
        g1 = group[own]
        g2 = np.where(u >= 0, group[np.maximum(u, 0)], -1)
        m = (g2 >= 0) & (g2 != g1)
        if not m.any():
            continue
        t, uu, g1, g2 = own[m], u[m], g1[m], g2[m]
        face = np.delete(simp[t], i, axis=1)              # (F, 3) the shared triangle
        p0 = pts[face[:, 0]]
        a = pts[face[:, 1]] - p0
        b = pts[face[:, 2]] - p0
        _, rf = _face_bottleneck(p0, a, b, rad[face[:, 0]], rad[face[:, 1]], rad[face[:, 2]])
        nrm = np.cross(a, b)
        s1 = np.einsum("ij,ij->i", centre[t] - p0, nrm)
        s2 = np.einsum("ij,ij->i", centre[uu] - p0, nrm)
        cross = (s1 * s2) <= 0
        w = np.where(cross & np.isfinite(rf), rf, np.minimum(r[t], r[uu]))
        pairs.append(np.column_stack([g1, g2]))
        widths.append(w)
    if not pairs:
        return np.zeros((0, 2), np.int64), np.zeros(0)
    P = np.sort(np.vstack(pairs), axis=1)
    W = np.concatenate(widths)
    P, W = _widest(P, W)
    if not np.all(is_max):
        P, W = _contract(P, W, is_max)
    return P, W


def _widest(P, W):
    """Unique pairs, keeping the widest passage of each."""
    if len(P) == 0:
        return P, W
    o = np.lexsort((P[:, 1], P[:, 0]))
    P, W = P[o], W[o]
    start = np.ones(len(P), bool)
    start[1:] = np.any(P[1:] != P[:-1], axis=1)
    idx = np.nonzero(start)[0]
    return P[idx], np.maximum.reduceat(W, idx)


def _contract(P, W, is_max):
    """Link maximum holes through non-maximum points: passage = narrower step."""
    nonmax = ~is_max
    touch = nonmax[P[:, 0]] | nonmax[P[:, 1]]
    direct_P, direct_W = P[~touch], W[~touch]
    adj = {}
    for (x, y), w in zip(P[touch].tolist(), W[touch].tolist()):
        adj.setdefault(x, {})
        adj.setdefault(y, {})
        adj[x][y] = max(adj[x].get(y, -np.inf), w)
        adj[y][x] = max(adj[y].get(x, -np.inf), w)
    for sid in [k for k in list(adj) if nonmax[k]]:
        nbrs = adj.pop(sid, {})
        items = [(k, w) for k, w in nbrs.items() if k != sid]
        for k, _ in items:
            adj[k].pop(sid, None)
        for ai in range(len(items)):
            for bi in range(ai + 1, len(items)):
                (x, wx), (y, wy) = items[ai], items[bi]
                w = min(wx, wy)
                if w > adj[x].get(y, -np.inf):
                    adj[x][y] = w
                    adj[y][x] = w
    extra = [(x, y, w) for x, d in adj.items() for y, w in d.items() if x < y]
    if extra:
        EP = np.array([[x, y] for x, y, _ in extra], np.int64)
        EW = np.array([w for _, _, w in extra])
        P = np.vstack([direct_P, EP])
        W = np.concatenate([direct_W, EW])
        return _widest(P, W)
    return direct_P, direct_W
