"""crystalview render SPEC -o FIG.png|.svg|.pdf: a report figure; -o turn.gif|.mp4 --turntable: an animation."""
from __future__ import annotations

from .common import add_spec_arguments, crystal_from_args, print_json

STYLE_NAMES = ["ball-and-stick", "space-filling", "lattice", "cell-cut"]


def add_figure_arguments(p):
    g = p.add_argument_group("figure")
    g.add_argument("--view", default=None, metavar="UVW",
                   help="look along this crystal direction, e.g. [001], [111], [2-1-10] (default [001]; along the "
                        "line for --dislocation; across the slip system for --slip-axis)")
    g.add_argument("--up", metavar="UVW", help="crystal direction pointing up in the picture (default: c or b axis)")
    g.add_argument("--style", default="ball-and-stick", metavar="STYLE",
                   help="one of " + ", ".join(STYLE_NAMES) + " (default ball-and-stick)")
    g.add_argument("--sites", action="store_true", help="show the interstitial sites at their free radius")
    g.add_argument("--polyhedra", choices=["coordination", "sites", "both"],
                   help="translucent coordination and/or site polyhedra")
    g.add_argument("--plane", action="append", default=[], metavar="(hkl)", help="draw a plane, e.g. (111); repeatable")
    g.add_argument("--direction", action="append", default=[], metavar="[uvw]",
                   help="draw a direction as an arrow from the origin; repeatable")
    g.add_argument("--layers", nargs="?", const=True, default=None, metavar="(hkl)",
                   help="colour close-packed layers A, B, C (default plane (111) or (0001))")
    g.add_argument("--no-defects", action="store_true", help="do not mark vacancies")
    g.add_argument("--slip-axis", metavar="UVW", help="loading axis: draw the most favoured slip plane and direction")
    g.add_argument("--cell", default=None, metavar="prism|primitive",
                   help="hcp and simple hexagonal: draw the hexagonal prism (default for one cell) or the "
                        "rhombic primitive cell the crystal stores")
    g.add_argument("--no-cell", action="store_true", help="leave out the cell outline")
    g.add_argument("--no-legend", action="store_true")
    g.add_argument("--no-scale-bar", action="store_true")
    g.add_argument("--caption", default=None, metavar="TEXT",
                   help="caption text (default: structure, lattice parameters, view); 'none' for no caption")


def figure_kwargs(args):
    cap = True
    if args.caption is not None:
        cap = False if args.caption.strip().lower() in ("none", "off", "") else args.caption
    return dict(view=args.view, up=args.up, style=args.style, sites=args.sites, polyhedra=args.polyhedra,
                planes=args.plane, directions=args.direction, layers=args.layers, defects=not args.no_defects,
                slip_axis=args.slip_axis, cell=False if args.no_cell else None, legend=not args.no_legend,
                scale_bar=not args.no_scale_bar, caption=cap, cell_shape=args.cell)


def register(sub):
    p = sub.add_parser("render", help="report figure as PNG, SVG or PDF; turntable animation as GIF or MP4",
                       description="Draw a crystal along a crystal direction into a PNG (with its dpi), SVG or PDF, "
                                   "with legend, scale bar and caption; with --turntable, a GIF or MP4 of the same "
                                   "figure turning once, legend and caption fixed.")
    add_spec_arguments(p)
    p.add_argument("-o", "--output", required=True, metavar="FIG",
                   help="output file: .png, .svg or .pdf; .gif or .mp4 with --turntable")
    add_figure_arguments(p)
    p.add_argument("--width", default=None, metavar="LENGTH",
                   help="figure width with its unit: 85mm (one column, the default), 180mm (full width), 3.5in")
    p.add_argument("--height", default=None, metavar="LENGTH",
                   help="figure height with its unit (default: what the content needs, cropped tight)")
    p.add_argument("--dpi", default=None,
                   help="dots per inch: the PNG's pixels per inch of --width (default 300; 150 for animations)")
    p.add_argument("--font-size", default=None, metavar="PT",
                   help="text size in points at any dpi (default 8; the caption is 7/8 of it)")
    p.add_argument("--size", nargs=2, default=None, metavar=("W", "H"),
                   help="size in pixels instead of --width/--height")
    p.add_argument("--transparent", action="store_true", help="transparent background (PNG alpha, SVG/PDF no fill)")
    a = p.add_argument_group("animation (.gif, .mp4)")
    a.add_argument("--turntable", action="store_true",
                   help="write a turntable animation: the crystal turns once, legend and caption stay")
    a.add_argument("--frames", default=None, metavar="N", help="frames in the turn (default 72)")
    a.add_argument("--seconds", default=None, metavar="S", help="length of the turn in seconds (default 6)")
    a.add_argument("--axis", default=None, metavar="UVW",
                   help="crystal direction to turn about (default: the vertical of the view)")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.add_argument("--json", action="store_true", help="print what was written as JSON only")
    p.set_defaults(func=run)


