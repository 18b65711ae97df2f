"""Report figures: PNG (with its dpi), SVG and PDF.

PNG is drawn by VTK off screen: atoms as sphere impostors with their true
radii (vtkOpenGLSphereMapper, one point per atom, no glyph meshes), with
atoms that cannot show in the orthographic view dropped first, so a million
atoms draw in seconds.  SVG and PDF are true vector output written here from
the projected scene (painter's order: far things first; balls as shaded
discs), because VTK's own vector export rasterises 3D geometry.
"""
from __future__ import annotations

import struct
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import palette
from ..errors import UserError
from ..fileio import atomic_write, check_target
from . import style as S
from .scene_graph import build_scene

SUFFIXES = {".png", ".svg", ".pdf"}
CULL_ABOVE = 20_000          # atoms; below this every atom is drawn


# ================================================================ layout
@dataclass
class Layout:
    W: int
    H: int
    font: float
    margin: float
    rect: tuple            # content rectangle (x0, y0, x1, y1), top-left origin, pixels
    scale: float           # pixels per angstrom
    centre: np.ndarray     # world point drawn at the rectangle's centre
    legend: list           # (label, hex, shape, x, y) swatch centre, top-left origin
    legend_font: float
    caption: list          # (text, x, y) baseline positions
    caption_font: float
    bar: tuple | None      # (x0, x1, y, length_A)
    dpi: float | None = None        # None: a pixel-only layout (1 px = 1 pt in vector files)
    font_pt: float | None = None    # the legend / scale-bar text size in points
    width_mm: float | None = None   # the page width asked for (the PNG rounds it to whole pixels)

    @property
    def pt_per_px(self):
        """Points per pixel on the vector page (1 without a dpi)."""
        if self.width_mm:
            return self.width_mm / 25.4 * 72.0 / self.W
        return 72.0 / self.dpi if self.dpi else 1.0

    @property
    def page_mm(self):
        """(width, height) of the vector page in mm (None without a dpi)."""
        if not self.dpi:
            return None
        k = self.pt_per_px * 25.4 / 72.0
        return self.W * k, self.H * k

    def to_px(self, view, pts):
        """World -> pixel (x right, y down) and depth (larger is nearer)."""
        q = view.project(pts) - view.project(self.centre[None])[0]
        xc = (self.rect[0] + self.rect[2]) / 2
        yc = (self.rect[1] + self.rect[3]) / 2
        return np.stack([xc + q[:, 0] * self.scale, yc - q[:, 1] * self.scale, q[:, 2]], axis=1)


def _text_width(text, font):
    from .text import text_width

    return text_width(text, font)


#: Largest height of the drawing in a figure sized by its width, as a multiple of the width.
MAX_ASPECT = 1.4


def make_layout(scene, size, legend=True, scale_bar=True, caption=True, dpi=None, font_pt=None, width_mm=None):
    """Where everything goes.  ``size`` (W, H) in pixels; H None sizes the
    figure by its content (tight: the drawing fills the width, the height
    follows).  With ``dpi`` text sizes are points (``font_pt``, default 8 pt,
    the caption 7/8 of it) and keep their size at any dpi; without, text
    scales with the image (a pixel-only layout)."""
    from . import text as T

    W, H = size
    tight = H is None
    if dpi:
        k = float(dpi) / 72.0
        font = float(font_pt or T.FONT_PT) * k
        m = round(5.0 * k)
    else:
        font = max(11.0, round(min(W, H) * 0.024))
        m = round(min(W, H) * 0.035)
    x0, x1 = m, W - m
    entries = list(scene.legend) if legend and scene.legend else []
    bar_w = (0.22 * (W - 2 * m) + font * 1.5) if scale_bar else 0.0
    legend_under_bar = False
    lfont = font
    leg = []
    beside = False
    below_rows = []
    if entries:
        lw = lfont * 1.6 + max(_text_width(e[0], lfont) for e in entries)
        if not tight and not dpi and lw > 0.32 * W:          # pixel-only layout: shrink to fit beside
            lfont = max(9.0, lfont * 0.32 * W / lw)
            lw = lfont * 1.6 + max(_text_width(e[0], lfont) for e in entries)
        beside = not tight and lw <= 0.32 * W
        if beside:
            lh = lfont * 1.55
            lx = W - m - lw
            for kk, (lab, col, shape) in enumerate(entries):
                leg.append((lab, col, shape, lx + lfont * 0.6, m + lfont * 0.7 + kk * lh))
            x1 = lx - m * 0.6
        else:                    # compact: entries flow in rows under the drawing, right of the scale bar
            widest = max(lfont * 1.6 + _text_width(e[0], lfont) for e in entries)
            if widest > W - 2 * m - bar_w:          # too narrow beside the bar: rows of their own under it
                legend_under_bar = True
                if widest > W - 2 * m:
                    lfont = max(lfont * (W - 2 * m) / widest, lfont * 0.6)
            row, xw = [], 0.0
            for e in entries:
                ew = lfont * 1.6 + _text_width(e[0], lfont) + lfont * 1.2
                if row and xw + ew > W - 2 * m - (0.0 if legend_under_bar else bar_w):
                    below_rows.append(row)
                    row, xw = [], 0.0
                row.append((e, xw))
                xw += ew
            if row:
                below_rows.append(row)
    cfont = font * 0.875
    cap_lines = []
    if caption:
        lines = scene.caption if caption is True else [str(caption)]
        if dpi or tight:
            for t in lines:
                cap_lines.extend(T.wrap(t, cfont, W - 2 * m))
        else:
            cap_lines = list(lines)
            widest = max(_text_width(t, cfont) for t in cap_lines)
            if widest > W - 2 * m:
                cfont = max(8.0, cfont * (W - 2 * m) / widest)
    clh = cfont * 1.4
    cap_h = (len(cap_lines) * clh + cfont * 0.3) if cap_lines else 0.0
    llh = lfont * 1.5
    leg_h = len(below_rows) * llh + (lfont * 0.3 if below_rows else 0.0)
    bar_h = font * 2.6 if scale_bar else 0.0
    if below_rows and not legend_under_bar:    # the legend beside the scale bar: one block, the taller's height
        bar_h = max(bar_h, leg_h)
        leg_h = 0.0
    pts, rad = scene.extent_points()
    q = scene.view.project(pts)
    lo = np.min(q[:, :2] - rad[:, None], axis=0)
    hi = np.max(q[:, :2] + rad[:, None], axis=0)
    span = np.maximum(hi - lo, 1e-6)
    y0 = m
    rw = max(x1 - x0, 10)
    if tight:
        rh = min(rw * span[1] / span[0], MAX_ASPECT * W)
        H = int(round(y0 + rh + bar_h + leg_h + cap_h + m))
    y1 = H - m - cap_h - leg_h - bar_h
    rh = max(y1 - y0, 10)
    scale = float(min(rw / span[0], rh / span[1]))
    mid = (lo + hi) / 2
    wmid = (q[:, 2].min() + q[:, 2].max()) / 2
    v = scene.view
    centre = v.right * mid[0] + v.up * mid[1] + v.toward * wmid
    bar = None
    if scale_bar:
        length = S.round_length(0.22 * (x1 - x0) / scale)
        bar = (m, m + length * scale, y1 + font * 2.6 * 0.75, length)
    for r, row in enumerate(below_rows):
        y = (y1 + bar_h if legend_under_bar else y1) + lfont * 0.3 + llh * (r + 0.5)
        for (lab, col, shape), xo in row:
            leg.append((lab, col, shape, m + (0.0 if legend_under_bar else bar_w) + xo + lfont * 0.6, y))
    ytop = y1 + bar_h
    cap = []
    yc = ytop + leg_h
    for kk, t in enumerate(cap_lines):
        cap.append((t, m, yc + clh * (kk + 1) - cfont * 0.1))
    return Layout(W, H, font, m, (x0, y0, x1, y1), scale, centre, leg, lfont, cap, cfont, bar,
                  dpi=float(dpi) if dpi else None, font_pt=float(font_pt or T.FONT_PT) if dpi else None,
                  width_mm=width_mm if dpi else None)


