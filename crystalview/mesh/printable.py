"""Printable models: one watertight solid (or a kit of separate parts) from a
crystal, checked for a desktop printer and written as STL or 3MF.

Geometry, in millimetres (``scale`` mm per angstrom):

* ball-and-stick: balls of ``BALL_FRACTION`` x the hard-sphere radius, rods
  between atoms whose hard spheres touch or overlap (distance <= 1.05 x the
  sum of their radii); the atoms shown are those of the cell plus their
  periodic images on the cell faces, edges and corners.
* space-filling: hard spheres; spheres that only touch get a neck rod of the
  minimum feature size so the solid holds together.  With ``clip_to_cell``
  every sphere overlapping the cell is cut to the cell faces, so the solid's
  volume over the cell's volume is the packing factor.
* kit: separate balls with holes bored along the bond directions (hole = rod
  + clearance) and loose rods cut to length, laid out on the bed.

Everything is one batch union of spheres and rods in manifold3d (robust
booleans: the result is manifold, without self-intersections, with outward
normals).  Only numpy, scipy, trimesh and manifold3d are imported.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import LimitError, UserError
from . import primitives as P

DEFAULT_SCALE = 10.0            # mm per angstrom: 1 A -> 1 cm, a 3.6 A cell -> 36 mm
DEFAULT_BED = (220.0, 220.0, 250.0)   # mm; a common desktop bed size (common practice)
DEFAULT_MIN_FEATURE = 2.0       # mm; thinnest rod/neck that survives FDM printing and handling (common practice)
PLA_DENSITY = 1.24              # g/cm^3; PLA filament (common practice)
DEFAULT_CLEARANCE = 0.2         # mm; radial play for a push fit on an FDM printer (common practice)
DEFAULT_MAX_TRIANGLES = 5_000_000
MAX_MODEL_MM = 1000.0           # nothing over 1 m is a desk model
BALL_FRACTION = 0.45            # ball radius / hard-sphere radius (ball-and-stick)
ROD_FRACTION = 0.15             # rod radius / smaller hard-sphere radius (ball-and-stick)
KIT_ROD_FRACTION = 0.22         # kit rod radius / smaller ball radius
BOND_TOLERANCE = 1.05           # bond when distance <= 1.05 x (r_i + r_j)
STYLES = ("ball-and-stick", "space-filling")
PRINT_CAUTION = "A printed crystal model is a display piece, not a load-bearing engineering part."
SUFFIXES = (".stl", ".3mf")


@dataclass
class Body:
    """One printable solid: a trimesh mesh (mm) and, per face, a colour-group label."""
    name: str
    mesh: object
    groups: object = None


@dataclass
class Model:
    bodies: list
    colours: dict                          # group label -> hex colour
    info: dict = field(default_factory=dict)
    adjustments: list = field(default_factory=list)
    parts: list = field(default_factory=list)


class PrintReport(dict):
    """The print report: a dict (JSON-ready) with attribute access and text()."""

    def __getattr__(self, name):
        try:
            return self[name]
        except KeyError:
            raise AttributeError(name) from None

    def text(self):
        from .report import report_text

        return report_text(self)


# ------------------------------------------------------------------ option checks
def _positive(name, value, unit, example):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise UserError(f"{name} '{value}' is not a number; give a positive {unit}, e.g. {example}") from None
    if not math.isfinite(v) or v <= 0:
        raise UserError(f"{name} {value} must be a positive {unit}, e.g. {example}")
    return v


def _check_options(style, scale, min_feature, bed, material_density, clearance, clip_to_cell, kit):
    if style not in STYLES:
        from ..errors import suggest

        raise UserError(f"unknown style '{style}'{suggest(style, STYLES)}; use one of {', '.join(STYLES)}")
    scale = _positive("scale", DEFAULT_SCALE if scale is None else scale, "number of mm per angstrom", "--scale 10")
    min_feature = _positive("minimum feature", min_feature, "size in mm", "--min-feature 2")
    if min_feature < 0.4:
        raise UserError(f"minimum feature {min_feature:g} mm is below what a desktop nozzle (0.4 mm) can print; "
                        f"give 0.4 mm or more (2 mm is the default)")
    if bed is None:
        bed = DEFAULT_BED
    if len(bed) != 3:
        raise UserError("the bed size needs three numbers X Y Z in mm, e.g. --bed 220 220 250")
    bed = tuple(_positive("bed size", b, "length in mm", "--bed 220 220 250") for b in bed)
    material_density = _positive("material density", material_density, "density in g/cm^3", "1.24 for PLA")
    clearance = float(clearance)
    if not math.isfinite(clearance) or clearance < 0 or clearance > 2:
        raise UserError(f"clearance {clearance:g} mm must lie between 0 and 2 mm (0.2 mm is a common push fit)")
    if clip_to_cell and style != "space-filling":
        raise UserError("--clip-to-cell cuts space-filling spheres at the cell faces; add --style space-filling")
    if kit and (style != "ball-and-stick" or clip_to_cell):
        raise UserError("kit mode makes balls and rods; use it with --style ball-and-stick and without --clip-to-cell")
    return scale, min_feature, bed, material_density, clearance


# ------------------------------------------------------------------ geometry plan (angstrom -> mm)
def _shown_atoms(crystal, clip, radii_A):
    """Atom centres (A), index into the crystal and radii (A) of the atoms the
    model shows: the cell's atoms plus their images on the cell boundary, or,
    for a clipped model, every image whose sphere reaches into the cell."""
    from ..analysis.neighbours import with_images

    w = crystal.wrapped()
    cutoff = float(radii_A.max()) if clip else 1e-3
    pts, idx = with_images(w.positions, w.cell, w.pbc, cutoff)
    return pts, idx


def _pairs(points, radii, factor):
    """Pairs (i, j, d) with distance <= factor * (r_i + r_j)."""
    from scipy.spatial import cKDTree

    if len(points) < 2:
        return np.zeros((0, 2), int), np.zeros(0)
    tree = cKDTree(points)
    pr = tree.query_pairs(r=2.0 * float(radii.max()) * factor, output_type="ndarray")
    if len(pr) == 0:
        return np.zeros((0, 2), int), np.zeros(0)
    d = np.linalg.norm(points[pr[:, 0]] - points[pr[:, 1]], axis=1)
    keep = (d <= factor * (radii[pr[:, 0]] + radii[pr[:, 1]])) & (d > 1e-6)
    return pr[keep], d[keep]


def _connect(points, pairs):
    """Extra pairs so the atoms form one connected piece: each loose group is
    tied to its nearest atom outside it."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components
    from scipy.spatial import cKDTree

    n = len(points)
    if n < 2:
        return np.zeros((0, 2), int)
    extra = []
    cur = np.asarray(pairs, int).reshape(-1, 2)
    for _ in range(n):
        allp = np.vstack([cur] + ([np.array(extra)] if extra else []))
        g = coo_matrix((np.ones(len(allp)), (allp[:, 0], allp[:, 1])), shape=(n, n)) if len(allp) else \
            coo_matrix((n, n))
        ncomp, lab = connected_components(g, directed=False)
        if ncomp == 1:
            break
        sizes = np.bincount(lab)
        main = int(np.argmax(sizes))
        inside = np.nonzero(lab == main)[0]
        tree = cKDTree(points[inside])
        for comp in range(ncomp):
            if comp == main:
                continue
            members = np.nonzero(lab == comp)[0]
            d, k = tree.query(points[members])
            best = int(np.argmin(d))
            extra.append((int(members[best]), int(inside[k[best]])))
    return np.array(extra, int).reshape(-1, 2)


def _lay_flat_rotation(points):
    """Rotation that puts the largest face of the points' convex hull on the
    bed (its outward normal to -z).  Ties go to the face already facing down."""
    from scipy.spatial import ConvexHull, QhullError

    pts = np.asarray(points, float)
    if len(pts) < 4:
        return np.eye(3)
    try:
        hull = ConvexHull(pts)
    except (QhullError, ValueError):
        c = pts - pts.mean(axis=0)
        _, s, vt = np.linalg.svd(c, full_matrices=False)
        if len(s) < 3 or s[1] < 1e-9 * max(s[0], 1e-12):
            return np.eye(3)
        n = vt[2]
        if n[2] > 0:
            n = -n
        return P.rotation_to(n, np.array([0.0, 0.0, -1.0]))
    eq = hull.equations
    tri = pts[hull.simplices]
    area = 0.5 * np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]), axis=1)
    scale = max(float(np.ptp(pts, axis=0).max()), 1e-9)
    key = np.round(np.column_stack([eq[:, :3], eq[:, 3] / scale]), 5)
    uniq, inv = np.unique(key, axis=0, return_inverse=True)
    inv = inv.reshape(-1)
    face_area = np.bincount(inv, weights=area)
    best = face_area.max()
    cand = np.nonzero(face_area >= best * (1 - 1e-6))[0]
    normals = uniq[cand, :3]
    n = normals[np.argmin(normals[:, 2])]          # the one facing down already, if any
    n = n / np.linalg.norm(n)
    return P.rotation_to(n, np.array([0.0, 0.0, -1.0]))


