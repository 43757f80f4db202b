"""Atomic file writing: a save never leaves a half-written file behind, and replaces only a file.

:func:`write_atomic` writes a regular file through a temporary file beside it,
renamed over it at the end.  What a name points to decides how it is written:

- a symbolic link is followed, and its target is written (atomically, beside the
  target), so the link stays a link and the real file gets the new text;
- a device, a FIFO or a socket (``/dev/null``, ``/dev/stdout``, a named pipe) is
  written straight, never replaced by a regular file;
- a folder, or a regular file without write permission (``chmod 0444``), is
  refused, also for root, who could otherwise replace it.

Temporaries are named ``.{name}.{pid}-{random}.firstorder-tmp``, so a save that
was killed (``SIGKILL``, power loss) leaves a file that says what it is, and the
next save to the same name removes those whose process is gone.
"""

from __future__ import annotations

import errno
import os
import secrets
import stat

__all__ = ["TEMPORARY_SUFFIX", "write_atomic"]

#: How every temporary file of a save ends (``.report.html.4242-1f2e3d4c.firstorder-tmp``).
TEMPORARY_SUFFIX = ".firstorder-tmp"
# A temporary's name starts with this much of the target's name: a 255-byte
# name plus our decoration would pass the file system's limit.
_NAME_PART = 120


def write_atomic(path: str | os.PathLike[str], data: str | bytes) -> None:
    """Write `data` (text as UTF-8, or bytes) to `path`, so that readers see the old file or the new one.

    Parameters
    ----------
    path : str or path-like
        The file to write.  A symbolic link is followed; a device or FIFO is
        written straight.
    data : str or bytes

    Raises
    ------
    OSError
        With ``filename`` the `path` asked for (never a temporary's name) and a
        message saying what to do: the path is a folder (``IsADirectoryError``),
        a read-only file (``PermissionError``), its folder is missing, or the
        disk is full.  A failed save leaves the old file as it was and no
        temporary file.

    Examples
    --------
    >>> import os, tempfile
    >>> folder = tempfile.mkdtemp()
    >>> write_atomic(os.path.join(folder, "a.txt"), "first")
    >>> os.symlink("a.txt", os.path.join(folder, "link"))
    >>> write_atomic(os.path.join(folder, "link"), "second")
    >>> open(os.path.join(folder, "a.txt")).read(), os.path.islink(os.path.join(folder, "link"))
    ('second', True)
    >>> sorted(os.listdir(folder))
    ['a.txt', 'link']
    """
    target = os.fspath(path)
    payload = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    try:
        found = os.stat(target)  # follows links: what the name points to
    except FileNotFoundError:
        found = None
    except OSError as error:  # a loop of links, a component that is not a folder
        raise _named(error, target) from None
    if found is not None and stat.S_ISDIR(found.st_mode):
        raise IsADirectoryError(errno.EISDIR, "is a folder; give the name of a file to write (inside it, say)",
                                target)
    real = os.path.realpath(target)
    if found is not None and (not stat.S_ISREG(found.st_mode) or real.startswith("/proc/")):
        # A device, a FIFO, or a /proc link to one of the process's own files
        # (/dev/stdout): renaming over it would replace it by a plain file.
        _write_straight(target, payload, truncate=stat.S_ISREG(found.st_mode))
        return
    if found is not None and (not found.st_mode & 0o222 or not os.access(real, os.W_OK)):
        mode = stat.S_IMODE(found.st_mode)
        raise PermissionError(
            errno.EACCES, f"is read-only (mode {mode:04o}), so it was not replaced; make it writable "
                          f"(chmod u+w) or save under another name", target)
    _replace(real, target, payload, found)


def _replace(real: str, target: str, payload: bytes, found: os.stat_result | None) -> None:
    """Write `payload` to a temporary beside `real`, then rename it over `real`."""
    folder, name = os.path.split(real)
    _clear_stale(folder or ".", name)
    temporary = os.path.join(folder, f".{name[:_NAME_PART]}.{os.getpid()}-{secrets.token_hex(4)}{TEMPORARY_SUFFIX}")
    try:
        handle = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except FileNotFoundError:
        raise FileNotFoundError(errno.ENOENT, f"its folder {folder} does not exist", target) from None
    except OSError as error:
        raise _named(error, target) from None
    try:
        try:
            # The temporary is private (0600) while it is written; the saved file gets
            # the old file's permissions, or those an ordinary open() would give, so
            # colleagues sharing the folder can read it.
            os.chmod(temporary, _mode_for(found))
            _write_all(handle, payload)
            os.fsync(handle)
        finally:
            os.close(handle)
        os.replace(temporary, real)
    except BaseException as error:
        try:
            os.unlink(temporary)
        except FileNotFoundError:
            pass
        if isinstance(error, OSError) and error.filename in (None, temporary, real):
            raise _named(error, target) from None
        raise


def _write_straight(target: str, payload: bytes, truncate: bool) -> None:
    """Write to what `target` names as it is (a device, a FIFO: opening a FIFO waits for a reader)."""
    try:
        handle = os.open(target, os.O_WRONLY | (os.O_TRUNC if truncate else 0))
    except OSError as error:
        raise _named(error, target) from None
    try:
        _write_all(handle, payload)
    except OSError as error:
        raise _named(error, target) from None
    finally:
        os.close(handle)


def _write_all(handle: int, payload: bytes) -> None:
    view = memoryview(payload)
    while view:
        written = os.write(handle, view)
        view = view[written:]


def _named(error: OSError, target: str) -> OSError:
    """`error` naming `target` (not a temporary), with what it means for the user."""
    if error.errno is None:
        return error
    reason = error.strerror or str(error)
    if error.errno == errno.ENOSPC:
        reason = "the disk is full (no space left on the device); nothing was saved, an old file is unchanged"
    elif error.errno == errno.EDQUOT:
        reason = "the disk quota is used up; nothing was saved, an old file is unchanged"
    elif error.errno in (errno.EACCES, errno.EPERM):
        reason = f"{reason} (no permission to write it or its folder)"
    elif error.errno == errno.EROFS:
        reason = "is on a read-only file system"
    return type(error)(error.errno, reason, target)


def _clear_stale(folder: str, name: str) -> None:
    """Remove the temporaries of earlier saves to `name` whose process no longer runs."""
    prefix = f".{name[:_NAME_PART]}."
    try:
        entries = os.listdir(folder)
    except OSError:
        return
    for entry in entries:
        if not (entry.startswith(prefix) and entry.endswith(TEMPORARY_SUFFIX)):
            continue
        pid_text = entry[len(prefix):-len(TEMPORARY_SUFFIX)].partition("-")[0]
        if not pid_text.isdigit() or _running(int(pid_text)):
            continue
        try:
            os.unlink(os.path.join(folder, entry))
        except OSError:
            pass  # another save cleared it, or it is not ours to remove


def _running(pid: int) -> bool:
    if pid == os.getpid():
        return True  # another thread of this process may be saving right now
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, OSError):
        return True  # someone else's process: leave its files alone
    return True


def _mode_for(found: os.stat_result | None) -> int:
    """The old file's permissions, or those ``open()`` would give a new file."""
    if found is not None:
        return found.st_mode & 0o7777
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask
