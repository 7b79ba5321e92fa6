"""Locks that let several runs share one archive directory safely.

All locks are POSIX record locks (``fcntl``) on bytes of one file per archive,
``.surrogate3d.lock``, which is never removed.  The kernel releases a process's locks
when it exits, however it exits, so a killed run never leaves a stale lock behind.

- Byte 0 is the *archive* lock: every ``simulate`` run holds it shared; ``simulate
  --overwrite`` and ``scenes`` (which replace whole files) hold it exclusively, so they
  never run beside another run on the same archive.
- One byte per scene file (at an offset hashed from its name) guards the scene's file,
  its temporary files and its pending results: whoever rewrites them holds it.
- One byte per task (scene, solver, sun) marks a run's *claim* on that task while it
  computes it, so that concurrent runs share the work instead of repeating it.

Record locks belong to the process, and closing any descriptor of the file releases all
of them, so a process keeps one open descriptor per archive, shared by every
:class:`ArchiveLock` of that archive in the process, and counts the holders of each lock
so that one object never releases a lock another still holds.
"""

import contextlib
import errno
import fcntl
import hashlib
import os
import time
from pathlib import Path

from ..errors import Surrogate3DError

#: Name of the lock file in an archive directory.
LOCK_FILE = ".surrogate3d.lock"

#: Seconds a run waits for a brief exclusive holder (a listing) before it refuses.
_GRACE = 3.0

#: Seconds between two attempts to take a lock that another process holds.
_POLL = 0.05



class _Shared:
    """The descriptor of one archive's lock file in this process and how often each lock is held."""

    def __init__(self, path):
        self.fd = os.open(path / LOCK_FILE, os.O_RDWR | os.O_CREAT, 0o666)
        self.users = 0
        self.held = {}


_OPEN = {}  # resolved archive path -> _Shared


def _offset(kind, key):
    # Bytes 1 .. 2**48: far beyond the (empty) file, which record locks allow.
    return 1 + int.from_bytes(hashlib.sha256(f"{kind}|{key}".encode()).digest()[:6], "little")


def _busy(exc):
    return exc.errno in (errno.EACCES, errno.EAGAIN)


class ArchiveLock:
    """The locks of one archive directory held by this process.

    Parameters
    ----------
    archive_dir : str or Path
        An existing, writable directory.
    """

    def __init__(self, archive_dir):
        self.path = Path(archive_dir).resolve()
        if self.path not in _OPEN:
            _OPEN[self.path] = _Shared(self.path)
        self._shared = _OPEN[self.path]
        self._shared.users += 1
        self._claims = set()
        self._archive_mode = None

    def close(self):
        """Release everything this object holds (the descriptor closes with the last user)."""
        for offset in list(self._claims):
            self._unlock(offset)
        self._claims.clear()
        if self._archive_mode is not None:
            self._unlock(0)
            self._archive_mode = None
        if self._shared is not None:
            self._shared.users -= 1
            if self._shared.users == 0:
                os.close(self._shared.fd)
                del _OPEN[self.path]
        self._shared = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _lock(self, offset, exclusive=True, wait=False):
        held = self._shared.held
        mode = (fcntl.LOCK_EX if exclusive else fcntl.LOCK_SH) | fcntl.LOCK_NB
        while not held.get(offset):
            try:
                fcntl.lockf(self._shared.fd, mode, 1, offset)
                break
            except OSError as exc:
                if not _busy(exc):
                    raise
            if not wait:
                return False
            # Polled rather than blocking: a Ctrl-C that another thread receives would not
            # interrupt a blocking wait for a lock.
            time.sleep(_POLL)
        held[offset] = held.get(offset, 0) + 1
        return True

    def _unlock(self, offset):
        held = self._shared.held
        held[offset] -= 1
        if not held[offset]:
            del held[offset]
            fcntl.lockf(self._shared.fd, fcntl.LOCK_UN, 1, offset)

    def hold_archive(self, exclusive, what):
        """Hold the archive lock (shared or exclusive), or raise a one-line error if another run prevents it.

        Parameters
        ----------
        exclusive : bool
            No other run may use the archive meanwhile.
        what : str
            What this run does, for the message.
        """
        deadline = time.monotonic() + _GRACE
        while not self._lock(0, exclusive):
            if time.monotonic() > deadline:
                other = "another surrogate3d run" if exclusive else "a run that replaces its files"
                raise Surrogate3DError(
                    f"archive {str(self.path)!r} is in use by {other} (simulate or scenes); {what} cannot "
                    "share it: wait until that run has finished" + ("" if not exclusive else
                                                                     ", or run simulate without --overwrite "
                                                                     "to share the work"))
            time.sleep(0.1)
        self._archive_mode = "exclusive" if exclusive else "shared"

    def in_use(self):
        """True if another process holds the archive lock (a run is using the archive)."""
        if self._shared.held.get(0):
            return False
        if not self._lock(0, exclusive=True):
            return True
        self._unlock(0)
        return False

    @contextlib.contextmanager
    def scene(self, scene_path):
        """Hold a scene file's lock (waiting for it) while rewriting the file or its pending results."""
        offset = _offset("scene", Path(scene_path).name)
        self._lock(offset, wait=True)
        try:
            yield
        finally:
            self._unlock(offset)

    def claim(self, key, wait=False):
        """Claim a task (any hashable text key) for this process; False if another run holds it.

        With ``wait``, block until the other run lets it go (finished or died).
        """
        offset = _offset("task", key)
        if offset in self._claims:
            return True
        if not self._lock(offset, wait=wait):
            return False
        self._claims.add(offset)
        return True

    def release(self, key):
        """Let go of a claimed task."""
        offset = _offset("task", key)
        if offset in self._claims:
            self._claims.discard(offset)
            self._unlock(offset)


def archive_in_use(archive_dir):
    """True if a run (simulate, scenes) is using ``archive_dir`` now; False also when it cannot be told."""
    if not (Path(archive_dir) / LOCK_FILE).is_file() or not os.access(archive_dir, os.W_OK):
        return False
    with ArchiveLock(archive_dir) as lock:
        return lock.in_use()
