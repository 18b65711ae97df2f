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
from .bed import DEFAULT_OVERHANG_ANGLE

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
    """One printable solid: a trimesh mesh (mm) and, per face, a colour-group label.

    >>> import trimesh
    >>> b = Body("cube", trimesh.creation.box((10, 10, 10)), None)
    >>> b.name, b.mesh.is_watertight
    ('cube', True)
    """
    name: str
    mesh: object
    groups: object = None


@dataclass
class Model:
    """A printable model: its bodies (mm), the colour of each face group, and how it was made.

    >>> import trimesh
    >>> cube = trimesh.creation.box((10, 10, 10))
    >>> m = Model([Body("cube", cube, None)], {"host": "#7d8fa3"})
    >>> len(m.bodies), m.info, m.adjustments
    (1, {}, [])
    """
    bodies: list
    colours: dict                          # group label -> hex colour
    info: dict = field(default_factory=dict)
    adjustments: list = field(default_factory=list)
    parts: list = field(default_factory=list)


class PrintReport(dict):
    """The print report: a dict (JSON-ready) with attribute access and text().

    >>> r = PrintReport(file="cu.stl", watertight=True)
    >>> r.file, r["watertight"]
    ('cu.stl', True)
    """

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


#: Accepted print scales, mm per angstrom (a 3.6 A cell: 0.36 mm to 3.6 m).
MIN_SCALE, MAX_SCALE = 0.1, 1000.0


def material_density_value(value):
    """A printing material's density in g/cm^3, checked: a number from 0.1
    to 30 (every solid element lies below 23, osmium; common practice).

    >>> material_density_value("1.24")
    1.24
    """
    d = _positive("material density", value, "density in g/cm^3", "1.24 for PLA")
    if not 0.1 <= d <= 30.0:
        raise UserError(f"material density {value} g/cm^3 is outside 0.1-30 g/cm^3; give the density of what you "
                        f"print, e.g. --material-density 1.24 for PLA or 7.85 for steel")
    return d


def _check_options(style, scale, min_feature, bed, material_density, clearance, clip_to_cell, kit):
    if style not in STYLES:
        from ..errors import suggest

        raise UserError(f"unknown style '{style}'{suggest(style, STYLES)}; use one of {', '.join(STYLES)}")
    scale = _positive("scale", DEFAULT_SCALE if scale is None else scale, "number of mm per angstrom", "--scale 10")
    if not MIN_SCALE <= scale <= MAX_SCALE:
        raise UserError(f"scale {scale:g} mm per angstrom is outside {MIN_SCALE:g} to {MAX_SCALE:g}; a printed "
                        f"cell is a few centimetres at --scale 10")
    min_feature = _positive("minimum feature", min_feature, "size in mm", "--min-feature 2")
    if min_feature < 0.4:
        raise UserError(f"minimum feature {min_feature:g} mm is below what a desktop nozzle (0.4 mm) can print; "
                        f"give 0.4 mm or more (2 mm is the default)")
    if bed is None:
        bed = DEFAULT_BED
    if len(bed) != 3:
        raise UserError("the bed size needs three numbers X Y Z in mm, e.g. --bed 220 220 250")
    bed = tuple(_positive("bed size", b, "length in mm", "--bed 220 220 250") for b in bed)
    material_density = material_density_value(material_density)
    clearance = float(clearance)
    if not math.isfinite(clearance) or clearance < 0 or clearance > 2:
        raise UserError(f"clearance {clearance:g} mm must lie between 0 and 2 mm (0.2 mm is a common push fit)")
    if clip_to_cell and style != "space-filling":
        raise UserError("--clip-to-cell cuts space-filling spheres at the cell faces; add --style space-filling")
    if kit and (style != "ball-and-stick" or clip_to_cell):
        raise UserError("kit mode makes balls and rods; use it with --style ball-and-stick and without --clip-to-cell")
    return scale, min_feature, bed, material_density, clearance


