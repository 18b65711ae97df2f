"""glTF 2.0 (Khronos): .glb (binary) and .gltf (JSON with the data embedded),
written with numpy + json.

What is in the file
-------------------
* One material per colour group from the project palette (atoms by role and
  element, bonds, cell edges).  glTF colours are linear, so the palette's sRGB
  hex colours are converted.
* One shared unit sphere and one shared unit rod; each atom / bond is an
  instance of them with its own translation, rotation and scale.
* Node names say what they hold: "Cu atoms (host)", "bonds", "unit cell".
* Units: glTF is in metres with +Y up.  By default 1 angstrom -> 1 cm
  (0.01 m per angstrom, a table-top size for AR and viewers); with
  ``real_scale=True`` 1 angstrom -> 1e-10 m.  The scale used is stated in
  ``asset.extras``.  The crystal's z axis becomes glTF's +Y.

Instancing (decided here): crystals showing up to ``INSTANCING_THRESHOLD``
atoms are written as plain nodes that share one mesh per colour group, which
every glTF viewer shows.  Larger crystals use EXT_mesh_gpu_instancing (one
node per colour group with per-instance translation/rotation/scale
accessors), listed in ``extensionsRequired`` so that a viewer without it
refuses the file instead of showing a single atom.  Either way the sphere
geometry is stored once, so large crystals stay small (about 40 bytes per
atom with instancing).
"""
from __future__ import annotations

import base64
import json
import math
import struct

import numpy as np

from ..errors import LimitError, UserError

INSTANCING_THRESHOLD = 2000
MAX_INSTANCES = 5_000_000
DEFAULT_M_PER_A = 0.01          # 1 A -> 1 cm
REAL_M_PER_A = 1e-10
BALL_FRACTION = 0.45
ROD_FRACTION = 0.15
STYLES = ("ball-and-stick", "space-filling")

# glTF constants
FLOAT, UINT16, UINT32 = 5126, 5123, 5125
ARRAY_BUFFER, ELEMENT_ARRAY_BUFFER = 34962, 34963


def srgb_to_linear(c):
    """sRGB colour components (0..1) to linear light, as glTF base colours need.

    >>> srgb_to_linear([0.0, 0.5, 1.0]).round(4).tolist()
    [0.0, 0.214, 1.0]
    """
    c = np.asarray(c, float)
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def unit_sphere(n_lat=16, n_lon=24):
    """(positions, normals, indices) of a UV sphere of radius 1, outward CCW.

    >>> pos, nrm, idx = unit_sphere(4, 6)
    >>> pos.shape, idx.shape, np.allclose(np.linalg.norm(pos, axis=1), 1, atol=1e-6)
    ((35, 3), (108,), True)
    """
    th = np.linspace(0, math.pi, n_lat + 1)
    ph = np.linspace(0, 2 * math.pi, n_lon + 1)
    T, Ph = np.meshgrid(th, ph, indexing="ij")
    pos = np.stack([np.sin(T) * np.cos(Ph), np.cos(T), -np.sin(T) * np.sin(Ph)], -1).reshape(-1, 3)
    idx = []
    w = n_lon + 1
    for i in range(n_lat):
        for j in range(n_lon):
            a, b, c, d = i * w + j, i * w + j + 1, (i + 1) * w + j, (i + 1) * w + j + 1
            if i != 0:
                idx.append((a, c, b))
            if i != n_lat - 1:
                idx.append((b, c, d))
    pos = pos.astype(np.float32)
    return pos, pos.copy(), np.array(idx, dtype=np.uint16).reshape(-1)


def unit_rod(n=16):
    """(positions, normals, indices) of an open cylinder of radius 1 from y=0 to y=1.

    >>> pos, nrm, idx = unit_rod(8)
    >>> pos.shape, idx.shape, sorted(set(pos[:, 1].round(6).tolist()))
    ((18, 3), (48,), [0.0, 1.0])
    """
    ph = np.linspace(0, 2 * math.pi, n + 1)
    ring = np.column_stack([np.cos(ph), np.zeros_like(ph), -np.sin(ph)])
    pos = np.vstack([ring, ring + [0, 1, 0]]).astype(np.float32)
    nor = np.vstack([ring, ring]).astype(np.float32)
    idx = []
    m = n + 1
    for j in range(n):
        a, b, c, d = j, j + 1, m + j, m + j + 1
        idx += [(a, b, c), (b, d, c)]
    return pos, nor, np.array(idx, dtype=np.uint16).reshape(-1)


def _quat_y_to(d):
    """Quaternions (x, y, z, w) rotating +Y onto each row of d (unit vectors)."""
    d = np.asarray(d, float)
    y = np.array([0.0, 1.0, 0.0])
    q = np.column_stack([np.cross(np.broadcast_to(y, d.shape), d), 1.0 + d @ y])
    flip = q[:, 3] < 1e-9
    q[flip] = [1.0, 0.0, 0.0, 0.0]
    return q / np.linalg.norm(q, axis=1, keepdims=True)


class _Builder:
    """Collects buffer views and accessors into one binary buffer."""

    def __init__(self):
        self.chunks = []
        self.length = 0
        self.views = []
        self.accessors = []

    def view(self, data, target=None):
        raw = np.ascontiguousarray(data).tobytes()
        pad = (-self.length) % 4
        if pad:
            self.chunks.append(b"\x00" * pad)
            self.length += pad
        v = {"buffer": 0, "byteOffset": self.length, "byteLength": len(raw)}
        if target is not None:
            v["target"] = target
        self.chunks.append(raw)
        self.length += len(raw)
        self.views.append(v)
        return len(self.views) - 1

    def accessor(self, data, kind, target=None, minmax=False):
        data = np.asarray(data)
        comp = {np.dtype(np.float32): FLOAT, np.dtype(np.uint16): UINT16, np.dtype(np.uint32): UINT32}[data.dtype]
        v = self.view(data, target)
        count = data.shape[0]
        a = {"bufferView": v, "componentType": comp, "count": int(count), "type": kind}
        if minmax:
            flat = data.reshape(count, -1)
            a["min"] = [float(x) for x in flat.min(axis=0)]
            a["max"] = [float(x) for x in flat.max(axis=0)]
        self.accessors.append(a)
        return len(self.accessors) - 1

    def blob(self):
        b = b"".join(self.chunks)
        return b + b"\x00" * ((-len(b)) % 4)


def estimate_bonds(points, radii, factor, sample=20_000, seed=0):
    """Bonds (as in :func:`count_bonds`) estimated from the bonds per atom of
    a random sample of ``sample`` atoms (exact when there are fewer atoms).

    >>> estimate_bonds(np.array([[0., 0, 0], [2.5, 0, 0], [9, 0, 0]]), np.array([1.28] * 3), 1.05)
    1
    """
    from scipy.spatial import cKDTree

    points = np.asarray(points, float)
    n = len(points)
    if n <= sample:
        return count_bonds(points, radii, factor)[0]
    pick = np.random.default_rng(seed).choice(n, sample, replace=False)
    values, which = np.unique(np.asarray(radii, float), return_inverse=True)
    which = which.reshape(-1)
    trees = [cKDTree(points[which == k]) for k in range(len(values))]
    ends = 0
    for a in range(len(values)):
        mine = pick[which[pick] == a]
        if len(mine) == 0:
            continue
        ta = cKDTree(points[mine])
        for b in range(len(values)):
            r = factor * (values[a] + values[b])
            ends += int(ta.count_neighbors(trees[b], r)) - int(ta.count_neighbors(trees[b], 1e-6))
    return int(round(ends / sample * n / 2))


def count_bonds(points, radii, factor):
    """(bonds, pairs within the largest bond length) of the atoms at
    ``points``: a bond joins atoms with 1e-6 < d <= factor (r_i + r_j), as
    in :func:`crystalview.mesh.printable.contact_pairs`.  Counted exactly by
    dual-tree counts per pair of radius groups, without listing any pair, so
    memory stays at the size of the points.

    >>> count_bonds(np.array([[0., 0, 0], [2.5, 0, 0], [9, 0, 0]]), np.array([1.28] * 3), 1.05)
    (1, 1)
    """
    from scipy.spatial import cKDTree

    points = np.asarray(points, float)
    if len(points) < 2:
        return 0, 0
    values, which = np.unique(np.asarray(radii, float), return_inverse=True)
    which = which.reshape(-1)
    trees = [cKDTree(points[which == k]) for k in range(len(values))]
    total = 0
    for a in range(len(values)):
        for b in range(a, len(values)):
            r = factor * (values[a] + values[b])
            c = int(trees[a].count_neighbors(trees[b], r)) - int(trees[a].count_neighbors(trees[b], 1e-6))
            total += c // 2 if a == b else c
    whole = cKDTree(points)
    r_max = 2.0 * float(values.max()) * factor
    near = (int(whole.count_neighbors(whole, r_max)) - len(points)) // 2
    return total, near


