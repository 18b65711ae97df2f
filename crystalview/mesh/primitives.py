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

#: Chord tolerance for curved surfaces (mm): the largest gap between a true
#: sphere and its tessellation.  0.05 mm is half a desktop printer's finest
#: usual layer height of 0.1 mm (common practice), so facets do not show.
CHORD_TOLERANCE_MM = 0.05
MIN_SEGMENTS = 24
MAX_SEGMENTS = 128


def _manifold():
    import manifold3d

    return manifold3d


def segments_for(radius_mm, tolerance_mm=CHORD_TOLERANCE_MM, lo=MIN_SEGMENTS, hi=MAX_SEGMENTS):
    """Segments around a circle of this radius so the chord error stays under
    ``tolerance_mm``; rounded up to a multiple of 4 (manifold3d's geodesic
    spheres need that) and clamped to [lo, hi]."""
    r = max(float(radius_mm), 1e-9)
    x = max(-1.0, min(1.0, 1.0 - tolerance_mm / r))
    ang = math.acos(x)
    n = hi if ang <= 0 else int(math.ceil(math.pi / ang))
    n = max(lo, min(hi, n))
    return int(4 * math.ceil(n / 4))


def sphere_triangles(segments):
    """Triangles of a manifold3d geodesic sphere with this many segments
    (refined octahedron: segments^2 / 2)."""
    s = int(4 * math.ceil(segments / 4))
    return s * s // 2


def rod_triangles(segments):
    """Triangles of a closed cylinder with this many sides (4 n - 4)."""
    return 4 * int(segments) - 4


def estimate_triangles(n_spheres, sphere_segments, n_rods=0, rod_segments=16):
    """Upper bound of the triangle count of the union before it is made (the
    union only removes buried triangles and adds a few along seams)."""
    return int(n_spheres) * sphere_triangles(sphere_segments) + int(n_rods) * rod_triangles(rod_segments)


class Templates:
    """Template solids: one sphere per (colour group, radius, segments), one
    unit-height cylinder per (radius, segments).  Copies made by transforms
    keep the template's original id, so triangles can be traced back."""

    def __init__(self):
        self._spheres = {}
        self._rods = {}
        self.group_of_id = {}      # manifold original id -> group label

    def sphere(self, group, radius, segments):
        key = (group, round(float(radius), 9), int(segments))
        s = self._spheres.get(key)
        if s is None:
            m = _manifold()
            s = m.Manifold.sphere(float(radius), int(segments))
            # volume-preserving: scale the tessellation so its volume is the
            # true sphere's (an inscribed polyhedron is smaller), so volumes,
            # masses and packing factors come out right at a modest triangle count
            k = (4.0 / 3.0 * math.pi * float(radius) ** 3 / s.volume()) ** (1.0 / 3.0)
            s = m.Manifold.sphere(float(radius) * k, int(segments))
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
    """3x3 rotation matrix taking +z to the unit vector ``d``."""
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
    """3x3 rotation taking unit vector a to unit vector b."""
    ra = rotation_z_to(a)
    rb = rotation_z_to(b)
    return rb @ ra.T


def place_sphere(template, centre):
    return template.translate(tuple(float(x) for x in centre))


def place_rod(template, p0, p1):
    """The unit-height template cylinder stretched from p0 to p1."""
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
    """Batch union of many solids (one manifold3d call)."""
    m = _manifold()
    if not solids:
        return m.Manifold()
    return m.Manifold.batch_boolean(list(solids), m.OpType.Add)


def box_from_cell(cell_mm):
    """The parallelepiped spanned by the three cell rows (mm), as a solid."""
    m = _manifold()
    import itertools

    corners = np.array(list(itertools.product((0.0, 1.0), repeat=3))) @ np.asarray(cell_mm, float)
    return m.Manifold.hull_points(corners.astype(float).tolist())


def to_trimesh(solid, templates=None):
    """(trimesh.Trimesh, per-face group labels or None) from a manifold solid."""
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
        if len(groups) != len(faces):       # should not happen; fall back to no colour
            groups = None
    tm = trimesh.Trimesh(vertices=verts, faces=faces, process=False)
    return tm, groups
