"""Fast assembly of ball-and-stick solids without one big boolean.

A ball-and-stick model is balls that do not touch, joined by rods.  Each rod
is cut at the middle of the gap between its two balls; each ball with its
half-rods is a *node*.  Nodes of one kind (same ball, same half-rods in the
same directions) are one small manifold3d union made once; every node of the
model is a translated copy.  Two nodes meet only at the flat end discs of a
rod's two halves, which share their rim vertices exactly (both halves are cut
from one polygon frame), so the end discs are dropped and the rims welded:
the result is the same watertight solid as the union of all balls and rods,
made with a few dozen small booleans instead of one over thousands of parts.

Where parts of different nodes would touch anywhere else (balls nearly
touching, rods crossing, a rod grazing a third ball), :func:`stitch` returns
None and the caller makes one batch union instead.

Rods of every model start just inside their ball (never at its centre): rods
meeting at a ball's centre only add hidden intersections that slow the union.
"""
from __future__ import annotations

import math

import numpy as np

from . import primitives as P

GAP_MIN = 0.05        # mm: smallest gap between a half-rod's end and a ball for the stitched path
CLEAR = 0.02          # mm: parts of different nodes must stay this far apart


def rod_start(R_in, r_out):
    """Distance from a ball's centre where a rod may start so its end disc is
    hidden inside the ball (inner radius ``R_in``).

    >>> round(rod_start(3.0, 1.0), 4), rod_start(1.0, 2.0)
    (2.7328, 0.0)
    """
    return math.sqrt(max((0.97 * R_in) ** 2 - r_out ** 2, 0.0))


def canonical(u):
    """The rod direction with a fixed sign (first clear nonzero component positive).

    >>> canonical(np.array([0.0, -1.0, 0.5])).tolist()
    [-0.0, 1.0, -0.5]
    >>> canonical(np.array([0.0, 1.0, 0.0])).tolist()
    [0.0, 1.0, 0.0]
    """
    for x in u:
        if abs(x) > 1e-9:
            return u if x > 0 else -u
    return u


def _seg_seg_dist(p1, q1, p2, q2):
    """Vectorised distance between segments p1-q1 and p2-q2 (arrays (M, 3))."""
    d1 = q1 - p1
    d2 = q2 - p2
    r = p1 - p2
    a = (d1 * d1).sum(1)
    e = (d2 * d2).sum(1)
    f = (d2 * r).sum(1)
    c = (d1 * r).sum(1)
    b = (d1 * d2).sum(1)
    denom = a * e - b * b
    eps = 1e-12
    s = np.where(denom > eps, np.clip((b * f - c * e) / np.where(denom > eps, denom, 1), 0, 1), 0.0)
    s = np.where(a > eps, s, 0.0)
    t = np.where(e > eps, (b * s + f) / np.where(e > eps, e, 1), 0.0)
    t_c = np.clip(t, 0, 1)
    s = np.where((t < 0) & (a > eps), np.clip(-c / np.where(a > eps, a, 1), 0, 1), s)
    s = np.where((t > 1) & (a > eps), np.clip((b - c) / np.where(a > eps, a, 1), 0, 1), s)
    t = t_c
    c1 = p1 + d1 * s[:, None]
    c2 = p2 + d2 * t[:, None]
    return np.linalg.norm(c1 - c2, axis=1)


def layout(centres, balls, rods, sphere_seg, rod_seg):
    """Per-rod geometry, one dict per rod: the unit direction u (canonical),
    tail node, head node, start param at tail, cut param from tail, start
    param at head, length, outer radius, sides.  Params are distances along u from the tail centre
    (start, cut) and back from the head centre (head start).

    >>> centres = np.array([[0.0, 0.0, 0.0], [10.0, 0.0, 0.0]])
    >>> geo = layout(centres, [3.0, 3.0], [(0, 1, 1.0, "bond")], lambda r: 32, lambda r: 16)
    >>> g = geo[0]
    >>> g["u"].tolist(), g["tail"], g["head"], round(g["cut"], 3), g["sides"]
    ([1.0, 0.0, 0.0], 0, 1, 5.0, 16)
    """
    out = []
    for i, j, r, g in rods:
        d = centres[j] - centres[i]
        L = float(np.linalg.norm(d))
        u = d / L
        cu = canonical(u)
        if np.dot(cu, u) < 0:
            i, j = j, i
        n = rod_seg(r)
        r_out = r / math.cos(math.pi / n)
        ki, ei = P.sphere_shape(sphere_seg(balls[i]))
        kj, ej = P.sphere_shape(sphere_seg(balls[j]))
        Ro_i = balls[i] * ki
        Ro_j = balls[j] * kj
        Ri_in = balls[i] * (1 - ei)
        Rj_in = balls[j] * (1 - ej)
        cut = Ro_i + (L - Ro_i - Ro_j) / 2.0
        out.append(dict(u=cu, tail=int(i), head=int(j), t_tail=rod_start(Ri_in, r_out),
                        t_head=rod_start(Rj_in, r_out), cut=cut, L=L, r=float(r), r_out=r_out, sides=n,
                        group=g, gap=(L - Ro_i - Ro_j) / 2.0, Ro=(Ro_i, Ro_j)))
    return out


