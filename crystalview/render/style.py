"""Drawing styles, sizes and the small numeric choices behind a figure.

No vtk or pyvista here: the scene description, the vector writers and the
argument checks use this module without loading a renderer.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import UserError, suggest


@dataclass(frozen=True)
class Style:
    """How atoms, sticks and the cell are drawn (see :data:`STYLES`).

    >>> STYLES["space-filling"].atom_scale, STYLES["ball-and-stick"].bonds
    (1.0, True)
    """
    name: str
    atom_scale: float        # drawn radius / hard-sphere radius
    bonds: bool              # sticks between nearest neighbours
    cell_outline: bool       # edges of the crystal's cell
    cut: bool                # spheres truncated by the cell faces
    description: str


STYLES = {
    "ball-and-stick": Style("ball-and-stick", 0.38, True, True, False,
                            "small balls joined by sticks between nearest neighbours"),
    "space-filling": Style("space-filling", 1.0, False, False, False,
                           "hard spheres of the true radius, touching along the close-packed directions"),
    "lattice": Style("lattice", 0.22, False, True, False,
                     "small atoms at the lattice sites with the cell outline"),
    "cell-cut": Style("cell-cut", 1.0, False, True, True,
                      "hard spheres cut by the cell faces: the shares of corner, edge and face atoms"),
}

#: Bonds join atoms closer than (1 + BOND_TOLERANCE) x the nearest-neighbour distance.
BOND_TOLERANCE = 0.10
#: Stick radius as a fraction of the smallest drawn hard-sphere radius.
BOND_RADIUS = 0.1

#: Largest sizes we accept (pixels per side) and the sensible dpi range.
MIN_SIDE, MAX_SIDE = 64, 8192
MIN_DPI, MAX_DPI = 30, 2400
#: Vector output draws each object as a path; past this count the file gets
#: unwieldy for a document editor, so we ask for a PNG instead.
MAX_VECTOR_PRIMITIVES = 30_000
#: Truncated spheres are real meshes; refuse more than this many cut atoms.
MAX_CUT_ATOMS = 4000
#: Bonds drawn in a raster figure.
MAX_BONDS = 4_000_000

#: Light: a soft key light, a fill and ambient, so spheres read as solids on white.
AMBIENT, DIFFUSE, SPECULAR, SPECULAR_POWER = 0.22, 0.78, 0.28, 30.0

BACKGROUND = "#ffffff"
TEXT_COLOUR = "#1a1a1a"


def get_style(name):
    """The :class:`Style` of a name or common alias, or a one-line UserError.

    >>> get_style("spacefill").name
    'space-filling'
    """
    key = str(name).strip().lower().replace("_", "-").replace(" ", "-")
    aliases = {"balls": "ball-and-stick", "ball-stick": "ball-and-stick", "spacefill": "space-filling",
               "space-fill": "space-filling", "hard-sphere": "space-filling", "hard-spheres": "space-filling",
               "cut": "cell-cut", "cut-cell": "cell-cut", "unit-cell": "cell-cut", "small": "lattice"}
    key = aliases.get(key, key)
    if key not in STYLES:
        raise UserError(f"unknown style '{name}'; use one of {', '.join(STYLES)}{suggest(name, STYLES)}")
    return STYLES[key]


def check_size(size):
    """(W, H) as two ints within the accepted range, or UserError.

    >>> check_size(("1600", 1200.4))
    (1600, 1200)
    """
    try:
        w, h = (int(round(float(x))) for x in size)
    except (TypeError, ValueError, OverflowError):
        raise UserError(f"size {size!r} must be two whole numbers of pixels, e.g. --size 1600 1200") from None
    for v in (w, h):
        if not (MIN_SIDE <= v <= MAX_SIDE):
            raise UserError(f"image size {w} x {h} is out of range: each side must be {MIN_SIDE} to {MAX_SIDE} "
                            f"pixels, e.g. --size 1600 1200")
    return w, h


def check_dpi(dpi):
    """``dpi`` as a float within the accepted range, or a one-line UserError.

    >>> check_dpi("300")
    300.0
    """
    try:
        v = float(dpi)
    except (TypeError, ValueError):
        raise UserError(f"dpi '{dpi}' is not a number; use e.g. --dpi 300") from None
    if not (MIN_DPI <= v <= MAX_DPI) or not math.isfinite(v):
        raise UserError(f"dpi {dpi} is out of range; use {MIN_DPI} to {MAX_DPI}, e.g. --dpi 300")
    return v


def round_length(target):
    """A round length (1, 2 or 5 times a power of ten) no larger than ``target``.

    >>> round_length(3.7), round_length(0.26), round_length(57)
    (2.0, 0.2, 50.0)
    """
    if target <= 0 or not math.isfinite(target):
        return 1.0
    e = math.floor(math.log10(target))
    best = 10.0 ** e
    for m in (1, 2, 5, 10):
        v = m * 10.0 ** e
        if v <= target * 1.0000001:
            best = v
    return best


def darker_hex(hexc, f):
    """'#rrggbb' with every channel scaled by ``f`` (< 1 darker).

    >>> darker_hex("#80a0ff", 0.5)
    '#405080'
    """
    h = hexc.lstrip("#")
    return "#" + "".join("%02x" % int(round(min(255, int(h[i:i + 2], 16) * f))) for i in (0, 2, 4))


def fmt_length(x):
    """A length in Å as the scale bar labels it.

    >>> fmt_length(5.0)
    '5 Å'
    """
    return f"{x:g} \u00c5"
