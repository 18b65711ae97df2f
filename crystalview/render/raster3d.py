"""The 3D raster of a report figure, drawn by VTK off screen (pyvista).

Atoms are sphere impostors with their true radii (vtkOpenGLSphereMapper, one
point per atom, no glyph meshes), with atoms that cannot show in the
orthographic view dropped first, so a million atoms draw in seconds.  Legend,
caption and scale bar are VTK 2D actors placed by the layout.

vtk and pyvista are imported inside the functions: importing this module is cheap.
"""
from __future__ import annotations

import numpy as np

from .. import palette
from . import style as S
from .draw2d import _darker, swatch_shapes

CULL_ABOVE = 20_000          # atoms; below this every atom is drawn


def headless_setup():
    """Figures always render off screen.  Without a display, ask VTK for its
    EGL window straight away, so it does not first try (and warn about) X.

    >>> headless_setup()
    """
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
    """Sphere impostors with per-point radii: one point per sphere.

    >>> a = sphere_actor(np.zeros((2, 3)), np.ones(2), np.zeros((2, 3), np.uint8))
    >>> a.GetMapper().GetInput().GetNumberOfPoints()
    2
    """
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
    """One open-ended cylinder mesh per segment, built in numpy (no glyph filter).

    >>> cylinders(np.array([[[0, 0, 0], [0, 0, 1.0]]]), 0.1, sides=8).n_cells
    8
    """
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
    """RGBA (H, W, 4) uint8 image of the scene, drawn by VTK off screen, and the number of atoms drawn.

    >>> import crystalview as cv
    >>> from crystalview.render.scene_graph import build_scene
    >>> from crystalview.render.layout import make_layout
    >>> sc = build_scene(cv.build("Cu"), "space-filling", "[001]")
    >>> img, n = raster(sc, make_layout(sc, (120, 120), legend=False, caption=False, scale_bar=False))
    >>> img.shape, n == sc.n_atoms
    ((120, 120, 4), True)
    """

    pl = plotter or _plotter((lay.W, lay.H), transparent)
    actors = add_scene(pl, scene, lay, cull=True)
    extent = scene.projected_extent(centre=lay.centre)["reach"] or 10.0
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
    """Add the scene's actors to a plotter; returns {group: [actors]}.

    >>> import crystalview as cv
    >>> from crystalview.render.scene_graph import build_scene
    >>> pl = _plotter((64, 64), False)
    >>> sorted(k for k in add_scene(pl, build_scene(cv.build("Cu"), "ball-and-stick", "[001]")) if k != "atoms_drawn")
    ['atoms', 'bonds', 'cell']
    >>> pl.close()
    """
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
            from .scene_graph import visible_in_view

            keep = visible_in_view(v, pos, rad)
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
            front = scene.projected_extent()["front"] + 0.2     # just before the nearest thing
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
                front = scene.projected_extent()["front"] + 0.2
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



def add_annotations(pl, lay):
    """Legend, caption and scale bar as VTK 2D actors (the layout's pixels).

    >>> import crystalview as cv
    >>> from crystalview.render.scene_graph import build_scene
    >>> from crystalview.render.layout import make_layout
    >>> pl = _plotter((200, 200), False)
    >>> add_annotations(pl, make_layout(build_scene(cv.build("Cu"), "lattice", "[001]"), (200, 200)))
    >>> pl.renderer.GetViewProps().GetNumberOfItems() > 3
    True
    >>> pl.close()
    """
    H = lay.H
    s = lay.legend_font * 1.1
    lines_of = lay.legend_lines or [[e[0]] for e in lay.legend]
    for (lab, col, shape, x, y), lines in zip(lay.legend, lines_of):
        for kind, pts, c in swatch_shapes(shape, x, y, s, col):
            if kind == "fill" and len(pts) > 4:
                # triangulate convex shapes as a fan for the 2D mapper
                _fan2d(pl, pts, H, c)
            else:
                _poly2d(pl, pts, H, c, filled=(kind == "fill"), width=max(2.0, s * 0.12))
        for r, t in enumerate(lines):
            _text2d(pl, t, x + lay.legend_font * 1.0, y + r * lay.legend_font * 1.2, lay.legend_font, H,
                    valign="center")
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


