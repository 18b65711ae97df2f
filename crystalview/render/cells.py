"""Which cell a figure (or a glTF file) draws: the crystal's own cell, or for
one conventional cell of hcp / simple hexagonal the hexagonal prism the
trade draws (crystalview/prism.py), with its atoms' shares and outline.

No vtk or pyvista here.
"""
from __future__ import annotations

import itertools

import numpy as np

from ..errors import UserError

CELL_SHAPES = ("prism", "primitive")

#: Shares of a lattice point on the hexagonal prism (common practice: any
#: materials-science textbook's hcp cell: 12 corners x 1/6 + 2 faces x 1/2 + 3 inside).
PLACE_SHARES = {"corner": 1.0 / 6.0, "face centre": 0.5, "inside": 1.0}


def boundary_images(frac, pbc, tol=1e-4):
    """Indices and fractional shifts of the periodic images of atoms lying on
    the cell faces, edges and corners (an atom at x = 0 also drawn at x = 1),
    so a cell shows all its 8 corners and 6 faces the way figures do.

    >>> idx, shifts = boundary_images(np.array([[0.0, 0.5, 0.5]]), (True, True, True))
    >>> idx.tolist(), shifts.tolist()
    ([0], [[1.0, 0.0, 0.0]])
    """
    idx, shifts = [], []
    opts = []
    for k in range(3):
        lo = frac[:, k] < tol
        hi = frac[:, k] > 1 - tol
        opts.append((lo, hi))
    for shift in itertools.product((-1, 0, 1), repeat=3):
        if shift == (0, 0, 0):
            continue
        m = np.ones(len(frac), bool)
        for k, s in enumerate(shift):
            if s == 0:
                continue
            if not pbc[k]:
                m[:] = False
                break
            m &= opts[k][0] if s == 1 else opts[k][1]
        if m.any():
            w = np.nonzero(m)[0]
            idx.append(w)
            shifts.append(np.tile(np.array(shift, float), (len(w), 1)))
    if not idx:
        return np.zeros(0, int), np.zeros((0, 3))
    return np.concatenate(idx), np.vstack(shifts)


def check_cell_shape(shape):
    """None, 'prism' or 'primitive', or a one-line UserError.

    >>> check_cell_shape("Prism"), check_cell_shape(None)
    ('prism', None)
    """
    if shape is None:
        return None
    key = str(shape).strip().lower().replace("_", "-")
    aliases = {"hexagonal": "prism", "hexagonal-prism": "prism", "hex": "prism", "conventional": "prism",
               "rhombic": "primitive", "rhombus": "primitive", "primitive-cell": "primitive"}
    key = aliases.get(key, key)
    if key not in CELL_SHAPES:
        raise UserError(f"cell '{shape}' unknown; use --cell prism (the hexagonal prism of hcp and simple "
                        f"hexagonal) or --cell primitive (the rhombic cell the crystal stores)")
    return key


def is_one_conventional_cell(crystal):
    """True when the crystal is exactly one conventional cell of its lattice:
    same cell, same atoms on the lattice's sites, no defects, no repeat.

    >>> import crystalview as cv
    >>> is_one_conventional_cell(cv.build("Mg")), is_one_conventional_cell(cv.build("Mg", repeat=(2, 2, 1)))
    (True, False)
    """
    lat = getattr(crystal, "lattice", None)
    if lat is None or len(crystal) != len(lat.basis_frac) or not all(bool(x) for x in crystal.pbc):
        return False
    md = crystal.metadata or {}
    if md.get("defects") or md.get("orient") or md.get("orientation") or md.get("realisation"):
        return False
    rep = md.get("repeat")
    if rep is not None and tuple(int(x) for x in rep) != (1, 1, 1):
        return False
    if not np.allclose(crystal.cell, lat.cell, atol=1e-6):
        return False
    if np.any(crystal.roles != 0):
        return False
    f = crystal.frac
    want = (np.asarray(lat.basis_frac, float) + lat.origin_frac) % 1.0
    d = (f[:, None, :] - want[None, :, :] + 0.5) % 1.0 - 0.5
    return bool(np.all(np.min(np.abs(d).max(axis=2), axis=1) < 1e-4))


def prism_applies(crystal, shape=None):
    """Whether to draw the hexagonal prism.  ``shape`` None: wherever it
    applies (one conventional hcp / simple hexagonal cell); 'primitive':
    never; 'prism': where it applies, else a UserError saying why not.

    >>> import crystalview as cv
    >>> prism_applies(cv.build("Mg")), prism_applies(cv.build("Mg"), "primitive"), prism_applies(cv.build("Cu"))
    (True, False, False)
    """
    from ..prism import has_prism

    shape = check_cell_shape(shape)
    ok = has_prism(crystal) and is_one_conventional_cell(crystal)
    if shape == "primitive":
        if not has_prism(crystal):
            raise UserError(_not_hex(crystal, "primitive"))
        return False
    if shape == "prism" and not ok:
        if not has_prism(crystal):
            raise UserError(_not_hex(crystal, "prism"))
        raise UserError("--cell prism draws one conventional hcp or simple hexagonal cell; this crystal has "
                        "repeats, defects or a new orientation, so it is drawn in its own cell (leave out --cell)")
    return ok


def _not_hex(crystal, shape):
    lat = getattr(crystal, "lattice", None)
    what = lat.prototype if lat is not None else "of no known lattice type"
    return (f"--cell {shape} chooses between the hexagonal prism and the rhombic primitive cell of hcp and "
            f"simple hexagonal crystals; this crystal is {what} and is drawn in its own cell (leave out --cell)")


class PrismAtoms:
    """The prism's atoms as a figure draws them.

    >>> import crystalview as cv
    >>> p = PrismAtoms(cv.build("Mg"))
    >>> len(p.positions), float(p.shares.sum())
    (17, 6.0)
    """

    def __init__(self, crystal):
        from ..prism import hexagonal_prism

        p = hexagonal_prism(crystal)
        self.prism = p
        self.positions = np.asarray(p.positions, float)
        self.place = list(p.place)
        self.layer = list(p.layer)
        self.src = source_atoms(crystal, self.positions)
        self.edges = np.stack([p.corners[p.edges[:, 0]], p.corners[p.edges[:, 1]]], axis=1)   # (18, 2, 3)
        self.shares = np.array([PLACE_SHARES[s] for s in self.place])

    def counts(self):
        return {k: self.place.count(k) for k in PLACE_SHARES}

    def planes(self):
        """Inward unit normals n and offsets d of the prism's 8 faces (inside: n . x >= d)."""
        c = self.prism.corners
        centre = c.mean(axis=0)
        out = []
        faces = [(0, 1, 2), (6, 8, 7)] + [(k, (k + 1) % 6, k + 6) for k in range(6)]
        for i, j, k in faces:
            n = np.cross(c[j] - c[i], c[k] - c[i])
            n /= np.linalg.norm(n)
            if n @ (centre - c[i]) < 0:
                n = -n
            out.append((n, float(n @ c[i])))
        return out

    def caption(self, cut=False):
        n = self.counts()
        total = float(self.shares.sum())
        parts = [f"{n['corner']} corners x 1/6", f"{n['face centre']} face centres x 1/2"]
        if n["inside"]:
            parts.append(f"{n['inside']} inside x 1")
        drawn = "" if cut else f"{len(self.positions)} atoms drawn, "
        return f"hexagonal prism: {drawn}" + " + ".join(parts) + f" = {total:g} atoms"


def source_atoms(crystal, points):
    """Index of the crystal atom each point is a periodic image of.

    >>> import crystalview as cv
    >>> c = cv.build("Cu")
    >>> source_atoms(c, c.positions + c.cell[0]).tolist()           # images one cell along a
    [0, 1, 2, 3]
    """
    f = np.linalg.solve(crystal.cell.T, np.asarray(points, float).T).T
    g = crystal.frac
    d = (f[:, None, :] - g[None, :, :] + 0.5) % 1.0 - 0.5
    err = np.abs(d).max(axis=2)
    src = np.argmin(err, axis=1)
    if np.any(err[np.arange(len(src)), src] > 1e-4):
        raise UserError("the hexagonal prism's sites do not match this crystal's atoms")
    return src


def prism_candidates(crystal, planes, radii):
    """Atoms and images whose spheres reach into the prism: (points, atom index).

    >>> import crystalview as cv
    >>> c = cv.build("Mg")
    >>> pts, src = prism_candidates(c, PrismAtoms(c).planes(), c.atom_radii())
    >>> len(pts) == len(src) >= 17
    True
    """
    rmax = float(np.max(radii))
    pts, idx = [], []
    for s in itertools.product(range(-2, 3), range(-2, 3), range(-1, 3)):
        p = crystal.positions + np.array(s, float) @ crystal.cell
        keep = np.ones(len(p), bool)
        for n, d in planes:
            keep &= p @ n - d > -rmax
        pts.append(p[keep])
        idx.append(np.nonzero(keep)[0])
    return np.vstack(pts), np.concatenate(idx)


def _oblique_candidates(L, pts, radius, max_index, elevation, mirror_every, off_mirror):
    """Low-index directions [uvw] (w > 0) of the cell ``L`` seen with its c
    axis up: ``elevation`` degrees above the base, at least ``off_mirror``
    degrees from the mirror planes every ``mirror_every`` degrees about c.
    Yields (uvw, smallest distance between the points ``pts`` on the page in
    units of ``radius``).

    >>> pts = np.array([[0.0, 0, 0], [1.8, 1.8, 0], [1.8, 0, 1.8], [0, 1.8, 1.8]])
    >>> uvw, sep = next(_oblique_candidates(np.eye(3) * 3.6, pts, 1.28, 3, (12.0, 28.0), 45.0, 8.0))
    >>> uvw, round(sep, 2)
    ((-3, -2, 1), 0.65)
    """
    cz = L[2] / np.linalg.norm(L[2])
    ax = L[0] / np.linalg.norm(L[0])
    rng = range(-max_index, max_index + 1)
    for uvw in itertools.product(rng, rng, rng):
        if uvw == (0, 0, 0) or np.gcd.reduce(np.abs(uvw)) != 1 or uvw[2] <= 0:
            continue
        t = np.array(uvw, float) @ L
        t /= np.linalg.norm(t)
        el = np.degrees(np.arcsin(np.clip(t @ cz, -1, 1)))
        if not (elevation[0] <= el <= elevation[1]):
            continue
        flat = t - (t @ cz) * cz
        az = np.degrees(np.arctan2(np.cross(ax, flat) @ cz, ax @ flat)) % mirror_every
        if min(az, mirror_every - az) < off_mirror:
            continue                              # along a mirror: back atoms hide behind front ones
        up = cz - (t @ cz) * t
        up /= np.linalg.norm(up)
        right = np.cross(up, t)
        q = np.stack([pts @ right, pts @ up], axis=1)
        d = np.linalg.norm(q[:, None] - q[None], axis=2) + np.eye(len(q)) * 1e9
        yield uvw, float(d.min()) / radius


def best_prism_view(crystal, max_index=5, elevation=(15.0, 30.0), apart=0.76):
    """A low-index view of the prism with the c axis up that looks a little
    down on it, off its mirror planes, with all its atoms apart on the page
    (centres at least ``apart`` x the atom radius apart): (view text, up text).

    >>> import crystalview as cv
    >>> best_prism_view(cv.build("Mg"))
    ('[7-813]', '[0001]')
    """
    from ..lattice import format_indices, miller_to_mb_direction

    pa = PrismAtoms(crystal)
    L = np.asarray(crystal.lattice.cell, float)
    R = float(np.min(crystal.atom_radii()))
    best = None
    for uvw, sep in _oblique_candidates(L, pa.positions, R, max_index, elevation, 30.0, 5.0):
        lab = format_indices(miller_to_mb_direction(uvw))
        score = (sep >= apart, -len(lab), round(sep, 2), uvw[0] - uvw[1], -abs(uvw[0]))
        if best is None or score > best[0]:
            best = (score, lab)
    if best is None:          # pragma: no cover - the search space always has one
        return "[2-1-10]", "[0001]"
    return best[1], "[0001]"


#: Small cubic and tetragonal crystals (at most this many conventional cells
#: each way) are drawn obliquely by default; larger ones along [001], where a
#: projection down the columns is the clearer picture.
OBLIQUE_MAX_REPEAT = 2


def oblique_cell_view(crystal, max_index=5, elevation=(12.0, 28.0), apart=0.6):
    """The default view of a small cubic or tetragonal crystal (up to
    2 x 2 x 2 conventional cells, not re-oriented): a low-index direction
    with the c axis up that looks a little down on the cell (``elevation``
    degrees), turned off the cell's mirror planes so no face is seen edge-on,
    and with every drawn atom apart on the page (centres at least ``apart``
    x the atom radius apart) where that is possible; among those the
    shortest indices.  (view text, up text), or None where the crystal is
    not such a cell (then the figure looks along [001]).

    >>> import crystalview as cv
    >>> oblique_cell_view(cv.build("Cu"))
    ('[3-11]', '[001]')
    >>> oblique_cell_view(cv.build("Cu", repeat=(3, 3, 3))) is None
    True
    """
    from ..lattice import format_indices

    lat = getattr(crystal, "lattice", None)
    md = crystal.metadata or {}
    if (lat is None or lat.family not in ("cubic", "tetragonal") or not all(bool(x) for x in crystal.pbc)
            or md.get("orient") or md.get("orientation") or len(crystal) == 0):
        return None
    L = np.asarray(lat.cell, float)
    try:
        rep = np.linalg.solve(L.T, np.asarray(crystal.cell, float).T).T
    except np.linalg.LinAlgError:
        return None
    n = np.rint(rep)
    if not np.allclose(rep, n, atol=1e-6) or not np.allclose(n, np.diag(np.diag(n))):
        return None
    if np.any(np.diag(n) < 1) or np.any(np.diag(n) > OBLIQUE_MAX_REPEAT):
        return None
    frac = crystal.frac
    idx, shifts = boundary_images(frac, crystal.pbc)
    pts = np.vstack([crystal.positions, (frac[idx] + shifts) @ np.asarray(crystal.cell, float)]) \
        if len(idx) else np.asarray(crystal.positions, float)
    R = float(np.min(crystal.atom_radii()))
    best = None
    for uvw, sep in _oblique_candidates(L, pts, R, max_index, elevation, 45.0, 8.0):
        lab = format_indices(uvw)
        # looking from the front right: +x toward the viewer's right, y receding
        score = (sep >= apart, -sum(abs(x) for x in uvw), round(sep, 2), uvw[0] > 0 > uvw[1], uvw)
        if best is None or score > best[0]:
            best = (score, lab)
    if best is None:
        return None
    return best[1], "[001]"
