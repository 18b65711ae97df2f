"""The project's own colour palette (no vtk import: meshes and files use it too).

Chosen for colour-vision-deficiency safety: roles differ in lightness as well
as hue, so they stay apart in greyscale and for deuteranopes/protanopes.
Colour by role first; elements of the same role are told apart by the element
series below, assigned in order of appearance within a crystal.
"""
from __future__ import annotations

ROLE_COLOURS = {
    "host": "#7d8fa3",          # slate grey-blue, mid lightness
    "solute": "#e08a1e",        # amber, light
    "interstitial": "#1f4e9c",  # deep blue, dark
    "vacancy": "#2b2b2b",       # near-black outline
    "shared-site": "#8e3fb0",   # violet halo: an atom drawn on a site several species share
    "site-octahedral": "#c2569b",   # magenta-rose
    "site-tetrahedral": "#3fa68a",  # sea green, lighter than the rose
    "site-other": "#a58bd1",        # lavender
    "plane": "#f2c14e",             # straw
    "direction": "#b8331f",         # brick
    "load-axis": "#111111",
    "cell": "#333333",
    "bond": "#9aa4ad",
}

#: Close-packed stacking positions A, B, C.
LAYER_COLOURS = {"A": "#23569e", "B": "#e8a33d", "C": "#9ed0ee"}

#: Element series for crystals with several species in the same role.
ELEMENT_SERIES = ["#7d8fa3", "#d9822b", "#2f6fb5", "#b8457a", "#54a37f", "#5c4b8a", "#c9b037", "#3d3d3d"]


def hex_to_rgb(h):
    """'#rrggbb' as an (r, g, b) tuple of floats in [0, 1].

    >>> tuple(round(x, 3) for x in hex_to_rgb("#ff8000"))
    (1.0, 0.502, 0.0)
    """
    h = h.lstrip("#")
    return tuple(int(h[i:i + 2], 16) / 255.0 for i in (0, 2, 4))


def role_colour(role):
    """The hex colour of an atom role ("host", "solute", ...); unknown roles get the host colour.

    >>> role_colour("host") == role_colour("no such role")
    True
    """
    return ROLE_COLOURS.get(role, ROLE_COLOURS["host"])


def element_colours(symbols_in_order):
    """{symbol: hex} for the species of one role, in a stable order.

    >>> element_colours(["Ni", "Al"])
    {'Ni': '#7d8fa3', 'Al': '#d9822b'}
    """
    return {s: ELEMENT_SERIES[i % len(ELEMENT_SERIES)] for i, s in enumerate(symbols_in_order)}


def atom_colours(crystal):
    """Per-atom hex colour index: (list of hex colours, (N,) int index array,
    legend list of (label, hex)).  Host atoms of one element get the host
    colour; several host elements get the element series; solutes and
    interstitials get their role colour (by element when several).

    >>> import crystalview as cv
    >>> colours, index, legend = atom_colours(cv.build("NiAl"))
    >>> len(colours), index.tolist(), [label for label, _ in legend]
    (2, [1, 0], ['Al (host)', 'Ni (host)'])
    """
    import numpy as np

    from .crystal import ROLES

    colours, legend = [], []
    index = np.zeros(len(crystal), dtype=np.int32)
    syms = crystal.symbols
    for r_code, role in enumerate(ROLES):
        mask = crystal.roles == r_code
        if not mask.any():
            continue
        els = sorted(set(syms[mask].tolist()), key=lambda s: list(crystal.elements).index(s))
        if len(els) == 1:
            cmap = {els[0]: role_colour(role)}
        elif role == "host":
            cmap = element_colours(els)
        else:
            base = {"solute": 1, "interstitial": 2}.get(role, 3)
            cmap = {s: ELEMENT_SERIES[(base + 2 * i) % len(ELEMENT_SERIES)] for i, s in enumerate(els)}
        for s, col in cmap.items():
            k = len(colours)
            colours.append(col)
            index[mask & (syms == s)] = k
            legend.append((f"{s} ({role})", col))
    return colours, index, legend