# ------------------------------------------------------------------ geometry plan (angstrom -> mm)
def shown_atoms(crystal, clip, radii_A):
    """Atom centres (A) and their index into the crystal, for the atoms a
    model shows: the cell's atoms plus their images on the cell boundary, or,
    for a clipped model (``clip``), every image whose sphere (``radii_A``)
    reaches into the cell.  Atoms closer than 0.1 A are refused.

    >>> import numpy as np, crystalview as cv
    >>> pts, idx = shown_atoms(cv.build("Cu"), False, np.array([1.28]))
    >>> len(pts)                        # 8 corners, 6 face centres
    14
    """
    from ..analysis.neighbours import with_images

    w = crystal.wrapped()
    cutoff = float(radii_A.max()) if clip else 1e-3
    pts, idx = with_images(w.positions, w.cell, w.pbc, cutoff)
    _refuse_overlaps(pts, idx)
    return pts, idx


def _refuse_overlaps(pts, idx, tol=0.1):
    """Atoms (or images) closer than ``tol`` A make degenerate solids that the
    boolean library cannot union: refused in one line, naming the two atoms."""
    if len(pts) < 2:
        return
    from scipy.spatial import cKDTree

    pairs = cKDTree(pts).query_pairs(tol, output_type="ndarray")
    if len(pairs):
        i, j = (int(idx[k]) for k in pairs[0])
        raise UserError(f"atoms {i} and {j} sit {np.linalg.norm(pts[pairs[0][0]] - pts[pairs[0][1]]):.3f} A apart "
                        f"(closer than {tol} A); a model of overlapping atoms cannot be made watertight - "
                        f"remove the duplicate")


def contact_pairs(points, radii, factor):
    """Pairs of atoms that touch: (pairs (M, 2), distances (M,)) with
    distance <= factor * (r_i + r_j).

    >>> import numpy as np
    >>> pr, d = contact_pairs(np.array([[0., 0, 0], [2.5, 0, 0], [9, 0, 0]]), np.array([1.28] * 3), 1.05)
    >>> pr.tolist(), d.round(2).tolist()
    ([[0, 1]], [2.5])
    """
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


def _prism_atoms(crystal, cell_choice):
    """(points A, index into the crystal, outline corners A, outline edges)
    of the hexagonal prism, or None where the stored cell is printed."""
    from ..prism import has_prism, hexagonal_prism

    if cell_choice == "primitive" or not has_prism(crystal):
        return None
    lat = crystal.lattice
    one_cell = (len(crystal) == len(lat.basis_frac) and np.allclose(crystal.cell, lat.cell, atol=1e-6)
                and not crystal.metadata.get("defects"))
    if not one_cell:
        return None
    pr = hexagonal_prism(crystal)
    frac_atoms = crystal.frac() if callable(getattr(crystal, "frac", None)) else \
        np.linalg.solve(crystal.cell.T, crystal.positions.T).T
    frac_p = np.linalg.solve(crystal.cell.T, np.asarray(pr.positions).T).T
    idx = []
    for k, f in enumerate(frac_p):
        d = frac_p[k] - frac_atoms
        d -= np.round(d)
        dist = np.linalg.norm(d @ crystal.cell, axis=1)
        same = np.array([s == pr.symbols[k] for s in crystal.symbols])
        dist = np.where(same, dist, np.inf)
        idx.append(int(np.argmin(dist)))
    return np.asarray(pr.positions, float), np.array(idx), np.asarray(pr.corners, float), np.asarray(pr.edges)


def _cell_outline(cell):
    import itertools

    corners = np.array(list(itertools.product((0.0, 1.0), repeat=3))) @ np.asarray(cell, float)
    edges = []
    for a in range(8):
        for b in range(a + 1, 8):
            if bin(a ^ b).count("1") == 1:
                edges.append((a, b))
    return corners, np.array(edges)


