"""crystalview export SPEC -o FILE.glb|.gltf|.cif|.xyz|.stl|.3mf: exchange files, format by extension."""
from __future__ import annotations

from .common import add_spec_arguments, crystal_from_args, print_json


def register(sub):
    p = sub.add_parser("export", help="write a 3D or structure file: .glb .gltf .cif .xyz .stl .3mf .html",
                       description="Write the crystal to a file whose extension picks the format: glTF 2.0 "
                                   "(.glb/.gltf) for web and AR viewers, CIF 1.1, extended XYZ, a printable "
                                   "STL / 3MF solid (in mm), or one self-contained web page (.html) that turns, "
                                   "zooms and names the atoms you click, offline in any current browser.")
    add_spec_arguments(p)
    p.add_argument("-o", "--output", required=True, metavar="FILE", help="output file; its extension picks the format")
    p.add_argument("--style", choices=["ball-and-stick", "space-filling", "lattice", "cell-cut"],
                   help="glTF/STL/3MF: balls and rods or touching spheres (default ball-and-stick); "
                        "HTML also lattice and cell-cut")
    p.add_argument("--scale", type=float, metavar="MM_PER_ANGSTROM", help="STL/3MF: mm per angstrom (default 10)")
    p.add_argument("--real-scale", action="store_true",
                   help="glTF: real size (1 angstrom = 1e-10 m) instead of 1 angstrom = 1 cm")
    p.add_argument("--instancing", choices=["auto", "on", "off"],
                   help="glTF: EXT_mesh_gpu_instancing (auto: for crystals over 2000 atoms)")
    p.add_argument("--cell", dest="cell_shape", choices=["prism", "primitive"],
                   help="glTF of one hcp or simple hexagonal cell: the hexagonal prism (default) or the primitive cell")
    g = p.add_argument_group("web page (.html)")
    g.add_argument("--view", metavar="UVW", help="HTML: the view it opens with, e.g. [111] (default: the figure's)")
    g.add_argument("--up", metavar="UVW", help="HTML: crystal direction pointing up at the start")
    g.add_argument("--sites", action="store_true", help="HTML: interstitial sites shown at the start")
    g.add_argument("--polyhedra", choices=["coordination", "sites", "both"], help="HTML: polyhedra shown at the start")
    g.add_argument("--plane", action="append", default=[], metavar="(hkl)", help="HTML: draw a plane; repeatable")
    g.add_argument("--direction", action="append", default=[], metavar="[uvw]",
                   help="HTML: draw a direction as an arrow; repeatable")
    g.add_argument("--layers", nargs="?", const=True, default=None, metavar="(hkl)",
                   help="HTML: stacking layer colours shown at the start")
    g.add_argument("--slip-axis", metavar="UVW", help="HTML: loading axis; shows the favoured slip system")
    g.add_argument("--title", metavar="TEXT", help="HTML: the page's title (default: the caption's first line)")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.add_argument("--json", action="store_true", help="print what was written as JSON only")
    p.set_defaults(func=run)


def run(args):
    from pathlib import Path

    from ..exchange import export

    suffix = Path(args.output).suffix.lower()
    opts = {}
    if args.style:
        opts["style"] = args.style
    if args.scale is not None:
        opts["scale"] = args.scale
    if args.real_scale:
        opts["real_scale"] = True
    if args.instancing:
        opts["instancing"] = args.instancing
    if args.cell_shape:
        if suffix not in (".glb", ".gltf"):
            from ..errors import UserError

            raise UserError(f"--cell is for glTF (.glb/.gltf) exports; for '{args.output}' leave it out")
        opts["cell_shape"] = args.cell_shape
    page_opts = dict(view=args.view, up=args.up, sites=args.sites or None, polyhedra=args.polyhedra,
                     planes=args.plane or None, directions=args.direction or None, layers=args.layers,
                     slip_axis=args.slip_axis, title=args.title)
    page_opts = {k: v for k, v in page_opts.items() if v is not None}
    if suffix in (".html", ".htm"):
        from ..fileio import check_target

        check_target(args.output, force=args.force)        # before the crystal is built
        opts.update(page_opts)
    elif page_opts:
        from ..errors import UserError

        names = ", ".join("--" + k.replace("_", "-").rstrip("s") if k in ("planes", "directions")
                          else "--" + k.replace("_", "-") for k in page_opts)
        raise UserError(f"{names} {'is' if len(page_opts) == 1 else 'are'} for web pages (.html); "
                        f"for '{args.output}' leave {'it' if len(page_opts) == 1 else 'them'} out")
    if args.style in ("lattice", "cell-cut") and suffix not in (".html", ".htm"):
        from ..errors import UserError

        raise UserError(f"--style {args.style} is for web pages (.html); for '{args.output}' use ball-and-stick "
                        f"or space-filling")
    from ..exchange import atom_cap

    c = crystal_from_args(args, keep_average=suffix == ".cif", atom_cap=atom_cap(args.output, args.style))
    from ..progress import working

    with working(f"{suffix.lstrip('.')} file of {len(c):,} atoms"):
        info = export(c, args.output, force=args.force, **opts)
    info = dict(info)
    if args.json:
        print_json(info)
        return 0
    if suffix in (".html", ".htm"):
        print(f"wrote {info['file']}: {info['atoms']:,} atoms ({info['spheres']:,} spheres drawn"
              f"{', ' + format(info['sticks'], ',') + ' sticks' if info['sticks'] else ''}), {info['bytes']:,} bytes, "
              f"{info['style']}, view {info['view']}; toggles: {', '.join(info['groups'])}")
        return 0
    if suffix in (".stl", ".3mf"):
        box = " x ".join(f"{x:.1f}" for x in info["bounding_box_mm"])
        print(f"wrote {info['file']}: {info['style']}, {info['scale_mm_per_A']:g} mm per angstrom, {box} mm, "
              f"{info['triangles']:,} triangles, watertight {'yes' if info['watertight'] else 'NO'}")
    else:
        extra = ""
        if "scale" in info:
            extra = f", {info['scale']}" + (", EXT_mesh_gpu_instancing" if info.get("instancing") else "")
        if "space_group" in info and info.get("format") == "cif":
            extra += f", space group {info['space_group']}"
        shown = info.get("spheres")
        what = "the hexagonal prism" if info.get("cell_drawn") == "hexagonal prism" else "the images on the cell faces"
        images = f" ({shown:,} spheres with {what})" if shown and shown != info["atoms"] else ""
        if "entries" in info:
            images = f" ({info['entries']} site entries with their occupancies)"
        n = info["atoms"]
        count = f"{int(round(n)):,}" if abs(n - round(n)) < 1e-9 else f"{n:,.4g}"   # average structures: fractional
        print(f"wrote {info['file']}: {count} atoms{images}, {info['bytes']:,} bytes{extra}")
    return 0
