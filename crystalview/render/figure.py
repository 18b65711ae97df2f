"""Report figures: PNG (with its dpi), SVG and PDF.

This module is the entry point (:func:`render`); the work is split:

* :mod:`crystalview.render.layout`: where the drawing, legend, caption and scale bar go;
* :mod:`crystalview.render.draw2d`: the projected display list (painter's order) and the
  cairo routine that paints it, with the annotations, onto a PNG, SVG or PDF surface;
* :mod:`crystalview.render.raster3d`: the VTK off-screen raster (pyvista), for PNGs of scenes
  too large to draw shape by shape, and for the turntable and the interactive window.

A PNG of a modest scene (at most :data:`CAIRO_PNG_MAX` shapes) is drawn by the
same cairo routine as the vector files, so the three formats share one layout
and a small figure never loads vtk; larger scenes go to the VTK raster, which
draws a million atoms as sphere impostors after dropping those that cannot show.
"""
from __future__ import annotations

import os
from pathlib import Path

from ..errors import UserError
from ..fileio import atomic_write, check_target
from . import style as S
from .draw2d import (_arrow_2d, _darker, _lighter, bond_segments, display_list, image, load_cairo,
                     pdf_bytes, png_bytes, png_dpi, require_cairo, surface, surface_png, svg_bytes, swatch_shapes,
                     vector_estimate)
from .layout import MAX_ASPECT, Layout, _text_width, figure_size, make_layout
from .raster3d import (CULL_ABOVE, _font_file, _grab, _lights, _plotter, _rgb, _set_camera,
                       add_annotations, add_scene, cylinders, headless_setup, raster, sphere_actor)
from .scene_graph import build_scene

#: Names other modules and the tests take from here (the work lives in layout, draw2d and raster3d).
__all__ = ["render", "figure_size", "make_layout", "Layout", "MAX_ASPECT", "build_scene", "display_list",
           "bond_segments", "vector_estimate", "swatch_shapes", "image", "surface", "surface_png", "svg_bytes", "pdf_bytes", "png_bytes",
           "png_dpi", "load_cairo", "require_cairo", "raster", "add_scene", "add_annotations", "sphere_actor",
           "cylinders", "headless_setup", "CULL_ABOVE", "CAIRO_PNG_MAX", "SUFFIXES",
           "_text_width", "_darker", "_lighter", "_arrow_2d", "_font_file", "_grab", "_lights", "_plotter", "_rgb",
           "_set_camera"]

SUFFIXES = {".png", ".svg", ".pdf"}

#: Largest display list (shapes: balls, sticks, faces, edges) a PNG is drawn
#: from by cairo, shape by shape in painter's order; past it the VTK raster
#: draws the PNG.  cairo paints a shape in about 15-40 us here (a shaded ball
#: the most), so this many take well under a second, still faster than
#: starting VTK's renderer, and it is the count past which a vector file is
#: refused anyway.
CAIRO_PNG_MAX = S.MAX_VECTOR_PRIMITIVES


#: Peak memory of a figure per atom of the crystal, by style (bytes; measured on 10,061,824 atoms of Cu:
#: ball-and-stick 2.45 GB, lattice 3.37 GB, space-filling 1.52 GB, less about 0.15 GB for the program),
#: rounded up, plus the program itself.
RENDER_BYTES_PER_ATOM = {"ball-and-stick": 250, "lattice": 350, "space-filling": 150, "cell-cut": 350}
RENDER_BASE_BYTES = 400_000_000


def available_memory():
    """Bytes of memory the machine can give now (MemAvailable of
    /proc/meminfo, else the physical memory), no more than the process's
    address-space limit where one is set; None where nothing is known.

    >>> available_memory() is None or available_memory() > 0
    True
    """
    have = None
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    have = int(line.split()[1]) * 1024
    except OSError:
        pass
    if have is None:
        try:
            have = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        except (ValueError, OSError, AttributeError):
            pass
    try:
        import resource

        soft = resource.getrlimit(resource.RLIMIT_AS)[0]
        if soft not in (resource.RLIM_INFINITY, -1) and soft > 0:
            have = soft if have is None else min(have, soft)
    except (ImportError, ValueError, OSError):
        pass
    return have


