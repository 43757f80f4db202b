"""Small pieces shared by the per-segment layers: read-only repeated values and
properties computed once.

Both exist for speed on short drives, where numpy's own helpers and
``functools.cached_property`` cost more than the work they wrap.
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["lazy", "repeated"]


class lazy:
    """A property computed on first use and kept in the instance (what
    ``functools.cached_property`` does, without the lock it takes on every first use
    before Python 3.12, which costs more than most of these take to compute)."""

    def __init__(self, compute) -> None:
        self._compute = compute
        self.__doc__ = compute.__doc__
        self._name = compute.__name__

    def __set_name__(self, owner: type, name: str) -> None:
        self._name = name

    def __get__(self, instance: Any, owner: type | None = None) -> Any:
        if instance is None:
            return self
        value = instance.__dict__[self._name] = self._compute(instance)
        return value


def repeated(value: Any, count: int, dtype: Any = np.float64) -> np.ndarray:
    """A read-only array of `count` copies of `value` that stores one (stride 0), as
    ``np.broadcast_to`` makes but at a third of its cost on short arrays.

    Examples
    --------
    >>> a = repeated(2.5, 3)
    >>> a.tolist(), a.strides, a.flags.writeable
    ([2.5, 2.5, 2.5], (0,), False)
    """
    array = np.ndarray((count,), dtype=dtype, buffer=np.array([value], dtype=dtype), strides=(0,))
    array.setflags(write=False)  # (the ``flags`` object costs more than this call)
    return array