def _struts(pts_A, corners_A, edges, tol=1e-3):
    """Cell-edge struts as (point index or -1, point index or -1, p0 A, p1 A):
    each outline edge is split at the atoms lying on it."""
    out = []
    for a, b in edges:
        p, q = corners_A[a], corners_A[b]
        d = q - p
        L = float(np.linalg.norm(d))
        if L < 1e-9:
            continue
        u = d / L
        rel = pts_A - p
        t = rel @ u
        off = np.linalg.norm(rel - np.outer(t, u), axis=1)
        on = np.nonzero((off < tol) & (t > -tol) & (t < L + tol))[0]
        stops = [(float(t[k]), int(k)) for k in on]
        if not any(abs(s) < tol for s, _ in stops):
            stops.append((0.0, -1))
        if not any(abs(s - L) < tol for s, _ in stops):
            stops.append((L, -1))
        stops.sort()
        for (s0, k0), (s1, k1) in zip(stops[:-1], stops[1:]):
            if s1 - s0 > tol:
                out.append((k0, k1, p + u * s0, p + u * s1))
    return out


def _plan(crystal, style, scale, clip, min_feature, kit, max_triangles, segments, edges=False, cell_choice=None,
          resolution=P.DEFAULT_RESOLUTION_MM, legacy=False):
    """Atoms, rods and checks in mm, before any mesh is made."""
    from ..palette import ROLE_COLOURS, atom_colours

    n_atoms = len(crystal)
    if n_atoms == 0:
        raise UserError("the crystal has no atoms; nothing to print")
    radii_A_all = crystal.atom_radii()
    r_max = float(radii_A_all.max())
    ball_frac = 1.0 if style == "space-filling" else BALL_FRACTION
    if segments is not None:
        seg = int(segments)
        if seg < 8 or seg > 512:
            raise UserError(f"sphere segments {segments} must lie between 8 and 512 (about 48 is plenty)")
        seg = int(4 * math.ceil(seg / 4))

        def sphere_seg(r):
            return seg
    elif legacy:
        seg = P.segments_for(ball_frac * r_max * scale)

        def sphere_seg(r):
            return seg
    else:
        seg = P.sphere_segments(ball_frac * r_max * scale, resolution)

        def sphere_seg(r):
            return P.sphere_segments(r, resolution)
    # first refusal: the spheres alone, before any images or neighbour search
    est = P.estimate_triangles(n_atoms, seg)
    if est > max_triangles:
        raise LimitError(f"the model would have about {est:,} triangles ({n_atoms:,} atoms), over the cap of "
                         f"{max_triangles:,}; print fewer cells or raise the cap with --max-triangles {est}")
    prism = _prism_atoms(crystal, cell_choice)
    if prism is not None:
        pts_A, idx, outline_corners, outline_edges = prism
    else:
        pts_A, idx = shown_atoms(crystal, clip, radii_A_all)
        outline_corners, outline_edges = _cell_outline(crystal.cell)
    radii_A = radii_A_all[idx]
    colours, cindex, legend = atom_colours(crystal)
    labels = [lab for lab, _ in legend]
    atom_group = np.array(labels, dtype=object)[cindex[idx]]
    group_colours = {lab: col for lab, col in legend}
    group_colours["bond"] = ROLE_COLOURS["bond"]
    group_colours["cell"] = ROLE_COLOURS["cell"]
    group_colours["base"] = ROLE_COLOURS["cell"]
    group_colours["label"] = ROLE_COLOURS["solute"]
    centres = pts_A * scale
    R_hs = radii_A * scale                               # hard-sphere radii in mm
    adjustments = []
    rods = []                                            # (i, j, radius_mm, group)
    free_struts = []                                     # (p0 mm, p1 mm, radius mm): strut ends not at an atom
    if style == "ball-and-stick":
        balls = BALL_FRACTION * R_hs
        if balls.min() * 2 < min_feature:
            need = min_feature / (2 * BALL_FRACTION * radii_A.min())
            raise UserError(f"the smallest balls would be {2 * balls.min():.2f} mm across, below the minimum "
                            f"feature of {min_feature:g} mm; use --scale {math.ceil(need * 10) / 10:g} or larger")
        pairs, dist = contact_pairs(pts_A, radii_A, BOND_TOLERANCE)
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
        if edges:
            have = {(min(i, j), max(i, j)): k for k, (i, j, _r, _g) in enumerate(rods)}
            rs = min_feature / 2
            n_st = 0
            for k0, k1, p0, p1 in _struts(pts_A, outline_corners, outline_edges):
                if k0 >= 0 and k1 >= 0:
                    key = (min(k0, k1), max(k0, k1))
                    if key in have:                     # a bond already runs along this edge
                        continue
                    rods.append((k0, k1, rs, "cell"))
                else:
                    free_struts.append((p0 * scale, p1 * scale, rs))
                n_st += 1
            if n_st:
                adjustments.append(f"cell edges drawn as {n_st} strut(s) {min_feature:g} mm across "
                                   f"(the minimum feature)")
    else:
        balls = R_hs.copy()
        pairs, dist = contact_pairs(pts_A, radii_A, 1.02)
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
    if legacy:
        rod_seg_fixed = P.segments_for(max((r for _, _, r, _ in rods), default=1.0), lo=12, hi=64)

        def rod_seg(r):
            return rod_seg_fixed
    else:
        def rod_seg(r):
            return P.rod_sides(r, resolution)
    r_rod_max = max((r for _, _, r, _ in rods), default=1.0)
    est = P.estimate_triangles(len(centres), seg, len(rods) * 2 + len(free_struts), rod_seg(r_rod_max))
    if est > max_triangles:
        raise LimitError(f"the model would have about {est:,} triangles ({len(centres):,} balls, {len(rods):,} "
                         f"rods), over the cap of {max_triangles:,}; print fewer cells or raise the cap with "
                         f"--max-triangles {est}")
    return dict(centres=centres, balls=balls, groups=atom_group, idx=idx, rods=rods, seg=seg,
                rod_seg=rod_seg(r_rod_max), sphere_seg=sphere_seg, rod_seg_fn=rod_seg, free_struts=free_struts,
                colours=group_colours, adjustments=adjustments, estimate=est, symbols=crystal.symbols[idx],
                roles=crystal.roles[idx], cell_mm=crystal.cell * scale, outline_mm=outline_corners * scale,
                prism=prism is not None, resolution=resolution, legacy=legacy)


# ------------------------------------------------------------------ solid models
def _rod_between(T, group, r, sides, ci, cj, Ri, Rj, trim=True):
    """A rod from ball i to ball j that starts just inside each ball (its end
    discs hidden), not at the centres: fewer hidden intersections to union."""
    from .stitch import rod_start

    d = cj - ci
    L = float(np.linalg.norm(d))
    u = d / L
    if not trim:
        return P.place_rod(T.rod(group, r, sides), ci, cj)
    r_out = r / math.cos(math.pi / sides)
    ti = rod_start(Ri, r_out) if Ri > 0 else 0.0
    tj = rod_start(Rj, r_out) if Rj > 0 else 0.0
    if ti + tj >= L - 1e-6:
        return P.place_rod(T.rod(group, r, sides), ci, cj)
    return P.place_rod(T.rod(group, r, sides), ci + u * ti, cj - u * tj)


def _inner_radius(r, seg):
    return r * (1.0 - P.sphere_shape(seg)[1])


def build_model(crystal, *, style="ball-and-stick", scale=None, clip_to_cell=False, base=None, kit=False,
                min_feature=DEFAULT_MIN_FEATURE, bed=DEFAULT_BED, clearance=DEFAULT_CLEARANCE,
                max_triangles=DEFAULT_MAX_TRIANGLES, segments=None, check_bed=True,
                resolution=P.DEFAULT_RESOLUTION_MM, edges=None, cell=None, overhang_angle=DEFAULT_OVERHANG_ANGLE,
                label=None, label_style="emboss", tessellation="resolution", label_stroke=None):
    """The printable model (no file written): a :class:`Model` with its bodies in mm.

    ``tessellation="legacy"`` rebuilds the model the old way (sphere segments
    from a 2-D chord rule, rods from centre to centre, one batch union, laid
    on the largest face); the benchmark uses it as its baseline.

    >>> import crystalview as cv
    >>> model = build_model(cv.build("Fe"))
    >>> len(model.bodies), model.info["style"], model.info["atoms_shown"]
    (1, 'ball-and-stick', 9)
    """
    scale, min_feature, bed, _, clearance = _check_options(style, scale, min_feature, bed, 1.0, clearance,
                                                           clip_to_cell, kit)
    resolution = _positive("resolution", resolution, "length in mm", "--resolution 0.05")
    if resolution < 0.005 or resolution > 2.0:
        raise UserError(f"resolution {resolution:g} mm must lie between 0.005 and 2 mm (0.05 mm is the default)")
    overhang_angle = float(overhang_angle)
    if not math.isfinite(overhang_angle) or not 0 < overhang_angle < 90:
        raise UserError(f"overhang angle {overhang_angle:g} must lie between 0 and 90 degrees (45 is usual)")
    if cell not in (None, "prism", "primitive"):
        raise UserError(f"cell '{cell}' is not known; use prism (hcp: the hexagonal prism) or primitive")
    if edges and (style != "ball-and-stick" or kit):
        raise UserError("--edges draws the cell edges as struts on ball-and-stick models; "
                        "use it with --style ball-and-stick and without --kit")
    legacy = tessellation == "legacy"
    label_mode, label_text, label_style = _label_option(label, label_style, crystal, scale, kit, legacy, base)
    if label_stroke is None:
        label_stroke = LABEL_STROKE_MM
    elif not (isinstance(label_stroke, (int, float)) and math.isfinite(label_stroke) and 0.2 <= label_stroke <= 10):
        raise UserError(f"label stroke {label_stroke!r} must be 0.2 to 10 mm, e.g. 0.8")
    base_given = base is not None
    if label_mode == "carry" and base is None:
        base = True
    if edges is None:
        edges = style == "ball-and-stick" and not kit and not legacy
    max_triangles = int(max_triangles)
    plan = _plan(crystal, style, scale, clip_to_cell, min_feature, kit, max_triangles, segments, edges=edges,
                 cell_choice=cell, resolution=resolution, legacy=legacy)
    if kit:
        if base:
            raise UserError("kit parts lie flat on the bed each on its own; drop --base with --kit")
        return _build_kit(plan, scale, min_feature, bed, clearance, check_bed)
    from . import bed as B

    centres = plan["centres"]
    balls = plan["balls"]
    sseg, rseg = plan["sphere_seg"], plan["rod_seg_fn"]
    outline = plan["outline_mm"]
    hull_pts = outline if clip_to_cell else centres
    # a first, permissive size check before any mesh (the model may still turn)
    R0 = _lay_flat_rotation(hull_pts)
    c0 = centres @ R0.T
    if clip_to_cell:
        o0 = outline @ R0.T
        lo, hi = o0.min(axis=0), o0.max(axis=0)
    else:
        lo = (c0 - balls[:, None]).min(axis=0)
        hi = (c0 + balls[:, None]).max(axis=0)
    _check_size(hi - lo, bed, scale, check_bed, any_way=True)
    # the solid, in the crystal's frame
    T = P.Templates()
    face_labels = {}
    solid = None
    assembly = "one batch union"
    if style == "ball-and-stick" and not legacy and plan["rods"]:
        from .stitch import stitch

        got = stitch(centres, balls, plan["groups"], plan["rods"], T, sseg, rseg)
        if got is not None:
            solid, labs = got
            face_labels[int(np.asarray(solid.to_mesh().run_original_id)[0])] = labs
            assembly = "stitched nodes"
    if solid is None:
        solids = [P.place_sphere(T.sphere(g, r, sseg(r)), c) for c, r, g in zip(centres, balls, plan["groups"])]
        for i, j, r, g in plan["rods"]:
            n = rseg(r)
            solids.append(_rod_between(T, g, r, n, centres[i], centres[j], _inner_radius(balls[i], sseg(balls[i])),
                                       _inner_radius(balls[j], sseg(balls[j])), trim=not legacy))
        solid = P.union(solids)
    if plan["free_struts"]:
        extra = [P.place_rod(T.rod("cell", r, rseg(r)), p0, p1) for p0, p1, r in plan["free_struts"]]
        extra += [P.place_sphere(T.sphere("cell", r, sseg(r)), p) for p0, p1, r in plan["free_struts"]
                  for p in (p0, p1)]
        solid = P.union([solid] + extra)
    if clip_to_cell:
        import manifold3d as m3

        box = m3.Manifold.hull_points(np.asarray(outline, float).tolist())
        solid = m3.Manifold.batch_boolean([solid, box], m3.OpType.Intersect)
    # orientation: the candidate face that needs least support
    if legacy:
        R = R0
        rows = []
    else:
        tm0, _ = P.to_trimesh(solid)
        R, rows = B.choose_orientation(tm0, hull_pts, overhang_angle)
    M = np.zeros((3, 4))
    M[:, :3] = R
    solid = solid.transform(M)
    c_rot = centres @ R.T
    bb = solid.bounding_box()
    lo = np.array(bb[:3])
    hi = np.array(bb[3:])
    contact0 = rows[0]["contact"] if rows else 0.0
    adjustments = list(plan["adjustments"])
    stands = contact0 >= B.MIN_CONTACT_MM2
    base_reason = None
    if base is None:
        base = not stands and not legacy
        if base:
            base_reason = (f"added a base plate: the model alone touches the bed over {contact0:.1f} mm^2, under the "
                           f"{B.MIN_CONTACT_MM2:g} mm^2 it needs to stand (--no-base to print it without)")
    elif not base and not stands:
        adjustments.append(f"warning: without a base the model touches the bed over only {contact0:.1f} mm^2 "
                           f"(under {B.MIN_CONTACT_MM2:g} mm^2); the slicer will need supports or a brim")
    base_t = 0.0
    margin = 0.0
    sink = 0.0
    label_info = None
    base_mm = None
    if base and label_mode == "carry" and base_reason is None and not base_given:
        adjustments.append("base plate added to carry the label")
    if base:
        import manifold3d as m3

        base_t = max(min_feature, 2.0)
        margin = 2.0
        sink = 0.5 if clip_to_cell else min(0.25 * float(balls.min()), 3.0)
        w = hi - lo + 2 * margin
        x_lo, y_lo = float(lo[0] - margin), float(lo[1] - margin)
        z_top = float(lo[2] + sink)
        plate_w, strip = float(w[0]), 0.0
        lab = None
        if label_text:
            from . import label as L

            height = float(hi[2] - lo[2] + base_t - sink) + L.RELIEF_MM

            def fits(bw, sd):
                return not check_bed or _fits((bw, float(w[1]) + sd, height), bed)

            stroke = max(float(label_stroke), 2 * float(resolution))
            lab = L.plan_label(label_text, stroke, label_style, plate_w, margin, resolution, fits,
                               depth=float(w[1]))
            need_w = max(plate_w, lab.width + 2 * margin)
            need = np.array([need_w, float(w[1]) + lab.height + margin, float(hi[2] - lo[2] + base_t - sink)])
            if check_bed and not _fits(need, bed):
                adjustments.append(f"label left out: at a legible size (strokes {stroke:g} mm, capitals "
                                   f"{lab.cap_height:.0f} mm) it needs a {need[0]:.0f} x {need[1]:.0f} mm base, "
                                   f"larger than the bed; use a shorter --label or a bigger --bed")
                lab = None
            else:
                strip = lab.height + margin
                grown_w = need_w - plate_w
                plate_w = need_w
                x_lo = float((lo[0] + hi[0]) / 2 - plate_w / 2)
                adjustments.append(f"base enlarged by a {strip:.0f} mm label strip along the front edge"
                                   + (f" and {grown_w:.0f} mm wider" if grown_w > 1e-6 else "")
                                   + f" so the label's strokes are at least {stroke:g} mm")
        plate = m3.Manifold.cube((plate_w, float(w[1]) + strip, float(base_t)), False)
        plate = plate.translate((x_lo, y_lo - strip, z_top - base_t))
        T.group_of_id[plate.original_id()] = "base"
        parts = [solid, plate]
        if lab is not None:
            text = L.label_solid(lab, x_lo + (plate_w - lab.width) / 2, y_lo - strip + margin, z_top,
                                 depth_limit=base_t - 1.0)
            T.group_of_id[text.original_id()] = "label"
            solid = P.union(parts)
            solid = P.union([solid, text]) if lab.style == "emboss" else solid - text
            label_info = dict(text=lab.text, lines=lab.lines, style=lab.style, font=L.FONT_NAME,
                              size_mm=lab.size, cap_height_mm=lab.cap_height, stroke_mm=lab.stroke,
                              relief_mm=lab.relief, area_mm2=L.text_area(lab), block_mm=[lab.width, lab.height],
                              strip_mm=strip)
        else:
            solid = P.union(parts)
        base_mm = [plate_w, float(w[1]) + strip, float(base_t)]
        adjustments.append(base_reason or f"base plate {base_t:g} mm thick under the model")
        if base_reason:
            adjustments.append(f"base plate {base_t:g} mm thick, the model sunk {sink:.1f} mm into it")
        bb = solid.bounding_box()
        lo = np.array(bb[:3])
        hi = np.array(bb[3:])
    # centre on the bed, bottom at z = 0
    shift = -np.array([(lo[0] + hi[0]) / 2, (lo[1] + hi[1]) / 2, lo[2]])
    solid = solid.translate(tuple(float(x) for x in shift))
    mesh, groups = P.to_trimesh(solid, T, face_labels)
    _check_size(np.ptp(mesh.vertices, axis=0) if len(mesh.vertices) else np.zeros(3), bed, scale, check_bed)
    name = _model_name(crystal, style, clip_to_cell)
    model = Model(bodies=[Body(name, mesh, groups)], colours=plan["colours"], adjustments=adjustments)
    # chord error of the tessellation (mm): spheres and rods
    ch_s = max(P.sphere_shape(sseg(r))[1] * r for r in np.unique(np.round(balls, 9)))
    ch_r = max((P.rod_chord_error(r, rseg(r)) for _, _, r, _ in plan["rods"]), default=0.0)
    # bed facts, measured on the mesh as written
    V, F, N, A = B.mesh_arrays(mesh)
    contact, overhang = B.contact_overhang(V, F, N, A, None, overhang_angle)
    span, span_what = B.spans(c_rot, balls, [] if clip_to_cell else plan["rods"], overhang_angle)
    model.info = dict(style=style, scale_mm_per_A=scale, clip_to_cell=bool(clip_to_cell), base=bool(base),
                      kit=False, min_feature_mm=min_feature, bed_mm=list(bed), triangle_estimate=plan["estimate"],
                      sphere_segments=plan["seg"], rod_sides=plan["rod_seg"],
                      cell_volume_mm3=float(abs(np.linalg.det(plan["cell_mm"]))),
                      atoms_shown=int(len(centres)), rods=len(plan["rods"]), edges=bool(edges),
                      cell="hexagonal prism" if plan["prism"] else "stored cell",
                      resolution_mm=resolution, chord_error_mm=float(max(ch_s, ch_r)),
                      chord_error_spheres_mm=float(ch_s), chord_error_rods_mm=float(ch_r), assembly=assembly,
                      contact_mm2=contact, overhang_mm2=overhang, overhang_angle_deg=overhang_angle,
                      unsupported_span_mm=float(span), unsupported_span_is=span_what,
                      orientation=_orientation_text(rows, crystal, overhang_angle),
                      base_mm=base_mm, base_sink_mm=float(sink) if base else None, label=label_info)
    if plan["prism"]:
        model.info["cell_volume_mm3"] = float(3 * abs(np.linalg.det(plan["cell_mm"])))
    return model


