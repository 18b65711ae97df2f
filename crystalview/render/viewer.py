"""The interactive window.

Mouse: left drag rotates, wheel or right drag zooms, shift + left drag (or
middle drag) pans.  Keys toggle each overlay (the list is drawn in the window
and says what is on); a left click on an atom reports its element, role,
position and coordination, a second click the distance between the two.

Everything the window does is also reachable without a mouse through
:class:`Viewer` (``press``, ``click``, ``image``, ``close``), which the tests
use to drive a real window on a virtual X display.  The pick logic itself
(:func:`pick_atom`, :func:`describe_atom`, :func:`describe_pair`) needs no
window at all.
"""
from __future__ import annotations

import os
import sys

import numpy as np

from ..errors import UserError

#: key -> (overlay, words in the key list).  Overlays the crystal cannot have
#: (bonds in a space-filling style, planes nobody asked for) are left out.
KEYS = {
    "a": ("atoms", "atoms"),
    "b": ("bonds", "bonds"),
    "c": ("cell", "cell outline"),
    "s": ("sites", "interstitial sites"),
    "p": ("polyhedra", "coordination polyhedra"),
    "f": ("planes", "planes"),
    "d": ("directions", "directions"),
    "l": ("layers", "stacking layer colours"),
    "v": ("defects", "vacancies"),
    "x": ("slip", "slip system"),
    "g": ("legend", "legend"),
}
#: keys that act rather than toggle
ACTIONS = {
    "o": "perspective / orthographic",
    "r": "reset the view",
    "u": "clear the picks",
    "k": "hide / show this list",
    "q": "close (or Esc)",
}
MOUSE_HELP = ["drag: rotate   wheel: zoom",
              "shift+drag: pan",
              "click an atom: what it is",
              "click a second: the distance"]
FONT = 15               # pixels, on-screen text
CHAR_W = 0.58 * FONT    # rough width of a character of the sans face, for the layout
CLICK_SLOP = 4          # pixels the mouse may move between press and release and still count as a click
HIGHLIGHT = "#b8331f"   # palette 'direction' colour, reused for the picked-atom outline


def has_display():
    """Whether a window can open here (a display on Linux; always on Windows and macOS).

    >>> isinstance(has_display(), bool)
    True
    """
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")) or os.name == "nt" \
        or sys.platform == "darwin"


def no_display_message(spec="SPEC"):
    """The one line said where no window can open.

    >>> no_display_message("Cu").endswith("'crystalview render Cu -o figure.png'")
    True
    """
    return ("no display here (DISPLAY and WAYLAND_DISPLAY are unset); write a picture instead with "
            f"'crystalview render {spec} -o figure.png'")


def show(crystal, view=None, style="ball-and-stick", *, up=None, sites=False, polyhedra=None, planes=(),
         directions=(), layers=None, defects=True, slip_axis=None, cell=None, legend=True,
         size=(1280, 960), cell_shape=None):
    """Open ``crystal`` in a window and wait until it is closed ('q', Esc or
    the window's close button).  Without a display, raises UserError.

    >>> import os, sys
    >>> import crystalview as cv
    >>> env = {k: os.environ.pop(k) for k in ("DISPLAY", "WAYLAND_DISPLAY") if k in os.environ}
    >>> try:                                  # on Linux without a display: one line, no window
    ...     show(cv.build("Cu")) if sys.platform.startswith("linux") else print("no display here")
    ... except UserError as e:
    ...     print(str(e).split(" (")[0])
    ... finally:
    ...     os.environ.update(env)
    no display here
    """
    v = Viewer(crystal, view, style, up=up, sites=sites, polyhedra=polyhedra, planes=planes,
               directions=directions, layers=layers, defects=defects, slip_axis=slip_axis, cell=cell,
               legend=legend, size=size, cell_shape=cell_shape)
    v.run()


