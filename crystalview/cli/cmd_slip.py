"""crystalview slip SPEC --axis UVW: Schmid factors of every slip system."""
from __future__ import annotations

import sys

from ..errors import UserError
from .common import FORMATS, add_spec_arguments, crystal_from_args, print_json, table


def register(sub):
    p = sub.add_parser(
        "slip", help="slip systems and Schmid factors for a uniaxial load",
        description="Schmid factor m = |cos(phi) cos(lambda)| of every slip system for a uniaxial load "
                    "along an axis, highest first; with --stress the resolved shear stress, with --crss the "
                    "yield stress Schmid's law predicts (CRSS / m).")
    add_spec_arguments(p)
    p.add_argument("--axis", required=True, metavar="UVW",
                   help="loading axis as a direction, e.g. [001], 011 or '1 2 3'; four-index for hexagonal "
                        "crystals, e.g. [0001] or [2-1-13]")
    p.add_argument("--family", action="append", default=None, metavar="NAME",
                   help="only these slip families; repeatable or comma-separated, e.g. --family basal "
                        "--family prismatic, --family {112}<111>, --family 'pyramidal <c+a>' "
                        "(default: the lattice's usual families)")
    p.add_argument("--stress", metavar="MPA", help="applied uniaxial stress in MPa (negative for compression)")
    p.add_argument("--crss", action="append", default=None, metavar="MPA|FAMILY=MPA",
                   help="critical resolved shear stress in MPa, for every family or per family "
                        "(repeatable), e.g. --crss 0.5 or --crss basal=0.5 --crss prismatic=40")
    p.add_argument("--json", action="store_true", help="print JSON only: the load axis, every system, the Taylor factor and (with a stress) the caution")
    p.add_argument("--format", choices=FORMATS, help="table (default), csv or md (Markdown): one row per system; json: as --json")
    p.set_defaults(func=run)


def _crss_arg(values):
    if not values:
        return None
    plain = [v for v in values if "=" not in v]
    named = [v for v in values if "=" in v]
    if plain and (named or len(plain) > 1):
        raise UserError("give --crss once as a number for every family, or as FAMILY=MPA per family "
                        "(e.g. --crss basal=0.5 --crss prismatic=40), not both")
    if plain:
        return plain[0]
    out = {}
    for v in named:
        k, _, x = v.rpartition("=")
        if not k.strip():
            raise UserError(f"--crss '{v}' needs a family before '=', e.g. --crss basal=0.5")
        out[k.strip()] = x
    return out


def run(args):
    from ..about import CAUTION
    from ..analysis.slip import (FAMILIES, first_to_yield, independent_slip_systems, load_axis,
                                 schmid_factors, taylor_factor)

    c = crystal_from_args(args)
    crss = _crss_arg(args.crss)
    res = schmid_factors(c, args.axis, families=args.family, stress=args.stress, crss=crss)
    if args.json or args.format == "json":
        from ..analysis.slip import slip_report

        print_json(slip_report(c, args.axis, families=args.family, stress=args.stress, crss=crss))
        return 0
    if args.format in ("csv", "md"):
        from .common import emit_table

        rows = [r.as_dict() for r in res]
        cols = list(rows[0]) if rows else []
        emit_table(rows, cols, args.format)
        if args.stress is not None or crss:
            sys.stderr.write(CAUTION + "\n")
        return 0
    _t, axis_label = load_axis(c, args.axis)
    fams = sorted({r.family for r in res}, key=list(FAMILIES).index)
    lat = c.lattice
    name = c.metadata.get("name") or "/".join(lat.elements)
    lines = [f"{name}: {lat.title}, uniaxial load along {axis_label}; {len(res)} slip systems"]

    lines.append("  families: " + ", ".join(
        f"{f} {FAMILIES[f].notation}" if f != FAMILIES[f].notation else f for f in fams))
    has_s = res and res[0].resolved_shear_stress_MPa is not None
    has_y = any(r.crss_MPa is not None for r in res)
    headers = ["", "family", "plane", "direction", "m", "phi deg", "lambda deg", "Burgers vector"]
    if has_s:
        headers.append("tau MPa")
    if has_y:
        headers += ["CRSS MPa", "yield MPa"]
    rows = []
    for r in res:
        row = ["*" if r.most_favoured else "", r.family, r.plane, r.direction, f"{r.schmid_factor:.4f}",
               f"{r.phi_deg:.1f}", f"{r.lambda_deg:.1f}",
               f"{r.burgers_vector} ({r.burgers_length_A:.3f} A)"]
        if has_s:
            row.append(f"{r.resolved_shear_stress_MPa:.4g}")
        if has_y:
            row.append("-" if r.crss_MPa is None else f"{r.crss_MPa:g}")
            row.append("-" if r.crss_MPa is None else
                       ("no slip (m = 0)" if r.yield_stress_MPa is None else f"{r.yield_stress_MPa:.4g}"))
        rows.append(row)
    lines.append("")
    lines.append(table(rows, headers))
    lines.append("")
    nmax = sum(r.most_favoured for r in res)
    if nmax:
        lines.append(f"highest Schmid factor {res[0].schmid_factor:.4f} on {nmax} system"
                     f"{'s' if nmax != 1 else ''} (marked *)")
    else:
        lines.append("every Schmid factor is 0: no resolved shear stress on these systems along this axis")
    if len({r.family for r in res}) > 1 and not has_y:
        lines.append("note: the families have different critical resolved shear stresses; this ranking by "
                     f"Schmid factor alone ignores them (give --crss per family, e.g. --crss '{res[0].family}=10')")
    nind = independent_slip_systems(c, fams)
    lines.append(f"independent slip systems: {nind} (a grain needs 5 for any shape change, von Mises)")
    tf = taylor_factor(c, fams)
    if tf["value"] is not None:
        lines.append(f"Taylor factor, random polycrystal: M = {tf['value']:.2f} ({tf['source']})")
    else:
        lines.append(f"Taylor factor: {tf['source']}")
    predicted = False
    if has_y:
        first = first_to_yield(res)
        if first is not None:
            predicted = True
            lines.append(f"single crystal, Schmid's law: yields at {first.yield_stress_MPa:.4g} MPa on "
                         f"{first.family} {first.plane}{first.direction} (CRSS {first.crss_MPa:g} / m "
                         f"{first.schmid_factor:.4f})")
            crss_vals = {r.crss_MPa for r in res if r.crss_MPa is not None}
            if tf["value"] is not None and len(crss_vals) == 1 and set(fams) == {r.family for r in res
                                                                                  if r.crss_MPa is not None}:
                lines.append(f"random polycrystal estimate: M x CRSS = {tf['value'] * crss_vals.pop():.4g} MPa")
        else:
            lines.append("no system with a CRSS has a resolved shear stress along this axis: Schmid's law "
                         "predicts no slip on them")
    if has_s:
        predicted = True
    print("\n".join(lines))
    if predicted:
        print()
        print(CAUTION)
    return 0