# ================================================================ public API
def figure_size(size, width, height, dpi, what="figure"):
    """(pixel size, width in mm or None) from --size W H (pixels) or
    --width/--height with units (85 mm wide by default); a height of None
    means "what the content needs".

    >>> figure_size(None, "85mm", None, 300)
    ((1004, None), 85.0)
    """
    from . import text as T

    if size is not None and (width is not None or height is not None):
        raise UserError(f"give the {what}'s size either as --width/--height (mm, cm, in) or as --size W H "
                        f"(pixels), not both")
    if size is not None:
        return S.check_size(size), None
    w_mm = T.parse_length(width if width is not None else "85mm", "--width")
    h_mm = T.parse_length(height, "--height") if height is not None else None
    size = S.check_size((w_mm / 25.4 * dpi, (h_mm if h_mm else w_mm) / 25.4 * dpi))
    return (size if h_mm is not None else (size[0], None)), w_mm


def render(crystal, path, view=None, style="ball-and-stick", size=None, dpi=300, transparent=False,
           *, up=None, sites=False, polyhedra=None, planes=(), directions=(), layers=None, defects=True,
           slip_axis=None, cell=None, legend=True, scale_bar=True, caption=True, force=False, cell_shape=None,
           width=None, height=None, font_size=None):
    """Draw ``crystal`` into a PNG, SVG or PDF report figure.

    Size: ``width`` (a length with its unit: '85mm', '180mm', '3.5in'; the
    default is 85 mm, one journal column) at ``dpi``, with ``height`` (a
    length) or, by default, the height the content needs; or ``size`` (W, H)
    in pixels.  Text is ``font_size`` points (default 8; the caption 7/8 of
    it) at any dpi; SVG and PDF pages have the real size.

    ``view`` / ``up``: crystal directions ('[001]', '[2-1-10]'); orthographic,
    fitted to the frame.  ``view=None``: [001], except along the line of a
    dislocation crystal, obliquely across the slip system with
    ``slip_axis`` (loading axis up), and the other defaults of
    :func:`crystalview.render.scene_graph.build_scene`.  ``style``: ball-and-stick, space-filling, lattice or
    cell-cut.  Overlays: ``sites`` (interstitial sites at their free radius),
    ``polyhedra`` ('coordination', 'sites', 'both'), ``planes`` ['(111)'],
    ``directions`` ['[110]'], ``layers`` (True or a plane: close-packed
    stacking colours), ``defects`` (vacancy outlines), ``slip_axis`` (the
    favoured slip plane and direction for that loading axis).  ``caption``:
    True (structure, parameters, view), False, or your own text.
    ``cell_shape``: 'prism' or 'primitive' for hcp and simple hexagonal.

    Returns a dict describing what was written.
    """
    from . import text as T

    p = Path(path)
    suffix = p.suffix.lower()
    check_target(p, force=force, suffixes=SUFFIXES)
    dpi = S.check_dpi(dpi)
    font_pt = T.check_font_pt(font_size if font_size is not None else T.FONT_PT)
    size, w_mm = figure_size(size, width, height, dpi)
    st = S.get_style(style)
    scene = build_scene(crystal, st, view, up, sites=sites, polyhedra=polyhedra, planes=planes,
                        directions=directions, layers=layers, defects=defects, slip_axis=slip_axis, cell=cell,
                        cell_shape=cell_shape)
    lay = make_layout(scene, size, legend=legend, scale_bar=scale_bar, caption=caption, dpi=dpi, font_pt=font_pt,
                      width_mm=w_mm)
    if not (S.MIN_SIDE <= lay.H <= S.MAX_SIDE):
        raise UserError(f"the figure would be {lay.W} x {lay.H} pixels; each side must be {S.MIN_SIDE} to "
                        f"{S.MAX_SIDE}: give --height, or a smaller --dpi or --width")
    size = (lay.W, lay.H)
    info = dict(path=str(p), format=suffix[1:], size=list(size), dpi=dpi, style=st.name, view=scene.view.label,
                up=scene.view.up_label, atoms=len(crystal), atoms_drawn=scene.n_atoms,
                pixels_per_angstrom=round(lay.scale, 4),
                width_mm=round(lay.page_mm[0], 2), height_mm=round(lay.page_mm[1], 2),
                font_pt=font_pt)
    if scene.info.get("cell"):
        info["cell"] = scene.info["cell"]
    if lay.bar:
        info["scale_bar_A"] = lay.bar[3]
    if "shares" in scene.info:
        info["atoms_per_cell_from_shares"] = scene.info["shares"]
    if suffix == ".png":
        img, n_drawn = raster(scene, lay, transparent=transparent)
        info["atoms_drawn"] = n_drawn
        data = png_bytes(img, dpi)
        atomic_write(p, data, force=force)
    else:
        est = vector_estimate(scene)
        items = display_list(scene, lay) if est <= S.MAX_VECTOR_PRIMITIVES else [None] * est
        if len(items) > S.MAX_VECTOR_PRIMITIVES:
            raise UserError(f"this scene needs about {len(items):,} vector shapes, over the {S.MAX_VECTOR_PRIMITIVES:,} "
                            f"a {suffix[1:].upper()} stays usable with; write a .png instead (or draw fewer cells)")
        data = svg_bytes(items, lay, transparent) if suffix == ".svg" else pdf_bytes(items, lay, transparent)
        atomic_write(p, data, force=force)
        info["shapes"] = len(items)
    return info


