"""One writer per study folder and per run: operating-system locks released when the holder dies.

A lock is ``fcntl.flock`` on a small file inside the study folder: ``DIR/writer.lock`` is held
by the driver of ``foilmap run``/``resume`` (and ``run_study``) for the whole study, and
``DIR/runs/ID.lock`` by the process that writes run ``ID`` (a pool worker or a Dask task).  The
kernel drops a flock when its holder exits, however it exits (SIGKILL and the out-of-memory
killer included), so no stale lock is ever left to clean up.  The holder writes one JSON line
into the locked file, ``{"pid", "host", "since", "what"}``, so that a refused second writer can
name it in one line.  flock is reliable on local filesystems; many network filesystems emulate
it or ignore it (``docs/cluster.md``).
"""

from __future__ import annotations

import errno
import fcntl
import json
import os
import socket
import time
from pathlib import Path

from foilmap.errors import InputError

__all__ = ["Lock", "Busy", "FOLDER_LOCK", "describe_holder"]

#: the driver's lock file inside a study folder
FOLDER_LOCK = "writer.lock"


class Busy(InputError):
    """The lock is held by another process; ``str(err)`` names the holder in one line."""

    def __init__(self, message: str, holder: dict | None):
        super().__init__(message)
        self.holder = holder


def describe_holder(holder: dict | None) -> str:
    """``pid 123 on host h since 2026-12-03T07:40:00Z (foilmap run)`` or a plain fallback."""
    if not holder:
        return "another process (it has not named itself yet)"
    what = f" ({holder['what']})" if holder.get("what") else ""
    return (f"pid {holder.get('pid', '?')} on host {holder.get('host', '?')} since "
            f"{holder.get('since', '?')}{what}")


def _read_holder(path: Path) -> dict | None:
    for _ in range(5):  # the holder may be writing its line just now
        try:
            text = path.read_text(encoding="utf-8").strip()
        except OSError:
            return None
        if text:
            try:
                h = json.loads(text)
                return h if isinstance(h, dict) else None
            except ValueError:
                pass
        time.sleep(0.02)
    return None


class Lock:
    """An exclusive flock on ``path`` (created when missing), held until :meth:`release`.

    ``what`` names the holder's work in the refusal line (``"foilmap run"``, ``"run p.s1"``);
    ``label`` names what is locked (default: the folder holding the lock file).
    Use as a context manager after :meth:`acquire`, or ``with Lock(p, w).acquire(): ...``.
    """

    def __init__(self, path: str | Path, what: str, label: str | None = None):
        self.path = Path(path)
        self.what = what
        self.label = label or f"folder {str(self.path.parent)!r}"
        self.fd: int | None = None

    def holder(self) -> dict | None:
        """Who holds the lock, as written in the lock file (None when unknown)."""
        return _read_holder(self.path)

    def _open(self) -> int:
        try:
            return os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o666)
        except OSError as exc:
            if exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
                raise InputError(f"{self.label} cannot be written "
                                 f"({exc.strerror.lower()}: {str(self.path)!r}); make it "
                                 "writable or copy it elsewhere") from None
            if exc.errno == errno.ENOSPC:
                raise InputError(f"{self.label} is on a full disk (cannot create "
                                 f"{str(self.path)!r}); free some space") from None
            raise

    def try_acquire(self) -> bool:
        """Take the lock if it is free; True when taken."""
        fd = self._open()
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            os.close(fd)
            if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                return False
            raise
        self.fd = fd
        line = json.dumps({"pid": os.getpid(), "host": socket.gethostname(),
                           "since": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                           "what": self.what}) + "\n"
        try:
            os.ftruncate(fd, 0)
            os.pwrite(fd, line.encode(), 0)
        except OSError:
            pass  # a full disk: the lock holds all the same, only unnamed
        return True

    def acquire(self, wait: float | None = 0.0, poll: float = 0.1, on_wait=None) -> "Lock":
        """Take the lock; when held elsewhere wait up to ``wait`` seconds (None: for ever),
        then raise :class:`Busy` naming the holder.  ``on_wait(holder)`` is called once when
        the lock is found held and the call is going to wait."""
        deadline = None if wait is None else time.monotonic() + wait
        told = False
        while not self.try_acquire():
            if deadline is not None and time.monotonic() >= deadline:
                holder = self.holder()
                raise Busy(f"{self.label} is in use by {describe_holder(holder)}; wait for it "
                           "to finish (or give --wait)", holder)
            if on_wait is not None and not told:
                on_wait(self.holder())
                told = True
            time.sleep(poll)
        return self

    def release(self) -> None:
        if self.fd is None:
            return
        try:
            os.ftruncate(self.fd, 0)  # the next holder names itself; nobody reads a stale line
        except OSError:
            pass
        try:
            fcntl.flock(self.fd, fcntl.LOCK_UN)
        finally:
            os.close(self.fd)
            self.fd = None

    @property
    def held(self) -> bool:
        return self.fd is not None

    def __enter__(self):
        if self.fd is None:
            self.acquire()
        return self

    def __exit__(self, *exc):
        self.release()
        return False
