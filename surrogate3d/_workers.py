"""Worker processes that compute tasks for the calling process and never outlive it.

Each worker is a fresh interpreter connected to its parent by a socket pair; it computes
one task at a time and sends the result back.  Workers run in a process group of their
own, so Ctrl-C at a terminal reaches only the parent, which stops them (one line of
output, not one traceback per worker), and no Ctrl-C is lost while they start.  They
exit when their parent dies: on Linux the kernel kills them at once
(``PR_SET_PDEATHSIG``); elsewhere they notice when they next wait for work.  No
semaphores or shared memory are used, so nothing is left for a resource tracker to
report after an interrupt.

This module imports nothing heavy: a worker loads it before it knows what to compute.
"""

import contextlib
import ctypes
import os
import pickle
import signal
import socket
import subprocess
import sys
import traceback
from multiprocessing.connection import Connection, wait

from .errors import Surrogate3DError

_PR_SET_PDEATHSIG = 1

#: Longest wait [s] before a waiting parent looks at the signals it received.
_POLL = 0.2

#: What a worker runs: it takes the parent's module search path, then serves.
_BOOT = """\
import sys
from multiprocessing.connection import Connection
connection = Connection(int(sys.argv[1]))
try:
    sys.path[:] = connection.recv()
except (EOFError, OSError):  # the parent went away while this worker started
    sys.exit()
from surrogate3d._workers import serve
serve(connection, int(sys.argv[2]))
"""


def _die_with_parent(parent):
    if sys.platform.startswith("linux"):
        with contextlib.suppress(OSError, AttributeError):
            ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    if os.getppid() != parent:  # the parent died before the request took effect
        os._exit(1)


def _portable(exc):
    """``exc`` if it survives pickling, else a RuntimeError with its text; worker tracebacks as notes."""
    if not isinstance(exc, Surrogate3DError):
        exc.add_note("in the worker process:\n" + "".join(traceback.format_exception(exc)).rstrip())
    try:
        pickle.loads(pickle.dumps(exc))
    except Exception:
        return RuntimeError(f"{type(exc).__name__}: {exc}")
    return exc


def serve(connection, parent):
    """The loop of a worker: receive the function, then items, and send back ``(ok, result or exception)``."""
    _die_with_parent(parent)
    try:
        function = connection.recv()
        while (item := connection.recv()) is not None:
            try:
                reply = (True, function(item))
            except Exception as exc:
                reply = (False, _portable(exc))
            connection.send(reply)
    except (EOFError, OSError):  # the parent went away
        pass


class WorkerPool:
    """``n`` worker processes applying ``function`` to the items they are given.

    Parameters
    ----------
    n : int
        Worker processes, >= 1.
    function : callable
        A picklable callable of one picklable item (a module-level function or a
        ``functools.partial`` of one); its result must be picklable.
    describe : callable, optional
        Text of an item for messages (default ``str``).

    Notes
    -----
    Create the pool from the thread that will outlive it (normally the main thread): on
    Linux the workers are killed when the thread that started them ends.
    """

    def __init__(self, n, function, describe=str):
        self._describe = describe
        self._processes = {}
        self._idle = []
        self._busy = {}
        try:
            for _ in range(n):
                here, there = socket.socketpair()
                connection = Connection(here.detach())
                with there:
                    self._processes[connection] = subprocess.Popen(
                        [sys.executable, "-c", _BOOT, str(there.fileno()), str(os.getpid())],
                        pass_fds=[there.fileno()], stdin=subprocess.DEVNULL, process_group=0)
                connection.send(sys.path)
                connection.send(function)
                self._idle.append(connection)
        except BaseException:
            self.close(kill=True)
            raise

    @property
    def free(self):
        """Workers waiting for an item."""
        return len(self._idle)

    @property
    def busy(self):
        """Workers computing an item."""
        return len(self._busy)

    @property
    def pids(self):
        """Process ids of the workers."""
        return [p.pid for p in self._processes.values()]

    def submit(self, item):
        """Give ``item`` to an idle worker (there must be one)."""
        connection = self._idle.pop()
        connection.send(item)
        self._busy[connection] = item

    def next_result(self):
        """Wait for the next finished item; returns ``(item, result)`` or raises the worker's exception.

        Raises
        ------
        surrogate3d.errors.Surrogate3DError
            A worker died (killed, out of memory) while computing an item.
        """
        # Short waits: a signal that another thread of this process receives (Ctrl-C) interrupts no
        # blocking call here, and is acted on only when the wait returns.
        while not (ready := wait(list(self._busy), timeout=_POLL)):
            pass
        ready = ready[0]
        item = self._busy.pop(ready)
        try:
            ok, value = ready.recv()
        except (EOFError, OSError):
            process = self._processes.pop(ready)
            with contextlib.suppress(subprocess.TimeoutExpired):
                process.wait(5)
            raise Surrogate3DError(f"a worker process died (exit status {process.returncode}) while computing "
                                   f"{self._describe(item)}; it may have run out of memory") from None
        self._idle.append(ready)
        if not ok:
            raise value
        return item, value

    def close(self, kill=False):
        """Stop the workers: ask idle ones to exit, or with ``kill`` terminate them all now."""
        for connection, process in self._processes.items():
            if kill:
                process.kill()
            else:
                with contextlib.suppress(OSError):
                    connection.send(None)
        for connection, process in self._processes.items():
            try:
                process.wait(5 if not kill else 2)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait()
            connection.close()
        self._processes.clear()
        self._idle.clear()
        self._busy.clear()
