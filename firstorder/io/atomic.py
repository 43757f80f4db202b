"""Atomic file writing: a save never leaves a half-written file behind."""

from __future__ import annotations

import os
import tempfile

__all__ = ["write_atomic"]


def write_atomic(path: str | os.PathLike[str], data: str | bytes) -> None:
    """Write `data` to a temporary file beside `path`, then rename it over `path`.

    The rename is atomic on POSIX and Windows, so readers see the old file or
    the new one, never a mix; a failure while writing leaves the old file as it was.
    """
    target = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(target))
    mode = "wb" if isinstance(data, bytes) else "w"
    try:
        handle, temporary = tempfile.mkstemp(prefix=".firstorder-", suffix=".tmp", dir=folder)
    except OSError as error:
        # Name the file the user asked for, not our temporary one.
        raise type(error)(error.errno, error.strerror, target) from None
    try:
        # mkstemp makes the file private (0600); a saved file should get the
        # permissions an ordinary write would give (or keep the old file's),
        # so that colleagues sharing the folder can read it.
        os.chmod(temporary, _mode_for(target))
        with os.fdopen(handle, mode, **({} if mode == "wb" else {"encoding": "utf-8"})) as stream:
            stream.write(data)
            stream.flush()
            os.fsync(stream.fileno())
        os.replace(temporary, target)
    except BaseException:
        try:
            os.unlink(temporary)
        except FileNotFoundError:
            pass
        raise


def _mode_for(target: str) -> int:
    """The old file's permissions, or those ``open()`` would give a new file."""
    try:
        return os.stat(target).st_mode & 0o7777
    except FileNotFoundError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask
