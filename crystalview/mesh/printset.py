"""A meeting set: several printable models at one scale, each on its own
labelled base, laid out on one bed in one 3MF (one object per model, with
colours), plus one STL per model beside it and one combined report.

Layout: shelf packing, tallest footprint first, rows along x, 5 mm between
models (room for a nozzle and a scraper, common practice), the whole block
centred on the bed; tried as given and with every model turned 90 degrees
about z.  A set that does not fit is refused before anything is written.
"""
from __future__ import annotations

import re
from pathlib import Path

from ..errors import UserError

GAP_MM = 5.0
MAX_MODELS = 12


def _slug(crystal, taken):
    md = crystal.metadata or {}
    name = str(md.get("name") or "".join(crystal.elements))
    lat = crystal.lattice.prototype if crystal.lattice is not None else ""
    s = re.sub(r"[^a-z0-9]+", "-", f"{name} {lat}".lower()).strip("-") or "model"
    base, k = s, 2
    while s in taken:
        s, k = f"{base}-{k}", k + 1
    taken.add(s)
    return s


def _shelf(sizes, bx, by, gap):
    """Lower-left corners (x, y) of rectangles ``sizes`` (w, d) packed in rows
    along x within bx, or None if they do not fit in by; and the block's size."""
    order = sorted(range(len(sizes)), key=lambda k: -sizes[k][1])
    pos = [None] * len(sizes)
    x = y = row_d = 0.0
    width = 0.0
    for k in order:
        w, d = sizes[k]
        if x > 0 and x + w > bx + 1e-9:
            x, y, row_d = 0.0, y + row_d + gap, 0.0
        pos[k] = (x, y)
        width = max(width, x + w)
        x += w + gap
        row_d = max(row_d, d)
    depth = y + row_d
    if width > bx + 1e-9 or depth > by + 1e-9:
        return None, (width, depth)
    return pos, (width, depth)


def layout(sizes, bed, gap=GAP_MM):
    """(positions of lower-left corners, turned 90 deg?, block size) for
    footprints ``sizes`` on the bed, or raise UserError when they do not fit.

    >>> positions, turned, block = layout([(50, 40), (30, 30)], (220, 220, 250))
    >>> positions, turned, block
    ([(0.0, 0.0), (55.0, 0.0)], False, (85.0, 40.0))
    """
    bx, by = bed[0], bed[1]
    pos, block = _shelf(sizes, bx, by, gap)
    if pos is not None:
        return pos, False, block
    turned = [(d, w) for w, d in sizes]
    pos2, block2 = _shelf(turned, bx, by, gap)
    if pos2 is not None:
        return pos2, True, block2
    need = min((block, block2), key=lambda b: max(b[0] / bx, b[1] / by))
    raise UserError(f"the {len(sizes)} models need {need[0]:.0f} x {need[1]:.0f} mm laid side by side "
                    f"({gap:g} mm apart), more than the bed {bx:g} x {by:g} mm; use a smaller --scale, fewer "
                    f"models, --label none, or --bed X Y Z for a bigger printer")


def set_report_text(rep):
    """Plain-text report of a print set (see :func:`crystalview.exchange.model.print_set`).

    >>> cu = dict(name="Cu fcc", file="set-cu-fcc.stl", placed_mm=[0, 0, 0, 52, 79, 48], volume_cm3=26.4)
    >>> rep = dict(file="set.3mf", count=1, scale_mm_per_A=10, bed_mm=[220, 220, 250], block_mm=[52, 79],
    ...            gap_mm=5, watertight=True, volume_cm3=26.4, mass_g=32.8, material_density_g_cm3=1.24,
    ...            triangles=14094, models=[cu], caution="(caution)")
    >>> print(set_report_text(rep).splitlines()[9])
        1. Cu fcc: set-cu-fcc.stl, 52.0 x 79.0 x 48.0 mm at x 0.0-52.0, y 0.0-79.0 mm, 26.400 cm^3, no label
    """
    from .report import report_text

    bed = rep["bed_mm"]
    lines = ["print set",
             f"  file          {rep['file']} ({rep['count']} objects, one per model, colours) and one STL per model",
             f"  scale         {rep['scale_mm_per_A']:g} mm per angstrom (every model)",
             f"  bed           {' x '.join(f'{b:g}' for b in bed)} mm; the set covers {rep['block_mm'][0]:.1f} x "
             f"{rep['block_mm'][1]:.1f} mm, {rep['gap_mm']:g} mm apart"
             + (", every model turned 90 deg about z" if rep.get("turned_90") else ""),
             f"  watertight    {'yes' if rep['watertight'] else 'NO'} (every model)",
             f"  volume        {rep['volume_cm3']:.3f} cm^3 in all",
             f"  mass          {rep['mass_g']:.1f} g at {rep['material_density_g_cm3']:g} g/cm^3",
             f"  triangles     {rep['triangles']:,}",
             "  models:"]
    for k, r in enumerate(rep["models"], 1):
        b = r["placed_mm"]
        lab = r.get("label")
        lines.append(f"    {k}. {r['name']}: {Path(r['file']).name}, {b[3] - b[0]:.1f} x {b[4] - b[1]:.1f} x "
                     f"{b[5] - b[2]:.1f} mm at x {b[0]:.1f}-{b[3]:.1f}, y {b[1]:.1f}-{b[4]:.1f} mm, "
                     f"{r['volume_cm3']:.3f} cm^3" + (f", label '{lab['text']}'" if lab else ", no label"))
    for k, r in enumerate(rep["models"], 1):
        lines.append("")
        lines.append(f"model {k}: " + report_text(r))
    lines.append(rep["caution"])
    return "\n".join(lines)