# ================================================================ raster (VTK)
def headless_setup():
    """Figures always render off screen.  Without a display, ask VTK for its
    EGL window straight away, so it does not first try (and warn about) X."""
    import os

    if not (os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")):
        os.environ.setdefault("VTK_DEFAULT_OPENGL_WINDOW", "vtkEGLRenderWindow")


def _rgb(hexes):
    return np.array([[int(h.lstrip("#")[i:i + 2], 16) for i in (0, 2, 4)] for h in hexes], dtype=np.uint8)


def _plotter(size, transparent):
    headless_setup()
    import pyvista as pv

    pv.OFF_SCREEN = True
    pl = pv.Plotter(off_screen=True, window_size=list(size), lighting="none")
    pl.set_background(S.BACKGROUND)
    pl.render_window.SetMultiSamples(8)
    if transparent:
        pl.render_window.SetAlphaBitPlanes(1)
        pl.renderer.SetBackgroundAlpha(0.0)
    _lights(pl)
    return pl


def _lights(pl):
    import pyvista as pv

    key = pv.Light(position=(-0.45, 0.6, 1.0), light_type="camera light", intensity=0.75)
    fill = pv.Light(position=(0.6, -0.25, 1.0), light_type="camera light", intensity=0.35)
    head = pv.Light(position=(0.0, 0.0, 1.0), light_type="camera light", intensity=0.18)
    for lt in (key, fill, head):
        lt.positional = False
        pl.add_light(lt)


def _set_camera(pl, scene, lay, extent):
    v = scene.view
    cam = pl.camera
    cam.SetParallelProjection(True)
    xc = (lay.rect[0] + lay.rect[2]) / 2
    yc = (lay.rect[1] + lay.rect[3]) / 2
    du = (xc - lay.W / 2) / lay.scale
    dv = -(yc - lay.H / 2) / lay.scale
    focal = lay.centre - v.right * du - v.up * dv
    dist = max(extent, 1.0) * 4
    cam.SetFocalPoint(*focal)
    cam.SetPosition(*(focal + v.toward * dist))
    cam.SetViewUp(*v.up)
    cam.SetParallelScale(lay.H / (2 * lay.scale))
    cam.SetClippingRange(dist - extent * 1.5 - 10, dist + extent * 1.5 + 10)


def _prop(actor, opacity=1.0):
    pr = actor.GetProperty()
    pr.SetAmbient(S.AMBIENT)
    pr.SetDiffuse(S.DIFFUSE)
    pr.SetSpecular(S.SPECULAR)
    pr.SetSpecularPower(S.SPECULAR_POWER)
    pr.SetOpacity(opacity)
    return pr


def sphere_actor(pos, radius, rgb, opacity=1.0):
    """Sphere impostors with per-point radii: one point per sphere."""
    import pyvista as pv
    from vtkmodules.vtkRenderingCore import vtkActor
    from vtkmodules.vtkRenderingOpenGL2 import vtkOpenGLSphereMapper

    pd = pv.PolyData(np.ascontiguousarray(pos, dtype=np.float32))
    pd.point_data["radius"] = np.ascontiguousarray(radius, dtype=np.float32)
    pd.point_data["rgb"] = np.ascontiguousarray(rgb, dtype=np.uint8)
    m = vtkOpenGLSphereMapper()
    m.SetInputData(pd)
    m.SetScaleArray("radius")
    m.SetScalarModeToUsePointFieldData()
    m.SelectColorArray("rgb")
    m.SetColorModeToDirectScalars()
    m.ScalarVisibilityOn()
    a = vtkActor()
    a.SetMapper(m)
    _prop(a, opacity)
    a._keep = pd        # the mapper does not own the python wrapper
    return a


def cylinders(seg, radius, sides=20):
    """One open-ended cylinder mesh per segment, built in numpy (no glyph filter)."""
    import pyvista as pv

    seg = np.asarray(seg, float)
    a, b = seg[:, 0], seg[:, 1]
    d = b - a
    L = np.linalg.norm(d, axis=1, keepdims=True)
    u = d / np.maximum(L, 1e-12)
    ref = np.where(np.abs(u[:, [0]]) < 0.9, np.array([[1.0, 0, 0]]), np.array([[0, 1.0, 0]]))
    e1 = np.cross(u, ref)
    e1 /= np.linalg.norm(e1, axis=1, keepdims=True)
    e2 = np.cross(u, e1)
    t = np.linspace(0, 2 * np.pi, sides, endpoint=False)
    ring = np.cos(t)[None, :, None] * e1[:, None, :] + np.sin(t)[None, :, None] * e2[:, None, :]
    p0 = a[:, None, :] + radius * ring
    p1 = b[:, None, :] + radius * ring
    n = len(seg)
    pts = np.concatenate([p0, p1], axis=1).reshape(-1, 3)
    base = (np.arange(n) * 2 * sides)[:, None]
    i = np.arange(sides)[None, :]
    j = (i + 1) % sides
    q = np.stack([np.full((n, sides), 4), base + i, base + j, base + sides + j, base + sides + i], axis=2)
    mesh = pv.PolyData(pts, q.reshape(-1))
    mesh.point_data["Normals"] = np.concatenate([ring, ring], axis=1).reshape(-1, 3)
    mesh.point_data.active_normals_name = "Normals"
    return mesh


def _segments_mesh(seg):
    import pyvista as pv

    seg = np.asarray(seg, float).reshape(-1, 2, 3)
    pts = seg.reshape(-1, 3)
    n = len(seg)
    lines = np.column_stack([np.full(n, 2), np.arange(0, 2 * n, 2), np.arange(1, 2 * n, 2)]).ravel()
    return pv.PolyData(pts, lines=lines)


def _arrow_mesh(start, vec, radius, double=False):
    import pyvista as pv

    L = float(np.linalg.norm(vec))
    u = vec / L
    head = min(radius * 5, L * 0.35)
    parts = []
    s0 = start + (u * head if double else 0)
    shaft_len = L - head - (head if double else 0)
    parts.append(pv.Cylinder(center=s0 + u * shaft_len / 2, direction=u, radius=radius, height=shaft_len,
                             resolution=24))
    tip_base = start + u * (L - head)
    parts.append(pv.Cone(center=tip_base + u * head / 2, direction=u, height=head, radius=radius * 2.4,
                         resolution=32))
    if double:
        parts.append(pv.Cone(center=start + u * head / 2, direction=-u, height=head, radius=radius * 2.4,
                             resolution=32))
    return pv.merge([q.triangulate() for q in parts])


def raster(scene, lay, transparent=False, plotter=None):
    """RGBA (H, W, 4) uint8 image of the scene, and the number of atoms drawn."""

    pl = plotter or _plotter((lay.W, lay.H), transparent)
    actors = add_scene(pl, scene, lay, cull=True)
    pts, rad = scene.extent_points()
    extent = float(np.max(np.linalg.norm(pts - lay.centre, axis=1) + rad)) if len(pts) else 10.0
    _set_camera(pl, scene, lay, extent)
    add_annotations(pl, lay)
    pl.camera_set = True
    pl.render_window.Render()
    img = _grab(pl, transparent)
    n = actors.get("atoms_drawn", scene.n_atoms)
    if plotter is None:
        pl.close()
    return img, n


def _grab(pl, transparent):
    from vtkmodules.util.numpy_support import vtk_to_numpy
    from vtkmodules.vtkRenderingCore import vtkWindowToImageFilter

    f = vtkWindowToImageFilter()
    f.SetInput(pl.render_window)
    f.ShouldRerenderOff()
    f.SetInputBufferTypeToRGBA()
    f.ReadFrontBufferOff()
    f.Update()
    im = f.GetOutput()
    w, h, _ = im.GetDimensions()
    arr = vtk_to_numpy(im.GetPointData().GetScalars()).reshape(h, w, -1)[::-1].copy()
    if not transparent:
        arr[..., 3] = 255
    return arr


def add_scene(pl, scene, lay=None, cull=False):
    """Add the scene's actors to a plotter; returns {group: [actors]}."""
    import pyvista as pv

    out = {}
    v = scene.view

    def put(group, actor):
        out.setdefault(group, []).append(actor)
        return actor

    rgb = _rgb(scene.colours) if scene.colours else np.zeros((1, 3), np.uint8)
    if scene.n_atoms and not scene.cut_meshes:
        pos, rad, col = scene.atom_pos, scene.atom_radius, scene.atom_colour
        if cull and len(pos) > CULL_ABOVE:
            from .scene_graph import visible_atoms

            keep = visible_atoms(v.project(pos), rad)
            pos, rad, col = pos[keep], rad[keep], col[keep]
        out["atoms_drawn"] = len(pos)
        a = sphere_actor(pos, rad, rgb[col])
        pl.renderer.AddActor(a)
        put("atoms", a)
    if scene.cut_meshes:
        meshes = []
        for m in scene.cut_meshes:
            n = len(m["faces"])
            mesh = pv.PolyData(m["points"], np.column_stack([np.full(n, 3), m["faces"]]).ravel())
            mesh.point_data["rgb"] = np.tile(_rgb([m["colour"]]), (mesh.n_points, 1))
            meshes.append(mesh)
        merged = pv.merge(meshes).compute_normals(feature_angle=40, split_vertices=True, auto_orient_normals=False)
        a = pl.add_mesh(merged, scalars="rgb", rgb=True, smooth_shading=True, show_scalar_bar=False)
        _prop(a)
        put("atoms", a)
        out["atoms_drawn"] = len(scene.cut_meshes)
    if scene.bonds is not None and len(scene.bonds):
        if len(scene.bonds) <= 40_000:
            a = pl.add_mesh(cylinders(scene.bonds, scene.bond_radius), color=palette.ROLE_COLOURS["bond"],
                            smooth_shading=True)
        else:   # GPU tube impostors, width set from the figure's scale
            width = 2 * scene.bond_radius * (lay.scale if lay else 20.0)
            a = pl.add_mesh(_segments_mesh(scene.bonds), color=palette.ROLE_COLOURS["bond"],
                            line_width=max(1.0, width), render_lines_as_tubes=True)
        _prop(a)
        put("bonds", a)
    if scene.cell_edges is not None:
        lw = max(1.5, (lay.font if lay else 20) * 0.11)
        a = pl.add_mesh(_segments_mesh(scene.cell_edges), color=palette.ROLE_COLOURS["cell"], line_width=lw)
        a.GetProperty().SetLighting(False)
        put("cell", a)
    for s in scene.overlay_spheres:
        a = sphere_actor(s["pos"], s["radius"], np.tile(_rgb([s["colour"]]), (len(s["pos"]), 1)), s["opacity"])
        pl.renderer.AddActor(a)
        put(s["group"], a)
    for m in scene.meshes:
        n = len(m["faces"])
        mesh = pv.PolyData(np.asarray(m["points"], float), np.column_stack([np.full(n, 3), m["faces"]]).ravel())
        a = pl.add_mesh(mesh, color=m["colour"], opacity=m["opacity"], smooth_shading=False)
        _prop(a, m["opacity"]).SetSpecular(0.05)
        put(m["group"], a)
        if m.get("edges"):
            edges = mesh.extract_feature_edges(feature_angle=5, boundary_edges=True, non_manifold_edges=False,
                                               manifold_edges=False)
            if edges.n_points:
                e = pl.add_mesh(edges, color=_darker(m["colour"], 0.6), line_width=max(1.5, (lay.font if lay else 20) * 0.1))
                e.GetProperty().SetLighting(False)
                put(m["group"], e)
    for ar in scene.arrows:
        mesh = _arrow_mesh(np.asarray(ar["start"], float), np.asarray(ar["vector"], float), ar["radius"],
                           ar.get("double", False))
        a = pl.add_mesh(mesh, color=ar["colour"], smooth_shading=True)
        _prop(a)
        put(ar["group"], a)
    for ln in scene.lines:
        lw = ln.get("width", 3.0) * max(1.0, (lay.font if lay else 20) * 0.05)
        seg = np.asarray(ln["segments"], float)
        if ln.get("front") and lay is not None:     # a figure's fixed view: lift it in front of the atoms
            pts, rad = scene.extent_points()
            front = float(np.max(v.project(pts)[:, 2] + rad)) + 0.2     # just before the nearest thing
            seg = seg + v.toward[None, None, :] * (front - seg @ v.toward)[..., None]
        a = pl.add_mesh(_segments_mesh(seg), color=ln["colour"], line_width=lw)
        a.GetProperty().SetLighting(False)
        put(ln["group"], a)
    for mk in scene.markers:
        for p in mk["pos"]:
            sph = pv.Sphere(radius=mk["radius"], center=p, theta_resolution=32, phi_resolution=20)
            a = pl.add_mesh(sph, color=mk["colour"], opacity=0.12, smooth_shading=True)
            put(mk["group"], a)
            ring = _ring(p, mk["radius"], v)
            if mk.get("front") and lay is not None:     # over the atoms that would hide the empty site
                pts_, rad_ = scene.extent_points()
                front = float(np.max(v.project(pts_)[:, 2] + rad_)) + 0.2
                ring.points = np.asarray(ring.points) + v.toward[None, :] * (front - np.asarray(ring.points) @ v.toward)[:, None]
            r = pl.add_mesh(ring, color=mk["colour"], line_width=max(2.0, (lay.font if lay else 20) * 0.15),
                            render_lines_as_tubes=False)
            r.GetProperty().SetLighting(False)
            put(mk["group"], r)
    return out


def _ring(p, r, v, n=72):
    import pyvista as pv

    t = np.linspace(0, 2 * np.pi, n + 1)
    pts = p + r * (np.outer(np.cos(t), v.right) + np.outer(np.sin(t), v.up)) + v.toward * r * 0.02
    return pv.lines_from_points(pts)


def _darker(hexc, f):
    r, g, b = palette.hex_to_rgb(hexc)
    return "#%02x%02x%02x" % tuple(int(round(255 * c * f)) for c in (r, g, b))


def _lighter(hexc, f):
    r, g, b = palette.hex_to_rgb(hexc)
    return "#%02x%02x%02x" % tuple(int(round(255 * (c + (1 - c) * f))) for c in (r, g, b))


# ---------------------------------------------------------------- 2D annotation (VTK)
def _vtk2d():
    """The few VTK classes the 2D annotation needs (importing all of vtk costs seconds)."""
    from types import SimpleNamespace

    from vtkmodules.vtkCommonCore import vtkPoints
    from vtkmodules.vtkCommonDataModel import vtkCellArray, vtkPolyData
    from vtkmodules.vtkRenderingCore import vtkActor2D, vtkPolyDataMapper2D, vtkTextActor
    import vtkmodules.vtkRenderingFreeType  # noqa: F401  (text rendering)

    return SimpleNamespace(vtkPoints=vtkPoints, vtkCellArray=vtkCellArray, vtkPolyData=vtkPolyData,
                           vtkActor2D=vtkActor2D, vtkPolyDataMapper2D=vtkPolyDataMapper2D, vtkTextActor=vtkTextActor)


def _text2d(pl, text, x, y_top_origin, size, H, bold=False, align="left", valign="bottom"):
    vtk = _vtk2d()

    t = vtk.vtkTextActor()
    t.SetInput(text)
    tp = t.GetTextProperty()
    tp.SetFontSize(int(round(size)))
    tp.SetColor(*palette.hex_to_rgb(S.TEXT_COLOUR))
    tp.SetBold(bold)
    font = _font_file()
    if font:
        tp.SetFontFamily(4)          # VTK_FONT_FILE
        tp.SetFontFile(font)
    else:
        tp.SetFontFamilyToArial()
    {"left": tp.SetJustificationToLeft, "center": tp.SetJustificationToCentered,
     "right": tp.SetJustificationToRight}[align]()
    {"bottom": tp.SetVerticalJustificationToBottom, "center": tp.SetVerticalJustificationToCentered,
     "top": tp.SetVerticalJustificationToTop}[valign]()
    t.SetPosition(x, H - y_top_origin)
    pl.renderer.AddActor(t)
    return t


_FONTS = ["/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf",
          "/usr/share/fonts/truetype/liberation/LiberationSans-Regular.ttf",
          "/usr/share/fonts/dejavu/DejaVuSans.ttf", "/Library/Fonts/Arial.ttf", "C:/Windows/Fonts/arial.ttf"]


def _font_file():
    """A system sans-serif font whose square brackets look square (VTK's
    built-in face draws [ and ] like parentheses, which would misstate Miller
    indices)."""
    from .text import font_file

    return font_file()


def _poly2d(pl, pts_top, H, colour, filled=True, width=2.0):
    vtk = _vtk2d()

    pts = vtk.vtkPoints()
    for x, y in pts_top:
        pts.InsertNextPoint(x, H - y, 0)
    cells = vtk.vtkCellArray()
    ids = list(range(len(pts_top)))
    if filled:
        cells.InsertNextCell(len(ids), ids)
    else:
        cells.InsertNextCell(len(ids) + 1, ids + [0])
    pd = vtk.vtkPolyData()
    pd.SetPoints(pts)
    if filled:
        pd.SetPolys(cells)
    else:
        pd.SetLines(cells)
    return _add_actor2d(pl, pd, colour, width)


def _add_actor2d(pl, pd, colour, width=None):
    """Add a flat 2D actor (screen pixels) drawing ``pd`` in one colour."""
    vtk = _vtk2d()
    m = vtk.vtkPolyDataMapper2D()
    m.SetInputData(pd)
    a = vtk.vtkActor2D()
    a.SetMapper(m)
    a.GetProperty().SetColor(*palette.hex_to_rgb(colour))
    if width is not None:
        a.GetProperty().SetLineWidth(width)
    a._keep = pd
    pl.renderer.AddActor(a)
    return a


def _circle_pts(x, y, r, n=48):
    t = np.linspace(0, 2 * np.pi, n, endpoint=False)
    return list(zip(x + r * np.cos(t), y + r * np.sin(t)))


def swatch_shapes(shape, x, y, s, colour):
    """2D shapes (kind, points, colour) for a legend swatch centred at x, y."""
    if shape == "ball":
        return [("fill", _circle_pts(x, y, s * 0.5), _darker(colour, 0.75)),
                ("fill", _circle_pts(x, y, s * 0.43), colour)]
    if shape == "ring":
        return [("line", _circle_pts(x, y, s * 0.45), colour)]
    if shape == "none":
        return []
    if shape == "line":
        h = max(1.0, s * 0.09)
        return [("fill", [(x - s * 0.6, y - h), (x + s * 0.6, y - h), (x + s * 0.6, y + h), (x - s * 0.6, y + h)],
                 colour)]
    if shape == "arrow":
        return [("fill", [(x - s * 0.6, y - s * 0.08), (x + s * 0.15, y - s * 0.08), (x + s * 0.15, y - s * 0.25),
                          (x + s * 0.6, y), (x + s * 0.15, y + s * 0.25), (x + s * 0.15, y + s * 0.08),
                          (x - s * 0.6, y + s * 0.08)], colour)]
    return [("fill", [(x - s * 0.5, y - s * 0.4), (x + s * 0.5, y - s * 0.4), (x + s * 0.5, y + s * 0.4),
                      (x - s * 0.5, y + s * 0.4)], _lighter(colour, 0.25))]


def add_annotations(pl, lay):
    H = lay.H
    s = lay.legend_font * 1.1
    for lab, col, shape, x, y in lay.legend:
        for kind, pts, c in swatch_shapes(shape, x, y, s, col):
            if kind == "fill" and len(pts) > 4:
                # triangulate convex shapes as a fan for the 2D mapper
                _fan2d(pl, pts, H, c)
            else:
                _poly2d(pl, pts, H, c, filled=(kind == "fill"), width=max(2.0, s * 0.12))
        _text2d(pl, lab, x + lay.legend_font * 1.0, y, lay.legend_font, H, valign="center")
    for t, x, y in lay.caption:
        _text2d(pl, t, x, y, lay.caption_font, H)
    if lay.bar:
        x0, x1, y, L = lay.bar
        lw = max(2.0, lay.font * 0.16)
        tick = lay.font * 0.35
        _poly2d(pl, [(x0, y - lw / 2), (x1, y - lw / 2), (x1, y + lw / 2), (x0, y + lw / 2)], H, S.TEXT_COLOUR)
        for xx in (x0, x1):
            _poly2d(pl, [(xx - lw / 2, y - tick), (xx + lw / 2, y - tick), (xx + lw / 2, y + tick),
                         (xx - lw / 2, y + tick)], H, S.TEXT_COLOUR)
        _text2d(pl, S.fmt_length(L), (x0 + x1) / 2, y - tick - lay.font * 0.25, lay.font, H, align="center")


def _fan2d(pl, pts, H, colour):
    vtk = _vtk2d()

    vp = vtk.vtkPoints()
    cx = sum(p[0] for p in pts) / len(pts)
    cy = sum(p[1] for p in pts) / len(pts)
    vp.InsertNextPoint(cx, H - cy, 0)
    for x, y in pts:
        vp.InsertNextPoint(x, H - y, 0)
    cells = vtk.vtkCellArray()
    n = len(pts)
    for i in range(n):
        cells.InsertNextCell(3, [0, 1 + i, 1 + (i + 1) % n])
    pd = vtk.vtkPolyData()
    pd.SetPoints(vp)
    pd.SetPolys(cells)
    _add_actor2d(pl, pd, colour)


# ================================================================ PNG
def png_bytes(img, dpi):
    """RGBA or RGB uint8 array -> PNG bytes with a pHYs chunk for ``dpi``."""
    img = np.ascontiguousarray(img, dtype=np.uint8)
    h, w, c = img.shape
    colour_type = {3: 2, 4: 6}[c]
    if c == 4 and np.all(img[..., 3] == 255):
        img = np.ascontiguousarray(img[..., :3])
        colour_type, c = 2, 3
    raw = np.empty((h, 1 + w * c), np.uint8)
    raw[:, 0] = 0
    raw[:, 1:] = img.reshape(h, w * c)

    def chunk(tag, data):
        return struct.pack(">I", len(data)) + tag + data + struct.pack(">I", zlib.crc32(tag + data) & 0xFFFFFFFF)

    ppm = int(round(dpi / 0.0254))
    return (b"\x89PNG\r\n\x1a\n"
            + chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, colour_type, 0, 0, 0))
            + chunk(b"pHYs", struct.pack(">IIB", ppm, ppm, 1))
            + chunk(b"IDAT", zlib.compress(raw.tobytes(), 6))
            + chunk(b"IEND", b""))


