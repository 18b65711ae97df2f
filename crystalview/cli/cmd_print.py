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
    p.add_argument("-o", "--output", required=True, metavar="MODEL", help="output file, .stl or .3mf")
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


def run(args):
    from ..mesh.printable import print_model

    c = crystal_from_args(args)
    rep = print_model(c, args.output, style=args.style, scale=args.scale, clip_to_cell=args.clip_to_cell,
                      base=args.base, kit=args.kit, min_feature=args.min_feature, bed=tuple(args.bed),
                      material_density=args.material_density, clearance=args.clearance,
                      max_triangles=int(args.max_triangles), force=args.force, resolution=args.resolution,
                      edges=args.edges, cell=args.cell, overhang_angle=args.overhang_angle)
    if args.json:
        print_json(dict(rep))
    else:
        print(rep.text())
        print(f"wrote {rep['file']} and {rep['report_file']}")
    return 0
