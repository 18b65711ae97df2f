"""Will a solute fit?  Interstitial hole fit and substitutional (Hume-Rothery) rules.

Interstitial solutes (C, N, O, H, B): for each site kind of the host, the
hole's free radius r_h, the solute radius r_s (with its source), the misfit
ratio r_s / r_h and the linear strain it implies,

    strain = (r_s - r_h) / (R + r_h),

the fractional stretch of the distance from the site centre to its nearest
host atom (radius R) needed for the solute to touch that atom without
overlapping it; the number of such sites per host atom; the preferred site.

Substitutional solutes (metals): the Hume-Rothery rules (Callister &
Rethwisch, ch. 4): atomic size difference within 15 %, the same crystal
structure, similar electronegativity (within 0.4 on the Pauling scale, the
half-width of the Darken-Gurry map; common practice) and, other things being
equal, a solute of equal or higher valence.  Each criterion is shown with its
numbers and pass/fail, with an overall verdict.
"""
from __future__ import annotations

import numpy as np

from .. import elements as E
from ..errors import UserError

SIZE_LIMIT = 0.15          # source: Hume-Rothery size rule as given by Callister & Rethwisch
EN_LIMIT = 0.4             # common practice: Darken-Gurry ellipse half-width in electronegativity
RULES_SOURCE = ("Hume-Rothery rules as stated in Callister & Rethwisch, Materials Science and Engineering: "
                "An Introduction, ch. 4 (solid solutions), from memory; electronegativity window 0.4 from the "
                "Darken-Gurry map (common practice)")

#: Preferred sites in body-centred cubic hosts, where the geometry alone
#: (the larger tetrahedral hole) is not what is observed.
BCC_OCTAHEDRAL_SOLUTES = {"C", "N", "O", "B"}
BCC_NOTE = ("in body-centred cubic hosts C, N, O and B sit in the octahedral site although the tetrahedral hole is "
            "larger: only the two nearest neighbours along the cube edge have to move apart (a tetragonal "
            "distortion), which costs less strain energy (Honeycombe & Bhadeshia, Steels, ch. 1, from memory)")


class FitReport(dict):
    """A dict with attribute access (report.verdict, report.sites, ...)."""

    def __getattr__(self, name):
        try:
            return self[name]
        except KeyError:
            raise AttributeError(name) from None


def _caution():
    from .. import CAUTION

    return CAUTION


def fit(solute, crystal, phase=None):
    """Fit report of ``solute`` (symbol) in ``crystal`` (a Crystal or a spec
    such as "Fe"; ``phase`` picks a named phase when a spec is given)."""
    if isinstance(crystal, str):
        from ..build import build

        crystal = build(crystal, phase=phase)
    sym = E._canon(solute)
    E.atomic_number(sym)          # not an element at all -> UserError
    if sym in E.interstitial_symbols():
        return _interstitial(sym, crystal)
    if sym in E.metal_symbols():
        return _substitutional(sym, crystal)
    raise UserError(f"no radius data for solute '{solute}'; interstitial solutes: {', '.join(E.interstitial_symbols())}; "
                    f"metals: {', '.join(E.metal_symbols())}")


def _host_description(crystal):
    lat = crystal.lattice
    meta = crystal.metadata
    name = meta.get("name") or "/".join(crystal.elements)
    return {
        "name": name, "phase": meta.get("phase"),
        "lattice": lat.prototype if lat is not None else None,
        "structure": lat.title if lat is not None else "unknown",
        "a_A": meta.get("a"), "c_A": meta.get("c"), "atoms": len(crystal),
        "defects": [d.get("kind") for d in (meta.get("defects") or [])],
    }


def _interstitial(sym, crystal):
    from .sites import is_perfect, site_table

    sol = E.interstitial(sym)
    rs = sol.radius
    rows = site_table(crystal)
    rows = [r for r in rows if r["kind"] != "vacancy"] + [r for r in rows if r["kind"] == "vacancy"]
    if not rows:
        raise UserError("the host has no interstitial holes to fit a solute into")
    perfect = is_perfect(crystal)
    hosts = [s for s in set(crystal.lattice.basis_symbols)] if crystal.lattice is not None else crystal.elements
    R = float(np.mean([crystal.radius_of(s) for s in hosts]))
    n_host = int(np.sum(crystal.roles == 0)) or len(crystal)
    out_rows = []
    for r in rows:
        rh = r["radius_A"]
        row = {
            "kind": r["kind"], "label": r["label"], "hole_radius_A": rh, "hole_ratio_r_over_R": r["ratio"],
            "solute_radius_A": rs,
            "misfit_ratio": (rs / rh) if rh > 0 else None,
            "linear_strain": (rs - rh) / (R + rh),
            "sites_per_host_atom": r["per_atom"] if perfect else r["in_crystal"] / n_host,
            "sites_per_cell": r["per_cell"], "fits_without_strain": rh >= rs,
            "bounded_by": r["bounded_by"], "note": r["note"],
        }
        if not perfect:
            row.update(hole_radius_min_A=r["radius_min_A"], hole_radius_median_A=r["radius_median_A"],
                       hole_radius_max_A=r["radius_max_A"], sites_in_crystal=r["in_crystal"],
                       linear_strain_min=(rs - r["radius_max_A"]) / (R + r["radius_max_A"]),
                       linear_strain_max=(rs - r["radius_min_A"]) / (R + r["radius_min_A"]))
        out_rows.append(row)
    named = [r for r in out_rows if r["kind"] != "vacancy"] or out_rows
    largest = max(named, key=lambda r: r["hole_radius_A"])
    preferred, reason = largest["label"], "the largest hole (smallest misfit)"
    lattice = crystal.lattice.prototype if crystal.lattice is not None else None
    if lattice in ("bcc", "B2") and sym in BCC_OCTAHEDRAL_SOLUTES:
        octs = [r for r in named if r["kind"] == "octahedral"]
        if octs:
            preferred, reason = octs[0]["label"], BCC_NOTE
    vac = [r for r in out_rows if r["kind"] == "vacancy"]
    notes = []
    if vac:
        notes.append(f"{vac[0]['sites_in_crystal']} vacancy hole(s) of radius up to {vac[0]['hole_radius_max_A']:.3f} A "
                     f"can trap the solute")
    return FitReport(
        mode="interstitial", solute=sym, solute_radius_A=rs, solute_radius_source=sol.source,
        host=_host_description(crystal), host_radius_A=R, perfect=perfect,
        strain_definition="(r_solute - r_hole) / (R_host + r_hole): stretch of the site-to-neighbour distance",
        sites=out_rows, largest_hole=largest["label"], preferred_site=preferred, preferred_reason=reason,
        notes=notes, caution=_caution(),
    )


