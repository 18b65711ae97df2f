"""One self-contained HTML page that shows a crystal in any current browser.

``crystalview export SPEC -o crystal.html`` writes a single file that opens
offline (no server, no network, nothing installed): the same scene as the
figures and the window (:func:`crystalview.render.scene_graph.build_scene`,
so the same palette, radii, legend and caption), drawn with plain WebGL2
(our own small renderer: sphere impostors for atoms, instanced sticks,
lines and translucent meshes), with

* drag to turn, wheel or pinch to zoom, shift / right / middle drag to move;
* buttons and keys that show or hide each part the scene has (atoms, bonds,
  cell, sites, polyhedra, planes, directions, layers, defects, slip, legend);
* buttons for views along named directions ([100], [010], [001], [111], or
  [0001], [2-1-10], [10-10] for hexagonal cells) and a reset;
* a click on an atom: its element, index, role, position (Å and fractional)
  and coordination; a second click: the distance between the two;
* the legend, the caption and a scale bar that follows the zoom.

The scene data (positions, radii, colour indices, sticks, overlays) is
packed into one zlib-compressed binary block, base64 in the page, and
unpacked by the browser's own DecompressionStream.  A Content-Security-Policy
in the page forbids every network request.

Pages over :data:`MAX_PAGE_ATOMS` drawn atoms (:data:`MAX_PAGE_ATOMS_STICKS`
in ball-and-stick, whose sticks weigh more) are refused before anything is
built or written.
"""
from __future__ import annotations

import base64
import zlib
from dataclasses import replace

import numpy as np

from ..errors import LimitError, UserError
from ..fileio import atomic_write, check_target

#: Most atoms (drawn spheres, periodic images included) a page holds.
MAX_PAGE_ATOMS = 200_000
#: The same in ball-and-stick: about six sticks per atom, each more work to draw than an atom.
MAX_PAGE_ATOMS_STICKS = 50_000
#: Up to this many atoms the toggles the user did not ask for (sites,
#: polyhedra, stacking colours) are built too, so a key or button can show them.
EXTRAS_MAX_ATOMS = 20_000
#: Per-atom neighbour counts by element are written up to this many atoms.
MIX_MAX_ATOMS = 50_000
SUFFIXES = {".html", ".htm"}
STYLES = ("ball-and-stick", "space-filling", "lattice", "cell-cut")

#: group -> (key, words on its button); the same letters as the interactive window
GROUPS = {
    "atoms": ("a", "atoms"),
    "bonds": ("b", "bonds"),
    "cell": ("c", "cell outline"),
    "sites": ("s", "interstitial sites"),
    "polyhedra": ("p", "polyhedra"),
    "planes": ("f", "planes"),
    "directions": ("d", "directions"),
    "layers": ("l", "stacking layers"),
    "defects": ("v", "defects"),
    "slip": ("x", "slip system"),
    "legend": ("g", "legend"),
}


def page_limit(style):
    """Most atoms a web page of this style holds.

    >>> page_limit("ball-and-stick") < page_limit("space-filling")
    True
    """
    return MAX_PAGE_ATOMS_STICKS if style == "ball-and-stick" else MAX_PAGE_ATOMS


def check_page_size(n_atoms, style, what="crystal has"):
    """LimitError (one line, with the limit and what to do) when a page would
    hold more atoms than a browser handles comfortably.

    >>> check_page_size(100, "ball-and-stick") is None
    True
    >>> try:
    ...     check_page_size(10 ** 9, "space-filling")
    ... except LimitError:
    ...     print("refused")
    ...
    refused
    """
    cap = page_limit(style)
    if n_atoms > cap:
        sticks = (f" (ball-and-stick; --style lattice or space-filling holds {MAX_PAGE_ATOMS:,})"
                  if style == "ball-and-stick" else "")
        raise LimitError(f"a web page holds at most {cap:,} atoms{sticks}; this {what} {n_atoms:,}: use a smaller "
                         f"--repeat, --style lattice, or write a .glb (glTF) file, which has no such limit")


