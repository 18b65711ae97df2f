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
def tangent_spheres(c0, a, b, c, r0, ra, rb, rc, weighted=None):
    """Exact tangent spheres of tetrahedra (vectorised).

    ``c0`` (T, 3) first atom centre; ``a, b, c`` (T, 3) the other three
    centres *relative to c0*; radii (T,).  Returns (centre relative to c0,
    free radius, ok) where ok is False for flat (zero-volume) tetrahedra.
    ``weighted`` forces (True) or skips (False) the unequal-radii solution;
    by default it is used when the radii differ.
    """
    bc = np.cross(b, c)
    ca = np.cross(c, a)
    ab = np.cross(a, b)
    det = _dot(a, bc)
    scale = (_dot(a, a) * _dot(b, b) * _dot(c, c)) ** 0.5
    ok = np.abs(det) > 1e-10 * np.maximum(scale, 1e-300)
    det = np.where(ok, det, 1.0)
    # a_i . y = (|a_i|^2 - R_i^2 + R0^2)/2 - r (R_i - R0)
    v0 = (_dot(a, a) - ra ** 2 + r0 ** 2) / 2.0
    v1 = (_dot(b, b) - rb ** 2 + r0 ** 2) / 2.0
    v2 = (_dot(c, c) - rc ** 2 + r0 ** 2) / 2.0
    p = (v0[:, None] * bc + v1[:, None] * ca + v2[:, None] * ab) / det[:, None]
    w0, w1, w2 = -(ra - r0), -(rb - r0), -(rc - r0)
    if weighted if weighted is not None else (np.any(w0) or np.any(w1) or np.any(w2)):
        q = (w0[:, None] * bc + w1[:, None] * ca + w2[:, None] * ab) / det[:, None]
        r = _solve_radius(p, q, r0)
        y = p + q * r[:, None]
    else:
        y = p
        r = np.sqrt(_dot(p, p)) - r0
    return y, r, ok


def _solve_radius(p, q, r0):
    """Largest root r of |p + q r|^2 = (r + r0)^2."""
    alpha = _dot(q, q) - 1.0
    beta = 2.0 * (_dot(p, q) - r0)
    gamma = _dot(p, p) - r0 ** 2
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
    return _find_voids(crystal, channels=channels, tolerance=tolerance, max_atoms=max_atoms)


#: The seeded perturbation that breaks the degeneracy of perfect lattices
#: before triangulating: 2e-8 of the extent of the points, at least 1e-6 A
#: (Qhull needs about that much to see the co-spherical points of a lattice as
#: generic; smaller shifts leave it merging facets, or failing).  It only
#: decides which tetrahedra are made; every number is computed from the exact
#: coordinates.
_JITTER_RELATIVE = 2e-8
_JITTER_MIN_A = 1e-6
_JITTER_SEED = 20240616
#: Points per slab triangulation (crystals of more points are cut into slabs
#: that are triangulated and reduced one by one, two at a time on two cores).
_SLAB_POINTS = 250_000
_MIN_SPLIT_POINTS = 60_000
_CHUNK = 200_000


def _dot(a, b):
    # element by element, so that the same tetrahedron gives the same bits in
    # every slab that sees it (einsum may sum in a different order)
    return a[:, 0] * b[:, 0] + a[:, 1] * b[:, 1] + a[:, 2] * b[:, 2]


def _frac(x, inv):
    return x[:, 0:1] * inv[0] + x[:, 1:2] * inv[1] + x[:, 2:3] * inv[2]