#: Thinnest stroke of label text (mm): two lines of a 0.4 mm nozzle, which a desktop printer lays down
#: cleanly on a plate (common practice); text carries no load, so it need not meet the structural
#: minimum feature of the rods.
LABEL_STROKE_MM = 0.8


def _label_option(label, label_style, crystal, scale, kit, legacy, base):
    """(mode, text, style): mode "auto" (a label where a base is made),
    "carry" (an explicit text: a base is made to carry it) or "none"."""
    from . import label as L

    if label_style not in L.STYLES:
        from ..errors import suggest

        raise UserError(f"unknown label style '{label_style}'{suggest(str(label_style), L.STYLES)}; "
                        f"use emboss or engrave")
    if label is False or (isinstance(label, str) and label.strip().lower() == "none"):
        return "none", None, label_style
    if label is None or label is True or (isinstance(label, str) and label.strip().lower() == "auto"):
        if kit or legacy:
            return "none", None, label_style
        return "auto", L.auto_text(crystal, scale), label_style
    text = L.check_text(label)
    if kit:
        raise UserError("kit parts have no base to carry a label; use --label none with --kit")
    if base is False:
        raise UserError("a label goes on the base plate; drop --no-base or use --label none")
    return "carry", text, label_style


def _fits(size, bed):
    size = np.asarray(size, float)
    bx, by, bz = bed
    return bool((size[0] <= bx and size[1] <= by and size[2] <= bz)
                or (size[1] <= bx and size[0] <= by and size[2] <= bz))


