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
   vacancy), and not inside an atom.  A flat tetrahedron (four atoms on one circle, which Qhull's
   rounding sometimes leaves between two halves of one cell) is seen
   through.  Every kept hole is checked against all nearby atoms, so the
   radius reported is always a true free radius at the reported position.
5. Each hole is classified from the atoms that bound it (those within 10 %
   of a host radius of touching it): 4 -> tetrahedral, 6 -> octahedral,
   8 or more with a radius at least 0.8 of the bounding atoms' radius ->
   vacancy, 8 -> cubic, anything else -> other.
6. Channels: for each triangle shared by two tetrahedra of different holes,
   the narrowest passage is the tangent circle of the three atoms in their
   plane (by mirror symmetry the empty-sphere function along the path
   between the two holes is smallest there) when the two hole centres lie on
   opposite sides of that plane, else the smaller of the two holes; a
   passage through overlapping atoms is none.  A cluster of non-maximum
   points belongs to the hole it opens into most widely (to each, where
   openings tie), and what it meets further is linked to that hole at the
   narrower step (:func:`_contract`).  Between two holes the widest of their
   passages is kept: the bottleneck radius of the channel.

With mixed radii the exact tangent spheres are solved on the ordinary
(unweighted) Delaunay topology, and each hole is then certified a true
maximum of the free radius (:func:`_certify`: the atoms at its surface
surround its centre); one that is not is moved to the nearest true maximum
(:func:`_polish`), and holes that meet become one.  The ordinary topology
alone left some 5-8 % of the holes of Cu-10 % Al short of the maximum beside
them (up to 0.17 A), and most of an oxide's.

The BCC octahedral site is a saddle of the empty-sphere function, not a
maximum, so this analysis does not list it; ``interstitial_sites`` does.

Speed and memory (issue 16).  Profile of 1,000,000 atoms (FCC, 1 % vacancies)
before this round (110 s in that run, 87 s on a quieter machine): the first
pass of six slab triangulations in two forked workers 37 s (Qhull about
80 % of it), a complete second pass 51 s (the first guess of the slab
overlap, 2.25 spacings, was too thin for the neighbours of vacancy holes,
and every slab was redone), the serial join of the slabs and the hole and
channel reduction 20 s.  Now (bench/bench_voids.py, quiet machine): 49 s,
of which points and images 1.3 s, two slab triangulations 38 s, join,
holes and channels 9 s.  What was done, and why:

* One exact triangulation, cut into as few slabs as the cores can run at
  once (two; up to 700,000 points a slab).  Each cut adds two overlaps of
  points that are triangulated twice, so two slabs triangulate fewer points
  than six (1.19 instead of 1.37 points per atom at a million atoms); 3-D
  blocks were not chosen: with two cores only two pieces run at a time and
  any split into more than two pieces, blocks included, duplicates more
  points than one cut.
* The first overlap guess covers a kept tetrahedron and its neighbours up
  to the vacancy hole of a close packing (3.05 spacings); a slab whose
  measured need still exceeds it is redone alone, the others stand.
* The periodic padding stays the measured thinnest shell (bound below in
  ``_find_voids``, checked on every run and tested).
* The serial part: the channels are worked out in a forked process while
  this one measures the holes; one representative per hole in linear time;
  with equal radii the bounding atoms come straight from the sorted
  neighbour query; a face seen from both sides counts once.
* Mixed radii: the padding and overlap are measured on the circumspheres
  (what decides a Delaunay tetrahedron; the tangent sphere of a nearly
  flat tetrahedron of unequal atoms can be far larger), with a first
  padding guess that solutes beside vacancies do not overrun (a second
  padding is a whole second triangulation).  The reduction stays the
  costlier one (grouping of nearby tangent centres, a representative per
  hole, the union test at it), but only where it can matter: the free
  radius is queried only for tetrahedra that an atom other than their own
  four could come nearer to (bounded by the empty circumsphere), the
  grouping runs on the 1e-5 A cells, and the union test at a tetrahedron's
  own centre is done in the slab workers.  1,000,000 atoms of Cu-10 % Ni
  with 1 % vacancies: 73-88 s and 3.8 GB (triangulations 38-45 s, join and
  holes 33-40 s, some 7 s of it certifying every hole and moving the 6 %
  that are not true maxima; was 150 s and 4.6 GB), bench/bench_voids.py
  --big-alloy.
* Not chosen: taking the holes of the perfect regions from the recognised
  lattice's named sites and triangulating only around non-lattice atoms.
  That pays only when nearly every atom sits unmoved on the lattice with
  the host's radius: a dislocation moves every atom (its field falls off as
  1/r, far above 1e-6 A across the crystal), a boundary has two lattices,
  and a solid solution changes every hole that a solute of another radius
  touches (at 10 % solute nearly all of them); there the triangulation
  remains the cost, and a second path would need its own proof of
  agreement to 1e-6 A.

Independence from the partition: a tetrahedron belongs to the slab of its
centre read on a 1e-5 A grid along the slab axis, so all tetrahedra of one
degenerate hole (same centre but for rounding) go to the same slab even
when the centre lies exactly on a cut; and flat tetrahedra are seen through
(the hole count of 300,000 atoms differed by 1-3 between slab counts,
because Qhull's rounding, which differs with the points it is given, left
a flat square inside a few octahedra and the hole on it was dropped; at a
million atoms the old method lost 12 of 2,915,220 holes so).  With mixed
radii the tangent spheres of one hole differ, and mirror images tie on the
radius: the tie goes to the smallest position, not to the order of the
rows (which changed with the slab count and moved such holes by up to 1.5 A).
"""
from __future__ import annotations

import contextlib
from dataclasses import dataclass

import numpy as np

from ..errors import LimitError, UserError

#: Classification codes.
KINDS = ("tetrahedral", "octahedral", "cubic", "vacancy", "other")

#: Atom cap of the per-hole analyses (the void analysis, and the hole-by-hole
#: measurement of a defected crystal); raise it with ``max_atoms=`` or the
#: command line's ``--max-atoms``.  At the cap the void analysis of a compact
#: cell needs about 1 GB and half a minute.
DEFAULT_MAX_HOLE_ATOMS = 300_000
#: Cost of the void analysis per triangulated point (atoms, plus the periodic
#: images in the padding, plus the points the slabs share), measured with
#: bench/bench_voids.py on the 2-core reference machine (FCC with 1 %
#: vacancies; peak of the whole process tree above the start, workers
#: included): 100,000 atoms (128,000 points) 4.7 s and ~330 MB;
#: 1,000,000 atoms (1.13 million points, 1.19 million triangulated in two
#: slabs) 49 s and ~3.4 GB (67-85 s when other jobs hold a core; about 90
#: CPU seconds over the two cores).  The estimates round up.
VOID_BYTES_FIXED = 150_000_000
VOID_BYTES_PER_POINT = 3_000
VOID_SECONDS_PER_POINT = 6e-5
#: The cap in triangulated points: a compact cell of ``max_atoms`` atoms
#: makes at most about 1.4 points per atom (padding and slab overlaps; 1.27
#: at 300,000 atoms), and a floor keeps every small cell possible.  A thin or
#: flat cell has many more images per atom (a 3.6 x 3.6 x 3600 A column: 13
#: points per atom), so its points are checked against this too.
CAP_POINTS_PER_ATOM = 1.5
CAP_POINTS_FLOOR = 60_000

# Geometry of find_voids, in units of the atomic spacing s = (V / N)^(1/3):
# the extension of the kept region beyond the cell, the first padding of
# periodic images beyond that, and the overlap of neighbouring slabs.
_EXT_S = 0.75
_REACH_S = 0.9
#: With mixed radii a hole is kept by its tangent centre, and the sphere that
#: must lie inside the padding is the circumsphere, whose centre can lie up
#: to about half a lattice parameter further out (a vacancy beside a smaller
#: solute): a first guess that a crystal with solutes and vacancies does not
#: have to redo (the redo is a whole second triangulation).
_REACH_MIXED_S = 1.35
_MARGIN_S = 3.05


def _slab_count(npts, span, margin):
    """Slabs for ``npts`` points over a height ``span`` (A): an even number
    (two run at a time), none thinner than 3 overlaps."""
    if npts < _MIN_SPLIT_POINTS:
        return 1
    nsl = 2 * int(np.ceil(npts / (2 * _SLAB_POINTS)))
    return int(max(1, min(nsl, span // (3.0 * margin))))


def _padding_factor(crystal):
    """Points the triangulation sees per atom: atoms + images in the first
    padding of find_voids (plus half a spacing for the layers of a lattice
    that fall just inside it) + the points shared by neighbouring slabs."""
    from .neighbours import cell_heights

    n = max(len(crystal), 1)
    h = cell_heights(crystal.cell)
    s = (crystal.volume / n) ** (1.0 / 3.0)
    pbc = np.asarray(crystal.pbc, bool)
    pad = (_EXT_S + _REACH_S + 0.5) * s
    hp = np.where(pbc, h + 2.0 * pad, h)
    f = float(np.prod(hp / h))
    k = int(np.argmax(np.where(pbc, h + 2 * _EXT_S * s, h)))
    margin = _MARGIN_S * s
    nsl = _slab_count(n * f, float(np.where(pbc, h + 2 * _EXT_S * s, h)[k]), margin)
    return f * (1.0 + 2.0 * margin * (nsl - 1) / hp[k])


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


#: Mixed radii cost more (every hole certified, the free radius queried where
#: another atom may cut it): 1,000,000 atoms of Cu-10 % Ni with vacancies took
#: 73-88 s and 3.8 GB against 45-50 s and 3.4 GB for Cu (bench_voids.py).
VOID_MIXED_TIME = 1.8
VOID_MIXED_BYTES = 1.15


def void_estimate(crystal):
    """Estimated cost of :func:`find_voids` on ``crystal`` (no allocation):
    dict with atoms, points (atoms + periodic images), bytes, seconds.

    >>> import crystalview as cv
    >>> e = void_estimate(cv.build("Cu", repeat=(10, 10, 10)))
    >>> e["atoms"], e["points"] > e["atoms"], round(e["bytes"] / 1e9, 1)
    (4000, True, 0.2)
    """
    n = len(crystal)
    pts = int(round(n * _padding_factor(crystal))) if n else 0
    mixed = False
    if n:
        try:
            r = crystal.atom_radii()
            mixed = bool(np.nanmax(r) - np.nanmin(r) > 1e-12)
        except UserError:
            pass
    return {"atoms": n, "points": pts,
            "bytes": VOID_BYTES_FIXED + pts * VOID_BYTES_PER_POINT * (VOID_MIXED_BYTES if mixed else 1.0),
            "seconds": pts * VOID_SECONDS_PER_POINT * (VOID_MIXED_TIME if mixed else 1.0)}


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
    """:func:`check_hole_atoms` for the void analysis of ``crystal``; also
    refuses a crystal under the atom cap whose thin or flat cell makes more
    triangulated points than the cap allows (:data:`CAP_POINTS_PER_ATOM`)."""
    e = void_estimate(crystal)
    check_hole_atoms(e["atoms"], e["bytes"], e["seconds"], max_atoms, "the void analysis")
    cap = DEFAULT_MAX_HOLE_ATOMS if max_atoms is None else int(max_atoms)
    if e["points"] > cap * CAP_POINTS_PER_ATOM + CAP_POINTS_FLOOR:
        need = int(np.ceil((e["points"] - CAP_POINTS_FLOOR) / CAP_POINTS_PER_ATOM))
        raise LimitError(
            f"the void analysis of {e['atoms']:,} atoms would triangulate about {e['points']:,} points (the cell is "
            f"thin, so most are periodic images), needing about {_size(e['bytes'])} of memory and about "
            f"{_duration(e['seconds'])} (over the cap of {cap:,} atoms, {cap * CAP_POINTS_PER_ATOM:,.0f} points "
            f"and {CAP_POINTS_FLOOR:,} more); repeat the cell across its thin directions instead, or raise the cap "
            f"with max_atoms= / --max-atoms {need}")


def _check_padding(n, h, pbc, pad, max_atoms=None):
    """Refuse, before the images are made, a padding that would give more
    points than the cap allows (a cell that is mostly empty space has holes
    as large as the cell, and the padding must grow to hold them)."""
    f = 1.0
    for k in range(3):
        if pbc[k]:
            f *= (h[k] + 2.0 * pad) / h[k]
    pts = n * f
    cap = DEFAULT_MAX_HOLE_ATOMS if max_atoms is None else int(max_atoms)
    if pts > cap * CAP_POINTS_PER_ATOM + CAP_POINTS_FLOOR:
        raise LimitError(
            f"the holes of this crystal reach {pad:,.0f} A beyond its cell, so the void analysis would triangulate "
            f"about {int(pts):,} points (over the {cap * CAP_POINTS_PER_ATOM + CAP_POINTS_FLOOR:,.0f} the cap of "
            f"{cap:,} atoms allows): the cell is mostly empty space, or (for molecular crystals of mixed radii) "
            f"the padding does not settle; give a filled cell, or repeat it across its short directions")


# ---------------------------------------------------------------------- geometry
def tangent_spheres(c0, a, b, c, r0, ra, rb, rc, weighted=None, root=0):
    """Exact tangent spheres of tetrahedra (vectorised).

    ``c0`` (T, 3) first atom centre; ``a, b, c`` (T, 3) the other three
    centres *relative to c0*; radii (T,).  Returns (centre relative to c0,
    free radius, ok) where ok is False for flat (zero-volume) tetrahedra.
    ``weighted`` forces (True) or skips (False) the unequal-radii solution;
    by default it is used when the radii differ; ``root`` 1 takes the
    smaller root of its quadratic instead of the larger.
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
        r = _solve_radius(p, q, r0, root)
        y = p + q * r[:, None]
    else:
        y = p
        r = np.sqrt(_dot(p, p)) - r0
    return y, r, ok


