"""Exchange files, one module per format, chosen by the file's extension
through the single table :data:`FORMATS`.

    cv.export(crystal, "cell.glb")        # glTF 2.0 binary (web / AR viewers)
    cv.export(crystal, "cell.cif")        # IUCr CIF 1.1
    cv.export(crystal, "cell.xyz")        # extended XYZ with the lattice
    cv.export(crystal, "cell.3mf")        # printable solid, mm, coloured parts
    cv.export(crystal, "cell.stl")        # printable solid, mm
    cv.export(crystal, "cell.html")       # one offline web page: turn, zoom, click atoms

Every writer writes atomically and never overwrites unless ``force=True``.
"""
from __future__ import annotations

import importlib
import inspect
from pathlib import Path

from ..errors import UserError

#: suffix -> (module in crystalview.exchange, writer function, description)
FORMATS = {
    ".glb": ("gltf", "write_glb", "glTF 2.0 binary: web, AR and 3D viewers"),
    ".gltf": ("gltf", "write_gltf", "glTF 2.0 text with the data embedded"),
    ".cif": ("cif", "write_cif", "IUCr CIF 1.1 crystal structure"),
    ".xyz": ("xyz", "write_xyz", "extended XYZ with the lattice"),
    ".stl": ("model", "write_printable", "printable solid (mm), no colour"),
    ".3mf": ("model", "write_printable", "printable solid (mm) with coloured parts"),
    ".html": ("html", "write_html", "one self-contained web page: turn, zoom, click atoms; offline"),
}


def atom_cap(path, style=None):
    """The most atoms a file of this kind (by extension) and style can hold,
    with the reason, as (cap, reason), or None where only the atom cap of the
    build applies.  Commands pass it to the build, so an oversized export is
    refused before the crystal is made; the writer still checks exactly.

    >>> atom_cap("x.glb")[0], atom_cap("x.glb", "space-filling")[0], atom_cap("x.cif")
    (714285, 5000000, None)
    """
    suffix = Path(path).suffix.lower()
    if suffix in (".glb", ".gltf"):
        from .gltf import MAX_INSTANCES

        if style == "space-filling":
            return MAX_INSTANCES, (f"a glTF file holds at most {MAX_INSTANCES:,} atoms; use a smaller --repeat")
        return MAX_INSTANCES // 7, (f"a glTF file holds at most {MAX_INSTANCES:,} atoms and bonds, about "
                                    f"{MAX_INSTANCES // 7:,} atoms in ball-and-stick; use a smaller --repeat or "
                                    f"--style space-filling")
    if suffix in (".html", ".htm"):
        from .html import MAX_PAGE_ATOMS, MAX_PAGE_ATOMS_STICKS

        if style in ("lattice", "space-filling", "cell-cut"):
            return MAX_PAGE_ATOMS, (f"a web page holds at most {MAX_PAGE_ATOMS:,} atoms; use a smaller --repeat, "
                                    f"or write a .glb (glTF) file, which holds more")
        return MAX_PAGE_ATOMS_STICKS, (f"a web page holds at most {MAX_PAGE_ATOMS_STICKS:,} atoms in ball-and-stick "
                                       f"({MAX_PAGE_ATOMS:,} with --style lattice or space-filling); use a smaller "
                                       f"--repeat, --style lattice, or write a .glb (glTF) file")
    return None


def writer_for(path):
    """The writer function for a file name, by its extension.

    >>> writer_for("cu.xyz").__name__, writer_for("cu.CIF").__name__
    ('write_xyz', 'write_cif')
    """
    suffix = Path(path).suffix.lower()
    entry = FORMATS.get(suffix)
    if entry is None:
        raise UserError(f"cannot write '{path}': unknown file type '{suffix or '(none)'}'; "
                        f"use one of {', '.join(FORMATS)}")
    mod = importlib.import_module(f"crystalview.exchange.{entry[0]}")
    return getattr(mod, entry[1])


def export(crystal, path, *, force=False, **options):
    """Write ``crystal`` to ``path`` in the format its extension names; return
    a dict describing what was written (file, format, and format facts).

    Options are passed to the format's writer: glTF takes ``style``,
    ``real_scale``, ``instancing``; STL / 3MF take the print options of
    :func:`crystalview.print_model` (``style``, ``scale``, ``clip_to_cell``,
    ``base``, ``min_feature``, ...); HTML takes the figure's options
    (``style``, ``view``, ``up``, ``sites``, ``polyhedra``, ``planes``,
    ``directions``, ``layers``, ``slip_axis``, ``cell_shape``, ``title``);
    CIF and XYZ take none.

    >>> import crystalview as cv, os, tempfile
    >>> out = export(cv.build("Cu"), os.path.join(tempfile.mkdtemp(), "cu.xyz"))
    >>> out["format"], out["atoms"]
    ('xyz', 4)
    """
    fn = writer_for(path)
    sig = inspect.signature(fn)
    accepted = {k for k, p in sig.parameters.items() if p.kind == p.KEYWORD_ONLY}
    unknown = [k for k, v in options.items() if k not in accepted and v is not None]
    if unknown:
        ok = ", ".join(sorted(accepted - {"force"})) or "none"
        raise UserError(f"option {', '.join(unknown)} does not apply to {Path(path).suffix} files "
                        f"(options for this format: {ok})")
    kw = {k: v for k, v in options.items() if v is not None}
    return fn(crystal, path, force=force, **kw)