def check_render_memory(n_atoms, style):
    """Refuse, before anything is drawn, a figure whose estimated peak memory
    (:data:`RENDER_BYTES_PER_ATOM`) is over what the machine has free now.

    >>> check_render_memory(1000, "ball-and-stick")      # small: nothing to say
    """
    need = RENDER_BASE_BYTES + int(n_atoms) * RENDER_BYTES_PER_ATOM.get(style, 350)
    have = available_memory()
    if have is not None and need > have:
        raise UserError(f"a {style} figure of {n_atoms:,} atoms needs about {need / 1e9:.1f} GB of memory and only "
                        f"{have / 1e9:.1f} GB is free to this process; draw fewer cells"
                        + (", or use --style space-filling (about 150 bytes per atom)" if style != "space-filling"
                           else ""))


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
    fitted to the frame.  ``view=None``: [001] for larger crystals, an oblique view with c up
    for a cubic or tetragonal crystal of up to 2 x 2 x 2 cells, along the line of a
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

    >>> import tempfile, os
    >>> import crystalview as cv
    >>> d = tempfile.mkdtemp()
    >>> info = render(cv.build("Cu"), os.path.join(d, "cu.svg"), width="85mm")
    >>> info["width_mm"], info["font_pt"], info["view"]
    (85.0, 8.0, '[3-11]')
    """
    from . import text as T

    p = Path(path)
    suffix = p.suffix.lower()
    check_target(p, force=force, suffixes=SUFFIXES)
    dpi = S.check_dpi(dpi)
    font_pt = T.check_font_pt(font_size if font_size is not None else T.FONT_PT)
    size, w_mm = figure_size(size, width, height, dpi)
    st = S.get_style(style)
    check_render_memory(len(crystal), st.name)
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
    title = scene.caption[0] if scene.caption else None
    if suffix == ".png":
        est = vector_estimate(scene)
        cairo_ok = load_cairo()[0] is not None
        if cairo_ok and est <= CAIRO_PNG_MAX and not scene.cut_meshes:
            surf = surface(display_list(scene, lay), lay, transparent=transparent)
            data = surface_png(surf, dpi, transparent)
            surf.finish()
            info["atoms_drawn"] = scene.n_atoms
            info["drawn_by"] = "cairo"
        else:           # a large scene, spheres cut by the cell (smooth-shaded meshes), or no cairo: VTK
            img, n_drawn = raster(scene, lay, transparent=transparent)
            data = png_bytes(img, dpi)
            info["atoms_drawn"] = n_drawn
            info["drawn_by"] = "vtk"
        atomic_write(p, data, force=force)
    else:
        what = "an SVG" if suffix == ".svg" else "a PDF"
        require_cairo(what)
        est = vector_estimate(scene)
        items = display_list(scene, lay) if est <= S.MAX_VECTOR_PRIMITIVES else [None] * est
        if len(items) > S.MAX_VECTOR_PRIMITIVES:
            raise UserError(f"this scene needs about {len(items):,} vector shapes, over the {S.MAX_VECTOR_PRIMITIVES:,} "
                            f"a {suffix[1:].upper()} stays usable with; write a .png instead (or draw fewer cells)")
        if suffix == ".svg":
            desc = "\n".join(t for t, _, _ in lay.caption) or "\n".join(scene.caption) or None   # as drawn
            data = svg_bytes(items, lay, transparent, title=title, desc=desc)
        else:
            data = pdf_bytes(items, lay, transparent, title=title)
        atomic_write(p, data, force=force)
        info["shapes"] = len(items)
    return info
