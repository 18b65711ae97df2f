"""The atom cap: one place that says how many atoms a request may make,
checked in exact integer arithmetic before anything is allocated.  No
crystalview module is imported here, so every module can use it."""
from __future__ import annotations

import math
import os

from .errors import LimitError, UserError

#: Default cap on the number of atoms a single build may make (overridable
#: with max_atoms= / --max-atoms / the CRYSTALVIEW_MAX_ATOMS variable).
DEFAULT_MAX_ATOMS = 50_000_000
BYTES_PER_ATOM = 3 * 8 + 2   # positions + species + role
#: The source recorded for a lattice parameter the user gave.
GIVEN = "given by the user"


def cap_value(value, what="--max-atoms"):
    """A cap given by the user as a whole positive number (refuses nan, inf,
    fractions, negatives and words in one line).

    >>> cap_value("1e6"), cap_value(2000)
    (1000000, 2000)
    """
    try:
        f = float(value)
    except (TypeError, ValueError):
        raise UserError(f"{what} '{value}' is not a number; give a whole number of atoms, e.g. 1000000") from None
    if not math.isfinite(f) or f < 1 or f != int(f):
        raise UserError(f"{what} {value} must be a whole number of 1 or more, e.g. 1000000")
    return int(f)


def max_atoms_default():
    """The atom cap in force: CRYSTALVIEW_MAX_ATOMS, else 50 million.

    >>> max_atoms_default() >= 1
    True
    """
    v = os.environ.get("CRYSTALVIEW_MAX_ATOMS")
    if v:
        return cap_value(v, "CRYSTALVIEW_MAX_ATOMS")
    return DEFAULT_MAX_ATOMS


def machine_memory():
    """Bytes of physical memory on this machine (None where unknown).

    >>> m = machine_memory(); m is None or m > 0
    True
    """
    try:
        return int(os.sysconf("SC_PHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


def _human_bytes(size):
    return (f"{size / 1e9:,.1f} GB" if size >= 1e8 else (f"{size / 1e6:.1f} MB" if size >= 1e5 else
                                                         f"{size / 1e3:.1f} kB"))


def check_atom_count(n, max_atoms=None, what="this request"):
    """Refuse a request over the atom cap, before anything is allocated.
    A request whose atoms alone would not fit in the machine's memory is
    refused even when the user raised the cap.

    >>> check_atom_count(4, 10)
    >>> check_atom_count(2 ** 70, 10)
    Traceback (most recent call last):
    ...
    crystalview.errors.LimitError: this request would make 1,180,591,620,717,411,303,424 atoms ...
    """
    cap = max_atoms_default() if max_atoms is None else cap_value(max_atoms)
    n = int(n)                      # exact: Python integers do not overflow
    size = n * BYTES_PER_ATOM
    mem = _human_bytes(size)
    phys = machine_memory()
    if n > cap or (phys is not None and size > phys):
        if phys is not None and size > phys:
            over = f"over the cap of {cap:,} and " if n > cap else ""
            raise LimitError(
                f"{what} would make {n:,} atoms (about {mem} for the atoms alone), {over}more than this "
                f"machine's {_human_bytes(phys)} of memory; make it smaller", count=n, cap=cap)
        raise LimitError(
            f"{what} would make {n:,} atoms (about {mem} of memory for the atoms alone), "
            f"over the cap of {cap:,}; make it smaller or raise the cap with --max-atoms {n}", count=n, cap=cap
        )
