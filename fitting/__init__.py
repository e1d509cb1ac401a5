"""Inversion of measured traverses with forward crystallization models.

:func:`fit_traverse` fits one :class:`zoning.Traverse` and returns a
:class:`FitResult` holding best values, 95% bands (:class:`Estimate`), the
model comparison and diagnostics.
"""

from zoning.fitting.fit import fit_traverse
from zoning.fitting.results import Estimate, FitResult

__all__ = ["fit_traverse", "FitResult", "Estimate"]