def run(args):
    from ..errors import UserError
    from ..fileio import check_target
    from ..render import style as S

    # cheap checks first: nothing is built or imported if the request is bad
    from pathlib import Path

    suffix = Path(args.output).suffix.lower()
    if args.turntable or suffix in (".gif", ".mp4"):
        return run_turntable(args)
    if args.frames is not None or args.seconds is not None or args.axis is not None:
        raise UserError("--frames, --seconds and --axis are for animations: add --turntable and write a .gif or .mp4")
    check_target(args.output, force=args.force, suffixes={".png", ".svg", ".pdf"})
    from ..render import text as T

    dpi = S.check_dpi(args.dpi if args.dpi is not None else 300)
    if args.size is not None and (args.width is not None or args.height is not None):
        raise UserError("give the figure's size either as --width/--height (mm, cm, in) or as --size W H "
                        "(pixels), not both")
    size = S.check_size(args.size) if args.size is not None else None
    for what, val in (("--width", args.width), ("--height", args.height)):
        if val is not None:
            S.check_size((T.parse_length(val, what) / 25.4 * dpi,) * 2)
    if args.font_size is not None:
        T.check_font_pt(args.font_size)
    S.get_style(args.style)
    from ..render.cells import check_cell_shape

    check_cell_shape(args.cell)
    c = crystal_from_args(args)
    from ..render.figure import render

    from ..progress import working

    with working(f"figure of {len(c):,} atoms"):
        info = render(c, args.output, size=size, dpi=dpi, transparent=args.transparent, force=args.force,
                      width=args.width, height=args.height, font_size=args.font_size, **figure_kwargs(args))
    if args.json:
        print_json(info)
        return 0
    extra = f", scale bar {info['scale_bar_A']:g} A" if "scale_bar_A" in info else ""
    print(f"wrote {info['path']}: {info['width_mm']:g} x {info['height_mm']:g} mm, {info['size'][0]} x "
          f"{info['size'][1]} px at {info['dpi']:g} dpi, "
          f"{info['style']}, view {info['view']} ({info['up']} up), {info['atoms_drawn']:,} spheres drawn for "
          f"{info['atoms']:,} atoms{extra}")
    if "atoms_per_cell_from_shares" in info:
        print("  atoms per cell from the cut shares: "
              + ", ".join(f"{k} {v:.3f}" for k, v in info["atoms_per_cell_from_shares"].items()))
    if UserError is None:  # pragma: no cover
        pass
    return 0


def run_turntable(args):
    """render --turntable: the figure turning once, as a GIF or MP4."""
    from ..errors import UserError
    from ..fileio import check_target
    from ..render import style as S
    from ..render import text as T
    from ..render import turntable as TT

    if not args.turntable:
        raise UserError(f"'{args.output}' is an animation; add --turntable (and optionally --frames N, --seconds S, "
                        f"--axis UVW), or write a .png, .svg or .pdf figure")
    check_target(args.output, force=args.force, suffixes=TT.SUFFIXES)
    frames, seconds = TT.check_frames(args.frames if args.frames is not None else TT.DEFAULT_FRAMES,
                                      args.seconds if args.seconds is not None else TT.DEFAULT_SECONDS)
    dpi = S.check_dpi(args.dpi if args.dpi is not None else TT.DEFAULT_DPI)
    if args.size is not None and (args.width is not None or args.height is not None):
        raise UserError("give the animation's size either as --width/--height (mm, cm, in) or as --size W H "
                        "(pixels), not both")
    size = S.check_size(args.size) if args.size is not None else None
    if args.font_size is not None:
        T.check_font_pt(args.font_size)
    if args.transparent:
        raise UserError("animations have no transparent background; leave out --transparent")
    S.get_style(args.style)
    c = crystal_from_args(args)
    TT.check_turntable_size(len(c))
    info = TT.turntable(c, args.output, size=size, dpi=dpi, force=args.force, width=args.width, height=args.height,
                        font_size=args.font_size, frames=frames, seconds=seconds, axis=args.axis,
                        **figure_kwargs(args))
    if args.json:
        print_json(info)
        return 0
    print(f"wrote {info['path']}: {info['frames']} frames over {info['seconds']:g} s ({info['fps']:g} per second), "
          f"{info['size'][0]} x {info['size'][1]} px, {info['style']}, view {info['view']} ({info['up']} up), "
          f"turning about {info['axis']}, {info['atoms_drawn']:,} spheres drawn for {info['atoms']:,} atoms, "
          f"{info['bytes']:,} bytes")
    return 0
