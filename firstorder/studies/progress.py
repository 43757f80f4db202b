"""Following a study chunk by chunk: the one hook a caller (a progress bar, a worker that
may be told to stop) is told through, per thread.

A :class:`~.study.Study` runs its units a chunk at a time; after each chunk it calls
:func:`chunk_done`, which tells the listener that :func:`each_chunk` set on this thread,
if any.  Nothing here knows who listens: the studies layer imports no widget.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager

__all__ = ["chunk_done", "each_chunk"]

#: The listener of :func:`each_chunk`, per thread (a study run on another thread is not heard).
_listening = threading.local()


@contextmanager
def each_chunk(callback: Callable[[int, int], None] | None) -> Iterator[None]:
    """Within the block, ``callback(done, total)`` after each chunk of units that a study
    runs on this thread: building a study that holds its units, then each question's pass
    over the chunks (``done`` of that pass's ``total`` chunks).  An exception the callback
    raises stops the study between chunks and leaves the block: a caller cancels that way.

    Only this thread is heard, so a worker thread follows its own study while another
    thread asks questions of a finished one; ``each_chunk(None)`` listens to nothing
    within its block.

    Examples
    --------
    >>> import firstorder as fo
    >>> heard = []
    >>> with each_chunk(lambda done, total: heard.append((done, total))):
    ...     study = fo.Fixture.rc("10k", "100n").study(fo.Drive([0, "1m"], end="2m", vin=[5.0, 0.0]),
    ...                                               fo.Spread({"c": "10%"}), units=10, seed=1, keep=True, chunk=4)
    >>> heard
    [(1, 3), (2, 3), (3, 3)]
    """
    previous = getattr(_listening, "callback", None)
    _listening.callback = callback
    try:
        yield
    finally:
        _listening.callback = previous


def chunk_done(done: int, total: int) -> None:
    """Tell :func:`each_chunk`'s listener on this thread (if any) that `done` of `total` chunks are run."""
    callback = getattr(_listening, "callback", None)
    if callback is not None:
        callback(done, total)