def png_dpi(path_or_bytes):
    """The dpi a PNG's pHYs chunk records (None without one)."""
    data = Path(path_or_bytes).read_bytes() if not isinstance(path_or_bytes, bytes) else path_or_bytes
    k = 8
    while k < len(data):
        n, = struct.unpack(">I", data[k:k + 4])
        tag = data[k + 4:k + 8]
        if tag == b"pHYs":
            x, y, unit = struct.unpack(">IIB", data[k + 8:k + 17])
            return x * 0.0254 if unit == 1 else None
        k += 12 + n
    return None


# ================================================================ vector
def vector_estimate(scene):
    """Shapes a vector file of this scene would hold, counted before drawing."""
    n = 0 if scene.cut_meshes else scene.n_atoms
    n += 0 if scene.bonds is None else len(scene.bonds)
    n += sum(len(m["faces"]) for m in scene.cut_meshes + scene.meshes)
    n += sum(len(s["pos"]) for s in scene.overlay_spheres)
    n += sum(len(m["pos"]) for m in scene.markers) + len(scene.arrows) + 12
    return n


def display_list(scene, lay):
    """Projected 2D shapes in painter's order (far first).  Each item is a
    dict with 'kind' ('ball', 'poly', 'line', 'text'), 'depth' and geometry
    in pixels (top-left origin)."""
    v = scene.view
    items = []
    L = np.array([-0.45, 0.6, 1.0])
    L /= np.linalg.norm(L)
    if scene.n_atoms and not scene.cut_meshes:
        q = lay.to_px(v, scene.atom_pos)
        for k in range(len(q)):
            items.append(dict(kind="ball", x=q[k, 0], y=q[k, 1], r=scene.atom_radius[k] * lay.scale,
                              colour=scene.colours[scene.atom_colour[k]], depth=q[k, 2], opacity=1.0, atom=k))
    for m in scene.cut_meshes:
        _mesh_items(items, lay, v, m["points"], m["faces"], m["colour"], 1.0, L)
    if scene.bonds is not None and len(scene.bonds):
        for seg, ends, pair in bond_segments(scene):
            a = lay.to_px(v, seg)
            near = float(lay.to_px(v, ends)[:, 2].max())
            if np.hypot(*(a[1, :2] - a[0, :2])) < 0.5:
                continue                # end-on: hidden by the nearer ball
            # painted just before the nearer ball it ends in (after the farther one)
            items.append(dict(kind="line", pts=[(a[0, 0], a[0, 1]), (a[1, 0], a[1, 1])],
                              width=2 * scene.bond_radius * lay.scale, colour=palette.ROLE_COLOURS["bond"],
                              depth=near, opacity=1.0, order=-1, cap="butt", ends=pair))
    for ln in scene.lines:
        seg = np.asarray(ln["segments"], float)
        a = lay.to_px(v, seg[:, 0])
        b = lay.to_px(v, seg[:, 1])
        for k in range(len(a)):
            items.append(dict(kind="line", pts=[(a[k, 0], a[k, 1]), (b[k, 0], b[k, 1])],
                              width=max(2.0, lay.font * 0.05 * ln.get("width", 3.0)), colour=ln["colour"],
                              depth=np.inf if ln.get("front") else max(a[k, 2], b[k, 2]), opacity=1.0))
    if scene.cell_edges is not None:
        a = lay.to_px(v, scene.cell_edges[:, 0])
        b = lay.to_px(v, scene.cell_edges[:, 1])
        # each edge in short pieces, each at its own depth, so the painter's order puts a piece behind the
        # balls in front of it and in front of the balls behind it (one depth per edge got both wrong)
        pieces = 12
        t = np.linspace(0.0, 1.0, pieces + 1)
        for k in range(len(a)):
            p = a[k][None, :] + (b[k] - a[k])[None, :] * t[:, None]
            for j in range(pieces):
                items.append(dict(kind="line", pts=[(p[j, 0], p[j, 1]), (p[j + 1, 0], p[j + 1, 1])],
                                  width=max(1.5, lay.font * 0.11), colour=palette.ROLE_COLOURS["cell"],
                                  depth=(p[j, 2] + p[j + 1, 2]) / 2, order=-1, opacity=1.0,
                                  cap="round" if 0 < j < pieces - 1 else "butt"))
    for s in scene.overlay_spheres:
        q = lay.to_px(v, s["pos"])
        rr = np.broadcast_to(s["radius"], (len(q),))
        for k in range(len(q)):
            items.append(dict(kind="ball", x=q[k, 0], y=q[k, 1], r=rr[k] * lay.scale, colour=s["colour"],
                              depth=q[k, 2], opacity=s["opacity"]))
    for m in scene.meshes:
        _mesh_items(items, lay, v, m["points"], m["faces"], m["colour"], m["opacity"], L,
                    stroke=_darker(m["colour"], 0.6) if m.get("edges") else None, flat=True)
    for ar in scene.arrows:
        a = lay.to_px(v, np.array([ar["start"], np.asarray(ar["start"]) + ar["vector"]]))
        items.append(dict(kind="arrow", pts=[(a[0, 0], a[0, 1]), (a[1, 0], a[1, 1])],
                          width=2 * ar["radius"] * lay.scale, colour=ar["colour"], depth=a[:, 2].max(),
                          opacity=1.0, double=ar.get("double", False)))
    for mk in scene.markers:
        q = lay.to_px(v, mk["pos"])
        for k in range(len(q)):
            items.append(dict(kind="ring", x=q[k, 0], y=q[k, 1], r=mk["radius"] * lay.scale, colour=mk["colour"],
                              depth=np.inf if mk.get("front") else q[k, 2], opacity=1.0,
                              width=max(2.0, lay.font * 0.15)))
    items.sort(key=lambda it: (it["depth"], it.get("order", 0)))
    return items


