"""Spread long array work over the machine's cores.

The engine's long passes (copying and checking a drive, the per-segment
exponentials, the two halves of the scan, evaluation on a dense grid) work
element by element or block by block, so they split into contiguous pieces that
threads can run at once: the compiled kernels release the GIL, and so do numpy's
ufunc loops.  Every piece performs the same operations on its own elements as a
single pass would, so results do not depend on how the work is split
(``tests/test_parallel.py`` checks that).

``FIRSTORDER_THREADS`` sets the number of threads (``1``: everything runs on the
calling thread); by default every core this process may use, at most
:data:`MAX_THREADS`.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor, wait
from typing import TypeVar

from .errors import InputError

__all__ = ["MAX_THREADS", "MIN_PIECE", "pieces", "run", "threads"]

#: Default cap on threads: more rarely pays on memory-bound passes.
MAX_THREADS = 8

#: Elements below which a piece is not worth a thread (the hand-off costs tens of µs).
MIN_PIECE = 131_072

_THREAD_PREFIX = "firstorder-piece"
_Result = TypeVar("_Result")
_pool: ThreadPoolExecutor | None = None
_pool_size = 0
_pool_process = 0
_pool_lock = threading.Lock()


def _after_fork_in_child() -> None:
    # The lock may have been held by a thread of the parent that the child does not have.
    global _pool_lock
    _pool_lock = threading.Lock()


os.register_at_fork(after_in_child=_after_fork_in_child)


def threads() -> int:
    """Threads to use, from ``FIRSTORDER_THREADS`` or the cores available.

    Examples
    --------
    >>> threads() >= 1
    True
    """
    text = os.environ.get("FIRSTORDER_THREADS", "").strip()
    if text:
        try:
            count = int(text)
        except ValueError:
            count = 0
        if count < 1:
            raise InputError(
                f"FIRSTORDER_THREADS: {text!r} is not allowed; expected a whole number >= 1 (the environment "
                f"variable that sets how many threads long arrays use)")
        return count
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        cores = os.cpu_count() or 1
    return max(1, min(cores, MAX_THREADS))


def pieces(size: int, align: int = 1, min_piece: int | None = None) -> list[tuple[int, int]]:
    """Split ``range(size)`` into at most :func:`threads` contiguous ``(start, stop)`` pieces.

    Each piece but the last starts and ends on a multiple of `align`, and none is
    shorter than `min_piece` elements (default :data:`MIN_PIECE`), so short
    arrays come back whole.

    Examples
    --------
    >>> pieces(10, min_piece=100)
    [(0, 10)]
    >>> pieces(0)
    [(0, 0)]
    """
    if min_piece is None:
        min_piece = MIN_PIECE
    count = max(1, min(threads(), size // max(min_piece, 1)))
    if count == 1:
        return [(0, size)]
    step = -(-size // count)
    step = -(-step // align) * align
    bounds = list(range(0, size, step)) + [size]
    return list(zip(bounds[:-1], bounds[1:]))


def run(function: Callable[..., _Result], spans: Sequence[tuple]) -> list[_Result]:
    """Call ``function(*span)`` for every span, at once; return the results in order.

    A span is a piece's ``(start, stop)`` from :func:`pieces`, with any further
    arguments that piece needs.

    The first span runs on the calling thread, the rest on a shared pool.  An
    exception in any piece is raised here once every piece has finished, so no
    piece is still writing when the caller moves on.  Called from inside a piece,
    every span runs on the calling thread (waiting on the pool from one of its
    own threads could wait for ever).

    Examples
    --------
    >>> run(lambda start, stop: stop - start, [(0, 3), (3, 10)])
    [3, 7]
    """
    if len(spans) == 1 or threading.current_thread().name.startswith(_THREAD_PREFIX):
        return [function(*span) for span in spans]
    pool = _shared_pool(len(spans) - 1)
    futures = [pool.submit(function, *span) for span in spans[1:]]
    try:
        first = function(*spans[0])
    finally:
        wait(futures)
    return [first, *(future.result() for future in futures)]


def _shared_pool(workers: int) -> ThreadPoolExecutor:
    """The pool, with at least `workers` threads.

    Threads may ask at once, so the pool is looked up and replaced under a lock; a
    pool that is replaced by a larger one is left running (its idle threads cost
    nothing), because another thread may already hold it and be about to hand it
    work.  A forked child process inherits the pool object but not its threads, so it
    starts a pool of its own.
    """
    global _pool, _pool_size, _pool_process
    pool, process = _pool, os.getpid()
    if pool is not None and _pool_size >= workers and _pool_process == process:
        return pool  # the common case: no lock taken
    with _pool_lock:
        if _pool is None or _pool_size < workers or _pool_process != process:
            size = max(workers, _pool_size if _pool_process == process else 0)
            _pool = ThreadPoolExecutor(max_workers=size, thread_name_prefix=_THREAD_PREFIX)
            _pool_size = size
            _pool_process = process
        return _pool