def _substitutional(sym, crystal):
    counts = {s: n for s, n in crystal.counts().items()}
    if crystal.lattice is not None and crystal.lattice.elements:
        host = crystal.lattice.elements[0]
    else:
        host = max(counts, key=counts.get)
    if host not in E.metal_symbols():
        raise UserError(f"no metallic radius / electronegativity data for the host {host}; "
                        f"hosts with data: {', '.join(E.metal_symbols())}")
    h = E.element(host)
    s = E.element(sym)
    for el in (h, s):
        missing = [f for f, v in (("metallic radius", el.metallic_radius), ("electronegativity", el.electronegativity),
                                  ("valence", el.valence)) if v is None]
        if missing:
            raise UserError(f"{el.symbol} has no {', '.join(missing)} in the data file; cannot apply the solid-solution rules")
    size = abs(s.metallic_radius - h.metallic_radius) / h.metallic_radius
    host_lat = crystal.lattice.prototype if crystal.lattice is not None else None
    sol_lat = s.phase.lattice if s.reference_phase else None
    den = abs(s.electronegativity - h.electronegativity)
    criteria = [
        {"rule": "atomic size", "host": h.metallic_radius, "solute": s.metallic_radius, "unit": "A",
         "value": size * 100.0, "limit": f"<= {SIZE_LIMIT * 100:.0f} %", "pass": size <= SIZE_LIMIT + 1e-12,
         "text": f"radius {s.metallic_radius:.3f} vs {h.metallic_radius:.3f} A: {size * 100:.1f} % difference",
         "source": h.sources["metallic_radius"]},
        {"rule": "crystal structure", "host": host_lat, "solute": sol_lat, "unit": "", "value": None,
         "limit": "same", "pass": host_lat == sol_lat and host_lat is not None,
         "text": f"{sym} ({s.reference_phase}) is {sol_lat}, host is {host_lat}", "source": "element phase data"},
        {"rule": "electronegativity", "host": h.electronegativity, "solute": s.electronegativity, "unit": "Pauling",
         "value": den, "limit": f"<= {EN_LIMIT}", "pass": den <= EN_LIMIT + 1e-12,
         "text": f"{s.electronegativity:.2f} vs {h.electronegativity:.2f}: difference {den:.2f}",
         "source": h.sources["electronegativity"]},
        {"rule": "valence", "host": h.valence, "solute": s.valence, "unit": "", "value": s.valence - h.valence,
         "limit": "solute valence >= host valence", "pass": s.valence >= h.valence,
         "text": f"{sym} {s.valence} vs {host} {h.valence}", "source": h.sources["valence"]},
    ]
    ok = {c["rule"]: c["pass"] for c in criteria}
    if not ok["atomic size"]:
        code, verdict = "limited", "limited solid solubility expected: the size factor is unfavourable"
    elif not ok["crystal structure"]:
        code, verdict = "partial", ("partial solid solubility at most: different crystal structures rule out "
                                    "complete miscibility")
    elif ok["electronegativity"] and ok["valence"]:
        code, verdict = "complete", "all four rules pass: extensive, possibly complete, solid solubility"
    else:
        failed = [c["rule"] for c in criteria if not c["pass"]]
        code, verdict = "extensive", (f"size and structure pass: extensive solid solubility likely "
                                      f"({' and '.join(failed)} not met: ordering, compounds or one-sided "
                                      f"solubility possible)")
    if host == sym:
        code, verdict = "complete", f"{sym} in {sym}: the same element"
    return FitReport(
        mode="substitutional", solute=sym, host_element=host, host=_host_description(crystal),
        criteria=criteria, verdict=verdict, verdict_code=code, rules_source=RULES_SOURCE, caution=_caution(),
    )
