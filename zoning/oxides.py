"""Oxide table: molar masses, cations and oxygens per formula, iron conversions.

Molar masses are computed from the standard atomic weights of IUPAC
(CIAAW, "Standard atomic weights of the elements 2021", Prohaska et al.
2022, Pure Appl. Chem. 94, 573-600). For elements whose standard atomic
weight is an interval (O, Mg, Si) the IUPAC *conventional* value is used;
for the others the full standard value.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = [
    "ATOMIC_WEIGHTS",
    "Oxide",
    "OXIDES",
    "CANONICAL_OXIDES",
    "molar_mass",
    "FEO_PER_FE2O3",
    "total_iron_as_feo",
    "oxide_moles",
    "parse_oxide_name",
]

#: Citation key (:mod:`zoning.references`) of the atomic weights (CIAAW 2021).
CITATION = "prohaska_2022"

#: Standard atomic weights [g/mol], IUPAC/CIAAW 2021 (conventional values for
#: O, Mg and Si, whose standard atomic weights are intervals).
ATOMIC_WEIGHTS: dict[str, float] = {
    "O": 15.999,
    "Na": 22.98976928,
    "Mg": 24.305,
    "Al": 26.9815384,
    "Si": 28.085,
    "P": 30.973761998,
    "K": 39.0983,
    "Ca": 40.078,
    "Ti": 47.867,
    "Cr": 51.9961,
    "Mn": 54.938043,
    "Fe": 55.845,
    "Ni": 58.6934,
    "Sr": 87.62,
    "Ba": 137.327,
}


@dataclass(frozen=True)
class Oxide:
    """One oxide component of a microprobe analysis.

    Parameters
    ----------
    name : str
        Oxide formula as used for column names, e.g. ``"Al2O3"``.
    cation : str
        Column name of the cation in structural formulae, e.g. ``"Al"``;
        ferric iron is ``"Fe3"`` so that ``"Fe"`` is always ferrous (or total) iron.
    element : str
        Chemical element of the cation.
    n_cations : int
        Cations per oxide formula unit.
    n_oxygens : int
        Oxygens per oxide formula unit.
    """

    name: str
    cation: str
    element: str
    n_cations: int
    n_oxygens: int

    @property
    def molar_mass(self) -> float:
        """Molar mass of the oxide [g/mol]."""
        return (
            self.n_cations * ATOMIC_WEIGHTS[self.element]
            + self.n_oxygens * ATOMIC_WEIGHTS["O"]
        )

    @property
    def charge(self) -> float:
        """Formal charge of the cation (2 n_oxygens / n_cations)."""
        return 2.0 * self.n_oxygens / self.n_cations


_TABLE = (
    Oxide("SiO2", "Si", "Si", 1, 2),
    Oxide("TiO2", "Ti", "Ti", 1, 2),
    Oxide("Al2O3", "Al", "Al", 2, 3),
    Oxide("Cr2O3", "Cr", "Cr", 2, 3),
    Oxide("FeO", "Fe", "Fe", 1, 1),
    Oxide("Fe2O3", "Fe3", "Fe", 2, 3),
    Oxide("MnO", "Mn", "Mn", 1, 1),
    Oxide("MgO", "Mg", "Mg", 1, 1),
    Oxide("NiO", "Ni", "Ni", 1, 1),
    Oxide("CaO", "Ca", "Ca", 1, 1),
    Oxide("Na2O", "Na", "Na", 2, 1),
    Oxide("K2O", "K", "K", 2, 1),
    Oxide("SrO", "Sr", "Sr", 1, 1),
    Oxide("BaO", "Ba", "Ba", 1, 1),
    Oxide("P2O5", "P", "P", 2, 5),
)

#: The oxides understood by the package, by name, in canonical column order.
OXIDES: dict[str, Oxide] = {ox.name: ox for ox in _TABLE}

#: Canonical oxide column names, in the order used in every table.
CANONICAL_OXIDES: tuple[str, ...] = tuple(OXIDES)

#: wt% FeO equivalent to 1 wt% Fe2O3: 2 M(FeO) / M(Fe2O3) = 0.8998.
FEO_PER_FE2O3: float = 2.0 * OXIDES["FeO"].molar_mass / OXIDES["Fe2O3"].molar_mass


def molar_mass(oxide: str) -> float:
    """Return the molar mass of a canonical oxide [g/mol].

    Parameters
    ----------
    oxide : str
        Canonical oxide name, e.g. ``"SiO2"``.

    Returns
    -------
    float
        Molar mass [g/mol].

    Raises
    ------
    KeyError
        If ``oxide`` is not one of :data:`CANONICAL_OXIDES`.
    """
    try:
        return OXIDES[oxide].molar_mass
    except KeyError:
        raise KeyError(
            f"unknown oxide {oxide!r}; expected one of {', '.join(CANONICAL_OXIDES)}"
        ) from None


def total_iron_as_feo(feo, fe2o3):
    """Return total iron expressed as FeO, FeO* = FeO + 0.8998 Fe2O3 [wt%].

    Parameters
    ----------
    feo, fe2o3 : float or array_like
        FeO and Fe2O3 contents [wt%]; NaN where not reported.

    Returns
    -------
    float or ndarray
        FeO* [wt%]. A missing (NaN) part counts as zero when the other part
        is reported; NaN only when both are missing.
    """
    feo = np.asarray(feo, dtype=float)
    fe2o3 = np.asarray(fe2o3, dtype=float)
    both_missing = np.isnan(feo) & np.isnan(fe2o3)
    out = np.nan_to_num(feo, nan=0.0) + FEO_PER_FE2O3 * np.nan_to_num(fe2o3, nan=0.0)
    out = np.where(both_missing, np.nan, out)
    return out if out.ndim else float(out)


def oxide_moles(oxides: pd.DataFrame) -> pd.DataFrame:
    """Convert oxide wt% to moles of oxide per 100 g of sample [mol].

    Parameters
    ----------
    oxides : pandas.DataFrame
        Columns named by canonical oxide [wt%]; other columns are ignored.

    Returns
    -------
    pandas.DataFrame
        Same index; one column per canonical oxide present, wt / M.
    """
    cols = [c for c in CANONICAL_OXIDES if c in oxides.columns]
    masses = np.array([OXIDES[c].molar_mass for c in cols])
    values = oxides[cols].to_numpy(dtype=float) / masses
    return pd.DataFrame(values, index=oxides.index, columns=cols)


_OXIDE_NAME_RE = re.compile(
    r"^(?P<ox>sio2|tio2|al2o3|cr2o3|fe2o3|feo|mno|mgo|nio|cao|na2o|k2o|sro|bao|p2o5)"
    r"(?P<tot>\s*[-_]?\s*(\*|\(t\)|\(tot\.?\)|\(total\)|t|tot\.?|total))?$"
)
_OXIDE_BY_LOWER = {name.lower(): name for name in OXIDES}


def parse_oxide_name(text: str) -> tuple[str, bool, bool] | None:
    """Recognise an oxide name as people write it.

    Parameters
    ----------
    text : str
        E.g. ``"SiO2"``, ``"sio2"``, ``"FeOT"``, ``"FeO*"``, ``"FeO(tot)"``,
        ``"Al203"`` (digit zero for the letter O). Sub- and superscript
        digits, case and spaces do not matter; units must be removed first.

    Returns
    -------
    (str, bool, bool) or None
        Canonical oxide, whether a total-iron marker (T, t, *, tot, total)
        follows it, and whether the digit 0 was read as the letter O; None
        when the text is not an oxide name.

    Examples
    --------
    >>> parse_oxide_name("FeOT")
    ('FeO', True, False)
    >>> parse_oxide_name("Al203")
    ('Al2O3', False, True)
    """
    t = str(text).translate(str.maketrans("₀₁₂₃₄₅₆₇₈₉⁰¹²³⁴⁵⁶⁷⁸⁹", "01234567890123456789"))
    t = t.strip().lower().replace("_", " ")
    for candidate in (t.replace(" ", ""), t):
        m = _OXIDE_NAME_RE.match(candidate)
        if m:
            return _OXIDE_BY_LOWER[m.group("ox")], bool(m.group("tot")), False
    compact = t.replace(" ", "")
    if "0" in compact:
        m = _OXIDE_NAME_RE.match(compact.replace("0", "o"))
        if m:
            return _OXIDE_BY_LOWER[m.group("ox")], bool(m.group("tot")), True
    return None