def bond_segments(scene):
    """The visible part of each stick, (segment (2, 3), its two ball centres
    (2, 3), the two balls' indices): from where the stick leaves one ball to where it enters the other
    (the circle where a cylinder of the stick's radius meets each sphere),
    so a flat drawing never paints a stick across the ball it ends in."""
    out = []
    if scene.bond_atoms is None:
        ends = [(None, None)] * len(scene.bonds)
    else:
        ends = scene.bond_atoms
    rb = scene.bond_radius
    for (i, j), (p, q) in zip(ends, scene.bonds):
        d = q - p
        L = float(np.linalg.norm(d))
        if L < 1e-9:
            continue
        u = d / L
        ri = 0.0 if i is None else float(scene.atom_radius[i])
        rj = 0.0 if j is None else float(scene.atom_radius[j])
        si = np.sqrt(max(ri * ri - rb * rb, 0.0))
        sj = np.sqrt(max(rj * rj - rb * rb, 0.0))
        if si + sj >= L:
            continue                    # the balls overlap: no stick shows
        a, b = p + u * si, q - u * sj
        out.append((np.array([a, b]), np.array([p, q]), (i, j)))
    return out


def _mesh_items(items, lay, v, points, faces, colour, opacity, L, stroke=None, flat=False):
    q = lay.to_px(v, points)
    P = v.project(points)
    base = np.array(palette.hex_to_rgb(colour))
    for f in faces:
        n = np.cross(P[f[1]] - P[f[0]], P[f[2]] - P[f[0]])
        nn = np.linalg.norm(n)
        if nn < 1e-12:
            continue
        n /= nn
        if n[2] < 0 and opacity >= 1.0:
            continue            # back face of a closed solid
        lam = S.AMBIENT + S.DIFFUSE * abs(float(n @ L))
        c = np.clip(base * min(lam, 1.15), 0, 1)
        items.append(dict(kind="poly", pts=[(q[i, 0], q[i, 1]) for i in f],
                          colour="#%02x%02x%02x" % tuple(int(round(255 * x)) for x in c),
                          depth=float(q[f, 2].mean()), opacity=opacity, stroke=None if not flat else None))


