"""Symbolic derivations (sympy), imported only when a derivation is asked for.

:mod:`.names` (one symbol namespace per derivation, and how names are written
in LaTeX), :mod:`.nodal` (supernode nodal equations, solved by elimination),
:mod:`.steps` (the derivation's steps once, as sympy equations, and their LaTeX)
and :mod:`.derivation` (:class:`Derivation`, :func:`derive`, cached by network
structure).  :meth:`Fixture.derivation <firstorder.fixture.Fixture.derivation>`
is the shortcut.
"""

from __future__ import annotations

from .derivation import Derivation, derive
from .names import DerivationNames, derivation_names, latex_name, latex_text
from .steps import PowerOfE, Step, derivation_steps, to_latex

__all__ = ["Derivation", "DerivationNames", "PowerOfE", "Step", "derivation_names", "derivation_steps",
           "derive", "latex_name", "latex_text", "to_latex"]
