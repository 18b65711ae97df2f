"""STL (binary): the printable solid in millimetres.  STL carries no units;
slicers read the numbers as mm, which is what we write."""
from __future__ import annotations

import numpy as np


def stl_bytes(meshes):
    """Binary STL of one or more trimesh meshes (normals from the winding).

    >>> import trimesh
    >>> data = stl_bytes([trimesh.creation.box((10, 10, 10))])
    >>> len(data), int.from_bytes(data[80:84], "little")
    (684, 12)
    """
    import struct

    tris = [np.asarray(m.vertices, np.float64)[np.asarray(m.faces)] for m in meshes if len(m.faces)]
    tri = np.concatenate(tris) if tris else np.zeros((0, 3, 3))
    n = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    ln = np.linalg.norm(n, axis=1, keepdims=True)
    n = np.divide(n, ln, out=np.zeros_like(n), where=ln > 0)
    rec = np.zeros(len(tri), dtype=[("n", "<f4", 3), ("v", "<f4", (3, 3)), ("attr", "<u2")])
    rec["n"] = n
    rec["v"] = tri
    header = b"crystalview model, units: mm".ljust(80, b" ")
    return header + struct.pack("<I", len(tri)) + rec.tobytes()


def write_model_stl(model, path, force=False):
    """Write a printable :class:`~crystalview.mesh.printable.Model` as one binary STL file.

    >>> import os, tempfile, trimesh
    >>> from crystalview.mesh.printable import Body, Model
    >>> cube = trimesh.creation.box((10, 10, 10))
    >>> model = Model([Body("cube", cube, None)], {"host": "#b87333"})
    >>> p = os.path.join(tempfile.mkdtemp(), "cube.stl")
    >>> write_model_stl(model, p).name, os.path.getsize(p)
    ('cube.stl', 684)
    """
    from ..fileio import atomic_write

    return atomic_write(path, stl_bytes([b.mesh for b in model.bodies]), force=force)