def _solve_radius(p, q, r0, root=0):
    """Largest root r of |p + q r|^2 = (r + r0)^2 (``root`` 1: the smallest)."""
    alpha = _dot(q, q) - 1.0
    beta = 2.0 * (_dot(p, q) - r0)
    gamma = _dot(p, p) - r0 ** 2
    disc = np.sqrt(np.maximum(beta ** 2 - 4 * alpha * gamma, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        s1 = (-beta + disc) / (2 * alpha)
        s2 = (-beta - disc) / (2 * alpha)
        lin = -gamma / beta
    r = np.where(np.abs(alpha) > 1e-12, np.fmax(s1, s2) if root == 0 else np.fmin(s1, s2), lin)
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
    d, j = tree.query(crystal.positions, k=2, distance_upper_bound=lim, workers=_workers(2))
    bad = np.nonzero(np.isfinite(d[:, 1]))[0]
    if len(bad):
        i = int(bad[0])
        # the other of the two found (when two atoms coincide, the query may list either first)
        col = 1 if int(idx[j[i, 0]]) == i else 0
        k = int(idx[j[i, col]])
        dist = float(d[i, 1])
        sym = crystal.symbols
        if k == i:
            raise UserError(f"atom {i} ({sym[i]}) is {dist:.3f} A from its own periodic image; the cell is too "
                            f"small for its atoms, check the cell lengths")
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

    Returns a :class:`Voids` (list-like of :class:`Void`).  A job that takes
    more than a second shows a progress bar on stderr, on a terminal only
    (:mod:`crystalview.progress`).

    >>> import crystalview as cv
    >>> v = find_voids(cv.build("Cu", repeat=(2, 2, 2)))
    >>> {k: r["count"] for k, r in v.summary().items()}
    {'tetrahedral': 64, 'octahedral': 32}
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
_SLAB_POINTS = 700_000
_MIN_SPLIT_POINTS = 60_000
_CHUNK = 50_000
_QUERY_CHUNK = 50_000


def _dot(a, b):
    # element by element, so that the same tetrahedron gives the same bits in
    # every slab that sees it (einsum may sum in a different order)
    return a[:, 0] * b[:, 0] + a[:, 1] * b[:, 1] + a[:, 2] * b[:, 2]


def _frac(x, inv):
    return x[:, 0:1] * inv[0] + x[:, 1:2] * inv[1] + x[:, 2:3] * inv[2]


def _cart(f, cell):
    # element by element (not BLAS), so a row gives the same bits however many rows there are
    return f[:, 0:1] * cell[0] + f[:, 1:2] * cell[1] + f[:, 2:3] * cell[2]


def _index_type(n):
    return np.int32 if n < 2 ** 31 - 8 else np.int64


def _find_voids(crystal, *, channels=True, tolerance=0.1, max_atoms=None, reach=None, slabs=None, info=None):
    """find_voids; ``reach`` (first outer padding, A), ``slabs`` (number of
    slab triangulations) and ``info`` (filled with the padding used) are for
    the tests."""
    from scipy.spatial import cKDTree

    from .neighbours import cell_heights, with_images

    import time

    t_start = time.perf_counter()
    n = len(crystal)
    if n == 0:
        raise UserError("the crystal has no atoms; there are no holes to find")
    from ..occupancy import is_average

    if is_average(crystal):
        raise UserError("this is the average structure of partly occupied or shared sites (as read_cif gives it); "
                        "the hole analysis needs one atom per site: realise it first with "
                        "crystalview.occupancy.realise(crystal, seed=0), or read the file with cv.build(path)")
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
    ext = _EXT_S * s
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
        # BCC tetrahedral 0.70 s, simple cubic and diamond 0.87 s, s the atomic spacing).
        # (1.1 s would spare BCC and HCP with vacancies their second triangulation, but
        # sends the redo of some open structures on another path that does not settle.)
        reach = ext + (_REACH_S if equal else _REACH_MIXED_S) * s if pbc.any() else 0.0
    pad = float(reach)
    margin = _MARGIN_S * s       # overlap of neighbouring slabs, measured and redone the same way
    with contextlib.ExitStack() as stack:
        return _triangulate_and_reduce(crystal, n, pad, pad0, pts_t, _idx_t, tree, margin, radii_atoms, cell, inv,
                                       pbc, h, ext, lo_e, hi_e, equal, slabs, channels, tolerance, info, stack, s, t_start,
                                       max_atoms)


def _triangulate_and_reduce(crystal, n, pad, pad0, pts_t, _idx_t, tree, margin, radii_atoms, cell, inv, pbc, h, ext,
                            lo_e, hi_e, equal, slabs, channels, tolerance, info, stack, s, t0, max_atoms=None):
    from scipy.spatial import cKDTree

    from ..progress import bar
    from .neighbours import with_images

    import time

    t_slabs = 0.0
    pb = None
    checked = False
    for attempt in range(10):
        _check_padding(n, h, pbc, max(pad, pad0 if pad > pad0 else 0.0) + 0.5 * s, max_atoms)
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
        nsl = int(slabs) if slabs is not None else _slab_count(len(pts), span, margin)
        cuts = lo_e[k] + (hi_e[k] - lo_e[k]) * np.arange(nsl + 1) / nsl
        cuts[0], cuts[-1] = -np.inf, np.inf
        geo = dict(pts=pts, pert=pert, fpts=fpts, rad=rad, inv=inv, pbc=pbc, h=h, lo_e=lo_e, hi_e=hi_e, k=k,
                   equal=equal, channels=channels, cell=cell, pad=max(pad, 0.0), s=s, tree=tree,
                   rmax=float(radii_atoms.max()))
        if pb is None:
            pb = stack.enter_context(bar(f"hole analysis of {n:,} atoms: triangulating", nsl + 1))
        # each slab is checked on its own: one whose overlap was too thin is
        # redone alone, with its measured overlap (the others stand)
        margins = [margin] * nsl
        t1 = time.perf_counter()
        parts = _run_slabs(geo, [(cuts[j], cuts[j + 1], margins[j]) for j in range(nsl)], pb)
        redone = 0
        for _ in range(5):
            bad = [j for j, p in enumerate(parts)
                   if nsl > 1 and not p["need_margin"] <= margins[j] * (1 + 1e-12) + 1e-12]
            if not bad:
                break
            for j in bad:
                margins[j] = float(parts[j]["need_margin"]) * 1.05 + 1e-9
            redone += len(bad)
            pb.update(0, description=f"hole analysis of {n:,} atoms: triangulating again {len(bad)} slab(s)")
            for j, p in zip(bad, _run_slabs(geo, [(cuts[j], cuts[j + 1], margins[j]) for j in bad], None)):
                parts[j] = p
        else:
            raise UserError("the holes are too large for the cell (open space?); void analysis needs a filled cell")
        t_slabs += time.perf_counter() - t1
        n_own = sum(p["n_own"] for p in parts)
        need_pad = max((p["need_pad"] for p in parts), default=-np.inf)
        need_margin = max((p["need_margin"] for p in parts), default=-np.inf)
        ok_pad = (not pbc.any()) or need_pad <= pad * (1 + 1e-12) + 1e-12
        if n_own == 0 or ok_pad:
            break
        # grow by at most about twice at a time: a kept tetrahedron on the hull of a too-thin padding can ask
        # for a huge one (corundum's asked 119 A, 1.9 million points, where 13 A was enough); the next
        # attempt measures again, and only a padding that passes the check above is used
        pad = min(float(need_pad) * (1 + 1e-9) + 1e-9, 2.0 * max(pad, 0.0) + 2.0 * s)
    else:
        raise UserError("the holes are too large for the cell (open space?); void analysis needs a filled cell")
    if info is not None:
        info.update(pad=pad, margin=max(margins), margins=list(margins), attempts=attempt + 1, slabs_redone=redone,
                    slabs=nsl, points=len(pts), need_pad=float(need_pad), need_margin=float(need_margin), ext=ext,
                    axis=k)
    if n_own == 0:
        raise UserError("no enclosed hole found inside the cell; give a filled three-dimensional structure")
    pb.update(0, description=f"hole analysis of {n:,} atoms: holes and channels")
    t2 = time.perf_counter()
    out = _reduce(crystal, parts, pts, idx, rad, tree, _idx_t, radii_atoms, cell, pbc, equal, tolerance, channels, n)
    pb.update(nsl + 1 - pb.done)
    if info is not None:    # wall-clock seconds: points and images, slab triangulations (workers), join and holes
        info["seconds"] = {"prepare": t2 - t0 - t_slabs, "slabs": t_slabs, "holes": time.perf_counter() - t2}
    return out


#: The slab inputs of the running analysis, inherited by the forked workers
#: (so the points are shared copy-on-write, not pickled).
_GEO = None
#: Holes from which the channels are worked out in a forked process.
_FORK_CHANNELS = 100_000
_CALL = None


def _die_with_parent():
    """In a worker: ask the kernel to end this process when its parent dies
    (Linux prctl PR_SET_PDEATHSIG), so a killed analysis leaves no worker
    running on; elsewhere nothing."""
    try:
        import ctypes
        import signal

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)        # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError, ValueError):
        pass


def _call_job():
    fn, args = _CALL
    return fn(*args)


def _start_fork(fn, *args):
    """Start ``fn(*args)`` in one forked process (the arguments inherited,
    not pickled) where two cores and a safe fork allow; returns a function
    giving its result, or None (then the caller runs ``fn`` itself)."""
    import multiprocessing
    import threading

    global _CALL
    if (_workers(2) < 2 or "fork" not in multiprocessing.get_all_start_methods()
            or threading.active_count() != 1 or _CALL is not None):
        return None
    from concurrent.futures import ProcessPoolExecutor

    _CALL = (fn, args)
    try:
        ex = ProcessPoolExecutor(1, mp_context=multiprocessing.get_context("fork"), initializer=_die_with_parent)
        fut = ex.submit(_call_job)
    finally:
        _CALL = None

    def result():
        try:
            return fut.result()
        finally:
            ex.shutdown()
    return result


def _slab_job(cut_lo, cut_hi, margin):
    return _slab(_GEO, cut_lo, cut_hi, margin)


def _workers(nsl):
    import os

    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    return max(1, min(nsl, cores, 2))


def _run_slabs(geo, jobs, pb):
    """Triangulate and reduce the slabs.  Qhull holds the GIL, so threads do
    not run two triangulations at once; with two or more slabs and cores the
    slabs go to two forked worker processes (Linux, and only when this process
    runs no other thread, so that forking is safe), else they run here one by
    one.  Either way the parts are the same."""
    import multiprocessing
    import threading

    global _GEO
    nsl = len(jobs)
    workers = _workers(nsl)
    fork = (workers > 1 and "fork" in multiprocessing.get_all_start_methods()
            and threading.active_count() == 1 and _GEO is None)
    if not fork:
        parts = []
        for job in jobs:
            parts.append(_slab(geo, *job))
            if pb is not None:
                pb.update()
        return parts
    from concurrent.futures import ProcessPoolExecutor, wait

    _GEO = geo
    try:
        with ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("fork"),
                                 initializer=_die_with_parent) as ex:
            futs = [ex.submit(_slab_job, *job) for job in jobs]
            parts = []
            for f in futs:
                # wait in short steps, so the bar shows and its clock runs while the workers triangulate
                while pb is not None and not f.done():
                    wait([f], timeout=0.25)
                    pb.update(0)
                parts.append(f.result())
                if pb is not None:
                    pb.update()
    finally:
        _GEO = None
    return parts


_OWN_Q = 1e-5
_OWN_OFF = 3.1e-6


def _own_q(f, hk):
    """Ownership grid along the slab axis: fractional coordinate -> index of
    its 1e-5 A cell (monotone, so the slabs split the grid without gaps)."""
    with np.errstate(invalid="ignore", over="ignore"):
        q = np.floor((np.asarray(f, float) * hk + _OWN_OFF) / _OWN_Q)
    return np.nan_to_num(q, nan=-np.inf)


def _circumspheres(G, pts):
    """Circumsphere (radius, centre) of each tetrahedron ``G`` (T, 4) of
    ``pts``; a flat one (four atoms on one plane, split apart only by the
    jitter) has none of its own, radius -inf: its atoms lie on the spheres
    of its neighbours, which are counted."""
    T = len(G)
    rho_c = np.empty(T)
    cc = np.empty((T, 3))
    for a in range(0, T, _CHUNK):
        g = G[a:a + _CHUNK]
        c0 = pts[g[:, 0]]
        z = np.zeros(len(g))
        y, rr, okc = tangent_spheres(c0, pts[g[:, 1]] - c0, pts[g[:, 2]] - c0, pts[g[:, 3]] - c0, z, z, z, z,
                                     weighted=False)
        rho_c[a:a + _CHUNK] = np.where(okc, rr, -np.inf)
        cc[a:a + _CHUNK] = c0 + y
    return rho_c, cc


def _depth(f, h, pbc):
    """Distance (A) of fractional points ``f`` inside the cell along its
    periodic axes (negative beyond a face; +inf with no periodic axis)."""
    depth = np.full(len(f), np.inf)
    for ax in range(3):
        if pbc[ax]:
            depth = np.minimum(depth, h[ax] * np.minimum(f[:, ax], 1 - f[:, ax]))
    return depth


