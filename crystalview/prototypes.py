"""Conventional cells of the lattice types.

Positions are fractional coordinates of the conventional cell, taken from the
Wyckoff positions of International Tables for Crystallography Vol. A for the
space group named beside each type.  ``sublattice`` says which of the
``elements`` of a two-species type sits on each position.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import UserError, suggest

IDEAL_C_OVER_A = math.sqrt(8.0 / 3.0)


@dataclass(frozen=True)
class Prototype:
    """A lattice type: its conventional-cell basis (fractional), space group and Wyckoff positions.

    >>> p = prototype("bcc")
    >>> p.title, p.space_group_symbol, len(p.basis)
    ('body-centred cubic', 'Im-3m', 2)
    >>> p.cell(2.8665)[0].tolist()
    [2.8665, 0.0, 0.0]
    """
    name: str
    title: str
    family: str            # "cubic" | "hexagonal" | "tetragonal"
    basis: tuple           # fractional positions
    sublattice: tuple      # species index per position
    space_group: int
    space_group_symbol: str
    wyckoff: str
    n_species: int = 1
    default_c_over_a: float | None = None

    @property
    def frac(self):
        return np.array(self.basis, dtype=float)

    @property
    def needs_c(self):
        return self.family in ("hexagonal", "tetragonal")

    def cell(self, a, c=None):
        """Conventional cell (rows are lattice vectors, A)."""
        if self.family == "cubic":
            return np.diag([a, a, a]).astype(float)
        if c is None:
            c = a * (self.default_c_over_a or 1.0)
        if self.family == "tetragonal":
            return np.diag([a, a, c]).astype(float)
        # hexagonal: a1 along x, a2 at 120 degrees, c along z (common practice)
        return np.array([[a, 0.0, 0.0], [-a / 2.0, a * math.sqrt(3.0) / 2.0, 0.0], [0.0, 0.0, c]])


_H = 1.0 / 2.0
PROTOTYPES = {
    "sc": Prototype("sc", "simple cubic", "cubic", ((0, 0, 0),), (0,), 221, "Pm-3m", "1a"),
    "bcc": Prototype("bcc", "body-centred cubic", "cubic", ((0, 0, 0), (_H, _H, _H)), (0, 0),
                     229, "Im-3m", "2a"),
    "fcc": Prototype("fcc", "face-centred cubic", "cubic",
                     ((0, 0, 0), (0, _H, _H), (_H, 0, _H), (_H, _H, 0)), (0, 0, 0, 0),
                     225, "Fm-3m", "4a"),
    "hcp": Prototype("hcp", "hexagonal close-packed", "hexagonal",
                     ((1 / 3, 2 / 3, 1 / 4), (2 / 3, 1 / 3, 3 / 4)), (0, 0),
                     194, "P6_3/mmc", "2c", default_c_over_a=IDEAL_C_OVER_A),
    "hex": Prototype("hex", "simple hexagonal", "hexagonal", ((0, 0, 0),), (0,), 191, "P6/mmm", "1a",
                     default_c_over_a=1.0),
    "diamond": Prototype("diamond", "diamond cubic", "cubic",
                         ((0, 0, 0), (0, _H, _H), (_H, 0, _H), (_H, _H, 0),
                          (0.25, 0.25, 0.25), (0.25, 0.75, 0.75), (0.75, 0.25, 0.75), (0.75, 0.75, 0.25)),
                         (0,) * 8, 227, "Fd-3m", "8a (origin choice 1)"),
    "bct": Prototype("bct", "body-centred tetragonal", "tetragonal", ((0, 0, 0), (_H, _H, _H)), (0, 0),
                     139, "I4/mmm", "2a", default_c_over_a=1.0),
    "B2": Prototype("B2", "B2 (ordered body-centred cubic, CsCl type)", "cubic",
                    ((0, 0, 0), (_H, _H, _H)), (0, 1), 221, "Pm-3m", "1a + 1b", n_species=2),
    "L1_2": Prototype("L1_2", "L1_2 (ordered face-centred cubic, Cu3Au type)", "cubic",
                      ((0, _H, _H), (_H, 0, _H), (_H, _H, 0), (0, 0, 0)), (0, 0, 0, 1),
                      221, "Pm-3m", "3c + 1a", n_species=2),
    "L1_0": Prototype("L1_0", "L1_0 (ordered face-centred tetragonal, CuAu type)", "tetragonal",
                      ((0, 0, 0), (_H, _H, 0), (0, _H, _H), (_H, 0, _H)), (0, 0, 1, 1),
                      123, "P4/mmm", "1a + 1c + 2e (face-centred setting)", n_species=2,
                      default_c_over_a=1.0),
}

_ALIASES = {
    "simple-cubic": "sc", "simple_cubic": "sc", "cubic": "sc", "primitive-cubic": "sc",
    "body-centred-cubic": "bcc", "body-centered-cubic": "bcc",
    "body-centred-tetragonal": "bct", "body-centered-tetragonal": "bct",
    "face-centred-cubic": "fcc", "face-centered-cubic": "fcc",
    "hexagonal-close-packed": "hcp", "simple-hexagonal": "hex", "sh": "hex",
    "diamond-cubic": "diamond", "dc": "diamond",
    "b2": "B2", "cscl": "B2", "l1_2": "L1_2", "l12": "L1_2", "l1_0": "L1_0", "l10": "L1_0",
}


def lattice_names():
    """The lattice type names crystalview builds ("fcc", "bcc", "hcp", ...).

    >>> lattice_names()
    ['sc', 'bcc', 'fcc', 'hcp', 'hex', 'diamond', 'bct', 'B2', 'L1_2', 'L1_0']
    """
    return list(PROTOTYPES)


def is_lattice(name):
    """True when ``name`` (or one of its aliases) is a lattice type.

    >>> is_lattice("face-centred-cubic"), is_lattice("Cu")
    (True, False)
    """
    return _key(name) is not None


def _key(name):
    n = str(name).strip()
    if n in PROTOTYPES:
        return n
    low = n.lower()
    if low in PROTOTYPES:
        return low
    return _ALIASES.get(low)


def prototype(name) -> Prototype:
    """The :class:`Prototype` of a lattice type name or alias (a UserError otherwise).

    >>> prototype("hcp").wyckoff, prototype("dc").name
    ('2c', 'diamond')
    """
    k = _key(name)
    if k is None:
        raise UserError(
            f"unknown lattice type '{name}'{suggest(name, list(PROTOTYPES))}; "
            f"known types: {', '.join(PROTOTYPES)}"
        )
    return PROTOTYPES[k]
