"""numba's on-disk cache for the compiled kernels, keyed on every kernel file.

numba keys a cached function on its own source file only: after an edit of a callee in another
file, a caller's cached machine code (which inlined or linked the old callee) would load again.
Here every ``@kernel`` function gets, as its source stamp, one SHA-256 of all the kernel files
(``section/_k*.py``, in name order) instead of its own file's: an edit of any of them makes
every kernel's cache entry stale, and numba compiles again and overwrites it.  Where the cache
lives is numba's usual choice (``NUMBA_CACHE_DIR``, else ``__pycache__`` beside the file, else
the user-wide cache); only the stamp changes.
"""

from __future__ import annotations

import hashlib
from functools import lru_cache
from pathlib import Path

from numba import njit
from numba.core import caching

__all__ = ["kernel", "kernel_files", "kernel_stamp"]

_HERE = Path(__file__).resolve().parent


def kernel_files(folder: Path | str = _HERE) -> list[Path]:
    """The kernel files of a folder: ``_k*.py``, in name order."""
    return sorted(Path(folder).glob("_k*.py"))


def kernel_stamp(folder: Path | str = _HERE) -> str:
    """SHA-256 of the names and contents of every kernel file of a folder."""
    h = hashlib.sha256()
    for path in kernel_files(folder):
        h.update(path.name.encode() + b"\0")
        h.update(path.read_bytes())
        h.update(b"\0")
    return h.hexdigest()


@lru_cache(maxsize=1)
def _stamp() -> str:
    return kernel_stamp(_HERE)


#: numba's cache implementation base (``CacheImpl``; ``_CacheImpl`` in older releases)
_IMPL = getattr(caching, "CacheImpl", None) or getattr(caching, "_CacheImpl")


class _KernelLocator(caching._CacheLocator):
    """numba's own locator for a kernel function, with the stamp of all the kernel files."""

    def __init__(self, inner):
        self._inner = inner

    def ensure_cache_path(self):
        return self._inner.ensure_cache_path()

    def get_cache_path(self):
        return self._inner.get_cache_path()

    def get_disambiguator(self):
        return self._inner.get_disambiguator()

    def get_source_stamp(self):
        return ("foilmap-kernels", _stamp())

    @classmethod
    def from_function(cls, py_func, py_file):
        try:
            path = Path(py_file).resolve()
        except (OSError, TypeError):
            return None
        if path.parent != _HERE or not path.name.startswith("_k"):
            return None
        for other in _IMPL._locator_classes:
            if other is cls:
                continue
            inner = other.from_function(py_func, py_file)
            if inner is not None:
                return cls(inner)
        return None


_classes = _IMPL._locator_classes
_classes[:] = [c for c in _classes if c.__qualname__ != "_KernelLocator"]  # a reloaded module
_classes.insert(0, _KernelLocator)


def kernel(fn):
    """``numba.njit(cache=True)`` with the cache keyed on every kernel file."""
    return njit(cache=True)(fn)
