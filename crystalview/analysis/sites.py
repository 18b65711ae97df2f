"""Named interstitial sites of every lattice type.

Each lattice type has a table of site kinds with their positions in the
conventional cell (International Tables Vol. A Wyckoff positions where they
exist).  Tetrahedral sites are placed at the exact tangent sphere of their four
bounding atoms, so a hexagonal close-packed crystal of any c/a (or a cell with
mixed atomic radii) gets the point its geometry defines, not the ideal-c/a
coordinate.  The free radius of a site is the smallest distance from its
centre to an atom centre minus that atom's hard-sphere radius
(``crystal.atom_radii()``).

For a perfect crystal everything is computed analytically with numpy from the
conventional cell (no scipy, no spglib), then mapped through the crystal's
supercell or orientation (``crystal.lattice.cell`` holds the conventional cell
in the crystal frame).  For a defected crystal (``metadata['defects']``, or
atoms missing / added / changed compared with the perfect lattice) the radius
of every site is measured against the atoms actually present; sites taken by
an atom are left out, and each empty lattice point is reported as a
``vacancy`` site.  Structures without a known lattice type (CIF imports,
heavily distorted cells) fall back on the generic void analysis
(:func:`crystalview.analysis.voids.find_voids`).

The body-centred cubic octahedral site is a *saddle* of the empty-sphere
function (an empty sphere there can grow by moving towards a tetrahedral
site); it is still the named site where carbon and nitrogen sit in ferrite,
so it is listed here.  The generic void analysis, which looks for maxima,
does not list it.
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np

from ..errors import UserError

_Q = (0.25, 0.75)
_FCC_OCT = ((0.5, 0.5, 0.5), (0.5, 0, 0), (0, 0.5, 0), (0, 0, 0.5))
_FCC_TET = tuple(itertools.product(_Q, _Q, _Q))
_BCC_FACE = ((0.5, 0.5, 0), (0.5, 0, 0.5), (0, 0.5, 0.5))
_BCC_EDGE = ((0.5, 0, 0), (0, 0.5, 0), (0, 0, 0.5))
_BCC_TET = tuple(
    tuple(v) for k in range(3) for v in
    [np.insert(np.array(p, float), k, 0.0) for p in ((0.5, 0.25), (0.5, 0.75), (0.25, 0.5), (0.75, 0.5))]
)
# the bcc tetrahedral sites fall into two classes once c differs from a
_BCT_TET_Z = tuple(p for p in _BCC_TET if p[2] in (0.25, 0.75))
_BCT_TET_XY = tuple(p for p in _BCC_TET if p[2] not in (0.25, 0.75))
_DIA_TET = ((0.5, 0.5, 0.5), (0.5, 0, 0), (0, 0.5, 0), (0, 0, 0.5),
            (0.75, 0.75, 0.75), (0.75, 0.25, 0.25), (0.25, 0.75, 0.25), (0.25, 0.25, 0.75))


def _diamond_ring_sites():
    """The 16 centres of the puckered six-rings: midway between neighbouring
    big tetrahedral holes of diamond cubic."""
    first = np.array(_DIA_TET[:4])
    second = np.array(_DIA_TET[4:])
    out = []
    for p in first:
        d = second[None, :, :] + np.array(list(itertools.product((-1, 0, 1), repeat=3)))[:, None, :] - p
        d = d.reshape(-1, 3)
        dist = np.linalg.norm(d, axis=1)
        for v in d[dist < dist.min() + 1e-9]:
            m = (p + v / 2.0) % 1.0
            if not any(np.allclose(m, o) for o in out):
                out.append(m)
    return tuple(tuple(float(x) for x in m) for m in out)


# kind, coordination, positions, note
_SADDLE = ("saddle of the empty-sphere function (an empty sphere there can grow towards a tetrahedral site); "
           "the named site where C and N sit in ferrite; distorted: 2 neighbours at a/2, 4 at a/sqrt(2)")
TEMPLATES = {
    "fcc": [("octahedral", 6, _FCC_OCT, ""), ("tetrahedral", 4, _FCC_TET, "")],
    "bcc": [("octahedral", 6, _BCC_FACE + _BCC_EDGE, _SADDLE), ("tetrahedral", 4, _BCC_TET, "")],
    "hcp": [("octahedral", 6, ((0, 0, 0), (0, 0, 0.5)), ""),
            ("tetrahedral", 4, ((1 / 3, 2 / 3, 5 / 8), (1 / 3, 2 / 3, 7 / 8), (2 / 3, 1 / 3, 1 / 8), (2 / 3, 1 / 3, 3 / 8)),
             "placed at the tangent sphere of its four atoms (moves with c/a)")],
    "sc": [("cubic", 8, ((0.5, 0.5, 0.5),), "cube centre")],
    "hex": [("trigonal prismatic", 6, ((1 / 3, 2 / 3, 0.5), (2 / 3, 1 / 3, 0.5)), "centre of a triangular prism")],
    "diamond": [("tetrahedral", 4, _DIA_TET, "the empty half of the face-centred tetrahedral sites (Fd-3m 8b)"),
                ("hexagonal", 6, None, "the hexagonal interstitial site: centre of a puckered six-ring of atoms, "
                 "midway between two tetrahedral holes (Fd-3m 16d); not an octahedron")],
    "B2": [("octahedral", 6, _BCC_FACE + _BCC_EDGE, _SADDLE.split(";")[0]), ("tetrahedral", 4, _BCC_TET, "")],
    "L1_2": [("octahedral", 6, _FCC_OCT, ""), ("tetrahedral", 4, _FCC_TET, "")],
    "L1_0": [("octahedral", 6, _FCC_OCT, ""), ("tetrahedral", 4, _FCC_TET, "")],
    # body-centred tetragonal: the octahedral sites split by the axis of their two nearest atoms; carbon in
    # martensite sits in the z sites, which is what makes the cell tetragonal (Honeycombe & Bhadeshia, from memory)
    "bct": [("octahedral", 6, ((0.5, 0.5, 0), (0, 0, 0.5)),
             "z sites: the two nearest atoms lie along c (the sites carbon takes in martensite)"),
            ("octahedral-xy", 6, ((0.5, 0, 0.5), (0, 0.5, 0.5), (0.5, 0, 0), (0, 0.5, 0)),
             "x and y sites: the two nearest atoms lie along a or b"),
            ("tetrahedral", 4, _BCT_TET_Z, "z sites: at a quarter and three quarters of c on the side faces"),
            ("tetrahedral-xy", 4, _BCT_TET_XY, "x and y sites: half-way up c on the side faces, and on the "
             "top and bottom faces")],
}


@dataclass(slots=True)
class Site:
    """One interstitial site.

    kind : "octahedral", "tetrahedral", "cubic", "trigonal prismatic", "hexagonal"
        (diamond cubic), "vacancy", ...
    position : Cartesian position (A).
    radius : free radius (A): distance to the nearest atom centre minus that
        atom's hard-sphere radius (the smallest such value over all atoms).
    neighbours : indices of the atoms that bound it (its coordination polyhedron).
    multiplicity : sites of this kind and label per conventional cell.
    label : kind plus the bounding species where a cell has several species.
    ratio : radius / mean hard-sphere radius of the bounding atoms (r/R).
    frac : fractional position in the conventional cell (None for voids).
    note : anything worth knowing (e.g. a saddle point).

    >>> import crystalview as cv
    >>> s = interstitial_sites(cv.build("Cu"), kinds="octahedral")[0]
    >>> s.kind, round(s.radius, 4), len(s.neighbours), s.label
    ('octahedral', 0.5294, 6, 'octahedral')
    """

    kind: str
    position: np.ndarray
    radius: float
    neighbours: np.ndarray
    multiplicity: int = 0
    label: str = ""
    ratio: float = float("nan")
    frac: tuple | None = None
    note: str = ""

    def __repr__(self):
        x, y, z = (float(v) for v in self.position)
        return (f"<Site {self.label or self.kind} at ({x:.4f}, {y:.4f}, {z:.4f}) A, r = {float(self.radius):.4f} A, "
                f"r/R = {float(self.ratio):.3f}, {len(self.neighbours)} atoms>")

    def as_dict(self):
        return {"kind": self.kind, "label": self.label, "position_A": [float(x) for x in self.position],
                "radius_A": float(self.radius), "ratio": float(self.ratio),
                "neighbours": [int(i) for i in self.neighbours], "multiplicity_per_cell": self.multiplicity,
                "frac_conventional": None if self.frac is None else [float(x) for x in self.frac],
                "note": self.note}


@dataclass
class SiteKind:
    """A kind of site of a lattice type, worked out in the conventional cell.

    >>> import crystalview as cv
    >>> fe = cv.build("Fe")
    >>> k = site_kinds(fe.lattice, fe.species_radii)[0]
    >>> k.kind, k.coordination, round(k.radius, 4), round(k.ratio, 3)
    ('octahedral', 6, 0.192, 0.155)
    """

    kind: str
    label: str
    coordination: int
    frac: np.ndarray                  # (m, 3) conventional fractional positions
    radius: float
    ratio: float
    neighbour_symbols: tuple
    neighbour_distances: tuple        # centre-to-centre distances of the bounding atoms (A)
    note: str = ""
    radii: np.ndarray = field(default=None)   # per position (equal for symmetric kinds)

    @property
    def multiplicity(self):
        return len(self.frac)

    def bounding_text(self):
        """'2 Fe at 1.4333 A + 4 Fe at 2.0270 A'."""
        groups = {}
        for s, d in zip(self.neighbour_symbols, self.neighbour_distances):
            key = (s, round(float(d), 4))
            groups[key] = groups.get(key, 0) + 1
        return " + ".join(f"{n} {s} at {d:.4f} A" for (s, d), n in sorted(groups.items(), key=lambda x: (x[0][1], x[0][0])))


def _images(cell, frac, n=1):
    shifts = np.array(list(itertools.product(range(-n, n + 1), repeat=3)), float)
    f = (np.asarray(frac, float)[None, :, :] + shifts[:, None, :]).reshape(-1, 3)
    return f @ cell, np.tile(np.arange(len(frac)), len(shifts))


def _formula(symbols, single_species=False):
    uniq = sorted(set(symbols), key=lambda s: (-list(symbols).count(s), s))
    if single_species:
        return ""
    return "".join(f"{s}{list(symbols).count(s)}" for s in uniq)


def site_kinds(lattice, species_radii):
    """The site kinds of a lattice type, worked out in its conventional cell
    (list of :class:`SiteKind`), using the hard-sphere radii given.

    >>> import crystalview as cv
    >>> cu = cv.build("Cu")
    >>> [(k.kind, k.coordination) for k in site_kinds(cu.lattice, cu.species_radii)]
    [('octahedral', 6), ('tetrahedral', 4)]
    """
    from .voids import tangent_sphere

    proto = lattice.prototype
    if proto not in TEMPLATES:
        raise UserError(f"no named interstitial sites for lattice type '{proto}'; use find_voids() for any structure")
    cell = np.asarray(lattice.cell, float)
    basis = np.asarray(lattice.basis_frac, float)
    syms = list(lattice.basis_symbols)
    try:
        brad = np.array([float(species_radii[s]) for s in syms])
    except KeyError as exc:
        raise UserError(f"no hard-sphere radius for {exc.args[0]} in this crystal; the host needs radius data "
                        f"(crystal.species_radii)") from None
    if np.any(~np.isfinite(brad)) or np.any(brad <= 0):
        raise UserError("the host atoms need positive hard-sphere radii (crystal.species_radii)")
    img, which = _images(cell, basis, 2)
    out = []
    for kind, coord, positions, note in TEMPLATES[proto]:
        if positions is None:
            positions = _diamond_ring_sites()
        by_label = {}
        for p in positions:
            x = np.asarray(p, float) @ cell
            d = np.linalg.norm(img - x, axis=1)
            o = np.argsort(d, kind="stable")[:coord]
            if kind.startswith("tetrahedral"):
                try:
                    centre, _ = tangent_sphere(img[o], brad[which[o]])
                except UserError:       # its four nearest atoms lie in one plane (a very tall cell): stays put
                    centre = x + np.inf
                if np.linalg.norm(centre - x) < 0.25 * d[o].min():
                    x = centre
                    d = np.linalg.norm(img - x, axis=1)
                    o = np.argsort(d, kind="stable")[:coord]
            slack = d - brad[which]
            r = float(slack.min())
            nsym = tuple(syms[k] for k in which[o])
            form = _formula(nsym, len(set(syms)) == 1)
            label = kind + (f" ({form})" if form else "")
            f = np.linalg.solve(cell.T, x)
            f = np.where(np.abs(f - np.round(f)) < 1e-12, np.round(f), f) % 1.0
            ent = by_label.setdefault(label, dict(frac=[], radii=[], nsym=nsym, nd=tuple(d[o]),
                                                  rbar=float(brad[which[o]].mean())))
            ent["frac"].append(f)
            ent["radii"].append(r)
        for label, e in by_label.items():
            radii = np.array(e["radii"])
            r = float(radii.min())
            if abs(r) < 1e-9:
                r = 0.0
            out.append(SiteKind(kind, label, coord, np.array(e["frac"]), r, r / e["rbar"], e["nsym"],
                                tuple(float(v) for v in e["nd"]), note, radii))
    if proto in _FREE_AXIS:
        _, saddles, splits = template_gaps(lattice, species_radii, out)
        for k in out:
            if k.label in saddles and "saddle" not in k.note:
                if k.label in splits:
                    per, off, rr = splits[k.label]
                    said = (_SPLIT_AT % (cell_ratio(cell), per, off, rr) if per > 1 else
                            _MOVED_AT % (cell_ratio(cell), off, rr))
                else:
                    said = _SADDLE_AT % cell_ratio(cell)
                k.note = (k.note + "; " if k.note else "") + said
    return out


#: Lattice types whose axial ratio c/a is free: their named sites are
#: checked against the holes the void analysis finds in the perfect cell.
_FREE_AXIS = ("bct", "L1_0", "hex", "hcp")
_SADDLE_AT = "a saddle of the empty-sphere function at c/a = %.3f, not a hole of its own"
_MOVED_AT = "a saddle of the empty-sphere function at c/a = %.3f: the hole lies %.3f A off the centre, r = %.4f A"
_SPLIT_AT = ("a saddle of the empty-sphere function at c/a = %.3f: the hole there splits into %d, each %.3f A "
             "off the centre with r = %.4f A")


def cell_ratio(cell):
    """c/a of a conventional cell (length of the third edge over the first).

    >>> round(cell_ratio(np.diag([2.0, 2.0, 3.0])), 3)
    1.5
    """
    cell = np.asarray(cell, float)
    return float(np.linalg.norm(cell[2]) / np.linalg.norm(cell[0]))


_GAPS = {}


def _named_sites_fall_short(crystal):
    lat = crystal.lattice
    if lat is None or lat.prototype not in _FREE_AXIS:
        return []
    return template_gaps(lat, {s: crystal.radius_of(s) for s in set(lat.basis_symbols)})[0]


def template_gaps(lattice, species_radii, kinds=None):
    """How the named sites of a lattice type with a free axial ratio fall
    short at this lattice's c/a: (holes of the perfect cell that no named
    site stands for, as (kind, radius) pairs; labels of named site kinds
    that are not holes but saddles; for a saddle kind whose hole splits
    off-centre, label -> (holes per site, offset A, radius A)).  Worked out
    once per cell and radii by the void analysis of the perfect
    conventional cell.  In a body-centred tetragonal cell of c/a 1.3 (Fe
    radii) the z octahedral site is a saddle and its hole, r = 0.497 A,
    lies 0.22 A off-centre on either side.

    >>> import crystalview as cv
    >>> fe = cv.build("bct", element="Fe", a=2.85, c=2.85 * 1.3)
    >>> missing, saddles, splits = template_gaps(fe.lattice, fe.species_radii)
    >>> missing, sorted(saddles), splits["octahedral"][0]
    ([], ['octahedral', 'octahedral-xy', 'tetrahedral-xy'], 4)
    """
    from ..crystal import Crystal
    from .voids import find_voids

    cell = np.asarray(lattice.cell, float)
    basis = np.asarray(lattice.basis_frac, float)
    syms = list(lattice.basis_symbols)
    rad = {s: float(species_radii[s]) for s in set(syms)}
    key = (lattice.prototype, np.round(cell, 9).tobytes(), np.round(basis, 9).tobytes(), tuple(syms),
           tuple(sorted(rad.items())))
    if key in _GAPS:
        return _GAPS[key]
    if kinds is None:
        kinds = site_kinds(lattice, species_radii)      # (which works the gaps out on its way, for its notes)
        if key in _GAPS:
            return _GAPS[key]
    conv = Crystal(cell, basis @ cell, symbols=syms, species_radii=rad)
    v = find_voids(conv, channels=False)
    inv = np.linalg.inv(cell)

    def hits(points, targets):
        if not len(points) or not len(targets):
            return np.zeros(len(points), bool)
        df = (points[:, None, :] - targets[None, :, :]) @ inv
        df -= np.round(df)
        return (np.linalg.norm(df @ cell, axis=2) < 1e-4).any(axis=1)

    named = np.vstack([k.frac @ cell for k in kinds]) if kinds else np.zeros((0, 3))
    hole = hits(v.positions, named)
    saddles = {k.label for k in kinds if not hits(k.frac @ cell, v.positions).any()}
    # a hole that is not at a named site but near a saddle one (within half its radius) is that site's hole
    # split off-centre (a compressed octahedron: CuAu's by 0.20 A); any other is a hole the names miss
    missing, splits = [], {}
    for p, kind, r in zip(v.positions[~hole], v.kinds[~hole], v.radii[~hole]):
        best = None
        for k in kinds:
            if k.label not in saddles:
                continue
            df = (p - k.frac @ cell) @ inv
            df -= np.round(df)
            dmin = float(np.linalg.norm(df @ cell, axis=1).min())
            if dmin < 0.5 * max(k.radius, 0.0) and (best is None or dmin < best[1]):
                best = (k, dmin)
        if best is None:
            missing.append((str(kind), float(r)))
        else:
            k, dmin = best
            n, off, rr = splits.get(k.label, (0, dmin, float(r)))
            splits[k.label] = (n + 1, max(off, dmin), max(rr, float(r)))
    splits = {lab: (max(1, round(n / len(next(k for k in kinds if k.label == lab).frac))), off, rr)
              for lab, (n, off, rr) in splits.items()}
    _GAPS[key] = (missing, saddles, splits)
    return missing, saddles, splits


# ---------------------------------------------------------------------- mapping into a crystal
def _expected_counts(crystal):
    lat = crystal.lattice
    ratio = crystal.volume / abs(np.linalg.det(lat.cell))
    per = {}
    for s in lat.basis_symbols:
        per[s] = per.get(s, 0) + 1
    return {s: n * ratio for s, n in per.items()}, len(lat.basis_symbols) * ratio


def is_perfect(crystal):
    """True when the crystal is its perfect lattice: no recorded defects,
    only host atoms, and the species counts of the perfect cell.

    >>> import crystalview as cv
    >>> c = cv.build("Cu", repeat=(2, 2, 2))
    >>> is_perfect(c), is_perfect(cv.add_vacancies(c, count=1))
    (True, False)
    """
    lat = crystal.lattice
    if lat is None or lat.prototype not in TEMPLATES:
        return False
    if crystal.metadata.get("defects"):
        return False
    if len(crystal) and np.any(crystal.roles != 0):
        return False
    exp, total = _expected_counts(crystal)
    if abs(total - len(crystal)) > 1e-6:
        return False
    counts = crystal.counts()
    if lat.site_species and any(not x.isalpha() for x in lat.site_species):
        # a realised solid solution: every lattice point holds one of its site's species
        from ..occupancy import parse_signature

        allowed = {s for sig in lat.site_species for s, _ in parse_signature(sig)}
        return set(counts) <= allowed and len({crystal.radius_of(s) for s in counts}) == 1
    return all(abs(counts.get(s, 0) - n) < 1e-6 for s, n in exp.items()) and set(counts) <= set(exp)


def _lattice_points(crystal, frac_conv, origin):
    """Cartesian positions of the conventional-cell points ``frac_conv``
    repeated over the crystal cell (each point once, periodic)."""
    lat = crystal.lattice
    conv = np.asarray(lat.cell, float)
    P = crystal.cell @ np.linalg.inv(conv)               # crystal rows in conventional fractions
    corners = np.array(list(itertools.product((0, 1), repeat=3)), float) @ P
    lo = np.floor(corners.min(axis=0) - 1e-9).astype(int) - 1
    hi = np.ceil(corners.max(axis=0) + 1e-9).astype(int) + 1
    grid = np.stack(np.meshgrid(*[np.arange(a, b) for a, b in zip(lo, hi)], indexing="ij"), -1).reshape(-1, 3)
    est = len(grid) * len(frac_conv)
    if est > 60_000_000:
        from ..errors import LimitError

        raise LimitError(f"listing the sites of this cell would try {est:,} positions; use a smaller crystal")
    fc = (grid[:, None, :] + np.asarray(frac_conv)[None, :, :] + origin).reshape(-1, 3)
    fn = fc @ np.linalg.inv(P)
    eps = 1e-7
    keep = np.ones(len(fn), bool)
    for k in range(3):
        keep &= (fn[:, k] > -eps) & (fn[:, k] < 1 - eps)
    which = np.tile(np.arange(len(frac_conv)), len(grid))[keep]
    fn = fn[keep]
    fn[np.abs(fn) < eps] = 0.0
    return fn @ crystal.cell, which


def _origin(crystal):
    """Offset (conventional fractions) of the lattice origin in the crystal,
    found from the atoms; None when the atoms do not sit on the lattice."""
    lat = crystal.lattice
    if len(crystal) == 0:
        return None
    conv = np.asarray(lat.cell, float)
    basis = np.asarray(lat.basis_frac, float)
    n = len(crystal)
    sample = crystal.positions[np.linspace(0, n - 1, min(n, 40)).astype(int)]
    F = np.linalg.solve(conv.T, sample.T).T
    dnn = 2.0 * min(crystal.radius_of(s) for s in set(lat.basis_symbols))
    tol = 0.2 * dnn / np.linalg.norm(conv, axis=1).max()

    def score(off):
        d = (F[:, None, :] - basis[None, :, :] - off)
        d -= np.round(d)
        return float(np.mean(np.any(np.all(np.abs(d) < tol, axis=2), axis=1)))

    cands = [lat.origin_frac, np.zeros(3)] + [((F[0] - b) + 0.5) % 1.0 - 0.5 for b in basis]
    best = max(cands, key=score)
    return best if score(best) >= 0.6 else None


def _nearest(crystal, points, k):
    """k nearest atoms (periodic) to each point: (distances, atom indices)."""
    n = len(crystal)
    k = min(k, max(n, 1) * 27)
    if n * len(points) <= 300_000:
        img, which = _images(crystal.cell, crystal.frac, 1)
        out_d = np.empty((len(points), k))
        out_i = np.empty((len(points), k), int)
        step = max(1, 300_000 // max(len(img), 1))
        for s0 in range(0, len(points), step):
            d = np.linalg.norm(points[s0:s0 + step, None, :] - img[None, :, :], axis=2)
            o = np.argsort(d, axis=1, kind="stable")[:, :k]
            out_d[s0:s0 + step] = np.take_along_axis(d, o, axis=1)
            out_i[s0:s0 + step] = which[o]
        return out_d, out_i
    from scipy.spatial import cKDTree

    from .neighbours import with_images

    cutoff = 2.6 * (crystal.volume / n) ** (1 / 3)
    pts, idx = with_images(crystal.positions, crystal.cell, crystal.pbc, cutoff)
    d, j = cKDTree(pts).query(points, k=k)
    return d, idx[np.minimum(j, len(idx) - 1)]


def interstitial_sites(crystal, kinds=None, max_atoms=None):
    """Every interstitial site of a crystal, as a list of :class:`Site`.

    kinds : optional kind name or list of names to keep ("octahedral", ...).
    Works for conventional cells, supercells and oriented cells of the
    lattice types fcc, bcc, hcp, sc, hex, diamond, B2, L1_2 and L1_0; for a
    defected crystal the holes actually present (vacancy holes included); for
    anything else the holes found by :func:`find_voids`.

    max_atoms : atom cap of the hole-by-hole measurement of a defected crystal
    and of the void analysis (default 300,000); over it a LimitError gives the
    estimated memory and time before anything is allocated.  Perfect crystals
    are worked out analytically and are not capped here.

    >>> import crystalview as cv
    >>> sites = interstitial_sites(cv.build("Cu"))
    >>> sorted({s.kind for s in sites}), len(sites)
    (['octahedral', 'tetrahedral'], 12)
    """
    want = None if kinds is None else ({kinds} if isinstance(kinds, str) else set(kinds))
    lat = crystal.lattice
    sites = None
    note = ""
    if lat is not None and lat.prototype in TEMPLATES:
        missing = _named_sites_fall_short(crystal)
        if missing:
            # the named sites do not hold at this axial ratio: the holes the crystal has instead
            note = (f"found by the generic void analysis: at c/a = {cell_ratio(lat.cell):.3f} the named {lat.prototype} "
                    f"sites miss holes of the perfect cell (largest r = {max(r for _, r in missing):.4f} A)")
        else:
            sites = _lattice_sites(crystal, max_atoms)
    if sites is None:
        sites = _void_sites(crystal, note=note, max_atoms=max_atoms)
    if want is not None:
        sites = [s for s in sites if s.kind in want]
    return sites


def _void_sites(crystal, note="", max_atoms=None):
    from .voids import find_voids

    v = find_voids(crystal, channels=False, max_atoms=max_atoms)
    return [Site(kind=str(v.kinds[i]), position=v.positions[i], radius=float(v.radii[i]),
                 neighbours=v.neighbours[i][v.neighbours[i] >= 0], multiplicity=0, label=str(v.kinds[i]),
                 ratio=float(v.ratios[i]), frac=None, note=note or "found by the generic void analysis")
            for i in range(len(v))]


#: Cost of measuring every hole of a defected crystal against the atoms
#: present, per atom: 108,000 atoms took 16 s and 410 MB (2-core reference machine).
DEFECTED_BYTES_PER_ATOM = 4_000
DEFECTED_SECONDS_PER_ATOM = 1.5e-4


def _lattice_sites(crystal, max_atoms=None):
    kinds = site_kinds(crystal.lattice, {s: crystal.radius_of(s) for s in set(crystal.lattice.basis_symbols)})
    perfect = is_perfect(crystal)
    if not perfect:
        from .voids import check_hole_atoms

        n = len(crystal)
        check_hole_atoms(n, n * DEFECTED_BYTES_PER_ATOM, n * DEFECTED_SECONDS_PER_ATOM, max_atoms,
                         "measuring every hole of this defected crystal")
    origin = crystal.lattice.origin_frac if perfect else _origin(crystal)
    if origin is None:
        return None
    out = []
    allfrac = np.vstack([k.frac for k in kinds])
    owner = np.concatenate([[i] * k.multiplicity for i, k in enumerate(kinds)])
    pos, which = _lattice_points(crystal, allfrac, origin)
    kind_of = owner[which]
    offsets = np.cumsum([0] + [k.multiplicity for k in kinds])
    local = which - offsets[kind_of]
    kmax = max(k.coordination for k in kinds)
    if perfect:
        d, nb = _nearest(crystal, pos, kmax) if len(pos) else (np.zeros((0, kmax)), np.zeros((0, kmax), int))
        for j in range(len(pos)):
            sk = kinds[kind_of[j]]
            fi = local[j]
            out.append(Site(sk.kind, pos[j], float(sk.radii[fi]), nb[j, : sk.coordination].copy(), sk.multiplicity,
                            sk.label, sk.ratio, tuple(float(v) for v in sk.frac[fi]), sk.note))
        return out
    # defected: measure every site against the atoms present
    radii = crystal.atom_radii()
    k = kmax + 8
    d, nb = _nearest(crystal, pos, k)
    slack = d - radii[nb]
    free = slack.min(axis=1)
    host_r = float(np.median([crystal.radius_of(s) for s in crystal.lattice.basis_symbols]))
    dnn = 2.0 * host_r
    # a site is taken when an atom sits within 0.3 of its perfect-lattice
    # centre-to-neighbour distance; a nearer atom elsewhere only shrinks it
    # (the free radius can then be negative: the hole is blocked)
    reach = np.array([min(k.neighbour_distances) for k in kinds])[kind_of]
    occupied = d[:, 0] < 0.3 * reach
    for j in np.nonzero(~occupied)[0]:
        sk = kinds[kind_of[j]]
        fi = local[j]
        nbj = nb[j, : sk.coordination]
        out.append(Site(sk.kind, pos[j], float(free[j]), nbj.copy(), sk.multiplicity, sk.label,
                        float(free[j] / radii[nbj].mean()), tuple(float(v) for v in sk.frac[fi]), sk.note))
    # empty lattice points: the hole a vacancy leaves
    lp, lw = _lattice_points(crystal, np.asarray(crystal.lattice.basis_frac, float), origin)
    if len(lp):
        d2, nb2 = _nearest(crystal, lp, 14)
        empty = d2[:, 0] > 0.35 * dnn
        if empty.any():
            m = np.nonzero(empty)[0]
            sl = d2[m] - radii[nb2[m]]
            fr = sl.min(axis=1)
            nearest_n = np.sum(d2[m] < d2[m, :1] + 0.1 * dnn, axis=1)
            for t, j in enumerate(m):
                nbj = nb2[j, : max(int(nearest_n[t]), 1)]
                out.append(Site("vacancy", lp[j], float(fr[t]), nbj.copy(), 0, "vacancy",
                                float(fr[t] / radii[nbj].mean()),
                                tuple(float(v) for v in np.asarray(crystal.lattice.basis_frac, float)[lw[j]]),
                                "empty lattice point (vacancy)"))
    return out


# ---------------------------------------------------------------------- summary
def site_table(crystal, max_atoms=None):
    """One row per site kind: radius (or spread for a defected crystal), r/R,
    count per conventional cell and in this crystal, coordinates, bounding atoms.

    >>> import crystalview as cv
    >>> for r in site_table(cv.build("Cu")):
    ...     print(r["kind"], round(r["radius_A"], 4), r["per_cell"], r["bounded_by"])
    ...
    octahedral 0.5294 4 6 Cu at 1.8075 A
    tetrahedral 0.2872 8 4 Cu at 1.5653 A
    """
    lat = crystal.lattice
    perfect = is_perfect(crystal)
    rows = []
    if lat is not None and lat.prototype in TEMPLATES and perfect and not _named_sites_fall_short(crystal):
        kinds = site_kinds(lat, {s: crystal.radius_of(s) for s in set(lat.basis_symbols)})
        vol_ratio = crystal.volume / abs(np.linalg.det(lat.cell))
        atoms_per_cell = lat.atoms_per_cell
        for k in kinds:
            rows.append({
                "kind": k.kind, "label": k.label, "radius_A": k.radius, "ratio": k.ratio,
                "per_cell": k.multiplicity, "per_atom": k.multiplicity / atoms_per_cell,
                "in_crystal": int(round(k.multiplicity * vol_ratio)),
                "frac_conventional": [[round(float(x), 6) for x in f] for f in k.frac],
                "bounded_by": k.bounding_text(), "coordination": k.coordination, "note": k.note,
            })
        return rows
    sites = interstitial_sites(crystal, max_atoms=max_atoms)
    groups = {}
    for s in sites:
        groups.setdefault(s.label or s.kind, []).append(s)
    for label, ss in groups.items():
        r = np.array([s.radius for s in ss])
        q = np.array([s.ratio for s in ss])
        rows.append({
            "kind": ss[0].kind, "label": label, "radius_A": float(np.median(r)), "ratio": float(np.median(q)),
            "radius_min_A": float(r.min()), "radius_median_A": float(np.median(r)), "radius_max_A": float(r.max()),
            "per_cell": ss[0].multiplicity or None,
            "per_atom": (len(ss) / len(crystal)) if len(crystal) else None,
            "in_crystal": len(ss), "frac_conventional": [list(map(float, ss[0].frac))] if ss[0].frac else [],
            "bounded_by": f"{len(ss[0].neighbours)} atoms", "coordination": len(ss[0].neighbours),
            "note": ss[0].note,
        })
    order = {"octahedral": 0, "tetrahedral": 1, "cubic": 2, "trigonal prismatic": 3, "hexagonal": 4, "vacancy": 5,
             "other": 6}
    rows.sort(key=lambda r: (order.get(r["kind"], 9), r["label"]))
    return rows


def sites_report(crystal, max_atoms=None):
    """The JSON-ready report `crystalview sites --json` prints (``max_atoms``:
    cap of the hole-by-hole analysis of a defected crystal, see
    :func:`interstitial_sites`).

    >>> import crystalview as cv
    >>> rep = sites_report(cv.build("Cu"))
    >>> rep["perfect"], [s["kind"] for s in rep["sites"]]
    (True, ['octahedral', 'tetrahedral'])
    """
    lat = crystal.lattice
    return {
        "name": crystal.metadata.get("name") or "/".join(crystal.elements),
        "phase": crystal.metadata.get("phase"),
        "structure": lat.title if lat is not None else "unknown",
        "a_A": crystal.metadata.get("a"), "c_A": crystal.metadata.get("c"), "atoms": len(crystal),
        "perfect": is_perfect(crystal),
        "host_radius_A": {s: crystal.radius_of(s) for s in crystal.elements},
        "radius_definition": "free radius: distance from the site to the nearest atom centre minus that atom's "
                             "hard-sphere radius; r/R = free radius / hard-sphere radius of the bounding atoms",
        "sites": site_table(crystal, max_atoms),
    }
