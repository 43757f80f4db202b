"""The fit of a whole trace, as a result to read, overlay and hold against a model."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError
from ..units import format_value
from .trace import Trace

if TYPE_CHECKING:
    import pandas as pd

    from ..drive import Drive
    from ..fixture import Fixture
    from ..response import Response

__all__ = ["TABLE_COLUMNS", "TraceFit", "check_probe"]

#: The columns of :attr:`TraceFit.table`, in order.
TABLE_COLUMNS = (
    "start", "end", "points", "start_value", "final", "final_stderr", "tau", "tau_stderr",
    "rms_residual", "noise", "first_order", "second_tau",
)


@dataclass(frozen=True, eq=False)
class TraceFit:
    """Every segment of a trace fitted with a first-order step; see :func:`fit_trace`.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per drive segment (index ``segment``) with the columns of
        ``TABLE_COLUMNS``: ``start``, ``end`` (the segment on the drive's clock,
        s), ``points`` (samples in it), ``start_value`` (the fitted curve at the
        change), ``final``, ``final_stderr``, ``tau``, ``tau_stderr`` (s),
        ``rms_residual`` (root mean square of measured minus fitted), ``noise``
        (estimated from the samples alone, see below), ``first_order`` (the
        residuals are consistent with the noise and no slower exponential is
        found) and ``second_tau`` (the slower time constant of a two-exponential
        model where it fits significantly better, else NaN).
    status : tuple of str
        Per segment: ``"fitted"``, or why not (too few points; no step).
    pooled : pandas.DataFrame
        One row per switch configuration: the inverse-variance weighted tau of its
        first-order segments (all fitted ones when none is first order), its
        standard error, how many segments were pooled and their Birge ratio.
    offset, offset_stderr : float
        Delay of the trace behind the drive (s): a change at drive time ``s``
        shows in the trace at ``s + offset``.  The standard error is 0 for a
        given offset.
    response : Response
        The fitted model (per-segment tau and final value, continuous state) on
        the trace's clock, for overlays.
    fitted : ndarray
        The per-segment fitted curves at the trace's times (NaN outside the
        drive and in segments that were not fitted).
    residuals : ndarray
        ``trace.values - fitted``.
    """

    trace: Trace
    drive: "Drive"
    fixture: "Fixture | None"
    probe: str | None
    table: "pd.DataFrame"
    status: tuple[str, ...]
    pooled: "pd.DataFrame"
    offset: float
    offset_stderr: float
    response: "Response"
    fitted: np.ndarray = field(repr=False)
    residuals: np.ndarray = field(repr=False)

    @property
    def tau(self) -> float:
        """The pooled time constant (s) when every segment shares one configuration."""
        return float(self._single_configuration("tau")["tau"])

    @property
    def tau_stderr(self) -> float:
        """Standard error of :attr:`tau` (s)."""
        return float(self._single_configuration("tau_stderr")["tau_stderr"])

    def _single_configuration(self, name: str):
        if len(self.pooled) != 1:
            raise InputError(
                f"{name}: the segments have {len(self.pooled)} switch configurations "
                f"({'; '.join(self.pooled.index)}), each with its own tau; read fit.pooled"
            )
        return self.pooled.iloc[0]

    def compare(self, fixture: "Fixture", probe: str | None = None, initial: Any = None) -> "pd.DataFrame":
        """Hold the measurement against a fixture's model, segment by segment.

        Parameters
        ----------
        fixture : Fixture
            The model (its nominal part values, say).
        probe : str, optional
            The probe the trace measures; by default the one given to
            :func:`fit_trace` (None: the fixture's state).
        initial : float or str, optional
            Starting state of the model; only segments that hold their state
            depend on it.  By default the first segment's fitted start value
            (for the state) or 0.

        Returns
        -------
        pandas.DataFrame
            Per segment: ``tau``, ``tau_stderr``, ``tau_model``, ``tau_ratio``
            (measured over model), ``tau_deviation`` (measured minus model in
            standard errors), the same for ``final``, and ``agrees``: both
            deviations within 3 standard errors (common practice; a segment
            without a measured tau is judged on its final value).  A deviation
            of many standard errors with a ratio close to 1 is a real, small
            difference (a part's tolerance), measured precisely.
        """
        import pandas as pd

        from ..fixture import Fixture
        from ..response import respond

        if not isinstance(fixture, Fixture):
            raise InputError(f"compare.fixture: expected a Fixture, got {type(fixture).__name__}")
        probe = self.probe if probe is None else check_probe(probe, fixture, "compare.probe")
        if initial is None:
            first = float(self.table["start_value"].iloc[0])
            initial = first if probe is None and math.isfinite(first) else 0.0
        model = respond(fixture, self.drive, initial)
        middles = 0.5 * (self.drive.times + self.drive.ends)
        if probe is None:
            final_model = np.asarray(model.final, dtype=float)
        else:
            final_model = np.asarray(model.probe(probe, middles, component="forced"), dtype=float)
        table = self.table
        tau_model = np.asarray(model.tau, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            tau_deviation = (table["tau"].to_numpy() - tau_model) / table["tau_stderr"].to_numpy()
            final_deviation = (table["final"].to_numpy() - final_model) / table["final_stderr"].to_numpy()
            out = pd.DataFrame({
                "start": table["start"], "end": table["end"],
                "tau": table["tau"], "tau_stderr": table["tau_stderr"], "tau_model": tau_model,
                "tau_ratio": table["tau"].to_numpy() / tau_model, "tau_deviation": tau_deviation,
                "final": table["final"], "final_stderr": table["final_stderr"], "final_model": final_model,
                "final_deviation": final_deviation,
            }, index=table.index)
        tau_agrees = np.isnan(table["tau"].to_numpy()) | (np.abs(tau_deviation) <= 3.0)
        out["agrees"] = tau_agrees & (np.abs(final_deviation) <= 3.0)
        return out

    def __repr__(self) -> str:
        fitted = sum(s == "fitted" for s in self.status)
        flagged = int((~self.table["first_order"]).sum())
        return (
            f"TraceFit({self.trace.name!r}: {fitted} of {len(self.status)} segments fitted, "
            f"{flagged} not first order, offset {format_value(self.offset, 's')})"
        )

    def _repr_html_(self) -> str:
        from .._html import paragraph, table

        unit = self.trace.units
        rows = []
        for k, row in self.table.iterrows():
            rows.append([
                k, format_value(row["start"], "s"), int(row["points"]), _pm(row["final"], row["final_stderr"], unit),
                _pm(row["tau"], row["tau_stderr"], "s"), format_value(row["rms_residual"], unit),
                format_value(row["noise"], unit), "yes" if row["first_order"] else "no",
                "" if math.isnan(row["second_tau"]) else format_value(row["second_tau"], "s"),
            ])
        caption = f"Fit of trace '{self.trace.name}' ({len(self.trace)} points), offset {format_value(self.offset, 's')}"
        html = table(["segment", "from", "points", "final", "τ", "rms residual", "noise", "first order",
                      "slower τ"], rows, caption=caption)
        notes = [f"segment {k}: {s}" for k, s in enumerate(self.status) if s != "fitted"]
        return html + "".join(paragraph(note, color="#a33") for note in notes)


def _pm(value: float, stderr: float, unit: str) -> str:
    if math.isnan(value):
        return "—"
    return f"{format_value(value, unit)} ± {format_value(stderr, unit)}"


def check_probe(probe: Any, fixture: "Fixture | None", field_name: str) -> str | None:
    """`probe` if `fixture` has it (None stays None); else an InputError naming `field_name`."""
    if probe is None:
        return None
    if fixture is None:
        raise InputError(f"{field_name}: {probe!r} needs the fixture that defines it; pass fixture=")
    names = [p.name for p in fixture.probes]
    if probe not in names:
        raise InputError(f"{field_name}: {probe!r} is not a probe of the fixture; probes are {names}")
    return probe