# ---------------------------------------------------------------- packing
class _Blob:
    """Named typed arrays in one binary block (4-byte aligned)."""

    def __init__(self):
        self.parts, self.index, self.length = [], {}, 0

    def add(self, name, arr, dtype):
        a = np.ascontiguousarray(np.asarray(arr).reshape(-1), dtype=dtype)
        pad = (-self.length) % 4
        if pad:
            self.parts.append(b"\0" * pad)
            self.length += pad
        code = {np.float32: "f4", np.uint32: "u4", np.uint16: "u2", np.uint8: "u1"}[dtype]
        self.index[name] = [code, self.length, int(a.size)]
        raw = a.tobytes()
        self.parts.append(raw)
        self.length += len(raw)
        return name

    def packed(self):
        return base64.b64encode(zlib.compress(b"".join(self.parts), 6)).decode("ascii")


def _vec(v):
    return [round(float(x), 6) for x in np.asarray(v, float).reshape(-1)]


def _arrow_triangles(start, vec, radius, double=False, sides=18):
    """(T, 3, 3) triangles of an arrow: a shaft and a cone head (two for a double arrow)."""
    start, vec = np.asarray(start, float), np.asarray(vec, float)
    L = float(np.linalg.norm(vec))
    if L < 1e-9:
        return np.zeros((0, 3, 3))
    u = vec / L
    ref = np.array([1.0, 0, 0]) if abs(u[0]) < 0.9 else np.array([0, 1.0, 0])
    e1 = np.cross(u, ref)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(u, e1)
    t = np.linspace(0, 2 * np.pi, sides + 1)
    ring = np.outer(np.cos(t), e1) + np.outer(np.sin(t), e2)
    head = min(radius * 5, L * 0.35)
    s0 = start + (u * head if double else 0)
    e0 = start + u * (L - head)
    tris = []
    for k in range(sides):
        a0, a1 = s0 + radius * ring[k], s0 + radius * ring[k + 1]
        b0, b1 = e0 + radius * ring[k], e0 + radius * ring[k + 1]
        tris += [(a0, a1, b1), (a0, b1, b0)]

    def cone(base, tip):
        out = []
        for k in range(sides):
            r0, r1 = base + 2.4 * radius * ring[k], base + 2.4 * radius * ring[k + 1]
            out += [(r0, r1, tip), (r1, r0, base)]
        return out

    tris += cone(e0, start + vec)
    if double:
        tris += cone(s0, start)
    return np.array(tris, float)


def _mesh_edges(points, faces, angle_deg=5.0):
    """Segments (K, 2, 3) of a mesh's outline: boundary edges and edges
    between faces more than ``angle_deg`` apart (the figure's feature edges)."""
    pts, faces = np.asarray(points, float), np.asarray(faces, int).reshape(-1, 3)
    n = np.cross(pts[faces[:, 1]] - pts[faces[:, 0]], pts[faces[:, 2]] - pts[faces[:, 0]])
    n /= np.maximum(np.linalg.norm(n, axis=1, keepdims=True), 1e-12)
    seen = {}
    for f, tri in enumerate(faces):
        for a, b in ((tri[0], tri[1]), (tri[1], tri[2]), (tri[2], tri[0])):
            seen.setdefault((min(a, b), max(a, b)), []).append(f)
    cos_lim = np.cos(np.radians(angle_deg))
    segs = [(pts[a], pts[b]) for (a, b), fs in seen.items()
            if len(fs) == 1 or (len(fs) == 2 and float(n[fs[0]] @ n[fs[1]]) < cos_lim)]
    return np.array(segs, float).reshape(-1, 2, 3)


def _darker(hexc, f):
    from ..render.style import darker_hex

    return darker_hex(hexc, f)


