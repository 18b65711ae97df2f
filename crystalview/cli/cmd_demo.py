"""crystalview demo: the showcase scenes, into exports/."""
from __future__ import annotations

from pathlib import Path

#: The showcase, in the order it runs.
DEMO_SCENES = [
    "carburising-fit.toml",
    "valve-seat-failure-review.toml",
    "stacking-fault-superalloy.toml",
    "design-meeting-models.toml",
    "remote-review-gamma-prime.toml",
    "forming-route-magnesium.toml",
]


def scenes_dir():
    """The showcase scenes, shipped inside the package (crystalview/scenes;
    a checkout links scenes/ to it), so `crystalview demo` works from any
    installation and any working folder."""
    return Path(__file__).resolve().parents[1] / "scenes"


def register(sub):
    p = sub.add_parser("demo", help="run the showcase scenes into exports/",
                       description="Run the showcase scenes (scenes/) into exports/ and say what was written.")
    p.add_argument("--out", metavar="DIR", default="exports", help="where to write (default exports/)")
    p.add_argument("--force", action="store_true", help="overwrite the files of an earlier demo run")
    p.set_defaults(func=run)


def run(args):
    import time

    from ..errors import UserError
    from .cmd_run import run_many

    d = scenes_dir()
    paths = [d / n for n in DEMO_SCENES if (d / n).is_file()]
    if not paths:
        raise UserError(f"no demo scenes found in {d}; reinstall crystalview (the scenes ship with the package)")
    from ..scene import existing_outputs, make_folder

    make_folder(args.out)
    if not args.force:
        clash = existing_outputs([str(p) for p in paths], out=args.out)
        if clash:
            raise UserError(f"an earlier demo left {len(clash)} files under {args.out}/ (e.g. {clash[0]}); "
                            f"pass --force to write them again, or --out DIR for a fresh folder")
    t = time.perf_counter()
    rc = run_many([str(p) for p in paths], out=args.out, force=args.force, debug=args.debug)
    print(f"demo finished in {time.perf_counter() - t:.1f} s; outputs under {Path(args.out).resolve()}/")
    return rc