def _plan(crystal, style, scale, clip, min_feature, kit, max_triangles, segments):
    """Atoms, rods and checks in mm, before any mesh is made."""
    from ..palette import ROLE_COLOURS, atom_colours

    n_atoms = len(crystal)
    if n_atoms == 0:
        raise UserError("the crystal has no atoms; nothing to print")
    radii_A_all = crystal.atom_radii()
    r_max = float(radii_A_all.max())
    ball_frac = 1.0 if style == "space-filling" else BALL_FRACTION
    seg = int(segments) if segments else P.segments_for(ball_frac * r_max * scale)
    if segments is not None and (seg < 8 or seg > 512):
        raise UserError(f"sphere segments {segments} must lie between 8 and 512 (about 48 is plenty)")
    # first refusal: the spheres alone, before any images or neighbour search
    est = P.estimate_triangles(n_atoms, seg)
    if est > max_triangles:
        raise LimitError(f"the model would have about {est:,} triangles ({n_atoms:,} atoms), over the cap of "
                         f"{max_triangles:,}; print fewer cells or raise the cap with --max-triangles {est}")
    pts_A, idx = _shown_atoms(crystal, clip, radii_A_all)
    radii_A = radii_A_all[idx]
    colours, cindex, legend = atom_colours(crystal)
    labels = [lab for lab, _ in legend]
    atom_group = np.array(labels, dtype=object)[cindex[idx]]
    group_colours = {lab: col for lab, col in legend}
    group_colours["bond"] = ROLE_COLOURS["bond"]
    group_colours["base"] = ROLE_COLOURS["cell"]
    centres = pts_A * scale
    R_hs = radii_A * scale                               # hard-sphere radii in mm
    adjustments = []
    rods = []                                            # (i, j, radius_mm, group)
    if style == "ball-and-stick":
        balls = BALL_FRACTION * R_hs
        if balls.min() * 2 < min_feature:
            need = min_feature / (2 * BALL_FRACTION * radii_A.min())
            raise UserError(f"the smallest balls would be {2 * balls.min():.2f} mm across, below the minimum "
                            f"feature of {min_feature:g} mm; use --scale {math.ceil(need * 10) / 10:g} or larger")
        pairs, dist = _pairs(pts_A, radii_A, BOND_TOLERANCE)
        extra = _connect(pts_A, pairs)
        if len(extra):
            adjustments.append(f"added {len(extra)} rod(s) to tie loose atoms to their nearest neighbour")
        allp = np.vstack([pairs, extra]) if len(extra) else pairs
        thick = 0
        for i, j in allp:
            r = ROD_FRACTION * min(R_hs[i], R_hs[j])
            if kit:
                r = KIT_ROD_FRACTION * min(balls[i], balls[j])
            if 2 * r < min_feature:
                r = min_feature / 2
                thick += 1
            if 2 * r > 0.8 * 2 * min(balls[i], balls[j]):
                need = min_feature / (0.8 * 2 * BALL_FRACTION * radii_A.min())
                raise UserError(f"rods of the minimum feature {min_feature:g} mm would be as thick as the "
                                f"{2 * min(balls[i], balls[j]):.2f} mm balls; use --scale "
                                f"{math.ceil(need * 10) / 10:g} or larger")
            rods.append((int(i), int(j), float(r), "bond"))
        if thick:
            adjustments.append(f"thickened {thick} rod(s) to the minimum feature of {min_feature:g} mm")
    else:
        balls = R_hs.copy()
        pairs, dist = _pairs(pts_A, radii_A, 1.02)
        extra = _connect(pts_A, pairs)
        allp = np.vstack([pairs, extra]) if len(extra) else pairs
        neck_r = min_feature if clip else min_feature / 2    # necks on cut faces lose half or more
        necks = 0
        for i, j in allp:
            d = float(np.linalg.norm(centres[i] - centres[j]))
            ri, rj = balls[i], balls[j]
            if d < ri + rj:
                x = (d * d + ri * ri - rj * rj) / (2 * d)
                a = math.sqrt(max(ri * ri - x * x, 0.0))
            else:
                a = 0.0
            if 2 * a < 2 * neck_r:
                rods.append((int(i), int(j), float(neck_r), "bond"))
                necks += 1
        if necks:
            adjustments.append(f"added {necks} neck rod(s) {2 * neck_r:g} mm across where spheres only touch "
                               f"(minimum feature {min_feature:g} mm)")
        if len(extra):
            adjustments.append(f"tied {len(extra)} loose atom(s) to their nearest neighbour")
    rod_seg = P.segments_for(max((r for _, _, r, _ in rods), default=1.0), lo=12, hi=64)
    est = P.estimate_triangles(len(centres), seg, len(rods), rod_seg)
    if est > max_triangles:
        raise LimitError(f"the model would have about {est:,} triangles ({len(centres):,} balls, {len(rods):,} "
                         f"rods), over the cap of {max_triangles:,}; print fewer cells or raise the cap with "
                         f"--max-triangles {est}")
    return dict(centres=centres, balls=balls, groups=atom_group, idx=idx, rods=rods, seg=seg, rod_seg=rod_seg,
                colours=group_colours, adjustments=adjustments, estimate=est, symbols=crystal.symbols[idx],
                roles=crystal.roles[idx], cell_mm=crystal.cell * scale)