class _Collector:
    """Turns Scene parts into the page's batches (each with its group)."""

    def __init__(self, blob):
        self.blob = blob
        self.spheres, self.rings, self.lines, self.meshes = [], [], [], []

    def _name(self, kind):
        return f"{kind}{len(self.blob.index)}"

    def sphere_batch(self, group, pos, radius, colour, opacity=1.0, label=""):
        pos = np.asarray(pos, float).reshape(-1, 3)
        if not len(pos):
            return
        r = np.broadcast_to(np.asarray(radius, float), (len(pos),))
        self.spheres.append(dict(group=group, colour=colour, opacity=float(opacity), label=label, n=len(pos),
                                 pos=self.blob.add(self._name("sp"), pos, np.float32),
                                 r=self.blob.add(self._name("sr"), r, np.float32)))

    def ring_batch(self, group, pos, radius, colour, front=True):
        pos = np.asarray(pos, float).reshape(-1, 3)
        if not len(pos):
            return
        r = np.broadcast_to(np.asarray(radius, float), (len(pos),))
        self.rings.append(dict(group=group, colour=colour, front=bool(front), n=len(pos),
                               pos=self.blob.add(self._name("rp"), pos, np.float32),
                               r=self.blob.add(self._name("rr"), r, np.float32)))

    def line_batch(self, group, segments, colour, width=1.5, front=False):
        seg = np.asarray(segments, float).reshape(-1, 2, 3)
        if not len(seg):
            return
        self.lines.append(dict(group=group, colour=colour, width=float(width), front=bool(front), n=len(seg),
                               seg=self.blob.add(self._name("ls"), seg, np.float32)))

    def mesh_batch(self, group, triangles, colour, opacity=1.0):
        tri = np.asarray(triangles, float).reshape(-1, 3, 3)
        if not len(tri):
            return
        self.meshes.append(dict(group=group, colour=colour, opacity=float(opacity), n=len(tri),
                                tri=self.blob.add(self._name("mt"), tri, np.float32)))

    def scene_parts(self, sc, only=None, skip_colours=()):
        """Every overlay of a scene (not its atoms or sticks); ``only``: keep this group alone."""
        from .. import palette

        def keep(item):
            return only is None or item.get("group") == only

        for s in sc.overlay_spheres:
            if keep(s):
                self.sphere_batch(s["group"], s["pos"], s["radius"], s["colour"], s.get("opacity", 1.0),
                                  s.get("label", ""))
        for m in sc.meshes:
            if not keep(m):
                continue
            pts, faces = np.asarray(m["points"], float), np.asarray(m["faces"], int).reshape(-1, 3)
            self.mesh_batch(m["group"], pts[faces], m["colour"], m.get("opacity", 1.0))
            if m.get("edges"):
                self.line_batch(m["group"], _mesh_edges(pts, faces), _darker(m["colour"], 0.6), 1.5)
        for a in sc.arrows:
            if keep(a):
                self.mesh_batch(a["group"], _arrow_triangles(a["start"], a["vector"], a.get("radius", 0.1),
                                                             a.get("double", False)), a["colour"], 1.0)
        for mk in sc.markers:
            if keep(mk) and mk["colour"] not in skip_colours:
                self.sphere_batch(mk["group"], mk["pos"], mk["radius"], mk["colour"], 0.12)
                self.ring_batch(mk["group"], mk["pos"], mk["radius"], mk["colour"], front=mk.get("front", False))
        for ln in sc.lines:
            if keep(ln):
                self.line_batch(ln["group"], ln["segments"], ln["colour"], ln.get("width", 3.0), ln.get("front", False))
        del palette


