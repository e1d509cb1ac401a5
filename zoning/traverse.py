"""The checked traverse: the data type shared by reading, fitting and reporting.

A :class:`Traverse` is what the readers in :mod:`zoning.io` return and what
:func:`zoning.fitting.fit_traverse` consumes. It keeps *every* input row, in
input order, with a ``status`` and a ``reason``; nothing is dropped.

Columns of :attr:`Traverse.spots` (the contract between the layers)
--------------------------------------------------------------------
``row``            int, 1-based line number of the spot in the source file
                   (sheet row for ``.xlsx``).
``point``          str, point number or name from the file (row number if absent).
``label``          str, the comment/label column ("" if absent).
``position_um``    float, distance along the original traverse line from its
                   first spot [µm] (projected for stage X/Y input).
``offline_um``     float, perpendicular distance from the best-fit traverse
                   line [µm] (0 when only a distance column was given).
``distance_um``    float, distance from the crystal core [µm], >= 0.
``side``           str, "" for a single half-profile; "A"/"B" for the two
                   halves of a rim-to-rim traverse.
oxides             ``SiO2``, ``TiO2``, ``Al2O3``, ``Cr2O3``, ``FeO`` (total Fe
                   as FeO unless ``Fe2O3`` is reported too), ``Fe2O3``, ``MnO``,
                   ``MgO``, ``NiO``, ``CaO``, ``Na2O``, ``K2O``, ``SrO``,
                   ``BaO``, ``P2O5`` [wt%]; only those present in the file;
                   NaN when missing or below detection.
``total_wt``       float, analytical total [wt%].
``cation_sum``     float, cations per formula unit (4 O olivine, 8 O plagioclase).
``fo``             float, olivine only: 100 Mg/(Mg+Fe) [mol%].
``an``, ``ab``, ``or``  floats, plagioclase only [mol%].
``fo_sigma`` / ``an_sigma``  float, 1-sigma of fo/an from the file [mol%]
                   (NaN when the file gives none).
``status``         "ok" or "flagged".
``reason``         "; "-joined reasons for flagging, "" when ok.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["Traverse", "MINERALS", "ORIENTATIONS", "ORIENTATION_CONFIDENCES", "MAJOR_COLUMN",
           "by_written_sample"]

#: Minerals the tool understands.
MINERALS = ("olivine", "plagioclase")

#: Possible orientations of a traverse as measured.
ORIENTATIONS = ("core-to-rim", "rim-to-core", "rim-to-rim")

#: Confidence levels of an orientation decision: "confirmed" (given by the
#: user), "high", "low" (decided, but on one line of evidence) and
#: "uncertain" (not decided well enough to fit; fitting refuses it).
ORIENTATION_CONFIDENCES = ("confirmed", "high", "low", "uncertain")

#: Column holding the major-element zoning record of each mineral [mol%].
MAJOR_COLUMN = {"olivine": "fo", "plagioclase": "an"}


@dataclass(frozen=True, eq=False)
class Traverse:
    """One checked core-to-rim microprobe traverse.

    Parameters
    ----------
    name : str
        Traverse name (from the file name, or the sample/label column when
        one file holds several traverses).
    source : str
        Path of the file it was read from.
    mineral : {"olivine", "plagioclase"}
        The analysed mineral.
    spots : pandas.DataFrame
        One row per input row, in input order; columns as in the module
        docstring. A copy is stored.
    orientation : {"core-to-rim", "rim-to-core", "rim-to-rim"}
        Orientation of the traverse as measured (after any user override).
    core_position_um : float
        Position of the core along the original traverse line [µm].
    notes : tuple of str
        Plain-language statements made while reading (mineral detected,
        values below detection per column, off-line scatter, orientation).
    settings : mapping
        Reading and checking settings used (for reproducibility).
    orientation_confidence : {"confirmed", "high", "low", "uncertain"}
        How far the orientation and core can be trusted: "confirmed" when
        the user gave them (``--orientation``/``--core-um`` or the project
        keys), "high" or "low" when decided from the evidence, "uncertain"
        when the evidence is weak or disagrees; fitting refuses an
        "uncertain" traverse. Default "confirmed": a traverse built
        directly in Python carries the caller's own distances from the core.
    orientation_basis : str
        The evidence for the orientation, in plain words.
    sample : str
        The sample name written in the file's sample column ("" when the
        file has none). Joint fits use it to tell the samples of one file
        apart.
    """

    name: str
    source: str
    mineral: str
    spots: pd.DataFrame
    orientation: str = "core-to-rim"
    core_position_um: float = 0.0
    notes: tuple[str, ...] = ()
    settings: Mapping[str, Any] = field(default_factory=dict)
    orientation_confidence: str = "confirmed"
    orientation_basis: str = ""
    sample: str = ""

    def __post_init__(self):
        if self.orientation_confidence not in ORIENTATION_CONFIDENCES:
            raise ValueError(
                f"orientation_confidence must be one of {', '.join(ORIENTATION_CONFIDENCES)}; "
                f"got {self.orientation_confidence!r}."
            )
        object.__setattr__(self, "spots", self.spots.copy())
        object.__setattr__(self, "notes", tuple(self.notes))
        object.__setattr__(self, "settings", dict(self.settings))

    @property
    def major(self) -> str:
        """Name of the major-element record column (``"fo"`` or ``"an"``)."""
        return MAJOR_COLUMN[self.mineral]

    @property
    def n_spots(self) -> int:
        """Number of input rows (every spot, flagged or not)."""
        return len(self.spots)

    @property
    def n_ok(self) -> int:
        """Number of spots with status ``"ok"``."""
        return int((self.spots["status"] == "ok").sum())

    def usable(self, include_flagged: bool = False) -> pd.DataFrame:
        """Return the spots to fit, sorted by distance from the core.

        Parameters
        ----------
        include_flagged : bool, optional
            Force flagged spots back in (default False). Spots whose major
            value or distance is not finite are never returned.

        Returns
        -------
        pandas.DataFrame
            Subset of :attr:`spots`, sorted by ``distance_um``.
        """
        s = self.spots
        keep = np.isfinite(s[self.major].to_numpy(float)) & np.isfinite(
            s["distance_um"].to_numpy(float)
        )
        if not include_flagged:
            keep &= (s["status"] == "ok").to_numpy()
        return s[keep].sort_values("distance_um", kind="stable")


def by_written_sample(traverses) -> dict[str, list[Traverse]]:
    """Traverses grouped by the sample name written in their file.

    Parameters
    ----------
    traverses : iterable of Traverse

    Returns
    -------
    dict of str to list of Traverse
        Written sample name -> its traverses, in input order; traverses
        whose file names no sample (``sample == ""``) are left out.
    """
    out: dict[str, list[Traverse]] = {}
    for t in traverses:
        if t.sample:
            out.setdefault(t.sample, []).append(t)
    return out
