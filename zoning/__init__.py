"""Forward models of crystallization zoning in olivine and plagioclase.

The core package holds the mineral recalculation, the partitioning laws and
the forward crystallization models. Reading exports lives in
:mod:`zoning.io`, inversion in :mod:`zoning.fitting`.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("zoning")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0+unknown"

from zoning.exceptions import (
    CalibrationRangeWarning,
    ConvergenceWarning,
    DataQualityWarning,
    FitError,
    ModelDomainError,
    ProfileFormatError,
    ZoningError,
    ZoningWarning,
)
from zoning.models import ConstantPartitionModel, CrystallizationModel, ParameterSpec
from zoning.traverse import Traverse

__all__ = [
    "__version__",
    "Traverse",
    "ZoningError",
    "ProfileFormatError",
    "ModelDomainError",
    "FitError",
    "ZoningWarning",
    "DataQualityWarning",
    "ConvergenceWarning",
    "CalibrationRangeWarning",
    "CrystallizationModel",
    "ConstantPartitionModel",
    "ParameterSpec",
]
