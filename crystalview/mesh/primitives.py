"""Mesh building blocks: spheres and rods as manifold3d solids, their
tessellation sizes, and the triangle-count estimate used to refuse huge
requests before any mesh is made.

Only numpy and manifold3d are used here (no vtk, no pyvista), so the commands
that write files start fast.

Colour tracking: every sphere of one colour group is a translated copy of one
template sphere, and every rod a transformed copy of one template cylinder.
manifold3d keeps the template's ``original_id`` on each triangle through the
boolean union (``run_original_id`` of the output mesh), so the unioned solid
can still be coloured per part (3MF) without a second union.
"""
from __future__ import annotations

import math

import numpy as np

#: Default printer resolution (mm): the largest gap allowed between a true
#: sphere or rod and its tessellation (the chord error).  0.05 mm is half a
#: desktop printer's finest usual layer height of 0.1 mm (common practice), so
#: facets do not show.
DEFAULT_RESOLUTION_MM = 0.05
CHORD_TOLERANCE_MM = DEFAULT_RESOLUTION_MM       # old name, kept for callers
MIN_SEGMENTS = 24
MAX_SEGMENTS = 128
SPHERE_SEGMENTS = tuple(range(8, 257, 4))       # manifold3d geodesic spheres need multiples of 4


def _manifold():
    import manifold3d

    return manifold3d


def segments_for(radius_mm, tolerance_mm=CHORD_TOLERANCE_MM, lo=MIN_SEGMENTS, hi=MAX_SEGMENTS):
    """Segments around a circle of this radius so the polygon's chord error
    stays under ``tolerance_mm``; rounded up to a multiple of 4 and clamped to
    [lo, hi].  (The old sizing rule, kept for the benchmark's baseline.)

    >>> segments_for(1.0), segments_for(5.0), segments_for(50.0)
    (24, 24, 72)
    """
    r = max(float(radius_mm), 1e-9)
    x = max(-1.0, min(1.0, 1.0 - tolerance_mm / r))
    ang = math.acos(x)
    n = hi if ang <= 0 else int(math.ceil(math.pi / ang))
    n = max(lo, min(hi, n))
    return int(4 * math.ceil(n / 4))


_SPHERE_ERR = {}


#: Largest shortfall of a tessellated sphere's volume from the true sphere's
#: (0.5 %): the scale of the tessellation is chosen within it to make the
#: largest gap to the true sphere, outside or inside, as small as it can be.
VOLUME_BUDGET = 0.005


def sphere_shape(segments):
    """(scale k, relative chord error) of manifold3d's geodesic sphere with
    this many segments, measured on the tessellation itself.  The unit
    tessellation (vertices on the sphere) is scaled by k: the vertices then
    stand (k - 1) r outside the true sphere and the flattest faces
    (1 - k * plane distance) r inside; k balances the two, but never lets the
    volume fall more than ``VOLUME_BUDGET`` short of the true sphere's (nor
    rise above it).  The chord error is the larger gap.

    >>> k, err = sphere_shape(32)
    >>> round(k, 5), round(err, 5)
    (1.00661, 0.00661)
    """
    n = int(segments)
    got = _SPHERE_ERR.get(n)
    if got is None:
        m = _manifold()
        s = m.Manifold.sphere(1.0, n)
        k_vol = (4.0 / 3.0 * math.pi / s.volume()) ** (1.0 / 3.0)
        mesh = s.to_mesh()
        v = np.asarray(mesh.vert_properties, np.float64)[:, :3]
        tri = v[np.asarray(mesh.tri_verts, np.int64)]
        nrm = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
        nrm /= np.linalg.norm(nrm, axis=1, keepdims=True)
        plane = float(np.abs((nrm * tri[:, 0]).sum(axis=1)).min())
        rv = np.linalg.norm(v, axis=1)
        k_bal = 2.0 / (rv.max() + plane)
        k = min(k_vol, max(k_bal, k_vol * (1.0 - VOLUME_BUDGET) ** (1.0 / 3.0)))
        err = max(k * rv.max() - 1.0, 1.0 - k * rv.min(), 1.0 - k * plane)
        got = _SPHERE_ERR[n] = (float(k), float(err))
    return got