def _slab(geo, cut_lo, cut_hi, margin):
    """Triangulate one slab and reduce it to the tetrahedra whose centres it
    owns (plus the flat ones that join them), with what the holes and
    channels need; memory is released before returning."""
    from scipy.spatial import Delaunay, QhullError

    pts, fpts, k = geo["pts"], geo["fpts"], geo["k"]
    h, inv, pbc = geo["h"], geo["inv"], geo["pbc"]
    lo = cut_lo - margin / h[k]
    hi = cut_hi + margin / h[k]
    gi = np.nonzero((fpts[:, k] >= lo) & (fpts[:, k] <= hi))[0].astype(_index_type(len(pts)))
    try:
        tri = Delaunay(geo["pert"][gi], qhull_options=_QHULL_OPTIONS)
    except QhullError:
        try:
            tri = Delaunay(pts[gi], qhull_options="QJ Qbb")
        except QhullError:
            raise UserError("the atoms are coplanar or collinear (no three-dimensional hole); give a "
                            "three-dimensional structure or make the cell periodic") from None
    # each tetrahedron's atoms in ascending order, its neighbours (opposite
    # each atom) permuted alike: a sorting network on the columns
    G = gi[tri.simplices]
    NB = np.array(tri.neighbors)
    del tri, gi
    for i, j in ((0, 1), (2, 3), (0, 2), (1, 3), (1, 2)):
        sw = np.nonzero(G[:, i] > G[:, j])[0]
        G[sw, i], G[sw, j] = G[sw, j], G[sw, i]
        NB[sw, i], NB[sw, j] = NB[sw, j], NB[sw, i]
    del sw
    T = len(G)
    rad = geo["rad"]
    centre = np.empty((T, 3))
    r = np.empty(T)
    ok = np.empty(T, bool)
    inE = np.empty(T, bool)
    fck = np.empty(T)
    for a in range(0, T, _CHUNK):
        g = G[a:a + _CHUNK]
        c0 = pts[g[:, 0]]
        y, rr, kk = tangent_spheres(c0, pts[g[:, 1]] - c0, pts[g[:, 2]] - c0, pts[g[:, 3]] - c0,
                                    rad[g[:, 0]], rad[g[:, 1]], rad[g[:, 2]], rad[g[:, 3]], weighted=not geo["equal"])
        cc = c0 + y
        centre[a:a + _CHUNK] = cc
        r[a:a + _CHUNK] = rr
        ok[a:a + _CHUNK] = kk
        f = _frac(cc, inv)
        e = kk & np.isfinite(rr)
        for ax in range(3):
            e &= (f[:, ax] >= geo["lo_e"][ax]) & (f[:, ax] <= geo["hi_e"][ax])
        inE[a:a + _CHUNK] = e
        fck[a:a + _CHUNK] = f[:, k]
    if T:
        del g, c0, y, rr, kk, cc, f, e
    art_hit = False
    if not geo["equal"]:
        # with mixed radii a tetrahedron is kept by its tangent centre, which
        # for a nearly flat one of unequal atoms can lie far from it: slivers
        # on the outer surface of the padded points then count as kept, and
        # the next padding has new ones (a molecular hydrate asked for 54, 76,
        # 53, then 646 A).  Their circumspheres (what makes a tetrahedron a
        # Delaunay one) are measured here, and a kept one whose circumsphere
        # reaches past the padding and holds an atom of the crystal is no
        # Delaunay tetrahedron of the crystal at all: it is dropped.  Once the
        # padding suffices no kept tetrahedron reaches past it, so nothing is
        # dropped where the analysis settled before.
        rho_c, cc_all = _circumspheres(G, pts)
        fcc = _frac(cc_all, inv)
        past = rho_c - _depth(fcc, h, pbc)
        cand = np.nonzero(inE & np.isfinite(rho_c) & (past > geo["pad"] * (1 + 1e-12) + 1e-12))[0]
        if len(cand):
            fw = np.where(pbc, fcc[cand] - np.floor(fcc[cand]), fcc[cand])
            dn, _ = geo["tree"].query(_cart(fw, geo["cell"]), k=1)
            art = cand[dn < rho_c[cand] * (1 - 1e-9) - 1e-9]
            # kept tetrahedra beside a dropped one: their neighbour there is not the crystal's, so the
            # padding must grow (flagged below)
            art_mask = np.zeros(T, bool)
            art_mask[art] = True
            inE[art] = False
            art_hit = bool(len(art))
        fck_c = fcc[:, k].copy()
        del fcc, past
    # a tetrahedron belongs to the slab of its centre, read on the grid of
    # _OWN_Q A along the slab axis: the tetrahedra of one degenerate hole
    # (same centre but for rounding) then all go to the same slab, even when
    # that centre lies exactly on a cut
    qk = _own_q(fck, h[k])
    own = inE & (qk >= _own_q(cut_lo, h[k])) & (qk < _own_q(cut_hi, h[k]))
    own_idx = np.nonzero(own)[0]
    rho = r + rad[G[:, 0]]
    # flat (zero-volume) tetrahedra beside two or more kept ones; a slab
    # takes the one whose first kept neighbour it owns
    flat_idx = np.nonzero(~ok)[0]
    if len(flat_idx):
        nbf = NB[flat_idx]
        e4 = (nbf >= 0) & inE[np.maximum(nbf, 0)]
        use = e4.sum(1) >= 2
        # every slab that owns one of its kept neighbours takes it (so that
        # the maximum test can look through it; duplicates only repeat a
        # passage in the channels)
        mine = np.any(e4 & own[np.maximum(nbf, 0)], axis=1)
        flat_idx = flat_idx[use & mine]
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
    rowmap = np.full(T, -1, _index_type(T))
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
    # padding and overlap actually needed (see the bound in _find_voids).
    # What makes a tetrahedron a true Delaunay one is its circumsphere (the
    # sphere through its four atom centres) holding no other atom; with equal
    # radii that is the tangent sphere grown by the radius, with mixed radii
    # it is worked out apart (the tangent sphere of a nearly flat tetrahedron
    # of unequal atoms can be far larger, and would ask for padding for nothing)
    fo = _frac(centre[own_idx], inv)
    if geo["equal"]:
        rho_c, fck_c, fo_c = rho, fck, fo
    else:
        fo_c = _frac(cc_all[own_idx], inv)
        # no atom centre lies inside the circumsphere of a Delaunay tetrahedron, so no atom can come
        # nearer the tangent centre (surface to surface) than its own four when
        #     rho_c - |tangent centre - circumcentre| - r >= the largest radius
        # (every all-host tetrahedron of a solid solution): its free radius needs no query
        dl = centre[own_idx] - cc_all[own_idx]
        rk_safe = rho_c[own_idx] - np.sqrt(_dot(dl, dl)) - r[own_idx] >= geo["rmax"] - 1e-9
        del cc_all, dl
    need_pad = float(np.max(rho_c[own_idx] - _depth(fo_c, h, pbc))) if n_own else -np.inf
    if art_hit and n_own and np.any(valid & art_mask[nbs]):
        need_pad = max(need_pad, float(geo["pad"]) + float(geo["s"]))
    if art_hit:
        del art_mask
    # overlap: how far the sphere of every tetrahedron used (kept, or beside a
    # kept one) reaches beyond the slab
    ex = np.maximum(np.where(np.isfinite(cut_hi), (fck_c - cut_hi) * h[k] + rho_c, -np.inf),
                    np.where(np.isfinite(cut_lo), (cut_lo - fck_c) * h[k] + rho_c, -np.inf))
    used_nb = nbl[valid & inE[nbs]]
    need_margin = max(float(ex[own_idx].max()) if n_own else -np.inf,
                      float(ex[used_nb].max()) if len(used_nb) else -np.inf)
    del ex, used_nb, fck, fck_c, rho_c, fo_c
    # where the hole of each kept tetrahedron lies in the cell (canonical copy, wrapped centre)
    idt = _index_type(len(pts))
    snapped = np.where(np.abs(fo - np.round(fo)) < 1e-9, np.round(fo), fo)
    canon = np.all(~pbc | ((snapped >= 0) & (snapped < 1)), axis=1)
    wrapped = np.where(pbc, snapped - np.floor(snapped), snapped)
    wrapped = np.where(wrapped >= 1 - 1e-12, 0.0, wrapped)
    del snapped, fo
    out = dict(n_own=n_own, n_flat=len(flat_idx), V=G[rows].astype(idt), r=r[own_idx],
               wc=_cart(wrapped, geo["cell"]), canon=canon,
               nb=nbr.astype(idt), pend_rows=pr.astype(idt), pend_cols=pc.astype(np.int8),
               pend_keys=pend_keys.astype(idt), exp_rows=exp_rows.astype(idt),
               exp_keys=G[own_idx[exp_rows]].astype(idt), need_pad=need_pad, need_margin=need_margin)
    del nbr, nbl, valid, nbs, pend, touch, rowmap
    if not geo["equal"]:
        out["centre"] = centre[own_idx]
        out["rk_safe"] = rk_safe
        out["wrapped"] = wrapped
    del wrapped
    # union test of step 4 at the tetrahedron's own centre (with mixed radii the point tested is the
    # representative's centre, which is this one's unless its hole has other tetrahedra: those are redone)
    if n_own:
        inside = np.empty(n_own, bool)
        on_face = np.empty((n_own, 4), bool)
        for a0 in range(0, n_own, _CHUNK):
            sl = slice(a0, a0 + _CHUNK)
            V = G[own_idx[sl]]
            c0 = pts[V[:, 0]]
            a, b, c = pts[V[:, 1]] - c0, pts[V[:, 2]] - c0, pts[V[:, 3]] - c0
            bc, ca, ab = np.cross(b, c), np.cross(c, a), np.cross(a, b)
            det = _dot(a, bc)
            rel = centre[own_idx[sl]] - c0
            l1, l2, l3 = _dot(rel, bc) / det, _dot(rel, ca) / det, _dot(rel, ab) / det
            lam = np.column_stack([1 - (l1 + l2 + l3), l1, l2, l3])
            inside[sl] = np.all(lam > -_LAM_TOL, axis=1)
            on_face[sl] = np.abs(lam) <= _LAM_TOL
        out["inside"] = inside
        out["on_face"] = on_face
    # channel passages through the faces of the canonical kept tetrahedra
    if geo["channels"] and n_own:
        W = np.full((n_own, 4), np.nan)
        ci_all = np.nonzero(canon)[0]
        for a0 in range(0, len(ci_all), _CHUNK):
            ci = ci_all[a0:a0 + _CHUNK]
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
#: scipy's default options for a 3-d Delaunay plus Q5 (skip Qhull's final
#: search for the outer planes, which only reports the precision reached and
#: changes no facet; about 15 % of the triangulation time).
_QHULL_OPTIONS = "Qbb Qc Qz Q12 Q5"


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

    idt = _index_type(max(NR + 1, len(pts)))
    V = np.empty((NR, 4), idt)
    r = np.empty(K)
    wc = np.empty((K, 3))
    canon = np.empty(K, bool)
    nb = np.empty((NR, 4), idt)
    if not equal:
        centre = np.empty((K, 3))
        wrapped = np.empty((K, 3))
        rk_safe = np.empty(K, bool)
    # neighbours owned by another slab: matched by their four atoms (sorted keys)
    pend = [(j, p) for j, p in enumerate(parts) if len(p["pend_rows"])]
    found = None
    if pend:
        ek = np.vstack([p["exp_keys"] for p in parts])
        er = np.concatenate([offs_own[j] + p["exp_rows"].astype(np.int64) for j, p in enumerate(parts)])
        pk = np.vstack([p["pend_keys"] for _, p in pend])
        allk = np.vstack([ek, pk])
        o = np.lexsort((allk[:, 3], allk[:, 2], allk[:, 1], allk[:, 0]))
        ks = allk[o]
        new = np.ones(len(o), bool)
        new[1:] = np.any(ks[1:] != ks[:-1], axis=1)
        gk = np.empty(len(o), np.int64)
        gk[o] = np.cumsum(new) - 1
        del ks, new, o, allk
        lut = np.full(int(gk.max()) + 1, -1, np.int64)
        lut[gk[:len(ek)]] = er
        found = lut[gk[len(ek):]]
        del gk, lut, ek, er, pk
    a = 0
    for j, p in enumerate(parts):
        no, nf = p["n_own"], p["n_flat"]
        so, sf = slice(offs_own[j], offs_own[j] + no), slice(offs_flat[j], offs_flat[j] + nf)
        pv = p.pop("V")
        V[so], V[sf] = pv[:no], pv[no:]
        r[so] = p.pop("r")
        wc[so] = p.pop("wc")
        canon[so] = p.pop("canon")
        if not equal:
            centre[so] = p.pop("centre")
            rk_safe[so] = p.pop("rk_safe")
            wrapped[so] = p.pop("wrapped")
        loc = p.pop("nb")
        g = np.where(loc >= 0, glob(p, j, np.maximum(loc, 0)), -1)
        if len(p["pend_rows"]):
            m = len(p["pend_rows"])
            g[p["pend_rows"], p["pend_cols"]] = found[a:a + m]
            a += m
        nb[so], nb[sf] = g[:no], g[no:]
        del pv, loc, g
        for key in ("pend_keys", "exp_keys", "pend_rows", "pend_cols", "exp_rows"):
            p.pop(key, None)
    del found
    # merge degenerate duplicates: same centre (to 1e-5 A)
    q = np.floor((wc + 3.1e-6) / 1e-5).astype(np.int64)
    q -= q.min(axis=0) if K else 0
    span_q = q.max(axis=0) + 1 if K else np.ones(3, np.int64)
    if float(span_q[1]) * float(span_q[2]) < 2.0 ** 62:      # two sort keys instead of three
        q12 = q[:, 1] * span_q[2] + q[:, 2]
        o = np.lexsort((q12, q[:, 0]))
        new = np.ones(K, bool)
        new[1:] = (q12[o][1:] != q12[o][:-1]) | (q[o, 0][1:] != q[o, 0][:-1])
        del q12
    else:
        o = np.lexsort((q[:, 2], q[:, 1], q[:, 0]))
        qs = q[o]
        new = np.ones(K, bool)
        new[1:] = np.any(qs[1:] != qs[:-1], axis=1)
        del qs
    gid_kept = np.empty(K, np.int64)
    gid_kept[o] = np.cumsum(new) - 1
    del q
    rk = r
    kq = 16 if tree.n >= 16 else tree.n
    if not equal:
        from scipy.sparse import coo_matrix
        from scipy.sparse.csgraph import connected_components

        rk = np.array(r)
        ask = np.flatnonzero(~rk_safe)          # the tetrahedra whose free radius another atom may lower
        del rk_safe
        for a0 in range(0, len(ask), 4 * _QUERY_CHUNK):       # in chunks: (K, kq) arrays are large
            sl = ask[a0:a0 + 4 * _QUERY_CHUNK]
            # only atoms nearer than r + their radius can lower r: the query stops there
            reach_r = (float(np.max(r[sl])) + float(radii_atoms.max())) * (1 + 1e-9) + 1e-6
            dq, jq = _query_surfaces(tree, wc[sl], kq, reach_r, idx_t, radii_atoms,
                                     lambda sk: np.minimum(r[sl], sk.min(axis=1)))
            rk[sl] = np.minimum(r[sl], (dq - radii_atoms[idx_t[np.minimum(jq, len(idx_t) - 1)]]).min(axis=1))
            del dq, jq
        del ask
        # tangent centres closer than a quarter of the smallest radius are one
        # hole: the pairs are sought among the 1e-5 A cells (one point each, the
        # lowest row; the rows of a cell lie within 2e-5 A of it), and the holes
        # numbered by their lowest row, as if every row had been a point
        qrep = o[new]
        lengths = np.linalg.norm(cell, axis=1)
        span = np.where(pbc, lengths, 1e9)
        wq = wrapped[qrep]
        xs = np.where(pbc, wq, wq - np.floor(wq.min(axis=0))) * lengths
        xs = np.where(pbc, np.mod(xs, span), xs)
        del wq
        pairs = cKDTree(xs, boxsize=np.where(pbc, span, 0) if pbc.all() else None).query_pairs(
            0.25 * float(radii_atoms.min()), output_type="ndarray")
        del xs
        ng0 = len(qrep)
        graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(ng0, ng0))
        nc0, lab = connected_components(graph, directed=False)
        del graph, pairs
        low = np.full(nc0, K, np.int64)
        np.minimum.at(low, lab, qrep)
        rank = np.empty(nc0, np.int64)
        rank[np.argsort(low, kind="stable")] = np.arange(nc0)
        gid_kept = rank[lab[gid_kept]]
        del low, rank, lab, qrep
    ng = int(gid_kept.max()) + 1
    group = np.full(NR + 1, -1, _index_type(max(ng, NR) + 1))   # the last entry stands for "no neighbour"
    group[:K] = gid_kept

    # one representative per group: the largest radius, canonical copy first,
    # then the first tetrahedron
    if equal:
        rep = _representatives(o, new, np.round(rk, 9), canon)
    else:
        # with mixed radii the tangent spheres of one group differ (a cell of
        # five or more atoms on one sphere, cut into tetrahedra), and mirror
        # images of one another tie on the radius: the tie goes to the
        # smallest wrapped position, computed to the same bits in every slab,
        # so that the hole reported does not depend on the slab count
        # (a group of one row is its own representative: only the others are sorted)
        rep = np.empty(ng, np.int64)
        multi = np.bincount(gid_kept, minlength=ng)[gid_kept] > 1
        one = np.flatnonzero(~multi)
        rep[gid_kept[one]] = one
        sub = np.flatnonzero(multi)
        del multi, one
        order = sub[np.lexsort((wc[sub, 2], wc[sub, 1], wc[sub, 0], ~canon[sub], -np.round(rk[sub], 9),
                                gid_kept[sub]))]
        first = np.ones(len(order), bool)
        first[1:] = gid_kept[order][1:] != gid_kept[order][:-1]
        rep[gid_kept[order[first]]] = order[first]
        del order, first, sub
    del o, new
    g_pos = wc[rep]
    g_r = rk[rep]

    # maximum test: the centre lies inside the union of its group's tetrahedra
    nbk = nb[:K]
    nbg = group[np.where(nbk >= 0, nbk, NR)]
    internal = nbg == gid_kept[:, None]
    if NR > K:
        # a flat tetrahedron (four atoms on one circle, e.g. the square of an
        # octahedron that Qhull's rounding left between two square pyramids)
        # is seen through: the face is internal when the hole's group goes on
        # beyond it.  Each side of a flat quadrilateral has two of its faces,
        # so two or more of its other neighbours in the group means the far side.
        tt, ii = np.nonzero(nbk >= K)
        if len(tt):
            fn = nb[nbk[tt, ii]]
            fg = group[np.where(fn >= 0, fn, NR)]
            same = (fg == gid_kept[tt][:, None]) & (fn != tt[:, None])
            internal[tt, ii] = same.sum(axis=1) >= 2
            del fn, fg, same
        del tt, ii
    inside = np.concatenate([p.pop("inside") for p in parts])
    on_face = np.concatenate([p.pop("on_face") for p in parts])
    if not equal:
        redo = np.flatnonzero(rep[gid_kept] != np.arange(K))
        wf = _frac(wc[redo], np.linalg.inv(cell))
        df = _frac(wc[rep[gid_kept[redo]]], np.linalg.inv(cell)) - wf
        df = np.where(pbc, df - np.round(df), df)
        point = centre[redo] + df @ cell
        Vk = V[redo]
        c0 = pts[Vk[:, 0]]
        a_, b_, c_ = pts[Vk[:, 1]] - c0, pts[Vk[:, 2]] - c0, pts[Vk[:, 3]] - c0
        bc, ca, ab = np.cross(b_, c_), np.cross(c_, a_), np.cross(a_, b_)
        det = _dot(a_, bc)
        rel = point - c0
        l1, l2, l3 = _dot(rel, bc) / det, _dot(rel, ca) / det, _dot(rel, ab) / det
        lam = np.column_stack([1 - (l1 + l2 + l3), l1, l2, l3])
        inside[redo] = np.all(lam > -_LAM_TOL, axis=1)
        on_face[redo] = np.abs(lam) <= _LAM_TOL
        del redo, wf, df, point, Vk, c0, a_, b_, c_, bc, ca, ab, det, rel, l1, l2, l3, lam
    good = inside & np.all(~on_face | internal, axis=1)
    del inside, on_face, internal, nbg, nbk
    is_max = np.zeros(ng, bool)
    if good.any():
        is_max[gid_kept[good]] = True
    # a point inside an atom is no hole (with mixed radii the tangent centre of
    # a sliver between small and large atoms can fall inside a large one)
    is_max &= g_r > 0
    del good, V, wc, r, rk, rep       # what the channels need is nb, group, canon and the parts
    if not equal:
        del centre, wrapped

    # check against nearby atoms (true free radius) and find the bounding atoms
    maxg = np.nonzero(is_max)[0]
    M = len(maxg)
    # the channels need only the groups: on two cores they are worked out in
    # a forked process while this one measures the holes
    ch_job = None
    if channels and M >= _FORK_CHANNELS:
        ch_job = _start_fork(_channels_compact, parts, offs_flat, K, NR, nb, group, gid_kept, is_max, canon, g_pos)
    rmean_all = float(radii_atoms.mean())
    h_pos = g_pos[maxg]
    g_r_max, ncont, rbar, nbr_all, cert = _bounding(tree, idx_t, radii_atoms, h_pos, g_r[maxg], kq, tolerance,
                                                   equal, n)
    hole_of = np.arange(M)           # the hole each maximum group ends as (polished ones may meet)
    if not equal and M and not cert.all():
        h_pos, g_r_max, ncont, rbar, nbr_all, hole_of = _polish(tree, idx_t, radii_atoms, cell, pbc, h_pos, g_r_max,
                                                                ncont, rbar, nbr_all, cert, kq, tolerance, n)
        M = len(h_pos)
    ratio = np.where(rbar > 0, g_r_max / np.where(rbar > 0, rbar, 1.0), np.nan)
    kinds = np.full(M, "other", dtype="<U11")
    kinds[ncont == 4] = "tetrahedral"
    kinds[ncont == 6] = "octahedral"
    kinds[ncont == 8] = "cubic"
    kinds[(ncont >= 8) & (ratio >= 0.8)] = "vacancy"
    nbr_atoms = nbr_all[:, : max(int(ncont.max()), 1)].astype(np.int64) if M else np.zeros((0, 1), np.int64)
    del nbr_all

    ch = np.zeros((0, 2), np.int64)
    bn = np.zeros(0)
    if channels and len(maxg) > 1:
        ch, bn = ch_job() if ch_job is not None else _channels(parts, offs_flat, K, NR, nb, group, gid_kept, is_max,
                                                               canon, g_pos)
        newid = np.full(ng, -1, np.int64)
        newid[maxg] = hole_of
        ch = newid[ch]
        if M < len(maxg):            # polished holes that met: their channels join, none to itself
            keep = ch[:, 0] != ch[:, 1]
            ch, bn = _widest(np.sort(ch[keep], axis=1), bn[keep])
        bn = np.minimum(bn, np.minimum(g_r_max[ch[:, 0]], g_r_max[ch[:, 1]]))
    method = ("exact tangent spheres of the Delaunay tetrahedra (scipy/Qhull), periodic images, "
              + ("equal radii" if equal else "per-atom radii") + "; maxima only")
    return Voids(h_pos, g_r_max, kinds, nbr_atoms, ratio, ch, bn, method, n)