# ==================================================================== picking (no window needed)
def ray_from_display(renderer, x, y):
    """World-space ray (origin, unit direction) through display pixel (x, y),
    VTK convention (origin bottom-left).

    >>> from crystalview.render.raster3d import _plotter
    >>> pl = _plotter((100, 100), False)
    >>> cam = pl.camera
    >>> cam.SetParallelProjection(True); cam.SetFocalPoint(0, 0, 0); cam.SetPosition(0, 0, 10); cam.SetViewUp(0, 1, 0)
    >>> origin, d = ray_from_display(pl.renderer, 50, 50)
    >>> [round(float(x), 6) + 0.0 for x in d]
    [0.0, 0.0, -1.0]
    >>> pl.close()
    """
    pts = []
    for z in (0.0, 1.0):
        renderer.SetDisplayPoint(float(x), float(y), z)
        renderer.DisplayToWorld()
        w = np.array(renderer.GetWorldPoint(), float)
        pts.append(w[:3] / (w[3] if w[3] else 1.0))
    d = pts[1] - pts[0]
    return pts[0], d / max(np.linalg.norm(d), 1e-300)


def pick_atom(pos, radius, origin, direction):
    """Index of the first sphere (pos, radius) the ray meets, or None.

    >>> pos = np.array([[0, 0, 0], [0, 0, 5.0]])
    >>> pick_atom(pos, [1.0, 1.0], origin=[0, 0, 10.0], direction=[0, 0, -1.0])     # the nearer of the two
    1
    """
    pos = np.asarray(pos, float)
    if not len(pos):
        return None
    rel = pos - np.asarray(origin, float)
    t = rel @ np.asarray(direction, float)
    d2 = np.einsum("ij,ij->i", rel, rel) - t * t
    r = np.asarray(radius, float)
    hit = (d2 <= r * r) & (t > 0)
    if not hit.any():
        return None
    tin = t - np.sqrt(np.maximum(r * r - d2, 0.0))
    cand = np.nonzero(hit)[0]
    return int(cand[np.argmin(tin[cand])])


class Neighbours:
    """Per-atom coordination for picking: neighbours closer than (1 + tolerance)
    x the crystal's nearest-neighbour distance, periodic images included (the
    same rule as ``analysis.neighbours.coordination_numbers``), built once.

    >>> import crystalview as cv
    >>> cn, by = Neighbours(cv.build("Cu")).of(0)          # fcc: 12 nearest neighbours
    >>> cn, {str(k): v for k, v in by.items()}
    (12, {'Cu': 12})
    """

    def __init__(self, crystal, tolerance=0.05):
        from scipy.spatial import cKDTree

        from ..analysis.neighbours import nearest_neighbour_distance, with_images

        self.crystal = crystal
        self.nn = float(nearest_neighbour_distance(crystal))
        self.shell = self.nn * (1.0 + tolerance)
        self.pts, self.idx = with_images(crystal.positions, crystal.cell, crystal.pbc, self.shell)
        self.tree = cKDTree(self.pts)

    def of(self, i):
        """(coordination number, {element: count}) of atom ``i``."""
        p = self.crystal.positions[i]
        hits = np.array(self.tree.query_ball_point(p, self.shell), dtype=int)
        if len(hits):
            hits = hits[np.linalg.norm(self.pts[hits] - p, axis=1) > 1e-6]
        sy = self.crystal.symbols
        by = {}
        for j in self.idx[hits]:
            by[sy[j]] = by.get(sy[j], 0) + 1
        return len(hits), dict(sorted(by.items()))


def atom_info(crystal, i, position=None, neighbours=None):
    """Facts about atom ``i`` (``position``: where it is drawn, which may be a
    periodic image of the stored position).

    >>> import crystalview as cv
    >>> info = atom_info(cv.build("Fe"), 0)
    >>> str(info["element"]), info["role"], info["coordination"]
    ('Fe', 'host', 8)
    """
    from ..crystal import ROLES

    p = np.asarray(crystal.positions[i] if position is None else position, float)
    nb = neighbours or Neighbours(crystal)
    cn, by = nb.of(i)
    return dict(index=int(i), element=crystal.symbols[i], role=ROLES[int(crystal.roles[i])],
                position=p, fractional=crystal.to_fractional(p[None])[0], coordination=int(cn),
                neighbours_by_element=by)