def _bond_list(points, radii, factor):
    """The bonds of :func:`count_bonds` as an (M, 2) array, listed per pair
    of radius groups so no pair longer than its own bond is ever held.

    >>> _bond_list(np.array([[0., 0, 0], [2.5, 0, 0], [9, 0, 0]]), np.array([1.28] * 3), 1.05).tolist()
    [[0, 1]]
    """
    from scipy.spatial import cKDTree

    points = np.asarray(points, float)
    values, which = np.unique(np.asarray(radii, float), return_inverse=True)
    which = which.reshape(-1)
    idx = [np.flatnonzero(which == k) for k in range(len(values))]
    trees = [cKDTree(points[i]) for i in idx]
    out = []
    for a in range(len(values)):
        for b in range(a, len(values)):
            r = factor * (values[a] + values[b])
            if a == b:
                pr = trees[a].query_pairs(r, output_type="ndarray")
            else:
                m = trees[a].sparse_distance_matrix(trees[b], r, output_type="ndarray")
                pr = np.stack([m["i"], m["j"]], axis=1) if len(m) else np.zeros((0, 2), np.int64)
            if len(pr):
                p0, p1 = idx[a][pr[:, 0]], idx[b][pr[:, 1]]
                d = np.linalg.norm(points[p0] - points[p1], axis=1)
                ok = d > 1e-6
                out.append(np.stack([np.minimum(p0, p1), np.maximum(p0, p1)], axis=1)[ok])
    return np.vstack(out) if out else np.zeros((0, 2), np.int64)