def _bounding(tree, idx_t, radii_atoms, pos, rq, kq, tolerance, equal, n):
    """The true free radius of each hole at ``pos`` (at most ``rq``), its
    bounding atoms (within ``tolerance`` x the mean radius of touching) and
    their mean radius; with mixed radii also whether the point is a true
    maximum of the free radius (:func:`_certify`)."""
    M = len(pos)
    rmean_all = float(radii_atoms.mean())
    g_r_max = np.empty(M)
    ncont = np.empty(M, np.int64)
    rbar = np.empty(M)
    nbr_all = np.empty((M, kq), _index_type(n))
    cert = np.ones(M, bool)
    # the holes in order of size, so that each chunk's query can stop at the
    # distance where no atom can bound its largest hole any more
    by_size = np.argsort(rq, kind="stable")
    rmax_all = float(radii_atoms.max())
    nw = _workers(2)            # the queries run on two threads (cKDTree releases the GIL)
    for a0 in range(0, M, _QUERY_CHUNK):
        sl = by_size[a0:a0 + _QUERY_CHUNK]
        gq = rq[sl]
        reach_q = (float(gq.max()) + tolerance * rmean_all + rmax_all) * (1 + 1e-9) + 1e-6
        d, j = tree.query(pos[sl], k=kq, distance_upper_bound=reach_q, workers=nw)
        lost = ~np.isfinite(d[:, 0])
        if lost.any():          # cannot happen (the hole touches its own atoms); kept safe
            d[lost], j[lost] = tree.query(pos[sl[lost]], k=kq, workers=nw)
        if equal:
            # one radius, and the distances come sorted: the bounding atoms
            # are the first nc of each row
            r0 = float(radii_atoms[0])
            slack = d - r0
            del d
            gm = np.minimum(gq, slack[:, 0])
            bound = slack <= (gm[:, None] + tolerance * rmean_all)
            del slack
            nc = bound.sum(1)
            rbar[sl] = np.where(nc > 0, r0, 0.0)
            w = max(int(nc.max()), 1)
            nbr_all[sl, w:] = -1
            nbr_all[sl, :w] = np.where(bound[:, :w], idx_t[np.minimum(j[:, :w], len(idx_t) - 1)], -1)
            del j
        else:
            # a large atom can come nearer (surface to surface) than the nearest small ones (centre to
            # centre): the query is widened until every atom that could bound the hole is in it
            d, j = _query_surfaces(tree, pos[sl], kq, reach_q, idx_t, radii_atoms,
                                   lambda sk: np.minimum(gq, sk.min(axis=1)) + tolerance * rmean_all, d, j)
            if d.shape[1] > nbr_all.shape[1]:
                nbr_all = np.concatenate([nbr_all, np.full((M, d.shape[1] - nbr_all.shape[1]), -1,
                                                           nbr_all.dtype)], axis=1)
            aj = idx_t[np.minimum(j, len(idx_t) - 1)]
            ra = radii_atoms[aj]
            slack = d - ra
            cert[sl] = _certify(pos[sl], tree.data, j, slack)
            del d, j
            gm = np.minimum(gq, slack.min(axis=1))
            bound = slack <= (gm[:, None] + tolerance * rmean_all)
            del slack
            nc = bound.sum(1)
            rbar[sl] = np.where(bound, ra, 0.0).sum(1) / np.maximum(nc, 1)
            srt = np.argsort(~bound, axis=1, kind="stable")
            nbr_all[sl, :bound.shape[1]] = np.take_along_axis(np.where(bound, aj, -1), srt, axis=1)
            nbr_all[sl, bound.shape[1]:] = -1
            del srt, aj, ra
        g_r_max[sl], ncont[sl] = gm, nc
        del bound
    return g_r_max, ncont, rbar, nbr_all, cert