# ------------------------------------------------------------------ solid models
def build_model(crystal, *, style="ball-and-stick", scale=None, clip_to_cell=False, base=False, kit=False,
                min_feature=DEFAULT_MIN_FEATURE, bed=DEFAULT_BED, clearance=DEFAULT_CLEARANCE,
                max_triangles=DEFAULT_MAX_TRIANGLES, segments=None, check_bed=True):
    """The printable model (no file written): a :class:`Model` with its bodies in mm."""
    scale, min_feature, bed, _, clearance = _check_options(style, scale, min_feature, bed, 1.0, clearance,
                                                           clip_to_cell, kit)
    max_triangles = int(max_triangles)
    plan = _plan(crystal, style, scale, clip_to_cell, min_feature, kit, max_triangles, segments)
    if kit:
        return _build_kit(plan, scale, min_feature, bed, clearance, check_bed)
    centres = plan["centres"]
    balls = plan["balls"]
    cell_mm = plan["cell_mm"]
    # orientation: largest face down (the cell's faces for a clipped model)
    if clip_to_cell:
        import itertools

        hull_pts = np.array(list(itertools.product((0.0, 1.0), repeat=3))) @ cell_mm
    else:
        hull_pts = centres
    R = _lay_flat_rotation(hull_pts)
    c_rot = centres @ R.T
    cell_rot = cell_mm @ R.T
    # size checks before the mesh is made
    if clip_to_cell:
        import itertools

        corners = np.array(list(itertools.product((0.0, 1.0), repeat=3))) @ cell_rot
        lo, hi = corners.min(axis=0), corners.max(axis=0)
    else:
        lo = (c_rot - balls[:, None]).min(axis=0)
        hi = (c_rot + balls[:, None]).max(axis=0)
    sink = 0.0
    base_t = 0.0
    margin = 0.0
    if base:
        base_t = max(min_feature, 2.0)
        margin = 2.0
        sink = 0.5 if clip_to_cell else min(0.25 * float(balls.min()), 3.0)
    size = (hi - lo) + np.array([2 * margin, 2 * margin, base_t - sink])
    _check_size(size, bed, scale, check_bed)
    # primitives and one batch union
    T = P.Templates()
    solids = [P.place_sphere(T.sphere(g, r, plan["seg"]), c) for c, r, g in zip(c_rot, balls, plan["groups"])]
    for i, j, r, g in plan["rods"]:
        solids.append(P.place_rod(T.rod(g, r, plan["rod_seg"]), c_rot[i], c_rot[j]))
    solid = P.union(solids)
    if clip_to_cell:
        import manifold3d as m3

        box = P.box_from_cell(cell_rot)
        solid = m3.Manifold.batch_boolean([solid, box], m3.OpType.Intersect)
    bb = solid.bounding_box()
    lo = np.array(bb[:3])
    hi = np.array(bb[3:])
    if base:
        import manifold3d as m3

        w = hi - lo + 2 * margin
        plate = m3.Manifold.cube((float(w[0]), float(w[1]), float(base_t)), False)
        plate = plate.translate((float(lo[0] - margin), float(lo[1] - margin), float(lo[2] + sink - base_t)))
        T.group_of_id[plate.original_id()] = "base"
        solid = P.union([solid, plate])
        bb = solid.bounding_box()
        lo = np.array(bb[:3])
        hi = np.array(bb[3:])
    # centre on the bed, bottom at z = 0
    shift = -np.array([(lo[0] + hi[0]) / 2, (lo[1] + hi[1]) / 2, lo[2]])
    solid = solid.translate(tuple(float(x) for x in shift))
    mesh, groups = P.to_trimesh(solid, T)
    _check_size(np.ptp(mesh.vertices, axis=0) if len(mesh.vertices) else np.zeros(3), bed, scale, check_bed)
    name = _model_name(crystal, style, clip_to_cell)
    model = Model(bodies=[Body(name, mesh, groups)], colours=plan["colours"], adjustments=plan["adjustments"])
    model.info = dict(style=style, scale_mm_per_A=scale, clip_to_cell=bool(clip_to_cell), base=bool(base), kit=False,
                      min_feature_mm=min_feature, bed_mm=list(bed), triangle_estimate=plan["estimate"],
                      sphere_segments=plan["seg"], cell_volume_mm3=float(abs(np.linalg.det(cell_mm))),
                      atoms_shown=int(len(centres)), rods=len(plan["rods"]))
    if base:
        model.adjustments.append(f"base plate {base_t:g} mm thick under the model")
    return model


