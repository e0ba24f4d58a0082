"""The one exception type the user-facing layers turn into a one-line message and exit code 2."""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["InputError", "read_input_text"]


class InputError(ValueError):
    """Bad user input: a file, a key or an argument.  ``str(err)`` is one line that names the
    problem (the file or key, the value, what is allowed)."""


def read_input_text(path: str | os.PathLike, kind: str) -> str:
    """The text of a user's input file, or an :class:`InputError` naming the file and reason."""
    p = Path(path)
    try:
        return p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        raise InputError(f"cannot read {kind} file {str(p)!r}: {reason}") from None