def sphere_segments(radius_mm, chord_mm=DEFAULT_RESOLUTION_MM):
    """Fewest geodesic-sphere segments whose chord error (measured, with the
    volume-preserving scale) stays within ``chord_mm`` for this radius.

    >>> sphere_segments(1.0), sphere_segments(5.0), sphere_segments(5.0, chord_mm=0.2)
    (16, 28, 16)
    """
    r = max(float(radius_mm), 1e-9)
    for n in SPHERE_SEGMENTS:
        if sphere_shape(n)[1] * r <= chord_mm:
            return n
    return SPHERE_SEGMENTS[-1]


def rod_sides(radius_mm, chord_mm=DEFAULT_RESOLUTION_MM, lo=8, hi=96):
    """Fewest sides (even) of a rod's polygon circumscribing the nominal
    circle so its corners stand at most ``chord_mm`` outside it.

    >>> rod_sides(0.5), rod_sides(2.0), rod_sides(2.0, chord_mm=0.2)
    (8, 16, 8)
    """
    r = max(float(radius_mm), 1e-9)
    c = r / (r + chord_mm)
    n = int(math.ceil(math.pi / math.acos(c)))
    n += n % 2
    return max(lo, min(hi, n))


def rod_chord_error(radius_mm, sides):
    """Corner height of the circumscribed polygon over the nominal circle (mm).

    >>> round(rod_chord_error(2.0, 16), 4)
    0.0392
    """
    return float(radius_mm) * (1.0 / math.cos(math.pi / int(sides)) - 1.0)


def sphere_triangles(segments):
    """Triangles of a manifold3d geodesic sphere with this many segments
    (refined octahedron: segments^2 / 2).

    >>> sphere_triangles(32)
    512
    """
    s = int(4 * math.ceil(segments / 4))
    return s * s // 2


def rod_triangles(segments):
    """Triangles of a closed cylinder with this many sides (4 n - 4).

    >>> rod_triangles(16)
    60
    """
    return 4 * int(segments) - 4


def estimate_triangles(n_spheres, sphere_segments, n_rods=0, rod_segments=16):
    """Upper bound of the triangle count of the union before it is made (the
    union only removes buried triangles and adds a few along seams).

    >>> estimate_triangles(14, 32, n_rods=24, rod_segments=16)
    8608
    """
    return int(n_spheres) * sphere_triangles(sphere_segments) + int(n_rods) * rod_triangles(rod_segments)


class Templates:
    """Template solids: one sphere per (colour group, radius, segments), one
    unit-height cylinder per (radius, segments).  Copies made by transforms
    keep the template's original id, so triangles can be traced back.

    >>> t = Templates()
    >>> s = t.sphere("host", 5.0, 32)
    >>> s is t.sphere("host", 5.0, 32), t.group_of_id[s.original_id()]
    (True, 'host')
    """

    def __init__(self):
        self._spheres = {}
        self._rods = {}
        self.group_of_id = {}      # manifold original id -> group label

    def sphere(self, group, radius, segments):
        key = (group, round(float(radius), 9), int(segments))
        s = self._spheres.get(key)
        if s is None:
            m = _manifold()
            # scaled so the largest gap to the true sphere is as small as it can
            # be within a 0.5 % volume budget (see sphere_shape)
            s = m.Manifold.sphere(float(radius) * sphere_shape(int(segments))[0], int(segments))
            self._spheres[key] = s
            self.group_of_id[s.original_id()] = group
        return s

    def rod(self, group, radius, segments):
        key = (group, round(float(radius), 9), int(segments))
        r = self._rods.get(key)
        if r is None:
            m = _manifold()
            n = int(segments)
            # the polygon circumscribes the nominal circle, so the rod is never
            # thinner than its nominal diameter (the minimum feature holds)
            k = 1.0 / math.cos(math.pi / n)
            r = m.Manifold.cylinder(1.0, float(radius) * k, -1.0, n, False)
            self._rods[key] = r
            self.group_of_id[r.original_id()] = group
        return r


def rotation_z_to(d):
    """3x3 rotation matrix taking +z to the unit vector ``d``.

    >>> (rotation_z_to(np.array([1.0, 0.0, 0.0])) @ [0.0, 0.0, 1.0]).round(6).tolist()
    [1.0, 0.0, 0.0]
    """
    d = np.asarray(d, float)
    d = d / np.linalg.norm(d)
    z = np.array([0.0, 0.0, 1.0])
    c = float(np.dot(z, d))
    if c > 1 - 1e-12:
        return np.eye(3)
    if c < -1 + 1e-12:
        return np.diag([1.0, -1.0, -1.0])
    v = np.cross(z, d)
    s = np.linalg.norm(v)
    k = np.array([[0, -v[2], v[1]], [v[2], 0, -v[0]], [-v[1], v[0], 0]])
    return np.eye(3) + k + k @ k * ((1 - c) / (s * s))