def _orientation_text(rows, crystal, angle):
    from .bed import miller_name

    if not rows:
        return "largest face of the hull down"
    pick = rows[0]
    lat = crystal.lattice.cell if crystal.lattice is not None else crystal.cell
    face = miller_name(pick["normal"], lat)
    what = f"{face} face down" if face else "largest-contact face down"
    if len(rows) == 1:
        return f"{what} (the only candidate face)"
    others = sorted(r["overhang"] for r in rows[1:])
    return (f"{what}: least overhang of {len(rows)} candidate faces ({pick['overhang']:.0f} mm^2 beyond "
            f"{angle:g} deg; the next best {others[0]:.0f} mm^2)")


def _model_name(crystal, style, clip):
    name = crystal.metadata.get("name") or "".join(crystal.elements)
    lat = crystal.lattice.prototype if crystal.lattice is not None else ""
    return f"{name} {lat} {style}{' cell' if clip else ''}".replace("  ", " ").strip()


def _check_size(size, bed, scale, check_bed, any_way=False):
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
    if any_way:
        s, b = np.sort(size), np.sort(np.asarray(bed, float))
        fits = bool((s <= b).all())
    if not fits:
        ratio = min(max(bx, by) / max(size[0], size[1], 1e-9), min(bx, by) / max(min(size[0], size[1]), 1e-9),
                    bz / max(size[2], 1e-9))
        if any_way:
            ratio = float((np.sort(np.asarray(bed, float)) / np.maximum(np.sort(size), 1e-9)).min())
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
    """Measured facts about a model: watertight, bodies, volume, mass, box, triangles.

    >>> import trimesh
    >>> cube = Model([Body("cube", trimesh.creation.box((10, 10, 10)), None)], {"host": "#777"})
    >>> facts = inspect(cube)
    >>> facts["watertight"], round(facts["volume_cm3"], 3), round(facts["mass_g"], 2)
    (True, 1.0, 1.24)
    """
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
    """The print report's path beside a model file: MODEL.report.txt.

    >>> report_path("models/cu.stl").as_posix()
    'models/cu.report.txt'
    """
    p = Path(path)
    return p.with_name(p.stem + ".report.txt")
