"""crystalview sites SPEC: interstitial site kinds and hole radii."""
from __future__ import annotations

from .common import FORMATS, add_spec_arguments, crystal_from_args, emit_table, print_json, table


def register(sub):
    p = sub.add_parser("sites", help="interstitial site kinds, hole radii and r/R",
                       description="The interstitial holes of a crystal: kind, free radius, ratio r/R to the host "
                                   "radius, count per conventional cell and coordinates.  Defected crystals report "
                                   "the holes actually present (with the spread of radii).")
    add_spec_arguments(p)
    p.add_argument("--voids", action="store_true",
                   help="also run the generic void analysis (holes found from the atoms, channel bottlenecks); "
                        "capped at 300,000 atoms unless --max-atoms says otherwise")
    p.add_argument("--json", action="store_true", help="print JSON only")
    p.add_argument("--format", choices=FORMATS, help="table (default), csv, md (Markdown) or json: one row per site kind")
    p.set_defaults(func=run)


def _frac_text(v):
    from fractions import Fraction

    fr = Fraction(float(v)).limit_denominator(48)
    if abs(float(fr) - float(v)) < 1e-6:
        return str(fr)
    return f"{float(v):.4f}"


def coords_text(frac):
    return " ".join("(" + ",".join(_frac_text(x) for x in f) + ")" for f in frac)


def _why_measured(c):
    lat = c.lattice
    if lat is None or lat.prototype == "cif":
        return " (no built-in lattice type: holes found by the generic void analysis)"
    if c.metadata.get("realisation") and not c.metadata.get("defects"):
        return (f" (shared sites drawn with seed {c.metadata['realisation']['seed']}: radii measured against the "
                f"atoms present)")
    return " (defected: radii measured against the atoms present)"


def run(args):
    from ..analysis.sites import sites_report

    c = crystal_from_args(args)
    cap = None if getattr(args, "max_atoms", None) is None else _cap(args.max_atoms)
    if args.voids:
        from ..analysis.voids import check_void_size

        check_void_size(c, cap)              # refuse before any hole is computed
    out = sites_report(c, cap)
    head = out
    rows, perfect = out["sites"], out["perfect"]
    if args.voids:
        from ..analysis.voids import find_voids

        v = find_voids(c, max_atoms=cap)
        out["voids"] = {"method": v.method, "count": len(v), "channels": int(len(v.channels)),
                        "by_kind": v.summary()}
    if args.json or args.format == "json":
        print_json(out)
        return 0
    if args.format in ("csv", "md"):
        cols = ["kind", "label", "radius_A", "ratio", "radius_min_A", "radius_max_A", "per_cell", "per_atom",
                "in_crystal", "coordination", "bounded_by"]
        emit_table([{k: r.get(k) for k in cols} for r in rows], cols, args.format)
        return 0
    title = head["name"] + (f" ({head['phase']})" if head["phase"] else "") + f": {head['structure']}"
    par = f"a = {head['a_A']:.4f} A" if head["a_A"] else ""
    if head["c_A"]:
        par += f", c = {head['c_A']:.4f} A"
    print(title + (f", {par}" if par else ""))
    print("host hard-sphere radius R: " + ", ".join(f"{k} {v:.4f} A" for k, v in head["host_radius_A"].items())
          + f"; {len(c)} atoms" + ("" if perfect else _why_measured(c)))
    print()
    if perfect and rows and "radius_min_A" not in rows[0]:          # the named sites of a perfect lattice
        trows = [(r["label"], f"{r['radius_A']:.4f}", f"{r['ratio']:.3f}", r["per_cell"], f"{r['per_atom']:g}",
                  r["in_crystal"], r["bounded_by"]) for r in rows]
        print(table(trows, ["site", "r (A)", "r/R", "per cell", "per atom", "in crystal", "bounded by"]))
        print()
        print("coordinates (fractions of the conventional cell):")
        for r in rows:
            print(f"  {r['label']}: {coords_text(r['frac_conventional'])}")
    else:
        trows = [(r["label"], f"{r['radius_min_A']:.4f}", f"{r['radius_median_A']:.4f}", f"{r['radius_max_A']:.4f}",
                  f"{r['ratio']:.3f}", r["per_cell"] or "-", r["in_crystal"]) for r in rows]
        print(table(trows, ["site", "r min (A)", "r median", "r max", "r/R median", "per cell", "in crystal"]))
    notes = [(r["label"], r["note"]) for r in rows if r["note"]]
    if notes:
        print()
        if len(notes) == len(rows) > 1 and len({n for _, n in notes}) == 1:
            print(f"  note: {notes[0][1]}")                  # one note for every row: said once
        else:
            for lab, n in dict(notes).items():
                print(f"  note, {lab}: {n}")
    if args.voids:
        print()
        print(f"void analysis: {out['voids']['count']} holes, {out['voids']['channels']} channels ({out['voids']['method']})")
        vrows = [(k, r["count"], f"{r['radius_min_A']:.4f}", f"{r['radius_max_A']:.4f}", f"{r['ratio_median']:.3f}",
                  f"{r.get('bottleneck_min_A', float('nan')):.4f}")
                 for k, r in out["voids"]["by_kind"].items()]
        print(table(vrows, ["hole", "count", "r min (A)", "r max (A)", "r/R", "narrowest channel (A)"]))
    return 0


def _cap(value):
    from ..limits import cap_value

    return cap_value(value)
