"""Atomic file writes: write to a temporary file beside the target, then rename.

An interrupted write never leaves a half-written file under the final name, and an
existing file is replaced only once the new one is complete.  OS and NetCDF errors
become one-line :class:`~surrogate3d.errors.OutputError` messages.
"""

import contextlib
import os
import tempfile
from pathlib import Path

from ._outputs import output_errors
from .errors import OutputError


@contextlib.contextmanager
def atomic_path(path, suffix=None):
    """Yield a temporary path in the target's directory; rename it onto ``path`` on success.

    Parameters
    ----------
    path : str or Path
        Final file name.
    suffix : str, optional
        Suffix of the temporary file (some writers infer the format from it).

    Examples
    --------
    >>> import tempfile
    >>> target = Path(tempfile.mkdtemp()) / "out.txt"
    >>> with atomic_path(target) as tmp:
    ...     _ = Path(tmp).write_text("done")
    >>> target.read_text()
    'done'
    """
    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise OutputError(f"cannot write {str(path)!r}: it is a directory")
    if not directory.is_dir():
        what = "is a file, not a directory" if directory.exists() else "does not exist"
        raise OutputError(f"cannot write {str(path)!r}: directory {str(directory)!r} {what}")
    if not os.access(directory, os.W_OK):
        raise OutputError(f"cannot write {str(path)!r}: directory {str(directory)!r} is not writable")
    with output_errors(path):
        fd, tmp = tempfile.mkstemp(dir=directory, prefix=f".{path.name}.", suffix=suffix or path.suffix + ".tmp")
        os.close(fd)
        # mkstemp creates the file readable by its owner only; give it the usual permissions.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
    try:
        # Errors are described while the temporary file still takes its space (a full disk shows).
        with output_errors(path):
            yield Path(tmp)
            os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def write_text_atomic(path, text):
    """Write ``text`` to ``path`` atomically (UTF-8)."""
    with atomic_path(path) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")


def write_bytes_atomic(path, data):
    """Write ``data`` to ``path`` atomically."""
    with atomic_path(path) as tmp:
        Path(tmp).write_bytes(data)
