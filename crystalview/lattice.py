"""Cell mathematics: Miller and Miller-Bravais indices, d-spacings, angles,
planar and linear densities.

Notation (common practice): ``[uvw]`` a direction, ``<uvw>`` a family of
directions, ``(hkl)`` a plane, ``{hkl}`` a family of planes; four-index
``[uvtw]`` / ``(hkil)`` for hexagonal cells.  A minus sign before a digit is a
bar: ``[1-10]``.  Digits may be separated by spaces or commas when an index is
larger than 9: ``[1,-1,10]``.
"""
from __future__ import annotations

import itertools
import math
import re
from dataclasses import dataclass
from functools import reduce

import numpy as np

from .errors import UserError

_BRACKETS = {"[": ("]", "direction", False), "<": (">", "direction", True),
             "(": (")", "plane", False), "{": ("}", "plane", True)}


@dataclass(frozen=True)
class Indices:
    """Parsed Miller (three) or Miller-Bravais (four) indices of a direction or plane.

    >>> ind = parse_indices("[2-1-10]")
    >>> ind.kind, ind.four, str(ind.three())
    ('direction', True, '[100]')
    """
    kind: str          # "direction" | "plane"
    values: tuple      # three or four ints
    family: bool = False

    @property
    def four(self):
        return len(self.values) == 4

    def three(self):
        """The three-index form (hexagonal four-index forms converted)."""
        if not self.four:
            return self
        if self.kind == "direction":
            return Indices("direction", mb_to_miller_direction(self.values), self.family)
        return Indices("plane", mb_to_miller_plane(self.values), self.family)

    def __str__(self):
        return format_indices(self.values, self.kind, self.family)


def format_indices(values, kind="direction", family=False):
    """Index text from whole numbers: '[1-10]', '{111}', commas when an index is over 9.

    >>> format_indices((1, -1, 0)), format_indices((1, 1, 1), "plane", family=True)
    ('[1-10]', '{111}')
    >>> format_indices((1, 0, 12), "plane")
    '(1,0,12)'
    """
    o, c = {("direction", False): "[]", ("direction", True): "<>",
            ("plane", False): "()", ("plane", True): "{}"}[(kind, family)]
    vals = [int(v) for v in values]
    if all(-9 <= v <= 9 for v in vals):
        body = "".join(str(v) for v in vals)
    else:
        body = ",".join(str(v) for v in vals)
    return o + body + c


#: Largest index accepted (common practice: planes and directions of engineering
#: interest have indices of a few units; far larger ones only make loops long).
MAX_INDEX = 1000


def parse_indices(text, kind=None, allow_bare=True) -> Indices:
    """Parse '[1-10]', '(111)', '<110>', '{111}', '[2-1-10]', '(10-12)', '1 -1 0'.

    ``kind`` ('direction' or 'plane') is required for bare digits without
    brackets, and checked against the brackets when given.

    >>> parse_indices("(10-12)")
    Indices(kind='plane', values=(1, 0, -1, 2), family=False)
    >>> parse_indices("1 -1 0", kind="direction").values
    (1, -1, 0)
    """
    s = str(text).strip()
    family = False
    if s and s[0] in _BRACKETS:
        close, k, family = _BRACKETS[s[0]]
        if not s.endswith(close):
            raise UserError(f"malformed indices '{text}': '{s[0]}' must be closed by '{close}'")
        body = s[1:-1]
        if kind is not None and kind != k:
            want = "[uvw]" if kind == "direction" else "(hkl)"
            raise UserError(f"'{text}' is a {k} but a {kind} is needed here, like {want}")
        kind = k
    else:
        if not allow_bare or kind is None:
            raise UserError(f"malformed indices '{text}': write a direction as [uvw] or a plane as (hkl), e.g. [1-10] or (111)")
        body = s
    if "," in body or " " in body.strip():
        parts = [p for p in re.split(r"[,\s]+", body.strip()) if p]
        if not all(re.fullmatch(r"[+-]?\d+", p) for p in parts):
            raise UserError(_bad(text))
        vals = [int(p) for p in parts]
    else:
        if not re.fullmatch(r"(-?\d)+", body):
            raise UserError(_bad(text))
        vals = [int(m) for m in re.findall(r"-?\d", body)]
    if len(vals) not in (3, 4):
        raise UserError(f"malformed indices '{text}': need 3 indices (or 4 for hexagonal), got {len(vals)}")
    if max(abs(v) for v in vals) > MAX_INDEX:
        raise UserError(f"indices '{str(text)[:40]}' are over {MAX_INDEX}; crystallographic directions and planes "
                        f"of interest have small indices (divide by their common factor), e.g. [112] or (310)")
    if all(v == 0 for v in vals):
        raise UserError(f"indices '{text}' are all zero: that is no {kind}; use e.g. "
                        + ("[100]" if kind == "direction" else "(100)"))
    if len(vals) == 4:
        if kind == "plane" and vals[2] != -(vals[0] + vals[1]):
            raise UserError(f"four-index plane '{text}' breaks i = -(h + k): i should be {-(vals[0] + vals[1])}")
        if kind == "direction" and vals[2] != -(vals[0] + vals[1]):
            raise UserError(f"four-index direction '{text}' breaks t = -(u + v): t should be {-(vals[0] + vals[1])}")
    return Indices(kind, tuple(vals), family)


