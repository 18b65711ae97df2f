"""Element, phase and compound data.

Lattice parameters, radii, electronegativities and valences come from
``data/elements.toml`` (each value with its source); atomic masses and numbers
come from the ``periodictable`` package.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass, field
from importlib import resources

try:
    import tomllib
except ModuleNotFoundError:  # Python < 3.11
    import tomli as tomllib

from .errors import UserError, suggest


@functools.lru_cache(maxsize=None)
def _data():
    text = resources.files("crystalview").joinpath("data/elements.toml").read_text("utf-8")
    return tomllib.loads(text)


def _source(entry, fieldname):
    d = _data()
    key = entry.get(f"{fieldname}_source") or entry.get("source") or d["field_sources"].get(fieldname)
    return d["sources"].get(key, key)


@dataclass(frozen=True)
class Phase:
    """One phase of an element: its lattice type and lattice parameters (A), with their source.

    >>> p = phase("Fe", "gamma")
    >>> p.lattice, p.a
    ('fcc', 3.6467)
    """
    element: str
    name: str
    lattice: str
    a: float
    c: float | None
    temperature_K: float | None
    source: str
    note: str = ""


@dataclass(frozen=True)
class Element:
    """The data for one metal: radius, electronegativity, valence and its phases.

    >>> fe = element("Fe")
    >>> fe.reference_phase, sorted(fe.phases)
    ('alpha', ['alpha', 'delta', 'gamma'])
    """
    symbol: str
    metallic_radius: float | None
    electronegativity: float | None
    valence: int | None
    reference_phase: str | None
    phases: dict = field(default_factory=dict)
    sources: dict = field(default_factory=dict)
    reference_note: str = ""

    @property
    def phase(self):
        if self.reference_phase is None:
            known = f"; its phases here: {', '.join(self.phases)}" if self.phases else ""
            raise UserError(f"{self.symbol}: {self.reference_note or 'no built-in reference phase'}{known}")
        return self.phases[self.reference_phase]


@dataclass(frozen=True)
class Interstitial:
    """A small interstitial-forming atom (H, B, C, N, O) and its radius (A).

    >>> c = interstitial("C")
    >>> c.symbol, c.radius
    ('C', 0.77)
    """
    symbol: str
    radius: float
    source: str
    covalent_radius: float | None = None


@dataclass(frozen=True)
class Compound:
    """An ordered intermetallic compound: its lattice type, elements and lattice parameters.

    >>> ni3al = compound("Ni3Al")
    >>> ni3al.name, ni3al.lattice, ni3al.elements
    ('Ni3Al', 'L1_2', ('Ni', 'Al'))
    """
    name: str
    lattice: str
    elements: tuple
    a: float
    c: float | None
    source: str
    note: str = ""


def metal_symbols():
    """Symbols of every metal in the data file.

    >>> "Cu" in metal_symbols(), len(metal_symbols()) > 20
    (True, True)
    """
    return sorted(_data()["elements"])


def interstitial_symbols():
    """Symbols of the interstitial formers in the data file.

    >>> interstitial_symbols()
    ['B', 'C', 'H', 'N', 'O']
    """
    return sorted(_data()["interstitials"])


def compound_names():
    """Names of the ordered compounds in the data file.

    >>> compound_names()
    ['Cu3Au', 'CuAu', 'CuZn', 'FeAl', 'FePt', 'Ni3Al', 'NiAl', 'TiAl']
    """
    return sorted(_data()["compounds"])


@functools.lru_cache(maxsize=None)
def element(symbol) -> Element:
    """The data for one metal, by symbol (case as usual: 'Fe').

    >>> element("Cu").metallic_radius
    1.28
    """
    d = _data()["elements"]
    sym = _canon(symbol)
    if sym not in d:
        known = ", ".join(metal_symbols())
        raise UserError(
            f"no lattice data for element '{symbol}'{suggest(symbol, list(d))}; "
            f"known elements: {known}"
        )
    e = d[sym]
    phases = {}
    for name, p in e.get("phases", {}).items():
        phases[name] = Phase(
            element=sym, name=name, lattice=p["lattice"], a=float(p["a"]),
            c=float(p["c"]) if "c" in p else None,
            temperature_K=p.get("temperature_K"), source=_source(p, "a"), note=p.get("note", ""),
        )
    sources = {f: _source(e, f) for f in ("metallic_radius", "electronegativity", "valence")}
    return Element(
        symbol=sym, metallic_radius=e.get("metallic_radius"),
        electronegativity=e.get("electronegativity"), valence=e.get("valence"),
        reference_phase=e.get("reference_phase"), phases=phases, sources=sources,
        reference_note=e.get("reference_phase_note", ""),
    )


def phase_alias(symbol, name):
    """What a trade name of a phase means for an element: a phase key, or
    ('compound', NAME), or None when the name is no alias.  Refuses, in one
    line, a phase that is not a built-in lattice type.

    >>> phase_alias("Fe", "Austenite"), phase_alias("Ni", "gamma-prime")
    ('gamma', ('compound', 'Ni3Al'))
    """
    table = _data().get("phase_aliases", {}).get(_canon(symbol), {})
    key = str(name).strip().lower().replace("_", "-").replace(" ", "-")
    target = table.get(key)
    if target is None:
        return None
    if target.startswith("refuse:"):
        raise UserError(f"{_canon(symbol)} --phase {name}: {target[len('refuse:'):]}")
    if target.startswith("compound:"):
        return ("compound", target[len("compound:"):])
    return target


def phase(symbol, name=None) -> Phase:
    """A named phase of an element, or its reference phase.

    >>> phase("Ti").lattice, phase("Ti", "beta").lattice
    ('hcp', 'bcc')
    """
    e = element(symbol)
    if name is None:
        return e.phase
    key = str(name).lower().strip()
    aliases = {"α": "alpha", "β": "beta", "γ": "gamma", "δ": "delta", "ε": "epsilon"}
    key = aliases.get(key, key)
    if key not in e.phases:
        alias = phase_alias(e.symbol, name)
        if isinstance(alias, str) and alias in e.phases:
            return e.phases[alias]
        if alias == "martensite":
            raise UserError(f"{e.symbol} martensite is body-centred tetragonal with c/a = 1 + 0.045 x wt% C "
                            f"(Roberts 1953); give its carbon with --alloy, e.g. --phase martensite --alloy Fe-0.4C")
        trade = list(_data().get("phase_aliases", {}).get(e.symbol, {}))
        raise UserError(
            f"{e.symbol} has no phase '{name}'{suggest(name, list(e.phases) + trade)}; "
            f"known phases of {e.symbol}: {', '.join(list(e.phases) + trade)}"
        )
    return e.phases[key]


@functools.lru_cache(maxsize=None)
def interstitial(symbol) -> Interstitial:
    """The data for one interstitial former, by symbol ('C', 'N', ...).

    >>> interstitial("N").radius
    0.72
    """
    d = _data()["interstitials"]
    sym = _canon(symbol)
    if sym not in d:
        raise UserError(
            f"no interstitial radius for '{symbol}'{suggest(symbol, list(d))}; "
            f"known interstitial solutes: {', '.join(sorted(d))}"
        )
    e = d[sym]
    return Interstitial(sym, float(e["radius"]), _source(e, "radius"), e.get("covalent_radius"))


@functools.lru_cache(maxsize=None)
def compound(name) -> Compound:
    """The data for one ordered compound, by name.

    >>> compound("NiAl").lattice
    'B2'
    """
    d = _data()["compounds"]
    if name not in d:
        raise UserError(f"unknown compound '{name}'{suggest(name, list(d))}; known: {', '.join(sorted(d))}")
    e = d[name]
    return Compound(name, e["lattice"], tuple(e["elements"]), float(e["a"]),
                    float(e["c"]) if "c" in e else None, _source(e, "a"), e.get("note", ""))


def is_compound(name):
    """True when ``name`` is one of the compounds in the data file.

    >>> is_compound("NiAl"), is_compound("Ni")
    (True, False)
    """
    return name in _data()["compounds"]


def _canon(symbol):
    s = str(symbol).strip()
    return s[:1].upper() + s[1:].lower()


#: Element symbols by atomic number (1-118), the IUPAC names; held here so a symbol's number needs no
#: import (periodictable, which gives the masses, takes 25 ms to load); the suite checks it against periodictable.
SYMBOLS = (
    "H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne", "Na", "Mg", "Al", "Si", "P", "S", "Cl", "Ar", "K",
    "Ca", "Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn", "Ga", "Ge", "As", "Se", "Br", "Kr", "Rb",
    "Sr", "Y", "Zr", "Nb", "Mo", "Tc", "Ru", "Rh", "Pd", "Ag", "Cd", "In", "Sn", "Sb", "Te", "I", "Xe", "Cs",
    "Ba", "La", "Ce", "Pr", "Nd", "Pm", "Sm", "Eu", "Gd", "Tb", "Dy", "Ho", "Er", "Tm", "Yb", "Lu", "Hf",
    "Ta", "W", "Re", "Os", "Ir", "Pt", "Au", "Hg", "Tl", "Pb", "Bi", "Po", "At", "Rn", "Fr", "Ra", "Ac", "Th",
    "Pa", "U", "Np", "Pu", "Am", "Cm", "Bk", "Cf", "Es", "Fm", "Md", "No", "Lr", "Rf", "Db", "Sg", "Bh", "Hs",
    "Mt", "Ds", "Rg", "Cn", "Nh", "Fl", "Mc", "Lv", "Ts", "Og",
)
_NUMBER = {sym: z for z, sym in enumerate(SYMBOLS, 1)}


@functools.lru_cache(maxsize=None)
def atomic_number(symbol) -> int:
    """Atomic number of an element symbol.

    >>> atomic_number("Fe")
    26
    """
    sym = _canon(symbol)
    z = _NUMBER.get(sym)
    if z is None:
        raise UserError(f"'{symbol}' is not a chemical element symbol{suggest(symbol, _all_symbols())}")
    return z


@functools.lru_cache(maxsize=None)
def _all_symbols():
    return list(SYMBOLS)


@functools.lru_cache(maxsize=None)
def symbol_of(number) -> str:
    """Element symbol of an atomic number.

    >>> symbol_of(29)
    'Cu'
    """
    z = int(number)
    if not 1 <= z <= len(SYMBOLS):
        raise UserError(f"atomic number {number} is not one of 1-{len(SYMBOLS)}")
    return SYMBOLS[z - 1]


@functools.lru_cache(maxsize=None)
def atomic_mass(symbol) -> float:
    """Standard atomic weight (g/mol), from periodictable.

    >>> round(atomic_mass("Cu"), 3)
    63.546
    """
    import periodictable

    return float(periodictable.elements[atomic_number(symbol)].mass)


def solute_radius(symbol):
    """(radius in A, kind, source) for a solute: interstitial radius for the
    small interstitial formers, CN12 metallic radius for metals.

    >>> solute_radius("C")[:2]
    (0.77, 'interstitial')
    >>> solute_radius("Ni")[:2]
    (1.24, 'substitutional')
    """
    sym = _canon(symbol)
    if sym in _data()["interstitials"]:
        i = interstitial(sym)
        return i.radius, "interstitial", i.source
    if sym in _data()["elements"]:
        e = element(sym)
        if e.metallic_radius is not None:
            return e.metallic_radius, "substitutional", e.sources["metallic_radius"]
    raise UserError(
        f"no radius data for solute '{symbol}'; known interstitial solutes: "
        f"{', '.join(interstitial_symbols())}; known metals: {', '.join(metal_symbols())}"
    )


#: Non-metallic elements (common practice: the elements right of the
#: boron-astatine staircase, with hydrogen and the noble gases).
NON_METALS = frozenset("H He B C N O F Ne Si P S Cl Ar Ge As Se Br Kr Sb Te I Xe At Rn".split())
#: Small atoms that sit in the holes of metal lattices (interstitial formers).
INTERSTITIAL_FORMERS = frozenset("H B C N".split())
COVALENT_SOURCE = ("Cordero et al., Dalton Trans. (2008) 2832: covalent radii, as tabulated by the "
                   "periodictable package")


def covalent_radius(symbol):
    """Covalent radius (A) of any element up to Cm (Cordero et al. 2008, via periodictable).

    >>> covalent_radius("O")
    0.66
    """
    import periodictable

    r = getattr(periodictable.elements[atomic_number(symbol)], "covalent_radius", None)
    if r is None or not r > 0:
        raise UserError(f"no covalent radius is tabulated for {symbol}; give the structure's radii by hand "
                        f"(crystal.species_radii)")
    return float(r)


def bonding_of(composition):
    """'metallic' when the atoms are metals (with at most 30 % of the small
    interstitial formers H, B, C, N), else 'non-metallic' (oxides, halides,
    covalent solids); common practice.

    >>> bonding_of({"Fe": 4.0, "C": 1.0}), bonding_of({"Mg": 1.0, "O": 2.0, "H": 2.0})
    ('metallic', 'non-metallic')
    """
    total = sum(composition.values()) or 1.0
    small = sum(n for s, n in composition.items() if s in INTERSTITIAL_FORMERS)
    other = [s for s in composition if s in NON_METALS and s not in INTERSTITIAL_FORMERS]
    if not other and small / total <= 0.3:
        return "metallic"
    return "non-metallic"
