"""Alloys the way engineers write them: "Fe-18Cr-8Ni", "Ni-20Cr", "Fe-0.4C-1Mn".

An alloy string names the base (balance) element first, then each addition
as an amount and an element.  Amounts are weight percent by default (as the
trade writes alloys: on drawings, standards and mill certificates) or atom
percent.  Weight percent is converted to atom fractions with the standard
atomic weights (periodictable).  The small interstitial formers (C, N, B, O,
H) go into interstitial sites; every other element substitutes for the base
on its lattice sites.

Counts are exact over the supercell: with N lattice sites, n_I interstitials
and the atom fractions x, n_I = x_I / (1 - sum x_I) x N, and the metals share
the N sites by largest remainders.  The composition actually made is
reported in wt% and at%; when no supercell is given, the smallest n x n x n
repeat that represents every amount to within the tolerance (5 % of the
amount, at least 0.02 percentage points, by default) is used.

The lattice parameter of the solid solution is estimated by Vegard's law
from the components' lattice parameters in the host structure (a
component without such a phase is estimated from its CN12 metallic radius,
said so); real alloys deviate, so ``-a`` always wins.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

from .errors import UserError, suggest

#: Elements that go into interstitial sites rather than substitute.
INTERSTITIAL_ELEMENTS = ("H", "B", "C", "N", "O")
#: Largest n of the n x n x n repeat tried when looking for the smallest supercell.
MAX_REPEAT = 14

_PART = re.compile(r"^\s*(?P<num>[0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*%?\s*(?P<el>[A-Za-z]{1,2})\s*$")
_PART_AFTER = re.compile(r"^\s*(?P<el>[A-Za-z]{1,2})\s*(?P<num>[0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*%?\s*$")


@dataclass
class Alloy:
    """A parsed alloy: ``base`` (balance element), ``parts`` {element: amount
    in percent}, ``unit`` "wt" or "at", and ``text`` as the user wrote it.

    >>> a = parse_alloy("Ni-20Cr", unit="at")
    >>> a.base, a.parts, a.unit, a.text
    ('Ni', {'Cr': 20.0}, 'at', 'Ni-20Cr')
    """

    base: str
    parts: dict
    unit: str
    text: str
    order: list = field(default_factory=list)

    def atom_fractions(self):
        """{element: atom fraction} of all atoms, the base included.

        >>> a = parse_alloy("Al-3Cu")                  # 97 wt% Al, 3 wt% Cu
        >>> {k: round(v * 100, 2) for k, v in a.atom_fractions().items()}
        {'Al': 98.7, 'Cu': 1.3}
        """
        pct = dict(self.parts)
        pct[self.base] = 100.0 - sum(self.parts.values())
        if self.unit == "at":
            return {el: pct[el] / 100.0 for el in self.order}
        return wt_to_at({el: pct[el] for el in self.order})


def _symbol(text, whole):
    from .elements import _all_symbols

    s = text[:1].upper() + text[1:].lower()
    if s not in _all_symbols():
        raise UserError(f"'{text}' in the alloy '{whole}' is not a chemical element symbol"
                        f"{suggest(text, _all_symbols())}; write e.g. Fe-18Cr-8Ni")
    return s


def parse_alloy(text, unit="wt"):
    """An :class:`Alloy` from a string such as "Fe-18Cr-8Ni" (base first,
    then amount + element; "18%Cr" and "Cr18" are read too).

    >>> a = parse_alloy("Fe-18Cr-8Ni")
    >>> a.base, a.parts, a.unit
    ('Fe', {'Cr': 18.0, 'Ni': 8.0}, 'wt')
    """
    if unit not in ("wt", "at"):
        raise UserError(f"alloy unit '{unit}' must be wt (weight percent) or at (atom percent)")
    t = str(text).strip()
    if not t:
        raise UserError("empty alloy; write the base element then the additions, e.g. Fe-18Cr-8Ni")
    pieces = [p for p in re.split(r"\s*-\s*", t)]
    if any(not p for p in pieces):
        raise UserError(f"alloy '{text}' has an empty part; write e.g. Fe-18Cr-8Ni (no negative amounts)")
    base_txt = pieces[0].strip()
    if not re.fullmatch(r"[A-Za-z]{1,2}", base_txt):
        raise UserError(f"alloy '{text}' must start with its base (balance) element, e.g. Fe-18Cr-8Ni")
    base = _symbol(base_txt, text)
    parts, order = {}, [base]
    for p in pieces[1:]:
        m = _PART.match(p) or _PART_AFTER.match(p)
        if m is None:
            raise UserError(f"'{p}' in the alloy '{text}' must be an amount and an element, e.g. 18Cr or 0.4C")
        el = _symbol(m.group("el"), text)
        v = float(m.group("num"))
        if not math.isfinite(v) or v <= 0:
            raise UserError(f"'{p}' in the alloy '{text}': amounts must be positive percentages")
        if el == base:
            raise UserError(f"alloy '{text}' names its base element {base} again; the base is the balance")
        if el in parts:
            raise UserError(f"alloy '{text}' names {el} twice; give each element once")
        parts[el] = v
        order.append(el)
    total = sum(parts.values())
    if total >= 100.0:
        raise UserError(f"the additions of '{text}' sum to {total:g} {unit}%, leaving nothing for the base {base}; "
                        f"they must sum to less than 100")
    if base in INTERSTITIAL_ELEMENTS:
        raise UserError(f"alloy '{text}': the base {base} is an interstitial element; the base must be the metal")
    return Alloy(base, parts, unit, t, order)


def wt_to_at(wt):
    """Atom fractions from weight percents {element: wt%} (standard atomic
    weights from periodictable).

    >>> {k: round(v * 100, 2) for k, v in wt_to_at({"Al": 97.0, "Cu": 3.0}).items()}
    {'Al': 98.7, 'Cu': 1.3}
    """
    from .elements import atomic_mass

    mol = {el: w / atomic_mass(el) for el, w in wt.items()}
    tot = sum(mol.values())
    return {el: m / tot for el, m in mol.items()}


def at_to_wt(at):
    """Weight fractions from atom fractions (or counts) {element: x}.

    >>> {k: round(v * 100, 1) for k, v in at_to_wt({"Al": 98.71, "Cu": 1.29}).items()}
    {'Al': 97.0, 'Cu': 3.0}
    """
    from .elements import atomic_mass

    m = {el: x * atomic_mass(el) for el, x in at.items()}
    tot = sum(m.values())
    return {el: v / tot for el, v in m.items()}


def counts_for(alloy, n_sites):
    """Exact atom counts {element: n} for a crystal of ``n_sites`` lattice
    sites: interstitials beside the sites, metals sharing them.

    >>> counts_for(parse_alloy("Ni-20Cr", unit="at"), 500)
    {'Ni': 400, 'Cr': 100}
    """
    x = alloy.atom_fractions()
    inter = {el: v for el, v in x.items() if el in INTERSTITIAL_ELEMENTS}
    xi = sum(inter.values())
    n_int = {el: int(round(v / (1.0 - xi) * n_sites)) for el, v in inter.items()}
    total = n_sites + sum(n_int.values())
    metals = [el for el in alloy.order if el not in INTERSTITIAL_ELEMENTS]
    exact = np.array([x[el] * total for el in metals])
    exact *= n_sites / exact.sum()
    cnt = np.floor(exact + 1e-9).astype(int)
    rest = n_sites - int(cnt.sum())
    if rest > 0:
        order = np.argsort(-(exact - cnt), kind="stable")
        cnt[order[:rest]] += 1
    out = {el: int(c) for el, c in zip(metals, cnt)}
    out.update(n_int)
    return {el: out[el] for el in alloy.order}


def made_percent(counts, unit):
    """{element: percent} of the counts in the alloy's unit (wt or at).

    >>> made_percent({"Ni": 400, "Cr": 100}, "at")
    {'Ni': 80.0, 'Cr': 20.0}
    >>> {el: round(p, 2) for el, p in made_percent({"Ni": 400, "Cr": 100}, "wt").items()}
    {'Ni': 81.87, 'Cr': 18.13}
    """
    tot = sum(counts.values())
    if tot == 0:
        return {el: 0.0 for el in counts}
    if unit == "at":
        return {el: 100.0 * n / tot for el, n in counts.items()}
    return {el: 100.0 * w for el, w in at_to_wt(counts).items()}


def tolerance_of(amount, tolerance=None):
    """Allowed deviation (percentage points) of a made amount: the user's, or
    5 % of the amount, at least 0.02 points.

    >>> tolerance_of(18.0), tolerance_of(0.1), tolerance_of(18.0, tolerance=0.5)
    (0.9, 0.02, 0.5)
    """
    if tolerance is not None:
        try:
            t = float(tolerance)
        except (TypeError, ValueError):
            t = float("nan")
        if not (math.isfinite(t) and 0 < t <= 50):
            raise UserError(f"alloy tolerance {tolerance!r} must be a number of percentage points above 0 and at "
                            f"most 50, e.g. --alloy-tolerance 0.5")
        return t
    return max(0.05 * amount, 0.02)


def worst_miss(alloy, counts, tolerance=None):
    """(element, asked, made, allowed) of the amount farthest outside its
    tolerance, or None when every amount is within it.

    >>> a = parse_alloy("Ni-20Cr", unit="at")
    >>> worst_miss(a, {"Ni": 400, "Cr": 100}) is None
    True
    >>> worst_miss(a, {"Ni": 45, "Cr": 5})
    ('Cr', 20.0, 10.0, 1.0)
    """
    made = made_percent(counts, alloy.unit)
    worst = None
    for el, asked in alloy.parts.items():
        allowed = tolerance_of(asked, tolerance)
        miss = abs(made[el] - asked) - allowed
        if miss > 1e-9 and (worst is None or miss > worst[4]):
            worst = (el, asked, made[el], allowed, miss)
    return None if worst is None else worst[:4]


def smallest_repeat(alloy, sites_per_cell, tolerance=None):
    """The smallest n for which an n x n x n repeat of a cell with
    ``sites_per_cell`` lattice sites holds the alloy within the tolerance.

    >>> smallest_repeat(parse_alloy("Fe-18Cr-8Ni"), 4)
    3
    """
    for n in range(1, MAX_REPEAT + 1):
        if worst_miss(alloy, counts_for(alloy, sites_per_cell * n ** 3), tolerance) is None:
            return n
    el = max(alloy.parts, key=lambda e: -alloy.parts[e])
    raise UserError(f"'{alloy.text}' needs more than a {MAX_REPEAT}x{MAX_REPEAT}x{MAX_REPEAT} repeat to hold "
                    f"{alloy.parts[el]:g} {alloy.unit}% {el} within {tolerance_of(alloy.parts[el], tolerance):g} "
                    f"points; allow more with a larger tolerance")


def _place(crystal, al, counts, seed, site, max_atoms):
    """Substitute the metals (exact counts, one seed each) and put the
    interstitials in ``site`` holes (octahedral by default)."""
    from .defects.interstitial import fill_sites
    from .defects.point import substitute

    k = 0
    for el in al.order:
        if el != al.base and el not in INTERSTITIAL_ELEMENTS and counts[el]:
            crystal = substitute(crystal, el, count=counts[el], seed=seed + k, host=al.base)
            k += 1
    for el in al.order:
        if el in INTERSTITIAL_ELEMENTS and counts[el]:
            crystal = fill_sites(crystal, el, kind=site or "octahedral", count=counts[el], seed=seed + k,
                                 max_atoms=max_atoms)
            k += 1
    return crystal


def vegard(alloy, lattice, host_a, host_c=None, host_phase=None):
    """Vegard's-law estimate of the solid solution's lattice parameters on
    the host's ``lattice`` type: a dict with ``a``, ``c`` (hexagonal and
    tetragonal) and ``components`` (each metal's value, its phase and
    temperature, or how it was estimated).  Interstitials are left out of the
    average (their effect is not linear in the same way; said in the note).

    >>> v = vegard(parse_alloy("Cu-50Ni", unit="at"), "fcc", 3.6149)
    >>> round(v["a"], 4)
    3.5694
    """
    from . import elements as E
    from .build import _a_from_radius
    from .prototypes import prototype

    proto = prototype(lattice)
    x = alloy.atom_fractions()
    metals = [el for el in alloy.order if el not in INTERSTITIAL_ELEMENTS]
    xs = np.array([x[el] for el in metals])
    xs = xs / xs.sum()
    comps, a_vals, c_vals = [], [], []
    for el, xi in zip(metals, xs):
        if el == alloy.base:
            a_i, c_i, how = host_a, host_c, f"the host ({host_phase or lattice})"
        else:
            ph = None
            try:
                e = E.element(el)
                ph = next((p for p in e.phases.values() if p.lattice == proto.name), None)
            except UserError:
                e = None
            if ph is not None:
                a_i, c_i = ph.a, ph.c
                how = f"{el} {ph.name}" + (f" ({lattice})" if ph.name != lattice else "") + \
                    (f" at {ph.temperature_K:g} K" if ph.temperature_K else "")
            else:
                r = e.metallic_radius if e is not None else None
                if not r:
                    raise UserError(f"no lattice parameter or metallic radius for {el}; give the alloy's -a")
                a_i = _a_from_radius(proto, r)
                c_i = None
                how = f"{el} has no {lattice} phase: from its CN12 metallic radius {r} A (touching spheres)"
        comps.append({"element": el, "atom_fraction": float(xi), "a_A": float(a_i),
                      "c_A": None if c_i is None else float(c_i), "from": how})
        a_vals.append(a_i)
        c_vals.append(c_i if c_i is not None else (a_i * host_c / host_a if host_c else None))
    a = float(np.dot(xs, a_vals))
    c = float(np.dot(xs, c_vals)) if host_c else None
    note = "Vegard's law over the metals (the interstitials' expansion of the lattice is not included)" \
        if any(el in INTERSTITIAL_ELEMENTS for el in alloy.order) else "Vegard's law"
    return {"a": a, "c": c, "components": comps, "note": note, "source": E._data()["sources"]["vegard1921"]}


def alloy_crystal(spec, alloy, unit="wt", *, phase=None, lattice=None, element=None, a=None, c=None,
                  repeat=None, supercell=None, orient=None, max_atoms=None, seed=0, site=None, tolerance=None):
    """A crystal of the alloy on the lattice of ``spec`` (its base element):
    exact counts over the supercell (the smallest n x n x n repeat within the
    tolerance when no repeat, supercell or orientation is given), the lattice
    parameter from Vegard's law unless ``a`` is given, solutes substituted
    and interstitials placed (in ``site`` holes, octahedral by default) with
    ``seed``.  ``metadata['alloy']`` records what was asked and made.

    >>> c = alloy_crystal("Fe", "Fe-18Cr-8Ni", phase="gamma")
    >>> c.metadata["alloy"]["repeat"], c.counts()
    ([3, 3, 3], {'Cr': 21, 'Fe': 79, 'Ni': 8})
    """
    from .build import build

    al = alloy if isinstance(alloy, Alloy) else parse_alloy(alloy, unit)
    from .elements import phase_alias

    if phase is not None and str(spec)[:2].capitalize() in ("Fe",) and phase_alias("Fe", phase) == "martensite":
        return _martensite(al, a=a, c=c, repeat=repeat, supercell=supercell, orient=orient, max_atoms=max_atoms,
                           seed=seed, site=site, tolerance=tolerance)
    host = build(spec, phase=phase, lattice=lattice, element=element, a=a, c=c)
    lat = host.lattice
    host_el = lat.elements[0] if lat is not None and lat.elements else None
    if lat is None or lat.prototype == "cif" or len(set(lat.elements)) != 1:
        raise UserError(f"--alloy needs a single-element metal lattice as SPEC (e.g. Fe --phase gamma); "
                        f"{spec} is not one")
    if host_el != al.base:
        raise UserError(f"the alloy '{al.text}' is {al.base}-based but SPEC is {host_el}; give SPEC {al.base} "
                        f"(with --phase or --lattice for the host structure)")
    for el in al.parts:
        if el not in INTERSTITIAL_ELEMENTS:
            from .elements import element as element_data

            if element_data(el).metallic_radius is None:
                raise UserError(f"{el} has no CN12 metallic radius in the data; it cannot substitute")
    v = None
    if a is None:
        t = host.metadata.get("temperature_K")
        v = vegard(al, lat.prototype, lat.a, lat.c,
                   f"{host.metadata.get('phase') or lat.prototype}" + (f" at {t:g} K" if t else ""))
        a_use, c_use = v["a"], v["c"]
    else:
        a_use, c_use = a, c
    user_size = repeat is not None or supercell is not None or orient is not None
    if not user_size:
        n = smallest_repeat(al, lat.atoms_per_cell, tolerance)
        repeat = (n, n, n)
    crystal = build(spec, phase=phase, lattice=lattice, element=element, a=a_use, c=c_use, repeat=repeat,
                    supercell=supercell, orient=orient, max_atoms=max_atoms)
    n_sites = len(crystal)
    counts = counts_for(al, n_sites)
    miss = worst_miss(al, counts, tolerance)
    if miss is not None:
        k = smallest_repeat(al, lat.atoms_per_cell, tolerance)
        el, asked, made, allowed = miss
        raise UserError(f"this crystal of {n_sites} sites cannot hold '{al.text}' ({al.unit}%): {el} would be "
                        f"{made:.3g} instead of {asked:g} (allowed +-{allowed:.2g}); --repeat {k} {k} {k} holds it, "
                        f"or a larger tolerance")
    crystal = _place(crystal, al, counts, seed, site, max_atoms)
    made_at = made_percent(counts, "at")
    made_wt = made_percent(counts, "wt")
    rec = {"text": al.text, "unit": al.unit, "asked": dict(al.parts), "base": al.base, "counts": counts,
           "made_wt_percent": made_wt, "made_at_percent": made_at, "seed": seed,
           "repeat": list(repeat) if repeat is not None else None, "sites": n_sites,
           "tolerance": "5 % of each amount, at least 0.02 points" if tolerance is None else f"{tolerance:g} points"}
    if v is not None:
        rec["lattice_parameter"] = {"a_A": v["a"], "c_A": v["c"], "components": v["components"],
                                    "note": v["note"], "source": v["source"]}
        crystal.metadata.update(source=f"Vegard's law estimate ({v['note']})", temperature_K=None,
                                note="an estimate: real alloys deviate from Vegard's law; give -a for a measured "
                                     "value", a_estimated=True)
    crystal.metadata["alloy"] = rec
    crystal.metadata["name"] = al.text
    return crystal


def report_lines(rec):
    """Plain-text lines describing an alloy record (``metadata['alloy']``):
    what was asked, what was made in wt% and at%, and the lattice-parameter
    estimate with its components.

    >>> c = alloy_crystal("Ni", "Ni-20Cr", unit="at")
    >>> report_lines(c.metadata["alloy"])[0]
    'alloy Ni-20Cr (at%) asked: Cr 20; made over 108 sites: Cr 20.37 at% = 18.48 wt%, Ni 79.63 at% = 81.52 wt%'
    """
    made = ", ".join(f"{el} {rec['made_at_percent'][el]:.2f} at% = {rec['made_wt_percent'][el]:.2f} wt%"
                     for el in sorted(rec["counts"], key=lambda e: (e == rec["base"], e)))
    asked = ", ".join(f"{el} {v:g}" for el, v in rec["asked"].items())
    lines = [f"alloy {rec['text']} ({rec['unit']}%) asked: {asked}; made over {rec['sites']} sites: {made}"]
    lp = rec.get("lattice_parameter")
    if lp:
        comps = "; ".join(f"{c['element']} {c['a_A']:.4f} A ({c['from']})" for c in lp["components"])
        lines.append(f"a = {lp['a_A']:.4f} A by {lp['note']}: {comps}. An estimate: real alloys deviate by up to "
                     f"a few tenths of a percent; give -a for a measured value")
    return lines


#: Iron-carbon martensite at room temperature (Roberts 1953, from memory; see
#: the data file's roberts1953): a = A0 - 0.013 x, c = A0 + 0.116 x for x wt% C.
MARTENSITE_A0 = 2.866


def martensite_parameters(wt_c):
    """(a, c) in A of Fe-C martensite with ``wt_c`` weight percent carbon.

    >>> a, c = martensite_parameters(0.4)
    >>> round(a, 4), round(c, 4), round(c / a, 4)
    (2.8608, 2.9124, 1.018)
    """
    x = float(wt_c)
    return MARTENSITE_A0 - 0.013 * x, MARTENSITE_A0 + 0.116 * x


def _martensite(al, *, a=None, c=None, repeat=None, supercell=None, orient=None, max_atoms=None, seed=0,
                site=None, tolerance=None):
    """Fe-C martensite: body-centred tetragonal iron with the carbon in the z
    octahedral sites, its a and c from the carbon content (Roberts 1953);
    substitutional metals as in any alloy."""
    from . import elements as E
    from .build import build

    if al.base != "Fe":
        raise UserError(f"martensite here is iron-carbon martensite; the alloy '{al.text}' is {al.base}-based")
    if "C" not in al.parts:
        raise UserError(f"martensite's tetragonality comes from its carbon; the alloy '{al.text}' has none "
                        f"(give e.g. Fe-0.4C; without carbon the structure is ferrite)")
    wt = {el: 100.0 * w for el, w in at_to_wt(al.atom_fractions()).items()}
    if not 0 < wt["C"] <= 2.0:
        raise UserError(f"martensite with {wt['C']:.3g} wt% C is outside the range of the lattice-parameter relation "
                        f"(0 to about 2 wt% C)")
    am, cm = martensite_parameters(wt["C"])
    a_use = am if a is None else a
    c_use = cm if c is None else c
    if repeat is None and supercell is None and orient is None:
        n = smallest_repeat(al, 2, tolerance)
        repeat = (n, n, n)
    crystal = build("bct", element="Fe", a=a_use, c=c_use, repeat=repeat, supercell=supercell, orient=orient,
                    max_atoms=max_atoms)
    counts = counts_for(al, len(crystal))
    miss = worst_miss(al, counts, tolerance)
    if miss is not None:
        k = smallest_repeat(al, 2, tolerance)
        el, asked, made, allowed = miss
        raise UserError(f"this crystal of {len(crystal)} sites cannot hold '{al.text}' ({al.unit}%): {el} would be "
                        f"{made:.3g} instead of {asked:g}; --repeat {k} {k} {k} holds it")
    crystal = _place(crystal, al, counts, seed, site, max_atoms)
    src = E._data()["sources"]["roberts1953"]
    crystal.metadata.update(phase="martensite", source=src if a is None and c is None else "given by the user",
                            temperature_K=293 if a is None and c is None else None,
                            note=f"Fe-C martensite: body-centred tetragonal, c/a = {c_use / a_use:.4f} for "
                                 f"{wt['C']:.3g} wt% C; carbon in the z octahedral sites")
    from dataclasses import replace

    crystal.lattice = replace(crystal.lattice, phase="martensite", source=crystal.metadata["source"])
    crystal.metadata["alloy"] = {
        "text": al.text, "unit": al.unit, "asked": dict(al.parts), "base": al.base, "counts": counts,
        "made_wt_percent": made_percent(counts, "wt"), "made_at_percent": made_percent(counts, "at"), "seed": seed,
        "repeat": list(repeat) if repeat is not None else None, "sites": int(sum(v for e, v in counts.items()
                                                                                if e not in INTERSTITIAL_ELEMENTS)),
        "tolerance": "5 % of each amount, at least 0.02 points" if tolerance is None else f"{tolerance:g} points"}
    crystal.metadata["name"] = al.text
    return crystal
