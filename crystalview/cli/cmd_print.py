"""crystalview print SPEC -o MODEL.stl|.3mf: a watertight, printable model and its print report."""
from __future__ import annotations

import argparse

from .common import add_spec_arguments, crystal_from_args, print_json


def register(sub):
    p = sub.add_parser("print", help="a watertight 3D-print model (STL or 3MF) with a print report",
                       description="Write one watertight solid (or a kit of balls and rods) that a desktop "
                                   "printer's slicer accepts as it is, to scale, with a print report beside it "
                                   "(MODEL.report.txt).")
    add_spec_arguments(p)
    for a in p._actions:                      # SPEC may be left out when --set names the models
        if a.dest == "spec":
            a.nargs, a.default = "?", None
    p.add_argument("-o", "--output", required=True, metavar="MODEL", help="output file, .stl or .3mf")
    p.add_argument("--set", metavar="SPEC,SPEC,...",
                   help="a meeting set: several models at one scale on one bed, in one .3mf (one object per "
                        "model) plus an STL per model beside it; elements (Cu,Fe,Mg: their reference "
                        "structures) or lattice types with --element (--set fcc,bcc,hcp --element Fe,Fe,Ti)")
    p.add_argument("--label", metavar="TEXT|auto|none", default=None,
                   help="text embossed or engraved on the base: auto (default where a base is made: structure, "
                        "lattice parameters, scale), none, or your own short text (adds a base to carry it)")
    p.add_argument("--label-stroke", type=float, metavar="MM", default=None,
                   help="thinnest stroke of the label text in mm (default 0.8: two lines of a 0.4 mm nozzle)")
    p.add_argument("--label-style", choices=["emboss", "engrave"], default="emboss",
                   help="raised text (emboss, default) or text cut into the base (engrave)")
    p.add_argument("--style", default="ball-and-stick", choices=["ball-and-stick", "space-filling"],
                   help="balls joined by rods, or touching hard spheres (default ball-and-stick)")
    p.add_argument("--clip-to-cell", action="store_true",
                   help="cut the space-filling spheres to the cell faces (volume / cell volume = packing factor)")
    p.add_argument("--scale", type=float, metavar="MM_PER_ANGSTROM", help="model size: mm per angstrom (default 10)")
    p.add_argument("--base", action=argparse.BooleanOptionalAction, default=None,
                   help="add a base plate under the model (default: where the model alone would touch the bed over "
                        "too small an area to stand); --no-base never adds one")
    p.add_argument("--edges", action=argparse.BooleanOptionalAction, default=None,
                   help="cell edges as struts of the minimum feature (default on for ball-and-stick)")
    p.add_argument("--resolution", type=float, default=0.05, metavar="MM",
                   help="printer resolution: the largest chord error of spheres and rods (default 0.05 mm)")
    p.add_argument("--overhang-angle", type=float, default=45.0, metavar="DEG",
                   help="steepest overhang printed without support, degrees from vertical (default 45)")
    p.add_argument("--cell", choices=["prism", "primitive"], default=None,
                   help="hcp / simple hexagonal: the hexagonal prism (default) or the stored primitive cell")
    p.add_argument("--kit", action="store_true",
                   help="separate balls with bored holes and loose rods, to assemble and take apart")
    p.add_argument("--clearance", type=float, default=0.2, metavar="MM",
                   help="kit: radial play between rod and hole (default 0.2 mm)")
    p.add_argument("--min-feature", type=float, default=2.0, metavar="MM",
                   help="thinnest rod or neck (default 2 mm); thinner rods are thickened")
    p.add_argument("--bed", nargs=3, type=float, default=[220.0, 220.0, 250.0], metavar=("X", "Y", "Z"),
                   help="printer bed size in mm (default 220 220 250, a common desktop size)")
    p.add_argument("--material-density", type=float, default=1.24, metavar="G_CM3",
                   help="material density for the mass estimate (default PLA 1.24 g/cm^3)")
    p.add_argument("--max-triangles", type=float, default=5e6, metavar="N",
                   help="refuse models estimated over this many triangles (default 5 million)")
    p.add_argument("--force", action="store_true", help="overwrite existing files")
    p.add_argument("--json", action="store_true", help="print the report as JSON only")
    p.set_defaults(func=run)


def _set_crystals(args):
    """The crystals of --set, each built as a SPEC of its own (every SPEC
    option applies to each; --element gives one entry per lattice type)."""
    from ..errors import UserError

    if args.spec:
        raise UserError(f"give the models either as SPEC or with --set, not both (drop '{args.spec}')")
    items = [x.strip() for x in args.set.split(",")]
    if not all(items):
        raise UserError(f"--set '{args.set}' has an empty entry; list SPECs separated by commas, e.g. --set Cu,Fe,Mg")
    elements = [None] * len(items)
    if args.element:
        el = [x.strip() for x in args.element.split(",")]
        if len(el) == 1:
            el = el * len(items)
        if len(el) != len(items):
            raise UserError(f"--element lists {len(el)} entries for {len(items)} models; give one per model "
                            f"(e.g. --set fcc,bcc,hcp --element Fe,Fe,Ti) or one for all")
        elements = [e or None for e in el]
    out = []
    for item, el in zip(items, elements):
        ns = argparse.Namespace(**vars(args))
        ns.spec = item
        ns.element = None if el is not None and el.lower() == item.lower() else el
        out.append(crystal_from_args(ns))
    return out


def run(args):
    from ..errors import UserError
    from ..exchange.model import print_model

    if args.set is not None:
        return _run_set(args)
    if not args.spec:
        raise UserError("give a SPEC (e.g. crystalview print Cu -o cu.3mf) or a set (--set Cu,Fe,Mg)")
    c = crystal_from_args(args)
    from ..progress import working

    with working(f"print model of {len(c):,} atoms"):
        rep = print_model(c, args.output, style=args.style, scale=args.scale, clip_to_cell=args.clip_to_cell,
                          base=args.base, kit=args.kit, min_feature=args.min_feature, bed=tuple(args.bed),
                          material_density=args.material_density, clearance=args.clearance,
                          max_triangles=_triangles(args.max_triangles), force=args.force,
                          resolution=args.resolution, edges=args.edges, cell=args.cell,
                          overhang_angle=args.overhang_angle, label=args.label, label_style=args.label_style,
                          label_stroke=args.label_stroke)
    if args.json:
        print_json(dict(rep))
    else:
        print(rep.text())
        print(f"wrote {rep['file']} and {rep['report_file']}")
    return 0


def _run_set(args):
    from ..exchange.model import print_set
    from ..mesh.printset import set_report_text

    crystals = _set_crystals(args)
    rep = print_set(crystals, args.output, style=args.style, scale=args.scale, clip_to_cell=args.clip_to_cell,
                    base=args.base, kit=args.kit, min_feature=args.min_feature, bed=tuple(args.bed),
                    material_density=args.material_density, max_triangles=_triangles(args.max_triangles),
                    force=args.force, resolution=args.resolution, edges=args.edges, cell=args.cell,
                    overhang_angle=args.overhang_angle, label=args.label, label_style=args.label_style,
                    label_stroke=args.label_stroke)
    if args.json:
        print_json(dict(rep))
    else:
        print(set_report_text(rep))
        names = ", ".join(rep["stl_files"])
        print(f"wrote {rep['file']}, {names} and {rep['report_file']}")
    return 0


def _triangles(value):
    from ..limits import cap_value

    return cap_value(value, "--max-triangles")
