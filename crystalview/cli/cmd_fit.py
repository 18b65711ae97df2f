"""crystalview fit SOLUTE SPEC: interstitial hole fit or substitutional solid-solution rules."""
from __future__ import annotations

import copy

from ..errors import UserError
from .common import FORMATS, add_spec_arguments, crystal_from_args, emit_table, print_json, table


def register(sub):
    p = sub.add_parser("fit", help="will a solute fit: hole fit (C, N, O, H, B) or solid-solution rules (metals)",
                       description="Interstitial solutes: hole radius, misfit and strain in each site kind.  "
                                   "Metals: size, structure, electronegativity and valence rules with a verdict.")
    p.add_argument("solute", metavar="SOLUTE",
                   help="solute element: C, N, O, H, B (interstitial) or a metal (Ni, Cr, ...); a comma list "
                        "(C,N,B,Cr,Mo) screens each against each host")
    add_spec_arguments(p)
    p.add_argument("--format", choices=FORMATS, help="table (default), csv, md (Markdown) or json; a comma list of "
                   "solutes or hosts (SPEC Fe,Fe:gamma,Ni; ELEMENT:PHASE) gives one row per pair")
    # --max-atoms (from the SPEC arguments) also caps the hole-by-hole analysis of a defected or unknown
    # structure (default 300,000 atoms)
    p.add_argument("--json", action="store_true", help="print JSON only")
    p.set_defaults(func=run)


def run(args):
    from ..analysis.fit import fit

    if "," in args.solute or "," in args.spec or args.format not in (None, "json"):
        return run_table(args)
    if args.format == "json":
        args.json = True
    c = crystal_from_args(args)
    cap = None if getattr(args, "max_atoms", None) is None else _cap(args.max_atoms)
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


TABLE_COLUMNS = ["solute", "host", "structure", "mode", "site or rule", "hole r (A)", "solute r (A)", "strain %",
                 "size diff %", "structure rule", "EN diff", "valence", "verdict"]


def _tokens(text, what):
    items = [t.strip() for t in str(text).split(",")]
    if not all(items):
        raise UserError(f"{what} '{text}' has an empty item; write a comma list such as C,N,B,Cr")
    return items


def pair_row(rep, host_label):
    """One screening-table row (dict keyed by TABLE_COLUMNS) of a fit report."""
    h = rep["host"]
    row = dict.fromkeys(TABLE_COLUMNS, "")
    row.update({"solute": rep["solute"], "host": host_label, "structure": h["lattice"] or h["structure"],
                "mode": rep["mode"]})
    if rep["mode"] == "interstitial":
        site = rep.get("preferred_site") or rep["largest_hole"]
        srow = next((x for x in rep["sites"] if x["label"] == site), rep["sites"][0])
        r = srow.get("hole_radius_A", srow.get("hole_radius_median_A"))
        strain = srow.get("linear_strain", srow.get("linear_strain_max"))
        row.update({"site or rule": site + (" (preferred)" if rep.get("preferred_site") else " (largest hole)"),
                    "hole r (A)": round(r, 4), "solute r (A)": round(rep["solute_radius_A"], 3),
                    "strain %": round(100 * strain, 1),
                    "verdict": (f"{rep['preferred_site']} site" if rep.get("preferred_site")
                                else "hole sizes only (hydrogen)")})
    else:
        crit = {c["rule"]: c for c in rep["criteria"]}
        row.update({"site or rule": "substitutional", "size diff %": round(crit["atomic size"]["value"], 1),
                    "structure rule": "pass" if crit["crystal structure"]["pass"] else "FAIL",
                    "EN diff": round(crit["electronegativity"]["value"], 2),
                    "valence": f"{crit['valence']['solute']} vs {crit['valence']['host']}",
                    "verdict": rep["verdict_code"] + (" (known case)" if rep.get("known_case") else "")})
    return row


def run_table(args):
    from ..analysis.fit import fit
    from ..elements import _all_symbols
    from ..errors import suggest

    solutes = _tokens(args.solute, "SOLUTE")
    for s in solutes:
        canon = s[:1].upper() + s[1:].lower()
        if canon not in _all_symbols():
            raise UserError(f"solute '{s}' is not a chemical element symbol{suggest(s, _all_symbols())}")
    hosts = _tokens(args.spec, "SPEC")
    rows, reports = [], []
    cap = None if getattr(args, "max_atoms", None) is None else _cap(args.max_atoms)
    for token in hosts:
        a = copy.copy(args)
        if ":" in token and not token.lower().endswith(".cif"):
            a.spec, a.phase = (x.strip() for x in token.split(":", 1))
        else:
            a.spec = token
        c = crystal_from_args(a)
        for s in solutes:
            rep = fit(s, c, max_atoms=cap)
            rows.append(pair_row(rep, token))
            reports.append(dict(rep))
    fmt = "json" if args.json else (args.format or "table")
    if fmt == "json":
        print_json({"rows": rows, "reports": reports})
        return 0
    emit_table(rows, TABLE_COLUMNS, fmt)
    if fmt == "table":
        print("")
        print(reports[0]["caution"])
    elif fmt == "csv":
        import sys

        sys.stderr.write(reports[0]["caution"] + "\n")     # beside the data, not in it
    elif fmt == "md":
        print("")
        print(f"*{reports[0]['caution']}*")
    return 0


def _cap(value):
    from ..limits import cap_value

    return cap_value(value)
