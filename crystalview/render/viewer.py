"""The interactive window: rotate (left drag), zoom (wheel), pan (shift or
middle drag); keys toggle each overlay; clicking an atom reports it, a second
click reports the distance between the two."""
from __future__ import annotations

import os

import numpy as np

from ..errors import UserError

KEYS = {"b": "bonds", "c": "cell", "s": "sites", "p": "polyhedra", "l": "planes", "d": "directions",
        "v": "defects", "x": "slip"}


def has_display():
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")) or os.name == "nt" \
        or __import__("sys").platform == "darwin"


def show(crystal, view="[001]", style="ball-and-stick", *, up=None, sites=False, polyhedra=None, planes=(),
         directions=(), layers=None, defects=True, slip_axis=None, size=(1280, 960), block=True):
    """Open the crystal in a window.  Without a display, says so (UserError)."""
    if not has_display():
        raise UserError("no display here (DISPLAY and WAYLAND_DISPLAY are unset); write a picture instead with "
                        "'crystalview render SPEC -o figure.png'")
    from . import figure as F
    from .scene_graph import build_scene

    scene = build_scene(crystal, style, view, up, sites=sites, polyhedra=polyhedra, planes=planes,
                        directions=directions, layers=layers, defects=defects, slip_axis=slip_axis)
    import pyvista as pv

    lay = F.make_layout(scene, size, legend=False, scale_bar=False, caption=False)
    pl = pv.Plotter(window_size=list(size), lighting="none", title="crystalview")
    pl.set_background("white")
    F._lights(pl)
    groups = F.add_scene(pl, scene, lay, cull=False)
    pts, rad = scene.extent_points()
    extent = float(np.max(np.linalg.norm(pts - lay.centre, axis=1) + rad))
    F._set_camera(pl, scene, lay, extent)
    pl.camera_set = True
    state = {"picked": []}
    keylines = [f"{k}: {g}" for k, g in KEYS.items() if g in groups] + ["o: perspective/orthographic",
                                                                         "click: atom, two clicks: distance"]
    pl.add_text("\n".join(keylines), position="upper_left", font_size=10, color="#1a1a1a", name="keys")
    pl.add_text("\n".join(scene.caption), position="lower_left", font_size=9, color="#1a1a1a", name="caption")

    def toggle(group):
        def f():
            for a in groups.get(group, []):
                a.SetVisibility(not a.GetVisibility())
            pl.render()
        return f

    for k, g in KEYS.items():
        if g in groups:
            pl.add_key_event(k, toggle(g))

    def persp():
        cam = pl.camera
        cam.SetParallelProjection(not cam.GetParallelProjection())
        pl.render()
    pl.add_key_event("o", persp)

    def on_pick(point):
        if point is None:
            return
        text = describe_pick(scene, np.asarray(point, float), state)
        pl.add_text(text, position="upper_right", font_size=10, color="#1a1a1a", name="pick")

    pl.enable_point_picking(callback=on_pick, show_message=False, show_point=True, left_clicking=False,
                            use_picker=False, pickable_window=True)
    pl.show(auto_close=True, interactive_update=not block)
    return pl


def describe_pick(scene, point, state):
    """Text for a picked point: nearest drawn atom's element, role, position,
    coordination; the distance to the previous pick."""
    from ..analysis.neighbours import coordination_numbers
    from ..crystal import ROLES

    c = scene.crystal
    d = np.linalg.norm(scene.atom_pos - point, axis=1)
    k = int(np.argmin(d))
    i = int(scene.atom_src[k])
    if "cn" not in state:
        state["cn"] = coordination_numbers(c) if len(c) <= 200_000 else None
    cn = state["cn"][i] if state["cn"] is not None else "-"
    p = scene.atom_pos[k]
    text = (f"{c.symbols[i]} ({ROLES[c.roles[i]]}) atom {i}\nat {p[0]:.3f}, {p[1]:.3f}, {p[2]:.3f} \u00c5\n"
            f"coordination {cn}")
    state["picked"] = (state.get("picked") or [])[-1:] + [p]
    if len(state["picked"]) == 2:
        text += f"\ndistance to previous: {np.linalg.norm(state['picked'][1] - state['picked'][0]):.4f} \u00c5"
    return text
