"""Turntable animations (GIF, MP4) of any report figure, for slides.

Every frame comes from the same off-screen renderer as the PNG figures
(:func:`crystalview.render.figure.raster` on a
:func:`~crystalview.render.scene_graph.build_scene` scene): the crystal and
its overlays turn about an axis (default: the vertical of the view) through
the middle of the drawing, while the legend, the scale bar and the caption
stay where they are.  The layout is made once for the whole turn (the
drawing area holds the crystal at every angle), so nothing jumps between
frames.  Frames go straight into the file (imageio: GIF through Pillow;
MP4 H.264 through the ffmpeg binary the ``imageio-ffmpeg`` wheel ships).
"""
from __future__ import annotations

import copy
import math
from dataclasses import replace

import numpy as np

from ..errors import LimitError, UserError
from ..fileio import atomic_write, check_target

SUFFIXES = {".gif", ".mp4"}
DEFAULT_FRAMES = 72
DEFAULT_SECONDS = 6.0
MIN_FRAMES, MAX_FRAMES = 2, 720
#: Most atoms an animation draws (every frame draws them all again).
MAX_TURNTABLE_ATOMS = 100_000
#: Most raw frame data a GIF collects before it is written (Pillow writes all frames at once).
MAX_GIF_BYTES = 1_500_000_000
#: Largest frame of an animation, in pixels: 4096 x 4096, past 4K screens; a larger one needs gigabytes of
#: render and encoder buffers per frame (8192 x 8192 ran out of memory).
MAX_FRAME_PIXELS = 4096 * 4096
#: Default resolution of animations: screens, not paper.
DEFAULT_DPI = 150


def check_frames(frames, seconds):
    """(frames, seconds) as numbers in range, or a one-line UserError.

    >>> check_frames("36", 3)
    (36, 3.0)
    """
    try:
        n = int(frames)
        if n != float(frames):
            raise ValueError
    except (TypeError, ValueError, OverflowError):
        raise UserError(f"--frames '{frames}' must be a whole number, e.g. --frames 72") from None
    if not (MIN_FRAMES <= n <= MAX_FRAMES):
        raise UserError(f"--frames {n} is out of range; use {MIN_FRAMES} to {MAX_FRAMES}, e.g. --frames 72")
    try:
        s = float(seconds)
    except (TypeError, ValueError):
        raise UserError(f"--seconds '{seconds}' is not a number; use e.g. --seconds 6") from None
    if not (math.isfinite(s) and 0.1 <= s <= 600):
        raise UserError(f"--seconds {seconds} is out of range; use 0.1 to 600, e.g. --seconds 6")
    if n / s > 60:
        raise UserError(f"{n} frames in {s:g} s is {n / s:.0f} frames a second; keep it at 60 or less "
                        f"(fewer --frames or more --seconds)")
    return n, s


def check_turntable_size(n_atoms):
    """Nothing for a crystal a turntable can draw; a one-line LimitError past :data:`MAX_TURNTABLE_ATOMS`.

    >>> check_turntable_size(1000)        # within the cap: nothing to say
    """
    if n_atoms > MAX_TURNTABLE_ATOMS:
        raise LimitError(f"a turntable draws every atom in every frame, at most {MAX_TURNTABLE_ATOMS:,} atoms; this "
                         f"crystal has {n_atoms:,}: use a smaller --repeat, --style lattice for a lighter "
                         f"figure, or write a .glb (glTF) file to turn in a viewer")


def rotation(axis, angle):
    """3x3 matrix turning vectors by ``angle`` (radians) right-handed about the unit ``axis``.

    >>> R = rotation(np.array([0, 0, 1.0]), math.pi / 2)
    >>> np.round(R @ np.array([1.0, 0, 0]), 12).tolist()
    [0.0, 1.0, 0.0]
    """
    a = np.asarray(axis, float) / np.linalg.norm(axis)
    K = np.array([[0, -a[2], a[1]], [a[2], 0, -a[0]], [-a[1], a[0], 0]])
    return np.eye(3) + math.sin(angle) * K + (1 - math.cos(angle)) * (K @ K)


