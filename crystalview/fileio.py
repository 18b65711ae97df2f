"""Atomic, non-clobbering file writes.

Every file crystalview writes goes through :func:`atomic_write`: the content is
written to a temporary file beside the target, flushed to disk, then renamed
into place, so a crash or a kill leaves either the old file or the complete new
one and never a partial one.  An existing target is kept unless ``force``.
"""
from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import UserError


#: Errors of the destination (full disk, quota, read-only, too big a file) that a user can act on.
_DISK_ERRORS = {getattr(__import__("errno"), n) for n in ("ENOSPC", "EDQUOT", "EROFS", "EFBIG", "EIO")
                if hasattr(__import__("errno"), n)}
#: Longest file name accepted: the temporary name beside it adds about 40 characters to the 255 a
#: file system allows.
MAX_NAME = 200


def check_target(path, force=False, suffixes=None):
    """Raise UserError if ``path`` cannot be written (exists without force,
    wrong suffix, folder missing or not writable).  Writes nothing.

    >>> import os, tempfile
    >>> d = tempfile.mkdtemp()
    >>> check_target(os.path.join(d, "cu.xyz"), suffixes=(".xyz",)).name
    'cu.xyz'
    >>> try:
    ...     check_target(os.path.join(d, "cu.png"), suffixes=(".xyz",))
    ... except UserError as e:
    ...     print("refused")
    ...
    refused
    """
    p = Path(path)
    if suffixes is not None and p.suffix.lower() not in suffixes:
        raise UserError(
            f"cannot write '{p}': unknown file type '{p.suffix or '(none)'}'; "
            f"use one of {', '.join(sorted(suffixes))}"
        )
    if len(p.name) > MAX_NAME:
        raise UserError(f"the file name '{p.name[:30]}...' is {len(p.name)} characters; give at most {MAX_NAME}")
    if p.exists() and p.is_dir():
        raise UserError(f"'{p}' is a folder; give a file name")
    if p.exists() and not force:
        raise UserError(f"'{p}' already exists; pass --force (force=True in Python) to overwrite it")
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.exists():
        raise UserError(f"cannot write '{p}': folder '{parent}' does not exist")
    if not os.access(parent, os.W_OK):
        raise UserError(f"cannot write '{p}': folder '{parent}' is not writable")
    return p


def atomic_write(path, data=None, *, writer=None, force=False, mode="wb"):
    """Write ``data`` (bytes or str), or call ``writer(tmp_path)`` to produce
    the file, beside ``path`` and rename it into place.  The temporary name
    ends in the target's own suffix, so writers that pick a format from the
    file name work unchanged.

    The temporary file is removed on any error.  Returns the final Path.

    >>> import os, tempfile
    >>> p = os.path.join(tempfile.mkdtemp(), "note.txt")
    >>> atomic_write(p, "hello\\n", mode="w").name
    'note.txt'
    >>> open(p).read(), sorted(os.listdir(os.path.dirname(p)))
    ('hello\\n', ['note.txt'])
    """
    p = check_target(path, force=force)
    parent = p.parent if str(p.parent) else Path(".")
    _remove_stale_temps(p)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.{os.getpid()}.", suffix=".tmp-cv" + p.suffix, dir=parent)
    except OSError as exc:
        raise UserError(f"cannot write '{p}': {exc.strerror or exc}; choose another file or folder") from None
    try:
        if writer is None:
            if isinstance(data, str):
                data = data.encode("utf-8")
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
        else:
            os.close(fd)
            writer(tmp)
            with open(tmp, "rb+") as fh:
                os.fsync(fh.fileno())
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(tmp, 0o666 & ~mask)   # mkstemp makes 0600; give the file the usual permissions
        if force:
            os.replace(tmp, p)
        else:
            # exclusive: a hard link fails if the name exists, so two writers racing for one new
            # name never both succeed (the check above and the rename would leave a window)
            try:
                os.link(tmp, p)
            except FileExistsError:
                raise UserError(f"'{p}' already exists; pass --force (force=True in Python) to overwrite it") from None
            except OSError:
                # a file system without hard links: an exclusive create of the name, then the rename
                try:
                    fd2 = os.open(p, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666 & ~mask)
                except FileExistsError:
                    raise UserError(f"'{p}' already exists; pass --force (force=True in Python) to overwrite "
                                    f"it") from None
                os.close(fd2)
                os.replace(tmp, p)
            else:
                os.unlink(tmp)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError) and exc.errno in _DISK_ERRORS:
            raise UserError(f"cannot write '{p}': {exc.strerror}; nothing was written (free some space or choose "
                            f"another folder)") from None
        raise
    return p


def _pid_alive(pid):
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _remove_stale_temps(p):
    """Remove temporary files left beside ``p`` by writers that were killed
    (their process id, which the temporary name carries, is gone)."""
    parent = p.parent if str(p.parent) else Path(".")
    try:
        candidates = list(parent.glob(f".{p.name}.*.tmp-cv*"))
    except OSError:
        return
    for t in candidates:
        parts = t.name[len(p.name) + 2:].split(".")
        if parts and parts[0].isdigit() and not _pid_alive(int(parts[0])):
            try:
                t.unlink()
            except OSError:
                pass


def json_default(o):
    """JSON form of numpy values, tuples and sets (json.dumps(..., default=json_default)).

    >>> import json
    >>> import numpy as np
    >>> json.dumps({"a": np.float64(3.6149), "v": np.arange(3), "t": (1, 2)}, default=json_default)
    '{"a": 3.6149, "v": [0, 1, 2], "t": [1, 2]}'
    """
    import numpy as np

    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, (set, tuple)):
        return list(o)
    return str(o)
