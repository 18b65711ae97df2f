"""Shared command-line pieces: the SPEC arguments, JSON output, file targets."""
from __future__ import annotations

import json
import sys
from pathlib import Path

from ..errors import UserError

from . import defect_args
from .values import _ints


def _positive_float(text):
    try:
        v = float(text)
    except ValueError:
        raise UserError(f"'{text}' is not a number") from None
    return v


def add_spec_arguments(p, defects=True):
    p.add_argument("spec", metavar="SPEC",
                   help="element (Cu), compound (Ni3Al), lattice type (fcc, bcc, hcp, sc, hex, diamond, "
                        "B2, L1_2, L1_0), a .cif file or a .toml scene file")
    g = p.add_argument_group("structure")
    g.add_argument("--phase", help="named phase of the element, e.g. alpha, gamma, delta")
    g.add_argument("--lattice", help="use the element's phase with this lattice type (e.g. --lattice fcc)")
    g.add_argument("--element", help="element(s) for a lattice-type SPEC: Ni, or Ni,Al for ordered types")
    g.add_argument("-a", type=_positive_float, metavar="A", help="lattice parameter a in angstrom")
    g.add_argument("-c", type=_positive_float, metavar="C", help="lattice parameter c in angstrom (hexagonal, tetragonal)")
    g.add_argument("--repeat", nargs=3, metavar=("NX", "NY", "NZ"), help="diagonal supercell, e.g. --repeat 3 3 3")
    g.add_argument("--supercell", nargs=9, metavar="P", help="supercell matrix rows, 9 whole numbers")
    g.add_argument("--orient", nargs=3, metavar=("X", "Y", "Z"),
                   help="crystal directions for x, y, z, e.g. --orient [1-10] [11-2] [111]")
    g.add_argument("--max-atoms", type=float, metavar="N", help="atom cap (default 50 million)")
    g.add_argument("--quiet", action="store_true", help="no progress bars on long jobs")
    g.add_argument("--alloy", metavar="ALLOY",
                   help="an alloy on the SPEC's lattice as engineers write it, base first: Fe-18Cr-8Ni, Ni-20Cr, "
                        "Fe-0.4C-1Mn (weight percent unless --at); metals substitute, C N B O H go into holes")
    u = g.add_mutually_exclusive_group()
    u.add_argument("--wt", dest="alloy_unit", action="store_const", const="wt",
                   help="--alloy amounts are weight percent (the default)")
    u.add_argument("--at", dest="alloy_unit", action="store_const", const="at",
                   help="--alloy amounts are atom percent")
    g.add_argument("--alloy-tolerance", type=_positive_float, metavar="POINTS",
                   help="allowed deviation of each --alloy amount, in percentage points (default 5 %% of the "
                        "amount, at least 0.02)")
    g.add_argument("--block", metavar="NAME", help="data block of a CIF file that holds several structures")
    g.add_argument("--tolerance", type=_positive_float, metavar="A",
                   help="distance tolerance (A) for recognising the lattice of a CIF (default 0.01)")
    if defects:        # every SPEC command takes the same defect options
        defect_args.add_arguments(p)


def crystal_from_args(args, keep_average=False, atom_cap=None):
    """Build the crystal a command's SPEC arguments describe (defects applied).
    ``keep_average``: a CIF's partly occupied sites stay an average structure
    unless defects are asked for (which need real atoms).  ``atom_cap``:
    (cap, reason) of the output the command writes; a crystal over it is
    refused with that reason before it is built."""
    from ..errors import LimitError
    from ..progress import set_quiet, working

    if getattr(args, "quiet", False) or getattr(args, "json", False) or getattr(args, "format", None) == "json":
        set_quiet(True)
    user_cap = _cap(args.max_atoms) if getattr(args, "max_atoms", None) is not None else None
    if atom_cap is None or (user_cap is not None and user_cap <= atom_cap[0]):
        with working(f"building {args.spec}"):        # a spinner only if it takes over a second, on a terminal
            return _crystal_from_args(args, keep_average, None)
    from ..limits import max_atoms_default

    limit = user_cap if user_cap is not None else max_atoms_default()
    try:
        with working(f"building {args.spec}"):
            crystal = _crystal_from_args(args, keep_average, min(limit, atom_cap[0]))
    except LimitError as e:
        if e.count is None or e.cap != atom_cap[0] or e.count > limit:
            raise
        raise LimitError(f"the crystal would have {e.count:,} atoms; {atom_cap[1]}",
                         count=e.count, cap=atom_cap[0]) from None
    return crystal


