"""Response: a fixture's exact response to a drive, split every useful way.

Components of the state (and of every probe):

* ``total`` = ``zero_input`` + ``zero_state``;
* ``zero_input``: sources at zero, from the given starting state;
* ``zero_state``: from a zero state, with the sources as scheduled; it is the
  sum of the per-source ``contribution`` s;
* ``forced``: each segment's final value (piecewise constant); for a segment
  that holds its state it is that held state;
* ``natural`` = ``total`` - ``forced``.
"""

from __future__ import annotations

from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np

from . import _kernels, engine
from .errors import InputError, TopologyError
from .units import format_value, parse_value

if TYPE_CHECKING:
    from .drive import Drive
    from .fixture import Fixture

__all__ = ["Response", "respond", "COMPONENTS"]

#: The component names every response offers besides per-source contributions.
COMPONENTS = ("total", "zero_input", "zero_state", "forced", "natural")


def _match_columns(fixture: "Fixture", drive: "Drive") -> tuple[np.ndarray, np.ndarray]:
    """Source levels (n, m) and switch states (n, s) from the drive's columns."""
    sources = [p.name for p in fixture.sources]
    switches = [p.name for p in fixture.switches]
    known = set(sources) | set(switches)
    extra = [name for name in drive.names if name not in known]
    if extra:
        raise InputError(
            f"drive columns {extra} name no source or switch of the fixture; "
            f"sources are {sources}, switches are {switches}"
        )
    missing = [name for name in sources + switches if name not in drive.names]
    if missing:
        raise InputError(f"drive: no column for {missing}; the fixture needs one column per source and switch")
    n = len(drive)
    if len(sources) == 1:
        levels = drive.levels(sources[0]).reshape(n, 1)  # a view of the read-only column
    else:
        levels = np.column_stack([drive.levels(s) for s in sources]) if sources else np.zeros((n, 0))
    states = np.column_stack([drive.levels(s) for s in switches]) if switches else np.zeros((n, 0))
    bad = (states != 0) & (states != 1)
    if bad.any():
        k, j = np.argwhere(bad)[0]
        raise InputError(
            f"drive.{switches[j]}[{k}]: {float(states[k, j])!r} is not a switch state; use 1/True (closed) or 0/False (open)"
        )
    return levels, states.astype(bool)


def _configurations(states: np.ndarray) -> tuple[list[tuple[bool, ...]], np.ndarray]:
    """The distinct switch configurations and, per segment, which one holds."""
    n, count = states.shape
    if count == 0:
        return [()], np.broadcast_to(np.intp(0), (n,))  # read-only: nothing to fill
    codes = states.astype(np.int64) @ (np.int64(1) << np.arange(count, dtype=np.int64))
    unique, inverse = np.unique(codes, return_inverse=True)
    configs = [tuple(bool((code >> j) & 1) for j in range(count)) for code in unique.tolist()]
    return configs, inverse.reshape(-1)


def _one_value(array: np.ndarray) -> bool:
    """True for a read-only broadcast of one value (stride 0), as one rate for every segment is."""
    return array.ndim == 1 and array.size > 1 and array.strides == (0,)


def _rates(taus: np.ndarray) -> np.ndarray:
    """``1 / tau``, and 0 where tau is infinite (the state is held)."""
    holding = np.isinf(taus)
    return np.where(holding, 0.0, 1.0 / np.where(holding, 1.0, taus))


