"""The one exception type the user-facing layers turn into a one-line message and exit code 2."""

from __future__ import annotations

__all__ = ["InputError"]


class InputError(ValueError):
    """Bad user input: a file, a key or an argument.  ``str(err)`` is one line that names the
    problem (the file or key, the value, what is allowed)."""
