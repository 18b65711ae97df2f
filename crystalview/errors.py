"""Error types.  A ``UserError`` is the user's to fix: the command line prints
its one-line message and exits with status 2.  Anything else is our fault."""


class UserError(ValueError):
    """Bad input: the message says what was wrong and what would be right.

    >>> import crystalview as cv
    >>> try:
    ...     cv.build("Xx")
    ... except cv.UserError as e:
    ...     print(type(e).__name__, isinstance(e, ValueError))
    ...
    UserError True
    """


class LimitError(UserError):
    """A request over a resource cap, refused before any memory is allocated.
    ``count`` and ``cap`` (when known) are the numbers compared.

    >>> e = LimitError("5,000,000 atoms > 1,000,000", count=5_000_000, cap=1_000_000)
    >>> isinstance(e, UserError), e.count, e.cap
    (True, 5000000, 1000000)
    """

    def __init__(self, message, count=None, cap=None):
        super().__init__(message)
        self.count, self.cap = count, cap


def suggest(name, choices, n=3):
    """' (did you mean X, Y?)' for a mistyped name, or ''.

    >>> suggest("Cuu", ["Cu", "Fe", "Ni"])
    ' (did you mean Cu?)'
    >>> suggest("xyz", ["Cu", "Fe"])
    ''
    """
    import difflib

    lowered = {c.lower(): c for c in choices}
    close = difflib.get_close_matches(str(name).lower(), list(lowered), n=n, cutoff=0.5)
    if not close:
        return ""
    return " (did you mean " + ", ".join(lowered[c] for c in close) + "?)"