#: Atoms considered around a point when certifying or polishing a hole of
#: mixed radii: the nearest by surface distance, every four of them tried.
_POLISH_ATOMS = 8
#: Holes placed one by one (Nelder-Mead, some 25 ms each) at most, after the
#: climb of all at once has placed what it can (none of 2,403 atoms of a
#: molecular hydrate needed it).
_MAX_CLIMBS = 2000
_TIE = 1e-9


def _combos(m):
    import itertools

    return np.array(list(itertools.combinations(range(m), 4)), np.int64)


def _origin_inside(u):
    """Whether the origin lies in the tetrahedron of the unit vectors ``u``
    (T, 4, 3), within rounding: then no direction increases the distance
    to all four spheres at once, and their tangent point is a maximum."""
    e1, e2, e3 = u[:, 1] - u[:, 0], u[:, 2] - u[:, 0], u[:, 3] - u[:, 0]
    det = _dot(e1, np.cross(e2, e3))
    ok = np.abs(det) > 1e-12
    det = np.where(ok, det, 1.0)
    rel = -u[:, 0]
    l1 = _dot(rel, np.cross(e2, e3)) / det
    l2 = _dot(e1, np.cross(rel, e3)) / det
    l3 = _dot(e1, np.cross(e2, rel)) / det
    lam = np.column_stack([1 - (l1 + l2 + l3), l1, l2, l3])
    return ok & np.all(lam >= -1e-7, axis=1)


def _certify(X, pts, j, slack):
    """True where the free radius is a local maximum at ``X``: the atoms at
    the least surface distance (to within 1e-9 A) surround the point, i.e.
    some four of them have the origin inside the tetrahedron of their unit
    vectors towards it.  ``j`` are the rows of ``pts`` near each point and
    ``slack`` their surface distances."""
    Q = len(X)
    m = min(_POLISH_ATOMS, slack.shape[1])
    srt = np.argsort(slack, axis=1, kind="stable")[:, :m]
    ss = np.take_along_axis(slack, srt, axis=1)
    na = (ss <= ss[:, :1] + _TIE).sum(1)
    jj = np.take_along_axis(j, srt, axis=1)
    ok = np.zeros(Q, bool)
    if m < 4:
        return ok
    P = pts[np.minimum(jj, len(pts) - 1)]
    U = X[:, None, :] - P
    with np.errstate(invalid="ignore", divide="ignore"):
        U /= np.linalg.norm(U, axis=2, keepdims=True)
    for c in _combos(m):
        rows = np.flatnonzero(~ok & (na > c[-1]))
        if not len(rows):
            continue
        ok[rows] = _origin_inside(U[rows][:, c])
    return ok