# ---------------------------------------------------------------- facts for picking
def coordination_table(crystal, tolerance=0.05):
    """(per-atom coordination (uint8); for several elements, per-element
    neighbour counts (N, E) uint8, else None; the elements in column order):
    neighbours closer than (1 + tolerance) x
    the nearest-neighbour distance, periodic images included (the rule the
    interactive window uses), counted in one vectorised pass.

    >>> import crystalview as cv
    >>> c = cv.build("NiAl")
    >>> cn, per_element, elements = coordination_table(c)
    >>> c.symbols.tolist(), cn.tolist(), elements, per_element.tolist()
    (['Ni', 'Al'], [8, 8], ['Al', 'Ni'], [[8, 0], [0, 8]])
    """
    from scipy.spatial import cKDTree

    from ..analysis.neighbours import nearest_neighbour_distance, with_images

    n = len(crystal)
    nn = float(nearest_neighbour_distance(crystal))
    if not np.isfinite(nn) or nn <= 0:
        return np.zeros(n, np.uint8), None, []
    shell = nn * (1.0 + tolerance)
    pts, idx = with_images(crystal.positions, crystal.cell, crystal.pbc, shell)
    syms = np.asarray(crystal.symbols)
    els = list(crystal.elements)
    per = []
    for e in els:
        sel = syms[idx] == e
        cnt = cKDTree(pts[sel]).query_ball_point(crystal.positions, shell, return_length=True) if sel.any() \
            else np.zeros(n, int)
        cnt = np.asarray(cnt, int) - (syms == e)          # the atom itself
        per.append(cnt)
    per = np.clip(np.stack(per, axis=1), 0, 255)
    cn = np.clip(per.sum(axis=1), 0, 255).astype(np.uint8)
    mix = per.astype(np.uint8) if len(els) > 1 and n <= MIX_MAX_ATOMS else None
    return cn, mix, els


def _named_views(crystal):
    """(label, toward, up, right) of the buttons' views: the cube axes and the
    body diagonal, or the hexagonal ones."""
    from ..render.scene_graph import make_view

    lat = crystal.lattice
    if lat is not None and lat.is_hexagonal:
        names = ["[0001]", "[2-1-10]", "[10-10]", "[01-10]"]
    else:
        names = ["[100]", "[010]", "[001]", "[111]", "[110]"]
    out = []
    for nm in names:
        try:
            v = make_view(crystal, nm)
        except UserError:
            continue
        out.append(dict(label=v.label, up_label=v.up_label, toward=_vec(v.toward), up=_vec(v.up), right=_vec(v.right)))
    return out


