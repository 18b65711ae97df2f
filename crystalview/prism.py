"""The hexagonal prism: the cell engineers draw for hcp and simple hexagonal.

The primitive hexagonal cell (a rhombic prism, two atoms for hcp) is what the
crystal stores; the figure the trade expects is the hexagonal prism made of
three such cells: for hcp, 12 corner atoms and 2 face-centre atoms of one
close-packed A layer at the bottom and top, and the 3 atoms of the B layer
half way up inside it (17 atoms drawn, 6 atoms' worth in the prism:
12/6 + 2/2 + 3); for simple hexagonal, 12 corners and 2 face centres (14
drawn, 3 atoms' worth).  Common practice (any materials-science textbook's
hcp cell).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import UserError

#: The six in-plane lattice vectors of length a (hexagonal cell fractions).
_RING = np.array([[1, 0], [1, 1], [0, 1], [-1, 0], [-1, -1], [0, -1]], float)


@dataclass
class HexagonalPrism:
    """Atoms and outline of the hexagonal prism of a crystal's lattice.

    positions : (M, 3) Cartesian A, in the crystal's frame.
    symbols : M element symbols.
    place : M of "corner", "face centre", "inside".
    layer : M stacking-layer letters ("A" bottom and top, "B" inside).
    corners : (12, 3) the prism's corners (bottom six then top six), A.
    edges : (18, 2) index pairs into ``corners``.
    volume : prism volume, A^3 (3 primitive cells).
    atoms_in_prism : atoms' worth inside the prism (6 for hcp, 3 for simple hexagonal).

    >>> import crystalview as cv
    >>> p = hexagonal_prism(cv.build("Mg"))
    >>> p.corners.shape, p.edges.shape, p.layer.count("B")
    ((12, 3), (18, 2), 3)
    """

    positions: np.ndarray
    symbols: list
    place: list
    layer: list
    corners: np.ndarray
    edges: np.ndarray
    volume: float
    atoms_in_prism: float


def has_prism(crystal):
    """True when the crystal's lattice is hcp or simple hexagonal.

    >>> import crystalview as cv
    >>> has_prism(cv.build("Mg")), has_prism(cv.build("Cu"))
    (True, False)
    """
    lat = getattr(crystal, "lattice", None)
    return lat is not None and lat.prototype in ("hcp", "hex")


def hexagonal_prism(crystal):
    """The :class:`HexagonalPrism` of an hcp or simple hexagonal crystal.

    >>> import crystalview as cv
    >>> p = hexagonal_prism(cv.build("Mg"))
    >>> len(p.positions), p.place.count("corner"), p.place.count("face centre"), p.place.count("inside")
    (17, 12, 2, 3)
    >>> round(p.atoms_in_prism, 6)
    6.0
    """
    if not has_prism(crystal):
        lat = getattr(crystal, "lattice", None)
        raise UserError(f"the hexagonal prism is drawn for hcp and simple hexagonal crystals; this one is "
                        f"{lat.prototype if lat is not None else 'of no known lattice type'}")
    lat = crystal.lattice
    cell = np.asarray(lat.cell, float)
    origin = lat.origin_frac
    basis = np.asarray(lat.basis_frac, float)
    syms = list(lat.basis_symbols)
    a_atom = basis[0] + origin                      # the A-layer atom the prism is centred on
    frac, symbols, place, layer = [], [], [], []
    for dz in (0.0, 1.0):
        for r in _RING:
            frac.append(a_atom + [r[0], r[1], dz])
            symbols.append(syms[0])
            place.append("corner")
            layer.append("A")
    for dz in (0.0, 1.0):
        frac.append(a_atom + [0.0, 0.0, dz])
        symbols.append(syms[0])
        place.append("face centre")
        layer.append("A")
    if lat.prototype == "hcp":
        d = basis[1] - basis[0]                      # A -> B, e.g. (1/3, -1/3, 1/2)
        d[2] = d[2] % 1.0
        for shift in ((0, 0), (0, 1), (-1, 0), (1, 0), (0, -1), (1, 1), (-1, -1)):
            f = a_atom + d + [shift[0], shift[1], 0.0]
            inplane = (f - a_atom)[:2] @ cell[:2, :2]
            if abs(np.linalg.norm(inplane) - np.linalg.norm(cell[0]) / np.sqrt(3)) < 1e-6 * np.linalg.norm(cell[0]):
                frac.append(f)
                symbols.append(syms[1])
                place.append("inside")
                layer.append("B")
        if place.count("inside") != 3:
            raise UserError("this hcp cell does not have its B layer half way up; cannot draw the prism")
    frac = np.array(frac)
    corners = frac[:12] @ cell
    edges = [(k, (k + 1) % 6) for k in range(6)] + [(6 + k, 6 + (k + 1) % 6) for k in range(6)] + \
        [(k, k + 6) for k in range(6)]
    vol = 3.0 * abs(np.linalg.det(cell))
    worth = 3.0 * len(basis)
    return HexagonalPrism(frac @ cell, symbols, place, layer, corners, np.array(edges), vol, worth)