def _crystal_from_args(args, keep_average, max_atoms):
    from ..build import build

    spec = args.spec
    low = spec.lower()
    if low.endswith(".toml"):
        from ..scene import load_crystal

        crystal = load_crystal(spec)
    else:
        if low.endswith(".cif") and not Path(spec).is_file():
            raise UserError(f"CIF file '{spec}' not found")
        kw = {}
        if args.element:
            parts = [x.strip() for x in args.element.split(",") if x.strip()]
            if len(parts) == 1:
                kw["element"] = parts[0]
            else:
                kw["elements"] = tuple(parts)
        if args.repeat:
            kw["repeat"] = _ints(args.repeat, "--repeat", "--repeat 3 3 3")
        if args.supercell:
            m = _ints(args.supercell, "--supercell", "--supercell 1 -1 0 1 1 0 0 0 1")
            kw["supercell"] = [m[0:3], m[3:6], m[6:9]]
        if args.orient:
            kw["orient"] = list(args.orient)
        if max_atoms is not None:
            kw["max_atoms"] = max_atoms
        elif args.max_atoms is not None:
            kw["max_atoms"] = _cap(args.max_atoms)
        if getattr(args, "alloy", None):
            from ..alloy import alloy_crystal

            if low.endswith(".cif"):
                raise UserError("--alloy goes with an element SPEC (e.g. Fe --phase gamma), not a CIF file")
            kw.pop("elements", None)
            crystal = alloy_crystal(spec, args.alloy, args.alloy_unit or "wt", phase=args.phase, lattice=args.lattice,
                                    a=args.a, c=args.c, seed=getattr(args, "seed", 0) or 0,
                                    site=getattr(args, "site", None), tolerance=args.alloy_tolerance, **kw)
            return defect_args.apply(crystal, args)
        if args.alloy_unit is not None or args.alloy_tolerance is not None:
            raise UserError("--wt, --at and --alloy-tolerance go with --alloy, e.g. --alloy Fe-18Cr-8Ni --wt")
        if low.endswith(".cif"):
            kw.update(block=args.block, tolerance=args.tolerance, seed=getattr(args, "seed", 0) or 0,
                      realise=not keep_average)
        elif args.block is not None or args.tolerance is not None:
            raise UserError("--block and --tolerance are for a .cif SPEC; leave them out")
        crystal = build(spec, phase=args.phase, lattice=args.lattice, a=args.a, c=args.c, **kw)
    return defect_args.apply(crystal, args)


def print_json(obj):
    sys.stdout.write(json.dumps(obj, indent=2, default=_json_default) + "\n")


def _json_default(o):
    from ..fileio import json_default

    return json_default(o)


def fmt(x, nd=4):
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.{nd}f}"
    return str(x)


def table(rows, headers):
    """Plain-text table (no colour: pipes and files read it the same)."""
    cols = [[str(h)] + [str(r[i]) for r in rows] for i, h in enumerate(headers)]
    widths = [max(len(v) for v in c) for c in cols]
    lines = ["  ".join(h.ljust(w) for h, w in zip(headers, widths)).rstrip(),
             "  ".join("-" * w for w in widths)]
    for r in rows:
        lines.append("  ".join(str(v).ljust(w) for v, w in zip(r, widths)).rstrip())
    return "\n".join(lines)


FORMATS = ("table", "csv", "md", "json")


def emit_table(rows, headers, fmt="table"):
    """Print rows (dicts keyed by ``headers``) as a plain table, CSV (RFC
    4180, through the csv module), a Markdown table, or JSON."""
    if fmt == "json":
        print_json(rows)
        return
    if fmt == "csv":
        import csv

        w = csv.writer(sys.stdout, lineterminator="\n")
        w.writerow(headers)
        for r in rows:
            w.writerow(["" if r.get(h) is None else r.get(h) for h in headers])
        return
    def cell(v):
        if v is None:
            return ""
        if isinstance(v, float):
            return f"{v:.6g}"
        return str(v)

    cells = [[cell(r.get(h)) for h in headers] for r in rows]
    if fmt == "md":
        esc = [[c.replace("|", "\\|") for c in row] for row in cells]
        sys.stdout.write("| " + " | ".join(headers) + " |\n")
        sys.stdout.write("|" + "|".join("---" for _ in headers) + "|\n")
        for row in esc:
            sys.stdout.write("| " + " | ".join(row) + " |\n")
        return
    sys.stdout.write(table(cells, headers) + "\n")


def _cap(value):
    from ..limits import cap_value

    return cap_value(value)
