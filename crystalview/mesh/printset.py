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

import numpy as np

from ..errors import UserError
from .printable import (DEFAULT_BED, DEFAULT_SCALE, PLA_DENSITY, PRINT_CAUTION, PrintReport, _positive, build_model,
                        inspect, report_path)

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
    footprints ``sizes`` on the bed, or raise UserError when they do not fit."""
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


def print_set(crystals, path, *, scale=None, bed=DEFAULT_BED, material_density=PLA_DENSITY, force=False,
              write_report=True, base=None, label=None, label_style="emboss", **options):
    """Write a set of models (``crystals``: a list of Crystal) at one scale
    to one 3MF ``path`` (one object per model) and one STL per model beside
    it (PATH-STEM-<name>.stl), with one combined report; return the report."""
    from .. import CAUTION
    from ..exchange.stl import stl_bytes
    from ..exchange.threemf import threemf_bytes
    from ..fileio import atomic_write, check_target

    p = Path(path)
    if p.suffix.lower() != ".3mf":
        raise UserError(f"a set goes into one .3mf file (one object per model, STLs beside it); "
                        f"give -o {p.with_suffix('.3mf').name}")
    crystals = list(crystals)
    if len(crystals) < 2:
        raise UserError("a set needs two or more models, e.g. --set fcc,bcc,hcp --element Fe,Fe,Ti")
    if len(crystals) > MAX_MODELS:
        raise UserError(f"a set of {len(crystals)} models is more than {MAX_MODELS}; print it in parts")
    if options.get("kit"):
        raise UserError("a set lays whole models on one bed; print kits one at a time")
    if isinstance(label, str) and label.strip().lower() not in ("auto", "none"):
        raise UserError("each model of a set gets its own label; use --label auto (the default) or none")
    material_density = _positive("material density", material_density, "density in g/cm^3", "1.24 for PLA")
    taken = set()
    slugs = [_slug(c, taken) for c in crystals]
    stls = [p.with_name(f"{p.stem}-{s}.stl") for s in slugs]
    rp = report_path(p)
    check_target(p, force=force, suffixes={".3mf"})
    for f in stls + ([rp] if write_report else []):
        check_target(f, force=force)
    # every model first: nothing is written unless all of them, together, fit
    models, facts = [], []
    from .label import auto_text

    none = isinstance(label, str) and label.strip().lower() == "none"
    for c in crystals:
        # each model's label: its name and structure (one scale for the whole set: in the report)
        lab = "none" if none else auto_text(c, scale or DEFAULT_SCALE, short=True)
        m = build_model(c, scale=scale, bed=bed, base=base, label=lab, label_style=label_style, **options)
        f = inspect(m, material_density)
        if not (f["watertight"] and f["is_volume"]):
            raise RuntimeError("a model of the set came out not watertight; rerun with --debug and report it")
        if f["bodies"] != 1:
            raise UserError(f"the {m.bodies[0].name} model falls apart into {f['bodies']} pieces; give it a base "
                            f"(leave out --no-base)")
        models.append(m)
        facts.append(f)
    bed = tuple(float(b) for b in m.info["bed_mm"])
    sizes = [tuple(np.ptp(m.bodies[0].mesh.vertices, axis=0)[:2]) for m in models]
    pos, turned, block = layout(sizes, bed)
    off = np.array([(bed[0] - block[0]) / 2, (bed[1] - block[1]) / 2])
    bodies, colours, placed = [], {}, []
    for m, (x, y), s in zip(models, pos, sizes):
        mesh = m.bodies[0].mesh.copy()
        if turned:
            mesh.vertices = mesh.vertices[:, [1, 0, 2]] * [-1.0, 1.0, 1.0]
        lo = mesh.vertices.min(axis=0)
        mesh.vertices = mesh.vertices + [off[0] + x - lo[0], off[1] + y - lo[1], -lo[2]]
        bodies.append((m.bodies[0].name, mesh, m.bodies[0].groups))
        colours.update(m.colours)
        placed.append([float(v) for v in mesh.bounds.reshape(-1)])
    used = set()
    for _n, _m, g in bodies:
        if g is not None:
            used.update(g.tolist())
    colours = {k: v for k, v in colours.items() if k in used} or colours
    reports = []
    for m, f, stl, box in zip(models, facts, stls, placed):
        r = PrintReport(file=str(stl), format="stl", **m.info, **f, fits_bed=True, adjustments=m.adjustments,
                        parts=m.parts, name=m.bodies[0].name, placed_mm=box, caution=None)
        reports.append(r)
    rep = PrintReport(
        set=True, file=str(p), stl_files=[str(s) for s in stls], models=reports, count=len(models),
        scale_mm_per_A=models[0].info["scale_mm_per_A"], bed_mm=list(bed), block_mm=[float(block[0]), float(block[1])],
        gap_mm=GAP_MM, turned_90=bool(turned), volume_cm3=float(sum(f["volume_cm3"] for f in facts)),
        mass_g=float(sum(f["mass_g"] for f in facts)), material_density_g_cm3=material_density,
        triangles=int(sum(f["triangles"] for f in facts)),
        watertight=all(f["watertight"] for f in facts), report_file=str(rp) if write_report else None,
        caution=f"{CAUTION} {PRINT_CAUTION}")
    atomic_write(p, threemf_bytes(bodies, colours, "crystalview set"), force=force)
    for m, stl in zip(models, stls):
        atomic_write(stl, stl_bytes([m.bodies[0].mesh]), force=force)
    if write_report:
        atomic_write(rp, set_report_text(rep) + "\n", force=force)
    return rep


def set_report_text(rep):
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
