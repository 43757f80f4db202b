"""A design sweep: one tolerance study per design point, and a tidy table of their answers.

An engineer choosing a filter capacitor or a relay asks the lot's questions at each
candidate value: what fraction of units passes, and what sample delay 99.9 % of them
need.  :func:`sweep` builds the fixture at every point of the grid ``over`` spans
(:meth:`Fixture.with_values <firstorder.fixture.Fixture.with_values>`), runs a study at each
and gathers one row per point and segment.

Each point has a seed of its own, derived from the sweep's seed and the point's place in
the grid and shown in the table, so that one point can be studied again alone::

    fixture.with_values(c_filter="2.2n").study(drive, spread, units=n, seed=row.seed)

gives that point's numbers exactly.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError
from ..units import shown
from .spread import Spread

if TYPE_CHECKING:
    import pandas as pd

    from ..drive import Drive
    from ..fixture import Fixture
    from ..settling.tolerance import Tolerance

__all__ = ["MAX_POINTS", "point_seed", "sweep"]

#: At most this many design points in one sweep (each is a whole study).
MAX_POINTS = 10_000


def point_seed(seed: int, index: int) -> int:
    """The seed of design point `index` of a sweep seeded with `seed`: 63 bits from
    ``SeedSequence([seed, index])``, so points draw independent units and each depends
    only on (seed, index).

    Examples
    --------
    >>> point_seed(1, 0) == point_seed(1, 0), point_seed(1, 0) == point_seed(1, 1)
    (True, False)
    """
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed: {seed!r} must be a whole number >= 0")
    words = np.random.SeedSequence([int(seed), int(index)]).generate_state(2, np.uint32)
    return (int(words[0]) << 31) ^ int(words[1])


def _grid(fixture: "Fixture", over: Any) -> tuple[list[str], list[tuple[Any, ...]]]:
    """The keys of `over` and every point of the grid they span (the last key varying fastest)."""
    if not isinstance(over, Mapping) or not over:
        raise InputError(f"over: {shown(over)} must be a mapping of part name to a list of values, "
                         f"e.g. {{'c': ['1n', '2.2n']}}")
    keys = list(over)
    parts = fixture.part_map
    for key in keys:
        if not isinstance(key, str) or key not in parts:
            raise InputError(f"over: {key!r} names no part; parts are {list(parts)}")
        if parts[key].is_source:
            raise InputError(f"over: {key!r} is a source, whose levels come from the drive; sweep a part")
        values = over[key]
        if isinstance(values, (str, bytes)) or not isinstance(values, Sequence) or len(values) == 0:
            raise InputError(f"over.{key}: {shown(values)} must be a non-empty list of values")
    count = 1
    for key in keys:
        count *= len(over[key])
    if count > MAX_POINTS:
        raise InputError(f"over: spans {count:,} design points; at most {MAX_POINTS:,} in one sweep")
    return keys, list(itertools.product(*(over[key] for key in keys)))


def sweep(fixture: "Fixture", drive: "Drive", spread: Any, over: Any, *, tol: "Tolerance", units: Any, seed: Any,
          fractions: Sequence[float] = (0.999,), sample_delay: Any = None, probe: str | None = None,
          target: Any = "final", initial: Any = 0.0, client: Any = None, **options: Any) -> "pd.DataFrame":
    """One study per design point of `over`, as a tidy table: a row per point and segment.

    Parameters
    ----------
    fixture, drive, spread
        As for :meth:`Fixture.study <firstorder.fixture.Fixture.study>`.
    over : mapping of str to list
        Part name to the values to try (``{"c_filter": ["1n", "2.2n", "4.7n"]}``); several
        parts span their grid (every combination).
    tol : Tolerance
        What "inside" means, for the yield and the delays.
    units, seed
        Units per point, and the sweep's seed (each point's own is :func:`point_seed`).
    fractions : sequence of float
        The fractions of units for which each segment's needed sample delay is given.
    sample_delay, probe, target, initial
        As for :meth:`Study.settling <firstorder.studies.study.Study.settling>`.
    client : dask.distributed.Client, optional
        Run each point's chunks on a cluster (see :meth:`Fixture.study`).
    **options
        ``chunk``, ``keep``, ``progress``: as for :class:`~firstorder.studies.study.Study`.

    Returns
    -------
    pandas.DataFrame
        Columns: the swept parts (as given), ``point``, ``seed``, ``segment``, ``yield``
        (units inside at that segment's sample), ``passing``, ``passing_low``,
        ``passing_high`` (the point's fraction of units inside at every sample and its
        95 % Clopper-Pearson interval), and ``delay_for_<fraction>`` per fraction.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc("1k", "100n")
    >>> drive = fo.Drive([0, "1m"], end="2m", vin=[1.0, 0.0])
    >>> table = fo.sweep(fx, drive, fo.Spread({"r": "1%", "c": "10%"}), {"c": ["100n", "220n"]},
    ...                  tol=fo.Tolerance.absolute("1m"), units=500, seed=3)
    >>> print(table[["c", "segment", "yield", "delay_for_0.999"]].round(6).to_string(index=False))
       c  segment  yield  delay_for_0.999
    100n        0    1.0         0.000764
    100n        1    1.0         0.000764
    220n        0    0.0         0.001685
    220n        1    0.0         0.001680
    """
    import pandas as pd

    from .study import Study, _fraction

    keys, points = _grid(fixture, over)
    if not isinstance(spread, Spread):
        spread = Spread(spread)
    chosen = [_fraction(f, "fractions") for f in fractions]
    study_options = dict(options) if client is None else {**options, "client": client}
    frames = []
    for index, point in enumerate(points):
        seed_here = point_seed(seed, index)
        unit = fixture.with_values(**dict(zip(keys, point)))
        study = Study(unit, drive, spread, units=units, seed=seed_here, initial=initial, **study_options)
        table = study.settling(tol, sample_delay=sample_delay, probe=probe, target=target)
        # The table's run of the chunks counted the units passing every sample too.
        passing = study.passing_of(table.attrs["passing"])
        n = len(drive)
        frame = {key: [value] * n for key, value in zip(keys, point)}
        frame.update(point=index, seed=seed_here, segment=np.arange(n), **{"yield": table["yield"].to_numpy()},
                     passing=passing.fraction, passing_low=passing.low, passing_high=passing.high)
        for fraction in chosen:
            frame[f"delay_for_{fraction:g}"] = study.delay_for(tol, fraction, probe=probe, target=target)
        frames.append(pd.DataFrame(frame))
    result = pd.concat(frames, ignore_index=True)
    result.attrs.update(tolerance=str(tol), spread=str(spread), units=units, seed=seed)
    return result
