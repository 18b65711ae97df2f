"""crystalview fit SOLUTE SPEC: interstitial hole fit or substitutional solid-solution rules."""
from __future__ import annotations

from .common import add_spec_arguments, crystal_from_args, print_json, table


def register(sub):
    p = sub.add_parser("fit", help="will a solute fit: hole fit (C, N, O, H, B) or solid-solution rules (metals)",
                       description="Interstitial solutes: hole radius, misfit and strain in each site kind.  "
                                   "Metals: size, structure, electronegativity and valence rules with a verdict.")
    p.add_argument("solute", metavar="SOLUTE", help="solute element: C, N, O, H, B (interstitial) or a metal (Ni, Cr, ...)")
    add_spec_arguments(p)
    # --max-atoms (from the SPEC arguments) also caps the hole-by-hole analysis of a defected or unknown
    # structure (default 300,000 atoms)
    p.add_argument("--json", action="store_true", help="print JSON only")
    p.set_defaults(func=run)


def run(args):
    from ..analysis.fit import fit

    c = crystal_from_args(args)
    cap = None if getattr(args, "max_atoms", None) is None else int(args.max_atoms)
    rep = fit(args.solute, c, max_atoms=cap)
    if args.json:
        print_json(dict(rep))
        return 0
    print(render_text(rep))
    return 0


def _host_title(h):
    t = h["name"] + (f" ({h['phase']})" if h.get("phase") else "") + f", {h['structure']}"
    if h.get("a_A"):
        t += f", a = {h['a_A']:.4f} A"
    if h.get("c_A"):
        t += f", c = {h['c_A']:.4f} A"
    return t


def _wrap(text, width=100):
    import textwrap

    return textwrap.wrap(text, width=width, initial_indent="  ", subsequent_indent="    ")


def render_text(rep):
    lines = []
    h = rep["host"]
    if rep["mode"] == "interstitial":
        lines.append(f"{rep['solute']} in {_host_title(h)}")
        lines.append(f"  solute radius {rep['solute_radius_A']:.3f} A ({rep['solute_radius_source']})")
        lines.append(f"  host radius R {rep['host_radius_A']:.4f} A; strain = {rep['strain_definition']}")
        lines.append("")
        if rep["perfect"]:
            rows = [(s["label"], f"{s['hole_radius_A']:.4f}", f"{s['hole_ratio_r_over_R']:.3f}",
                     "-" if s["misfit_ratio"] is None else f"{s['misfit_ratio']:.2f}",
                     f"{s['linear_strain'] * 100:+.1f} %", f"{s['sites_per_host_atom']:g}") for s in rep["sites"]]
            lines.append(table(rows, ["site", "hole r (A)", "r/R", "r_solute/r_hole", "strain", "sites per host atom"]))
        else:
            rows = [(s["label"], f"{s['hole_radius_min_A']:.4f}", f"{s['hole_radius_median_A']:.4f}",
                     f"{s['hole_radius_max_A']:.4f}",
                     "-" if s["misfit_ratio"] is None else f"{s['misfit_ratio']:.2f}",
                     f"{s['linear_strain_min'] * 100:+.1f} .. {s['linear_strain_max'] * 100:+.1f} %",
                     f"{s['sites_per_host_atom']:.3g}") for s in rep["sites"]]
            lines.append(table(rows, ["site", "hole r min (A)", "median", "max", "misfit (median)", "strain range",
                                      "sites per host atom"]))
        lines.append("")
        if rep.get("preferred_site") is None:
            lines.append(f"  largest hole: {rep['largest_hole']} "
                         f"(geometry only: no preferred site is given for {rep['solute']})")
            lines.extend(_wrap(f"hydrogen note: {rep['hydrogen_note']}"))
        else:
            lines.append(f"  largest hole: {rep['largest_hole']}")
            lines.extend(_wrap(f"preferred site: {rep['preferred_site']} ({rep['preferred_reason']})"))
        for n in rep["notes"]:
            lines.append(f"  note: {n}")
    else:
        lines.append(f"{rep['solute']} substituting for {rep['host_element']} in {_host_title(h)}")
        lines.append("")
        rows = [(c["rule"], c["text"], c["limit"],
                 ("pass" if c["pass"] else "FAIL") + (" (advisory)" if c.get("advisory") else ""))
                for c in rep["criteria"]]
        lines.append(table(rows, ["rule", "numbers", "criterion", "result"]))
        lines.append("")
        for c in rep["criteria"]:
            if c.get("detail"):
                tag = c["rule"] + (" (advisory, not counted in the verdict)" if c.get("advisory") else "")
                lines.extend(_wrap(f"{tag}: {c['detail']}"))
        lines.extend(_wrap(f"verdict: {rep['verdict']}"))
        lines.append(f"  rules: {rep['rules_source']}")
        srcs = sorted({c['source'] for c in rep['criteria'] if c['source'] != 'element phase data'})
        for s in srcs:
            lines.append(f"  data: {s}")
    lines.append("")
    lines.append(rep["caution"])
    return "\n".join(lines)
