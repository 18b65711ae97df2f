"""crystalview run SCENE.toml [...]: everything the scene files ask for."""
from __future__ import annotations

import sys
from pathlib import Path


def register(sub):
    p = sub.add_parser("run", help="do everything one or more scene files ask for",
                       description="Run scene files: build, add defects, analyse, draw, print and export, "
                                   "into exports/<scene name>/ with a manifest.")
    p.add_argument("scenes", nargs="+", metavar="SCENE.toml", help="scene file(s)")
    p.add_argument("--out", metavar="DIR", help="write here instead of exports/<scene name>/ "
                                                "(with several scenes: DIR/<scene name>/)")
    p.add_argument("--force", action="store_true", help="overwrite files a previous run wrote")
    p.add_argument("--quiet", action="store_true", help="print only the summary")
    p.set_defaults(func=run)


def _on_sigterm(signum, frame):
    """Stop the run: raise now (the same cleanup as Ctrl-C runs), and have the
    next step raise again should a library lose this exception."""
    from ..scene import Terminated, request_stop

    request_stop(signum)
    raise Terminated(128 + signum)


def _catch_sigterm():
    """Install the SIGTERM handler (main thread only); returns a function that restores the previous one."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        return lambda: None
    previous = signal.signal(signal.SIGTERM, _on_sigterm)
    return lambda: signal.signal(signal.SIGTERM, previous)


def run_many(paths, out=None, force=False, quiet=False, debug=False):
    """Run scenes one after another; a failing scene does not stop the others.
    Returns the exit status: 0 all good, 2 if a scene had bad input, 1 on an internal fault.
    Everything echoed has its control characters escaped (a scene's values never reach the terminal raw)."""
    from ..errors import UserError
    from ..scene import _STOP, Terminated, check_stop, load, missing_folders, remove_folders, run_scene
    from . import clean_text

    created = []
    if out is not None:
        from ..scene import make_folder

        created = missing_folders(out)
        make_folder(out)            # an unusable --out stops everything, in one line
    _STOP.clear()
    restore = _catch_sigterm()
    status = None
    try:
        status = _run_all(paths, out, force, quiet, debug, load, run_scene, UserError, clean_text, check_stop)
        check_stop()
    except Terminated:
        status = None
        sys.stderr.write("crystalview: terminated\n")
        raise
    finally:
        restore()
        _STOP.clear()
        if status != 0:
            remove_folders(created)     # a run that failed leaves no empty folder of its own making
    return status


def _run_all(paths, out, force, quiet, debug, load, run_scene, UserError, clean_text, check_stop):
    if len(paths) > 1:
        # two scenes of one name would write the same folder: refuse before anything runs
        seen = {}
        for path in paths:
            try:
                nm = load(path)["scene"]["name"]
            except UserError:
                continue
            if nm.lower() in seen:
                raise UserError(f"scenes {seen[nm.lower()]} and {path} are both named '{nm}' and would write the same "
                                f"folder; give each scene its own [scene] name")
            seen[nm.lower()] = path
    status = 0
    results = []
    log = (lambda *a, **k: None) if quiet else (lambda msg: print(clean_text(msg), flush=True))
    progress = _progress(len(paths))
    for i, path in enumerate(paths):
        target = None
        if out is not None:
            target = Path(out) if len(paths) == 1 else None
            if target is None:
                try:
                    target = Path(out) / load(path)["scene"]["name"]
                except UserError:
                    target = Path(out) / Path(path).stem
        check_stop()
        progress(i, path)
        log(f"scene {path}:")
        try:
            m = run_scene(path, out=target, force=force, log=log)
            results.append((path, "ok", f"{len(m['written']) + 1} files in {m['seconds']:.1f} s"))
        except UserError as exc:
            if debug:
                raise
            msg = clean_text(" ".join(str(exc).split()))
            sys.stderr.write(f"crystalview: error: {msg}\n")
            results.append((path, "failed", msg))
            if status != 1:
                status = 2
        except Exception as exc:  # keep going with the next scene
            if debug:
                raise
            sys.stderr.write(clean_text(f"crystalview: internal error in {path}: {type(exc).__name__}: {exc} "
                                        f"(rerun with --debug and report it)") + "\n")
            results.append((path, "internal error", clean_text(exc)))
            status = 1
    progress(len(paths), None)
    if len(paths) > 1 or quiet:
        print("summary:")
        for path, state, what in results:
            print(clean_text(f"  {state:<6}  {path}  {what}"))
    return status


def _progress(total):
    """A progress line on stderr for several scenes (only on a terminal)."""
    if total < 2 or not sys.stderr.isatty():
        return lambda i, path: None
    from rich.progress import Progress

    prog = Progress(transient=True)
    task = prog.add_task("scenes", total=total)
    prog.start()

    def step(i, path):
        prog.update(task, completed=i, description=f"scene {Path(path).name}" if path else "done")
        if path is None:
            prog.stop()

    return step


def run(args):
    return run_many(args.scenes, out=args.out, force=args.force, quiet=args.quiet, debug=args.debug)
