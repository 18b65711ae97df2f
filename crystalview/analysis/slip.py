"""Slip systems, Schmid factors and Schmid's law.

Slip systems are generated from one representative plane and direction per
family by the point-group operations of the lattice (the 48 operations of
m-3m on cubic indices, the 24 operations of 6/mmm on four-index hexagonal
indices), then reduced so that a plane and its negative, and a direction and
its negative, count once.  Cartesian unit vectors come from the crystal's
conventional cell in its own frame (``crystal.lattice.cell``), so a crystal
built with ``orient=`` gives vectors in its rotated frame, and hexagonal
vectors use the crystal's real c/a.

Schmid's law (Schmid & Boas): under a uniaxial stress sigma along the unit
axis t, the shear stress resolved on the plane with unit normal n in the unit
direction d is  tau = sigma cos(phi) cos(lambda) = sigma (n.t)(d.t);  the
Schmid factor m is |cos(phi) cos(lambda)| (at most 0.5) and a system yields
when tau reaches its critical resolved shear stress: sigma_y = CRSS / m.

Nothing here imports scipy, vtk or pyvista.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from ..errors import UserError
from ..lattice import (_gcd_reduce, direction_vector, format_indices, mb_to_miller_direction,
                       mb_to_miller_plane, plane_normal, as_indices)

_TOL = 1e-9


# ------------------------------------------------------------------ families
@dataclass(frozen=True)
class SlipFamily:
    """A family of slip systems: its plane and direction family, expected count and aliases.

    >>> f = FAMILIES["{111}<110>"]
    >>> f.plane, f.direction, f.expected, f.aliases
    ((1, 1, 1), (1, -1, 0), 12, ('octahedral', '111'))
    """
    name: str            # what the trade calls it: "basal", "{110}<111>", ...
    plane: tuple         # representative plane (3 or 4 indices)
    direction: tuple     # representative direction in that plane (same index count)
    symmetry: str        # "cubic" (3-index, m-3m) | "hexagonal" (4-index, 6/mmm)
    expected: int        # number of systems (checked when generated)
    notation: str        # the family in index notation, e.g. "{111}<110>"
    aliases: tuple = ()


FAMILIES = {f.name: f for f in (
    SlipFamily("{111}<110>", (1, 1, 1), (1, -1, 0), "cubic", 12, "{111}<110>", ("octahedral", "111")),
    SlipFamily("{110}<111>", (1, 1, 0), (1, -1, 1), "cubic", 12, "{110}<111>", ("110",)),
    SlipFamily("{112}<111>", (1, 1, 2), (1, 1, -1), "cubic", 12, "{112}<111>", ("112",)),
    SlipFamily("{123}<111>", (1, 2, 3), (1, 1, -1), "cubic", 24, "{123}<111>", ("123",)),
    SlipFamily("{110}<100>", (0, 1, 1), (1, 0, 0), "cubic", 6, "{110}<100>", ("cube", "110-100")),
    SlipFamily("basal", (0, 0, 0, 1), (2, -1, -1, 0), "hexagonal", 3, "(0001)<11-20>", ("{0001}<11-20>", "0001")),
    SlipFamily("prismatic", (1, 0, -1, 0), (1, -2, 1, 0), "hexagonal", 3, "{10-10}<11-20>", ("prism",)),
    SlipFamily("pyramidal <a>", (1, 0, -1, 1), (1, -2, 1, 0), "hexagonal", 6,
               "{10-11}<11-20>", ("pyramidal-a", "pyramidal a")),
    SlipFamily("pyramidal <c+a>", (1, 1, -2, 2), (1, 1, -2, -3), "hexagonal", 6,
               "{11-22}<11-23>", ("pyramidal-ca", "pyramidal c+a", "c+a", "second-order pyramidal")),
    SlipFamily("pyramidal <c+a> 1st order", (1, 0, -1, 1), (1, 1, -2, -3), "hexagonal", 12,
               "{10-11}<11-23>", ("pyramidal-ca-1", "first-order pyramidal")),
)}

#: lattice type -> (families it has, families used when none are asked for).
#: Sources (from memory): Hull & Bacon, Introduction to Dislocations, table of
#: slip systems; Hirth & Lothe, Theory of Dislocations.  B2: {110}<111> as in
#: beta-brass and {110}<100> as in NiAl; L1_2 / L1_0 / diamond: octahedral slip.
_CUBIC_OCT = ("{111}<110>",)
_BCC = ("{110}<111>", "{112}<111>", "{123}<111>")
_HCP = ("basal", "prismatic", "pyramidal <a>", "pyramidal <c+a>", "pyramidal <c+a> 1st order")
LATTICE_FAMILIES = {
    "fcc": (_CUBIC_OCT, _CUBIC_OCT),
    "L1_2": (_CUBIC_OCT, _CUBIC_OCT),
    "L1_0": (_CUBIC_OCT, _CUBIC_OCT),
    "diamond": (_CUBIC_OCT, _CUBIC_OCT),
    "bcc": (_BCC, _BCC),
    "B2": (_BCC + ("{110}<100>",), ("{110}<111>", "{110}<100>")),
    "hcp": (_HCP, _HCP[:4]),
}

#: Taylor factor M of a random (untextured) polycrystal in uniaxial tension,
#: sigma_y ~ M * CRSS.  Values from memory, labelled as such.
TAYLOR_FACTORS = {
    "octahedral": (3.06, "Taylor (1938), refined by Bishop & Hill (1951); {111}<110> slip, random FCC "
                         "polycrystal (from memory)"),
    "bcc110": (3.06, "same geometry as FCC with plane and direction exchanged: {110}<111> slip only "
                     "(from memory)"),
    "pencil": (2.73, "pencil glide on {110}, {112} and {123}<111>, Chin & Mammel (1967) "
                     "(from memory, approximate)"),
}


def _lattice_key(crystal):
    from ..crystal import Crystal

    if not isinstance(crystal, Crystal):
        raise UserError("slip systems need a Crystal, e.g. cv.build('Cu')")
    lat = crystal.lattice
    if lat is None:
        raise UserError("this crystal carries no lattice type, so its slip systems are unknown; "
                        "build it from an element or a lattice type, e.g. cv.build('Cu')")
    if lat.prototype == "cif":
        rec = crystal.metadata.get("recognition") or {}
        why = f" ({rec['reason']})" if rec.get("reason") else ""
        raise UserError(f"this structure is not one of the lattice types with tabulated slip systems "
                        f"({', '.join(LATTICE_FAMILIES)}){why}; no slip table for it")
    if lat.prototype not in LATTICE_FAMILIES:
        known = ", ".join(LATTICE_FAMILIES)
        raise UserError(f"no slip systems are tabulated for the {lat.title or lat.prototype} lattice; "
                        f"known lattices: {known}")
    return lat.prototype


def _norm_name(s):
    return "".join(str(s).lower().split()).replace("_", "-")


def family_names(crystal):
    """Every slip family the crystal's lattice has (first the default ones).

    >>> import crystalview as cv
    >>> family_names(cv.build("Mg"))
    ['basal', 'prismatic', 'pyramidal <a>', 'pyramidal <c+a>', 'pyramidal <c+a> 1st order']
    """
    return list(LATTICE_FAMILIES[_lattice_key(crystal)][0])


def _resolve_families(crystal, families):
    key = _lattice_key(crystal)
    have, default = LATTICE_FAMILIES[key]
    if families is None:
        return list(default)
    if isinstance(families, (str, SlipFamily)):
        families = [families]
    out = []
    for item in families:
        if isinstance(item, SlipFamily):
            item = item.name
        for part in [p for p in str(item).split(",") if p.strip()] or [str(item)]:
            name = _match_family(part, have, key)
            if name not in out:
                out.append(name)
    if not out:
        raise UserError(f"no slip family given; {key} has: {', '.join(have)}")
    return out


def _match_family(text, have, key):
    want = _norm_name(text)
    if want in ("all", "*"):
        raise UserError("give family names, not 'all': leave the family out to get the default families")
    hits = []
    for name in have:
        f = FAMILIES[name]
        names = {_norm_name(name), _norm_name(f.notation)} | {_norm_name(a) for a in f.aliases}
        if want in names:
            return name
        # a plane family alone, e.g. "{112}" or "{10-11}"
        if want == _norm_name(format_indices(f.plane, "plane", True)):
            hits.append(name)
    if len(hits) == 1:
        return hits[0]
    if len(hits) > 1:
        raise UserError(f"slip family '{text}' is ambiguous in {key}: it could be {' or '.join(hits)}; "
                        f"give the full name")
    all_names = [n for n in FAMILIES]
    if any(want in {_norm_name(n), _norm_name(FAMILIES[n].notation)} | {_norm_name(a) for a in FAMILIES[n].aliases}
           for n in all_names):
        raise UserError(f"the {key} lattice has no '{text}' slip family; it has: {', '.join(have)}")
    raise UserError(f"unknown slip family '{text}'; {key} has: {', '.join(have)}")


# ------------------------------------------------------------------ symmetry
def _cubic_ops():
    ops = []
    for perm in itertools.permutations(range(3)):
        for signs in itertools.product((1, -1), repeat=3):
            ops.append(lambda v, p=perm, s=signs: tuple(s[i] * v[p[i]] for i in range(3)))
    return ops


def _hex_ops():
    """6/mmm on four-index (hkil) / [uvtw]: permutations of the first three
    indices, their common sign, and the sign of the last (24 operations)."""
    ops = []
    for perm in itertools.permutations(range(3)):
        for s in (1, -1):
            for sl in (1, -1):
                ops.append(lambda v, p=perm, s=s, sl=sl: (s * v[p[0]], s * v[p[1]], s * v[p[2]], sl * v[3]))
    return ops


def _canon_sign(v):
    for x in v:
        if x != 0:
            return tuple(v) if x > 0 else tuple(-y for y in v)
    return tuple(v)


def _family_indices(fam):
    """[(plane, direction)] index tuples of every system of a family, sorted."""
    ops = _cubic_ops() if fam.symmetry == "cubic" else _hex_ops()
    seen = set()
    for op in ops:
        p = _canon_sign(op(fam.plane))
        d = _canon_sign(op(fam.direction))
        seen.add((p, d))
    out = sorted(seen, key=lambda pd: (tuple(-x for x in pd[0]), tuple(-x for x in pd[1])))
    if len(out) != fam.expected:   # pragma: no cover - a wrong table is our fault
        raise RuntimeError(f"slip family {fam.name} generated {len(out)} systems, expected {fam.expected}")
    return out


# ------------------------------------------------------------------ systems
@dataclass(frozen=True)
class SlipSystem:
    """One slip system.  ``plane`` / ``direction`` are index strings (four-index
    for hexagonal lattices); ``unit_normal`` / ``unit_direction`` are Cartesian
    unit vectors in the crystal frame; ``burgers_vector`` is the shortest lattice
    translation along the slip direction (a superlattice translation in an
    ordered lattice) and ``burgers_length_A`` its length.

    >>> import crystalview as cv
    >>> s = slip_systems(cv.build("Cu"))[0]
    >>> s.family, s.plane, s.direction, s.burgers_vector, round(s.burgers_length_A, 4)
    ('{111}<110>', '(111)', '[10-1]', '1/2[10-1]', 2.5561)
    """

    family: str
    plane: str
    direction: str
    plane_indices: tuple
    direction_indices: tuple
    unit_normal: np.ndarray = field(repr=False, compare=False)
    unit_direction: np.ndarray = field(repr=False, compare=False)
    burgers_vector: str = ""
    burgers_length_A: float = 0.0

    def as_dict(self):
        return {"family": self.family, "plane": self.plane, "direction": self.direction,
                "unit_normal": [float(x) for x in self.unit_normal],
                "unit_direction": [float(x) for x in self.unit_direction],
                "burgers_vector": self.burgers_vector, "burgers_length_A": self.burgers_length_A}


def _three(values, kind):
    if len(values) == 4:
        return mb_to_miller_direction(values) if kind == "direction" else mb_to_miller_plane(values)
    return tuple(values)


def _translation_fraction(lat, uvw3):
    """Smallest f in (0, 1] with f*[uvw] a translation of the conventional basis
    (species included), for a gcd-reduced 3-index direction."""
    basis = np.asarray(lat.basis_frac, float)
    species = list(lat.basis_symbols)
    v = np.asarray(uvw3, float)
    cands = sorted({Fraction(k, n) for n in range(1, 7) for k in range(1, n + 1)})
    for f in cands:
        shifted = basis + float(f) * v
        ok = True
        for i, b in enumerate(shifted):
            diff = basis - b
            diff -= np.round(diff)
            hit = np.where(np.all(np.abs(diff) < 1e-6, axis=1))[0]
            if not any(species[j] == species[i] for j in hit):
                ok = False
                break
        if ok:
            return f
    return Fraction(1)


def _fmt_fraction_vector(f, values, kind="direction"):
    body = format_indices(values, kind)
    if f == 1:
        return body
    return f"{f.numerator}/{f.denominator}{body}" if f.numerator == 1 else f"{f}{body}"


def _burgers(lat, dir_indices):
    uvw = _gcd_reduce(_three(dir_indices, "direction"))
    f = _translation_fraction(lat, uvw)
    length = float(np.linalg.norm(float(f) * (np.asarray(uvw, float) @ np.asarray(lat.cell, float))))
    if len(dir_indices) == 4:
        # f[uvw] in four-index components: U=(2u-v)/3, V=(2v-u)/3, T=-(u+v)/3, W=w
        u, v, w = uvw
        comps = [f * Fraction(2 * u - v, 3), f * Fraction(2 * v - u, 3), f * Fraction(-(u + v), 3), f * w]
        ref = tuple(dir_indices)
        k = next(i for i, x in enumerate(ref) if x != 0)
        ratio = comps[k] / ref[k]
        return _fmt_fraction_vector(ratio, ref), length
    return _fmt_fraction_vector(f, tuple(dir_indices)), length


def slip_systems(crystal, families=None):
    """Slip systems of the crystal's lattice.

    ``families``: None for the lattice's usual families, or names such as
    ``"{111}<110>"``, ``"octahedral"``, ``"{112}<111>"``, ``"basal"``,
    ``"prismatic"``, ``"pyramidal <a>"``, ``"pyramidal <c+a>"``,
    ``"pyramidal <c+a> 1st order"`` (a plane family alone, ``"{112}"``, works
    where it is unambiguous).  Returns a list of :class:`SlipSystem`.

    >>> import crystalview as cv
    >>> len(slip_systems(cv.build("Cu"))), len(slip_systems(cv.build("Fe"), "{112}<111>"))
    (12, 12)
    """
    names = _resolve_families(crystal, families)
    lat = crystal.lattice
    cell = np.asarray(lat.cell, float)
    out = []
    for name in names:
        fam = FAMILIES[name]
        for p, d in _family_indices(fam):
            n = plane_normal(cell, _three(p, "plane"))
            v = direction_vector(cell, _three(d, "direction"))
            n = n / np.linalg.norm(n)
            v = v / np.linalg.norm(v)
            if abs(float(np.dot(n, v))) > 1e-9:   # pragma: no cover - the tables are checked by tests
                raise RuntimeError(f"direction {d} does not lie in plane {p}")
            bv, blen = _burgers(lat, d)
            out.append(SlipSystem(name, format_indices(p, "plane"), format_indices(d, "direction"),
                                  tuple(p), tuple(d), n, v, bv, blen))
    return out


# ------------------------------------------------------------------ loading axis
def load_axis(crystal, axis, cartesian=False):
    """(unit Cartesian vector, label) for a loading axis given as indices
    ('[001]', '001', '[2-1-13]', (0, 0, 1)) or, with cartesian=True, a
    Cartesian vector in the crystal frame.

    >>> import crystalview as cv
    >>> v, label = load_axis(cv.build("Cu"), "[110]")
    >>> v.round(4).tolist(), label
    ([0.7071, 0.7071, 0.0], '[110]')
    """
    lat = crystal.lattice
    if cartesian:
        v = np.asarray(axis, dtype=float).reshape(-1)
        if v.shape != (3,) or not np.all(np.isfinite(v)):
            raise UserError(f"a Cartesian axis needs three finite numbers, not {axis!r}")
        n = float(np.linalg.norm(v))
        if n < 1e-12:
            raise UserError("the loading axis is zero; give a direction such as [001]")
        return v / n, "(" + ", ".join(f"{x:.4g}" for x in v) + ") cartesian"
    ind = as_indices(axis, "direction", what="the loading axis")
    if ind.four and not lat.is_hexagonal:
        raise UserError(f"four-index axis {ind} is only for hexagonal crystals; give three indices, e.g. [001]")
    v = direction_vector(lat.cell, ind.three().values)
    return v / np.linalg.norm(v), format_indices(ind.values, "direction")


# ------------------------------------------------------------------ Schmid factors
@dataclass
class SchmidResult:
    """Schmid factor (and, with a stress or CRSS, resolved shear and yield stress) of one slip system.

    >>> import crystalview as cv
    >>> r = schmid_factors(cv.build("Cu"), "[001]", stress=100, crss=1.0)[0]
    >>> r.plane, r.direction, round(r.schmid_factor, 4), round(r.resolved_shear_stress_MPa)
    ('(111)', '[10-1]', 0.4082, 41)
    """
    family: str
    plane: str
    direction: str
    schmid_factor: float
    phi_deg: float          # angle between the loading axis and the plane normal (0-90)
    lambda_deg: float       # angle between the loading axis and the slip direction (0-90)
    most_favoured: bool = False
    resolved_shear_stress_MPa: float | None = None
    crss_MPa: float | None = None
    yield_stress_MPa: float | None = None      # CRSS / m (Schmid's law); None where m = 0
    burgers_vector: str = ""
    burgers_length_A: float = 0.0
    system: SlipSystem | None = field(default=None, repr=False)

    def as_dict(self):
        d = {"family": self.family, "plane": self.plane, "direction": self.direction,
             "schmid_factor": round(self.schmid_factor, 6), "phi_deg": round(self.phi_deg, 4),
             "lambda_deg": round(self.lambda_deg, 4), "most_favoured": self.most_favoured,
             "burgers_vector": self.burgers_vector, "burgers_length_A": round(self.burgers_length_A, 6)}
        if self.resolved_shear_stress_MPa is not None:
            d["resolved_shear_stress_MPa"] = round(self.resolved_shear_stress_MPa, 6)
        if self.crss_MPa is not None:
            d["crss_MPa"] = self.crss_MPa
            d["yield_stress_MPa"] = None if self.yield_stress_MPa is None else round(self.yield_stress_MPa, 6)
        return d


def _number(x, what, positive=False):
    try:
        v = float(x)
    except (TypeError, ValueError):
        raise UserError(f"{what} '{x}' is not a number; give MPa, e.g. 100") from None
    if not math.isfinite(v):
        raise UserError(f"{what} must be a finite number of MPa, not {x}")
    if positive and v <= 0:
        raise UserError(f"{what} must be above zero (MPa), not {x}")
    return v


def _crss_table(crss, names, key):
    """CRSS argument -> {family: MPa}.  A number applies to every family; a
    dict names families (with the same names --family takes)."""
    if crss is None:
        return {}
    if isinstance(crss, dict):
        have = LATTICE_FAMILIES[key][0]
        out = {}
        for k, v in crss.items():
            out[_match_family(k, have, key)] = _number(v, f"CRSS of {k}", positive=True)
        return out
    v = _number(crss, "CRSS", positive=True)
    return {n: v for n in names}


def schmid_factors(crystal, axis, families=None, stress=None, crss=None, cartesian=False):
    """Schmid factor of every slip system for a uniaxial load along ``axis``,
    highest first (ties keep the table order).

    ``stress`` (MPa, negative for compression) adds the resolved shear stress
    m*|stress|; ``crss`` (MPa; a number, or a dict family -> MPa) adds the
    yield stress CRSS/m that Schmid's law predicts for each system.  Every
    system sharing the highest Schmid factor is marked ``most_favoured``.

    >>> import crystalview as cv
    >>> res = schmid_factors(cv.build("Cu"), "[123]")
    >>> len(res), res[0].plane, res[0].direction, round(res[0].schmid_factor, 4)
    (12, '(1-1-1)', '[101]', 0.4666)
    """
    key = _lattice_key(crystal)
    t, _label = load_axis(crystal, axis, cartesian=cartesian)
    systems = slip_systems(crystal, families)
    names = list(dict.fromkeys(s.family for s in systems))
    sig = None if stress is None else _number(stress, "stress")
    table = _crss_table(crss, names, key)
    res = []
    for s in systems:
        cp = float(np.dot(s.unit_normal, t))
        cl = float(np.dot(s.unit_direction, t))
        m = abs(cp * cl)
        if m < 1e-12:
            m = 0.0
        r = SchmidResult(s.family, s.plane, s.direction, m,
                         math.degrees(math.acos(min(1.0, abs(cp)))),
                         math.degrees(math.acos(min(1.0, abs(cl)))),
                         burgers_vector=s.burgers_vector, burgers_length_A=s.burgers_length_A, system=s)
        if sig is not None:
            r.resolved_shear_stress_MPa = m * abs(sig)
        if s.family in table:
            r.crss_MPa = table[s.family]
            r.yield_stress_MPa = table[s.family] / m if m > 0 else None
        res.append(r)
    order = sorted(range(len(res)), key=lambda i: (-round(res[i].schmid_factor, 9), i))
    res = [res[i] for i in order]
    if res:
        top = res[0].schmid_factor
        for r in res:
            r.most_favoured = top > 0 and abs(r.schmid_factor - top) < 1e-9
    return res


def first_to_yield(results):
    """The result with the lowest predicted yield stress (Schmid's law), or None.

    >>> import crystalview as cv
    >>> r = first_to_yield(schmid_factors(cv.build("Cu"), "[123]", crss=1.0))
    >>> r.plane, r.direction, round(r.yield_stress_MPa, 3)
    ('(1-1-1)', '[101]', 2.143)
    >>> first_to_yield(schmid_factors(cv.build("Cu"), "[123]")) is None
    True
    """
    ok = [r for r in results if r.yield_stress_MPa is not None]
    return min(ok, key=lambda r: r.yield_stress_MPa) if ok else None


# ------------------------------------------------------------------ polycrystal numbers
def independent_slip_systems(crystal, families=None):
    """Number of independent slip systems: the rank of the systems' symmetric
    shear tensors (d n^T + n d^T)/2 in the 5-dimensional space of volume-
    preserving strains.  Five are needed for a grain to take any shape change
    (von Mises criterion).

    >>> import crystalview as cv
    >>> independent_slip_systems(cv.build("Cu"))
    5
    >>> independent_slip_systems(cv.build("Mg"), "basal")
    2
    """
    systems = slip_systems(crystal, families)
    if not systems:
        return 0
    rows = []
    for s in systems:
        p = 0.5 * (np.outer(s.unit_direction, s.unit_normal) + np.outer(s.unit_normal, s.unit_direction))
        rows.append([p[0, 0], p[1, 1], p[2, 2], p[0, 1], p[0, 2], p[1, 2]])
    return int(np.linalg.matrix_rank(np.array(rows), tol=1e-8))


def taylor_factor(crystal, families=None):
    """Taylor factor M of a random polycrystal (sigma_y ~ M * CRSS), as a
    reported constant with its source, or value None where no single number
    applies.  Returns dict(value, basis, source, independent_systems).

    >>> import crystalview as cv
    >>> t = taylor_factor(cv.build("Cu"))
    >>> t["value"], t["independent_systems"]
    (3.06, 5)
    """
    key = _lattice_key(crystal)
    names = _resolve_families(crystal, families)
    nind = independent_slip_systems(crystal, names)
    base = {"value": None, "basis": ", ".join(names), "source": "", "independent_systems": nind}
    if nind < 5:
        base["source"] = (f"none: only {nind} independent slip systems, fewer than the five "
                          f"the von Mises criterion needs; grains cannot deform compatibly by slip alone")
        return base
    if set(names) == {"{111}<110>"}:
        base["value"], base["source"] = TAYLOR_FACTORS["octahedral"]
    elif set(names) == {"{110}<111>"}:
        base["value"], base["source"] = TAYLOR_FACTORS["bcc110"]
    elif set(names) == set(_BCC):
        base["value"], base["source"] = TAYLOR_FACTORS["pencil"]
    else:
        base["source"] = (f"no tabulated random-texture Taylor factor for {key} with these families; "
                          f"it depends on the CRSS ratios of the families" + (" (and on c/a)" if key == "hcp" else ""))
    return base


def slip_report(crystal, axis, families=None, stress=None, crss=None):
    """Everything ``slip --json`` prints, as one plain dict: the crystal, the
    load axis, every system (highest Schmid factor first), the highest factor
    and how many systems share it, the independent systems, the Taylor factor
    with its source, the single-crystal yield that Schmid's law predicts
    (with ``crss``), and the caution whenever a stress or yield is reported.

    >>> import crystalview as cv
    >>> r = slip_report(cv.build("Cu"), "[001]")
    >>> r["axis"], len(r["systems"]), round(r["highest_schmid_factor"], 4), r["systems_at_highest"]
    ('[001]', 12, 0.4082, 8)
    >>> r["taylor_factor"]["value"], r["independent_slip_systems"]
    (3.06, 5)
    """
    from ..about import CAUTION

    res = schmid_factors(crystal, axis, families=families, stress=stress, crss=crss)
    _t, label = load_axis(crystal, axis)
    fams = list(dict.fromkeys(r.family for r in res))
    lat = crystal.lattice
    tf = taylor_factor(crystal, fams) if fams else None
    first = first_to_yield(res)
    out = {
        "name": crystal.metadata.get("name") or "/".join(lat.elements),
        "structure": lat.title,
        "axis": label,
        "families": fams,
        "systems": [r.as_dict() for r in res],
        "highest_schmid_factor": res[0].schmid_factor if res else None,
        "systems_at_highest": sum(r.most_favoured for r in res),
        "independent_slip_systems": independent_slip_systems(crystal, fams) if fams else 0,
        "taylor_factor": tf,
        "first_to_yield": None if first is None else {
            "family": first.family, "plane": first.plane, "direction": first.direction,
            "schmid_factor": first.schmid_factor, "crss_MPa": first.crss_MPa,
            "yield_stress_MPa": first.yield_stress_MPa},
    }
    if stress is not None or crss:
        out["caution"] = CAUTION
    return out


# ------------------------------------------------------------------ figure overlay
def slip_overlay(crystal, axis, families=None, cartesian=False):
    """What a figure needs to draw the most favoured slip system for a load
    along ``axis``: {"planes": [plane], "directions": [direction],
    "load_axis": axis string, "label": "(111)[01-1]  m = 0.408",
    "schmid_factor": m, "ties": how many systems share it}.

    >>> import crystalview as cv
    >>> o = slip_overlay(cv.build("Cu"), "[001]")
    >>> o["label"], o["ties"]
    ('(111)[10-1]  m = 0.408', 8)
    """
    res = schmid_factors(crystal, axis, families=families, cartesian=cartesian)
    _t, label = load_axis(crystal, axis, cartesian=cartesian)
    if not res:
        raise UserError("no slip systems to draw")
    top = res[0]
    ties = sum(r.most_favoured for r in res)
    return {"planes": [top.plane], "directions": [top.direction], "load_axis": label,
            "label": f"{top.plane}{top.direction}  m = {top.schmid_factor:.3f}",
            "schmid_factor": top.schmid_factor, "family": top.family, "ties": max(ties, 1)}