def respond(fixture: "Fixture", drive: "Drive", initial: Any = 0.0) -> "Response":
    """Compute the response of `fixture` to `drive` (see :class:`Response`)."""
    fixture.check()
    levels, states = _match_columns(fixture, drive)
    configs, inverse = _configurations(states)
    if len(configs) == 1:
        first_use = np.zeros(1, dtype=np.intp)
    else:
        # np.unique's return_index gives the first segment of every configuration.
        _, first_use = np.unique(inverse, return_index=True)
    reduced = []
    for c, config in enumerate(configs):
        k = int(first_use[c])
        where = f"segment {k} (from {format_value(float(drive.times[k]), 's')}"
        where += f"; {fixture.describe_states(config)})" if config else ")"
        reduced.append(fixture.configuration(config, where=where))
    taus = np.array([r.tau for _, r in reduced])
    gains = np.array([r.gain for _, r in reduced]).reshape(len(configs), levels.shape[1])
    drifts = np.array([r.drift for _, r in reduced]).reshape(len(configs), levels.shape[1])

    holding = np.isinf(taus)
    if holding.any() and (drifts != 0).any():
        ramp = (drifts[inverse] * levels != 0).any(axis=1)
        if ramp.any():
            k = int(np.argmax(ramp))
            storage = fixture.storage
            feeding = [s.name for s, d in zip(fixture.sources, drifts[inverse[k]]) if d != 0]
            # A capacitor fed by a current needs a path across it; a coil held at a voltage
            # needs resistance in its loop (a resistor across it would change nothing).
            remedy = (
                "across the capacitor, or in series with the source" if storage.kind == "capacitor"
                else "in series with the inductor (its winding resistance, say) or with the source"
            )
            raise TopologyError(
                f"segment {k} (from {format_value(float(drive.times[k]), 's')}): {storage.kind} "
                f"'{storage.name}' sees no resistance, yet {feeding} drive it, so its state would "
                f"ramp without limit. Add a resistance {remedy}."
            )
    rate_by_config = _rates(taus)
    if len(configs) == 1:
        # One rate for every segment: a read-only broadcast, not an array to fill.
        rate = np.broadcast_to(rate_by_config[0], (len(drive),))
    else:
        rate = rate_by_config[inverse]
    return Response(fixture, drive, levels, configs, inverse, rate, gains, initial)


class _FittedSegments:
    """Stands in for the fixture of a Response built by :meth:`Response.from_segments`.

    A response only asks its fixture for the unit of the state, the names of the
    sources (here one pseudo-source, ``"fitted"``, whose share is every segment's
    final value), the storage element's kind and name (for display) and probes
    (none).
    """

    switches = ()
    probes = ()

    def __init__(self, name: str, unit: str) -> None:
        from types import SimpleNamespace

        self.state_unit = unit
        self.sources = (SimpleNamespace(name="fitted"),)
        self.storage = SimpleNamespace(kind="fitted model", name=name)