def rotate_scene(scene, R, centre):
    """A copy of ``scene`` with every drawn thing turned by ``R`` about ``centre``;
    the view, legend and caption stay.

    >>> import crystalview as cv
    >>> from crystalview.render.scene_graph import build_scene
    >>> sc = build_scene(cv.build("Cu"), "lattice", "[001]")
    >>> turned = rotate_scene(sc, rotation(np.array([0, 0, 1.0]), math.pi), np.zeros(3))
    >>> bool(np.allclose(turned.atom_pos[:, 2], sc.atom_pos[:, 2])), turned.n_atoms == sc.n_atoms
    (True, True)
    """
    c = np.asarray(centre, float)

    def pts(p):
        p = np.asarray(p, float)
        return ((p.reshape(-1, 3) - c) @ R.T + c).reshape(p.shape)

    def vec(v):
        v = np.asarray(v, float)
        return (v.reshape(-1, 3) @ R.T).reshape(v.shape)

    out = replace(scene)
    out.atom_pos = None if scene.atom_pos is None else pts(scene.atom_pos)
    out.bonds = None if scene.bonds is None else pts(scene.bonds)
    out.cell_edges = None if scene.cell_edges is None else pts(scene.cell_edges)
    out.cut_meshes = [dict(m, points=pts(m["points"])) for m in scene.cut_meshes]
    out.overlay_spheres = [dict(s, pos=pts(s["pos"])) for s in scene.overlay_spheres]
    out.meshes = [dict(m, points=pts(m["points"])) for m in scene.meshes]
    out.arrows = [dict(a, start=pts(a["start"]), vector=vec(a["vector"])) for a in scene.arrows]
    out.markers = [dict(m, pos=pts(m["pos"])) for m in scene.markers]
    out.lines = [dict(ln, segments=pts(ln["segments"])) for ln in scene.lines]
    return out


def swept_extent(scene, axis, centre):
    """Points (and zero radii) whose bounding box on the page holds the scene
    at every angle of a whole turn about ``axis`` through ``centre``: each
    thing sweeps a circle about the axis, whose shadow on a page direction e
    reaches ρ·sqrt(1 - (a·e)²) either side of its centre.

    >>> import crystalview as cv
    >>> from crystalview.render.scene_graph import build_scene
    >>> sc = build_scene(cv.build("Cu"), "lattice", "[001]")
    >>> pts, rad = swept_extent(sc, sc.view.up, sc.atom_pos.mean(axis=0))
    >>> pts.shape[1], bool((rad == 0).all())
    (3, True)
    """
    pts, rad = scene.extent_points()
    a = np.asarray(axis, float) / np.linalg.norm(axis)
    rel = pts - centre
    h = rel @ a
    rho = np.linalg.norm(rel - np.outer(h, a), axis=1)
    mid = centre + np.outer(h, a)
    v = scene.view
    out = []
    for e in (v.right, v.up, v.toward):
        reach = rho * math.sqrt(max(0.0, 1.0 - float(a @ e) ** 2)) + rad
        out += [mid + np.outer(reach, e), mid - np.outer(reach, e)]
    q = np.vstack(out)
    return q, np.zeros(len(q))


def turntable(crystal, path, view=None, style="ball-and-stick", size=None, dpi=None, *, frames=DEFAULT_FRAMES,
              seconds=DEFAULT_SECONDS, axis=None, up=None, sites=False, polyhedra=None, planes=(), directions=(),
              layers=None, defects=True, slip_axis=None, cell=None, legend=True, scale_bar=True, caption=True,
              force=False, cell_shape=None, width=None, height=None, font_size=None, transparent=False):
    """Write a turntable animation of the figure :func:`crystalview.render`
    would draw to ``path`` (.gif or .mp4): ``frames`` frames over ``seconds``,
    turning once about ``axis`` (a crystal direction '[uvw]'; default the
    vertical of the view).  Sizes as for figures (``width`` at ``dpi``,
    default 85 mm at 150 dpi, or ``size`` in pixels).  Returns a dict.

    >>> import os, tempfile
    >>> import crystalview as cv
    >>> out = os.path.join(tempfile.mkdtemp(), "cu.gif")
    >>> info = turntable(cv.build("Cu"), out, style="lattice", size=(96, 96), frames=4, seconds=1,
    ...                  legend=False, caption=False, scale_bar=False)
    >>> info["frames"], os.path.getsize(out) > 0
    (4, True)
    """
    from .. import progress
    from . import figure as F
    from . import style as S
    from . import text as T
    from .scene_graph import build_scene, direction

    p = check_target(path, force=force, suffixes=SUFFIXES)
    suffix = p.suffix.lower()
    n_frames, secs = check_frames(frames, seconds)
    if transparent:
        raise UserError("animations have no transparent background (GIF keeps one colour, MP4 none); leave out "
                        "--transparent")
    if suffix == ".mp4":
        try:
            import imageio_ffmpeg  # noqa: F401
        except ImportError:
            raise UserError("MP4 needs the imageio-ffmpeg package (pip install imageio-ffmpeg), which brings its "
                            "own ffmpeg; or write a .gif, which needs nothing more") from None
    check_turntable_size(len(crystal))            # before anything is built
    dpi = S.check_dpi(dpi if dpi is not None else DEFAULT_DPI)
    font_pt = T.check_font_pt(font_size if font_size is not None else T.FONT_PT)
    from .figure import figure_size

    size, w_mm = figure_size(size, width, height, dpi, what="animation")
    st = S.get_style(style)
    scene = build_scene(crystal, st, view, up, sites=sites, polyhedra=polyhedra, planes=planes,
                        directions=directions, layers=layers, defects=defects, slip_axis=slip_axis, cell=cell,
                        cell_shape=cell_shape)
    check_turntable_size(scene.n_atoms)
    if axis is None:
        ax, ax_label = scene.view.up, f"{scene.view.up_label} (the vertical)"
    else:
        ax, ax_label = direction(crystal, axis, "axis")
    pts, rad = scene.extent_points()
    centre = (np.min(pts - rad[:, None], axis=0) + np.max(pts + rad[:, None], axis=0)) / 2
    whole = copy.copy(scene)
    sw = swept_extent(scene, ax, centre)
    whole.extent_points = lambda: sw
    lay = F.make_layout(whole, size, legend=legend, scale_bar=scale_bar, caption=caption, dpi=dpi, font_pt=font_pt,
                        width_mm=w_mm)
    if not (S.MIN_SIDE <= lay.H <= S.MAX_SIDE):
        raise UserError(f"the animation would be {lay.W} x {lay.H} pixels; each side must be {S.MIN_SIDE} to "
                        f"{S.MAX_SIDE}: give --height, or a smaller --dpi or --width")
    W, H = lay.W + lay.W % 2, lay.H + lay.H % 2          # H.264 wants even sides; GIF does not mind
    if W * H > MAX_FRAME_PIXELS:
        raise LimitError(f"animation frames of {W} x {H} pixels are over the {MAX_FRAME_PIXELS:,} pixels a frame may "
                         f"have (4096 x 4096); give a smaller --width, --dpi or --size")
    if suffix == ".gif" and W * H * 3 * n_frames > MAX_GIF_BYTES:
        raise LimitError(f"{n_frames} frames of {W} x {H} pixels is {W * H * 3 * n_frames / 1e9:.1f} GB before "
                         f"compression, over the {MAX_GIF_BYTES / 1e9:g} GB a GIF is built in; use fewer --frames, "
                         f"a smaller --width or --dpi, or write an .mp4")
    fps = n_frames / secs
    drawn = []

    def write(tmp):
        import imageio.v2 as iio

        if suffix == ".gif":
            out = iio.get_writer(tmp, format="GIF", mode="I", duration=1000.0 / fps, loop=0)
        else:
            out = iio.get_writer(tmp, format="FFMPEG", mode="I", fps=fps, codec="libx264", quality=None,
                                 pixelformat="yuv420p", macro_block_size=2, ffmpeg_log_level="error",
                                 output_params=["-crf", "20", "-movflags", "+faststart"])
        pl = F._plotter((lay.W, lay.H), False)
        try:
            with progress.bar(f"turntable {p.name}", n_frames) as bar:
                for k in range(n_frames):
                    R = rotation(ax, 2 * math.pi * k / n_frames)
                    pl.renderer.clear_actors()           # pyvista's own record of them too
                    pl.renderer.RemoveAllViewProps()
                    img, n = F.raster(rotate_scene(scene, R, centre), lay, transparent=False, plotter=pl)
                    drawn.append(n)
                    rgb = np.asarray(img[..., :3])
                    if rgb.shape[:2] != (H, W):          # pad to even sides with the background
                        pad = np.full((H, W, 3), 255, np.uint8)
                        pad[:rgb.shape[0], :rgb.shape[1]] = rgb
                        rgb = pad
                    out.append_data(rgb)
                    bar.update()
        finally:
            pl.close()
            out.close()

    atomic_write(p, writer=write, force=force)
    info = dict(path=str(p), format=suffix[1:], frames=n_frames, seconds=round(secs, 3), fps=round(fps, 3),
                size=[W, H], dpi=dpi, style=st.name, view=scene.view.label, up=scene.view.up_label, axis=ax_label,
                atoms=len(crystal), atoms_drawn=max(drawn) if drawn else scene.n_atoms, bytes=p.stat().st_size,
                width_mm=round(lay.page_mm[0], 2), height_mm=round(lay.page_mm[1], 2))
    if lay.bar:
        info["scale_bar_A"] = lay.bar[3]
    return info
