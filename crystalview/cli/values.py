"""Small parsers of command-line values shared by the CLI modules."""
from __future__ import annotations

import math

from ..errors import UserError


def _ints(values, what, example):
    """Whole numbers from command-line words, or one line saying what is wrong.

    >>> _ints(["3", "3", "2.0"], "--repeat", "--repeat 3 3 3")
    [3, 3, 2]
    """
    out = []
    for v in values:
        try:
            f = float(v)
        except ValueError:
            raise UserError(f"{what} '{' '.join(values)}' must be whole numbers, e.g. {example}") from None
        if not math.isfinite(f) or f != int(f):
            raise UserError(f"{what} '{' '.join(values)}' must be whole numbers, e.g. {example}")
        out.append(int(f))
    return out