def _model_name(crystal, style, clip):
    name = crystal.metadata.get("name") or "".join(crystal.elements)
    lat = crystal.lattice.prototype if crystal.lattice is not None else ""
    return f"{name} {lat} {style}{' cell' if clip else ''}".replace("  ", " ").strip()


def _check_size(size, bed, scale, check_bed):
    size = np.asarray(size, float)
    biggest = float(size.max())
    if biggest > MAX_MODEL_MM:
        sug = scale * MAX_MODEL_MM / biggest * 0.95
        raise UserError(f"the model would be {biggest:.0f} mm long, over 1 m; use --scale {sug:.2g} or smaller, "
                        f"or fewer cells")
    if not check_bed:
        return
    bx, by, bz = bed
    fits = (size[0] <= bx and size[1] <= by and size[2] <= bz) or (size[1] <= bx and size[0] <= by and size[2] <= bz)
    if not fits:
        ratio = min(max(bx, by) / max(size[0], size[1], 1e-9), min(bx, by) / max(min(size[0], size[1]), 1e-9),
                    bz / max(size[2], 1e-9))
        sug = scale * ratio * 0.95
        raise UserError(f"the model would be {size[0]:.0f} x {size[1]:.0f} x {size[2]:.0f} mm, larger than the "
                        f"bed {bx:g} x {by:g} x {bz:g} mm; use --scale {sug:.2g} or smaller, fewer cells, or "
                        f"--bed X Y Z for a bigger printer")