def rotation_to(a, b):
    """3x3 rotation taking unit vector a to unit vector b.

    >>> R = rotation_to(np.array([0.0, 0.0, 1.0]), np.array([0.0, 1.0, 0.0]))
    >>> (R @ np.array([0.0, 0.0, 1.0])).round(6).tolist()
    [0.0, 1.0, 0.0]
    """
    ra = rotation_z_to(a)
    rb = rotation_z_to(b)
    return rb @ ra.T


def place_sphere(template, centre):
    """The template sphere moved to ``centre`` (mm).

    >>> t = Templates()
    >>> ball = place_sphere(t.sphere("host", 2.0, 16), (10.0, 0.0, 0.0))
    >>> [round(x, 3) for x in ball.bounding_box()]
    [7.943, -2.057, -2.057, 12.057, 2.057, 2.057]
    """
    return template.translate(tuple(float(x) for x in centre))


def place_rod(template, p0, p1):
    """The unit-height template cylinder stretched from p0 to p1.

    >>> t = Templates()
    >>> rod = place_rod(t.rod("bond", 1.0, 8), (0.0, 0.0, 0.0), (0.0, 0.0, 10.0))
    >>> round(rod.bounding_box()[5], 6)
    10.0
    """
    p0 = np.asarray(p0, float)
    p1 = np.asarray(p1, float)
    d = p1 - p0
    length = float(np.linalg.norm(d))
    R = rotation_z_to(d / length)
    M = np.zeros((3, 4))
    M[:, :3] = R @ np.diag([1.0, 1.0, length])
    M[:, 3] = p0
    return template.transform(M)


def union(solids):
    """Batch union of many solids (one manifold3d call).

    >>> t = Templates()
    >>> balls = [place_sphere(t.sphere("host", 2.0, 16), (x, 0.0, 0.0)) for x in (0.0, 3.0)]
    >>> solid = union(balls)
    >>> len(solid.decompose()), solid.volume() < 2 * balls[0].volume()
    (1, True)
    """
    m = _manifold()
    if not solids:
        return m.Manifold()
    return m.Manifold.batch_boolean(list(solids), m.OpType.Add)


def box_from_cell(cell_mm):
    """The parallelepiped spanned by the three cell rows (mm), as a solid.

    >>> round(box_from_cell(np.eye(3) * 10.0).volume(), 6)
    1000.0
    """
    m = _manifold()
    import itertools

    corners = np.array(list(itertools.product((0.0, 1.0), repeat=3))) @ np.asarray(cell_mm, float)
    return m.Manifold.hull_points(corners.astype(float).tolist())


def to_trimesh(solid, templates=None, face_labels=None):
    """(trimesh.Trimesh, per-face group labels or None) from a manifold solid.
    ``face_labels``: {original id: labels} for solids made from a mesh whose
    face_id indexes ``labels`` (the stitched ball-and-stick solid).

    >>> t = Templates()
    >>> ball = place_sphere(t.sphere("host", 2.0, 16), (0, 0, 0))
    >>> mesh, groups = to_trimesh(ball, templates=t)
    >>> mesh.is_watertight, len(mesh.faces), sorted(set(groups.tolist()))
    (True, 128, ['host'])
    """
    import trimesh

    mesh = solid.to_mesh()
    verts = np.asarray(mesh.vert_properties, dtype=np.float64)[:, :3]
    faces = np.asarray(mesh.tri_verts, dtype=np.int64)
    groups = None
    if templates is not None and len(faces):
        run_index = np.asarray(mesh.run_index, dtype=np.int64)
        run_ids = np.asarray(mesh.run_original_id, dtype=np.int64)
        counts = np.diff(run_index) // 3
        labels = np.array([templates.group_of_id.get(int(i), "") for i in run_ids], dtype=object)
        groups = np.repeat(labels, counts)
        if face_labels:
            fid = np.asarray(mesh.face_id, dtype=np.int64)
            run_of_face = np.repeat(run_ids, counts)
            for oid, labs in face_labels.items():
                sel = run_of_face == oid
                if sel.any() and len(fid) == len(faces):
                    groups[sel] = np.array(labs, dtype=object)[np.clip(fid[sel], 0, len(labs) - 1)]
        if len(groups) != len(faces):       # should not happen; fall back to no colour
            groups = None
    tm = trimesh.Trimesh(vertices=verts, faces=faces, process=False)
    return tm, groups
