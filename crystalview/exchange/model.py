"""Printable models written to files: one model with its print report
(``print_model``), a meeting set on one bed (``print_set``), and the STL / 3MF
writer of a built :class:`crystalview.mesh.printable.Model` (``write_model``).
The geometry is made upstream, in :mod:`crystalview.mesh`; this module only
checks the targets, writes the files atomically and returns the report.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..about import CAUTION
from ..errors import UserError
from ..fileio import atomic_write, check_target
from ..mesh import primitives as P
from ..mesh.bed import DEFAULT_OVERHANG_ANGLE
from ..mesh.printable import (DEFAULT_BED, DEFAULT_CLEARANCE, DEFAULT_MAX_TRIANGLES, DEFAULT_MIN_FEATURE,
                              DEFAULT_SCALE, PLA_DENSITY, PRINT_CAUTION, SUFFIXES, PrintReport, material_density_value,
                              build_model, inspect, report_path)
from ..mesh.printset import GAP_MM, MAX_MODELS, _slug, layout, set_report_text


def write_model(model, path, force=False):
    """Write a printable :class:`crystalview.mesh.printable.Model` as STL or 3MF, by the extension.

    >>> import os, tempfile, crystalview as cv
    >>> from crystalview.mesh.printable import build_model
    >>> out = os.path.join(tempfile.mkdtemp(), "w.stl")
    >>> write_model(build_model(cv.build("W")), out) and os.path.getsize(out) > 84
    True"""
    suffix = Path(path).suffix.lower()
    if suffix == ".stl":
        from .stl import write_model_stl

        return write_model_stl(model, path, force=force)
    if suffix == ".3mf":
        from .threemf import write_model_3mf

        return write_model_3mf(model, path, force=force)
    raise UserError(f"cannot write a printable model to '{path}'; use .stl or .3mf")


def print_model(crystal, path, *, style="ball-and-stick", scale=None, clip_to_cell=False, base=None, kit=False,
                min_feature=DEFAULT_MIN_FEATURE, bed=DEFAULT_BED, material_density=PLA_DENSITY,
                clearance=DEFAULT_CLEARANCE, max_triangles=DEFAULT_MAX_TRIANGLES, segments=None, force=False,
                write_report=True, resolution=P.DEFAULT_RESOLUTION_MM, edges=None, cell=None,
                overhang_angle=DEFAULT_OVERHANG_ANGLE, label=None, label_style="emboss", label_stroke=None):
    """Write a printable model of ``crystal`` to ``path`` (.stl or .3mf) and
    its print report beside it (MODEL.report.txt); return the report.

    >>> import os, tempfile, crystalview as cv
    >>> out = os.path.join(tempfile.mkdtemp(), "cu.stl")
    >>> rep = print_model(cv.build("Cu"), out)
    >>> rep["watertight"], rep["bodies"], os.path.exists(out[:-4] + ".report.txt")
    (True, 1, True)

    Parameters
    ----------
    style : "ball-and-stick" or "space-filling".
    scale : mm per angstrom (default 10: 1 A -> 1 cm).
    clip_to_cell : cut the space-filling spheres to the cell faces.
    base : True adds a base plate, False never; None (default) adds one
        where the model alone would touch the bed over too small an area.
    kit : separate balls with bored holes plus loose rods (ball-and-stick).
    min_feature : thinnest rod or neck in mm (default 2); thinner rods are
        thickened, balls below it are refused.
    bed : printer bed X, Y, Z in mm (default 220 x 220 x 250, a common size).
    material_density : g/cm^3 for the mass estimate (default PLA 1.24).
    clearance : radial fit clearance of kit holes in mm (default 0.2).
    max_triangles : refuse models estimated over this many triangles.
    segments : sphere segments (default: from ``resolution``).
    resolution : the printer's resolution in mm (default 0.05): spheres and
        rods are tessellated so no facet strays further from the true surface.
    edges : cell-edge struts (default: on for ball-and-stick, not kits).
    cell : "prism" (default for one hcp / simple hexagonal cell: the
        hexagonal prism) or "primitive" (the stored cell).
    overhang_angle : degrees from vertical printed without support (45).
    label : text embossed or engraved on the base; None or "auto" (default)
        writes the structure, lattice parameters and scale where a base is
        made, "none" never; an explicit text adds a base to carry it.
    label_style : "emboss" (raised text, default) or "engrave" (cut in).
    force : overwrite existing files.
    """
    from ..mesh.report import report_text

    p = Path(path)
    check_target(p, force=force, suffixes=set(SUFFIXES))
    rp = report_path(p)
    if write_report:
        check_target(rp, force=force)
    material_density = material_density_value(material_density)
    model = build_model(crystal, style=style, scale=scale, clip_to_cell=clip_to_cell, base=base, kit=kit,
                        min_feature=min_feature, bed=bed, clearance=clearance, max_triangles=max_triangles,
                        segments=segments, resolution=resolution, edges=edges, cell=cell,
                        overhang_angle=overhang_angle, label=label, label_style=label_style,
                        label_stroke=label_stroke)
    facts = inspect(model, material_density)
    if not (facts["watertight"] and facts["is_volume"]):
        raise RuntimeError("the mesh came out not watertight; rerun with --debug and report it")
    if not kit and facts["bodies"] != 1:
        raise UserError(f"the model falls apart into {facts['bodies']} separate pieces; print it with --base or "
                        f"--kit, or as a smaller piece of the crystal")

    rep = PrintReport(file=str(p), format=p.suffix.lower().lstrip("."), **model.info, **facts,
                      fits_bed=True, adjustments=model.adjustments, parts=model.parts,
                      caution=f"{CAUTION} {PRINT_CAUTION}")
    if clip_to_cell and not model.info.get("base"):
        rep["volume_fraction_of_cell"] = facts["volume_cm3"] * 1000.0 / model.info["cell_volume_mm3"]
    rep["report_file"] = str(rp) if write_report else None
    write_model(model, p, force=force)
    if write_report:
        atomic_write(rp, report_text(rep) + "\n", force=force)
    return rep


def print_set(crystals, path, *, scale=None, bed=DEFAULT_BED, material_density=PLA_DENSITY, force=False,
              write_report=True, base=None, label=None, label_style="emboss", **options):
    """Write a set of models (``crystals``: a list of Crystal) at one scale
    to one 3MF ``path`` (one object per model) and one STL per model beside
    it (PATH-STEM-<name>.stl), with one combined report; return the report.

    >>> import os, tempfile, crystalview as cv
    >>> out = os.path.join(tempfile.mkdtemp(), "set.3mf")
    >>> rep = print_set([cv.build("Cu"), cv.build("Fe")], out)
    >>> rep["count"], sorted(os.path.basename(f) for f in rep["stl_files"])
    (2, ['set-cu-fcc.stl', 'set-fe-bcc.stl'])"""
    from .stl import stl_bytes
    from .threemf import threemf_bytes

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
    material_density = material_density_value(material_density)
    taken = set()
    slugs = [_slug(c, taken) for c in crystals]
    stls = [p.with_name(f"{p.stem}-{s}.stl") for s in slugs]
    rp = report_path(p)
    check_target(p, force=force, suffixes={".3mf"})
    for f in stls + ([rp] if write_report else []):
        check_target(f, force=force)
    # every model first: nothing is written unless all of them, together, fit
    models, facts = [], []
    from ..mesh.label import auto_text

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


def write_printable(crystal, path, *, force=False, style=None, scale=None, clip_to_cell=None, base=None, kit=None,
          min_feature=None, bed=None, material_density=None, clearance=None, max_triangles=None, segments=None,
          resolution=None, edges=None, cell=None, overhang_angle=None, label=None, label_style=None):
    """Export a printable solid as STL or 3MF, by the file's extension (the
    same model as ``print_model``, without the report file).

    >>> import os, tempfile, crystalview as cv
    >>> out = os.path.join(tempfile.mkdtemp(), "fe.3mf")
    >>> write_printable(cv.build("Fe"), out)["format"]
    '3mf'
    """
    kw = dict(style=style, scale=scale, clip_to_cell=clip_to_cell, base=base, kit=kit, min_feature=min_feature,
              bed=bed, material_density=material_density, clearance=clearance, max_triangles=max_triangles,
              segments=segments, resolution=resolution, edges=edges, cell=cell, overhang_angle=overhang_angle,
              label=label, label_style=label_style)
    return print_model(crystal, path, force=force, write_report=False, **{k: v for k, v in kw.items() if v is not None})