class Response:
    """The exact response of a fixture to a drive.

    Do not build directly; call :meth:`Fixture.respond` or :func:`respond` (or
    :meth:`from_segments` for a measured model).

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 1.0)], end="5m"))
    >>> round(float(res.total(1e-3)), 4)   # one time constant: 63.2 %
    0.6321
    >>> res.boundary
    array([0.        , 0.99326205])
    """

    @classmethod
    def from_segments(cls, drive: "Drive", tau: Any, final: Any, initial: Any = 0.0,
                      unit: str = "", name: str = "fitted") -> "Response":
        """A response from per-segment time constants and final values, without a fixture.

        For models measured rather than designed (see :func:`firstorder.fit_trace`):
        segment ``k`` of `drive` relaxes with ``tau[k]`` towards ``final[k]``, and the
        state is continuous at every change.  Every component works as for
        :func:`respond`; the one pseudo-source is named ``"fitted"`` (its
        contribution is ``zero_state``), and there are no probes.

        Parameters
        ----------
        drive : Drive
            Supplies the change instants and the end; its columns are not used.
        tau : array_like, shape (n,)
            Time constant of every segment (s), > 0; ``inf`` holds the state
            (that segment's `final` is then ignored).
        final : array_like, shape (n,)
            The value every segment settles towards.
        initial : float or str
            The starting state, ``"settled"`` or ``"periodic"``.
        unit, name : str
            Unit and name of the modelled quantity, for display.

        Examples
        --------
        >>> import firstorder as fo
        >>> drive = fo.Drive.steps([(0, 0.0), ("1m", 1.0)], end="3m")
        >>> res = Response.from_segments(drive, tau=[1e-3, 1e-3], final=[0.0, 1.0], unit="V")
        >>> round(float(res.total(2e-3)), 4)   # one time constant into the step: 63.2 %
        0.6321
        >>> res.forced(2e-3), round(float(res.natural(2e-3)), 4)
        (1.0, -0.3679)
        """
        n = len(drive)
        taus = np.asarray(tau, dtype=np.float64).reshape(-1)
        finals = np.asarray(final, dtype=np.float64).reshape(-1)
        for field, array in (("tau", taus), ("final", finals)):
            if array.size != n:
                raise InputError(f"from_segments.{field}: has {array.size} values but the drive has {n} segments")
        bad = np.isnan(taus) | ~(taus > 0)
        if bad.any():
            k = int(np.argmax(bad))
            raise InputError(f"from_segments.tau[{k}]: {float(taus[k])!r} is not allowed; expected a time > 0 s or inf")
        holding = np.isinf(taus)
        bad = ~np.isfinite(finals) & ~holding
        if bad.any():
            k = int(np.argmax(bad))
            raise InputError(f"from_segments.final[{k}]: {float(finals[k])!r} is not allowed; expected a finite number")
        rate = _rates(taus)
        levels = np.where(holding, 0.0, finals).reshape(n, 1)
        return cls(_FittedSegments(name, unit), drive, levels, [()], np.zeros(n, dtype=np.intp), rate,
                   np.ones((1, 1)), initial)

    def __init__(self, fixture, drive, levels, configs, inverse, rate, gains, initial) -> None:
        self.fixture = fixture
        self.drive = drive
        self._levels = levels
        self._configs = configs
        self._inverse = inverse
        self._rate = rate
        self._gains = gains
        self._starts = drive.times
        self._decay, self._growth = engine.segment_factors(drive.times, drive.ends, rate)
        self._scans: dict[str, np.ndarray] = {}
        self.initial_text = initial
        self.initial = self._initial_state(initial)

    # -- per-segment data ------------------------------------------------------------
    @cached_property
    def tau(self) -> np.ndarray:
        """Time constant of every segment (s); ``inf`` where the state is held (read-only)."""
        if _one_value(self._rate):  # one rate for all: a broadcast answer
            rate = float(self._rate[0])
            return np.broadcast_to(1.0 / rate if rate > 0 else np.inf, self._rate.shape)
        tau = np.where(self._rate > 0, 1.0 / np.where(self._rate > 0, self._rate, 1.0), np.inf)
        tau.setflags(write=False)
        return tau

    @property
    def starts(self) -> np.ndarray:
        return self._starts

    @cached_property
    def ends(self) -> np.ndarray:
        return self.drive.ends

    @cached_property
    def _any_holds(self) -> bool:
        return bool(self.holds[0]) if _one_value(self.holds) else bool(self.holds.any())

    @cached_property
    def holds(self) -> np.ndarray:
        """True for segments whose configuration holds the state (read-only)."""
        if _one_value(self._rate):  # one rate for all: a broadcast answer
            return np.broadcast_to(bool(self._rate[0] == 0.0), self._rate.shape)
        holds = self._rate == 0.0
        holds.setflags(write=False)
        return holds

    @cached_property
    def _source_finals(self) -> np.ndarray:
        """(n, m): each source's share of each segment's final value."""
        return self._gains[self._inverse] * self._levels

    @cached_property
    def _one_gain(self) -> float | None:
        """With one source and no switch changes, the gain from its level to the final
        value (the final values are that gain times the level column); else None."""
        if self._levels.shape[1] == 1 and len(self._configs) == 1:
            return float(self._gains[0, 0])
        return None

    @cached_property
    def _final_sources_only(self) -> np.ndarray:
        m = self._levels.shape[1]
        if self._one_gain is not None:
            if self._one_gain == 1.0:  # 1.0 * level is level exactly: no need for a copy
                return self._levels[:, 0]
            return self._one_gain * self._levels[:, 0]
        if m == 1:
            return self._gains[self._inverse, 0] * self._levels[:, 0]
        return self._source_finals.sum(axis=1)

    @property
    def final(self) -> np.ndarray:
        """The value every segment settles towards (its held state where it holds)."""
        return self._finals("total")

    @property
    def configurations(self) -> list[tuple[bool, ...]]:
        return list(self._configs)

    @property
    def segment_configuration(self) -> np.ndarray:
        """Index into :attr:`configurations` for every segment."""
        return self._inverse

    # -- starting state -------------------------------------------------------------
    def _initial_state(self, initial: Any) -> float:
        if isinstance(initial, str) and initial.strip() == "settled":
            if self._rate[0] == 0.0:
                raise InputError(
                    "initial: 'settled' needs a first segment that settles, but segment 0 holds its "
                    "state (no resistive path); give the starting state as a number"
                )
            return float(self._final_sources_only[0])
        if isinstance(initial, str) and initial.strip() == "periodic":
            # x_end = A x0 + B, with 1 - A computed without cancellation.
            exponent = -float(np.sum(self.drive.durations * self._rate))
            drift = float(self._boundary("zero_state")[-1])  # cached: zero_state needs it again
            if exponent == 0.0:
                if drift != 0.0:
                    raise InputError(
                        "initial: 'periodic' has no solution; every segment holds the state, so "
                        "no start repeats at the end"
                    )
                return 0.0
            return drift / -np.expm1(exponent)
        if isinstance(initial, str) and initial.strip().isalpha():
            raise InputError(
                f"initial: {initial!r} is not allowed; give a number (the starting state, in "
                f"{self.fixture.state_unit}), 'settled' or 'periodic'"
            )
        return parse_value(initial, field="initial", unit=self.fixture.state_unit)

    # -- scans --------------------------------------------------------------------------
    def _component_key(self, component: str) -> str:
        if component in ("total", "zero_input", "zero_state"):
            return component
        names = [p.name for p in self.fixture.sources]
        if component in names:
            return component
        raise InputError(
            f"component: {component!r} is not one of {list(COMPONENTS)} or a source {names}"
        )

    def _start(self, key: str) -> float:
        return self.initial if key in ("total", "zero_input") else 0.0

    def _source_final(self, key: str) -> np.ndarray:
        if key == "total" or key == "zero_state":
            return self._final_sources_only
        if key == "zero_input":
            return np.zeros(len(self.drive))
        j = [p.name for p in self.fixture.sources].index(key)
        return self._source_finals[:, j]

    def _scan_target(self, key: str) -> tuple[np.ndarray, float]:
        """`key`'s final value of every segment as ``scale * target`` (so that, for one
        source and no switch changes, the scan reads the level column directly)."""
        if key in ("total", "zero_state") and self._one_gain is not None:
            return self._levels[:, 0], self._one_gain  # as _final_sources_only
        return self._source_final(key), 1.0

    def _boundary(self, key: str) -> np.ndarray:
        scan = self._scans.get(key)
        if scan is None:
            target, scale = self._scan_target(key)
            scan = engine.relaxation_scan(self._decay, self._growth, target, self._start(key), scale)
            self._scans[key] = scan
        return scan

    def _finals(self, key: str) -> np.ndarray:
        final = self._source_final(key)
        if self._any_holds:
            final = np.where(self.holds, self._boundary(key)[:-1], final)
        return final

    @property
    def boundary(self) -> np.ndarray:
        """The state at every change and at the end (length ``len(drive) + 1``)."""
        return self._boundary("total")

    def boundary_of(self, component: str) -> np.ndarray:
        """Like :attr:`boundary` for ``"zero_input"``, ``"zero_state"`` or a source."""
        return self._boundary(self._component_key(component))

    # -- evaluation -------------------------------------------------------------------------
    def _times(self, t: Any) -> np.ndarray:
        """`t` as a float array (:meth:`_check_times` checks the values)."""
        if isinstance(t, str):
            return np.asarray(parse_value(t, field="t", unit="s"))
        if isinstance(t, (list, tuple)) and any(isinstance(v, str) for v in t):
            return np.array([parse_value(v, field=f"t[{i}]", unit="s") for i, v in enumerate(t)])
        return np.asarray(t, dtype=np.float64)

    def _check_times(self, flat: np.ndarray, is_sorted: bool, no_nan: bool) -> None:
        """Refuse NaN, inf and times outside the drive.  A grid known to be sorted
        (and, with `no_nan`, proven free of NaN) is checked at its ends only."""
        if not flat.size:
            return
        if not no_nan and not np.isfinite(flat.sum()):  # one cheap pass: NaN or inf shows in the sum
            if not np.isfinite(flat).all():
                raise InputError("t: contains NaN or inf; times must be finite seconds")
        if is_sorted:
            low, high = float(flat[0]), float(flat[-1])  # sorted: the ends are the extremes
        else:
            low, high = float(flat.min()), float(flat.max())
        if not (np.isfinite(low) and np.isfinite(high)):
            raise InputError("t: contains NaN or inf; times must be finite seconds")
        if low < self._starts[0] or high > self.drive.end:
            bad = low if low < self._starts[0] else high
            raise InputError(
                f"t: {bad!r} s is outside the drive, which runs from {float(self._starts[0])!r} "
                f"to {self.drive.end!r} s"
            )

    def _locator(self, array: np.ndarray) -> engine.SegmentLocator:
        """Where the times fall, after checking them."""
        flat = array.reshape(-1)
        locator = engine.SegmentLocator(flat, self._starts, self._rate)
        self._check_times(flat, locator.is_sorted, no_nan=locator.compiled)
        return locator

    def locate(self, t: Any) -> engine.SegmentLocator:
        """Pre-compute where times fall, to evaluate several components at once."""
        return self._locator(self._times(t))

    def evaluate(self, t: Any, components: tuple[str, ...] = ("total",), probe: str | None = None) -> dict[str, np.ndarray]:
        """Evaluate several components (of the state, or of `probe`) on one time array."""
        array = self._times(t)
        if probe is None and len(components) == 1 and components[0] not in ("forced", "natural"):
            # One state component: one compiled sweep if the grid is sorted and long.
            key = self._component_key(components[0])
            flat = array.reshape(-1)
            values = engine.evaluate_sorted(flat, self._starts, self._rate, self._finals(key),
                                            self._boundary(key)[:-1])
            if values is not None:
                self._check_times(flat, is_sorted=True, no_nan=True)
                return {components[0]: values.reshape(array.shape)}
        locator = self._locator(array)
        rows = self._probe_rows(probe) if probe is not None else None
        out = {}
        consume = len(components) == 1 and rows is None
        for component in components:
            out[component] = self._component(component, locator, rows, consume).reshape(array.shape)
        return out

    def _component(self, component: str, locator: engine.SegmentLocator, rows, consume: bool = False) -> np.ndarray:
        if component in ("forced", "natural"):
            final = self._finals("total")
            state_forced = locator.spread(final)
            if component == "forced":
                return self._probe_value(state_forced, "total", locator, rows)
            state = locator.combine(final, self._boundary("total")[:-1])
            if rows is None:
                return state - state_forced
            return locator.spread(rows[:, 0]) * (state - state_forced)
        key = self._component_key(component)
        # A single state component may take over the locator's decay array.
        state = locator.combine(self._finals(key), self._boundary(key)[:-1], consume=consume)
        return self._probe_value(state, key, locator, rows)

    def _probe_value(self, state: np.ndarray, key: str, locator, rows) -> np.ndarray:
        if rows is None:
            return state
        state *= locator.spread(rows[:, 0])
        if key == "zero_input":
            return state
        if key in ("total", "zero_state"):
            offset = np.einsum("ij,ij->i", rows[:, 1:], self._levels)
        else:
            j = [p.name for p in self.fixture.sources].index(key)
            offset = rows[:, 1 + j] * self._levels[:, j]
        state += locator.spread(offset)
        return state

    def _single(self, component: str, t: Any, probe: str | None = None):
        result = self.evaluate(t, (component,), probe)[component]
        return float(result) if result.ndim == 0 else result

    def total(self, t: Any):
        """The state at times `t` (V across the capacitor or A through the inductor)."""
        return self._single("total", t)

    def zero_input(self, t: Any):
        """The response from the starting state with every source at zero."""
        return self._single("zero_input", t)

    def zero_state(self, t: Any):
        """The response from a zero state to the sources as scheduled."""
        return self._single("zero_state", t)

    def forced(self, t: Any):
        """Each segment's final value, piecewise constant."""
        return self._single("forced", t)

    def natural(self, t: Any):
        """``total - forced``: the decaying part."""
        return self._single("natural", t)

    def contribution(self, source: str, t: Any):
        """The zero-state response to one source alone (they add up to ``zero_state``)."""
        names = [p.name for p in self.fixture.sources]
        if source not in names:
            raise InputError(f"contribution: {source!r} names no source; sources are {names}")
        return self._single(source, t)

    # -- probes --------------------------------------------------------------------------------
    def _probe_rows(self, name: str) -> np.ndarray:
        """(n, 1 + m): the probe as an affine row over [x, u...] in every segment."""
        from ._network import probe_row

        probes = {p.name: p for p in self.fixture.probes}
        if name not in probes:
            raise InputError(f"probe: {name!r} is not a probe of the fixture; probes are {list(probes)}")
        rows = []
        for c, config in enumerate(self._configs):
            layout, reduced = self.fixture.configuration(config)
            k = int(np.argmax(self._inverse == c))  # the first segment in this configuration
            where = f"segment {k} (from {format_value(float(self._starts[k]), 's')}"
            where += f"; {self.fixture.describe_states(config)})" if config else ")"
            rows.append(probe_row(layout, self.fixture, reduced, probes[name], where))
        by_config = np.array(rows)
        return by_config[self._inverse]

    def probe(self, name: str, t: Any, component: str = "total"):
        """A probe's value at times `t` (probes may jump at changes)."""
        return self._single(component, t, probe=name)

    def probe_boundary(self, name: str) -> tuple[np.ndarray, np.ndarray]:
        """A probe just after each change and just before the next (two arrays of length n)."""
        rows = self._probe_rows(name)
        states = self.boundary
        offset = np.einsum("ij,ij->i", rows[:, 1:], self._levels)
        return rows[:, 0] * states[:-1] + offset, rows[:, 0] * states[1:] + offset

    # -- settling ---------------------------------------------------------------------------------
    def settling(self, tolerance, sample_delay: Any = None, probe: str | None = None):
        """Per-segment settle times, residuals and sample errors (a pandas DataFrame).

        See :func:`firstorder.settling.settling_table` for the columns.

        Examples
        --------
        >>> import firstorder as fo
        >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 5.0)], end="20m"))
        >>> round(float(res.settling(fo.Tolerance.relative(0.01))["settle_time"].iloc[0]) / 1e-3, 3)
        4.605
        """
        from .settling import settling_table

        return settling_table(self, tolerance, sample_delay=sample_delay, probe=probe)

    def summary(self, tolerance, sample_delay: Any = None, probe: str | None = None):
        """The worst segment, how many did not settle, total time, smallest margin at the samples.

        See :func:`firstorder.settling.settling_summary`.
        """
        from .settling import settling_summary

        return settling_summary(self, tolerance, sample_delay=sample_delay, probe=probe)

    @cached_property
    def cautions(self) -> list:
        """Hazards found in this response (high voltage, stored energy), as :class:`Caution` s.

        Checked against the limits in force when first read (see
        :func:`firstorder.cautions.set_limits`); call
        :func:`firstorder.cautions.check` for other limits.
        """
        from .cautions import check

        return check(self)

    # -- display ---------------------------------------------------------------------------------
    def __repr__(self) -> str:
        return (
            f"Response({len(self.drive)} segments, start {format_value(self.initial, self.fixture.state_unit)}, "
            f"end {format_value(float(self.boundary[-1]), self.fixture.state_unit)})"
        )

    def _repr_html_(self) -> str:
        from ._html import table

        unit = self.fixture.state_unit
        n = len(self.drive)
        shown = list(range(n)) if n <= 8 else [*range(6), n - 1]
        rows = []
        for k in shown:
            rows.append([
                k, format_value(float(self._starts[k]), "s"), format_value(float(self.tau[k]), "s"),
                format_value(float(self.boundary[k]), unit), format_value(float(self.final[k]), unit),
                format_value(float(self.boundary[k + 1]), unit),
            ])
        caption = (
            f"Response of {self.fixture.storage.kind} '{self.fixture.storage.name}': {n} segments, "
            f"start {format_value(self.initial, unit)}"
        )
        html = table(["segment", "from", "τ", "start value", "final", "value at end"], rows, caption=caption)
        cautions = getattr(self, "cautions", None)
        if cautions:
            from ._html import paragraph

            html += "".join(paragraph(f"⚠ {c}", color="#a33") for c in cautions)
        return html
