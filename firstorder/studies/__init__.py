"""Tolerance studies: the units of a lot, drawn from a spread, and what they do.

:mod:`.spread` (:class:`Spread`, :class:`Uniform`, :class:`Normal`, and drawing units),
:mod:`.lot` (a lot drawn, and each unit built by hand), :mod:`.study` (:class:`Study`:
the lot at once, per-segment answers as exact order statistics of the units), :mod:`.budget`
(``Study.budget``: the JCGM 100 uncertainty budget beside the Monte Carlo result) and
:mod:`.worst` (``Fixture.worst_case``: corners of the bands, then a bounded search) and
:mod:`.sweep` (:func:`sweep`: a study per design point).
"""

from __future__ import annotations

from .spread import Normal, Spread, Uniform
from .study import Passing, Study
from .sweep import sweep

__all__ = ["Normal", "Passing", "Spread", "Study", "Uniform", "sweep"]