# ------------------------------------------------------------------ kit
def _build_kit(plan, scale, min_feature, bed, clearance, check_bed):
    import manifold3d as m3

    centres = plan["centres"]
    balls = plan["balls"].copy()
    rods = plan["rods"]
    n = len(centres)
    dirs = [[] for _ in range(n)]
    rod_r = {}
    for k, (i, j, r, _g) in enumerate(rods):
        d = centres[j] - centres[i]
        d = d / np.linalg.norm(d)
        dirs[i].append((k, d))
        dirs[j].append((k, -d))
        rod_r[k] = r
    wall = min_feature / 2
    # hole bottoms: far enough from the centre that neighbouring holes keep a wall
    t = np.zeros(n)
    need_R = balls.copy()
    for i in range(n):
        if not dirs[i]:
            continue
        rh = max(rod_r[k] for k, _ in dirs[i]) + clearance
        depth_min = max(2 * (rh - clearance), 3.0)
        vs = np.array([d for _, d in dirs[i]])
        if len(vs) > 1:
            cosang = np.clip(vs @ vs.T, -1, 1)
            np.fill_diagonal(cosang, -1)
            theta = math.acos(float(cosang.max()))
            t_min = (2 * rh + wall) / (2 * math.sin(theta / 2)) if theta > 1e-6 else float("inf")
        else:
            t_min = rh
        t_min = max(t_min, rh)
        t[i] = t_min
        need_R[i] = max(balls[i], t_min + depth_min)
    grow = float((need_R / balls).max())
    adjustments = list(plan["adjustments"])
    if grow > 1 + 1e-9:
        balls = balls * grow
        adjustments.append(f"balls enlarged {grow:.2f}x so the holes are deep enough and keep a "
                           f"{wall:g} mm wall between them")
    for k, (i, j, r, _g) in enumerate(rods):
        d = float(np.linalg.norm(centres[j] - centres[i]))
        if balls[i] + balls[j] + 2 * clearance > d:
            raise UserError("kit balls would touch their neighbours (too many holes close together for the rod "
                            "size); use a larger --scale or a smaller --min-feature")
    # hole-bottom distance: half way into the ball, but never closer than t_min
    hole_t = np.maximum(t, 0.5 * balls)
    hole_t = np.minimum(hole_t, balls - np.array([max(2 * (max((rod_r[k] for k, _ in dirs[i]), default=0)), 3.0)
                                                  for i in range(n)]))
    hole_t = np.maximum(hole_t, t)
    # parts
    T = P.Templates()
    ball_parts, rod_parts = [], []
    seg = plan["seg"]
    for i in range(n):
        R = float(balls[i])
        sphere = T.sphere(plan["groups"][i], R, P.segments_for(R))
        cutters = []
        for k, d in dirs[i]:
            rh = rod_r[k] + clearance
            tool = T.rod("hole", rh, plan["rod_seg"])
            cutters.append(P.place_rod(tool, d * hole_t[i], d * (R + 1.0)))
        part = sphere if not cutters else m3.Manifold.batch_boolean([sphere] + cutters, m3.OpType.Subtract)
        # a flat to stand on, pointing away from every hole
        f = _free_direction([d for _, d in dirs[i]])
        Rm = P.rotation_to(f, np.array([0.0, 0.0, -1.0]))
        M = np.zeros((3, 4))
        M[:, :3] = Rm
        part = part.transform(M)
        flat_h = 0.12 * R
        part = part.trim_by_plane((0.0, 0.0, 1.0), -R + flat_h)
        part = part.translate((0.0, 0.0, R - flat_h))
        angles = _pair_angles([d for _, d in dirs[i]])
        ball_parts.append(dict(solid=part, R=R, symbol=str(plan["symbols"][i]), group=plan["groups"][i],
                               holes=len(dirs[i]), angles=angles))
    for k, (i, j, r, _g) in enumerate(rods):
        d = float(np.linalg.norm(centres[j] - centres[i]))
        L = d - hole_t[i] - hole_t[j]
        if L < min_feature:
            raise UserError(f"a kit rod would be only {L:.1f} mm long; use a larger --scale")
        tool = T.rod("bond", r, plan["rod_seg"])
        part = P.place_rod(tool, np.array([0.0, 0.0, 0.0]), np.array([L, 0.0, 0.0]))
        flat = 0.15 * r
        part = part.trim_by_plane((0.0, 0.0, 1.0), -r + flat).translate((0.0, 0.0, r - flat))
        rod_parts.append(dict(solid=part, r=r, L=L))
    # parts list
    parts = []
    types = {}
    for b in ball_parts:
        key = (b["symbol"], b["group"], round(b["R"], 1), b["holes"], b["angles"])
        types.setdefault(key, []).append(b)
    for n_, (key, members) in enumerate(sorted(types.items(), key=lambda kv: (kv[0][0], -kv[0][3], kv[0][4]))):
        label = _type_label(n_)
        for b in members:
            b["label"] = label
        ang = ", ".join(f"{a:g}" for a in sorted(set(key[4])))
        parts.append(dict(part=f"ball {label}", count=len(members), species=key[1], diameter_mm=round(2 * key[2], 1),
                          holes=key[3], hole_diameter_mm=round(2 * (max(rod_r.values(), default=0) + clearance), 2),
                          angles_between_holes_deg=ang))
    lengths = {}
    for rp in rod_parts:
        lengths.setdefault((round(2 * rp["r"], 2), round(rp["L"], 1)), []).append(rp)
    for (dia, L), members in sorted(lengths.items()):
        parts.append(dict(part="rod", count=len(members), diameter_mm=dia, length_mm=L))
    # layout on the bed: balls in rows, rods below
    bodies = []
    gap = 4.0
    bx = bed[0]
    x = y = 0.0
    row_h = 0.0
    placed = []
    for b in sorted(ball_parts, key=lambda b: b["label"]):
        w = 2 * b["R"]
        if x > 0 and x + w > bx:
            x, y, row_h = 0.0, y + row_h + gap, 0.0
        placed.append((b, x + b["R"], y + b["R"]))
        x += w + gap
        row_h = max(row_h, w)
    y += row_h + gap
    x, row_h = 0.0, 0.0
    for rp in sorted(rod_parts, key=lambda r: -r["L"]):
        w = rp["L"]
        if x > 0 and x + w > bx:
            x, y, row_h = 0.0, y + row_h + gap, 0.0
        placed.append((rp, x, y + rp["r"]))
        x += w + gap
        row_h = max(row_h, 2 * rp["r"])
    y_total = y + row_h
    x_total = max([px + (item["R"] if "R" in item else item["L"]) for item, px, _ in placed] + [0.0])
    z_total = max([2 * b["R"] for b in ball_parts] + [0.0])
    _check_size(np.array([x_total, y_total, z_total]), bed, scale, check_bed)
    for item, px, py in placed:
        s = item["solid"].translate((float(px - x_total / 2), float(py - y_total / 2), 0.0))
        mesh, groups = P.to_trimesh(s, T)
        name = f"ball {item['label']} ({item['symbol']})" if "R" in item else f"rod {item['L']:.1f} mm"
        bodies.append(Body(name, mesh, groups))
    colours = dict(plan["colours"])
    colours["hole"] = colours.get("bond", "#9aa4ad")
    model = Model(bodies=bodies, colours=colours, adjustments=adjustments, parts=parts)
    model.info = dict(style="ball-and-stick", scale_mm_per_A=scale, clip_to_cell=False, base=False, kit=True,
                      min_feature_mm=min_feature, bed_mm=list(bed), clearance_mm=clearance,
                      triangle_estimate=plan["estimate"], sphere_segments=seg, atoms_shown=int(n), rods=len(rods))
    return model


