"""Output locations: checked before any work, written aside, moved into place at the end.

A command checks where it will write before it starts (:func:`check_output_file`,
:func:`check_output_directory`), writes everything into a hidden staging directory
(:func:`staged_file`, :func:`staged_directory`) and moves the result into place only
once all of it is written.  A command that fails or is killed part-way therefore
leaves nothing under the output's name.  The staging directory is locked by its
writer (``flock``, which the kernel releases when the process dies), so the next
command writing the same output recognises and removes the staging directories of
killed runs.  OS and NetCDF errors become one-line :class:`~surrogate3d.errors.OutputError`
messages that say what to do (:func:`output_errors`).
"""

import contextlib
import errno
import fcntl
import os
import shutil
import tempfile
from pathlib import Path

from .errors import OutputError

#: What an OS error means for an output, and what to do about it.
_ADVICE = {
    errno.ENOSPC: "no space left on the device: free some space or write elsewhere",
    errno.EDQUOT: "disk quota exceeded: free some space or write elsewhere",
    errno.EROFS: "read-only file system: write elsewhere",
    errno.EACCES: "permission denied: choose a location you can write to",
    errno.EPERM: "the file may be immutable or append-only (see lsattr), or the file system refuses it",
    errno.ENOTDIR: "a part of the path is a file, not a directory",
    errno.EISDIR: "it is a directory, not a file",
    errno.ENAMETOOLONG: "the name is too long",
    errno.EIO: "input/output error of the device",
    errno.EFBIG: "the file is too large for the file system",
    errno.ENOENT: "a directory of the path does not exist (or was removed meanwhile)",
}

#: Free space below which a failed NetCDF write is reported as a full device [bytes].
_LOW_SPACE = 16 * 2**20

#: Staging directories: ``.<name>.partial-<random>`` beside a new output, ``.partial-<random>`` inside an
#: existing one.
_PARTIAL = ".partial-"


def os_error_message(exc, path=None, action="write"):
    """One line for an OSError: what could not be done to which path, why, and what to do.

    Parameters
    ----------
    exc : OSError
    path : str or Path, optional
        The path the caller was working on (default: the error's own file name).
    action : str
        Verb for the message ("write", "read", "replace", ...).
    """
    target = path if path is not None else (exc.filename or "")
    reason = exc.strerror or str(exc) or type(exc).__name__
    advice = _ADVICE.get(exc.errno)
    return f"cannot {action} {str(target)!r}: {reason}" + (f" ({advice})" if advice else "")


def _free_bytes(path):
    for candidate in (Path(path), *Path(path).parents):
        with contextlib.suppress(OSError):
            return shutil.disk_usage(candidate).free
    return None


def _size(n):
    for unit in ("bytes", "KiB", "MiB", "GiB"):
        if n < 1024 or unit == "GiB":
            return f"{n:.0f} {unit}" if unit == "bytes" else f"{n:.1f} {unit}"
        n /= 1024


def netcdf_error_message(exc, path):
    """One line for a failed NetCDF write (the library reports a full disk as ``NetCDF: HDF error``)."""
    free = _free_bytes(Path(path).parent)
    if free is not None and free < _LOW_SPACE:
        return (f"cannot write {str(path)!r}: {exc} with only {_size(free)} free on the device "
                "(no space left: free some space or write elsewhere)")
    return f"cannot write {str(path)!r}: the NetCDF library failed ({exc})"


def _is_netcdf_failure(exc):
    return isinstance(exc, RuntimeError) and ("NetCDF" in str(exc) or "HDF" in str(exc))


@contextlib.contextmanager
def output_errors(path, action="write"):
    """Turn OS and NetCDF errors raised inside the block into a one-line OutputError about ``path``.

    Errors of other kinds pass unchanged.
    """
    try:
        yield
    except OutputError:
        raise
    except OSError as exc:
        raise OutputError(os_error_message(exc, path, action)) from exc
    except RuntimeError as exc:
        if not _is_netcdf_failure(exc):
            raise
        raise OutputError(netcdf_error_message(exc, path)) from exc


