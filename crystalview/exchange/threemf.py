"""3MF (3MF Core Specification 1.x, with the Materials extension's base
materials): millimetre units, one object per printable body, and a colour per
part (atom colour group, rods, base plate) from the project palette, given
per triangle through ``pid`` / ``p1``.

Written directly with zipfile + numpy (a 3MF is a zip of three small XML
parts); trimesh's own 3MF export does not carry colours.
"""
from __future__ import annotations

import io
import zipfile
from xml.sax.saxutils import quoteattr

import numpy as np

CONTENT_TYPES = """<?xml version="1.0" encoding="UTF-8"?>
<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">
 <Default Extension="rels" ContentType="application/vnd.openxmlformats-package.relationships+xml"/>
 <Default Extension="model" ContentType="application/vnd.ms-package.3dmanufacturing-3dmodel+xml"/>
</Types>
"""
RELS = """<?xml version="1.0" encoding="UTF-8"?>
<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">
 <Relationship Target="/3D/3dmodel.model" Id="rel0" Type="http://schemas.microsoft.com/3dmanufacturing/2013/01/3dmodel"/>
</Relationships>
"""
CORE_NS = "http://schemas.microsoft.com/3dmanufacturing/core/2015/02"
MATERIAL_NS = "http://schemas.microsoft.com/3dmanufacturing/material/2015/02"


def _fmt_rows(arr, template):
    """Fast text rows from a 2-D array through numpy's savetxt."""
    buf = io.StringIO()
    np.savetxt(buf, arr, fmt=template)
    return buf.getvalue()


def model_xml(bodies, colours, title="crystalview model"):
    """The 3D/3dmodel.model XML text.  ``bodies``: list of (name, trimesh,
    per-face group labels or None); ``colours``: group label -> '#rrggbb'.

    >>> import trimesh
    >>> box = trimesh.creation.box((10, 10, 10))
    >>> xml = model_xml([("cube", box, None)], {"host": "#b87333"})
    >>> xml.count("<triangle "), xml.count("<vertex ")
    (12, 8)
    """
    labels = list(colours)
    index = {lab: k for k, lab in enumerate(labels)}
    out = [
        '<?xml version="1.0" encoding="UTF-8"?>\n',
        f'<model unit="millimeter" xml:lang="en-US" xmlns="{CORE_NS}" xmlns:m="{MATERIAL_NS}">\n',
        f' <metadata name="Title">{_esc(title)}</metadata>\n',
        ' <metadata name="Application">crystalview</metadata>\n',
        ' <resources>\n  <m:basematerials id="1">\n',
    ]
    for lab in labels:
        out.append(f'   <m:base name={quoteattr(str(lab))} displaycolor="{colours[lab].upper()}FF"/>\n')
    out.append("  </m:basematerials>\n")
    default = index.get(next(iter(labels), None), 0)
    for k, (name, mesh, groups) in enumerate(bodies):
        oid = k + 2
        out.append(f'  <object id="{oid}" type="model" name={quoteattr(str(name))} pid="1" pindex="{default}">\n'
                   f'   <mesh>\n    <vertices>\n')
        out.append(_fmt_rows(np.asarray(mesh.vertices, float), '     <vertex x="%.5f" y="%.5f" z="%.5f"/>'))
        out.append("    </vertices>\n    <triangles>\n")
        faces = np.asarray(mesh.faces, np.int64)
        if groups is not None and len(groups) == len(faces):
            gi = np.array([index.get(g, default) for g in groups], dtype=np.int64)
            arr = np.column_stack([faces, gi])
            out.append(_fmt_rows(arr, '     <triangle v1="%d" v2="%d" v3="%d" p1="%d"/>'))
        else:
            out.append(_fmt_rows(faces, '     <triangle v1="%d" v2="%d" v3="%d"/>'))
        out.append("    </triangles>\n   </mesh>\n  </object>\n")
    out.append(" </resources>\n <build>\n")
    for k in range(len(bodies)):
        out.append(f'  <item objectid="{k + 2}"/>\n')
    out.append(" </build>\n</model>\n")
    return "".join(out)


def _esc(s):
    return str(s).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def threemf_bytes(bodies, colours, title="crystalview model"):
    """The .3mf file (a zip holding the model XML) as bytes; arguments as :func:`model_xml`.

    >>> import io, zipfile, trimesh
    >>> cube = trimesh.creation.box((10, 10, 10))
    >>> data = threemf_bytes([("cube", cube, None)], {"host": "#b87333"})
    >>> sorted(zipfile.ZipFile(io.BytesIO(data)).namelist())
    ['3D/3dmodel.model', '[Content_Types].xml', '_rels/.rels']
    """
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_DEFLATED) as z:
        z.writestr("[Content_Types].xml", CONTENT_TYPES)
        z.writestr("_rels/.rels", RELS)
        z.writestr("3D/3dmodel.model", model_xml(bodies, colours, title))
    return buf.getvalue()


def write_model_3mf(model, path, force=False):
    """Write a printable :class:`~crystalview.mesh.printable.Model` as a coloured .3mf file.

    >>> import os, tempfile, trimesh
    >>> from crystalview.mesh.printable import Body, Model
    >>> cube = trimesh.creation.box((10, 10, 10))
    >>> model = Model([Body("cube", cube, None)], {"host": "#b87333"})
    >>> write_model_3mf(model, os.path.join(tempfile.mkdtemp(), "cube.3mf")).name
    'cube.3mf'
    """
    from ..fileio import atomic_write

    bodies = [(b.name, b.mesh, b.groups) for b in model.bodies]
    used = set()
    for b in model.bodies:
        if b.groups is not None:
            used.update(set(b.groups.tolist()))
    colours = {k: v for k, v in model.colours.items() if k in used} or dict(list(model.colours.items())[:1])
    title = model.bodies[0].name if len(model.bodies) == 1 else "crystalview kit"
    return atomic_write(path, threemf_bytes(bodies, colours, title), force=force)
