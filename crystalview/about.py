"""The package's version and the caution printed beside every result that
could feed a decision; kept in a module of their own so any part of the
package can import them without importing the package's public API.

>>> CAUTION.startswith("Caution: this is a geometric screening aid")
True
"""
from __future__ import annotations

__version__ = "0.1.0"

CAUTION = ("Caution: this is a geometric screening aid, not a design allowable; defer to the "
           "applicable material standards, codes and qualified testing.")
