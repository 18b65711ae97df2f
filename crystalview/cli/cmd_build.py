"""crystalview build SPEC [-o FILE]: build a crystal, say what it is, optionally write it."""
from __future__ import annotations

from .common import add_spec_arguments, crystal_from_args, print_json


def register(sub):
    p = sub.add_parser("build", help="build a crystal, report its size, optionally write it (.cif, .xyz)",
                       description="Build a crystal (with any defects), report atoms, cell and memory, "
                                   "and optionally write it to a structure file.")
    add_spec_arguments(p)
    p.add_argument("-o", "--output", metavar="FILE", help="write the crystal (.cif or .xyz)")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.add_argument("--json", action="store_true", help="print JSON only")
    p.set_defaults(func=run)


def run(args):
    import numpy as np

    c = crystal_from_args(args)
    info = {
        "atoms": len(c),
        "composition": c.counts(),
        "roles": c.role_counts(),
        "cell_A": c.cell.tolist(),
        "cell_lengths_A": [float(x) for x in np.linalg.norm(c.cell, axis=1)],
        "volume_A3": c.volume,
        "memory_MB": (c.positions.nbytes + c.numbers.nbytes + c.roles.nbytes) / 1e6,
        "defects": c.metadata.get("defects") or [],
    }
    if c.metadata.get("alloy"):
        info["alloy"] = c.metadata["alloy"]
    if args.output:
        if not args.output.lower().endswith((".cif", ".xyz")):
            from ..errors import UserError

            raise UserError(f"build writes structure files (.cif, .xyz); for '{args.output}' use "
                            f"`crystalview export` (glTF, 3MF, STL) or `crystalview print`")
        from ..exchange import export
        from ..progress import working

        with working(f"writing {len(c):,} atoms to {args.output}"):
            export(c, args.output, force=args.force)
        info["written"] = args.output
    if args.json:
        print_json(info)
        return 0
    name = c.metadata.get("name") or "/".join(c.elements)
    lat = f" {c.lattice.title}" if c.lattice is not None else ""
    comp = ", ".join(f"{k} {v:,}" if float(v) == int(v) else f"{k} {v:,.4g}" for k, v in info["composition"].items())
    rep = c.metadata.get("repeat")
    print(f"{name}{',' + lat if lat else ''}: {len(c):,} atoms ({comp}) in a "
          + " x ".join(f"{x:.4f}" for x in info["cell_lengths_A"]) + " A cell"
          + (f", repeat {' x '.join(map(str, rep))}" if rep else ""))
    mb = info["memory_MB"]
    print(f"  memory for the atoms: {mb:.1f} MB" if mb >= 0.1 else f"  memory for the atoms: {mb * 1000:.1f} kB")
    if c.metadata.get("alloy"):
        from ..alloy import report_lines

        for line in report_lines(c.metadata["alloy"]):
            print("  " + line)
    if c.metadata.get("realisation"):
        r = c.metadata["realisation"]
        drawn = ", ".join(f"{k} {v:,}" for k, v in sorted(c.counts().items()))
        print(f"  realised: {r['shared_sites']:,} shared or partly occupied sites drawn with seed {r['seed']}: "
              f"{drawn} (--seed N for another draw)")
        from ..occupancy import realisation_gap

        gap = realisation_gap(c)
        if gap:
            print("  " + gap)
    for d in info["defects"]:
        print("  defect: " + ", ".join(f"{k}={v}" for k, v in d.items() if not isinstance(v, (list, dict))))
    if args.output:
        print(f"  wrote {args.output}")
    return 0