def gltf_document(crystal, style="ball-and-stick", real_scale=False, instancing="auto", max_instances=MAX_INSTANCES,
                  cell_shape=None):
    """(json dict, binary buffer bytes) for the crystal.  One conventional
    cell of hcp or simple hexagonal is written as the hexagonal prism (17 or
    14 atoms and its 18 edges) unless ``cell_shape='primitive'``.

    >>> import crystalview as cv
    >>> doc, blob = gltf_document(cv.build("Cu"))
    >>> doc["asset"]["version"], len(doc["nodes"]) > 0, len(blob) % 4
    ('2.0', True, 0)
    """
    from ..about import __version__
    from ..crystal import ROLES
    from ..mesh.printable import contact_pairs, shown_atoms
    from ..palette import ROLE_COLOURS, atom_colours, hex_to_rgb

    if style not in STYLES:
        raise UserError(f"unknown style '{style}'; use one of {', '.join(STYLES)}")
    if instancing not in ("auto", "on", "off", True, False):
        raise UserError(f"instancing '{instancing}' must be auto, on or off")
    if len(crystal) == 0:
        raise UserError("the crystal has no atoms; nothing to export")
    if len(crystal) > max_instances:
        raise LimitError(f"{len(crystal):,} atoms is over the glTF cap of {max_instances:,} instances; "
                         f"export fewer cells")
    if style == "ball-and-stick" and len(crystal) * 7 > max_instances:
        # before the images and bonds are searched: a close-packed atom has 12 neighbours, 6 bonds each side
        raise LimitError(f"the file would hold about {len(crystal) * 7:,} atoms and bonds (12 neighbours per atom), "
                         f"over the cap of {max_instances:,}; export fewer cells or use style space-filling")
    m_per_A = REAL_M_PER_A if real_scale else DEFAULT_M_PER_A
    from ..prism import has_prism

    radii_all = crystal.atom_radii()
    prism = None
    if has_prism(crystal) or cell_shape is not None:
        # the prism helpers carry no renderer (numpy only); loaded only for hexagonal crystals
        from ..render.cells import PrismAtoms, prism_applies

        prism = PrismAtoms(crystal) if prism_applies(crystal, cell_shape) else None
    if prism is not None:
        pts, idx = prism.positions, prism.src
    else:
        pts, idx = shown_atoms(crystal, False, radii_all)
    radii = radii_all[idx]
    bonds = np.zeros((0, 2), int)
    if style == "ball-and-stick" and len(pts) * 7 > max_instances:
        # estimate before finding them: a close-packed atom has 12 neighbours, 6 bonds each side
        raise LimitError(f"the file would hold about {len(pts) * 7:,} atoms and bonds (12 neighbours per atom), over "
                         f"the cap of {max_instances:,}; export fewer cells or use style space-filling")
    if style == "ball-and-stick":
        est = estimate_bonds(pts, radii, 1.05)
        if len(pts) + est > 2 * max_instances:
            # clearly over: a sample's bonds per atom tells it in a fraction of the exact count's time
            raise LimitError(f"the file would hold about {len(pts) + est:,} atoms and bonds (about "
                             f"{est / len(pts):.1f} bonds per atom), over the cap of {max_instances:,}; export "
                             f"fewer cells or use style space-filling")
        n_bonds, n_near = count_bonds(pts, radii, 1.05)
        if len(pts) + n_bonds > max_instances:
            # counted exactly, without listing them: refused before any pair list is allocated
            raise LimitError(f"the file would hold {len(pts) + n_bonds:,} atoms and bonds ({n_bonds:,} bonds, "
                             f"{n_bonds / len(pts):.1f} per atom), over the cap of {max_instances:,}; export "
                             f"fewer cells or use style space-filling")
        if n_near <= 4 * max_instances:
            bonds, _ = contact_pairs(pts, radii, 1.05)
        else:
            bonds = _bond_list(pts, radii, 1.05)
    n_inst = len(pts) + len(bonds)
    if n_inst > max_instances:
        raise LimitError(f"the file would hold {n_inst:,} atoms and bonds, over the cap of {max_instances:,}; "
                         f"export fewer cells or use style space-filling")
    use_inst = (instancing in ("on", True)) or (instancing == "auto" and len(pts) > INSTANCING_THRESHOLD)
    if instancing in ("off", False):
        use_inst = False

    def to_gltf(v):                       # A, z-up  ->  m, y-up
        v = np.asarray(v, float) * m_per_A
        return np.column_stack([v[:, 0], v[:, 2], -v[:, 1]])

    colours, cindex, legend = atom_colours(crystal)
    cindex = cindex[idx]
    B = _Builder()
    materials = []

    def material(name, hexcol, metallic=0.1, rough=0.55):
        rgb = srgb_to_linear(hex_to_rgb(hexcol))
        materials.append({"name": name, "pbrMetallicRoughness": {
            "baseColorFactor": [float(rgb[0]), float(rgb[1]), float(rgb[2]), 1.0],
            "metallicFactor": metallic, "roughnessFactor": rough}})
        return len(materials) - 1

    sp, sn, si = unit_sphere()
    acc_sp = B.accessor(sp, "VEC3", ARRAY_BUFFER, minmax=True)
    acc_sn = B.accessor(sn, "VEC3", ARRAY_BUFFER)
    acc_si = B.accessor(si, "SCALAR", ELEMENT_ARRAY_BUFFER)
    meshes, nodes = [], []
    root_children = []
    frac = BALL_FRACTION if style == "ball-and-stick" else 1.0
    for k, (label, hexcol) in enumerate(legend):
        sel = np.nonzero(cindex == k)[0]
        if not len(sel):
            continue
        mat = material(label, hexcol)
        meshes.append({"name": f"sphere {label}", "primitives": [{
            "attributes": {"POSITION": acc_sp, "NORMAL": acc_sn}, "indices": acc_si, "material": mat}]})
        mesh_id = len(meshes) - 1
        t = to_gltf(pts[sel])
        s = (radii[sel] * frac * m_per_A).astype(float)
        sym = label.split(" ")[0]
        role = label[len(sym):].strip(" ()") or ROLES[int(crystal.roles[idx[sel[0]]])]
        group_name = f"{sym} atoms ({role})"
        if use_inst:
            ext = {"attributes": {
                "TRANSLATION": B.accessor(t.astype(np.float32), "VEC3"),
                "SCALE": B.accessor(np.repeat(s[:, None], 3, axis=1).astype(np.float32), "VEC3")}}
            nodes.append({"name": group_name, "mesh": mesh_id, "extensions": {"EXT_mesh_gpu_instancing": ext},
                          "extras": {"count": int(len(sel))}})
            root_children.append(len(nodes) - 1)
        else:
            children = []
            for n_, (tt, ss) in enumerate(zip(t, s)):
                nodes.append({"name": f"{sym} {n_ + 1}", "mesh": mesh_id,
                              "translation": [float(x) for x in tt], "scale": [float(ss)] * 3})
                children.append(len(nodes) - 1)
            nodes.append({"name": group_name, "children": children, "extras": {"count": int(len(sel))}})
            root_children.append(len(nodes) - 1)
    if len(bonds):
        rp, rn, ri = unit_rod()
        acc_rp = B.accessor(rp, "VEC3", ARRAY_BUFFER, minmax=True)
        acc_rn = B.accessor(rn, "VEC3", ARRAY_BUFFER)
        acc_ri = B.accessor(ri, "SCALAR", ELEMENT_ARRAY_BUFFER)
        mat = material("bond", ROLE_COLOURS["bond"])
        meshes.append({"name": "rod", "primitives": [{
            "attributes": {"POSITION": acc_rp, "NORMAL": acc_rn}, "indices": acc_ri, "material": mat}]})
        mesh_id = len(meshes) - 1
        p0 = to_gltf(pts[bonds[:, 0]])
        p1 = to_gltf(pts[bonds[:, 1]])
        d = p1 - p0
        L = np.linalg.norm(d, axis=1)
        q = _quat_y_to(d / L[:, None])
        r = ROD_FRACTION * np.minimum(radii[bonds[:, 0]], radii[bonds[:, 1]]) * m_per_A
        sc = np.column_stack([r, L, r])
        if use_inst:
            ext = {"attributes": {"TRANSLATION": B.accessor(p0.astype(np.float32), "VEC3"),
                                  "ROTATION": B.accessor(q.astype(np.float32), "VEC4"),
                                  "SCALE": B.accessor(sc.astype(np.float32), "VEC3")}}
            nodes.append({"name": "bonds", "mesh": mesh_id, "extensions": {"EXT_mesh_gpu_instancing": ext},
                          "extras": {"count": int(len(bonds))}})
        else:
            children = []
            for n_ in range(len(bonds)):
                nodes.append({"name": f"bond {n_ + 1}", "mesh": mesh_id, "translation": [float(x) for x in p0[n_]],
                              "rotation": [float(x) for x in q[n_]], "scale": [float(x) for x in sc[n_]]})
                children.append(len(nodes) - 1)
            nodes.append({"name": "bonds", "children": children, "extras": {"count": int(len(bonds))}})
        root_children.append(len(nodes) - 1)
    # cell edges as lines
    import itertools

    if prism is not None:
        corners = prism.prism.corners
        edges = [tuple(int(x) for x in e) for e in prism.prism.edges]
    else:
        corners = np.array(list(itertools.product((0.0, 1.0), repeat=3))) @ crystal.cell
        edges = [(i, j) for i in range(8) for j in range(i + 1, 8)
                 if bin(i ^ j).count("1") == 1]
    cp = to_gltf(corners).astype(np.float32)
    acc_cp = B.accessor(cp, "VEC3", ARRAY_BUFFER, minmax=True)
    acc_ci = B.accessor(np.array(edges, dtype=np.uint16).reshape(-1), "SCALAR", ELEMENT_ARRAY_BUFFER)
    mat = material("cell edges", ROLE_COLOURS["cell"], metallic=0.0, rough=1.0)
    meshes.append({"name": "cell edges", "primitives": [{"attributes": {"POSITION": acc_cp}, "indices": acc_ci,
                                                         "material": mat, "mode": 1}]})
    nodes.append({"name": "hexagonal prism" if prism is not None else "unit cell", "mesh": len(meshes) - 1})
    root_children.append(len(nodes) - 1)
    name = crystal.metadata.get("name") or " ".join(crystal.elements)
    lat = crystal.lattice.prototype if crystal.lattice is not None else ""
    nodes.append({"name": f"crystal {name} {lat}".strip(), "children": root_children})
    root = len(nodes) - 1
    blob = B.blob()
    scale_note = ("real size: 1 angstrom = 1e-10 m" if real_scale else
                  "model scale: 1 angstrom = 1 cm (0.01 m), 1e8 times real size")
    doc = {
        "asset": {"version": "2.0", "generator": f"crystalview {__version__}", "extras": {
            "units": "metres (glTF), +Y up = crystal z", "scale": scale_note, "metres_per_angstrom": m_per_A,
            "style": style, "atoms": int(len(crystal)), "spheres": int(len(pts)), "bonds": int(len(bonds)),
            "cell_angstrom": [[float(x) for x in row] for row in crystal.cell],
            "cell_drawn": "hexagonal prism" if prism is not None else "crystal cell"}},
        "scene": 0,
        "scenes": [{"name": f"{name}", "nodes": [root]}],
        "nodes": nodes,
        "meshes": meshes,
        "materials": materials,
        "accessors": B.accessors,
        "bufferViews": B.views,
        "buffers": [{"byteLength": len(blob)}],
    }
    if use_inst:
        doc["extensionsUsed"] = ["EXT_mesh_gpu_instancing"]
        doc["extensionsRequired"] = ["EXT_mesh_gpu_instancing"]
    return doc, blob


