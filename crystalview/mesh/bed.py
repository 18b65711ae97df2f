"""How a model meets the printer's bed: contact area, overhang area, the
longest unsupported span, and the choice of the face it stands on.

Definitions (measured on the mesh, in mm):

* contact: the area of the faces lying on the bed (within 0.01 mm of the
  lowest point, normal within 8 degrees of straight down);
* overhang: the area of the other faces that face downward more steeply than
  the overhang angle (45 degrees by default: a face tilted more than 45
  degrees from vertical needs support on a desktop printer, common
  practice), i.e. normal z < -sin(angle);
* unsupported span: the longest horizontal run of a rod whose underside
  overhangs (a bridge), or the width of a ball's overhanging underside,
  whichever is longer.
"""
from __future__ import annotations

import math

import numpy as np

from . import primitives as P

DEFAULT_OVERHANG_ANGLE = 45.0   # degrees from vertical a desktop printer prints without support (common practice)
MIN_CONTACT_MM2 = 25.0          # a 5 x 5 mm patch: the least bed contact a model stands and stays on (common practice)
BED_TOL = 0.01                  # mm


def mesh_arrays(mesh):
    """(vertices, faces, unit face normals, face areas) of a trimesh mesh, as numpy arrays.

    >>> import trimesh
    >>> V, F, N, A = mesh_arrays(trimesh.creation.box((10, 20, 5)))
    >>> V.shape, F.shape, round(float(A.sum()), 6)
    ((8, 3), (12, 3), 700.0)
    """
    V = np.asarray(mesh.vertices, float)
    F = np.asarray(mesh.faces, np.int64)
    tri = V[F]
    n = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    a = np.linalg.norm(n, axis=1)
    n = np.divide(n, a[:, None], out=np.zeros_like(n), where=a[:, None] > 0)
    return V, F, n, 0.5 * a


def contact_overhang(V, F, N, A, R=None, angle=DEFAULT_OVERHANG_ANGLE):
    """(contact mm^2, overhang mm^2) of a mesh turned by rotation R (3x3).

    >>> import trimesh
    >>> box = trimesh.creation.box((10, 20, 5))
    >>> contact_overhang(*mesh_arrays(box))
    (200.0, 0.0)
    """
    if R is not None:
        N = N @ np.asarray(R).T
        z = V @ np.asarray(R)[2]
    else:
        z = V[:, 2]
    z0 = z.min()
    on = (z[F] <= z0 + BED_TOL).all(axis=1) & (N[:, 2] < -math.cos(math.radians(8)))
    over = (N[:, 2] < -math.sin(math.radians(angle))) & ~on
    return float(A[on].sum()), float(A[over].sum())


def candidate_faces(points, limit=8):
    """Outward unit normals and areas of the largest distinct faces of the
    points' convex hull (the faces a model can stand on), largest first.

    >>> import trimesh
    >>> faces = candidate_faces(trimesh.creation.box((10, 20, 5)).vertices, limit=2)
    >>> [((n.round(6) + 0.0).tolist(), round(a, 6)) for n, a in faces]
    [([0.0, 0.0, -1.0], 200.0), ([0.0, 0.0, 1.0], 200.0)]
    """
    from scipy.spatial import ConvexHull, QhullError

    pts = np.asarray(points, float)
    try:
        hull = ConvexHull(pts)
    except (QhullError, ValueError):
        return [(np.array([0.0, 0.0, -1.0]), 0.0)]
    eq = hull.equations
    tri = pts[hull.simplices]
    area = 0.5 * np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]), axis=1)
    size = max(float(np.ptp(pts, axis=0).max()), 1e-9)
    key = np.round(np.column_stack([eq[:, :3], eq[:, 3] / size]), 5)
    uniq, inv = np.unique(key, axis=0, return_inverse=True)
    face_area = np.bincount(inv.reshape(-1), weights=area)
    order = np.argsort(-face_area, kind="stable")[:limit]
    out = []
    for k in order:
        n = uniq[k, :3] / np.linalg.norm(uniq[k, :3])
        out.append((n, float(face_area[k])))
    return out