def _bad(text):
    return (f"malformed indices '{text}': use digits with a minus sign for a bar, "
            "e.g. [1-10], (111), <110>, {111}, [2-1-10] or (10-12)")


def _gcd_reduce(vals):
    vals = [int(v) for v in vals]
    g = reduce(math.gcd, [abs(v) for v in vals if v != 0] or [1])
    return tuple(v // g for v in vals)


def mb_to_miller_direction(uvtw):
    """[UVTW] -> [uvw]: u = U - T, v = V - T, w = W (reduced to lowest integers).

    >>> mb_to_miller_direction((2, -1, -1, 0))
    (1, 0, 0)
    """
    U, V, T, W = uvtw
    return _gcd_reduce((U - T, V - T, W))


def miller_to_mb_direction(uvw):
    """[uvw] -> [UVTW]: U = (2u - v)/3, V = (2v - u)/3, T = -(u + v)/3, W = w,
    scaled to the smallest integers.

    >>> miller_to_mb_direction((1, 0, 0))
    (2, -1, -1, 0)
    """
    u, v, w = uvw
    vals = (2 * u - v, 2 * v - u, -(u + v), 3 * w)
    return _gcd_reduce(vals)


def mb_to_miller_plane(hkil):
    """(hkil) -> (hkl): drop i = -(h + k).

    >>> mb_to_miller_plane((1, 0, -1, 2))
    (1, 0, 2)
    """
    h, k, i, l = hkil
    return (h, k, l)


def miller_to_mb_plane(hkl):
    """(hkl) -> (hkil) with i = -(h + k).

    >>> miller_to_mb_plane((1, 0, 2))
    (1, 0, -1, 2)
    """
    h, k, l = hkl
    return (h, k, -(h + k), l)


# ------------------------------------------------------------------ metric
def cell_from_parameters(a, b, c, alpha=90.0, beta=90.0, gamma=90.0):
    """Cell rows from lengths (A) and angles (degrees); a along x, b in the xy plane.

    >>> cell = cell_from_parameters(2.9508, 2.9508, 4.6855, gamma=120)
    >>> cell.round(4).tolist()
    [[2.9508, 0.0, 0.0], [-1.4754, 2.5555, 0.0], [0.0, 0.0, 4.6855]]
    """
    al, be, ga = (math.radians(x) for x in (alpha, beta, gamma))
    ax = np.array([a, 0.0, 0.0])
    bx = np.array([b * math.cos(ga), b * math.sin(ga), 0.0])
    cx = c * math.cos(be)
    cy = c * (math.cos(al) - math.cos(be) * math.cos(ga)) / math.sin(ga)
    cz = math.sqrt(max(c * c - cx * cx - cy * cy, 0.0))
    return np.array([ax, bx, [cx, cy, cz]])


def cell_parameters(cell):
    """(a, b, c, alpha, beta, gamma) of cell rows: lengths in A, angles in degrees.

    >>> cell = cell_from_parameters(3, 4, 5, beta=100)
    >>> [round(float(x), 4) for x in cell_parameters(cell)]
    [3.0, 4.0, 5.0, 90.0, 100.0, 90.0]
    """
    cell = np.asarray(cell, float)
    a, b, c = np.linalg.norm(cell, axis=1)

    def ang(x, y):
        return math.degrees(math.acos(np.clip(np.dot(x, y) / np.linalg.norm(x) / np.linalg.norm(y), -1, 1)))

    return a, b, c, ang(cell[1], cell[2]), ang(cell[0], cell[2]), ang(cell[0], cell[1])


def reciprocal(cell):
    """Reciprocal cell rows b_i with a_i . b_j = delta_ij (no 2 pi).

    >>> reciprocal(np.diag([2.0, 4.0, 5.0])).tolist()
    [[0.5, 0.0, 0.0], [0.0, 0.25, 0.0], [0.0, 0.0, 0.2]]
    """
    return np.linalg.inv(np.asarray(cell, float)).T


def as_indices(value, kind, what=None) -> Indices:
    """Indices of the given kind from text ('[1-10]', '(111)', bare '110'),
    an Indices, or a sequence of three (four, hexagonal) whole numbers;
    checked: not all zero, t = -(u + v) / i = -(h + k) for four-index forms.

    >>> as_indices((1, 1, 1), "plane")
    Indices(kind='plane', values=(1, 1, 1), family=False)
    >>> as_indices("110", "direction").values
    (1, 1, 0)
    """
    what = what or kind
    if isinstance(value, Indices):
        ind = value
    elif isinstance(value, str):
        ind = parse_indices(value, kind=kind)
    else:
        try:
            floats = [float(x) for x in value]
        except (TypeError, ValueError):
            raise UserError(f"{what} {value!r} must be indices like "
                            + ("'[001]'" if kind == "direction" else "'(111)'") + " or whole numbers") from None
        if len(floats) not in (3, 4) or not all(math.isfinite(x) and x == int(x) for x in floats):
            raise UserError(f"{what} {value!r} must be three (or four, hexagonal) whole numbers")
        text = format_indices([int(x) for x in floats], kind)
        ind = parse_indices(text, kind=kind)         # one place checks zero and four-index rules
    if ind.kind != kind:
        raise UserError(f"{what} must be a {kind}, not the {ind.kind} {ind}")
    return ind


def _ind3(ind, kind):
    return np.array(as_indices(ind, kind).three().values, dtype=float)


def direction_vector(cell, uvw):
    """Cartesian vector of the direction [uvw] in the given (conventional) cell.

    >>> direction_vector(np.eye(3) * 3.6149, "[110]").round(4).tolist()
    [3.6149, 3.6149, 0.0]
    """
    return _ind3(uvw, "direction") @ np.asarray(cell, float)


def plane_normal(cell, hkl):
    """Cartesian normal of (hkl) (the reciprocal vector, not normalised).

    >>> plane_normal(np.eye(3) * 4.0, "(111)").tolist()
    [0.25, 0.25, 0.25]
    """
    return _ind3(hkl, "plane") @ reciprocal(cell)


def d_spacing(cell, hkl):
    """Interplanar spacing d_hkl = 1 / |h b1 + k b2 + l b3| (A).  The indices
    are used as given: d_200 is half of d_100.

    >>> round(d_spacing(np.eye(3) * 3.6149, "(111)"), 4)
    2.0871
    """
    return float(1.0 / np.linalg.norm(plane_normal(cell, hkl)))


def angle_between(cell, d1, d2):
    """Angle (degrees) between two directions.

    >>> round(angle_between(np.eye(3), "[100]", "[111]"), 2)
    54.74
    """
    v1, v2 = direction_vector(cell, d1), direction_vector(cell, d2)
    cosang = np.dot(v1, v2) / np.linalg.norm(v1) / np.linalg.norm(v2)
    return float(math.degrees(math.acos(np.clip(cosang, -1.0, 1.0))))


def _frac_int(x, tol=1e-6):
    return np.abs(x - np.round(x)) < tol


def planar_density(cell, basis_frac, hkl):
    """Atoms per A^2 on the (hkl) plane through an atom at the origin.

    Atoms whose centres lie on the family h x + k y + l z = integer (indices
    reduced to lowest terms) number n per cell; these planes are spaced d apart,
    so the density per area is n d / V.  (Common-practice counting of atom
    centres on the plane, as in textbook planar densities.)

    >>> import crystalview as cv
    >>> cu = cv.build("Cu").lattice
    >>> round(float(planar_density(cu.cell, cu.basis_frac, "(111)")), 4)
    0.1767
    """
    hkl = np.array(_gcd_reduce(_ind3(hkl, "plane").astype(int)), dtype=float)
    basis = np.asarray(basis_frac, float)
    basis = basis - basis[0]          # the plane passes through an atom
    s = basis @ hkl
    n = int(np.sum(_frac_int(s)))
    d = d_spacing(cell, hkl)
    vol = abs(np.linalg.det(cell))
    return n * d / vol


def linear_density(cell, basis_frac, uvw):
    """Atoms per A along the line [uvw] through an atom at the origin.

    >>> import crystalview as cv
    >>> cu = cv.build("Cu").lattice
    >>> round(float(linear_density(cu.cell, cu.basis_frac, "[110]")), 4)
    0.3912
    """
    uvw = np.array(_gcd_reduce(_ind3(uvw, "direction").astype(int)), dtype=float)
    basis = np.asarray(basis_frac, float)
    basis = basis - basis[0]          # the line passes through an atom
    length = np.linalg.norm(uvw @ np.asarray(cell, float))
    # t in [0, 1) with t*uvw = b + n (n integer) for some basis atom b
    count = 0
    k = int(np.argmax(np.abs(uvw)))
    for b in basis:
        for n in range(-int(abs(uvw[k])) - 1, int(abs(uvw[k])) + 2):
            t = (b[k] + n) / uvw[k]
            if -1e-9 <= t < 1 - 1e-9:
                diff = t * uvw - b
                if np.all(_frac_int(diff)):
                    count += 1
    return count / length


def atomic_layer_spacings(cell, basis_frac, hkl):
    """Distinct spacings (A) between successive atom layers parallel to (hkl).

    The lattice formula d_hkl counts planes of lattice points of the
    conventional cell; atom layers can be closer (fcc (100): a/2, while
    d_100 = a).  Atoms are grouped by their height along the plane normal
    within one period of the reduced plane family; returns the sorted
    distinct gaps (one value when the layers are evenly spaced).

    >>> import crystalview as cv
    >>> cu = cv.build("Cu").lattice
    >>> [round(d, 4) for d in atomic_layer_spacings(cu.cell, cu.basis_frac, "(100)")]
    [1.8075]
    """
    hkl = np.array(_gcd_reduce(_ind3(hkl, "plane").astype(int)), dtype=float)
    basis = np.asarray(basis_frac, float)
    d = d_spacing(cell, hkl)
    t = np.sort(np.unique(np.round((basis @ hkl) % 1.0, 9) % 1.0))
    if len(t) == 0:
        return [d]
    gaps = np.diff(np.concatenate([t, [t[0] + 1.0]])) * d
    out = sorted({round(float(g), 6) for g in gaps if g > 1e-9})
    return out


def cell_nn_distance(cell, frac):
    """Nearest-neighbour distance of a small periodic cell (``cell`` rows are
    the lattice vectors in A, ``frac`` the fractional positions), by brute
    force over the 27 nearest images.

    >>> round(cell_nn_distance(np.eye(3) * 3.6149, [[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]]), 4)
    2.5561
    """
    cell = np.asarray(cell, float)
    cart = np.asarray(frac, float) @ cell
    shifts = np.array(list(itertools.product((-1, 0, 1), repeat=3)), float) @ cell
    d = cart[:, None, None, :] - cart[None, :, None, :] + shifts[None, None, :, :]
    r = np.linalg.norm(d, axis=-1)
    r = r[r > 1e-8]
    return float(r.min())