def _polish(tree, idx_t, radii_atoms, cell, pbc, pos, g_r_max, ncont, rbar, nbr_all, cert, kq, tolerance, n):
    """Move each hole of mixed radii that is not a true maximum (its point
    on the ordinary Delaunay tetrahedron is the tangent point of four atoms
    that do not surround it, or a fifth atom cuts that sphere) to the
    nearest true maximum: the tangent sphere of some four of the atoms
    nearest it, free of every atom, with the four around its centre.  Holes
    that meet are one.  Returns the holes' new arrays and, for each old
    hole, the index of the new one."""
    bad = np.flatnonzero(~cert)
    Y, R, found = _nearest_maxima(tree, idx_t, radii_atoms, pos[bad], g_r_max[bad])
    lost = np.flatnonzero(~found)
    Z = pos[bad[lost]]
    for attempt in range(5):
        if not len(lost):
            break
        # the nearest maximum lies beyond the atoms tried: climb towards it first, all points at once, then
        # (rare) one by one; a climb can stall on a ridge, so it is resumed
        if attempt >= 2 and len(lost) > _MAX_CLIMBS:
            break           # one by one would take minutes: said below
        Z = _ascend(tree, idx_t, radii_atoms, Z) if attempt < 2 else _climb(tree, idx_t, radii_atoms, Z)
        Y2, R2, f2 = _nearest_maxima(tree, idx_t, radii_atoms, Z, g_r_max[bad[lost]],
                                     m=_POLISH_ATOMS + (4 if attempt else 0))
        Y[lost[f2]], R[lost[f2]] = Y2[f2], R2[f2]
        lost, Z = lost[~f2], Z[~f2]
    if len(lost):
        raise UserError(f"{len(lost)} hole(s) of mixed radii could not be placed on a true maximum of the free "
                        f"radius; the structure's radii may be too far apart for this analysis")
    # wrapped into the cell, as every other hole
    inv = np.linalg.inv(cell)
    f = _frac(Y, inv)
    f = np.where(np.abs(f - np.round(f)) < 1e-9, np.round(f), f)
    f = np.where(pbc, f - np.floor(f), f)
    f = np.where(pbc & (f >= 1 - 1e-12), 0.0, f)
    pos = pos.copy()
    pos[bad] = _cart(f, cell)
    gr, nc, rb, nbr, _ = _bounding(tree, idx_t, radii_atoms, pos[bad], R, kq, tolerance, False, n)
    g_r_max, ncont, rbar = g_r_max.copy(), ncont.copy(), rbar.copy()
    g_r_max[bad], ncont[bad], rbar[bad] = gr, nc, rb
    if nbr.shape[1] > nbr_all.shape[1]:
        nbr_all = np.concatenate([nbr_all, np.full((len(nbr_all), nbr.shape[1] - nbr_all.shape[1]), -1,
                                                   nbr_all.dtype)], axis=1)
    nbr_all[bad] = -1
    nbr_all[bad, :nbr.shape[1]] = nbr
    # holes that are now one: same point (to 1e-6 A, periodic)
    from scipy.spatial import cKDTree

    lengths = np.linalg.norm(cell, axis=1)
    fa = _frac(pos, inv)
    xs = np.where(pbc, np.mod(fa, 1.0), fa) * lengths
    box = np.where(pbc, lengths, 0.0) if pbc.all() else None
    if box is not None:
        xs = np.mod(xs, lengths)
    # (a tree of the moved holes only: every hole is looked up in it, and the moved ones among themselves)
    moved = cKDTree(xs[bad], boxsize=box)
    dq, jq = moved.query(xs, k=1, distance_upper_bound=1e-6, workers=_workers(2))
    met = np.flatnonzero(np.isfinite(dq))
    pairs = np.column_stack([met, bad[jq[met]]])
    pp = moved.query_pairs(1e-6, output_type="ndarray")
    pairs = np.vstack([pairs, bad[pp]]) if len(pp) else pairs
    same = np.arange(len(pos))

    def root(x):
        while same[x] != x:
            x = same[x]
        return x

    for i, k in pairs.tolist():
        a, b = root(i), root(k)
        if a != b:
            same[max(a, b)] = min(a, b)
    while True:                     # every hole to the smallest of those it met (pointer jumping)
        nxt = same[same]
        if np.array_equal(nxt, same):
            break
        same = nxt
    keep = same == np.arange(len(pos))
    new_index = np.cumsum(keep) - 1
    hole_of = new_index[same]
    return pos[keep], g_r_max[keep], ncont[keep], rbar[keep], nbr_all[keep], hole_of


def _nearest_maxima(tree, idx_t, radii_atoms, X, rho0, m=_POLISH_ATOMS):
    """For points ``X``: the true maximum of the free radius nearest each,
    among the tangent spheres of every four of its nearest atoms (by
    surface distance) that are free of all atoms and surround their centre.
    Returns centres, radii and whether one was found."""
    Q = len(X)
    kk = min(3 * m, tree.n)
    d, j = tree.query(X, k=kk, workers=_workers(2))
    d, j = d.reshape(Q, -1), j.reshape(Q, -1)
    rad_t = radii_atoms[idx_t[np.minimum(j, len(idx_t) - 1)]]
    slack = d - rad_t
    m = min(m, kk)
    srt = np.argsort(slack, axis=1, kind="stable")[:, :m]
    jj = np.take_along_axis(j, srt, axis=1)
    P = tree.data[jj]                                   # (Q, m, 3)
    Rm = np.take_along_axis(rad_t, srt, axis=1)
    P24 = tree.data[j]                                  # (Q, kk, 3)
    best_d = np.full(Q, np.inf)
    Y = np.array(X, float)
    R = np.full(Q, np.nan)
    allc = _combos(m)
    # the atoms nearest by surface distance first: the fours among the five nearest, then those that take
    # the sixth, the seventh, the eighth, each only for the points still without a maximum
    for top in range(4, m + 1):
        rows_left = np.flatnonzero(~np.isfinite(best_d))
        if not len(rows_left):
            break
        for c, root in ((c, root) for c in allc[allc[:, -1] == top - 1] for root in (0, 1)):
            rows = rows_left
            Pr, Rr = P[rows], Rm[rows]
            c0 = Pr[:, c[0]]
            y, r, ok = _tangent_roots(c0, Pr[:, c[1]] - c0, Pr[:, c[2]] - c0, Pr[:, c[3]] - c0,
                                      Rr[:, c[0]], Rr[:, c[1]], Rr[:, c[2]], Rr[:, c[3]], root)
            yc = c0 + y
            ok &= np.isfinite(r) & (r > 0) & (r >= rho0[rows] - 1e-9)
            if not ok.any():
                continue
            U = yc[:, None, :] - Pr[:, c]
            with np.errstate(invalid="ignore", divide="ignore"):
                U /= np.linalg.norm(U, axis=2, keepdims=True)
                ok &= _origin_inside(U)
            w = np.flatnonzero(ok)
            if not len(w):
                continue
            ok[w] = (np.linalg.norm(yc[w, None, :] - P24[rows[w]], axis=2) - rad_t[rows[w]]).min(axis=1) >= r[w] - _TIE
            dist = np.linalg.norm(yc - X[rows], axis=1)
            better = ok & (dist < best_d[rows] - 1e-12)
            br = rows[better]
            Y[br], R[br], best_d[br] = yc[better], r[better], dist[better]
    found = np.isfinite(best_d)
    if found.any():
        # checked against every atom (a large one beyond the 24 nearest centres could cut the sphere)
        fi = np.flatnonzero(found)
        dq, jq = _query_surfaces(tree, Y[fi], 16, float(R[fi].max() + radii_atoms.max()) * (1 + 1e-9) + 1e-6,
                                 idx_t, radii_atoms, lambda sk: R[fi])
        sk = dq - radii_atoms[idx_t[np.minimum(jq, len(idx_t) - 1)]]
        found[fi] = sk.min(axis=1) >= R[fi] - _TIE
    return Y, R, found


def _tangent_roots(c0, a, b, c, r0, ra, rb, rc, root):
    """Like :func:`tangent_spheres` with unequal radii, but either root of
    the quadratic (``root`` 0 the larger, 1 the smaller): four spheres can
    have two externally tangent spheres, and the smaller can be the hole.
    ``ok`` also requires the sphere to touch all four (no real root, none)."""
    y, r, ok = tangent_spheres(c0, a, b, c, r0, ra, rb, rc, weighted=True, root=root)
    tol = 1e-9 * (1.0 + np.abs(r))
    with np.errstate(invalid="ignore"):
        for rel, ri in ((np.zeros_like(a), r0), (a, ra), (b, rb), (c, rc)):
            d = y - rel
            ok &= np.abs(np.sqrt(_dot(d, d)) - ri - r) <= tol
    return y, r, ok


def _ascend(tree, idx_t, radii_atoms, X, iters=80):
    """Climb the free radius from every point at once: steps along the
    direction that moves away from the nearest atoms (their unit vectors,
    weighted by how near each is, softly), lengthened after a gain and
    halved after a loss, until the steps are below 1e-6 A."""
    X = np.array(X, float)
    k = min(48, tree.n)           # generous: a large atom can be nearer, surface to surface, than small ones

    def look(P):
        d, j = tree.query(P, k=k, workers=_workers(2))
        d, j = d.reshape(len(P), -1), j.reshape(len(P), -1)
        sl = d - radii_atoms[idx_t[np.minimum(j, len(idx_t) - 1)]]
        return sl, tree.data[j]

    step = np.full(len(X), 0.05)
    sl, C = look(X)
    f = sl.min(axis=1)
    for _ in range(iters):
        live = step > 1e-6
        if not live.any():
            break
        i = np.flatnonzero(live)
        tau = np.maximum(step[i], 1e-4)[:, None]
        w = np.exp(-(sl[i] - f[i, None]) / tau)
        u = X[i, None, :] - C[i]
        with np.errstate(invalid="ignore", divide="ignore"):
            u /= np.linalg.norm(u, axis=2, keepdims=True)
        g = np.nansum(w[:, :, None] * u, axis=1)
        gn = np.linalg.norm(g, axis=1)
        g = np.where(gn[:, None] > 1e-12, g / np.where(gn > 1e-12, gn, 1.0)[:, None], 0.0)
        Y = X[i] + step[i, None] * g
        sy, cy = look(Y)
        fy = sy.min(axis=1)
        up = fy > f[i]
        X[i[up]], f[i[up]], sl[i[up]], C[i[up]] = Y[up], fy[up], sy[up], cy[up]
        step[i] = np.where(up, step[i] * 1.3, step[i] * 0.5)
    return X


def _climb(tree, idx_t, radii_atoms, X, steps=1500):
    """Hill-climb the free radius from each point (Nelder-Mead, one point at
    a time; for the rare hole whose maximum lies beyond its nearest atoms)."""
    from scipy.optimize import minimize

    def free(x):
        d, j = tree.query(x, k=min(32, tree.n))
        return float((d - radii_atoms[idx_t[np.minimum(j, len(idx_t) - 1)]]).min())

    out = np.array(X, float)
    for i, x in enumerate(out):
        for size in (0.1, 0.03, 0.01):
            res = minimize(lambda y: -free(y), x, method="Nelder-Mead",
                           options={"xatol": 1e-9, "fatol": 1e-12, "maxiter": steps,
                                    "initial_simplex": x + size * np.vstack([np.zeros(3), np.eye(3)])})
            x = res.x
        out[i] = x
    return out


def _query_surfaces(tree, X, k, upper, idx_t, radii_atoms, limit, d=None, j=None):
    """Nearest atoms of points ``X`` (centre distances ``d``, tree rows
    ``j``, sorted by distance, padded with inf), as many per row as it takes
    to hold every atom whose surface distance (d minus its radius) is at
    most ``limit(slack)`` of that row: an atom beyond the last one listed is
    at least its distance less the largest radius away.  With mixed radii a
    large atom can be nearer, surface to surface, than the k nearest centres
    (the holes of a hydrate among many H atoms were reported 0.38 A too big).

    >>> from scipy.spatial import cKDTree
    >>> pts = np.array([[0.5 * i, 0, 0] for i in range(1, 5)] + [[0, 3.0, 0]])
    >>> rad = np.array([0.1, 0.1, 0.1, 0.1, 2.9])
    >>> d, j = _query_surfaces(cKDTree(pts), np.zeros((1, 3)), 2, 10.0, np.arange(5), rad, lambda s: s.min(axis=1))
    >>> float((d - rad[j]).min().round(3))
    0.1
    """
    n = tree.n
    if d is None:
        d, j = tree.query(X, k=k, distance_upper_bound=upper, workers=_workers(2))
    d, j = d.reshape(len(X), -1), j.reshape(len(X), -1)
    rmax = float(radii_atoms.max())
    while True:
        slack = d - radii_atoms[idx_t[np.minimum(j, len(idx_t) - 1)]]
        more = np.isfinite(d[:, -1]) & (d[:, -1] - rmax <= limit(slack))
        del slack
        k = d.shape[1]
        if not more.any() or k >= n:
            return d, j
        k2 = min(2 * k, n)
        d2, j2 = tree.query(X[more], k=k2, distance_upper_bound=upper, workers=_workers(2))
        d = np.concatenate([d, np.full((len(X), k2 - k), np.inf)], axis=1)
        j = np.concatenate([j, np.full((len(X), k2 - k), n, j.dtype)], axis=1)
        d[more], j[more] = d2.reshape(-1, k2), j2.reshape(-1, k2)


def _representatives(o, new, rr, canon):
    """Per group (the runs of ``o`` that ``new`` starts, each run in
    ascending index order): the index of the largest ``rr``, a canonical one
    first among equals, then the smallest index; in linear time (the same as
    a lexsort on (group, -rr, not canonical))."""
    K = len(o)
    if K == 0:
        return np.zeros(0, np.int64)
    starts = np.flatnonzero(new)
    lens = np.diff(np.append(starts, K))
    r_o = rr[o]
    m = r_o == np.repeat(np.maximum.reduceat(r_o, starts), lens)
    del r_o
    c_o = np.where(m, canon[o], False)
    has_c = np.repeat(np.logical_or.reduceat(c_o, starts), lens)
    m &= c_o | ~has_c
    del c_o, has_c
    run = np.repeat(np.arange(len(starts)), lens)
    hit = np.flatnonzero(m)
    firsts = hit[np.flatnonzero(np.r_[True, run[hit][1:] != run[hit][:-1]])]
    return o[firsts]


def _channels_compact(*args):
    """_channels, the pairs as int32 where they fit (half the bytes to send back)."""
    P, W = _channels(*args)
    return P.astype(_index_type(len(args[7]) + 1)), W


def _channels(parts, offs_flat, K, NR, nb, group, gid_kept, is_max, canon, g_pos=None):
    """(pairs (M,2) of group ids, bottleneck radius (M,)) between maximum holes."""
    ng = len(is_max)
    key_parts, width_parts = [], []

    def add(g1, g2, w):
        # a passage through atoms that overlap across it (bonded atoms of
        # covalent radii) is no channel; one where they just touch (width 0
        # but for rounding) stays, as it always was
        keep = w > -1e-9
        g1, g2, w = g1[keep].astype(np.int64), g2[keep].astype(np.int64), w[keep]
        key_parts.append(np.minimum(g1, g2) * ng + np.maximum(g1, g2))
        width_parts.append(w)

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
                    add(ng4[m, i], ng4[m, k], rf[m])
    W = np.concatenate([p.pop("W") for p in parts])
    nbk = nb[:K]
    for i in range(4):
        w = W[:, i]
        t = np.nonzero(np.isfinite(w))[0]
        g1 = gid_kept[t]
        u = nbk[t, i]
        g2 = group[np.where(u >= 0, u, NR)]
        # a face between two canonical kept tetrahedra is measured from both
        # sides: counted once, from the higher row
        twice = (u >= 0) & (u < t) & canon[np.clip(u, 0, K - 1)] & (u < K)
        m = (g2 >= 0) & (g2 != g1) & ~twice
        if m.any():
            add(g1[m], g2[m], w[t[m]])
        del t, g1, u, g2, m
    del W
    if not key_parts:
        return np.zeros((0, 2), np.int64), np.zeros(0)
    keys = np.concatenate(key_parts)
    Wd = np.concatenate(width_parts)
    key_parts.clear()
    width_parts.clear()
    P, Wd = _widest_keys(keys, Wd, ng)
    del keys
    if not np.all(is_max):
        P, Wd = _contract(P, Wd, is_max, g_pos)
    return P, Wd


def _widest_keys(keys, W, ng):
    """_widest of the pairs given as keys x * ng + y."""
    o = np.argsort(keys)           # any order among equal keys: only their maximum is kept
    ks = keys[o]
    start = np.ones(len(ks), bool)
    np.not_equal(ks[1:], ks[:-1], out=start[1:])
    idx = np.nonzero(start)[0]
    del start
    u = ks[idx]
    del ks
    Wm = np.maximum.reduceat(W[o], idx)
    del o
    return _pairs_of(u, ng), Wm


def _pairs_of(keys, ng):
    P = np.empty((len(keys), 2), np.int64)
    np.floor_divide(keys, ng, out=P[:, 0])
    np.subtract(keys, P[:, 0] * ng, out=P[:, 1])
    return P


def _widest(P, W):
    """Unique pairs, keeping the widest passage of each."""
    if len(P) == 0:
        return P, W
    P = np.asarray(P, np.int64)
    ng = int(P.max()) + 1
    return _widest_keys(P[:, 0] * ng + P[:, 1], W, ng)


def _contract(P, W, is_max, pos=None):
    """Link maximum holes through non-maximum points.

    Each cluster of non-maximum points belongs to the hole it opens into
    most widely (the basin it drains to): the pairs are taken widest first
    (Kruskal's order on a union-find), a cluster joins the part its widest
    passage leads to, and a passage between two parts that each hold a
    hole is a channel of its width.  Equal widths (to 1e-9 A, as in
    symmetric crystals) are taken in the order of the points' positions
    ``pos`` (one row per group, rounded to 1e-6 A), so the result does not
    depend on how the groups are numbered.  Between any two holes the
    widest path (the largest sphere that can pass) is the same as when
    every pair of holes around a non-maximum point is linked through it at
    the narrower step, but an open network of such points (a molecular
    crystal, an oxide of covalent radii) no longer links every hole with
    every other.

    >>> P = np.array([[0, 2], [1, 2], [2, 3]]); W = np.array([0.5, 0.4, 0.3])
    >>> Q, V = _contract(P, W, np.array([True, True, False, True]))
    >>> Q.tolist(), V.tolist()
    ([[0, 1], [0, 3]], [0.4, 0.3])
    """
    nonmax = ~is_max
    touch = nonmax[P[:, 0]] | nonmax[P[:, 1]]
    direct_P, direct_W = P[~touch], W[~touch]
    TP, TW = P[touch], W[touch]
    if len(TP) == 0:
        return direct_P, direct_W
    nodes, inv = np.unique(TP, return_inverse=True)
    inv = inv.reshape(-1, 2)
    if pos is not None:
        q = np.round(np.asarray(pos, float)[nodes] / 1e-6)
        rank = np.empty(len(nodes), np.int64)
        rank[np.lexsort((q[:, 2], q[:, 1], q[:, 0]))] = np.arange(len(nodes))
    else:
        rank = np.arange(len(nodes))
    kr = rank[inv]
    order = np.lexsort((kr.max(axis=1), kr.min(axis=1), -np.round(TW, 9)))
    parent = {}

    def find(x):
        root = x
        while parent.get(root, root) != root:
            root = parent[root]
        while parent.get(x, x) != root:           # path compression
            parent[x], x = root, parent[x]
        return root

    rank_of = dict(zip(nodes.tolist(), rank.tolist()))
    ex, ey, ew = [], [], []
    for (x, y), w in zip(TP[order].tolist(), TW[order].tolist()):
        rx, ry = find(x), find(y)
        if rx == ry:
            continue
        mx, my = bool(is_max[rx]), bool(is_max[ry])     # a part's root is its hole, where it has one
        if mx and my:
            ex.append(min(rx, ry))
            ey.append(max(rx, ry))
            ew.append(w)
        elif mx:
            parent[ry] = rx
        elif my:
            parent[rx] = ry
        elif rank_of[rx] < rank_of[ry]:
            parent[ry] = rx
        else:
            parent[rx] = ry
    if not ex:
        return direct_P, direct_W
    EP = np.column_stack([np.array(ex, np.int64), np.array(ey, np.int64)])
    EW = np.array(ew)
    if len(direct_P) == 0:
        return _widest(EP, EW)
    # the direct pairs are unique and sorted already: merge the new ones in
    ng = int(max(direct_P.max(), EP.max())) + 1
    dk = direct_P[:, 0].astype(np.int64) * ng + direct_P[:, 1]
    if np.all(dk[1:] > dk[:-1]):
        ek, EW = _widest_keys(EP[:, 0] * ng + EP[:, 1], EW, ng)
        ek = ek[:, 0] * ng + ek[:, 1]
        at = np.searchsorted(dk, ek)
        hit = at < len(dk)
        hit[hit] = dk[at[hit]] == ek[hit]
        W = direct_W.copy()
        np.maximum.at(W, at[hit], EW[hit])
        keys = np.insert(dk, at[~hit], ek[~hit])
        return _pairs_of(keys, ng), np.insert(W, at[~hit], EW[~hit])
    return _widest(np.vstack([direct_P, EP]), np.concatenate([direct_W, EW]))
