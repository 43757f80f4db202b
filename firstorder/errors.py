"""Exception types raised by firstorder.

Every error a user can trigger with bad input is a :class:`ValueError`, so
``except ValueError`` catches them all; the subclasses let code and tests tell
the kinds apart.
"""

from __future__ import annotations

__all__ = ["InputError", "TopologyError", "ZeroTimeError"]


class InputError(ValueError):
    """A value given by the user is malformed or out of range.

    The message names the field, the offending value and what is allowed.
    """


class TopologyError(InputError):
    """The fixture's network cannot be solved as drawn (names the parts and nodes)."""


class ZeroTimeError(TopologyError):
    """A switch configuration would move the stored state in zero time.

    A capacitor across a loop of ideal voltage elements, or an inductor whose
    only current path is cut, would need an infinite current or voltage.
    """
