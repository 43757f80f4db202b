"""Tests for firstorder.studies.progress: a study told chunk by chunk through `each_chunk`
on its own thread, stopped between chunks by its listener, and deaf on other threads."""

from __future__ import annotations

import math
import threading

import pytest

import firstorder as fo
from firstorder.studies.progress import each_chunk

UNITS, CHUNK = 50, 8
TOLERANCE = fo.Tolerance.absolute("1m")


def build(**options):
    fx = fo.Fixture.rc("10k", "100n")
    drive = fo.Drive([0, "2m", "4m"], end="6m", vin=[5.0, 0.0, 2.0])
    return fx.study(drive, fo.Spread({"r": "5%", "c": "3%"}), units=UNITS, seed=3, **options)


class Stop(Exception):
    pass


def test_each_chunk_is_heard_building_and_asking():
    heard = []
    total = math.ceil(UNITS / CHUNK)  # 7 chunks: six of 8 units and one of 2
    with each_chunk(lambda done, of: heard.append((done, of))):
        study = build(keep=True, chunk=CHUNK, progress=False)
        assert heard == [(k, total) for k in range(1, total + 1)]
        study.settling(TOLERANCE)
    assert heard == 2 * [(k, total) for k in range(1, total + 1)]
    study.settling(TOLERANCE)  # outside the block: nobody listens
    assert len(heard) == 2 * total


def test_a_listener_that_raises_stops_the_study_between_chunks():
    heard = []

    def listen(done, total):
        heard.append(done)
        if done == 3:
            raise Stop

    with pytest.raises(Stop), each_chunk(listen):
        build(keep=True, chunk=CHUNK, progress=False)
    assert heard == [1, 2, 3]  # no chunk after the one that raised


def test_another_threads_study_is_not_heard():
    heard, done = [], threading.Event()

    def elsewhere():
        build(keep=True, chunk=CHUNK, progress=False).settling(TOLERANCE)
        done.set()

    with each_chunk(lambda *args: heard.append(args)):
        worker = threading.Thread(target=elsewhere)
        worker.start()
        assert done.wait(60)
        worker.join()
    assert heard == []


def test_the_listener_is_restored_when_the_block_ends():
    outer, inner = [], []
    with each_chunk(lambda *args: outer.append(args)):
        with each_chunk(lambda *args: inner.append(args)):
            build(keep=True, chunk=25, progress=False)
        build(keep=True, chunk=25, progress=False)
    assert inner == [(1, 2), (2, 2)] and outer == [(1, 2), (2, 2)]
