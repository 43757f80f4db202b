"""(h) A study on a local dask.distributed cluster against the same study in process (run by hand).

1,000,000 units x 100 segments (a relay-switched RC filter, three varied parts and the
temperature): ``study.settling`` in this process, then on a LocalCluster of 2 worker
processes (one thread each) on the same 2 cores.  Targets: within 1.3x of the in-process
time, the client's peak memory under 500 MB, the numbers identical.  Also the chunk
overhead: the time per task of a study of tiny chunks, less its in-process time, per task.

    .venv/bin/python benchmarks/cluster.py [--units N]
"""

from __future__ import annotations

import argparse
import resource
import time
import tracemalloc

import numpy as np

import firstorder as fo


def fixture_and_drive(segments: int):
    fx = (fo.Fixture().voltage_source("vdac", "dac", "gnd").resistor("r_src", "dac", "k", "1k")
          .switch("k1", "k", "f", r_on="0.2", r_off="1G").capacitor("c_f", "f", "gnd", "10n")
          .resistor("r_in", "f", "gnd", "1M"))
    times = np.arange(segments) * 100e-6
    levels = np.where(np.arange(segments) % 2, 0.5, 4.5)
    relay = (np.arange(segments) % 10 != 9).astype(float)
    return fx, fo.Drive(times, segments * 100e-6, vdac=levels, k1=relay)


SPREAD = fo.Spread({"c_f": "10%", "r_src": "1%", "k1.r_on": fo.Uniform("0.1", "0.4")}, temperature=(0, 50),
                   tempco={"c_f": "-750ppm"})
TOLERANCE = fo.Tolerance.lsb(bits=16, span=5.0)
#: A median of a million units would keep half a million values per segment (2.3 GiB): the
#: tail fractions a sign-off asks for keep 1 % of them.
FRACTIONS = (0.99, 0.999)


def timed(function):
    start = time.perf_counter()
    value = function()
    return time.perf_counter() - start, value


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--units", type=int, default=1_000_000)
    parser.add_argument("--segments", type=int, default=100)
    arguments = parser.parse_args()
    from distributed import Client, LocalCluster

    fx, drive = fixture_and_drive(arguments.segments)
    options = dict(units=arguments.units, seed=1, progress=False)
    here_time, here = timed(lambda: fx.study(drive, SPREAD, **options).settling(
        TOLERANCE, sample_delay="60u", fractions=FRACTIONS))
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address="127.0.0.1:0", silence_logs=40) as cluster, Client(cluster) as client:
        client.submit(sum, [1]).result()  # workers up before the clock starts
        tracemalloc.start()
        there_time, there = timed(lambda: fx.study(drive, SPREAD, client=client, **options).settling(
            TOLERANCE, sample_delay="60u", fractions=FRACTIONS))
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        # The chunk overhead: 200 chunks of 50 units each, on the cluster and here.
        small = dict(units=10_000, seed=2, chunk=50, progress=False)
        tiny_here, _ = timed(lambda: fx.study(drive, SPREAD, **small).settling(TOLERANCE))
        tiny_there, _ = timed(lambda: fx.study(drive, SPREAD, client=client, **small).settling(TOLERANCE))
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"(h) {arguments.units:,} units x {arguments.segments} segments: in process {here_time:.2f} s; "
          f"2 worker processes {there_time:.2f} s; ratio {there_time / here_time:.2f} (target <= 1.3)")
    print(f"(h) identical: {there.equals(here)}; client peak traced memory during the cluster study "
          f"{peak / 1e6:.0f} MB (target < 500 MB); process peak RSS {rss:.0f} MB (both studies)")
    print(f"(h) chunk overhead: {(tiny_there - tiny_here) / 200 * 1e3:.1f} ms per task "
          f"(200 tasks of 50 units: {tiny_there:.2f} s on the cluster, {tiny_here:.2f} s here)")


if __name__ == "__main__":
    main()