def choose_orientation(mesh, hull_points, angle=DEFAULT_OVERHANG_ANGLE, limit=8):
    """Try the candidate faces down; return (rotation, table) where table
    lists every candidate (normal, hull face area, contact, overhang) and the
    chosen one first.  Chosen: among candidates that stand on their own (or
    all, if none does), the least overhang; within 2 % of it, the largest
    face (the steadiest).

    >>> import trimesh
    >>> box = trimesh.creation.box((10, 20, 5))
    >>> R, table = choose_orientation(box, box.vertices)
    >>> len(table), round(table[0]["hull_area"], 6), round(table[0]["contact"], 6)
    (6, 200.0, 200.0)
    """
    V, F, N, A = mesh_arrays(mesh)
    rows = []
    for n, area in candidate_faces(hull_points, limit):
        R = P.rotation_to(n, np.array([0.0, 0.0, -1.0]))
        c, o = contact_overhang(V, F, N, A, R, angle)
        rows.append(dict(normal=n, hull_area=area, contact=c, overhang=o, R=R))
    standing = [r for r in rows if r["contact"] >= MIN_CONTACT_MM2] or rows
    best = min(r["overhang"] for r in standing)
    near = [r for r in standing if r["overhang"] <= best * 1.02 + 1e-6]
    pick = max(near, key=lambda r: (r["hull_area"], -r["overhang"]))
    rows.sort(key=lambda r: (r is not pick, r["overhang"]))
    return pick["R"], rows


def miller_name(normal, lattice_cell):
    """'(hkl)' for a plane with this Cartesian normal in a lattice whose
    conventional cell rows are ``lattice_cell`` (small integers), or None.

    >>> miller_name([1, 1, 1], np.eye(3) * 3.6149), miller_name([0, 0, -1], np.eye(3))
    ('(111)', '(00-1)')
    """
    h = np.asarray(lattice_cell, float) @ np.asarray(normal, float)
    h = np.where(np.abs(h) < 1e-6 * np.abs(h).max(), 0.0, h)
    nz = np.abs(h[np.abs(h) > 0])
    if not len(nz):
        return None
    for d in range(1, 7):
        v = h / nz.min() * d
        if np.allclose(v, np.round(v), atol=1e-3) and np.abs(np.round(v)).max() <= 12:
            v = np.round(v).astype(int)
            g = np.gcd.reduce(np.abs(v[v != 0]))
            v = v // g
            return "(" + "".join(f"-{-x}" if x < 0 else f"{x}" for x in v) + ")"
    return None


def spans(centres, balls, rods, angle=DEFAULT_OVERHANG_ANGLE):
    """Longest unsupported span (mm) and what it is, for balls at ``centres``
    (already turned to the print orientation) joined by ``rods`` (i, j, r, g).

    >>> centres = np.array([[0.0, 0.0, 5.0], [20.0, 0.0, 5.0]])
    >>> best, what = spans(centres, np.array([3.0, 3.0]), [(0, 1, 1.0, "bond")])
    >>> round(float(best), 3), what
    (14.0, 'a rod bridging between two balls')
    """
    s = math.sin(math.radians(angle))
    best, what = 0.0, "none"
    for i, j, r, _g in rods:
        d = centres[j] - centres[i]
        L = float(np.linalg.norm(d))
        if L <= 0:
            continue
        # underside normal z = -cos(elevation); it overhangs when cos(elevation) > sin(angle)
        horiz = math.hypot(d[0], d[1])
        if horiz / L > s:
            free = max(L - balls[i] - balls[j], 0.0) * horiz / L
            if free > best:
                best, what = free, "a rod bridging between two balls"
    if len(balls):
        dome = 2.0 * float(np.max(balls)) * math.cos(math.radians(angle))
        if dome > best:
            best, what = dome, "the underside of a ball"
    return best, what