def _type_label(n):
    s = ""
    n += 1
    while n:
        n, r = divmod(n - 1, 26)
        s = chr(65 + r) + s
    return s


def _pair_angles(vs):
    vs = np.asarray(vs, float).reshape(-1, 3)
    if len(vs) < 2:
        return ()
    c = np.clip(vs @ vs.T, -1, 1)
    iu = np.triu_indices(len(vs), 1)
    return tuple(sorted(int(round(math.degrees(math.acos(x)))) for x in c[iu]))


def _free_direction(vs):
    """A unit direction as far as possible from every hole direction."""
    cand = _fibonacci(200)
    if not len(vs):
        return np.array([0.0, 0.0, -1.0])
    vs = np.asarray(vs, float)
    best = (cand @ vs.T).max(axis=1)
    return cand[int(np.argmin(best))]


def _fibonacci(n):
    i = np.arange(n) + 0.5
    phi = np.arccos(1 - 2 * i / n)
    th = math.pi * (1 + 5 ** 0.5) * i
    return np.column_stack([np.cos(th) * np.sin(phi), np.sin(th) * np.sin(phi), np.cos(phi)])


# ------------------------------------------------------------------ checks and the report
def inspect(model, material_density=PLA_DENSITY):
    """Measured facts about a model: watertight, bodies, volume, mass, box, triangles."""
    meshes = [b.mesh for b in model.bodies]
    watertight = all(m.is_watertight for m in meshes)
    is_volume = all(m.is_volume for m in meshes)
    bodies = 0
    for m in meshes:
        if len(m.faces) == 0:
            continue
        bodies += int(m.body_count)
    vol_mm3 = float(sum(m.volume for m in meshes))
    allv = np.vstack([m.vertices for m in meshes if len(m.vertices)]) if meshes else np.zeros((0, 3))
    box = np.ptp(allv, axis=0) if len(allv) else np.zeros(3)
    tris = int(sum(len(m.faces) for m in meshes))
    return dict(watertight=bool(watertight), is_volume=bool(is_volume), bodies=bodies,
                volume_cm3=vol_mm3 / 1000.0, mass_g=vol_mm3 / 1000.0 * material_density,
                material_density_g_cm3=material_density, bounding_box_mm=[float(x) for x in box],
                triangles=tris)