def glb_bytes(doc, blob):
    """The binary glTF (.glb) container of a glTF JSON document and its binary buffer.

    >>> import crystalview as cv
    >>> data = glb_bytes(*gltf_document(cv.build("Cu")))
    >>> data[:4], len(data) % 4
    (b'glTF', 0)
    """
    js = json.dumps(doc, separators=(",", ":")).encode("utf-8")
    js += b" " * ((-len(js)) % 4)
    blob = blob + b"\x00" * ((-len(blob)) % 4)
    total = 12 + 8 + len(js) + 8 + len(blob)
    return (struct.pack("<III", 0x46546C67, 2, total) + struct.pack("<II", len(js), 0x4E4F534A) + js
            + struct.pack("<II", len(blob), 0x004E4942) + blob)


def _summary(path, doc, size):
    ex = doc["asset"]["extras"]
    return {"file": str(path), "format": str(path).rsplit(".", 1)[-1], "bytes": size, "atoms": ex["atoms"],
            "spheres": ex["spheres"], "cell_drawn": ex.get("cell_drawn"),
            "bonds": ex["bonds"], "scale": ex["scale"], "metres_per_angstrom": ex["metres_per_angstrom"],
            "instancing": "EXT_mesh_gpu_instancing" in doc.get("extensionsUsed", []),
            "materials": [m["name"] for m in doc["materials"]]}