def _conflict(centres, balls_out, geo):
    """True when parts of different nodes come closer than CLEAR anywhere but
    at a rod's own cut (conservative: rods checked as capsules)."""
    from scipy.spatial import cKDTree

    # capsules: (p, q, radius, node, rod or -1)
    P0, Q0, RAD, NODE, ROD = [], [], [], [], []
    for k, c in enumerate(centres):
        P0.append(c); Q0.append(c); RAD.append(balls_out[k]); NODE.append(k); ROD.append(-1)
    for k, g in enumerate(geo):
        ct, ch = centres[g["tail"]], centres[g["head"]]
        P0.append(ct + g["u"] * g["t_tail"]); Q0.append(ct + g["u"] * g["cut"])
        RAD.append(g["r_out"]); NODE.append(g["tail"]); ROD.append(k)
        P0.append(ct + g["u"] * g["cut"]); Q0.append(ch - g["u"] * g["t_head"])
        RAD.append(g["r_out"]); NODE.append(g["head"]); ROD.append(k)
    P0 = np.array(P0); Q0 = np.array(Q0); RAD = np.array(RAD); NODE = np.array(NODE); ROD = np.array(ROD)
    mid = (P0 + Q0) / 2
    half = np.linalg.norm(Q0 - P0, axis=1) / 2
    reach = float((half + RAD).max())
    pairs = cKDTree(mid).query_pairs(2 * reach + CLEAR, output_type="ndarray")
    if len(pairs) == 0:
        return False
    a, b = pairs[:, 0], pairs[:, 1]
    keep = NODE[a] != NODE[b]
    a, b = a[keep], b[keep]
    # the two halves of one rod, and a half-rod against the far ball of its own rod, meet by design
    same_rod = (ROD[a] >= 0) & (ROD[a] == ROD[b])
    a, b = a[~same_rod], b[~same_rod]
    own = np.zeros(len(a), bool)
    for x, y in ((a, b), (b, a)):
        isrod = ROD[x] >= 0
        rk = np.where(isrod, ROD[x], 0)
        tails = np.array([g["tail"] for g in geo] or [0])[rk]
        heads = np.array([g["head"] for g in geo] or [0])[rk]
        own |= isrod & (ROD[y] < 0) & ((NODE[y] == tails) | (NODE[y] == heads))
    a, b = a[~own], b[~own]
    if len(a) == 0:
        return False
    dist = _seg_seg_dist(P0[a], Q0[a], P0[b], Q0[b])
    return bool((dist < RAD[a] + RAD[b] + CLEAR).any())


