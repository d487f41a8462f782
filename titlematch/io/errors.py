"""The one exception for bad input a person must fix."""
from __future__ import annotations


class InputError(ValueError):
    """Bad input a person must fix; the message names the file, and the row and column when known."""