def describe_atom(info):
    """Lines of text for one picked atom.

    >>> import crystalview as cv
    >>> describe_atom(atom_info(cv.build("Fe"), 0))[-1]
    'coordination 8'
    """
    p, f = info["position"], info["fractional"]
    by = info["neighbours_by_element"]
    mix = f" ({', '.join(f'{k} {v}' for k, v in by.items())})" if len(by) > 1 else ""
    return [f"{info['element']} atom {info['index']}, {info['role']}",
            f"at {p[0]:.3f}, {p[1]:.3f}, {p[2]:.3f} \u00c5",
            f"fractional {f[0]:.4f}, {f[1]:.4f}, {f[2]:.4f}",
            f"coordination {info['coordination']}{mix}"]


def describe_pair(a, b):
    """Line of text for the distance between two picked atoms (as drawn).

    >>> import crystalview as cv
    >>> c = cv.build("Fe")
    >>> text, d = describe_pair(atom_info(c, 0), atom_info(c, 1))
    >>> text
    'Fe 0 to Fe 1: 2.4825 Å'
    """
    d = float(np.linalg.norm(np.asarray(b["position"]) - np.asarray(a["position"])))
    return f"{a['element']} {a['index']} to {b['element']} {b['index']}: {d:.4f} \u00c5", d


def describe_pick(crystal, picks, neighbours=None):
    """Text for the last one or two picks, each (atom index, drawn position).

    >>> import crystalview as cv
    >>> c = cv.build("Fe")
    >>> describe_pick(c, [(0, c.positions[0]), (1, c.positions[1])]).splitlines()[-1]
    'distance Fe 0 to Fe 1: 2.4825 Å'
    """
    nb = neighbours or Neighbours(crystal)
    infos = [atom_info(crystal, i, p, nb) for i, p in picks[-2:]]
    if len(infos) == 1:
        return "\n".join(describe_atom(infos[0]))
    lines = []
    for n, f in enumerate(infos, 1):
        p = f["position"]
        lines += [f"{n}: {f['element']} atom {f['index']}, {f['role']}, coordination {f['coordination']}",
                  f"   at {p[0]:.3f}, {p[1]:.3f}, {p[2]:.3f} \u00c5"]
    return "\n".join(lines + ["distance " + describe_pair(*infos)[0]])


