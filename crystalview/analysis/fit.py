"""Will a solute fit?  Interstitial hole fit and substitutional (Hume-Rothery) rules.

Interstitial solutes (C, N, O, H, B): for each site kind of the host, the
hole's free radius r_h, the solute radius r_s (with its source), the misfit
ratio r_s / r_h and the linear strain it implies,

    strain = (r_s - r_h) / (R + r_h),

the fractional stretch of the distance from the site centre to its nearest
host atom (radius R) needed for the solute to touch that atom without
overlapping it; the number of such sites per host atom; the preferred site.
For hydrogen only the largest hole is named: where hydrogen sits is not
decided by hard-sphere geometry, and the caution adds a hydrogen line.

Substitutional solutes (metals): the Hume-Rothery rules (Callister &
Rethwisch, ch. 4): atomic size difference within 15 %, the same crystal
structure (any phase of the solute with the host's lattice counts, e.g.
fcc beta-Co in nickel), similar electronegativity (within 0.4 on the Pauling
scale, the half-width of the Darken-Gurry map; common practice) and, other
things being equal, a solute of equal or higher valence.  Each criterion is
shown with its numbers and pass/fail.  The verdict counts the size,
structure and electronegativity rules only: the valence rule is advisory (it
says in which direction solubility is likely larger), so it does not make
the verdict for Cu in Ni differ from that for Ni in Cu.  The verdict says
what the rules allow, never that a solid solution is complete, and always
adds that the rules are necessary, not sufficient (Cu-Ag meets them all and
is a eutectic system).
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

#: Said with every substitutional verdict.
NECESSARY_NOTE = ("The rules are necessary, not sufficient: check the phase diagram (Cu-Ag meets all of them yet is a "
                  "eutectic system with limited solid solubility; Callister & Rethwisch, ch. 9, and ASM Handbook "
                  "Vol. 3, Alloy Phase Diagrams, from memory)")
VALENCE_NOTE = ("the valence rule is advisory: it says in which direction solubility is likely larger, not whether "
                "the two metals mix, so it is shown but not counted in the verdict (Cu in Ni and Ni in Cu get the "
                "same verdict)")

#: Hydrogen: where it sits is not decided by hole size.
HYDROGEN_NOTE = ("hydrogen site occupancy is not set by hard-sphere geometry: zero-point (quantum) vibration and "
                 "electronic effects decide it, and measured occupancies differ from metal to metal (tetrahedral "
                 "sites are reported for H in alpha-Zr although the octahedral hole is larger; octahedral in Pd and "
                 "Ni; from memory): the table gives hole sizes only, not where hydrogen goes")
HYDROGEN_CAUTION = ("Hydrogen: geometric hole sizes say nothing about embrittlement susceptibility; follow the "
                    "applicable hydrogen-service standards and testing.")

#: Preferred sites in body-centred cubic hosts, where the geometry alone
#: (the larger tetrahedral hole) is not what is observed.
BCC_OCTAHEDRAL_SOLUTES = {"C", "N", "O", "B"}
BCC_NOTE = ("in body-centred cubic hosts C, N, O and B sit in the octahedral site although the tetrahedral hole is "
            "larger: only the two nearest neighbours along the cube edge have to move apart (a tetragonal "
            "distortion), which costs less strain energy (Honeycombe & Bhadeshia, Steels, ch. 1, from memory)")


#: Pairs whose known behaviour the rules get wrong, so the screening result
#: never contradicts the cases the rules are taught with: (code, text).
#: Source: ASM Handbook Vol. 3, Alloy Phase Diagrams, and Callister &
#: Rethwisch ch. 4 and 9 (from memory).
KNOWN_PAIRS = {
    frozenset(("Ag", "Au")): ("extensive", "Ag-Au is a known exception: one continuous fcc solid solution at every "
                                           "composition although the electronegativity rule fails"),
    frozenset(("Cu", "Ag")): ("limited", "Cu-Ag is a known exception: it meets the rules yet is a eutectic system "
                                         "with limited solid solubility (under about 5 at% at most)"),
    frozenset(("Al", "Cu")): ("limited", "Al-Cu is a known exception: it meets the size, structure and "
                                         "electronegativity rules, yet at most about 2.5 at% Cu dissolves in Al and "
                                         "the intermetallic theta (Al2Cu) forms; the valence difference (Al 3, Cu 1) "
                                         "points that way"),
}
KNOWN_SOURCE = "ASM Handbook Vol. 3, Alloy Phase Diagrams; Callister & Rethwisch ch. 4 and 9 (from memory)"


class FitReport(dict):
    """A dict with attribute access (report.verdict, report.sites, ...).

    >>> r = FitReport(verdict="fits", sites=[])
    >>> r.verdict, r["verdict"]
    ('fits', 'fits')
    """

    def __getattr__(self, name):
        try:
            return self[name]
        except KeyError:
            raise AttributeError(name) from None


def _caution():
    from ..about import CAUTION

    return CAUTION


def fit(solute, crystal, phase=None, max_atoms=None):
    """Fit report of ``solute`` (symbol) in ``crystal`` (a Crystal or a spec
    such as "Fe"; ``phase`` picks a named phase when a spec is given).

    ``max_atoms``: cap of the hole-by-hole analysis a defected or unknown
    structure needs (default 300,000 atoms; see
    :func:`crystalview.analysis.sites.interstitial_sites`); over it a
    LimitError gives the estimated memory and time.

    >>> r = fit("C", "Fe")
    >>> r.mode, r.preferred_site, r.largest_hole
    ('interstitial', 'octahedral', 'tetrahedral')
    >>> s = r.sites[0]
    >>> s["kind"], round(s["hole_radius_A"], 3), round(s["linear_strain"], 3)
    ('octahedral', 0.192, 0.403)
    """
    if isinstance(crystal, str):
        from ..build import build

        crystal = build(crystal, phase=phase)
    sym = E._canon(solute)
    E.atomic_number(sym)          # not an element at all -> UserError
    if sym in E.interstitial_symbols():
        return _interstitial(sym, crystal, max_atoms)
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


def _interstitial(sym, crystal, max_atoms=None):
    from .sites import is_perfect, site_table

    sol = E.interstitial(sym)
    rs = sol.radius
    rows = site_table(crystal, max_atoms)
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
    caution = _caution()
    hydrogen = sym == "H"
    if hydrogen:
        # geometry does not tell where hydrogen sits: report the largest hole only
        preferred, reason = None, HYDROGEN_NOTE
        caution = caution + "\n" + HYDROGEN_CAUTION
    elif lattice in ("bcc", "B2") and sym in BCC_OCTAHEDRAL_SOLUTES:
        octs = [r for r in named if r["kind"] == "octahedral"]
        if octs:
            preferred, reason = octs[0]["label"], BCC_NOTE
    vac = [r for r in out_rows if r["kind"] == "vacancy"]
    notes = []
    radii = crystal.metadata.get("radii") or {}
    if any(r.get("kind") == "covalent" for r in radii.values()):
        notes.append("this host is not metallic (an oxide, a salt or a covalent solid; covalent radii used): "
                     "hard-sphere hole sizes are a rough geometric guide only")
    if vac:
        notes.append(f"{vac[0]['sites_in_crystal']} vacancy hole(s) of radius up to {vac[0]['hole_radius_max_A']:.3f} A "
                     f"can trap the solute")
    # named sites that the check against the perfect cell found to be saddles at this c/a (the site table's notes)
    saddle = [r for r in out_rows if "saddle of the empty-sphere function at c/a" in (r["note"] or "")]
    closed = [r["label"] for r in saddle if "not a hole of its own" in r["note"]]
    moved = [r["label"] for r in saddle if "not a hole of its own" not in r["note"]]
    if closed:
        notes.append(f"{', '.join(closed)}: saddle(s) of the empty-sphere function at this c/a, not holes of their own")
    if moved:
        notes.append(f"{', '.join(moved)}: at this c/a the hole lies off the site's centre, a little larger "
                     f"(where and how large: crystalview sites)")
    return FitReport(
        mode="interstitial", solute=sym, solute_radius_A=rs, solute_radius_source=sol.source,
        host=_host_description(crystal), host_radius_A=R, perfect=perfect,
        strain_definition="(r_solute - r_hole) / (R_host + r_hole): stretch of the site-to-neighbour distance",
        sites=out_rows, largest_hole=largest["label"], preferred_site=preferred, preferred_reason=reason,
        site_basis="largest hole (geometry only)" if hydrogen else "preferred site",
        hydrogen_note=HYDROGEN_NOTE if hydrogen else None, notes=notes, caution=caution,
    )


def _structure_criterion(sym, s, host_lat):
    """The crystal-structure rule: passes when ANY phase of the solute has
    the host's lattice type (e.g. beta-Co, fcc, in nickel)."""
    by_name = getattr(s, "phases", None) or {}
    phases = list(by_name.values())
    ref = s.reference_phase
    ref_ph = by_name.get(ref) if ref else None
    ref_lat = ref_ph.lattice if ref_ph is not None else None
    match = None
    if host_lat is not None:
        same = [p for p in phases if p.lattice == host_lat]
        match = next((p for p in same if p.name == ref), same[0] if same else None)

    def name(p):
        return p.lattice if p.name == p.lattice else f"{p.name} ({p.lattice})"

    all_lat = ", ".join(name(p) for p in phases) or "no phase data"
    detail = ""
    if match is not None:
        text = (f"{sym} is {host_lat}, as is the host" if match.name == match.lattice
                else f"{sym} {match.name} phase is {match.lattice}, as is the host")
        if match.name != ref:
            detail = f"{sym} {match.name} ({match.lattice}), not the reference phase {ref} ({ref_lat})"
        if match.note:
            detail = (detail + ": " if detail else f"{sym} {match.name}: ") + match.note
    else:
        text = f"no phase of {sym} ({all_lat}) is {host_lat}"
    return {"rule": "crystal structure", "host": host_lat, "solute": ref_lat, "unit": "", "value": None,
            "limit": "a solute phase with the host's lattice", "pass": match is not None, "advisory": False,
            "matching_phase": None if match is None else match.name,
            "matching_phase_note": None if match is None else (match.note or ""),
            "solute_phases": {p.name: p.lattice for p in phases},
            "text": text, "detail": detail, "source": "element phase data"}


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
    den = abs(s.electronegativity - h.electronegativity)
    dv = s.valence - h.valence
    if dv > 0:
        vdir = (f"solute valence higher than the host's: by this rule {sym} dissolves more readily in {host} "
                f"than {host} in {sym}")
    elif dv < 0:
        vdir = (f"solute valence lower than the host's: by this rule {sym} dissolves less readily in {host} "
                f"than {host} in {sym}")
    else:
        vdir = "equal valences: this rule favours neither direction"
    criteria = [
        {"rule": "atomic size", "host": h.metallic_radius, "solute": s.metallic_radius, "unit": "A",
         "value": size * 100.0, "limit": f"<= {SIZE_LIMIT * 100:.0f} %", "pass": size <= SIZE_LIMIT + 1e-12,
         "advisory": False, "detail": "",
         "text": f"radius {s.metallic_radius:.3f} vs {h.metallic_radius:.3f} A: {size * 100:.1f} % difference",
         "source": h.sources["metallic_radius"]},
        _structure_criterion(sym, s, host_lat),
        {"rule": "electronegativity", "host": h.electronegativity, "solute": s.electronegativity, "unit": "Pauling",
         "value": den, "limit": f"<= {EN_LIMIT}", "pass": den <= EN_LIMIT + 1e-12, "advisory": False, "detail": "",
         "text": f"{s.electronegativity:.2f} vs {h.electronegativity:.2f}: difference {den:.2f}",
         "source": h.sources["electronegativity"]},
        {"rule": "valence", "host": h.valence, "solute": s.valence, "unit": "", "value": dv,
         "limit": "solute valence >= host valence", "pass": s.valence >= h.valence, "advisory": True,
         "direction": vdir, "detail": vdir,
         "text": f"{sym} {s.valence} vs {host} {h.valence}", "source": h.sources["valence"]},
    ]
    counted = [c for c in criteria if not c["advisory"]]
    failed = [c["rule"] for c in counted if not c["pass"]]
    if host == sym:
        code, main = "same", f"{sym} in {sym}: the same element, nothing to dissolve"
    elif not failed:
        code, main = "extensive", "the size, structure and electronegativity rules allow extensive solid solubility"
    else:
        why = {"atomic size": f"radii differ by {size * 100:.1f} %, over {SIZE_LIMIT * 100:.0f} %",
               "crystal structure": f"no phase of {sym} shares the host's {host_lat} lattice, so a solid solution "
                                    f"cannot run across the whole composition range",
               "electronegativity": f"an electronegativity difference of {den:.2f} (over {EN_LIMIT}) favours "
                                    f"intermetallic compounds or ordering"}
        limiting = [f for f in failed if f != "electronegativity"]
        if not limiting:
            code = "compounds"
            main = ("the size and structure rules allow extensive solid solubility, but the electronegativity rule "
                    "does not: " + why["electronegativity"] + " (a screening window with exceptions: Ag-Au fails "
                    "it yet forms one continuous solid solution)")
        else:
            names = [f.replace("atomic ", "").replace("crystal ", "") for f in limiting]
            head = names[0] if len(names) == 1 else " and ".join(names)
            code = "limited"
            main = (f"the {head} rule{'s' if len(names) > 1 else ''} limit{'' if len(names) > 1 else 's'} "
                    f"solubility: " + "; ".join(why[f] for f in failed))
    known = KNOWN_PAIRS.get(frozenset((sym, host))) if sym != host else None
    rules_code = code
    if known is not None and known[0] != code:
        code = known[0]
        main = f"{known[1]}; the rules alone would say '{rules_code}' ({main})"
    elif known is not None:
        main = f"{main}; {known[1]}"
    verdict = main + ". " + NECESSARY_NOTE
    return FitReport(
        known_case=None if known is None else {"code": known[0], "text": known[1], "source": KNOWN_SOURCE},
        rules_verdict_code=rules_code,
        mode="substitutional", solute=sym, host_element=host, host=_host_description(crystal),
        criteria=criteria, verdict=verdict, verdict_code=code, verdict_rules=[c["rule"] for c in counted],
        failed_rules=failed, necessary_not_sufficient=NECESSARY_NOTE, valence_note=VALENCE_NOTE,
        rules_source=RULES_SOURCE, caution=_caution(),
    )