def _esc(t):
    return (t.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;"))


def svg_bytes(items, lay, transparent=False):
    W, H = lay.W, lay.H
    if lay.dpi:        # the page in real units; drawing units are the PNG's pixels
        if lay.width_mm:
            page = f'width="{lay.page_mm[0]:.3f}mm" height="{lay.page_mm[1]:.3f}mm"'
        else:          # sized in pixels: inches, exact for a whole number of pixels
            page = f'width="{W / lay.dpi:.6g}in" height="{H / lay.dpi:.6g}in"'
    else:
        page = f'width="{W}" height="{H}"'
    out = [f'<?xml version="1.0" encoding="UTF-8"?>\n<svg xmlns="http://www.w3.org/2000/svg" '
           f'{page} viewBox="0 0 {W} {H}" font-family="DejaVu Sans, Helvetica, Arial, sans-serif">']
    body = []
    if not transparent:
        body.append(f'<rect x="0" y="0" width="{W}" height="{H}" fill="{S.BACKGROUND}"/>')
    for it in items:
        k = it["kind"]
        op = f' fill-opacity="{it["opacity"]:.3f}"' if it["opacity"] < 1 else ""
        if k == "ball":
            discs = "".join(f'<circle cx="{cx:.2f}" cy="{cy:.2f}" r="{rr:.2f}" fill="{c}" stroke="none"/>'
                            for cx, cy, rr, c in ball_discs(it["x"], it["y"], it["r"], it["colour"]))
            if it["opacity"] < 1:
                discs = f'<g opacity="{it["opacity"]:.3f}">{discs}</g>'
            body.append(discs)
        elif k == "ring":
            body.append(f'<circle cx="{it["x"]:.2f}" cy="{it["y"]:.2f}" r="{it["r"]:.2f}" fill="none" '
                        f'stroke="{it["colour"]}" stroke-width="{it["width"]:.2f}"/>')
        elif k == "poly":
            pts = " ".join(f"{x:.2f},{y:.2f}" for x, y in it["pts"])
            body.append(f'<polygon points="{pts}" fill="{it["colour"]}" stroke="{it["colour"]}" '
                        f'stroke-width="0.4" stroke-linejoin="round"{op}/>')
        elif k == "line":
            (x0, y0), (x1, y1) = it["pts"]
            body.append(f'<line x1="{x0:.2f}" y1="{y0:.2f}" x2="{x1:.2f}" y2="{y1:.2f}" stroke="{it["colour"]}" '
                        f'stroke-width="{it["width"]:.2f}" stroke-linecap="{it.get("cap", "round")}"/>')
        elif k == "arrow":
            for poly in _arrow_2d(it):
                pts = " ".join(f"{x:.2f},{y:.2f}" for x, y in poly)
                body.append(f'<polygon points="{pts}" fill="{it["colour"]}" stroke="none"/>')
    # annotations
    s = lay.legend_font * 1.1
    for lab, col, shape, x, y in lay.legend:
        for kind, pts, c in swatch_shapes(shape, x, y, s, col):
            p = " ".join(f"{a:.2f},{b:.2f}" for a, b in pts)
            if kind == "fill":
                body.append(f'<polygon points="{p}" fill="{c}" stroke="none"/>')
            else:
                body.append(f'<polygon points="{p}" fill="none" stroke="{c}" stroke-width="{max(2.0, s * 0.12):.2f}"/>')
        body.append(f'<text x="{x + lay.legend_font:.2f}" y="{y:.2f}" font-size="{lay.legend_font:.1f}" '
                    f'dominant-baseline="central" fill="{S.TEXT_COLOUR}" stroke="none">{_esc(lab)}</text>')
    for t, x, y in lay.caption:
        body.append(f'<text x="{x:.2f}" y="{y:.2f}" font-size="{lay.caption_font:.1f}" '
                    f'fill="{S.TEXT_COLOUR}" stroke="none">{_esc(t)}</text>')
    if lay.bar:
        x0, x1, y, L = lay.bar
        lw = max(2.0, lay.font * 0.16)
        tick = lay.font * 0.35
        body.append(f'<path d="M{x0:.2f},{y - tick:.2f} V{y + tick:.2f} M{x0:.2f},{y:.2f} H{x1:.2f} '
                    f'M{x1:.2f},{y - tick:.2f} V{y + tick:.2f}" stroke="{S.TEXT_COLOUR}" '
                    f'stroke-width="{lw:.2f}" fill="none"/>')
        body.append(f'<text x="{(x0 + x1) / 2:.2f}" y="{y - tick - lay.font * 0.25:.2f}" '
                    f'font-size="{lay.font:.1f}" text-anchor="middle" fill="{S.TEXT_COLOUR}" stroke="none">{_esc(S.fmt_length(L))}</text>')
    out.extend(body)
    out.append("</svg>\n")
    return "\n".join(out).encode("utf-8")


#: Shading of a ball in the vector files: (shift toward the highlight, colour
#: change) per flat disc, rim first.  Flat discs rather than an SVG gradient:
#: some converters (ImageMagick's built-in SVG reader among them) paint every
#: gradient black, and flat fills look the same in every program.
BALL_SHADES = ((0.0, ("darker", 0.62)), (0.06, ("darker", 0.74)), (0.13, ("darker", 0.86)),
               (0.22, ("mid", 1.0)), (0.34, ("lighter", 0.14)), (0.47, ("lighter", 0.28)),
               (0.61, ("lighter", 0.42)), (0.76, ("lighter", 0.56)))
BALL_HIGHLIGHT = np.array([-0.36, -0.42])     # toward the key light (top left), in ball radii


def ball_discs(x, y, r, colour):
    """(cx, cy, r, colour) of the flat discs that draw one shaded ball: each
    smaller disc shifted toward the highlight and lighter, all inside the rim."""
    out = []
    for t, (how, f) in BALL_SHADES:
        c = colour if how == "mid" else (_darker(colour, f) if how == "darker" else _lighter(colour, f))
        off = BALL_HIGHLIGHT * r * t / np.linalg.norm(BALL_HIGHLIGHT) * 0.9
        out.append((x + off[0], y + off[1], r * (1 - t), c))
    return out


def _arrow_2d(it):
    (x0, y0), (x1, y1) = it["pts"]
    d = np.array([x1 - x0, y1 - y0])
    L = float(np.linalg.norm(d))
    if L < 1e-6:
        return []
    u = d / L
    n = np.array([-u[1], u[0]])
    w = max(it["width"], 2.0) / 2
    head = min(w * 5, L * 0.35)
    s = np.array([x0, y0]) + (u * head if it.get("double") else 0)
    e = np.array([x1, y1]) - u * head
    polys = [[tuple(s + n * w), tuple(e + n * w), tuple(e - n * w), tuple(s - n * w)],
             [tuple(e + n * w * 2.4), (x1, y1), tuple(e - n * w * 2.4)]]
    if it.get("double"):
        polys.append([tuple(s + n * w * 2.4), (x0, y0), tuple(s - n * w * 2.4)])
    return polys


def pdf_bytes(items, lay, transparent=False):
    """A one-page PDF of the figure's real size (pixels at the layout's dpi;
    1 px = 1 pt without one) with vector paths and Helvetica text whose
    sizes are written in points."""
    W, H = lay.W, lay.H
    kpt = lay.pt_per_px                                # points per pixel
    ops = []
    shadings = []
    alphas = {}

    def rgb(c):
        r, g, b = palette.hex_to_rgb(c)
        return f"{r:.4f} {g:.4f} {b:.4f}"

    def Y(y):
        return H - y

    def gs(op):
        if op >= 1:
            return ""
        key = round(op, 3)
        name = alphas.setdefault(key, f"A{len(alphas)}")
        return f"/{name} gs "

    def circle(x, y, r):
        k = 0.5523 * r
        y = Y(y)
        return (f"{x + r:.2f} {y:.2f} m {x + r:.2f} {y + k:.2f} {x + k:.2f} {y + r:.2f} {x:.2f} {y + r:.2f} c "
                f"{x - k:.2f} {y + r:.2f} {x - r:.2f} {y + k:.2f} {x - r:.2f} {y:.2f} c "
                f"{x - r:.2f} {y - k:.2f} {x - k:.2f} {y - r:.2f} {x:.2f} {y - r:.2f} c "
                f"{x + k:.2f} {y - r:.2f} {x + r:.2f} {y - k:.2f} {x + r:.2f} {y:.2f} c h")

    def poly(pts):
        s = f"{pts[0][0]:.2f} {Y(pts[0][1]):.2f} m " + " ".join(f"{x:.2f} {Y(y):.2f} l" for x, y in pts[1:])
        return s + " h"

    ops.append(f"q {kpt:.6f} 0 0 {kpt:.6f} 0 0 cm")
    if not transparent:
        ops.append(f"{rgb(S.BACKGROUND)} rg 0 0 {W} {H} re f")
    for it in items:
        k = it["kind"]
        if k == "ball":
            x, y, r = it["x"], it["y"], it["r"]
            name = f"S{len(shadings)}"
            fx, fy = x - 0.14 * r * 2, Y(y) + 0.18 * r * 2
            shadings.append((name, fx, fy, x, Y(y), r, it["colour"]))
            ops.append(f"q {gs(it['opacity'])}{circle(x, y, r)} W n /{name} sh Q")
        elif k == "ring":
            ops.append(f"q {rgb(it['colour'])} RG {it['width']:.2f} w {circle(it['x'], it['y'], it['r'])} S Q")
        elif k == "poly":
            ops.append(f"q {gs(it['opacity'])}{rgb(it['colour'])} rg {rgb(it['colour'])} RG 0.4 w "
                       f"{poly(it['pts'])} B Q")
        elif k == "line":
            (x0, y0), (x1, y1) = it["pts"]
            cap = 0 if it.get("cap") == "butt" else 1
            ops.append(f"q {rgb(it['colour'])} RG {it['width']:.2f} w {cap} J {x0:.2f} {Y(y0):.2f} m {x1:.2f} {Y(y1):.2f} l S Q")
        elif k == "arrow":
            for pp in _arrow_2d(it):
                ops.append(f"q {rgb(it['colour'])} rg {poly(pp)} f Q")
    s = lay.legend_font * 1.1

    def text(t, x, y, size, anchor="left"):
        t = t.replace("\u03a3", "Sigma ")        # the base-14 Helvetica has no Greek
        enc = t.encode("latin-1", "replace").decode("latin-1")
        enc = enc.replace("\\", "\\\\").replace("(", "\\(").replace(")", "\\)")
        if anchor == "middle":
            x = x - 0.5 * _text_width(t, size) * 0.95
        # text is set outside the pixel transform, so its size is in points as written
        return (f"BT /F1 {size * kpt:.2f} Tf {rgb(S.TEXT_COLOUR)} rg {x * kpt:.2f} {Y(y) * kpt:.2f} Td "
                f"({enc}) Tj ET")

    texts = []
    for lab, col, shape, x, y in lay.legend:
        for kind, pts, c in swatch_shapes(shape, x, y, s, col):
            if kind == "fill":
                ops.append(f"q {rgb(c)} rg {poly(pts)} f Q")
            else:
                ops.append(f"q {rgb(c)} RG {max(2.0, s * 0.12):.2f} w {poly(pts)} S Q")
        texts.append(text(lab, x + lay.legend_font, y + lay.legend_font * 0.35, lay.legend_font))
    for t, x, y in lay.caption:
        texts.append(text(t, x, y, lay.caption_font))
    if lay.bar:
        x0, x1, y, L = lay.bar
        lw = max(2.0, lay.font * 0.16)
        tick = lay.font * 0.35
        ops.append(f"q {rgb(S.TEXT_COLOUR)} RG {lw:.2f} w {x0:.2f} {Y(y - tick):.2f} m {x0:.2f} {Y(y + tick):.2f} l "
                   f"{x0:.2f} {Y(y):.2f} m {x1:.2f} {Y(y):.2f} l {x1:.2f} {Y(y - tick):.2f} m {x1:.2f} {Y(y + tick):.2f} l S Q")
        texts.append(text(S.fmt_length(L), (x0 + x1) / 2, y - tick - lay.font * 0.25, lay.font, "middle"))
    ops.append("Q")
    ops.extend(texts)
    content = "\n".join(ops).encode("latin-1", "replace")
    content = zlib.compress(content)

    objs = []

    def add(b):
        objs.append(b if isinstance(b, bytes) else b.encode("latin-1"))
        return len(objs)

    add("<< /Type /Catalog /Pages 2 0 R >>")
    add("<< /Type /Pages /Kids [3 0 R] /Count 1 >>")
    add("PLACEHOLDER")
    font = add("<< /Type /Font /Subtype /Type1 /BaseFont /Helvetica /Encoding /WinAnsiEncoding >>")
    cont = add(b"<< /Length " + str(len(content)).encode() + b" /Filter /FlateDecode >>\nstream\n" + content
               + b"\nendstream")
    sh_refs = []
    for name, fx, fy, cx, cy, r, col in shadings:
        hi = rgb(_lighter(col, 0.55))
        lo = rgb(_darker(col, 0.62))
        mid = rgb(col)
        fn = (f"<< /FunctionType 3 /Domain [0 1] /Bounds [0.55] /Encode [0 1 0 1] /Functions ["
              f"<< /FunctionType 2 /Domain [0 1] /C0 [{hi}] /C1 [{mid}] /N 1 >> "
              f"<< /FunctionType 2 /Domain [0 1] /C0 [{mid}] /C1 [{lo}] /N 1 >> ] >>")
        ref = add(f"<< /ShadingType 3 /ColorSpace /DeviceRGB /Coords [{fx:.2f} {fy:.2f} 0 {cx:.2f} {cy:.2f} {r:.2f}] "
                  f"/Function {fn} /Extend [true true] >>")
        sh_refs.append(f"/{name} {ref} 0 R")
    gs_txt = " ".join(f"/{n} << /Type /ExtGState /ca {a} /CA {a} >>" for a, n in alphas.items())
    res = (f"<< /Font << /F1 {font} 0 R >> /Shading << {' '.join(sh_refs)} >> /ExtGState << {gs_txt} >> >>")
    objs[2] = (f"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 {W * kpt:.3f} {H * kpt:.3f}] /Resources {res} "
               f"/Contents {cont} 0 R >>").encode("latin-1")
    out = bytearray(b"%PDF-1.4\n%\xe2\xe3\xcf\xd3\n")
    offs = []
    for i, b in enumerate(objs, 1):
        offs.append(len(out))
        out += f"{i} 0 obj\n".encode() + b + b"\nendobj\n"
    xref = len(out)
    out += f"xref\n0 {len(objs) + 1}\n0000000000 65535 f \n".encode()
    for o in offs:
        out += f"{o:010d} 00000 n \n".encode()
    out += f"trailer\n<< /Size {len(objs) + 1} /Root 1 0 R >>\nstartxref\n{xref}\n%%EOF\n".encode()
    return bytes(out)
