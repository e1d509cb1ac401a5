r"""Glass (melt) MgO thermometers for basaltic liquids saturated in olivine.

Each thermometer is a published linear fit of temperature against the MgO
content of quenched glass, calibrated on Kilauea (Hawaii) tholeiitic glasses
in equilibrium with olivine:

.. math:: T\,[^\circ C] = a \cdot \mathrm{MgO}\,[\mathrm{wt\%}] + b

============================  ======  ======  ==========================
thermometer                   a       b       stated 1-sigma
============================  ======  ======  ==========================
Helz & Thornber (1987)        20.1    1014    about 10 °C
Montierth et al. (1995)       23.0    1012    --
Shea et al. (2022)            21.2    1017    --
============================  ======  ======  ==========================

They are *reported extras* for natural basaltic melts. They assume an
olivine-saturated, nearly anhydrous tholeiite at low pressure; away from
that (hydrous or alkalic melts, plagioclase-only assemblages, high pressure)
they can be wrong by tens of degrees. The calibration ranges given below are
approximate (from memory of the calibration data sets); outside them each
function warns with :class:`~zoning.exceptions.CalibrationRangeWarning`.

References
----------
.. [1] Helz, R. T. & Thornber, C. R. (1987). Geothermometry of Kilauea Iki
   lava lake, Hawaii. Bulletin of Volcanology 49, 651-668.
.. [2] Montierth, C., Johnston, A. D. & Cashman, K. V. (1995). An empirical
   glass-composition-based geothermometer for Mauna Loa lavas. In: Mauna Loa
   Revealed, AGU Geophysical Monograph 92, 207-217.
.. [3] Shea, T., Matzen, A. K. & Mourey, A. J. (2022). Experimental study of
   Fe-Mg partitioning and zoning during rapid growth of olivine in Hawaiian
   tholeiites. Contributions to Mineralogy and Petrology 177:114
   (thermometer recalibration; citation details from memory).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from zoning.exceptions import CalibrationRangeWarning, ModelDomainError

__all__ = [
    "GlassThermometer",
    "THERMOMETERS",
    "helz_thornber_1987",
    "montierth_1995",
    "shea_2022",
    "melt_temperature",
]


@dataclass(frozen=True)
class GlassThermometer:
    """A linear glass-MgO thermometer ``T = slope * MgO + intercept``.

    Parameters
    ----------
    name : str
        Key used by :func:`melt_temperature`.
    slope : float
        Temperature change per wt% MgO [°C / wt%].
    intercept : float
        Temperature at zero MgO [°C].
    mgo_min_wt, mgo_max_wt : float
        Approximate calibration range of glass MgO [wt%] (from memory).
    sigma_c : float
        Stated 1-sigma standard error [°C]; NaN when not stated.
    reference : str
        Published source.
    citation : str
        Key of the source in :data:`zoning.references.REFERENCES`.
    """

    name: str
    slope: float
    intercept: float
    mgo_min_wt: float
    mgo_max_wt: float
    sigma_c: float
    reference: str
    citation: str = ""

    def check_range(self, mgo_wt, *, stacklevel: int = 2) -> bool:
        """Warn once if any melt MgO lies outside the calibration range.

        Parameters
        ----------
        mgo_wt : float or array_like
            Melt MgO [wt%], any shape; NaN values are ignored.
        stacklevel : int, optional
            Stack level of the warning (2 points at the caller).

        Returns
        -------
        bool
            True when a value lay outside the range (and a
            :class:`~zoning.exceptions.CalibrationRangeWarning` was issued).
        """
        mgo = np.asarray(mgo_wt, dtype=float)
        finite = np.isfinite(mgo)
        out = finite & ((mgo < self.mgo_min_wt) | (mgo > self.mgo_max_wt))
        if not np.any(out):
            return False
        lo, hi = float(np.min(mgo[finite])), float(np.max(mgo[finite]))
        span = f"{lo:.3g} wt%" if lo == hi else f"{lo:.3g}-{hi:.3g} wt%"
        warnings.warn(
            f"melt MgO {span} lies partly outside the approximate calibration range of the "
            f"{self.name} thermometer ({self.mgo_min_wt:g}-{self.mgo_max_wt:g} wt% MgO); the "
            "temperature is an extrapolation there and may be off by tens of degrees.",
            CalibrationRangeWarning,
            stacklevel=stacklevel,
        )
        return True

    def __call__(self, mgo_wt, *, warn: bool = True, stacklevel: int = 2) -> np.ndarray:
        """Temperature of a melt from its MgO content [°C].

        Parameters
        ----------
        mgo_wt : float or array_like
            Glass / melt MgO [wt%], any shape.
        warn : bool, optional
            Warn (CalibrationRangeWarning) for values outside the
            calibration range (default True).
        stacklevel : int, optional
            Stack level of the warning (2 points at the caller).

        Returns
        -------
        numpy.ndarray or float
            Temperature [°C], same shape as ``mgo_wt``; NaN where MgO is NaN.

        Raises
        ------
        ModelDomainError
            If any MgO value is negative or infinite.
        """
        mgo = np.asarray(mgo_wt, dtype=float)
        finite = np.isfinite(mgo)
        bad = (~finite & ~np.isnan(mgo)) | (finite & (mgo < 0))
        if np.any(bad):
            raise ModelDomainError(
                f"melt MgO for the {self.name} thermometer must be a finite value >= 0 wt%; "
                f"got {mgo[bad].ravel()[:5].tolist()}. Check the melt composition "
                "(MgO in wt%, not a fraction or mol%)."
            )
        if warn:
            self.check_range(mgo, stacklevel=stacklevel + 1)
        t = self.slope * mgo + self.intercept
        return t if t.ndim else float(t)


#: Helz & Thornber (1987), Kilauea Iki lava-lake glasses (drill core,
#: 2.5-10 wt% MgO approx., from memory); SEE about 10 °C.
_HT87 = GlassThermometer(
    "helz_thornber_1987", 20.1, 1014.0, 2.5, 10.0, 10.0,
    "Helz & Thornber (1987), Bull. Volcanol. 49, 651-668", citation="helz_thornber_1987",
)
#: Montierth, Johnston & Cashman (1995), Mauna Loa glasses and experiments
#: (approx. 3-12 wt% MgO, from memory).
_M95 = GlassThermometer(
    "montierth_1995", 23.0, 1012.0, 3.0, 12.0, float("nan"),
    "Montierth, Johnston & Cashman (1995), AGU Geophys. Monogr. 92, 207-217",
    citation="montierth_1995",
)
#: Shea et al. (2022) recalibration on Hawaiian tholeiite experiments
#: (approx. 4-14 wt% MgO, from memory).
_S22 = GlassThermometer(
    "shea_2022", 21.2, 1017.0, 4.0, 14.0, float("nan"),
    "Shea, Matzen & Mourey (2022), Contrib. Mineral. Petrol. 177:114", citation="shea_2022",
)

#: Available thermometers by name.
THERMOMETERS = {t.name: t for t in (_HT87, _M95, _S22)}


def helz_thornber_1987(mgo_wt, *, warn: bool = True):
    r"""Melt temperature from glass MgO after Helz & Thornber (1987) [°C].

    .. math:: T = 20.1\,\mathrm{MgO} + 1014

    Parameters
    ----------
    mgo_wt : float or array_like
        Glass / melt MgO [wt%].
    warn : bool, optional
        Warn outside the approximate calibration range 2.5-10 wt% MgO.

    Returns
    -------
    float or numpy.ndarray
        Temperature [°C], same shape as ``mgo_wt``.

    References
    ----------
    .. [1] Helz, R. T. & Thornber, C. R. (1987). Bull. Volcanol. 49, 651-668.

    Examples
    --------
    >>> round(helz_thornber_1987(7.0), 1)
    1154.7
    """
    return _HT87(mgo_wt, warn=warn, stacklevel=3)


def montierth_1995(mgo_wt, *, warn: bool = True):
    r"""Melt temperature from glass MgO after Montierth et al. (1995) [°C].

    .. math:: T = 23.0\,\mathrm{MgO} + 1012

    Parameters
    ----------
    mgo_wt : float or array_like
        Glass / melt MgO [wt%].
    warn : bool, optional
        Warn outside the approximate calibration range 3-12 wt% MgO.

    Returns
    -------
    float or numpy.ndarray
        Temperature [°C].

    References
    ----------
    .. [1] Montierth, C., Johnston, A. D. & Cashman, K. V. (1995). AGU
       Geophysical Monograph 92, 207-217.
    """
    return _M95(mgo_wt, warn=warn, stacklevel=3)


def shea_2022(mgo_wt, *, warn: bool = True):
    r"""Melt temperature from glass MgO after Shea et al. (2022) [°C].

    .. math:: T = 21.2\,\mathrm{MgO} + 1017

    Parameters
    ----------
    mgo_wt : float or array_like
        Glass / melt MgO [wt%].
    warn : bool, optional
        Warn outside the approximate calibration range 4-14 wt% MgO.

    Returns
    -------
    float or numpy.ndarray
        Temperature [°C].

    References
    ----------
    .. [1] Shea, T., Matzen, A. K. & Mourey, A. J. (2022). Contrib. Mineral.
       Petrol. 177:114 (citation details from memory).
    """
    return _S22(mgo_wt, warn=warn, stacklevel=3)


def melt_temperature(mgo_wt, method: str = "helz_thornber_1987", *, warn: bool = True):
    """Melt temperature from MgO with a named glass thermometer [°C].

    Parameters
    ----------
    mgo_wt : float or array_like
        Glass / melt MgO [wt%].
    method : {"helz_thornber_1987", "montierth_1995", "shea_2022"}
        Thermometer to use (default Helz & Thornber 1987).
    warn : bool, optional
        Warn outside the calibration range.

    Returns
    -------
    float or numpy.ndarray
        Temperature [°C].

    Raises
    ------
    ModelDomainError
        Unknown method name, or negative MgO.
    """
    try:
        thermometer = THERMOMETERS[method]
    except KeyError:
        raise ModelDomainError(
            f"unknown glass thermometer {method!r}; expected one of "
            f"{sorted(THERMOMETERS)}. Pick one of these names."
        ) from None
    return thermometer(mgo_wt, warn=warn, stacklevel=3)
