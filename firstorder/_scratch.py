"""Working arrays kept from one long pass to the next, per thread.

Fresh memory is slow to touch: the first write to each page of a new array faults,
and the allocator hands memory back to the system when a long pass frees many large
arrays at once, so the next pass faults again.  On the machines we measure, touching a
fresh 8 MB array costs about as long as exponentiating a million numbers.  A pass that
needs the same large temporaries every call (a long plan) takes them from here instead:
each thread keeps one buffer per name, grown when a larger one is asked for.

A working array is for the caller's own use until it asks for the same name again on
the same thread: it is never returned to a user or kept in a result.  At most
:data:`KEPT_BYTES` are kept per thread; larger requests get a fresh array each time.
"""

from __future__ import annotations

import threading

import numpy as np

__all__ = ["KEPT_BYTES", "release", "working"]

#: The most memory each thread keeps between calls (a plan of about a million steps
#: keeps its temporaries; longer ones allocate theirs each time).
KEPT_BYTES = 64 * 2**20

_local = threading.local()


def _kept() -> dict[str, np.ndarray]:
    kept = getattr(_local, "kept", None)
    if kept is None:
        kept = _local.kept = {}
    return kept


def working(name: str, size: int, dtype=np.float64) -> np.ndarray:
    """An uninitialised array of `size` elements of `dtype`, from this thread's buffer
    `name` when it is large enough.

    Examples
    --------
    >>> a = working("example", 10)
    >>> b = working("example", 5)
    >>> b.size, bool(np.shares_memory(a, b))
    (5, True)
    >>> release()
    """
    dtype = np.dtype(dtype)
    kept = _kept()
    buffer = kept.get(name)
    if buffer is not None and buffer.dtype == dtype and buffer.size >= size:
        return buffer[:size]
    others = sum(array.nbytes for key, array in kept.items() if key != name)
    fresh = np.empty(size, dtype=dtype)
    if others + fresh.nbytes <= KEPT_BYTES:
        kept[name] = fresh
    else:
        kept.pop(name, None)
    return fresh


def release() -> None:
    """Let go of every buffer this thread keeps."""
    _kept().clear()
