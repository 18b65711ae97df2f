"""crystalview info SPEC: structure, parameters, CN, packing, density."""
from __future__ import annotations

from .common import add_spec_arguments, crystal_from_args, fmt, print_json


def register(sub):
    p = sub.add_parser("info", help="structure, parameters, coordination, packing, density",
                       description="The numbers an engineer quotes about a crystal.")
    add_spec_arguments(p)
    p.add_argument("--plane", action="append", default=[], metavar="(hkl)",
                   help="report d-spacing and planar density of a plane; repeatable, e.g. --plane (111)")
    p.add_argument("--direction", action="append", default=[], metavar="[uvw]",
                   help="report the linear density along a direction; repeatable, e.g. --direction [110]")
    p.add_argument("--angle", nargs=2, action="append", default=[], metavar=("[uvw]", "[uvw]"),
                   help="angle between two directions; repeatable")
    p.add_argument("--part-volume", type=float, metavar="MM3", help="count the atoms in a part of this volume (mm^3)")
    p.add_argument("--symmetry", action="store_true", help="also find the space group with spglib")
    p.add_argument("--json", action="store_true", help="print JSON only")
    p.set_defaults(func=run)


def run(args):
    from ..analysis.properties import summary, symmetry

    c = crystal_from_args(args)
    s = summary(c, part_volume_mm3=args.part_volume, planes=args.plane, directions=args.direction,
                angles=[tuple(x) for x in args.angle])
    if args.symmetry:
        sym, num = symmetry(c)
        s["spglib_space_group"] = {"symbol": sym, "number": num}
    if args.json:
        print_json(s)
        return 0
    print(render_text(s))
    return 0


def recognition_lines(s):
    """The lines saying how a crystal read from a file was recognised and
    which radii it uses (empty for the built-in structures)."""
    out = []
    rec = s.get("recognition")
    if rec:
        if rec["lattice"] != "other":
            occ = s.get("sublattice_occupation")
            on = f"; sublattices: {', '.join(occ)}" if occ and any(not x.isalpha() for x in occ) else ""
            out.append(f"  lattice: recognised as {rec['lattice']} (space group {rec['space_group']}, atoms within "
                       f"{rec['deviation_A']:.3f} A of the ideal positions, tolerance {rec['tolerance_A']:g} A){on}"
                       + (f"; {rec['note']}" if rec.get("note") else ""))
        else:
            out.append(f"  lattice: not one of the built-in types ({rec.get('reason', '')}); holes by the generic "
                       f"void analysis, no named sites or slip table")
    radii = s.get("radii")
    if radii:
        kinds = sorted({r["kind"] for r in radii.values()})
        srcs = sorted({r["source"] for r in radii.values()})
        out.append(f"  radii: {'; '.join(kinds)} ({'; '.join(srcs)})")
    return out


def render_text(s):
    lines = []
    title = s["name"] or "crystal"
    if s.get("phase"):
        title += f" ({s['phase']})"
    lines.append(f"{title}: {s['structure']}" + (f", space group {s['space_group']}" if s["space_group"] else ""))
    par = f"  a = {fmt(s['a_A'])} A"
    if s.get("c_A"):
        par += f", c = {fmt(s['c_A'])} A, c/a = {fmt(s['c_over_a'], 3)}"
    if s.get("temperature_K"):
        par += f"  (at {s['temperature_K']:g} K)"
    lines.append(par)
    if s.get("parameter_source"):
        lines.append(f"  source: {s['parameter_source']}")
    if s.get("note"):
        lines.append(f"  note: {s['note']}")
    lines += recognition_lines(s)
    if s.get("alloy"):
        from ..alloy import report_lines

        lines += ["  " + x for x in report_lines(s["alloy"])]
    lines.append("")
    differs = bool(s["defects"])
    shells = " + ".join(f"{c['count']:g} at {c['distance_A']:.4f} A" for c in s["coordination_shells"])
    rows = [
        ("atoms per conventional cell", s["atoms_per_conventional_cell"]),
        ("nearest-neighbour distance", f"{fmt(s['nearest_neighbour_distance_A'])} A"),
        ("coordination number", f"{s['coordination_number']:g}  ({shells})" if s["coordination_number"] is not None
         else f"not one number for a structure of several kinds of site (first shells: {shells})"),
        ("hard-sphere radius", ", ".join(f"{k} {v:.4f} A" for k, v in s["hard_sphere_radius_A"].items())),
        ("atomic packing factor", fmt(s["packing_factor"], 4) + ("  (perfect lattice)" if differs else "")),
        ("density", f"{s['density_g_cm3']:.3f} g/cm^3" + ("  (this crystal, as built)" if differs else "")),
        ("atoms per mm^3", f"{s['atoms_per_mm3']:.4g}" + ("  (this crystal, as built)" if differs else "")),
    ]
    if "atoms_in_part" in s:
        rows.append((f"atoms in {s['part_volume_mm3']:g} mm^3", f"{s['atoms_in_part']:.4g}"))
    rows.append(("this crystal", f"{s['atoms']} atoms, cell "
                 + " x ".join(f"{x:.4f}" for x in s["cell_lengths_A"]) + " A"
                 + (f", repeat {' x '.join(map(str, s['repeat']))}" if s.get("repeat") else "")
                 + (f", x y z = {' '.join(s['orient'])}" if s.get("orient") else "")))
    if len(s["composition"]) > 1 or s["defects"] or s.get("formula_average"):
        comp = ", ".join(f"{k} {v:.4g}" if isinstance(v, float) else f"{k} {v}"
                         for k, v in s["composition"].items())
        if s.get("formula_average"):
            comp += f"  (from the occupancies: {s['formula_average']})"
        rows.append(("composition", comp))
    if s.get("realisation"):
        r = s["realisation"]
        real = ", ".join(f"{k} {v}" for k, v in s["realised_composition"].items())
        rows.append(("realised", f"{r['shared_sites']} shared or partly occupied sites drawn with seed "
                                 f"{r['seed']}: {real} (--seed N for another draw)"))
        if s.get("realisation_note"):
            rows.append(("", s["realisation_note"]))
    for d in s["defects"]:
        rows.append(("defect", ", ".join(f"{k}={v}" for k, v in d.items() if not isinstance(v, (list, dict)))))
    if "spglib_space_group" in s:
        g = s["spglib_space_group"]
        rows.append(("space group (spglib)", f"{g['symbol']} ({g['number']})"))
    w = max(len(r[0]) for r in rows)
    lines += [f"  {k.ljust(w)}  {v}" for k, v in rows]
    for p in s.get("planes", []):
        layers = " / ".join(f"{x:.4f}" for x in p["atomic_layer_spacings_A"])
        lines.append(f"  plane {p['plane']}: d_hkl = {p['d_spacing_A']:.4f} A (lattice formula), atom layers "
                     f"{layers} A apart, planar density {p['planar_density_per_nm2']:.3f} atoms/nm^2")
    for d in s.get("directions", []):
        lines.append(f"  direction {d['direction']}: repeats every {d['repeat_length_A']:.4f} A, linear density "
                     f"{d['linear_density_per_nm']:.3f} atoms/nm")
    for a in s.get("angles", []):
        lines.append(f"  angle {a['from']} to {a['to']}: {a['angle_deg']:.2f} deg")
    return "\n".join(lines)