def stitch(centres, balls, groups, rods, templates, sphere_seg, rod_seg):
    """(solid, labels): the ball-and-stick solid as one manifold3d Manifold
    whose face_id is an index into ``labels`` (kept through later booleans,
    see primitives.to_trimesh), or None where the fast path does not
    apply.  ``sphere_seg(radius)`` and ``rod_seg(radius)`` give tessellations.

    >>> t = P.Templates()
    >>> centres = np.array([[0.0, 0.0, 0.0], [10.0, 0.0, 0.0]])
    >>> solid, labels = stitch(centres, [3.0, 3.0], ["host", "host"], [(0, 1, 1.0, "bond")], t,
    ...                        lambda r: 32, lambda r: 16)
    >>> len(solid.decompose()), sorted(labels)
    (1, ['bond', 'host'])
    """
    m3 = P._manifold()
    centres = np.asarray(centres, float)
    if not len(rods):
        return None
    geo = layout(centres, balls, rods, sphere_seg, rod_seg)
    if min(g["gap"] for g in geo) < GAP_MIN:
        return None
    balls_out = np.array([balls[k] * P.sphere_shape(sphere_seg(balls[k]))[0] for k in range(len(balls))])
    if _conflict(centres, balls_out, geo):
        return None
    # slots of every node: (rod index, role)
    slots = [[] for _ in range(len(centres))]
    for k, g in enumerate(geo):
        slots[g["tail"]].append((k, "tail"))
        slots[g["head"]].append((k, "head"))
    labels = []
    label_index = {}

    def lab(x):
        if x not in label_index:
            label_index[x] = len(labels)
            labels.append(x)
        return label_index[x]

    types = {}
    node_type = []
    for n, sl in enumerate(slots):
        key_sl = []
        for k, role in sl:
            g = geo[k]
            if role == "tail":
                p0, p1 = g["t_tail"], g["cut"]
            else:
                p0, p1 = -(g["L"] - g["cut"]), -g["t_head"]
            key_sl.append((tuple(np.round(g["u"] * 1e6).astype(int)), role, round(p0, 6), round(p1, 6),
                           round(g["r"], 6), g["sides"], g["group"]))
        order = sorted(range(len(sl)), key=lambda q: key_sl[q])
        sl = [sl[q] for q in order]
        slots[n] = sl
        key = (groups[n], round(float(balls[n]), 6), sphere_seg(balls[n]), tuple(key_sl[q] for q in order))
        if key not in types:
            types[key] = _make_node(n, sl, geo, balls, groups, templates, sphere_seg, lab)
            if types[key] is None:
                return None
        node_type.append(key)
    # assemble
    verts, faces, fids = [], [], []
    offset = 0
    rim_of = {}                                    # (rod, role) -> global vertex indices in angle order
    for n, key in enumerate(node_type):
        t = types[key]
        verts.append(t["verts"] + centres[n])
        faces.append(t["faces"] + offset)
        fids.append(t["fid"])
        for (k, role), rim in zip(slots[n], t["rims"]):
            rim_of[(k, role)] = rim + offset
        offset += len(t["verts"])
    V = np.concatenate(verts)
    F = np.concatenate(faces)
    FID = np.concatenate(fids)
    remap = np.arange(len(V))
    for k in range(len(geo)):
        a = rim_of[(k, "tail")]
        b = rim_of[(k, "head")]
        if len(a) != len(b) or np.abs(V[a] - V[b]).max() > 1e-3:
            return None
        V[a] = (V[a] + V[b]) / 2
        remap[b] = a
    F = remap[F]
    used = np.zeros(len(V), bool)
    used[F.ravel()] = True
    newi = np.cumsum(used) - 1
    V = V[used]
    F = newi[F]
    mesh = m3.Mesh(vert_properties=np.ascontiguousarray(V, np.float32),
                   tri_verts=np.ascontiguousarray(F, np.uint32), face_id=np.ascontiguousarray(FID, np.uint32))
    solid = m3.Manifold(mesh)
    if solid.status() != m3.Error.NoError or solid.num_tri() != len(F):
        return None
    return solid, labels


def _make_node(n, sl, geo, balls, groups, T, sphere_seg, lab):
    """One node in its own frame: ball + half-rods, its faces without the cut
    discs, face labels and the rim vertex indices of every slot."""
    m3 = P._manifold()
    R = float(balls[n])
    parts = [T.sphere(groups[n], R, sphere_seg(R))]
    cuts = []
    for k, role in sl:
        g = geo[k]
        if role == "tail":
            p0, p1, cut = g["t_tail"], g["cut"], g["cut"]
        else:
            p0, p1, cut = -(g["L"] - g["cut"]), -g["t_head"], -(g["L"] - g["cut"])
        rod = T.rod(g["group"], g["r"], g["sides"])
        parts.append(P.place_rod(rod, g["u"] * p0, g["u"] * p1))
        cuts.append((g["u"] * cut, g["u"], g["r_out"], g["sides"]))
    solid = m3.Manifold.batch_boolean(parts, m3.OpType.Add)
    mg = solid.to_mesh()
    V = np.asarray(mg.vert_properties, np.float64)[:, :3]
    F = np.asarray(mg.tri_verts, np.int64)
    run_index = np.asarray(mg.run_index, np.int64)
    run_ids = np.asarray(mg.run_original_id, np.int64)
    counts = np.diff(run_index) // 3
    fid = np.repeat([lab(T.group_of_id.get(int(i), "")) for i in run_ids], counts).astype(np.uint32)
    drop = np.zeros(len(F), bool)
    rims = []
    for cpt, u, r_out, sides in cuts:
        rel = V - cpt
        ax = rel @ u
        radial = np.linalg.norm(rel - np.outer(ax, u), axis=1)
        onv = (np.abs(ax) < 1e-4) & (radial < r_out * 1.001 + 1e-4)
        cap = onv[F].all(axis=1)
        drop |= cap
        rim = np.unique(F[cap].ravel())
        if len(rim) != sides:
            return None
        Rm = P.rotation_z_to(u)
        loc = (V[rim] - cpt) @ Rm
        ang = np.mod(np.arctan2(loc[:, 1], loc[:, 0]) + math.pi / sides, 2 * math.pi)
        rims.append(rim[np.argsort(ang)])
    return dict(verts=V, faces=F[~drop], fid=fid[~drop], rims=rims)