def _named(path, option):
    text = "" if path is None else str(path)
    if not text.strip():
        raise OutputError(f"{option} is empty; name the output to write")
    return Path(text), text


def _nearest_existing(path):
    for candidate in (path, *path.parents):
        if os.path.lexists(candidate):
            return candidate
    return Path(".")


def _check_writable_directory(directory, option, text):
    """``directory`` (or, when missing, its nearest existing ancestor) is a directory this process can write."""
    existing = _nearest_existing(directory)
    if not existing.is_dir():
        raise OutputError(f"{option} {text!r}: {str(existing)!r} is a file, not a directory")
    if not os.access(existing, os.W_OK | os.X_OK):
        read_only = False
        with contextlib.suppress(OSError):
            read_only = bool(os.statvfs(existing).f_flag & os.ST_RDONLY)
        why = "is on a read-only file system" if read_only else "is not writable (permission denied)"
        raise OutputError(f"{option} {text!r}: directory {str(existing)!r} {why}; choose another location")
    return existing


def check_output_file(path, option):
    """Check, before any work, that a file can be written at ``path``.

    The name is not empty, is not a directory, and its directory exists and is writable.

    Parameters
    ----------
    path : str or Path
    option : str
        The command-line option that named it (for the message), e.g. ``"--out"``.

    Returns
    -------
    Path

    Raises
    ------
    surrogate3d.errors.OutputError
    """
    path, text = _named(path, option)
    if path.is_dir():
        raise OutputError(f"{option} {text!r} is a directory; name a file to write")
    directory = path.parent
    existing = _check_writable_directory(directory, option, text)
    if existing != directory and not directory.is_dir():
        raise OutputError(f"{option} {text!r}: directory {str(directory)!r} does not exist; create it first")
    return path


def check_output_directory(path, option):
    """Check, before any work, that a directory can be written (or created) at ``path``.

    ``path`` is not a file, and it (or its nearest existing parent) is a writable directory.

    Parameters
    ----------
    path : str or Path
    option : str
        The command-line option that named it (for the message).

    Returns
    -------
    Path

    Raises
    ------
    surrogate3d.errors.OutputError
    """
    path, text = _named(path, option)
    if os.path.lexists(path) and not path.is_dir():
        raise OutputError(f"{option} {text!r} is a file; name a directory")
    _check_writable_directory(path, option, text)
    return path


def visible_entries(directory):
    """Sorted names in ``directory`` that do not start with a dot (none if it does not exist)."""
    directory = Path(directory)
    if not directory.is_dir():
        return []
    return sorted(p.name for p in directory.iterdir() if not p.name.startswith("."))


def _lock_directory(path):
    fd = os.open(path, os.O_RDONLY)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        os.close(fd)
        return None
    return fd


def stale_staging(path):
    """Staging directories of ``path`` whose writer is gone (killed): nobody holds their lock."""
    path = Path(path)
    candidates = list(path.parent.glob(f".{path.name}{_PARTIAL}*"))
    if path.is_dir():
        candidates += list(path.glob(f"{_PARTIAL}*"))
    stale = []
    for candidate in sorted(candidates):
        with contextlib.suppress(OSError):
            fd = _lock_directory(candidate)
            if fd is not None:
                os.close(fd)
                stale.append(candidate)
    return stale


def remove_stale_staging(path):
    """Remove the staging directories of killed writers of ``path``; returns how many."""
    removed = 0
    for candidate in stale_staging(path):
        fd = _lock_directory(candidate)
        if fd is None:
            continue
        try:
            shutil.rmtree(candidate, ignore_errors=True)
            removed += 1
        finally:
            os.close(fd)
    return removed


def _remove(path):
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path)
    else:
        path.unlink()


def _discard(path, trash):
    # Into the staging directory, which is removed afterwards; a rename is instant and atomic.
    os.rename(path, Path(tempfile.mkdtemp(dir=trash)) / path.name)


