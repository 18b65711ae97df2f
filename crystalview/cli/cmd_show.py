"""crystalview show SPEC: the interactive window."""
from __future__ import annotations

from .common import add_spec_arguments, crystal_from_args


def register(sub):
    from .cmd_render import add_figure_arguments

    p = sub.add_parser("show", help="interactive window (rotate, zoom, toggle overlays, pick atoms)",
                       description="Open the crystal in a window: drag to rotate, wheel to zoom, shift+drag to pan. "
                                   "Keys toggle each overlay (listed in the window); clicking an atom shows its "
                                   "element, role, position and coordination, a second click the distance. "
                                   "q or Esc closes it.")
    add_spec_arguments(p)
    add_figure_arguments(p)
    p.set_defaults(func=run)


def run(args):
    from ..errors import UserError
    from ..render import style as S
    from ..render.viewer import has_display, no_display_message

    if not has_display():
        raise UserError(no_display_message(args.spec))
    S.get_style(args.style)                      # a bad style is refused before anything is built
    from .cmd_render import figure_kwargs
    from ..render.viewer import show

    c = crystal_from_args(args)
    kw = figure_kwargs(args)
    for k in ("scale_bar", "caption"):           # the window has its own caption and no scale bar
        kw.pop(k)
    show(c, **kw)
    return 0
