"""``units="adaptive"``: batches of units until every figure is stable (JCGM 101, 7.9).

The adaptive Monte Carlo procedure of JCGM 101:2008, 7.9.4 (from memory), with the
study's figures as its results: each batch ``r`` of `batch` units (10^4 there) gives every
figure ``y(r)`` the study reports for its tolerance: per segment the settle time and the
error at the sample at each fraction, the yield, and the passing fraction (not the
largest values, which grow with the number of units).  After each batch from the second,
``s = sqrt(sum((y(r) - mean)^2) / (h (h - 1)))`` (the standard deviation of the average of
the `h` batch results) is formed per figure, and the batches stop once ``2 s`` is within
the numerical tolerance ``delta`` of every figure: ``delta = numerical_tolerance *
|mean|`` for times and errors, ``numerical_tolerance`` itself for yields (fractions of
units).  A figure that is infinite (never settled) in every batch so far is stable; in
only some, not.  The study then holds every unit of the ``h`` batches (``h * batch``
units) and reports its figures from all of them, as a fixed study of that many units;
units ``r * batch ..`` are batch ``r``, so the same seed repeats the same study.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError
from ..units import parse_value, shown

if TYPE_CHECKING:
    from .study import Study

__all__ = ["Adaptive", "MAX_BATCHES", "batch_figures", "run_adaptive"]

#: Batches an adaptive study runs at most before it refuses the numerical tolerance.
MAX_BATCHES = 100


@dataclass(frozen=True)
class Adaptive:
    """How an adaptive study stopped.

    Attributes
    ----------
    units, batches, batch : int
        Units drawn (``batches * batch``), batches run, units per batch.
    numerical_tolerance : float
        Relative (of times and errors; absolute of fractions of units).
    figures : int
        Figures held within it.
    margin : float
        The largest ``2 s / delta`` over the figures at the stop (at most 1).
    """

    units: int
    batches: int
    batch: int
    numerical_tolerance: float
    figures: int
    margin: float

    def __str__(self) -> str:
        return (f"{self.batches} batches of {self.batch:,} units: every one of {self.figures:,} figures within "
                f"{self.numerical_tolerance:g} (twice its standard deviation at most {self.margin:.2f} of it; "
                f"JCGM 101 7.9)")


def batch_figures(table) -> tuple[np.ndarray, np.ndarray]:
    """A batch's figures from its settling table, flat, and which are fractions of units."""
    names = [c for c in table.columns if (c.startswith("settle_time_") or c.startswith("error_"))
             and not c.endswith("_max")] + ["yield"]
    values = np.concatenate([table[c].to_numpy(dtype=np.float64) for c in names] + [
        np.array([table.attrs["passing"] / table.attrs["units"]])])
    fraction = np.concatenate([np.full(len(table), c == "yield") for c in names] + [np.array([True])])
    return np.where(np.isnan(values), np.inf, values), fraction


def _tolerance(value: Any) -> float:
    text = value
    if isinstance(value, str) and value.strip().endswith("%"):
        number = parse_value(value.strip()[:-1], field="numerical_tolerance") / 100.0
    elif isinstance(value, bool) or value is None:
        number = float("nan")
    else:
        try:
            number = parse_value(value, field="numerical_tolerance")
        except InputError:
            number = float("nan")
    if not 0.0 < number < 1.0:
        raise InputError(f"numerical_tolerance: {shown(text)} is not allowed; give a relative tolerance of each "
                         f"figure between 0 and 1 (both excluded), such as 0.01 or '1%'")
    return float(number)


def run_adaptive(study: "Study", numerical_tolerance: Any, batch: Any) -> Adaptive:
    """Run batches of `study`'s units until its figures are stable; see the module docstring."""
    tolerance_value = _tolerance(numerical_tolerance)
    if isinstance(batch, bool) or not isinstance(batch, (int, np.integer)) or batch < 2:
        raise InputError(f"batch: {shown(batch)} is not allowed; give a whole number of units per batch >= 2 "
                         f"(JCGM 101 takes 10,000)")
    batch = int(batch)
    tolerance, sample_delay, probe, target, fractions = study._figures
    results: list[np.ndarray] = []
    fraction = None
    bar = None
    if study.progress:
        from tqdm.auto import tqdm

        bar = tqdm(desc="adaptive study", unit="batch", leave=False)
    try:
        for h in range(1, MAX_BATCHES + 1):
            table = study.settling(tolerance, sample_delay, probe, target, fractions, units=batch,
                                   first=(h - 1) * batch)
            figures, fraction = batch_figures(table)
            results.append(figures)
            if bar is not None:
                bar.update(1)
            if h < 2:
                continue
            margin = _margin(np.stack(results), fraction, tolerance_value)
            if margin <= 1.0:
                return Adaptive(h * batch, h, batch, tolerance_value, int(figures.size), margin)
    finally:
        if bar is not None:
            bar.close()
    raise InputError(f"numerical_tolerance: {tolerance_value:g} is not reached after {MAX_BATCHES} batches of "
                     f"{batch:,} units (twice the standard deviation of some figure is still "
                     f"{margin:.2f} times it); give a larger tolerance, or a fixed number of units")


def _margin(results: np.ndarray, fraction: np.ndarray, tolerance: float) -> float:
    """The largest ``2 s / delta`` over the figures (inf where a figure is not yet stable)."""
    h = results.shape[0]
    finite = np.isfinite(results)
    every = finite.all(axis=0)
    same_never = (~finite).all(axis=0) & (results == results[0]).all(axis=0)
    values = np.where(every, results, 0.0)
    mean = values.mean(axis=0)
    s = np.sqrt(((values - mean) ** 2).sum(axis=0) / (h * (h - 1)))
    delta = np.where(fraction, tolerance, tolerance * np.abs(mean))
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(s == 0.0, 0.0, 2.0 * s / delta)
    ratio = np.where(every, ratio, np.where(same_never, 0.0, np.inf))
    return float(ratio.max()) if ratio.size else 0.0
