"""Inversion of measured traverses with forward crystallization models.

:func:`fit_traverse` fits one :class:`zoning.Traverse` and returns a
:class:`FitResult` holding best values, 95% bands (:class:`Estimate`), the
model comparison and diagnostics. :func:`fit_sample` fits the crystals of one
sample jointly (shared parent melt, antecryst test) and returns a
:class:`SampleFitResult`.
"""

from zoning.fitting.fit import fit_traverse
from zoning.fitting.joint import CrystalFit, SampleFitResult, fit_sample
from zoning.fitting.results import Estimate, FitResult

__all__ = ["fit_traverse", "FitResult", "Estimate", "fit_sample", "SampleFitResult",
           "CrystalFit"]