def _find_voids(crystal, *, channels=True, tolerance=0.1, max_atoms=None, reach=None, slabs=None, info=None):
    """find_voids; ``reach`` (first outer padding, A), ``slabs`` (number of
    slab triangulations) and ``info`` (filled with the padding used) are for
    the tests."""
    from concurrent.futures import ThreadPoolExecutor
    import os

    from scipy.spatial import cKDTree

    from .neighbours import cell_heights, with_images

    n = len(crystal)
    if n == 0:
        raise UserError("the crystal has no atoms; there are no holes to find")
    check_void_size(crystal, max_atoms)
    radii_atoms = crystal.atom_radii()
    if not np.all(np.isfinite(radii_atoms)) or np.any(radii_atoms <= 0):
        raise UserError("every atom needs a positive hard-sphere radius for the hole search; "
                        "set crystal.species_radii for the species without one")
    cell = np.asarray(crystal.cell, float)
    inv = np.linalg.inv(cell)
    pbc = np.array(crystal.pbc, bool)
    h = cell_heights(cell)
    s = (crystal.volume / n) ** (1.0 / 3.0)
    # ext: tetrahedra whose centre lies within ext of the cell are kept (the
    # copies beyond the faces join the holes and channels that cross them)
    ext = 0.75 * s
    equal = float(radii_atoms.max() - radii_atoms.min()) < 1e-12
    lo_e = np.where(pbc, -ext / h, 0.0)
    hi_e = np.where(pbc, 1 + ext / h, 1.0)

    # Padding (periodic images), the bound.  A tetrahedron kept (centre c
    # within ext of the cell, empty sphere of radius rho through its atom
    # centres) is a true Delaunay tetrahedron of the infinite crystal as soon
    # as its whole sphere lies inside the padded region, and then nothing is
    # missing around it; so the thinnest padding is
    #     pad = max over kept tetrahedra of (rho - depth(c))  <=  ext + rho_max
    # where depth(c) is the distance of c inside the cell along the periodic
    # axes (negative beyond a face, down to -ext).  Images are taken within
    # pad of the cell (a shell, not whole replicas).  The first padding is a
    # sampled guess; after triangulating, the bound is measured exactly on the
    # kept tetrahedra and the padding redone when it was thinner (the tests
    # start from a padding that is too thin and check that).
    pad0 = 2.25 * s
    pts_t, _idx_t = with_images(crystal.positions, cell, pbc, pad0)
    tree = cKDTree(pts_t)
    if reach is None:
        # first guess: the largest hole of the perfect lattices (FCC/HCP octahedral 0.79 s,
        # BCC tetrahedral 0.70 s, simple cubic and diamond 0.87 s, s the atomic spacing)
        reach = ext + 0.9 * s if pbc.any() else 0.0
    pad = float(reach)
    rho_guess = max(pad - ext, 0.9 * s)
    margin = 2.5 * rho_guess            # overlap of neighbouring slabs, measured and redone the same way
    checked = False
    for attempt in range(6):
        if pad > pad0:
            pad0 = pad + 0.5 * s
            pts_t, _idx_t = with_images(crystal.positions, cell, pbc, pad0)
            tree = cKDTree(pts_t)
        pts, idx = with_images(crystal.positions, cell, pbc, max(pad, 0.0))
        if len(pts) < 4:
            raise UserError(f"{len(pts)} atoms (with periodic images) cannot enclose a hole; give at least four "
                            f"atoms that are not coplanar")
        sample = pts[:: max(1, len(pts) // 20000)] if len(pts) > 40000 else pts
        sv = np.linalg.svd(sample - sample.mean(axis=0), compute_uv=False)
        if sv[-1] <= 1e-8 * sv[0] or len(sv) < 3:
            raise UserError("the atoms are coplanar or collinear (no three-dimensional hole); give a "
                            "three-dimensional structure or make the cell periodic")
        if not checked:
            _check_atoms(crystal, tree, _idx_t, radii_atoms)
            checked = True
        rad = radii_atoms[idx]
        fpts = _frac(pts, inv)
        amp = max(_JITTER_MIN_A, _JITTER_RELATIVE * float(np.ptp(pts, axis=0).max()))
        pert = pts + np.random.default_rng(_JITTER_SEED).uniform(-amp, amp, pts.shape)
        # slabs along the tallest axis
        k = int(np.argmax(np.where(pbc, h + 2 * ext, h)))
        span = (hi_e[k] - lo_e[k]) * h[k]
        nsl = slabs if slabs is not None else (
            1 if len(pts) < _MIN_SPLIT_POINTS else max(2, int(np.ceil(len(pts) / _SLAB_POINTS))))
        nsl = int(max(1, min(nsl, span // (3.0 * margin)))) if slabs is None else int(slabs)
        cuts = lo_e[k] + (hi_e[k] - lo_e[k]) * np.arange(nsl + 1) / nsl
        cuts[0], cuts[-1] = -np.inf, np.inf
        geo = dict(pts=pts, pert=pert, fpts=fpts, rad=rad, inv=inv, pbc=pbc, h=h, lo_e=lo_e, hi_e=hi_e, k=k,
                   margin=margin, equal=equal, channels=channels, cell=cell)
        workers = max(1, min(nsl, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity")
                             else (os.cpu_count() or 1), 2))
        from ..progress import bar

        with bar(f"hole analysis of {n:,} atoms: triangulating", nsl + 1) as pb:
            def one(j):
                out_j = _slab(geo, cuts[j], cuts[j + 1])
                pb.update()
                return out_j

            if workers > 1:
                with ThreadPoolExecutor(workers) as ex:
                    parts = list(ex.map(one, range(nsl)))
            else:
                parts = [one(j) for j in range(nsl)]
        n_own = sum(p["n_own"] for p in parts)
        need_pad = max((p["need_pad"] for p in parts), default=-np.inf)
        need_margin = max((p["need_margin"] for p in parts), default=-np.inf)
        ok_pad = (not pbc.any()) or need_pad <= pad * (1 + 1e-12) + 1e-12
        ok_margin = nsl == 1 or need_margin <= margin * (1 + 1e-12) + 1e-12
        if n_own == 0 or (ok_pad and ok_margin):
            break
        if not ok_pad:
            pad = float(need_pad) * (1 + 1e-9) + 1e-9
        if not ok_margin:
            margin = float(need_margin) * 1.05 + 1e-9
    else:
        raise UserError("the holes are too large for the cell (open space?); void analysis needs a filled cell")
    if info is not None:
        info.update(pad=pad, margin=margin, attempts=attempt + 1, slabs=nsl, points=len(pts),
                    need_pad=float(need_pad), ext=ext, axis=k)
    if n_own == 0:
        raise UserError("no enclosed hole found inside the cell; give a filled three-dimensional structure")
    return _reduce(crystal, parts, pts, idx, rad, tree, _idx_t, radii_atoms, cell, pbc, equal, tolerance, channels, n)


def _slab(geo, cut_lo, cut_hi):
    """Triangulate one slab and reduce it to the tetrahedra whose centres it
    owns (plus the flat ones that join them), with what the holes and
    channels need; memory is released before returning."""
    from scipy.spatial import Delaunay, QhullError

    pts, fpts, k, margin = geo["pts"], geo["fpts"], geo["k"], geo["margin"]
    h, inv, pbc = geo["h"], geo["inv"], geo["pbc"]
    lo = cut_lo - margin / h[k]
    hi = cut_hi + margin / h[k]
    gi = np.nonzero((fpts[:, k] >= lo) & (fpts[:, k] <= hi))[0]
    try:
        tri = Delaunay(geo["pert"][gi])
    except QhullError:
        try:
            tri = Delaunay(pts[gi], qhull_options="QJ Qbb")
        except QhullError:
            raise UserError("the atoms are coplanar or collinear (no three-dimensional hole); give a "
                            "three-dimensional structure or make the cell periodic") from None
    G = gi[tri.simplices]
    o = np.argsort(G, axis=1)
    G = np.take_along_axis(G, o, axis=1)
    NB = np.take_along_axis(tri.neighbors, o, axis=1)
    del tri, o
    T = len(G)
    rad = geo["rad"]
    centre = np.empty((T, 3))
    r = np.empty(T)
    ok = np.empty(T, bool)
    for a in range(0, T, _CHUNK):
        g = G[a:a + _CHUNK]
        c0 = pts[g[:, 0]]
        y, rr, kk = tangent_spheres(c0, pts[g[:, 1]] - c0, pts[g[:, 2]] - c0, pts[g[:, 3]] - c0,
                                    rad[g[:, 0]], rad[g[:, 1]], rad[g[:, 2]], rad[g[:, 3]], weighted=not geo["equal"])
        centre[a:a + _CHUNK] = c0 + y
        r[a:a + _CHUNK] = rr
        ok[a:a + _CHUNK] = kk
    fc = _frac(centre, inv)
    inE = ok & np.isfinite(r)
    for ax in range(3):
        inE &= (fc[:, ax] >= geo["lo_e"][ax]) & (fc[:, ax] <= geo["hi_e"][ax])
    own = inE & (fc[:, k] >= cut_lo) & (fc[:, k] < cut_hi)
    own_idx = np.nonzero(own)[0]
    rho = r + rad[G[:, 0]]
    # flat (zero-volume) tetrahedra beside two or more kept ones; a slab
    # takes the one whose first kept neighbour it owns
    flat_idx = np.nonzero(~ok)[0]
    if len(flat_idx):
        nbf = NB[flat_idx]
        e4 = (nbf >= 0) & inE[np.maximum(nbf, 0)]
        use = e4.sum(1) >= 2
        first = np.argmax(e4, axis=1)
        firstnb = nbf[np.arange(len(nbf)), first]
        flat_idx = flat_idx[use & own[np.maximum(firstnb, 0)]]
    if len(flat_idx):
        # only four atoms on one circle make a true flat tetrahedron (a
        # square or rectangular window); four coplanar atoms that are not
        # concyclic come from the flat outer surface of the padded points
        P = pts[G[flat_idx]]
        u, w = P[:, 1] - P[:, 0], P[:, 2] - P[:, 0]
        uxw = np.cross(u, w)
        den = 2.0 * _dot(uxw, uxw)
        cc = np.cross(_dot(u, u)[:, None] * w - _dot(w, w)[:, None] * u, uxw) / np.where(den > 0, den, np.nan)[:, None]
        rc = np.sqrt(_dot(cc, cc))
        d3 = P[:, 3] - P[:, 0] - cc
        flat_idx = flat_idx[np.abs(np.sqrt(_dot(d3, d3)) - rc) <= 1e-7 * np.maximum(rc, 1.0)]
    rows = np.concatenate([own_idx, flat_idx])
    n_own, n_rows = len(own_idx), len(rows)
    rowmap = np.full(T, -1, np.int64)
    rowmap[rows] = np.arange(n_rows)
    nbl = NB[rows]
    valid = nbl >= 0
    nbs = np.maximum(nbl, 0)
    nbr = np.where(valid, rowmap[nbs], -1)
    pend = valid & inE[nbs] & (nbr < 0)
    nbr[pend] = -2
    pr, pc = np.nonzero(pend)
    pend_keys = G[nbl[pr, pc]]
    # tetrahedra of this slab that others may point to
    touch = valid & (~inE[nbs] | ~own[nbs] | ~ok[nbs])
    exp_rows = np.nonzero(touch[:n_own].any(1))[0]
    # padding and overlap actually needed (see the bound in _find_voids)
    depth = np.full(n_own, np.inf)
    fo = fc[own_idx]
    for ax in range(3):
        if pbc[ax]:
            depth = np.minimum(depth, h[ax] * np.minimum(fo[:, ax], 1 - fo[:, ax]))
    need_pad = float(np.max(rho[own_idx] - depth)) if n_own else -np.inf
    used = np.concatenate([own_idx, nbl[:, :][valid & inE[nbs]]])
    need_margin = -np.inf
    if len(used):
        fk, ru = fc[used, k], rho[used]
        ex = np.maximum(np.where(np.isfinite(cut_hi), (fk - cut_hi) * h[k] + ru, -np.inf),
                        np.where(np.isfinite(cut_lo), (cut_lo - fk) * h[k] + ru, -np.inf))
        need_margin = float(ex.max())
    out = dict(n_own=n_own, n_flat=len(flat_idx), V=G[rows], centre=centre[rows], fc=fc[rows], r=r[rows],
               nb=nbr, pend_rows=pr, pend_cols=pc, pend_keys=pend_keys, exp_rows=exp_rows,
               exp_keys=G[own_idx[exp_rows]], need_pad=need_pad, need_margin=need_margin)
    # union test of step 4 (equal radii: the point tested is the tetrahedron's own centre)
    if geo["equal"] and n_own:
        V = G[own_idx]
        c0 = pts[V[:, 0]]
        a, b, c = pts[V[:, 1]] - c0, pts[V[:, 2]] - c0, pts[V[:, 3]] - c0
        bc, ca, ab = np.cross(b, c), np.cross(c, a), np.cross(a, b)
        det = _dot(a, bc)
        rel = centre[own_idx] - c0
        l1, l2, l3 = _dot(rel, bc) / det, _dot(rel, ca) / det, _dot(rel, ab) / det
        lam = np.column_stack([1 - (l1 + l2 + l3), l1, l2, l3])
        out["inside"] = np.all(lam > -_LAM_TOL, axis=1)
        out["on_face"] = np.abs(lam) <= _LAM_TOL
    # channel passages through the faces of the canonical kept tetrahedra
    if geo["channels"] and n_own:
        f = fc[own_idx]
        snapped = np.where(np.abs(f - np.round(f)) < 1e-9, np.round(f), f)
        canon = np.all(~pbc | ((snapped >= 0) & (snapped < 1)), axis=1)
        W = np.full((n_own, 4), np.nan)
        ci = np.nonzero(canon)[0]
        t = own_idx[ci]
        for i in range(4):
            u = NB[t, i]
            m = (u >= 0) & inE[np.maximum(u, 0)]
            if not m.any():
                continue
            tt, uu = t[m], u[m]
            face = np.delete(G[tt], i, axis=1)
            p0 = pts[face[:, 0]]
            a = pts[face[:, 1]] - p0
            b = pts[face[:, 2]] - p0
            _, rf = _face_bottleneck(p0, a, b, rad[face[:, 0]], rad[face[:, 1]], rad[face[:, 2]])
            nrm = np.cross(a, b)
            s1 = _dot(centre[tt] - p0, nrm)
            s2 = _dot(centre[uu] - p0, nrm)
            cross = (s1 * s2) <= 0
            W[ci[m], i] = np.where(cross & np.isfinite(rf), rf, np.minimum(r[tt], r[uu]))
        out["W"] = W
        out["canon"] = canon
        if len(flat_idx):
            f3 = G[flat_idx][:, 1:]
            p0 = pts[f3[:, 0]]
            _, rf = _face_bottleneck(p0, pts[f3[:, 1]] - p0, pts[f3[:, 2]] - p0, rad[f3[:, 0]], rad[f3[:, 1]],
                                     rad[f3[:, 2]])
            out["flat_rf"] = rf
        else:
            out["flat_rf"] = np.zeros(0)
    return out


_LAM_TOL = 1e-7


def _reduce(crystal, parts, pts, idx, rad, tree, idx_t, radii_atoms, cell, pbc, equal, tolerance, channels, n):
    """Join the slabs and find the holes (steps 3-6 of the module notes)."""
    from scipy.spatial import cKDTree

    # global rows: every slab's kept tetrahedra, then every slab's flat ones
    offs_own, offs_flat = [], []
    a = 0
    for p in parts:
        offs_own.append(a)
        a += p["n_own"]
    K = a
    for p in parts:
        offs_flat.append(a)
        a += p["n_flat"]
    NR = a

    def glob(p, j, local):
        n_own = p["n_own"]
        return np.where(local < n_own, offs_own[j] + local, offs_flat[j] + local - n_own)

    V = np.empty((NR, 4), np.int64)
    centre = np.empty((K, 3))
    fcen = np.empty((K, 3))
    r = np.empty(K)
    nb = np.empty((NR, 4), np.int64)
    for j, p in enumerate(parts):
        no, nf = p["n_own"], p["n_flat"]
        V[offs_own[j]:offs_own[j] + no] = p["V"][:no]
        V[offs_flat[j]:offs_flat[j] + nf] = p["V"][no:]
        centre[offs_own[j]:offs_own[j] + no] = p["centre"][:no]
        fcen[offs_own[j]:offs_own[j] + no] = p["fc"][:no]
        r[offs_own[j]:offs_own[j] + no] = p["r"][:no]
        loc = p["nb"]
        g = np.where(loc >= 0, glob(p, j, np.maximum(loc, 0)), loc)
        nb[offs_own[j]:offs_own[j] + no] = g[:no]
        nb[offs_flat[j]:offs_flat[j] + nf] = g[no:]
    # neighbours owned by another slab: matched by their four atoms
    pend = [(j, p) for j, p in enumerate(parts) if len(p["pend_rows"])]
    if pend:
        ek = np.vstack([p["exp_keys"] for p in parts])
        er = np.concatenate([offs_own[j] + p["exp_rows"] for j, p in enumerate(parts)])
        pk = np.vstack([p["pend_keys"] for _, p in pend])
        u, inv_ = np.unique(np.vstack([ek, pk]), axis=0, return_inverse=True)
        inv_ = inv_.reshape(-1)
        lut = np.full(len(u), -1, np.int64)
        lut[inv_[:len(ek)]] = er
        found = lut[inv_[len(ek):]]
        a = 0
        for j, p in pend:
            m = len(p["pend_rows"])
            rows = glob(p, j, p["pend_rows"])
            nb[rows, p["pend_cols"]] = found[a:a + m]
            a += m
    nb[nb < 0] = -1
    for p in parts:               # free the slab copies
        for key in ("V", "centre", "fc", "r", "nb", "pend_keys", "exp_keys"):
            p.pop(key, None)

    f = fcen
    snapped = np.where(np.abs(f - np.round(f)) < 1e-9, np.round(f), f)
    canon = np.all(~pbc | ((snapped >= 0) & (snapped < 1)), axis=1)
    wrapped = np.where(pbc, snapped - np.floor(snapped), snapped)
    wrapped = np.where(wrapped >= 1 - 1e-12, 0.0, wrapped)
    del snapped
    wc = wrapped @ cell
    # merge degenerate duplicates: same centre (to 1e-5 A)
    q = np.floor((wc + 3.1e-6) / 1e-5).astype(np.int64)
    o = np.lexsort((q[:, 2], q[:, 1], q[:, 0]))
    qs = q[o]
    new = np.ones(K, bool)
    new[1:] = np.any(qs[1:] != qs[:-1], axis=1)
    gid_kept = np.empty(K, np.int64)
    gid_kept[o] = np.cumsum(new) - 1
    del q, qs, o, new
    rk = r
    kq = 16 if tree.n >= 16 else tree.n
    if not equal:
        from scipy.sparse import coo_matrix
        from scipy.sparse.csgraph import connected_components

        dq, jq = tree.query(wc, k=kq)
        rk = np.minimum(rk, (dq - radii_atoms[idx_t[jq]]).min(axis=1))
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
    group = np.full(NR + 1, -1, np.int64)       # the last entry stands for "no neighbour"
    group[:K] = gid_kept

    # one representative per group: the largest radius, canonical copy first
    order = np.lexsort((~canon, -np.round(rk, 9), gid_kept))
    first = np.ones(len(order), bool)
    first[1:] = gid_kept[order][1:] != gid_kept[order][:-1]
    rep = order[first]
    del order, first
    g_pos = wc[rep]
    g_r = rk[rep]

    # maximum test: the centre lies inside the union of its group's tetrahedra
    nbk = nb[:K]
    nbg = group[np.where(nbk >= 0, nbk, NR)]
    internal = nbg == gid_kept[:, None]
    if equal:
        inside = np.concatenate([p.pop("inside") for p in parts])
        on_face = np.concatenate([p.pop("on_face") for p in parts])
    else:
        wf = _frac(wc, np.linalg.inv(cell))
        df = wf[rep[gid_kept]] - wf
        df = np.where(pbc, df - np.round(df), df)
        point = centre + df @ cell
        Vk = V[:K]
        c0 = pts[Vk[:, 0]]
        a_, b_, c_ = pts[Vk[:, 1]] - c0, pts[Vk[:, 2]] - c0, pts[Vk[:, 3]] - c0
        bc, ca, ab = np.cross(b_, c_), np.cross(c_, a_), np.cross(a_, b_)
        det = _dot(a_, bc)
        rel = point - c0
        l1, l2, l3 = _dot(rel, bc) / det, _dot(rel, ca) / det, _dot(rel, ab) / det
        lam = np.column_stack([1 - (l1 + l2 + l3), l1, l2, l3])
        inside = np.all(lam > -_LAM_TOL, axis=1)
        on_face = np.abs(lam) <= _LAM_TOL
    good = inside & np.all(~on_face | internal, axis=1)
    del inside, on_face, internal
    is_max = np.zeros(ng, bool)
    if good.any():
        is_max[gid_kept[good]] = True

    # check against nearby atoms (true free radius) and find the bounding atoms
    maxg = np.nonzero(is_max)[0]
    d, j = tree.query(g_pos[maxg], k=kq, workers=-1)
    slack = d - radii_atoms[idx_t[j]]
    true_r = slack.min(axis=1)
    g_r_max = np.minimum(g_r[maxg], true_r)
    rmean_all = float(radii_atoms.mean())
    bound = slack <= (g_r_max[:, None] + tolerance * rmean_all)
    ncont = bound.sum(1)
    nbr_atoms = np.where(bound, idx_t[j], -1)
    rb = np.where(bound, radii_atoms[idx_t[j]], 0.0)
    rbar = rb.sum(1) / np.maximum(ncont, 1)
    ratio = np.where(rbar > 0, g_r_max / np.where(rbar > 0, rbar, 1.0), np.nan)
    kinds = np.full(len(maxg), "other", dtype="<U11")
    kinds[ncont == 4] = "tetrahedral"
    kinds[ncont == 6] = "octahedral"
    kinds[ncont == 8] = "cubic"
    kinds[(ncont >= 8) & (ratio >= 0.8)] = "vacancy"
    srt = np.argsort(~bound, axis=1, kind="stable")
    nbr_atoms = np.take_along_axis(nbr_atoms, srt, axis=1)[:, : max(int(ncont.max()), 1)] if len(maxg) else \
        np.zeros((0, 1), np.int64)

    ch = np.zeros((0, 2), np.int64)
    bn = np.zeros(0)
    if channels and len(maxg) > 1:
        ch, bn = _channels(parts, offs_flat, K, NR, nb, group, gid_kept, is_max)
        newid = np.full(ng, -1, np.int64)
        newid[maxg] = np.arange(len(maxg))
        ch = newid[ch]
        bn = np.minimum(bn, np.minimum(g_r_max[ch[:, 0]], g_r_max[ch[:, 1]]))
    method = ("exact tangent spheres of the Delaunay tetrahedra (scipy/Qhull), periodic images, "
              + ("equal radii" if equal else "per-atom radii") + "; maxima only")
    return Voids(g_pos[maxg], g_r_max, kinds, nbr_atoms, ratio, ch, bn, method, n)


def _channels(parts, offs_flat, K, NR, nb, group, gid_kept, is_max):
    """(pairs (M,2) of group ids, bottleneck radius (M,)) between maximum holes."""
    pairs, widths = [], []
    # flat (zero-volume) tetrahedra lie in a passage (e.g. the square face
    # between two simple-cubic holes): they join every hole around them.
    if NR > K:
        nf = nb[K:]
        ng4 = group[np.where(nf >= 0, nf, NR)]
        rf = np.concatenate([p["flat_rf"] for p in parts])
        use = (ng4 >= 0).sum(1) >= 2
        ng4, rf = ng4[use], rf[use]
        for i in range(4):
            for k in range(i + 1, 4):
                m = (ng4[:, i] >= 0) & (ng4[:, k] >= 0) & (ng4[:, i] != ng4[:, k]) & np.isfinite(rf)
                if m.any():
                    pairs.append(np.column_stack([ng4[m, i], ng4[m, k]]))
                    widths.append(rf[m])
    W = np.concatenate([p.pop("W") for p in parts])
    nbk = nb[:K]
    for i in range(4):
        w = W[:, i]
        t = np.nonzero(np.isfinite(w))[0]
        g1 = gid_kept[t]
        u = nbk[t, i]
        g2 = group[np.where(u >= 0, u, NR)]
        m = (g2 >= 0) & (g2 != g1)
        if m.any():
            pairs.append(np.column_stack([g1[m], g2[m]]))
            widths.append(w[t[m]])
    if not pairs:
        return np.zeros((0, 2), np.int64), np.zeros(0)
    P = np.sort(np.vstack(pairs), axis=1)
    Wd = np.concatenate(widths)
    P, Wd = _widest(P, Wd)
    if not np.all(is_max):
        P, Wd = _contract(P, Wd, is_max)
    return P, Wd


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
