"""The command line.  Thin: parses, calls the API, prints.

Each command lives in its own module ``crystalview/cli/cmd_<name>.py`` with
``register(subparsers)``; a command's module imports heavy libraries (vtk,
pyvista) only inside its run function, so commands that draw nothing start
fast.
"""
from __future__ import annotations

import argparse
import errno
import importlib
import os
import sys

COMMANDS = ["info", "build", "sites", "fit", "slip", "render", "show", "print", "export", "run", "demo"]


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors and exit status 2 (and the error as JSON
    on stdout when the command line asked for JSON)."""

    json_errors = False

    def error(self, message):
        message = clean_text(" ".join(str(message).split()))      # one line, whatever the user typed
        sys.stderr.write(f"{self.prog}: error: {message} (see {self.prog} --help)\n")
        if _Parser.json_errors:
            _json_error(message)
        sys.exit(2)


def _json_error(msg):
    import json

    sys.stdout.write(json.dumps({"error": msg, "exit_status": 2}) + "\n")


def make_parser():
    p = _Parser(prog="crystalview",
                description="Supercells, defects, hole sizes, report figures and printable models of metal lattices.")
    from crystalview.about import __version__

    p.add_argument("--version", action="version", version=f"crystalview {__version__}")
    p.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        try:
            mod = importlib.import_module(f"crystalview.cli.cmd_{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"crystalview.cli.cmd_{name}":
                continue          # command not built yet
            raise
        mod.register(sub)
    return p


def clean_text(text):
    r"""Text safe to echo on a terminal: control characters (escape codes from
    a file's labels or a scene's values) shown as \xNN, never sent raw.

    >>> print(clean_text("Fe" + chr(27) + "[31m"))
    Fe\x1b[31m
    """
    return "".join(ch if ch.isprintable() or ch == " " else f"\\x{ord(ch):02x}" for ch in str(text))


def _wants_json(argv):
    args = [str(a) for a in argv]
    return "--json" in args or any(a == "--format" and i + 1 < len(args) and args[i + 1] == "json"
                                   for i, a in enumerate(args)) or "--format=json" in args


def main(argv=None):
    from crystalview.errors import UserError

    argv = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in argv or bool(os.environ.get("CRYSTALVIEW_DEBUG"))
    wants_json = _wants_json(argv)
    _Parser.json_errors = wants_json

    def fail(msg):
        msg = clean_text(" ".join(str(msg).split()))
        sys.stderr.write(f"crystalview: error: {msg}\n")
        if wants_json:                # a caller parsing stdout gets the error as JSON too
            _json_error(msg)
        return 2
    previous = _on_sigterm()
    try:
        parser = make_parser()
        try:
            args = parser.parse_args(argv)
        except SystemExit as exc:       # --help, --version, or a usage error already printed
            return int(exc.code or 0) if not isinstance(exc.code, str) else 2
        if not getattr(args, "func", None):
            parser.print_help()
            return 2
        rc = args.func(args)
        return int(rc or 0)
    except UserError as exc:
        if debug:
            raise
        return fail(str(exc))
    except KeyboardInterrupt:
        sys.stderr.write("crystalview: interrupted\n")
        return 130
    except Terminated:
        sys.stderr.write("crystalview: terminated; nothing half-written was left\n")
        return 143
    except BrokenPipeError:
        return 0
    except MemoryError:
        return fail("out of memory; make the crystal or the output smaller")
    except ValueError as exc:
        if "Maximum allowed size exceeded" in str(exc) or "array is too big" in str(exc):
            return fail("this request is larger than any array this machine can hold; make the crystal or the "
                        "output smaller")
        if debug:
            raise
        return _internal(exc)
    except OSError as exc:
        # the file system said no (a name too long, no space, no permission, a read-only place): the user's to fix
        if debug:
            raise
        where = getattr(exc, "filename", None)
        what = exc.strerror or type(exc).__name__
        if exc.errno == errno.ENAMETOOLONG:
            what += " (the file system allows 255 bytes per file or folder name)"
        return fail(f"cannot use '{where}': {what}" if where else f"the file system refused: {what}")
    except Exception as exc:  # an internal fault
        if debug:
            raise
        return _internal(exc)
    finally:
        _restore_sigterm(previous)


class Terminated(BaseException):
    """SIGTERM, raised in the main thread so every write in progress removes
    its temporary file on the way out (as Ctrl-C does)."""


def _on_sigterm():
    """Turn SIGTERM into :class:`Terminated` while a command runs; returns the
    handler it replaced (None where signals cannot be set: not the main thread).

    >>> import signal
    >>> old = _on_sigterm(); signal.getsignal(signal.SIGTERM).__name__
    '_raise_terminated'
    >>> _restore_sigterm(old)
    """
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        return None
    return signal.signal(signal.SIGTERM, _raise_terminated)


def _raise_terminated(signum, frame):
    raise Terminated()


def _restore_sigterm(previous):
    if previous is not None:
        import signal

        signal.signal(signal.SIGTERM, previous)


def _internal(exc):
    sys.stderr.write(clean_text(f"crystalview: internal error: {type(exc).__name__}: {' '.join(str(exc).split())} "
                                f"(rerun with --debug and report it with the traceback)") + "\n")
    return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