def _move(source, target, merge, trash):
    """Move ``source`` onto ``target``; directories are merged file by file, or swapped whole."""
    if source.is_dir() and target.is_dir() and not target.is_symlink():
        if merge:
            for child in sorted(source.iterdir()):
                _move(child, target / child.name, merge, trash)
            return
        _discard(target, trash)
        os.rename(source, target)
        return
    if target.is_dir() and not target.is_symlink():
        _discard(target, trash)
    os.replace(source, target)


def _publish(staging, final, replace, marker):
    if not os.path.lexists(final):
        os.rename(staging, final)
        return
    names = sorted(p.name for p in staging.iterdir())
    trash = Path(tempfile.mkdtemp(prefix=".old-", dir=staging))
    # Without its marker the output reads as unfinished until everything else is in place.
    if marker and os.path.lexists(final / marker):
        _remove(final / marker)
    if replace:
        for old in sorted(final.iterdir()):
            if old.name not in names and not old.name.startswith(_PARTIAL):
                _discard(old, trash)
    for name in names:
        if name != marker:
            _move(staging / name, final / name, not replace, trash)
    if marker in names:
        _move(staging / marker, final / marker, not replace, trash)


def _created_parents(path):
    missing = [p for p in (path, *path.parents) if not os.path.lexists(p)]
    return missing[::-1]


def _usual_permissions(path):
    # mkdtemp makes the directory private to its owner; the output gets the usual permissions.
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(path, 0o777 & ~umask)


@contextlib.contextmanager
def _staging(final, where, prefix):
    """A new locked staging directory in ``where``; removed (with whatever it still holds) afterwards."""
    with output_errors(final, "write"):
        remove_stale_staging(final)
        staging = Path(tempfile.mkdtemp(prefix=prefix, dir=where))
        _usual_permissions(staging)
        # The writer's lock tells later runs that this staging directory is in use.  A run that
        # looks between mkdtemp and flock takes it for stale: only concurrent writers of one
        # output can meet that window, and the one that loses it fails with a one-line error.
        owner = _lock_directory(staging)
    try:
        yield staging
    finally:
        shutil.rmtree(staging, ignore_errors=True)
        if owner is not None:
            os.close(owner)


@contextlib.contextmanager
def staged_directory(path, *, replace=False, marker=None):
    """Yield an empty staging directory whose content goes to ``path`` once the block succeeds.

    On success the entries of the staging directory are moved into ``path`` (created if
    missing); on any error, or when the process is killed, ``path`` is left as it was.

    Parameters
    ----------
    path : str or Path
        The output directory.
    replace : bool
        ``path`` ends up holding exactly the new entries (old ones are removed); by default
        new entries are added, replacing files of the same name.
    marker : str, optional
        Name of the file that marks the output complete: removed from ``path`` before
        anything else is moved and moved in last.

    Examples
    --------
    >>> import tempfile
    >>> report = Path(tempfile.mkdtemp()) / "report"
    >>> with staged_directory(report) as tmp:
    ...     _ = (tmp / "metrics.csv").write_text("...")
    >>> sorted(p.name for p in report.iterdir())
    ['metrics.csv']
    """
    final = Path(path)
    created = _created_parents(final.parent)
    try:
        with output_errors(final, "create"):
            final.parent.mkdir(parents=True, exist_ok=True)
        # Inside an existing output (its parent need not be writable), beside a new one (renamed at the end).
        where, prefix = (final, _PARTIAL) if final.is_dir() else (final.parent, f".{final.name}{_PARTIAL}")
        with _staging(final, where, prefix) as staging:
            yield staging
            with output_errors(final, "move the new files into"):
                _publish(staging, final, replace, marker)
    except BaseException:
        for directory in reversed(created):
            with contextlib.suppress(OSError):
                os.rmdir(directory)
        raise


@contextlib.contextmanager
def staged_file(path):
    """Yield a path in a staging directory; that file replaces ``path`` once the block succeeds.

    See :func:`staged_directory`.  The file has the final name, so writers that infer the
    format from the suffix work unchanged; ``path``'s directory must exist.
    """
    final = Path(path)
    with _staging(final, final.parent, f".{final.name}{_PARTIAL}") as staging:
        yield staging / final.name
        with output_errors(final, "replace"):
            os.replace(staging / final.name, final)
