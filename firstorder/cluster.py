"""Studies on a dask.distributed cluster: each chunk of units a task, only summaries back.

A study asked with ``client=`` (a ``dask.distributed.Client``) sends each of its chunks
of units (the same fixed chunks and seeds as in-process) to a worker as one task.  What
travels is plain data: the fixture, the drive and the spread as the analysis file's
dictionaries (:meth:`Analysis.to_dict <firstorder.analysis.Analysis.to_dict>`, read back
on the worker by its strict schema), the seed, the chunk's first unit and size, and the
question (the tolerance as its file dictionary, sample delays and targets as arrays).
The task function is :func:`chunk_task`, a function of this module that every worker
imports; nothing is a pickled closure.

What comes back is the chunk's :class:`~firstorder.studies.summary.SettlingSummary`:
counts of units inside, each segment's few smallest and largest values for the exact
order statistics, the worst unit.  The client merges them (exact merges, in any order),
so it never holds a (units x segments) array, and the result is bit for bit the
in-process study's, for any number of workers.  A worker that dies mid-study has its
tasks run again by dask on another worker; a chunk is a pure function of its arguments,
so the result is unchanged.

Workers need firstorder installed (``pip install 'firstorder[cluster]'``) at the same
version as the client.
"""

from __future__ import annotations

import contextlib
import functools
import json
import sys
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .studies.run import Request
    from .studies.study import Study
    from .studies.summary import SettlingSummary

__all__ = ["chunk_task", "check_client", "plain_question", "plain_study", "summary_on"]


def check_client(client: Any) -> Any:
    """`client` if it is a ``dask.distributed.Client`` (imported only then), else an error
    that says how to make one."""
    if client is None:
        return None
    try:
        from distributed import Client
    except ImportError:  # pragma: no cover - the cluster extra is part of the test install
        raise _input_error("client: dask.distributed is not installed; pip install 'firstorder[cluster]'") from None
    if not isinstance(client, Client):
        raise _input_error(f"client: {type(client).__name__} is not a dask.distributed.Client; give Client() for a "
                           f"local cluster or Client('tcp://host:8786') for a running one")
    return client


def _input_error(message: str) -> Exception:
    from .errors import InputError

    return InputError(message)


def plain_study(study: "Study") -> str:
    """The study's fixture, drive, starting state, spread and seed as JSON text in the
    analysis file's format (what every task of the study receives)."""
    from .analysis import Analysis

    analysis = Analysis(study.fixture, study.drive, study.initial, spread=study.spread, units=max(1, study.units),
                        seed=study.seed)
    return json.dumps(analysis.to_dict(), allow_nan=False)


def plain_question(request: "Request") -> dict[str, Any]:
    """A request as plain data: the tolerance as its file dictionary, arrays as lists of
    exact floats."""
    def plain(array: Any) -> Any:
        return None if array is None else [float(x) for x in array]

    return {"tolerance": request.tolerance.to_dict(), "delays": plain(request.delays), "probe": request.probe,
            "aim": plain(request.aim), "within_segment": bool(request.within_segment),
            "settle_sides": list(request.settle_sides), "error_sides": list(request.error_sides)}


@functools.lru_cache(maxsize=8)
def _rebuilt(text: str):
    """The fixture, drive, spread, seed and start of a study's plain text, rebuilt once per
    worker process (every chunk of a study sends the same text)."""
    from .analysis import Analysis

    analysis = Analysis.from_json(text, source="study sent to a worker")
    settings = analysis.study_settings
    return analysis.fixture, analysis.drive, settings["spread"], settings["seed"], analysis.initial


def chunk_task(text: str, first: int, count: int, question: dict[str, Any]) -> "SettlingSummary":
    """One chunk of a study on a worker: units ``first .. first + count - 1`` of the study
    in `text` (:func:`plain_study`), summarized for `question` (:func:`plain_question`).

    Examples
    --------
    >>> import firstorder as fo
    >>> from firstorder.studies.run import Request, chunk_summary
    >>> study = fo.Fixture.rc("1k", "1u").study(fo.Drive([0], end="5m", vin=[1.0]), fo.Spread({"c": "10%"}),
    ...                                          units=50, seed=3)
    >>> request = Request(fo.Tolerance.absolute("1m"), None, None, None, True, (0, 1), (0, 1))
    >>> here = chunk_summary(study.fixture, study.drive, study.spread, 3, 0.0, 10, 40, request)
    >>> chunk_task(plain_study(study), 10, 40, plain_question(request)) == here
    True
    """
    import numpy as np

    from .settling.tolerance import Tolerance
    from .studies.run import Request, chunk_summary

    fixture, drive, spread, seed, initial = _rebuilt(text)

    def array(values: Any) -> Any:
        return None if values is None else np.array(values, dtype=np.float64)

    request = Request(Tolerance.from_dict(question["tolerance"]), array(question["delays"]), question["probe"],
                      array(question["aim"]), question["within_segment"], tuple(question["settle_sides"]),
                      tuple(question["error_sides"]))
    return chunk_summary(fixture, drive, spread, seed, initial, first, count, request)


def summary_on(client: Any, study: "Study", request: "Request", chunks: list[tuple[int, int]],
               progress: bool) -> "SettlingSummary":
    """The merged summary of `chunks` of `study`, each a task on `client`'s cluster.

    Summaries are merged as they arrive and each is let go at once, so the client holds
    the running merge and one summary, not every chunk's (the merges are exact and
    order-free, so the arrival order changes no number).
    """
    from distributed import as_completed
    from distributed import progress as dask_progress

    text = client.scatter(plain_study(study), broadcast=True, hash=False)  # one copy per worker, not per task
    question = plain_question(request)
    futures = [client.submit(chunk_task, text, first, count, question, pure=False,
                             key=f"firstorder-chunk-{first}-{count}-{id(request)}") for first, count in chunks]
    if progress and len(futures) > 1:
        # dask's own bar: a widget in a notebook; elsewhere a text bar that waits for the
        # tasks, sent to stderr as tqdm's is (stdout keeps only the results).
        with contextlib.redirect_stdout(sys.stderr):
            dask_progress(futures, notebook=None)
    merged = None
    for future in as_completed(futures):
        summary = future.result()
        future.release()
        merged = summary if merged is None else merged.merge(summary)
        del summary
    futures.clear()
    return merged
