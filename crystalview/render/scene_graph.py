"""What a figure shows, as plain numpy data: atoms, sticks, cell edges,
overlays, legend entries and caption, plus the view (camera axes) and the
hidden-atom culling used for big crystals.

No vtk or pyvista here.  The raster renderer (figure.py), the vector writers
(figure.py) and the interactive window (viewer.py) all draw from a Scene.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from .. import palette
from ..crystal import ROLES
from ..errors import UserError
from . import style as S
from .cells import boundary_images  # noqa: F401  (also part of this module's names)


# ---------------------------------------------------------------- the view
@dataclass
class View:
    """Orthonormal camera axes: ``toward`` points from the crystal to the
    viewer (the zone axis [uvw] points out of the picture), ``up`` is up on
    the page and ``right`` completes a right-handed set.

    >>> import crystalview as cv
    >>> v = make_view(cv.build("Cu"), "[001]")
    >>> v.label, v.up_label, [int(round(x)) for x in v.toward]
    ('[001]', '[010]', [0, 0, 1])
    """

    toward: np.ndarray
    up: np.ndarray
    right: np.ndarray
    label: str
    up_label: str

    def project(self, pts):
        """(N, 3) -> (N, 3) of (right, up, toward) coordinates."""
        p = np.asarray(pts, float).reshape(-1, 3)
        return np.stack([p @ self.right, p @ self.up, p @ self.toward], axis=1)


def _ref_cell(crystal):
    return crystal.lattice.cell if crystal.lattice is not None else crystal.cell


def direction(crystal, text, what="view"):
    """Cartesian unit vector and tidy label of a direction '[uvw]' / '[uvtw]'.

    >>> import crystalview as cv
    >>> vec, label = direction(cv.build("Cu"), "[110]")
    >>> label, [round(float(x), 4) for x in vec]
    ('[110]', [0.7071, 0.7071, 0.0])
    """
    from ..lattice import direction_vector, parse_indices

    if isinstance(text, (list, tuple, np.ndarray)) and len(text) in (3, 4) and not isinstance(text, str):
        text = "[" + ",".join(str(int(v)) for v in text) + "]"
    s = str(text).strip()
    ind = parse_indices(s, kind="direction")
    if ind.family:
        raise UserError(f"--{what} '{text}' is a family <uvw>; give one direction in square brackets, e.g. [110]")
    if ind.four and not (crystal.lattice is not None and crystal.lattice.is_hexagonal):
        raise UserError(f"--{what} '{text}' has four indices, which only hexagonal cells use; give [uvw]")
    v = direction_vector(_ref_cell(crystal), ind)
    n = np.linalg.norm(v)
    return v / n, str(ind)


def make_view(crystal, view="[001]", up=None):
    """The :class:`View` along ``view`` with ``up`` (default: a cell axis, or the c axis of a hexagonal cell, as near the page's vertical as the view allows).

    >>> import crystalview as cv
    >>> v = make_view(cv.build("Cu"), "[111]", up="[001]")
    >>> v.label, v.up_label, round(float(v.up @ v.toward), 12)
    ('[111]', '[001]', 0.0)
    """
    t, label = direction(crystal, view, "view")
    ref = _ref_cell(crystal)
    if up is None:
        up_vec = None
        for k, name in ((2, "[001]"), (1, "[010]"), (0, "[100]")):
            cand = ref[k] / np.linalg.norm(ref[k])
            perp = cand - (cand @ t) * t
            if np.linalg.norm(perp) > 0.3:
                up_vec, up_label = perp, name
                break
        if crystal.lattice is not None and crystal.lattice.is_hexagonal:
            from ..lattice import miller_to_mb_direction, format_indices

            up_label = format_indices(miller_to_mb_direction(tuple(int(x) for x in up_label[1:-1])))
    else:
        u, up_label = direction(crystal, up, "up")
        up_vec = u - (u @ t) * t
        if np.linalg.norm(up_vec) < 1e-6:
            raise UserError(f"--up {up} is parallel to the view direction {label}; choose an up direction "
                            f"across the view, e.g. one at right angles to it")
    up_vec = up_vec / np.linalg.norm(up_vec)
    right = np.cross(up_vec, t)
    right /= np.linalg.norm(right)
    return View(t, up_vec, right, label, up_label)


def _defect_records(crystal, kind):
    return [d for d in ((crystal.metadata or {}).get("defects") or []) if d.get("kind") == kind]


def auto_view(crystal, slip=None):
    """(view, up) the figure uses when the user named no view: along the
    dislocation line (glide-plane normal up) for a dislocation crystal, along
    the tilt axis (boundary normal up) for a tilt boundary, an
    oblique view of the slip system (loading axis up) when ``slip`` (the
    slip analysis' dict) is given, else [001] with the default up.

    >>> import crystalview as cv
    >>> auto_view(cv.build("Cu"))
    ('[001]', None)
    """
    if slip:
        try:
            return slip_view(crystal, slip)
        except UserError:
            pass
    for d in _defect_records(crystal, "dislocation"):
        line = d.get("line_direction")
        orient = d.get("orient") or []
        if line:
            up = orient[1] if len(orient) == 3 and orient[2] == line else None
            return str(line), (str(up) if up else None)
    for d in _defect_records(crystal, "stacking"):      # edge-on: along a close-packed row, the normal up
        if d.get("parent_lattice") == "fcc":
            return "[1-10]", "[111]"
        if d.get("parent_lattice") == "hcp":
            return "[2-1-10]", "[0001]"
    for d in _defect_records(crystal, "tilt_boundary"):
        orient = d.get("orient") or []
        if len(orient) == 3:           # along the tilt axis, boundary normal up: the boundary lies flat
            return str(orient[2]), str(orient[1])
    return "[001]", None


def default_view(crystal, *, slip=None, sites=False, planes=(), cell_shape=None):
    """(view, up) of a figure, page or window whose user named no view: the
    hexagonal prism seen obliquely; otherwise :func:`auto_view` (a
    dislocation's line, a fault edge-on, a boundary's tilt axis, across the
    slip system with ``slip``); sites in a cubic crystal along [013]; a plane
    (``planes[0]``) obliquely so it shows as an area; a small cubic or
    tetragonal crystal obliquely with c up; else [001].

    >>> import crystalview as cv
    >>> default_view(cv.build("Cu")), default_view(cv.build("Cu", repeat=(3, 3, 3)))
    (('[3-11]', '[001]'), ('[001]', None))
    >>> default_view(cv.build("Mg"))
    ('[7-813]', '[0001]')
    """
    from .cells import best_prism_view, oblique_cell_view, prism_applies

    use_prism = prism_applies(crystal, cell_shape)
    if use_prism and slip is None:
        return best_prism_view(crystal)
    view, up = auto_view(crystal, slip)
    if view != "[001]" or up is not None:
        return view, up
    if sites and crystal.lattice is not None and crystal.lattice.family == "cubic":
        return "[013]", "[001]"          # along a cube axis the sites hide behind atoms and bonds
    if planes and not slip:
        return plane_view(crystal, list(planes)[0])
    if not use_prism:
        return oblique_cell_view(crystal) or (view, up)      # small cells: seen a little from above
    return view, up


def plane_view(crystal, plane, max_index=3, tilt_deg=30.0):
    """A low-index oblique view that shows a plane as an area and the cell as
    a box: the plane's normal about ``tilt_deg`` from the line of sight, and
    no cell axis seen end-on or across (each at least about 10 degrees out of
    the picture).  Returns (view text, None: the default up).

    >>> import crystalview as cv
    >>> view, up = plane_view(cv.build("Cu"), "(111)")
    >>> view != "[111]"
    True
    """
    from ..lattice import format_indices, parse_indices, plane_normal

    ind = parse_indices(str(plane), kind="plane")
    if ind.family:
        raise UserError(f"plane '{plane}' is a family {{hkl}}; give one plane in round brackets, e.g. (111)")
    ref = _ref_cell(crystal)
    nrm = plane_normal(ref, ind)
    nrm = nrm / np.linalg.norm(nrm)
    rng = np.arange(-max_index, max_index + 1)
    uvw = np.array(list(itertools.product(rng, rng, rng)), float)
    uvw = uvw[np.any(uvw != 0, axis=1)]
    uvw = uvw[np.gcd.reduce(np.abs(uvw).astype(int), axis=1) == 1]
    t = uvw @ ref
    t /= np.linalg.norm(t, axis=1)[:, None]
    axes = ref / np.linalg.norm(ref, axis=1)[:, None]
    ang = np.degrees(np.arccos(np.clip(t @ nrm, -1, 1)))            # the front of the plane faces us
    cost = (ang - tilt_deg) ** 2 + 2.0 * np.abs(uvw).sum(axis=1)
    cost[np.any(np.abs(t @ axes.T) < 0.17, axis=1)] = np.inf          # a cell face would be seen edge-on
    cost[np.any(np.abs(t @ axes.T) > 0.9, axis=1)] = np.inf           # or almost end-on
    if not np.isfinite(cost).any():
        return "[001]", None
    best = uvw[int(np.argmin(cost))].astype(int)
    if crystal.lattice is not None and crystal.lattice.is_hexagonal:
        from ..lattice import miller_to_mb_direction

        return format_indices(miller_to_mb_direction(tuple(int(x) for x in best))), None
    return format_indices(best), None


def slip_view(crystal, slip, max_index=3, tilt_deg=25.0):
    """A low-index view of a slip system: across the loading axis and the
    slip direction (both then show near full length), with the slip plane
    tilted about ``tilt_deg`` out of the line of sight so it reads as a
    plane, not an edge.  Returns (view text, up text = the loading axis).

    >>> import crystalview as cv
    >>> from crystalview.analysis.slip import slip_overlay
    >>> view, up = slip_view(cv.build("Cu"), slip_overlay(cv.build("Cu"), "[001]"))
    >>> isinstance(view, str) and view.startswith("[")
    True
    """
    from ..lattice import format_indices, parse_indices, plane_normal

    axis_txt = slip.get("load_axis")
    planes, dirs = slip.get("planes") or [], slip.get("directions") or []
    if not (axis_txt and planes and dirs):
        raise UserError("the slip analysis gave no slip system to look at")
    a, _ = direction(crystal, axis_txt, "slip-axis")
    d, _ = direction(crystal, dirs[0], "direction")
    nrm = plane_normal(_ref_cell(crystal), parse_indices(str(planes[0]), kind="plane"))
    nrm = nrm / np.linalg.norm(nrm)
    rng = np.arange(-max_index, max_index + 1)
    uvw = np.array(list(itertools.product(rng, rng, rng)), float)
    uvw = uvw[np.any(uvw != 0, axis=1)]
    g = np.gcd.reduce(np.abs(uvw).astype(int), axis=1)
    uvw = uvw[g == 1]
    t = uvw @ _ref_cell(crystal)
    t /= np.linalg.norm(t, axis=1)[:, None]
    tilt = np.arcsin(np.clip(np.abs(t @ nrm), 0, 1))
    cost = (2.0 * (tilt - math.radians(tilt_deg)) ** 2 + (t @ a) ** 2 + (t @ d) ** 2
            + 0.004 * np.abs(uvw).sum(axis=1))
    cost[np.abs(t @ a) > math.cos(math.radians(50))] = np.inf        # keep the axis well across the view
    cost[tilt < math.radians(12)] = np.inf                          # never the plane edge-on
    if not np.isfinite(cost).any():
        raise UserError("no low-index view shows this slip system")
    k = int(np.argmin(cost))
    best = uvw[k].astype(int)
    if best[np.nonzero(best)[0][0]] < 0:
        best = -best
    return format_indices(best), str(axis_txt)


# ---------------------------------------------------------------- the scene
@dataclass
class Scene:
    """Everything a figure draws, from :func:`build_scene`.

    >>> import crystalview as cv
    >>> sc = build_scene(cv.build("Cu"), "ball-and-stick", "[001]")
    >>> sc.n_atoms, len(sc.cell_edges), sc.legend[0][0]
    (14, 12, 'Cu (host)')
    """
    colours: list = field(default_factory=list)          # hex colours used by atoms
    atom_pos: np.ndarray = None
    atom_radius: np.ndarray = None
    atom_colour: np.ndarray = None                       # index into colours
    atom_src: np.ndarray = None                          # index of the crystal atom drawn
    atom_frac_shown: np.ndarray = None                   # share of the atom inside the cell (cell-cut, prism)
    atom_place: list = None                              # "corner", "face centre", "inside" (hexagonal prism)
    bonds: np.ndarray = None                             # (K, 2, 3)
    bond_atoms: np.ndarray = None                        # (K, 2) index into atom_pos of each stick's ends
    bond_radius: float = 0.0
    cell_edges: np.ndarray = None                        # (12, 2, 3)
    cut_meshes: list = field(default_factory=list)       # dict(points, faces, colour)
    overlay_spheres: list = field(default_factory=list)  # dict(pos, radius, colour, opacity, group, label)
    meshes: list = field(default_factory=list)           # dict(points, faces, colour, opacity, group, edges)
    arrows: list = field(default_factory=list)           # dict(start, vector, colour, label, group, double)
    markers: list = field(default_factory=list)          # dict(pos, radius, colour, group) empty outline spheres
    lines: list = field(default_factory=list)            # dict(segments (K, 2, 3), colour, width, group, label)
    legend: list = field(default_factory=list)           # (label, hex, shape)
    caption: list = field(default_factory=list)          # lines
    info: dict = field(default_factory=dict)             # numbers for picking and captions
    view: View = None
    crystal: object = None

    @property
    def n_atoms(self):
        return 0 if self.atom_pos is None else len(self.atom_pos)

    def groups(self):
        g = set()
        if self.bonds is not None and len(self.bonds):
            g.add("bonds")
        if self.cell_edges is not None:
            g.add("cell")
        for lst in (self.overlay_spheres, self.meshes, self.arrows, self.markers, self.lines):
            for item in lst:
                g.add(item["group"])
        return sorted(g)

    def _extent_groups(self):
        """(points, radii) groups whose silhouettes must fit the frame, uncopied."""
        out = []
        if self.n_atoms and not self.cut_meshes:
            out.append((self.atom_pos, self.atom_radius))
        if self.cell_edges is not None:
            out.append((self.cell_edges.reshape(-1, 3), np.zeros(len(self.cell_edges) * 2)))
        for s in self.overlay_spheres:
            out.append((s["pos"], np.broadcast_to(s["radius"], (len(s["pos"]),))))
        for m in self.meshes + self.cut_meshes:
            out.append((m["points"], np.zeros(len(m["points"]))))
        for a in self.arrows:
            out.append((np.array([a["start"], a["start"] + a["vector"]]), np.full(2, a.get("radius", 0.1) * 2.5)))
        for mk in self.markers:
            out.append((mk["pos"], np.full(len(mk["pos"]), mk["radius"])))
        for ln in self.lines:
            out.append((np.asarray(ln["segments"], float).reshape(-1, 3), np.zeros(2 * len(ln["segments"]))))
        return [(np.asarray(p, float).reshape(-1, 3), np.asarray(r, float).reshape(-1)) for p, r in out if len(p)]

    def projected_extent(self, view=None, centre=None, chunk=1_000_000):
        """Bounds of the picture along ``view`` (default the scene's), computed
        in chunks (no copy of the atoms): ``lo``, ``hi`` (right/up extent of
        the silhouettes), ``zlo``, ``zhi`` (depth of the centres), ``front``
        (nearest surface) and, with ``centre``, ``reach`` (farthest surface
        from it).

        >>> import crystalview as cv
        >>> sc = build_scene(cv.build("Cu"), "space-filling", "[001]")
        >>> e = sc.projected_extent()
        >>> bool(e["hi"][0] - e["lo"][0] > cv.build("Cu").lattice.a)
        True
        """
        v = view or self.view
        lo, hi = np.full(2, np.inf), np.full(2, -np.inf)
        zlo, zhi, front, reach = np.inf, -np.inf, -np.inf, 0.0
        c = None if centre is None else np.asarray(centre, float).reshape(3)
        groups = self._extent_groups() or [(np.zeros((1, 3)), np.zeros(1))]
        for pts, rad in groups:
            for a in range(0, len(pts), chunk):
                p, r = pts[a:a + chunk], rad[a:a + chunk]
                q = v.project(p)
                lo = np.minimum(lo, (q[:, :2] - r[:, None]).min(axis=0))
                hi = np.maximum(hi, (q[:, :2] + r[:, None]).max(axis=0))
                zlo, zhi = min(zlo, float(q[:, 2].min())), max(zhi, float(q[:, 2].max()))
                front = max(front, float((q[:, 2] + r).max()))
                if c is not None:
                    reach = max(reach, float((np.linalg.norm(p - c, axis=1) + r).max()))
        out = dict(lo=lo, hi=hi, zlo=zlo, zhi=zhi, front=front)
        if c is not None:
            out["reach"] = reach
        return out

    def extent_points(self):
        """Points and radii whose silhouettes must fit the frame."""
        pts, rad = [], []
        if self.n_atoms and not self.cut_meshes:
            pts.append(self.atom_pos)
            rad.append(self.atom_radius)
        if self.cell_edges is not None:
            pts.append(self.cell_edges.reshape(-1, 3))
            rad.append(np.zeros(len(self.cell_edges) * 2))
        for s in self.overlay_spheres:
            pts.append(s["pos"])
            rad.append(np.broadcast_to(s["radius"], (len(s["pos"]),)))
        for m in self.meshes + self.cut_meshes:
            pts.append(m["points"])
            rad.append(np.zeros(len(m["points"])))
        for a in self.arrows:
            p = np.array([a["start"], a["start"] + a["vector"]])
            pts.append(p)
            rad.append(np.full(2, a.get("radius", 0.1) * 2.5))
        for mk in self.markers:
            pts.append(mk["pos"])
            rad.append(np.full(len(mk["pos"]), mk["radius"]))
        for ln in self.lines:
            pts.append(np.asarray(ln["segments"], float).reshape(-1, 3))
            rad.append(np.zeros(2 * len(ln["segments"])))
        if not pts:
            return np.zeros((1, 3)), np.zeros(1)
        return np.vstack(pts), np.concatenate(rad)


def cell_edges(cell, origin=None):
    """The 12 edges (each a pair of 3D points) of the parallelepiped spanned by ``cell`` (rows) from ``origin``.

    >>> len(cell_edges(np.eye(3)))
    12
    """
    o = np.zeros(3) if origin is None else origin
    corners = {c: o + np.array(c, float) @ cell for c in itertools.product((0, 1), repeat=3)}
    edges = []
    for c in corners:
        for k in range(3):
            if c[k] == 0:
                d = list(c)
                d[k] = 1
                edges.append((corners[c], corners[tuple(d)]))
    return np.array(edges)


def plane_polygon(cell, normal, offset):
    """Corners (ordered) of the polygon where the plane normal . r = offset
    cuts the parallelepiped spanned by ``cell`` (rows).

    >>> len(plane_polygon(np.eye(3), np.array([1.0, 1.0, 1.0]), 1.0))      # the (111) triangle of a unit cube
    3
    """
    edges = cell_edges(cell)
    pts = []
    for a, b in edges:
        fa, fb = normal @ a - offset, normal @ b - offset
        if abs(fa) < 1e-9:
            pts.append(a)
        if abs(fb) < 1e-9:
            pts.append(b)
        if fa * fb < 0:
            t = fa / (fa - fb)
            pts.append(a + t * (b - a))
    if len(pts) < 3:
        return None
    pts = np.unique(np.round(np.array(pts), 9), axis=0)
    if len(pts) < 3:
        return None
    c = pts.mean(axis=0)
    n = normal / np.linalg.norm(normal)
    e1 = pts[0] - c
    if np.linalg.norm(e1) < 1e-9:
        e1 = pts[1] - c
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(n, e1)
    ang = np.arctan2((pts - c) @ e2, (pts - c) @ e1)
    return pts[np.argsort(ang)]


def fan_faces(n, start=0):
    """Triangles fanning a convex polygon of ``n`` corners numbered from ``start``.

    >>> fan_faces(4).tolist()
    [[0, 1, 2], [0, 2, 3]]
    """
    return np.array([[start, start + i, start + i + 1] for i in range(1, n - 1)], dtype=np.int64)


def hull_mesh(points):
    """(points, faces) of the convex hull of ``points`` (outward triangles), or None when they span no volume.

    >>> pts, faces = hull_mesh(np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1.0]]))
    >>> len(pts), len(faces)
    (4, 4)
    """
    from scipy.spatial import ConvexHull

    pts = np.asarray(points, float)
    if len(pts) < 4:
        return None
    try:
        h = ConvexHull(pts)
    except Exception:       # flat or degenerate neighbour sets have no solid hull
        return None
    faces = h.simplices.copy()
    # orient outward
    c = pts.mean(axis=0)
    for f in faces:
        n = np.cross(pts[f[1]] - pts[f[0]], pts[f[2]] - pts[f[0]])
        if n @ (pts[f[0]] - c) < 0:
            f[[1, 2]] = f[[2, 1]]
    return pts, faces


# ---------------------------------------------------------------- building
def _nn_distance(crystal):
    """The crystal's nearest-neighbour distance for sticks and shells.

    Not the shortest distance present: one interstitial, a dislocation core
    or a grain boundary brings a few atoms closer than the lattice allows,
    and a cut-off scaled from them would drop every other stick.  The
    lattice's own value is used (metadata, else the conventional cell),
    checked against the median nearest-neighbour distance over the atoms,
    which stands in for it for imported structures without a lattice."""
    typical = median_nn_distance(crystal)
    lat = lattice_nn_distance(crystal)
    if lat is not None and (not np.isfinite(typical) or 0.75 * typical <= lat <= 1.3 * typical):
        return lat
    return typical


def lattice_nn_distance(crystal):
    """Nearest-neighbour distance of the perfect lattice the crystal was made from, or None.

    >>> import crystalview as cv
    >>> round(lattice_nn_distance(cv.build("Cu")), 4)                  # a / sqrt(2)
    2.5561
    """
    v = (crystal.metadata or {}).get("nearest_neighbour_distance")
    try:
        v = float(v)
        if np.isfinite(v) and v > 0:
            return v
    except (TypeError, ValueError):
        pass
    if crystal.lattice is None:
        return None
    from ..analysis.neighbours import nearest_neighbour_distance
    from ..analysis.properties import conventional

    try:
        v = float(nearest_neighbour_distance(conventional(crystal)))
    except (UserError, KeyError, ValueError, TypeError):     # no usable basis: fall back to the atoms
        return None
    return v if np.isfinite(v) and v > 0 else None


def median_nn_distance(crystal, sample=20000):
    """Median over the atoms (a sample of up to ``sample``) of each atom's
    nearest-neighbour distance, periodic images included.

    >>> import crystalview as cv
    >>> round(median_nn_distance(cv.build("Fe")), 4)                   # a sqrt(3) / 2 in bcc
    2.4825
    """
    from ..analysis.neighbours import with_images

    n = len(crystal)
    if n < 2 and not any(crystal.pbc):
        return float("nan")
    # host atoms to host atoms where there are hosts: one interstitial in a small
    # cell would otherwise make its short bonds the typical distance
    host = crystal.roles == 0
    use = host if host.sum() >= 1 and (host.sum() < n) else np.ones(n, bool)
    ppos = crystal.positions[use]
    m = len(ppos)
    idx = np.arange(m) if m <= sample else np.linspace(0, m - 1, sample).astype(int)
    cutoff = max(2.0 * (crystal.volume / max(m, 1)) ** (1 / 3), 1.0) if crystal.volume > 0 else 5.0
    for _ in range(6):
        pts, _ = with_images(ppos, crystal.cell, crystal.pbc, cutoff)
        if len(pts) * len(idx) <= 2_000_000:        # small: plain numpy, no tree to build (or import)
            dd = np.linalg.norm(ppos[idx][:, None, :] - pts[None, :, :], axis=2)
            dd[dd > cutoff] = np.inf
            d = np.sort(dd, axis=1)[:, :2]
        else:
            from scipy.spatial import cKDTree

            d, _ = cKDTree(pts).query(ppos[idx], k=2, distance_upper_bound=cutoff)
        d = d[:, 1]
        d = d[np.isfinite(d) & (d > 1e-6)]
        if len(d) >= 0.5 * len(idx):
            return float(np.median(d))
        cutoff *= 2
    return float("nan")


def _neighbour_points(crystal, centre, cutoff):
    """Atoms (images included) within ``cutoff`` of a point: (points, atom index, distance)."""
    from scipy.spatial import cKDTree

    from ..analysis.neighbours import with_images

    pts, idx = with_images(crystal.positions, crystal.cell, crystal.pbc, cutoff)
    tree = cKDTree(pts)
    hits = tree.query_ball_point(np.asarray(centre, float), cutoff)
    hits = np.array(sorted(hits), dtype=int)
    if not len(hits):
        return np.zeros((0, 3)), np.zeros(0, int), np.zeros(0)
    d = np.linalg.norm(pts[hits] - centre, axis=1)
    return pts[hits], idx[hits], d


def _shell(points, idx, d, tol=0.12):
    """The first shell: points within (1 + tol) of the nearest (self excluded)."""
    keep = d > 1e-6
    points, idx, d = points[keep], idx[keep], d[keep]
    if not len(d):
        return points, idx
    sel = d <= d.min() * (1 + tol)
    return points[sel], idx[sel]


def _central_index(crystal, mask=None):
    centre = crystal.cell.sum(axis=0) / 2
    cand = np.arange(len(crystal)) if mask is None else np.nonzero(mask)[0]
    if not len(cand):
        return None
    return int(cand[np.argmin(np.linalg.norm(crystal.positions[cand] - centre, axis=1))])


def _plane_offset(crystal, normal, frac_pos=None):
    """The offset (normal . r) of the lattice plane through atoms nearest the
    middle of the cell; ties go to the lower plane (the textbook one)."""
    centre = crystal.cell.sum(axis=0) / 2
    vals = crystal.positions @ normal if len(crystal) else np.zeros(1)
    c = centre @ normal
    vals = np.unique(np.round(vals, 6))
    return float(vals[np.argmin(np.abs(vals - c) + 1e-7 * (vals > c))])


def classify_layers(crystal, normal_text=None, points=None):
    """Stacking position (0, 1, 2 for A, B, C) of each atom of a close-packed
    crystal, from its in-plane offset against the first layer; the second
    distinct position met going up the normal is called B.  ``points``: classify
    these positions instead (the atoms and images a figure draws, each by its
    own place: an image on a cell face can sit in another layer than its atom).

    Returns (positions (N,) int, normal label).  Raises UserError for
    crystals that are not close-packed along that normal.

    >>> import crystalview as cv
    >>> cls, plane = classify_layers(cv.build("Mg", repeat=(2, 2, 2)))
    >>> sorted(set(cls.tolist())), plane
    ([0, 1], '(0001)')
    """
    from ..lattice import parse_indices, plane_normal

    lat = crystal.lattice
    if normal_text is None:
        if lat is not None and lat.is_hexagonal:
            normal_text = "(0001)"
        else:
            normal_text = "(111)"
    ind = parse_indices(str(normal_text), kind="plane")
    n = plane_normal(_ref_cell(crystal), ind)
    n = n / np.linalg.norm(n)
    label = str(ind)
    pos = crystal.positions
    h = pos @ n
    nn = _nn_distance(crystal)
    # in-plane neighbours of an atom in the lowest layer
    i0 = int(np.argmin(h))
    pts, _idx, d = _neighbour_points(crystal, pos[i0], nn * 1.05)
    dh = (pts - pos[i0]) @ n
    inplane = (np.abs(dh) < 0.05 * nn) & (d > 1e-6)
    vecs = pts[inplane] - pos[i0]
    if len(vecs) < 6:
        raise UserError(f"the atoms do not form close-packed layers on {label}; stacking colours need "
                        f"close-packed planes, e.g. (111) for fcc or (0001) for hcp")
    a1 = vecs[0]
    cosang = vecs @ a1 / (np.linalg.norm(vecs, axis=1) * np.linalg.norm(a1))
    j = int(np.argmin(np.abs(cosang - 0.5)))
    a2 = vecs[j]
    if abs(cosang[j] - 0.5) > 0.05:
        raise UserError(f"the layers on {label} are not triangular nets; stacking colours need close-packed planes")
    basis = np.array([a1, a2])
    if points is not None:
        pos = np.asarray(points, float).reshape(-1, 3)
        h = pos @ n
    rel = pos - pos[i0] if points is None else pos - crystal.positions[i0]
    rel -= np.outer(rel @ n, n)
    st, *_ = np.linalg.lstsq(basis.T, rel.T, rcond=None)
    st = st.T
    st -= np.floor(st + 1e-6)
    cand = np.array([[0, 0], [1 / 3, 1 / 3], [2 / 3, 2 / 3]])
    # positions in a triangular net: (0,0), (1/3,1/3), (2/3,2/3) in the 60-degree basis
    dd = np.stack([np.linalg.norm(((st - c + 0.5) % 1.0) - 0.5, axis=1) for c in cand], axis=1)
    cls = np.argmin(dd, axis=1)
    # name them in order met going up: A first, the next new one B
    order = np.argsort(h, kind="stable")
    seen = []
    for c in cls[order]:
        if c not in seen:
            seen.append(int(c))
        if len(seen) == 3:
            break
    for c in range(3):
        if c not in seen:
            seen.append(c)
    remap = np.zeros(3, int)
    for k, c in enumerate(seen):
        remap[c] = k
    return remap[cls], label


def build_scene(crystal, style="ball-and-stick", view=None, up=None, *, sites=False, polyhedra=None,
                planes=(), directions=(), layers=None, defects=True, slip_axis=None, cell=None,
                complete_cell=True, cell_shape=None):
    """Everything a figure or the window will draw, as numpy arrays.

    ``view`` None picks one (:func:`auto_view`: along a dislocation's line,
    obliquely across a slip system, a low-index oblique view of the
    hexagonal prism, else [001]).  ``polyhedra`` is None,
    'coordination', 'sites' or 'both'.  ``layers`` is None, True (the
    close-packed planes of the lattice) or a plane '(111)'.  ``cell_shape``:
    None (the hexagonal prism for one conventional hcp / simple hexagonal
    cell, else the crystal's cell), 'prism' or 'primitive'.

    >>> import crystalview as cv
    >>> sc = build_scene(cv.build("Mg"))                      # the hexagonal prism, seen obliquely
    >>> sc.n_atoms, sc.info["cell"]
    (17, 'hexagonal prism')
    """
    from .cells import PrismAtoms, prism_applies, prism_candidates

    st = S.get_style(style) if isinstance(style, str) else style
    use_prism = prism_applies(crystal, cell_shape)
    slip_info = _slip(crystal, slip_axis) if slip_axis else None
    if view is None:
        view, auto_up = default_view(crystal, slip=slip_info, sites=sites, planes=planes, cell_shape=cell_shape)
        if up is None:
            up = auto_up
    v = make_view(crystal, view, up)
    sc = Scene(view=v, crystal=crystal)
    n = len(crystal)
    if n == 0:
        raise UserError("the crystal has no atoms; nothing to draw")
    if polyhedra not in (None, False, "coordination", "sites", "both"):
        raise UserError(f"polyhedra '{polyhedra}' unknown; use coordination, sites or both")

    colours, cidx, legend = palette.atom_colours(crystal)
    sc.colours = list(colours)
    sc.legend = [(lab, col, "ball") for lab, col in legend]
    radii = crystal.atom_radii()
    draw_r = radii * st.atom_scale

    cell_mat = crystal.cell
    frac = crystal.frac
    use_cell = st.cell_outline if cell is None else bool(cell)
    prism = PrismAtoms(crystal) if use_prism else None
    if st.cut and n > S.MAX_CUT_ATOMS:
        raise UserError(f"the cell-cut style makes a mesh per atom and is meant for a few cells "
                        f"({n:,} atoms here, limit {S.MAX_CUT_ATOMS:,}); use --style space-filling")
    # the points drawn: the crystal's atoms and their images on the cell (or prism) faces
    if st.cut:
        planes_cut = prism.planes() if prism is not None else cell_planes(cell_mat)
        if prism is not None:
            pts, src = prism_candidates(crystal, planes_cut, draw_r)
        else:
            from ..analysis.neighbours import with_images

            pts, src = with_images(crystal.positions, cell_mat, crystal.pbc, float(draw_r.max()))
    elif prism is not None:
        pts, src = prism.positions, prism.src
    else:
        # the atoms themselves, then the images on the cell faces: no (N, 3) shift array for the
        # atoms that stay where they are (a 50-million-atom figure keeps its memory for the atoms)
        src = np.arange(n)
        pts = np.asarray(crystal.positions, float)
        if complete_cell:
            bi, bs = boundary_images(frac, crystal.pbc)
            if len(bi):
                src = np.concatenate([src, bi])
                pts = np.concatenate([pts, pts[bi] + bs @ cell_mat])
    col = cidx[src].copy()

    # stacking layers recolour the host atoms: each drawn point by its own
    # position (a copy on a cell face may sit in another layer than its parent)
    if layers:
        cls, lab = classify_layers(crystal, None if layers is True else layers, points=pts)
        host = crystal.roles[src] == ROLES.index("host")
        base = len(sc.colours)
        names = "ABC"
        used = sorted(set(cls[host].tolist()))
        for k in range(3):
            sc.colours.append(palette.LAYER_COLOURS[names[k]])
        col[host] = base + cls[host]
        sc.legend = [e for e in sc.legend if not e[0].endswith("(host)") and "(" in e[0]] + \
            [(f"layer {names[k]} on {lab}", palette.LAYER_COLOURS[names[k]], "ball") for k in used]
        sc.info["layers"] = lab
        sc.info["layer_of_drawn"] = cls

    if st.cut:
        keep, share, meshes = _clip_spheres(pts, draw_r[src], planes_cut, col, sc.colours)
        sc.cut_meshes = meshes
        pts, src, col, share = pts[keep], src[keep], col[keep], share[keep]
        sc.atom_frac_shown = share
        sc.info["shares"] = _share_table(crystal, src, share)
        if "layer_of_drawn" in sc.info:
            sc.info["layer_of_drawn"] = sc.info["layer_of_drawn"][keep]
    sc.atom_pos = np.asarray(pts, float)
    sc.atom_src = np.asarray(src)
    sc.atom_radius = draw_r[src]
    sc.atom_colour = col
    if prism is not None:
        sc.info["cell"] = "hexagonal prism"
        sc.info["prism"] = dict(counts=prism.counts(), atoms_in_prism=float(prism.shares.sum()))
        if not st.cut:
            sc.atom_place = list(prism.place)
            sc.atom_frac_shown = prism.shares
    if use_cell:
        sc.cell_edges = prism.edges if prism is not None else outline_edges(crystal)

    nn = None
    if st.bonds:
        nn = _nn_distance(crystal)
        sc.bond_atoms = _bonds(sc.atom_pos, crystal, nn)
        sc.bonds = np.stack([sc.atom_pos[sc.bond_atoms[:, 0]], sc.atom_pos[sc.bond_atoms[:, 1]]], axis=1)
        sc.bond_radius = S.BOND_RADIUS * float(np.min(radii))
        sc.info["bond_cutoff_A"] = round(nn * (1 + S.BOND_TOLERANCE), 4)

    # ------------------------------------------------------------ overlays
    if sites or polyhedra in ("sites", "both"):
        site_list = _get_sites(crystal)
    else:
        site_list = []
    if sites:
        # sites share the atoms' drawing scale, so a hole never looks bigger than
        # it is next to the atoms around it (full size in the true-radius styles)
        site_scale = st.atom_scale if st.atom_scale < 1 else 1.0
        kinds = {}
        for s in site_list:
            kinds.setdefault(s.kind, []).append(s)
        for kind, lst in kinds.items():
            pos = np.array([s.position for s in lst], float)
            rad = np.array([s.radius for s in lst], float)
            f = crystal.to_fractional(pos)
            bi, bs = boundary_images(f, crystal.pbc)
            pos = np.vstack([pos, pos[bi] + bs @ cell_mat]) if len(bi) else pos
            rad = np.concatenate([rad, rad[bi]]) if len(bi) else rad
            col = palette.ROLE_COLOURS.get(f"site-{kind}", palette.ROLE_COLOURS["site-other"])
            note = " (drawn at the atoms' scale)" if site_scale < 1 else ""
            sc.overlay_spheres.append(dict(pos=pos, radius=rad * site_scale, colour=col, opacity=1.0, group="sites",
                                           label=f"{kind} site (free radius {rad[0]:.3f} \u00c5){note}",
                                           true_radius=rad))
            sc.legend.append((f"{kind} site, r = {rad[0]:.3f} \u00c5", col, "ball"))
        if kinds and site_scale < 1:
            sc.legend.append((f"(drawn x {site_scale:g}, as the atoms)", S.TEXT_COLOUR, "none"))
    if polyhedra in ("coordination", "both"):
        nn = nn or _nn_distance(crystal)
        special = crystal.roles != ROLES.index("host")
        centres = np.nonzero(special)[0][:20] if special.any() else [_central_index(crystal)]
        col = palette.ROLE_COLOURS["host"]
        for i in centres:
            pts, _idx, d = _neighbour_points(crystal, crystal.positions[i], nn * 1.5)
            shell, _ = _shell(pts, _idx, d)
            hm = hull_mesh(shell)
            if hm is not None:
                sc.meshes.append(dict(points=hm[0], faces=hm[1], colour=palette.ROLE_COLOURS["plane"],
                                      opacity=0.35, group="polyhedra", edges=True,
                                      label=f"coordination polyhedron (CN {len(shell)})"))
        if sc.meshes:
            sc.legend.append((sc.meshes[-1]["label"], palette.ROLE_COLOURS["plane"], "patch"))
    if polyhedra in ("sites", "both"):
        done = set()
        centre = crystal.cell.sum(axis=0) / 2
        for s in sorted(site_list, key=lambda s: np.linalg.norm(np.asarray(s.position) - centre)):
            if s.kind in done:
                continue
            done.add(s.kind)
            pts, _idx, d = _neighbour_points(crystal, np.asarray(s.position, float),
                                             max(4.0 * float(s.radius), 3.0 * float(np.max(radii))))
            nb = getattr(s, "neighbours", None)
            k_nb = 0 if nb is None else len(nb)
            if k_nb >= 4:          # the site's own bounding atoms: the k nearest (ties at the shell kept)
                order = np.argsort(d)
                cut = d[order[k_nb - 1]] * (1 + 1e-6)
                shell = pts[d <= cut]
            else:
                shell, _ = _shell(pts, _idx, d, tol=0.05)
            hm = hull_mesh(shell)
            if hm is None:
                continue
            col = palette.ROLE_COLOURS.get(f"site-{s.kind}", palette.ROLE_COLOURS["site-other"])
            sc.meshes.append(dict(points=hm[0], faces=hm[1], colour=col, opacity=0.35, group="polyhedra",
                                  edges=True, label=f"{s.kind} site polyhedron ({len(shell)} neighbours)"))
            sc.legend.append((f"{s.kind} site polyhedron ({len(shell)} corners)", col, "patch"))

    planes = list(planes or [])
    directions = [(d, None) for d in (directions or [])]
    if slip_info is not None:
        planes_s = slip_info.get("planes") or []
        dirs_s = slip_info.get("directions") or []
        if planes_s:
            planes.append(planes_s[0])
        if dirs_s:
            directions.append((dirs_s[0], "slip"))
    from ..lattice import parse_indices, plane_normal

    plane_polys = []
    for ptxt in planes:
        ind = parse_indices(str(ptxt), kind="plane")
        if ind.family:
            raise UserError(f"plane '{ptxt}' is a family {{hkl}}; give one plane in round brackets, e.g. (111)")
        nrm = plane_normal(_ref_cell(crystal), ind)
        off = _plane_offset(crystal, nrm)
        poly = plane_polygon(cell_mat, nrm, off)
        if poly is None:
            raise UserError(f"plane {ind} does not cross this cell")
        plane_polys.append(poly)
        sc.meshes.append(dict(points=poly, faces=fan_faces(len(poly)), colour=palette.ROLE_COLOURS["plane"],
                              opacity=0.5, group="planes", edges=True, label=f"plane {ind}"))
        if abs(float(v.toward @ (nrm / np.linalg.norm(nrm)))) < EDGE_ON:
            # seen edge-on the patch has no area: draw its rim as a line instead
            # its trace: the polygon's longest chord on the page, a little longer than the cell, drawn over the atoms
            # (``front``) since atoms sit on the plane and would hide it
            q2 = v.project(poly)[:, :2]
            dd = np.linalg.norm(q2[:, None] - q2[None], axis=2)
            i, j = np.unravel_index(np.argmax(dd), dd.shape)
            p0, p1 = poly[i], poly[j]
            ext = 0.08 * (p1 - p0)
            sc.lines.append(dict(segments=np.array([[p0 - ext, p1 + ext]]), front=True,
                                 colour=S.darker_hex(palette.ROLE_COLOURS["plane"], 0.75),
                                 width=4.0, group="planes", label=f"plane {ind} (edge-on)"))
            sc.legend.append((f"plane {ind}, seen edge-on", S.darker_hex(palette.ROLE_COLOURS["plane"], 0.75),
                              "line"))
        else:
            sc.legend.append((f"plane {ind}", palette.ROLE_COLOURS["plane"], "patch"))
    rmin = float(np.min(sc.atom_radius))
    for dtxt, kind in directions:
        u, lab = direction(crystal, dtxt, "direction")
        from ..lattice import direction_vector

        vec = direction_vector(_ref_cell(crystal), parse_indices(str(dtxt), kind="direction"))
        length = float(np.linalg.norm(vec))
        if kind == "slip" and plane_polys:
            start = plane_polys[-1].mean(axis=0) - 0.5 * vec
        else:
            start = np.zeros(3)
        colour = palette.ROLE_COLOURS["direction"]
        sc.arrows.append(dict(start=start, vector=u * length, colour=colour, label=lab, group="directions",
                              radius=max(0.12, 0.35 * rmin), double=False))
        sc.legend.append((("slip direction " if kind == "slip" else "direction ") + lab, colour, "arrow"))
    if slip_info is not None:
        ax, lab = direction(crystal, slip_info.get("load_axis") or slip_axis, "slip-axis")
        lo, hi = crystal.cell.sum(axis=0) / 2, None
        corners = np.array(list(itertools.product((0, 1), repeat=3)), float) @ cell_mat
        span = float(np.max(np.linalg.norm(corners[:, None] - corners[None], axis=2)))    # longest diagonal
        span = max(span * 1.3, 4 * np.max(radii))
        sc.arrows.append(dict(start=lo - ax * span / 2, vector=ax * span, colour=palette.ROLE_COLOURS["load-axis"],
                              label=f"load {lab}", group="slip", radius=max(0.1, 0.28 * rmin), double=True))
        sc.legend.append((f"loading axis {lab}", palette.ROLE_COLOURS["load-axis"], "arrow"))
        sc.info["slip"] = slip_info

    # defects
    if defects:
        vac = vacancy_positions(crystal)
        if vac:
            host_r = float(np.median(radii[crystal.roles == 0])) if (crystal.roles == 0).any() else float(radii.max())
            sc.markers.append(dict(pos=np.array(vac), radius=host_r * st.atom_scale,
                                   colour=palette.ROLE_COLOURS["vacancy"], group="defects", front=True))
            sc.legend.append((f"vacancy ({len(vac)})", palette.ROLE_COLOURS["vacancy"], "ring"))

    if defects:
        _feature_marks(sc, crystal, v, st)
    if planes and st.atom_scale >= 0.9:
        # big spheres hide a plane through their centres: its outline is drawn over them
        for m_ in [m_ for m_ in sc.meshes if m_["group"] == "planes"]:
            poly = np.asarray(m_["points"], float)
            seg = np.stack([poly, np.roll(poly, -1, axis=0)], axis=1)
            sc.lines.append(dict(segments=seg, front=True, colour=S.darker_hex(palette.ROLE_COLOURS["plane"], 0.75),
                                 width=3.0, group="planes", label=m_["label"] + " (outline)"))
    _shared_site_marks(sc, crystal, radii, st)
    sc.info.update(style=st.name, view=v.label, up=v.up_label, view_text=str(view), up_text=up)
    sc.caption = caption_lines(crystal, v, st, slip_info)
    if prism is not None:
        head = f"{len(crystal):,} atoms;"
        if sc.caption[1].startswith(head):
            sc.caption[1] = f"{len(crystal):,} atoms per primitive cell;" + sc.caption[1][len(head):]
        sc.caption.insert(1, prism.caption(cut=st.cut))
    return sc


def plane_trace(points, view, normal, origin, pad=0.06):
    """The segment a plane (normal, through origin) shows as when seen
    edge-on, across the extent of ``points``: (2, 3) array, or None when the
    plane faces the viewer.

    >>> import crystalview as cv
    >>> v = make_view(cv.build("Cu"), "[100]")
    >>> seg = plane_trace(np.eye(3) * 3.6, v, np.array([0, 0, 1.0]), np.zeros(3))
    >>> seg.shape
    (2, 3)
    """
    n = np.asarray(normal, float)
    n = n / np.linalg.norm(n)
    d = np.cross(view.toward, n)
    if np.linalg.norm(d) < 0.3:
        return None
    d /= np.linalg.norm(d)
    t = (np.asarray(points, float) - origin) @ d
    lo, hi = float(t.min()), float(t.max())
    ext = pad * (hi - lo)
    o = np.asarray(origin, float)
    return np.array([o + d * (lo - ext), o + d * (hi + ext)])


def dashes(seg, n=24):
    """Each segment (2, 3) split into ``n`` dashes with gaps: (K, 2, 3).

    >>> dashes(np.array([[0, 0, 0], [1, 0, 0.0]]), n=4).shape
    (4, 2, 3)
    """
    out = []
    for a, b in np.asarray(seg, float).reshape(-1, 2, 3):
        t = np.linspace(0, 1, 2 * n)
        p = a + (b - a) * t[:, None]
        out.extend(np.stack([p[0::2], p[1::2]], axis=1))
    return np.array(out)


def _feature_marks(sc, crystal, v, st):
    """Lines over the atoms that mark what a defect figure is about: each
    grain boundary and stacking-fault plane (its trace, when seen edge-on) and
    each dislocation core (the usual upside-down T: glide plane and extra
    half-plane)."""
    pos = crystal.positions
    mid = pos.mean(axis=0)
    colour = palette.ROLE_COLOURS["direction"]
    for d in _defect_records(crystal, "tilt_boundary"):
        ys = [float(y) for y in d.get("boundaries_y_A") or []]
        if ys and abs(ys[0]) < 1e-6 and crystal.pbc[1]:
            ys.append(float(crystal.cell[1, 1]))
        segs = [plane_trace(sc.atom_pos, v, [0, 1.0, 0], [mid[0], y, mid[2]]) for y in ys]
        segs = [q for q in segs if q is not None]
        if segs:
            sc.lines.append(dict(segments=dashes(segs), front=True, colour=colour, width=3.0,
                                 group="defects", label="grain boundary"))
            sc.legend.append((f"grain boundary {d.get('plane', '')}".strip(), colour, "line"))
    for d in _defect_records(crystal, "stacking"):
        hc, h = d.get("hc") or "", d.get("layer_spacing_A")
        if not hc or not h or not d.get("faulted"):
            continue
        odd = "h" if d.get("parent_lattice") == "fcc" else "c"
        zs = sorted({round(k * float(h), 6) for k, ch in enumerate(hc) if ch == odd})
        zmin = float(pos[:, 2].min())
        segs = [plane_trace(sc.atom_pos, v, [0, 0, 1.0], [mid[0], mid[1], zmin + z]) for z in zs]
        segs = [q for q in segs if q is not None]
        if segs:
            sc.lines.append(dict(segments=dashes(segs), front=True, colour=colour, width=3.0,
                                 group="defects", label="stacking fault"))
            sc.legend.append((f"faulted layer ({'hcp' if odd == 'h' else 'fcc'} stacking)", colour, "line"))
    for d in _defect_records(crystal, "dislocation"):
        core = d.get("core_A")
        line = np.asarray(d.get("line_vector") or [0, 0, 1.0], float)
        if core is None or abs(float(line @ v.toward)) < 0.9:
            continue                       # the symbol reads only along the line
        b = float(d.get("burgers_magnitude_A") or 2.5)
        c = np.array([float(core[0]), float(core[1]), float(mid[2])])
        s = 1.2 * b
        bar = np.array([c - v.right * s * 0.6, c + v.right * s * 0.6])
        stem = np.array([c, c + v.up * s])
        sc.lines.append(dict(segments=np.array([bar, stem]), front=True, colour=colour, width=4.0,
                             group="defects", label="dislocation core"))
        sc.legend.append(("dislocation core", colour, "line"))


#: Above this many atoms on shared sites the figure names them in the legend only.
MAX_SHARED_MARKS = 2000


def _shared_site_marks(sc, crystal, radii, st):
    """A halo around atoms that stand on a shared or partly occupied site of
    a realised crystal (the species drawn there is one of several), with a
    legend line naming the sites and the seed of the draw."""
    real = crystal.metadata.get("realisation")
    if not real or crystal.occupancy is None:
        return
    shared = np.nonzero(crystal.occupancy < 1.0 - 1e-6)[0]
    sigs = [c["site"] for c in real.get("classes", []) if not c["site"].isalpha()]
    if not sigs:
        return
    names = ", ".join(sigs[:3]) + (" ..." if len(sigs) > 3 else "")
    colour = palette.ROLE_COLOURS["shared-site"]
    if len(shared) == len(crystal) or len(shared) > MAX_SHARED_MARKS or len(shared) == 0:
        sc.legend.append((f"all sites shared: {names} (seed {real['seed']})"
                          if len(shared) == len(crystal) else
                          f"{len(shared)} atoms on shared sites {names} (seed {real['seed']})", colour, "none"))
        return
    sc.markers.append(dict(pos=crystal.positions[shared], radius=float(np.median(radii[shared])) * st.atom_scale * 1.18,
                           colour=colour, group="defects"))
    sc.legend.append((f"shared site {names} (seed {real['seed']})", colour, "ring"))


def vacancy_positions(crystal):
    """Empty lattice sites the defect records name: vacancies and the sites
    Frenkel pairs left behind (their interstitials are atoms, drawn as such).

    >>> import crystalview as cv
    >>> len(vacancy_positions(cv.add_vacancies(cv.build("Cu", repeat=(2, 2, 2)), count=3, seed=1)))
    3
    """
    vac = []
    for d in (crystal.metadata or {}).get("defects", []) or []:
        if d.get("kind") in ("vacancy", "frenkel_pair") and d.get("positions") is not None:
            vac.extend(np.asarray(d["positions"], float).reshape(-1, 3).tolist())
    return vac


def outline_edges(crystal):
    """Edges of the cell outline.  Along a non-periodic axis (free surfaces,
    a dislocation's cross-section) the cell box means nothing: the outline
    keeps only the edges running along periodic axes, placed at the atoms'
    extent across the free ones; with fewer than two periodic axes there is
    no outline (None).

    >>> import crystalview as cv
    >>> len(outline_edges(cv.build("Cu")))
    12
    """
    pbc = [bool(x) for x in crystal.pbc]
    if all(pbc):
        return cell_edges(crystal.cell)
    if sum(pbc) < 2 or len(crystal) == 0:
        return None
    f = crystal.frac
    lo = [0.0 if pbc[k] else float(f[:, k].min()) for k in range(3)]
    hi = [1.0 if pbc[k] else float(f[:, k].max()) for k in range(3)]
    edges = []
    for c in itertools.product((0, 1), repeat=3):
        for k in range(3):
            if c[k] == 0 and pbc[k]:
                a = np.array([hi[j] if c[j] else lo[j] for j in range(3)])
                b = a.copy()
                b[k] = hi[k]
                edges.append((a @ crystal.cell, b @ crystal.cell))
    return np.array(edges)


def _share_table(crystal, src, share):
    """Sum of the shares inside the cell, per element (atoms per cell)."""
    syms = crystal.symbols
    out = {}
    for s in np.unique(syms):
        out[str(s)] = float(np.sum(share[syms[src] == s]))
    return out


def _bonds(pos, crystal, nn):
    cutoff = nn * (1 + S.BOND_TOLERANCE)
    est = len(pos) * 14
    if est > S.MAX_BONDS * 2:
        raise UserError(f"ball-and-stick would draw about {est // 2:,} sticks for {len(pos):,} atoms; "
                        f"use --style space-filling or --style lattice for crystals this big")
    if len(pos) <= 1500:                   # small: plain numpy, no tree to build (or import)
        dd = np.linalg.norm(pos[:, None, :] - pos[None, :, :], axis=2)
        i, j = np.nonzero(np.triu(dd <= cutoff, k=1))
        pairs = np.column_stack([i, j])
    else:
        from scipy.spatial import cKDTree

        pairs = cKDTree(pos).query_pairs(cutoff, output_type="ndarray")
    if len(pairs) > S.MAX_BONDS:
        raise UserError(f"ball-and-stick would draw {len(pairs):,} sticks; use --style space-filling or lattice")
    # pairs closer than the lattice allows (an interstitial and its cage) are
    # kept: the cut-off is an upper bound only; coincident points are not sticks
    d = np.linalg.norm(pos[pairs[:, 0]] - pos[pairs[:, 1]], axis=1)
    return pairs[d > 1e-6].astype(np.int64).reshape(-1, 2)


def _get_sites(crystal):
    try:
        from ..analysis.sites import interstitial_sites
    except ImportError:
        raise UserError("site overlays need the interstitial-site finder (crystalview.analysis.sites), "
                        "which this installation lacks") from None
    return list(interstitial_sites(crystal))


def _slip(crystal, axis):
    try:
        from ..analysis.slip import slip_overlay
    except ImportError:
        raise UserError("--slip-axis needs the slip analysis (crystalview.analysis.slip), which this "
                        "installation lacks") from None
    direction(crystal, axis, "slip-axis")     # checks the text first
    info = slip_overlay(crystal, axis)
    if not isinstance(info, dict):
        raise UserError("the slip analysis returned nothing to draw for this crystal")
    return info


def cell_planes(cell):
    """Inward unit normals n and offsets d of a parallelepiped's six faces (inside: n . x >= d).

    >>> [(n.tolist(), float(d)) for n, d in cell_planes(np.eye(3) * 2.0)][:2]     # x >= 0 and -x >= -2
    [([1.0, 0.0, 0.0], 0.0), ([-1.0, -0.0, -0.0], -2.0)]
    """
    recip = np.linalg.inv(cell).T
    norms = np.linalg.norm(recip, axis=1)
    out = []
    for k in range(3):
        u = recip[k] / norms[k]
        out.append((u, 0.0))
        out.append((-u, -1.0 / norms[k]))
    return out


def _clip_spheres(pts, r, planes, col, colours):
    """Spheres at ``pts`` of radii ``r`` cut by the half-spaces ``planes``
    (n . x >= d).  Returns (mask of the spheres reaching inside, share of
    each sphere's volume inside, meshes)."""
    pts = np.asarray(pts, float)
    r = np.asarray(r, float)
    dist = np.stack([pts @ n - d for n, d in planes], axis=1)        # signed, inside positive
    inside = np.all(dist > -r[:, None], axis=1)
    groups = {}
    for k in np.nonzero(inside)[0]:
        cut = tuple((p, round(float(dist[k, p]), 6)) for p in range(len(planes)) if dist[k, p] < r[k] - 1e-9)
        key = (round(float(r[k]), 6), int(col[k]), cut)
        groups.setdefault(key, []).append(k)
    meshes = []
    share = np.zeros(len(pts))
    for (rad, c, cut), members in groups.items():
        base = sphere_mesh(rad)
        vol_full = base.volume
        m = base
        for p, d in cut:
            nrm = planes[p][0]
            # keep the part with nrm . x >= -d (inside), in the sphere's own frame
            m = m.clip_closed_surface(normal=tuple(nrm), origin=tuple(-nrm * d))
            if m.n_points == 0:
                break
        if m.n_points == 0:
            continue
        share[members] = float(m.volume / vol_full) if vol_full > 0 else 1.0
        tri = m.triangulate()
        faces = tri.faces.reshape(-1, 4)[:, 1:]
        for k in members:
            meshes.append(dict(points=np.asarray(tri.points) + pts[k], faces=faces, colour=colours[c]))
    keep = share > 1e-3
    return keep, share, meshes


def sphere_mesh(radius, res=36):
    """A closed triangulated sphere (pyvista) centred on the origin.

    >>> sphere_mesh(1.0, res=12).is_all_triangles
    True
    """
    import pyvista as pv

    return pv.Sphere(radius=float(radius), theta_resolution=res, phi_resolution=max(8, res * 2 // 3)).triangulate()


#: |cos| between the line of sight and a plane's normal below which the plane is drawn as a line.
EDGE_ON = 0.06

_PLURAL = {"vacancy": ("vacancy", "vacancies"), "substitution": ("substitution", "substitutions"),
           "interstitial": ("interstitial", "interstitials"), "frenkel_pair": ("Frenkel pair", "Frenkel pairs")}


def defect_label(d):
    """A caption phrase for one ``metadata['defects']`` record, from the facts
    the defect builders record (crystalview/defects/*.py).

    >>> defect_label({"kind": "substitution", "element": "Cr", "count": 21})
    '21 Cr substitutions'
    """
    kind = d.get("kind")
    if kind == "stacking" and d.get("sequence"):
        return f"stacking {d.get('name') + ' ' if d.get('name') else ''}{d['sequence']}"
    if kind == "tilt_boundary":
        sig = d.get("sigma")
        head = f"\u03a3{sig} " if sig else ""
        txt = f"{head}{d.get('plane', '')}{d.get('axis', '')} tilt boundary"
        if d.get("tilt_angle_deg") is not None:
            txt += f", tilt {float(d['tilt_angle_deg']):.2f}\u00b0"
        if d.get("misorientation_deg") is not None:
            txt += f" ({float(d['misorientation_deg']):.2f}\u00b0 misorientation)"
        return txt
    if kind == "dislocation":
        txt = f"{d.get('character', '')} dislocation".strip()
        if d.get("burgers_vector"):
            txt += f", b = {d['burgers_vector']}"
        if d.get("line_direction"):
            txt += f", line {d['line_direction']}"
        if d.get("glide_plane"):
            txt += f", glide plane {d['glide_plane']}"
        return txt
    if kind == "surface":
        txt = f"{d.get('plane', '')} slab".strip()
        if d.get("layers"):
            txt += f", {d['layers']} layers"
        if d.get("vacuum_A"):
            txt += f", {float(d['vacuum_A']):g} \u00c5 vacuum"
        return txt
    if d.get("count") is not None and kind in _PLURAL:
        one, many = _PLURAL[kind]
        what = f"{d['element']} " if d.get("element") and kind != "vacancy" else ""
        return f"{d['count']} {what}{one if d['count'] == 1 else many}"
    return str(kind).replace("_", " ")


def _alloy_part(d, alloy):
    """Whether a defect record is one of the alloy's own solutes (the alloy builder records each as one)."""
    counts = alloy.get("counts") or {}
    el = d.get("element")
    return (d.get("kind") in ("substitution", "interstitial") and el in counts and el != alloy.get("base")
            and d.get("count") == counts[el])


def alloy_label(alloy, md=None):
    """A caption line naming the alloy a crystal was built from (``metadata['alloy']``, see
    :func:`crystalview.alloy.alloy_crystal`): as asked, as built, and how.

    >>> alloy_label({"text": "Fe-18Cr-8Ni", "unit": "wt", "base": "Fe", "asked": {"Cr": 18.0, "Ni": 8.0},
    ...              "counts": {"Fe": 79, "Cr": 21, "Ni": 8}, "made_wt_percent": {"Cr": 18.28, "Ni": 7.86},
    ...              "sites": 108, "seed": 0})
    'alloy Fe-18Cr-8Ni (wt%); as built Fe-18.3Cr-7.9Ni (21 Cr + 8 Ni, 108 lattice sites, random, seed 0)'
    """
    unit = alloy.get("unit", "wt")
    text = f"alloy {alloy.get('text', '?')} ({unit}%)"
    made = alloy.get(f"made_{unit}_percent") or {}
    counts = alloy.get("counts") or {}
    parts = [el for el in (alloy.get("asked") or {}) if el in made]
    if parts:
        text += f"; as built {alloy.get('base', '')}" + "".join(
            f"-{made[el]:.1f}{el}" if made[el] >= 1 else f"-{made[el]:.2g}{el}" for el in parts)
        n = alloy.get("sites") or sum(counts.values())
        how = " + ".join(f"{counts[el]} {el}" for el in parts if el in counts)
        if how:
            text += f" ({how}, {n} lattice sites, random"
            text += f", seed {alloy['seed']})" if alloy.get("seed") is not None else ")"
    if md and md.get("a_estimated"):
        text += "; a by Vegard's law (an estimate)"
    return text


def caption_lines(crystal, view, st, slip_info=None):
    """The caption's lines: structure and parameters, atoms and view, alloy, defects, slip system.

    >>> import crystalview as cv
    >>> c = cv.build("Cu")
    >>> caption_lines(c, make_view(c, "[001]"), S.get_style("lattice"))[1]
    '4 atoms; view along [001], [010] up; lattice'
    """
    lat = crystal.lattice
    md = crystal.metadata
    name = md.get("name") or (", ".join(crystal.elements))
    lines = []
    if lat is not None:
        head = f"{name}: {lat.title}"
        if lat.phase and lat.phase not in (lat.prototype,):
            head += f" ({lat.phase})"
        par = f"a = {lat.a:.4f} \u00c5"
        if lat.c:
            par += f", c = {lat.c:.4f} \u00c5"
        head += f", {par}"
        if lat.temperature_K:
            head += f" at {lat.temperature_K:g} K"
    else:
        head = f"{name}"
    lines.append(head)
    rep = md.get("repeat")
    second = f"{len(crystal):,} atoms"
    if rep:
        second += f" ({' x '.join(str(x) for x in rep)} cells)"
    alloy = md.get("alloy") if isinstance(md.get("alloy"), dict) else None
    defects = []
    for d in md.get("defects", []) or []:
        if alloy and _alloy_part(d, alloy):
            continue                    # told by the alloy's own line
        label = defect_label(d)
        if label and label not in defects:
            defects.append(label)
    second += f"; view along {view.label}, {view.up_label} up; {st.name}"
    lines.append(second)
    if alloy:
        lines.append(alloy_label(alloy, md))
    if defects:
        lines.append("defects: " + "; ".join(defects))
    if slip_info and slip_info.get("label"):
        lines.append(str(slip_info["label"]))
    return lines


# ---------------------------------------------------------------- culling
def visible_in_view(view, pos, radius, chunk=1_000_000, max_bins=16_000_000, column_chunk=2_000_000):
    """Mask of the atoms at ``pos`` that can show along ``view``: the test of
    :func:`visible_atoms`, done in chunks of atoms (the projection is never
    held whole), and the column test only on the atoms that pass it (an atom
    behind a hidden column-mate at least as large is hidden too), so a scene
    of tens of millions of atoms culls in little more memory than its mask.

    >>> import crystalview as cv
    >>> c = cv.build("Cu", repeat=(6, 6, 6))
    >>> v = make_view(c, "[001]")
    >>> whole = visible_atoms(v.project(c.positions), c.atom_radii())
    >>> lean = visible_in_view(v, c.positions, c.atom_radii(), chunk=100, column_chunk=150)
    >>> bool((lean == whole).all()), int(whole.sum()) < len(c)
    (True, True)
    """
    pos = np.asarray(pos, float).reshape(-1, 3)
    r = np.broadcast_to(np.asarray(radius, float), (len(pos),))
    n = len(pos)
    keep = np.ones(n, bool)
    if n < 2:
        return keep
    sample = r[:: max(1, n // 2_000_000)]
    s = float(np.percentile(sample, 5)) / 6.0
    if s <= 0:
        return keep
    u0 = v0 = np.inf
    u1 = v1 = -np.inf
    for a in range(0, n, chunk):
        q = view.project(pos[a:a + chunk])
        u0, v0 = min(u0, float(q[:, 0].min())), min(v0, float(q[:, 1].min()))
        u1, v1 = max(u1, float(q[:, 0].max())), max(v1, float(q[:, 1].max()))
    nu, nv = int((u1 - u0) / s) + 1, int((v1 - v0) / s) + 1
    if nu * nv > max_bins:
        return keep                     # too fine a grid for the frame: keep every atom (as visible_atoms does)
    R0 = 6.0
    occ = np.full((nu, nv), -np.inf)
    for a in range(0, n, chunk):
        q = view.project(pos[a:a + chunk])
        rr = r[a:a + chunk]
        big = rr >= R0 * s
        if big.any():
            iu = ((q[big, 0] - u0) / s).astype(np.int64)
            iv = ((q[big, 1] - v0) / s).astype(np.int64)
            np.maximum.at(occ.ravel(), iu * nv + iv, q[big, 2])
    worst = _worst_in_front(occ, s, float(r.max()), R0)
    for a in range(0, n, chunk):
        q = view.project(pos[a:a + chunk])
        iu = ((q[:, 0] - u0) / s).astype(np.int64)
        iv = ((q[:, 1] - v0) / s).astype(np.int64)
        keep[a:a + chunk] = ~(worst[iu, iv] > q[:, 2] + r[a:a + chunk])
    idx = np.nonzero(keep)[0]
    m = len(idx)
    if m < 2:
        return keep
    if m <= column_chunk:
        keep[idx[~column_front(view.project(pos[idx]), r[idx])]] = False
        return keep
    # many survivors (along a zone axis the bin test leaves the columns to the column test): in stripes
    # across the picture, each holding whole columns (a column's atoms share their rounded right coordinate)
    eps = 1e-3
    qu = np.empty(m, np.int64)
    for a in range(0, m, chunk):
        qu[a:a + chunk] = np.round((pos[idx[a:a + chunk]] @ view.right) / eps).astype(np.int64)
    lo, hi = int(qu.min()), int(qu.max()) + 1
    nstripe = -(-m // column_chunk)
    cuts = [lo + (hi - lo) * k // nstripe for k in range(nstripe + 1)]
    for a, b in zip(cuts[:-1], cuts[1:]):
        sel = idx[(qu >= a) & (qu < b)]
        if len(sel) > 1:
            keep[sel[~column_front(view.project(pos[sel]), r[sel], eps=eps)]] = False
    return keep


def _worst_in_front(occ, s, rmax, R0=6.0):
    """Per bin, the depth of the farthest of the nearest occluders over any disc reaching it."""
    from scipy.ndimage import maximum_filter, minimum_filter

    m = int(R0)
    di = np.arange(-m, m + 1)
    foot = ((np.abs(di)[:, None] + 1) ** 2 + (np.abs(di)[None, :] + 1) ** 2) <= R0 ** 2
    occ = maximum_filter(occ, footprint=foot, mode="constant", cval=-np.inf)
    k = int(math.ceil(rmax / s)) + 1
    return minimum_filter(occ, size=2 * k + 1, mode="constant", cval=-np.inf)


def visible_atoms(uvw, radius, bin_size=None, max_bins=16_000_000):
    """Mask of the atoms that can show in an orthographic view: an atom is
    dropped only when, over its whole projected disc, another opaque sphere
    lies wholly in front of it.  Conservative: a kept atom may still be hidden.

    ``uvw`` are (right, up, toward) coordinates; larger toward is nearer.

    >>> import crystalview as cv
    >>> c = cv.build("Cu", repeat=(4, 4, 4))
    >>> keep = visible_atoms(make_view(c, "[001]").project(c.positions), c.atom_radii())
    >>> int(keep.sum()) < len(c)
    True
    """
    from scipy.ndimage import maximum_filter, minimum_filter

    n = len(uvw)
    keep = np.ones(n, bool)
    if n < 2:
        return keep
    r = np.asarray(radius, float)
    if bin_size is None:
        bin_size = float(np.percentile(r, 5)) / 6.0
    s = bin_size
    if s <= 0:
        return keep
    u0, v0 = uvw[:, 0].min(), uvw[:, 1].min()
    iu = ((uvw[:, 0] - u0) / s).astype(np.int64)
    iv = ((uvw[:, 1] - v0) / s).astype(np.int64)
    nu, nv = int(iu.max()) + 1, int(iv.max()) + 1
    if nu * nv > max_bins:
        return keep
    z = uvw[:, 2]
    occ = np.full((nu, nv), -np.inf)
    # an occluder of radius >= R0 = 6 s wholly covers every bin (i+di, j+dj)
    # whose far corner is within R0 of any point of its own bin
    R0 = 6.0
    occluder = r >= R0 * s
    lin = iu[occluder] * nv + iv[occluder]
    zo = z[occluder]
    np.maximum.at(occ.ravel(), lin, zo)     # the nearest occluder of each bin
    m = int(R0)
    di = np.arange(-m, m + 1)
    foot = ((np.abs(di)[:, None] + 1) ** 2 + (np.abs(di)[None, :] + 1) ** 2) <= R0 ** 2
    occ = maximum_filter(occ, footprint=foot, mode="constant", cval=-np.inf)
    k = int(math.ceil(float(r.max()) / s)) + 1
    worst = minimum_filter(occ, size=2 * k + 1, mode="constant", cval=-np.inf)
    front = z + r
    keep = ~(worst[iu, iv] > front)
    return keep & column_front(uvw, r)


def column_front(uvw, radius, eps=1e-3):
    """Mask dropping atoms that sit exactly behind another atom at least as
    large (same projected centre, nearer the viewer): along a zone axis the
    atoms stand in columns and only the front of each column shows.

    >>> uvw = np.array([[0, 0, 1.0], [0, 0, 0.0], [1, 0, 0.0]])      # two atoms in one column, one beside
    >>> column_front(uvw, np.ones(3)).tolist()
    [True, False, True]
    """
    q = np.round(uvw[:, :2] / eps).astype(np.int64)
    q -= q.min(axis=0)
    key = q[:, 0] * (int(q[:, 1].max()) + 1) + q[:, 1]      # one integer per projected centre
    order = np.lexsort((-uvw[:, 2], key))                    # by column, nearest first
    k, r = key[order], np.asarray(radius, float)[order]
    first = np.r_[True, k[1:] != k[:-1]]
    g = np.cumsum(first) - 1
    big = float(r.max()) + 1.0
    shifted = r + g * big
    prev = np.maximum.accumulate(np.r_[-np.inf, shifted[:-1]])
    keep_sorted = first | (shifted > prev)
    keep = np.empty(len(r), bool)
    keep[order] = keep_sorted
    return keep