def write_glb(crystal, path, *, force=False, style="ball-and-stick", real_scale=False, instancing="auto",
              cell_shape=None):
    """Write a .glb file; returns a summary dict.

    >>> import crystalview as cv, os, tempfile
    >>> out = write_glb(cv.build("Cu"), os.path.join(tempfile.mkdtemp(), "cu.glb"))
    >>> out["format"], out["atoms"]
    ('glb', 4)
    """
    from ..fileio import atomic_write, check_target

    check_target(path, force=force)
    doc, blob = gltf_document(crystal, style=style, real_scale=real_scale, instancing=instancing,
                              cell_shape=cell_shape)
    data = glb_bytes(doc, blob)
    atomic_write(path, data, force=force)
    return _summary(path, doc, len(data))


def write_gltf(crystal, path, *, force=False, style="ball-and-stick", real_scale=False, instancing="auto",
              cell_shape=None):
    """Write a .gltf file with its buffer embedded as a data URI; returns a summary dict.

    >>> import crystalview as cv, os, tempfile
    >>> out = write_gltf(cv.build("Fe"), os.path.join(tempfile.mkdtemp(), "fe.gltf"))
    >>> out["format"], out["atoms"]
    ('gltf', 2)
    """
    from ..fileio import atomic_write, check_target

    check_target(path, force=force)
    doc, blob = gltf_document(crystal, style=style, real_scale=real_scale, instancing=instancing,
                              cell_shape=cell_shape)
    doc["buffers"][0]["uri"] = "data:application/octet-stream;base64," + base64.b64encode(blob).decode("ascii")
    text = json.dumps(doc, indent=1)
    atomic_write(path, text, force=force)
    return _summary(path, doc, len(text.encode("utf-8")))