# ---------------------------------------------------------------- the writer
def write_html(crystal, path, *, force=False, style="ball-and-stick", view=None, up=None, sites=False,
               polyhedra=None, planes=(), directions=(), layers=None, defects=True, slip_axis=None, cell=None,
               cell_shape=None, legend=True, caption=True, title=None):
    """Write ``crystal`` as one self-contained, offline HTML page; returns a
    dict (file, format, atoms, spheres, sticks, bytes, groups, views).

    The options are the figure's (:func:`crystalview.render`): ``style``,
    ``view`` / ``up``, ``sites``, ``polyhedra``, ``planes``, ``directions``,
    ``layers``, ``defects``, ``slip_axis``, ``cell``, ``cell_shape``; what
    they ask for is on when the page opens, and every part the crystal has
    can be switched on and off in the page.  ``caption``: True, False or
    your own text; ``title``: the browser tab's title (default the caption's
    first line).

    >>> import crystalview as cv, os, tempfile
    >>> out = write_html(cv.build("Cu"), os.path.join(tempfile.mkdtemp(), "cu.html"))
    >>> out["format"], out["atoms"], out["style"]
    ('html', 4, 'ball-and-stick')
    """
    from .. import palette
    from ..crystal import ROLES
    from ..render import style as S
    from ..render.scene_graph import build_scene, classify_layers, vacancy_positions

    p = check_target(path, force=force, suffixes=SUFFIXES)
    st = S.get_style(style or "ball-and-stick")
    check_page_size(len(crystal), st.name)          # before anything is built
    planes, directions = list(planes or []), list(directions or [])
    if view is None:       # the figure's own choice, as build_scene makes it (along a dislocation line, ...)
        from ..render.scene_graph import _slip, default_view

        view, auto_up = default_view(crystal, slip=_slip(crystal, slip_axis) if slip_axis else None, sites=sites,
                                     planes=planes, cell_shape=cell_shape)
        if up is None:
            up = auto_up
    base = build_scene(crystal, st, view, up, defects=False, cell=True, cell_shape=cell_shape)
    check_page_size(base.n_atoms, st.name, "page would draw")
    view_text, up_text = base.info.get("view_text"), base.info.get("up_text")
    n = len(crystal)
    small = n <= EXTRAS_MAX_ATOMS

    blob = _Blob()
    col = _Collector(blob)
    shared = palette.ROLE_COLOURS["shared-site"]
    legend_entries = [dict(label=lab, colour=c, shape=shp, group="atoms", when="plain")
                      for lab, c, shp in base.legend]
    on = {"atoms": True, "cell": bool(st.cell_outline if cell is None else cell), "legend": bool(legend)}
    atoms = {}
    if base.n_atoms and not base.cut_meshes:
        atoms = dict(n=int(base.n_atoms),
                     pos=blob.add("atom_pos", base.atom_pos, np.float32),
                     r=blob.add("atom_r", base.atom_radius, np.float32),
                     colour=blob.add("atom_colour", base.atom_colour, np.uint8),
                     src=blob.add("atom_src", base.atom_src, np.uint32))
    elif base.cut_meshes:
        by = {}
        for m in base.cut_meshes:
            pts, faces = np.asarray(m["points"], float), np.asarray(m["faces"], int).reshape(-1, 3)
            by.setdefault(m["colour"], []).append(pts[faces])
        for c, tris in by.items():
            col.mesh_batch("atoms", np.concatenate(tris), c, 1.0)
        atoms = dict(n=int(base.n_atoms), pos=blob.add("atom_pos", base.atom_pos, np.float32),
                     r=blob.add("atom_r", base.atom_radius, np.float32),
                     colour=blob.add("atom_colour", base.atom_colour, np.uint8),
                     src=blob.add("atom_src", base.atom_src, np.uint32), hidden=True)
    sticks = 0
    if base.bonds is not None and len(base.bonds):
        sticks = int(len(base.bond_atoms))
        atoms["bonds"] = blob.add("bonds", base.bond_atoms, np.uint32)
        atoms["bond_radius"] = float(base.bond_radius)
        on["bonds"] = True
    if base.cell_edges is not None and len(base.cell_edges):
        col.line_batch("cell", base.cell_edges, palette.ROLE_COLOURS["cell"], 1.5)
    col.scene_parts(base)                      # shared-site halos and the like

    # stacking colours: each drawn atom by its own place
    layer_note = None
    if base.n_atoms and not base.cut_meshes and (layers or small):
        try:
            cls, lab = classify_layers(crystal, None if layers in (None, True, False) else layers,
                                       points=base.atom_pos)
        except UserError as exc:
            if layers:
                raise
            cls, layer_note = None, str(exc)
        if cls is not None:
            host = crystal.roles[base.atom_src] == ROLES.index("host")
            k0 = len(base.colours)
            colours = list(base.colours) + [palette.LAYER_COLOURS[c] for c in "ABC"]
            alt = np.where(host, k0 + cls, base.atom_colour)
            base.colours = colours
            atoms["layer_colour"] = blob.add("layer_colour", alt, np.uint8)
            used = sorted(set(cls[host].tolist()))
            keep = [e for e in base.legend if not e[0].endswith("(host)") and "(" in e[0]]
            legend_entries += [dict(label=e[0], colour=e[1], shape=e[2], group="atoms", when="layers") for e in keep]
            legend_entries += [dict(label=f"layer {'ABC'[k]} on {lab}", colour=palette.LAYER_COLOURS["ABC"[k]],
                                    shape="ball", group="atoms", when="layers") for k in used]
            on["layers"] = bool(layers)

    # overlays: a scene of their own each, as in the interactive window
    plain = replace(st, bonds=False, cut=False, cell_outline=False)
    atom_labels = {e[0] for e in base.legend}
    wanted = []
    if sites or small:
        wanted.append(("sites", dict(sites=True), bool(sites)))
    if polyhedra or small:
        wanted.append(("polyhedra", dict(polyhedra=polyhedra or "coordination"), bool(polyhedra)))
    if planes:
        wanted.append(("planes", dict(planes=planes), True))
    if directions:
        wanted.append(("directions", dict(directions=directions), True))
    if slip_axis:
        wanted.append(("slip", dict(slip_axis=slip_axis), True))
    if defects and ((crystal.metadata or {}).get("defects") or vacancy_positions(crystal)):
        wanted.append(("defects", dict(defects=True), True))
    notes = {}
    for group, kw, asked in wanted:
        kw = dict(kw)
        kw.setdefault("defects", False)
        try:
            sc = build_scene(crystal, plain, view_text, up_text, cell=False, cell_shape=cell_shape, **kw)
        except UserError as exc:
            if asked:
                raise
            notes[group] = str(exc)
            continue
        before = (len(col.spheres), len(col.rings), len(col.lines), len(col.meshes))
        col.scene_parts(sc, only=group, skip_colours=(shared,))
        if before == (len(col.spheres), len(col.rings), len(col.lines), len(col.meshes)):
            continue
        legend_entries += [dict(label=lab, colour=c, shape=shp, group=group, when="any")
                           for lab, c, shp in sc.legend if lab not in atom_labels]
        on[group] = bool(asked)

    # what a click reports
    cn, mix, els = coordination_table(crystal)
    sym_index = {e: k for k, e in enumerate(els)}
    facts = dict(elements=els, roles=list(ROLES),
                 element=blob.add("element", [sym_index[s] for s in crystal.symbols], np.uint8),
                 role=blob.add("role", crystal.roles, np.uint8),
                 cn=blob.add("cn", cn, np.uint8), cell=np.asarray(crystal.cell, float).tolist())
    if mix is not None:
        facts["mix"] = blob.add("mix", mix, np.uint8)

    groups = []
    present = {"atoms", "legend"} | {b["group"] for b in col.spheres + col.rings + col.lines + col.meshes}
    if "bonds" in atoms:
        present.add("bonds")
    if "layer_colour" in atoms:
        present.add("layers")
    for g, (key, words) in GROUPS.items():
        if g in present:
            groups.append(dict(name=g, key=key, label=words, on=bool(on.get(g, g in ("atoms", "legend")))))
    if caption is True:
        cap_lines = list(base.caption)
    elif caption:
        cap_lines = [str(caption)]
    else:
        cap_lines = []
    v = base.view

    def plain(text):          # no control characters (escape codes, NUL) in the page's text
        return "".join(ch if ch.isprintable() else " " for ch in str(text)).strip()

    cap_lines = [plain(t) for t in cap_lines]
    meta = dict(
        version=1, title=plain(title or (base.caption[0] if base.caption else "crystal")) or "crystal",
        caption=cap_lines,
        colours=list(base.colours), legend=legend_entries, groups=groups, notes=notes,
        view=dict(label=v.label, up_label=v.up_label, toward=_vec(v.toward), up=_vec(v.up), right=_vec(v.right)),
        views=_named_views(crystal), atoms=atoms, facts=facts, arrays=blob.index,
        spheres=col.spheres, rings=col.rings, lines=col.lines, meshes=col.meshes,
        style=dict(name=st.name, ambient=S.AMBIENT, diffuse=S.DIFFUSE, specular=S.SPECULAR,
                   shininess=S.SPECULAR_POWER, background=S.BACKGROUND, text=S.TEXT_COLOUR,
                   bond=palette.ROLE_COLOURS["bond"], highlight="#b8331f"),
    )
    from .html_page import page

    text = page(meta, blob.packed())
    atomic_write(p, text, force=force)
    info = dict(file=str(p), format="html", atoms=n, spheres=int(base.n_atoms), sticks=sticks,
                bytes=p.stat().st_size, style=st.name, view=v.label, up=v.up_label,
                groups=[g["name"] for g in groups], views=[x["label"] for x in meta["views"]])
    if layer_note:
        info["layers_note"] = layer_note
    return info