def report_path(path):
    p = Path(path)
    return p.with_name(p.stem + ".report.txt")


def print_model(crystal, path, *, style="ball-and-stick", scale=None, clip_to_cell=False, base=False, kit=False,
                min_feature=DEFAULT_MIN_FEATURE, bed=DEFAULT_BED, material_density=PLA_DENSITY,
                clearance=DEFAULT_CLEARANCE, max_triangles=DEFAULT_MAX_TRIANGLES, segments=None, force=False,
                write_report=True):
    """Write a printable model of ``crystal`` to ``path`` (.stl or .3mf) and
    its print report beside it (MODEL.report.txt); return the report.

    Parameters
    ----------
    style : "ball-and-stick" or "space-filling".
    scale : mm per angstrom (default 10: 1 A -> 1 cm).
    clip_to_cell : cut the space-filling spheres to the cell faces.
    base : add a base plate under the model.
    kit : separate balls with bored holes plus loose rods (ball-and-stick).
    min_feature : thinnest rod or neck in mm (default 2); thinner rods are
        thickened, balls below it are refused.
    bed : printer bed X, Y, Z in mm (default 220 x 220 x 250, a common size).
    material_density : g/cm^3 for the mass estimate (default PLA 1.24).
    clearance : radial fit clearance of kit holes in mm (default 0.2).
    max_triangles : refuse models estimated over this many triangles.
    segments : sphere segments (default from a 0.02 mm chord tolerance).
    force : overwrite existing files.
    """
    from ..fileio import atomic_write, check_target
    from .report import report_text

    p = Path(path)
    check_target(p, force=force, suffixes=set(SUFFIXES))
    rp = report_path(p)
    if write_report:
        check_target(rp, force=force)
    material_density = _positive("material density", material_density, "density in g/cm^3", "1.24 for PLA")
    model = build_model(crystal, style=style, scale=scale, clip_to_cell=clip_to_cell, base=base, kit=kit,
                        min_feature=min_feature, bed=bed, clearance=clearance, max_triangles=max_triangles,
                        segments=segments)
    facts = inspect(model, material_density)
    if not (facts["watertight"] and facts["is_volume"]):
        raise RuntimeError("the mesh came out not watertight; rerun with --debug and report it")
    if not kit and facts["bodies"] != 1:
        raise UserError(f"the model falls apart into {facts['bodies']} separate pieces; print it with --base or "
                        f"--kit, or as a smaller piece of the crystal")
    from .. import CAUTION

    rep = PrintReport(file=str(p), format=p.suffix.lower().lstrip("."), **model.info, **facts,
                      fits_bed=True, adjustments=model.adjustments, parts=model.parts,
                      caution=f"{CAUTION} {PRINT_CAUTION}")
    if clip_to_cell and not base:
        rep["volume_fraction_of_cell"] = facts["volume_cm3"] * 1000.0 / model.info["cell_volume_mm3"]
    rep["report_file"] = str(rp) if write_report else None
    from ..exchange import write_model

    write_model(model, p, force=force)
    if write_report:
        atomic_write(rp, report_text(rep) + "\n", force=force)
    return rep
