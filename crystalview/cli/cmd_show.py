"""crystalview show SPEC: the interactive window."""
from __future__ import annotations

from .common import add_spec_arguments, crystal_from_args


def register(sub):
    from .cmd_render import add_figure_arguments

    p = sub.add_parser("show", help="interactive window (rotate, zoom, toggle overlays, pick atoms)",
                       description="Open the crystal in a window. Keys toggle each overlay (listed on screen); "
                                   "clicking an atom shows its element, role, position and coordination.")
    add_spec_arguments(p)
    add_figure_arguments(p)
    p.set_defaults(func=run)


def run(args):
    from ..render.viewer import has_display
    from ..errors import UserError

    if not has_display():
        raise UserError("no display here (DISPLAY and WAYLAND_DISPLAY are unset); write a picture instead with "
                        f"'crystalview render {args.spec} -o figure.png'")
    from .cmd_render import figure_kwargs
    from ..render.viewer import show

    c = crystal_from_args(args)
    kw = figure_kwargs(args)
    for k in ("cell", "legend", "scale_bar", "caption"):
        kw.pop(k)
    show(c, **kw)
    return 0