# ==================================================================== the window
class Viewer:
    """A crystal in an on-screen window.  ``run()`` hands it to the user;
    ``press``/``click``/``image``/``close`` drive it from code.

    >>> import os, sys
    >>> import crystalview as cv
    >>> env = {k: os.environ.pop(k) for k in ("DISPLAY", "WAYLAND_DISPLAY") if k in os.environ}
    >>> try:                                  # the window needs a display; without one, one line
    ...     Viewer(cv.build("Cu")) if sys.platform.startswith("linux") else print("no display here")
    ... except UserError as e:
    ...     print(str(e).split(" (")[0])
    ... finally:
    ...     os.environ.update(env)
    no display here
    """

    def __init__(self, crystal, view=None, style="ball-and-stick", *, up=None, sites=False, polyhedra=None,
                 planes=(), directions=(), layers=None, defects=True, slip_axis=None, cell=None, legend=True,
                 size=(1280, 960), cell_shape=None):
        if not has_display():
            raise UserError(no_display_message())
        from . import style as S
        from .scene_graph import build_scene

        self.crystal = crystal
        self.st = S.get_style(style) if isinstance(style, str) else style
        from .cells import prism_applies

        self.cell_shape = cell_shape
        self.prism = prism_applies(crystal, cell_shape)
        if view is None:        # the figure's choice: along a dislocation line, across a slip system
            from .scene_graph import _slip, default_view

            view, auto_up = default_view(crystal, slip=_slip(crystal, slip_axis) if slip_axis else None,
                                         cell_shape=cell_shape)
            up = auto_up if up is None else up
        self.view_text, self.up_text = view, up
        self.size = S.check_size(size)
        self.requests = dict(sites=sites, polyhedra=polyhedra, planes=list(planes or []),
                             directions=list(directions or []), layers=layers, slip_axis=slip_axis)
        # the plain scene: atoms, bonds, cell; every overlay is a scene of its own so it can come and go
        self.base = build_scene(crystal, self.st, view, up, defects=False, cell=cell, cell_shape=cell_shape)
        self.picks = []
        self._neigh = None
        self.message = ""
        self.groups = {}          # overlay -> [actors]
        self.legend_of = {}       # overlay -> legend entries
        self.on = {}
        self.show_keys = True
        self.closed = False
        self._running = False
        self._build_window(legend, defects)

    # ---------------------------------------------------------------- set-up
    def _build_window(self, legend, defects):
        os.environ.pop("VTK_DEFAULT_OPENGL_WINDOW", None)   # a figure earlier in this process may have set EGL
        import pyvista as pv
        from vtkmodules.vtkInteractionStyle import vtkInteractorStyleTrackballCamera

        from . import figure as F

        W, H = self.size
        self.pl = pl = pv.Plotter(window_size=[W, H], lighting="none", title="crystalview", off_screen=False)
        pl.set_background("white")
        F._lights(pl)
        base_groups = F.add_scene(pl, self.base, None, cull=False)
        self.groups["atoms"] = base_groups.get("atoms", [])
        self.groups["bonds"] = base_groups.get("bonds", [])
        self.groups["cell"] = base_groups.get("cell", [])
        self.legend_of["atoms"] = list(self.base.legend)
        for g in ("atoms", "bonds", "cell"):
            self.on[g] = bool(self.groups[g])
        r = self.requests
        wanted = dict(sites=bool(r["sites"]), polyhedra=bool(r["polyhedra"]), planes=bool(r["planes"]),
                      directions=bool(r["directions"]), slip=bool(r["slip_axis"]), defects=bool(defects),
                      layers=bool(r["layers"]))
        self.available = ["atoms", "cell", "sites", "polyhedra", "layers", "legend"]
        if self.groups["bonds"]:
            self.available.insert(1, "bonds")
        for g in ("planes", "directions", "slip"):
            if wanted[g]:
                self.available.append(g)
        if self._vacancies():
            self.available.append("defects")
        for g, w in wanted.items():
            if w and g in self.available:
                self._set(g, True, render=False)
        self.on["legend"] = bool(legend)

        # camera: fitted to what is on screen now, leaving the left column to the key list
        pts, rad = self._extent()
        lay = self._layout(pts, rad)
        extent = float(np.max(np.linalg.norm(pts - lay.centre, axis=1) + rad))
        F._set_camera(pl, self.base, lay, extent)
        cam = pl.camera
        self._home = (cam.GetPosition(), cam.GetFocalPoint(), cam.GetViewUp(), cam.GetParallelScale(),
                      cam.GetParallelProjection())
        pl.camera_set = True

        self.t_keys = self._text(8, -8, "left", "top", FONT, anchor=(0.0, 1.0))
        self.t_pick = self._text(-8, 8, "right", "bottom", FONT, anchor=(1.0, 0.0))
        self.t_caption = self._text(8, 8, "left", "bottom", FONT - 2, anchor=(0.0, 0.0))
        self.t_caption.SetInput("\n".join(self.base.caption))
        self._update_text()
        self._update_legend()

        # mouse and keys: our own handlers only (VTK's built-in letter keys would switch the
        # whole scene to wireframe on 'w', fly on 'f', ... and pyvista's defaults bind 'b' and 'v')
        self.style = st = vtkInteractorStyleTrackballCamera()
        st.AddObserver("LeftButtonPressEvent", self._on_press)
        st.AddObserver("LeftButtonReleaseEvent", self._on_release)
        st.AddObserver("CharEvent", lambda *a: None)
        pl.show(auto_close=False, interactive_update=True)      # opens the window, returns at once
        if sys.platform.startswith("linux") and "X" not in pl.render_window.GetClassName() \
                and not os.environ.get("WAYLAND_DISPLAY"):
            pl.close()                                          # VTK fell back to an off-screen window
            raise UserError(f"could not open a window on display {os.environ.get('DISPLAY', '')!r}; write a "
                            "picture instead with 'crystalview render SPEC -o figure.png'")
        pl.iren.style = st
        pl.iren.clear_key_event_callbacks()
        for k in list(KEYS) + list(ACTIONS) + ["Escape"]:
            pl.iren.add_key_event(k, self._guard(lambda k=k: self.press_action(k)))
        pl.iren.add_observer("ExitEvent", lambda *a: self._exit())
        self.render()

    def _text(self, x, y, halign, valign, size, anchor=None, colour=None, box=True):
        """A text actor at normalised window position (x, y), or ``anchor``ed
        to a normalised point with (x, y) a pixel offset from it (so it keeps
        its place when the window is resized)."""
        import vtkmodules.vtkRenderingFreeType  # noqa: F401
        from vtkmodules.vtkRenderingCore import vtkTextActor

        from . import figure as F
        from . import style as S
        from .. import palette

        t = vtkTextActor()
        pc = t.GetPositionCoordinate()
        if anchor is None:
            pc.SetCoordinateSystemToNormalizedViewport()
        else:
            from vtkmodules.vtkRenderingCore import vtkCoordinate

            ref = vtkCoordinate()
            ref.SetCoordinateSystemToNormalizedViewport()
            ref.SetValue(*anchor)
            pc.SetCoordinateSystemToViewport()
            pc.SetReferenceCoordinate(ref)
            t._ref = ref
        pc.SetValue(x, y)
        tp = t.GetTextProperty()
        tp.SetFontSize(size)
        tp.SetColor(*palette.hex_to_rgb(colour or S.TEXT_COLOUR))
        if box:
            tp.SetBackgroundColor(1, 1, 1)
            tp.SetBackgroundOpacity(0.75)
        font = F._font_file()
        if font:
            tp.SetFontFamily(4)
            tp.SetFontFile(font)
        getattr(tp, {"left": "SetJustificationToLeft", "right": "SetJustificationToRight"}[halign])()
        getattr(tp, {"top": "SetVerticalJustificationToTop", "bottom": "SetVerticalJustificationToBottom"}[valign])()
        self.pl.renderer.AddActor(t)
        return t

    def _layout(self, pts, rad):
        from dataclasses import replace

        from . import figure as F

        W, H = self.size
        keys = self._key_lines()
        left = min(0.4 * W, CHAR_W * max(len(t) for t in keys) + 16)
        labels = [e[0] for e in self.legend_entries()]
        right = min(0.35 * W, CHAR_W * max([len(t) for t in labels] + [40]) + 48)   # legend and pick text
        bottom = FONT * 1.3 * len(self.base.caption) + 10
        lay = F.make_layout(self.base, (int(W - left - right), int(H - bottom)), legend=False, scale_bar=False,
                            caption=False)
        # the fit above used the base scene; refit to everything drawn now
        q = self.base.view.project(pts)
        lo = np.min(q[:, :2] - rad[:, None], axis=0)
        hi = np.max(q[:, :2] + rad[:, None], axis=0)
        x0, y0, x1, y1 = lay.rect
        span = np.maximum(hi - lo, 1e-6)
        scale = float(min((x1 - x0) / span[0], (y1 - y0) / span[1]))
        mid = (lo + hi) / 2
        v = self.base.view
        centre = v.right * mid[0] + v.up * mid[1] + v.toward * (q[:, 2].min() + q[:, 2].max()) / 2
        return replace(lay, W=W, H=H, rect=(x0 + left, y0, x1 + left, y1), scale=scale, centre=centre)

    def _extent(self):
        pts, rad = [*self.base.extent_points()]
        pts, rad = [pts], [rad]
        for g, sc in getattr(self, "_overlay_scenes", {}).items():
            if self.on.get(g):
                p, r = sc.extent_points()
                pts.append(p)
                rad.append(r)
        return np.vstack(pts), np.concatenate(rad)

    def _vacancies(self):
        from .scene_graph import vacancy_positions

        return bool(vacancy_positions(self.crystal))

    # ---------------------------------------------------------------- overlays
    def _overlay(self, group):
        """Build an overlay's actors the first time it is asked for."""
        if group in self.groups:
            return self.groups[group]
        from dataclasses import replace

        from . import figure as F
        from .scene_graph import build_scene, outline_edges

        r = self.requests
        if group == "cell":
            sc = build_scene(self.crystal, replace(self.st, bonds=False, cut=False), self.view_text, self.up_text,
                             defects=False, cell=True, cell_shape=self.cell_shape)
            sc.atom_pos = None
            sc.legend = []
            if not self.prism:
                sc.cell_edges = outline_edges(self.crystal)
        elif group == "layers":
            return self._layer_actor()
        else:
            kw = dict(sites=group == "sites", defects=group == "defects",
                      polyhedra=(r["polyhedra"] or "coordination") if group == "polyhedra" else None,
                      planes=r["planes"] if group == "planes" else (),
                      directions=r["directions"] if group == "directions" else (),
                      slip_axis=r["slip_axis"] if group == "slip" else None)
            sc = build_scene(self.crystal, replace(self.st, bonds=False, cut=False, cell_outline=False),
                             self.view_text, self.up_text, cell=False, cell_shape=self.cell_shape, **kw)
            atom_labels = {e[0] for e in self.base.legend}
            sc.legend = [e for e in sc.legend if e[0] not in atom_labels]
            sc.atom_pos = None
        self.__dict__.setdefault("_overlay_scenes", {})[group] = sc
        got = F.add_scene(self.pl, sc, None, cull=False)
        actors = [a for k, lst in got.items() if k != "atoms_drawn" for a in lst]
        self.groups[group] = actors
        self.legend_of[group] = list(sc.legend)
        if not actors:
            self.message = f"nothing to draw for '{group}' in this crystal"
        return actors

    def _layer_actor(self):
        from . import figure as F
        from .scene_graph import classify_layers
        from .. import palette
        from ..crystal import ROLES

        if self.base.cut_meshes:
            raise UserError("stacking colours need a ball style (ball-and-stick, space-filling or lattice)")
        # each drawn atom by its own place (a copy on a cell face may sit in another layer than its atom)
        cls, lab = classify_layers(self.crystal, None if self.requests["layers"] in (None, True, False)
                                   else self.requests["layers"], points=self.base.atom_pos)
        src = self.base.atom_src
        host = self.crystal.roles[src] == ROLES.index("host")
        rgb = F._rgb(self.base.colours)[self.base.atom_colour]
        lay_rgb = F._rgb([palette.LAYER_COLOURS[n] for n in "ABC"])
        rgb[host] = lay_rgb[cls[host]]
        a = F.sphere_actor(self.base.atom_pos, self.base.atom_radius, rgb)
        self.pl.renderer.AddActor(a)
        used = sorted(set(cls[host].tolist()))
        self.groups["layers"] = [a]
        keep = [e for e in self.base.legend if not e[0].endswith("(host)") and "(" in e[0]]   # as build_scene does
        self.legend_of["layers"] = keep + [(f"layer {'ABC'[k]} on {lab}", palette.LAYER_COLOURS["ABC"[k]], "ball")
                                    for k in used]
        return [a]

    def _set(self, group, value, render=True):
        self.pl.suppress_rendering = True          # pyvista would redraw after every actor added
        try:
            self._set_quiet(group, value)
        finally:
            self.pl.suppress_rendering = False
        if render:
            self._update_text()
            self._update_legend()
            self.render()

    def _set_quiet(self, group, value):
        if group == "legend":
            self.on["legend"] = value
            self._update_legend()
        else:
            actors = self._overlay(group) if value else self.groups.get(group, [])
            self.on[group] = bool(value and actors)
            for a in actors:
                a.SetVisibility(self.on[group])
            # stacking colours replace the plain atoms while shown
            atoms_on = self.on.get("atoms", True)
            for a in self.groups.get("atoms", []):
                a.SetVisibility(atoms_on and not self.on.get("layers"))
            for a in self.groups.get("layers", []):
                a.SetVisibility(atoms_on and bool(self.on.get("layers")))

    def _key_lines(self):
        lines = []
        if self.show_keys:
            for k, (g, words) in KEYS.items():
                if g in self.available:
                    lines.append(f"{k}  {words}: {'on' if self.on.get(g) else 'off'}")
            lines.append("")
            lines += [f"{k}  {w}" for k, w in ACTIONS.items()]
            lines += [""] + MOUSE_HELP
        else:
            lines = ["k  show the key list"]
        return lines

    def _update_text(self):
        self.t_keys.SetInput("\n".join(self._key_lines()))
        pick = describe_pick(self.crystal, self.picks, self._neighbours()) if self.picks else ""
        self.t_pick.SetInput("\n".join(t for t in (pick, self.message) if t) or " ")

    def _update_legend(self):
        pl = self.pl
        pl.suppress_rendering = True
        try:
            self._legend_quiet()
        finally:
            pl.suppress_rendering = False

    def legend_entries(self):
        """(label, colour, shape) of everything shown now."""
        if not self.on.get("legend"):
            return []
        entries = []
        if self.on.get("atoms"):
            entries += self.legend_of.get("layers" if self.on.get("layers") else "atoms", [])
        for g, _w in KEYS.values():
            if g not in ("atoms", "layers", "legend") and self.on.get(g):
                entries += self.legend_of.get(g, [])
        return entries

    def _legend_quiet(self):
        """The legend: one line per entry, a coloured mark at the right of each
        label, anchored to the window's top-right corner."""
        for a in getattr(self, "_legend_actors", []):
            self.pl.renderer.RemoveActor(a)
        self._legend_actors = []
        marks = {"ball": "\u25cf", "ring": "\u25cb", "patch": "\u25a0", "arrow": "\u27a1", "line": "\u2014",
                 "none": " "}
        for k, (lab, col, shape) in enumerate(self.legend_entries()):
            y = -10 - k * FONT * 1.6
            t = self._text(-36, y, "right", "top", FONT, anchor=(1.0, 1.0))
            t.SetInput(lab)
            m = self._text(-12, y + 2, "right", "top", FONT + 4, anchor=(1.0, 1.0), colour=col, box=False)
            m.SetInput(marks.get(shape, marks["patch"]))
            self._legend_actors += [t, m]

    # ---------------------------------------------------------------- events
    def _guard(self, fn):
        """Run an event handler; a bad request shows as a message, never a crash."""
        def f():
            try:
                fn()
            except UserError as e:
                self.message = str(e)
                self._update_text()
                self.render()
            except Exception as e:          # noqa: BLE001  (an event handler must not take the window down)
                self.message = f"could not do that: {type(e).__name__}: {e}"
                self._update_text()
                self.render()
        return f

    def press_action(self, key):
        self.message = ""
        if key in ("q", "Escape"):
            if self._running:
                self.pl.iren.interactor.TerminateApp()     # run() closes once the event loop has returned
            else:
                self.close()
            return
        if key in KEYS:
            g = KEYS[key][0]
            if g not in self.available:
                return
            self._set(g, not self.on.get(g))
        elif key == "o":
            cam = self.pl.camera
            cam.SetParallelProjection(not cam.GetParallelProjection())
            self.render()
        elif key == "r":
            pos, foc, upv, scale, par = self._home
            cam = self.pl.camera
            cam.SetPosition(*pos)
            cam.SetFocalPoint(*foc)
            cam.SetViewUp(*upv)
            cam.SetParallelScale(scale)
            cam.SetParallelProjection(par)
            self.pl.renderer.ResetCameraClippingRange()
            self.render()
        elif key == "u":
            self.picks = []
            self._draw_picks()
            self._update_text()
            self.render()
        elif key == "k":
            self.show_keys = not self.show_keys
            self._update_text()
            self.render()

    def _on_press(self, obj, event):
        self._down = self.pl.iren.interactor.GetEventPosition()
        self.style.OnLeftButtonDown()

    def _on_release(self, obj, event):
        self.style.OnLeftButtonUp()
        up = self.pl.iren.interactor.GetEventPosition()
        down = getattr(self, "_down", None)
        self._down = None
        if down is not None and max(abs(up[0] - down[0]), abs(up[1] - down[1])) <= CLICK_SLOP:
            self._guard(lambda: self.pick_at(*up))()

    def pick_at(self, x, y):
        """Pick the atom under display pixel (x, y) (VTK: origin bottom-left)."""
        self.message = ""
        if not self.on.get("atoms", True):
            return None
        o, d = ray_from_display(self.pl.renderer, x, y)
        k = pick_atom(self.base.atom_pos, self.base.atom_radius, o, d)
        if k is None:
            return None
        self.picks = (self.picks + [(int(self.base.atom_src[k]), self.base.atom_pos[k].copy())])[-2:]
        self._draw_picks()
        self._update_text()
        self.render()
        return k

    def _neighbours(self):
        if self._neigh is None:
            self._neigh = Neighbours(self.crystal)
        return self._neigh

    def _draw_picks(self):
        import pyvista as pv

        pl = self.pl
        for name in ("pick0", "pick1", "pick-line"):
            pl.remove_actor(name, render=False)
        for n, (i, p) in enumerate(self.picks):
            r = float(self.base.atom_radius[np.nonzero(self.base.atom_src == i)[0][0]]) * 1.18
            pl.add_mesh(pv.Sphere(radius=r, center=p, theta_resolution=32, phi_resolution=24), color=HIGHLIGHT,
                        opacity=0.45, smooth_shading=True, name=f"pick{n}", pickable=False, render=False)
        if len(self.picks) == 2:
            a = pl.add_mesh(pv.Line(self.picks[0][1], self.picks[1][1]), color=HIGHLIGHT, line_width=3,
                            name="pick-line", pickable=False, render=False)
            a.GetProperty().SetLighting(False)

    # ---------------------------------------------------------------- driving it from code
    def render(self):
        if not self.closed:
            self.pl.render_window.Render()

    def press(self, key):
        """Send a key through the window's interactor, as the keyboard would."""
        it = self.pl.iren.interactor
        code = key if len(key) == 1 else "\x1b" if key == "Escape" else "\0"
        it.SetKeyCode(code)
        it.SetKeySym(key)
        it.InvokeEvent("KeyPressEvent")
        if not self.closed:
            it.InvokeEvent("CharEvent")
            it.InvokeEvent("KeyReleaseEvent")

    def click(self, x, y):
        """Left click at pixel (x, y), origin top-left as in a screenshot."""
        it = self.pl.iren.interactor
        yy = self.size[1] - 1 - int(y)
        it.SetEventInformation(int(x), yy, 0, 0, "\0", 0, None)
        it.InvokeEvent("LeftButtonPressEvent")
        it.InvokeEvent("LeftButtonReleaseEvent")

    def to_pixels(self, points):
        """Screen pixels (x, y, origin top-left) of world points."""
        ren = self.pl.renderer
        out = []
        for p in np.atleast_2d(points):
            ren.SetWorldPoint(*p, 1.0)
            ren.WorldToDisplay()
            x, y, _ = ren.GetDisplayPoint()
            out.append((x, self.size[1] - 1 - y))
        return np.array(out)

    def image(self):
        """The window's pixels, (H, W, 3) uint8."""
        from . import figure as F

        self.render()
        return F._grab(self.pl, False)[..., :3]

    def text(self):
        """What the on-screen texts say: {'keys', 'pick', 'caption'}."""
        return {"keys": self.t_keys.GetInput(), "pick": self.t_pick.GetInput(), "caption": self.t_caption.GetInput()}

    def run(self):
        """Hand the window to the user until 'q', Esc or the close button."""
        if not self.closed:
            self._running = True
            try:
                self.pl.iren.interactor.Start()
            finally:
                self._running = False
        self.close()

    def _exit(self):
        self.pl.iren.interactor.TerminateApp()

    def close(self):
        if self.closed:
            return
        self.closed = True
        it = self.pl.iren.interactor if self.pl.iren is not None else None
        if it is not None:
            it.TerminateApp()
        self.pl.close()
