"""Tolerance studies: the units of a lot, drawn from a spread, and what they do.

:mod:`.spread` (:class:`Spread`, :class:`Uniform`, :class:`Normal`, and drawing units).
"""

from __future__ import annotations

from .spread import Normal, Spread, Uniform

__all__ = ["Normal", "Spread", "Uniform"]
