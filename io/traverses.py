"""Turn microprobe exports into checked :class:`zoning.Traverse` objects.

:func:`read_traverses` is the one entry point from a file to the data type
that fitting and reporting use. It reads the export
(:func:`zoning.io.readers.read_export`), recalculates every spot
(:mod:`zoning.minerals`), runs the quality checks, places the spots along
the traverse and finds the core (:mod:`zoning.orientation`). Every input row
of the file comes back, in input order, with ``status`` and ``reason``.

A traverse that cannot be fitted (one spot only, or every spot flagged) is
still returned, so that ``zoning inspect`` can show why; its notes say so,
and :func:`zoning.fitting.fit_traverse` refuses it with a clear message.
"""

from __future__ import annotations

import os
import re
from collections.abc import Mapping
from dataclasses import fields, replace

import numpy as np
import pandas as pd

from zoning.exceptions import ProfileFormatError
from zoning.minerals import (
    IRON_OPTIONS,
    QualitySettings,
    check_mineral,
    check_spots,
    detect_mineral,
    end_members,
    join_reasons,
    structural_formula,
)
from zoning.orientation import find_stray_positions, locate_core, project_traverse
from zoning.oxides import CANONICAL_OXIDES, OXIDES
from zoning.traverse import MAJOR_COLUMN, MINERALS, ORIENTATIONS, Traverse

__all__ = ["read_traverses", "build_traverse", "quality_settings"]

#: Record name used in statements, by mineral.
_RECORD = {"olivine": "Fo", "plagioclase": "An"}


def quality_settings(checks: QualitySettings | Mapping | None) -> QualitySettings:
    """Return a :class:`~zoning.minerals.QualitySettings` from settings or a mapping.

    Parameters
    ----------
    checks : QualitySettings, mapping or None
        Settings object, or a mapping of field names to numbers (e.g. a
        ``[checks]`` table of a project file); None gives the defaults.

    Returns
    -------
    QualitySettings

    Raises
    ------
    ProfileFormatError
        For an unknown setting name or a value that is not a number.
    """
    if checks is None:
        return QualitySettings()
    if isinstance(checks, QualitySettings):
        return checks
    if not isinstance(checks, Mapping):
        raise ProfileFormatError(
            f"checks must be QualitySettings or a mapping of settings; got "
            f"{type(checks).__name__}."
        )
    known = [f.name for f in fields(QualitySettings)]
    unknown = sorted(set(checks) - set(known))
    if unknown:
        raise ProfileFormatError(
            f"unknown quality-check setting(s) {', '.join(map(repr, unknown))}; "
            f"expected some of: {', '.join(known)}."
        )
    values = {}
    for key, value in checks.items():
        try:
            values[key] = float(value)
        except (TypeError, ValueError):
            raise ProfileFormatError(
                f"quality-check setting {key} = {value!r} is not a number; give a number "
                "in the unit of the setting (wt%, µm or cations)."
            ) from None
    return QualitySettings(**values)


def _distance_header_hint(header: str, position: np.ndarray):
    """Orientation stated by a distance header such as 'Distance from core (µm)'.

    Returns ``(orientation, core_position_um, basis)`` or None.
    """
    text = str(header).lower()
    finite = position[np.isfinite(position)]
    if finite.size == 0:
        return None
    if re.search(r"\bfrom\s+(the\s+)?core\b", text) or re.search(r"\bcore\s*dist", text):
        if finite.min() < 0 < finite.max():
            return ("rim-to-rim", 0.0,
                    f"the distance column '{header}' is measured from the core and has both "
                    "signs: rim-to-rim, core at 0 µm")
        if finite.max() <= 0:
            return ("rim-to-core", 0.0,
                    f"the distance column '{header}' is measured from the core: core at 0 µm")
        return ("core-to-rim", 0.0,
                f"the distance column '{header}' is measured from the core: core at 0 µm")
    if re.search(r"\bfrom\s+(the\s+)?rim\b", text) and finite.min() >= 0:
        return ("rim-to-core", float(finite.max()),
                f"the distance column '{header}' is measured from the rim: core at the far "
                f"end, {finite.max():.4g} µm")
    return None


def _record_sigma_from_oxides(spots: pd.DataFrame, mineral: str):
    """1-sigma of Fo or An per spot propagated from the oxide 1-sigma columns [mol%].

    First-order propagation of independent oxide uncertainties through
    Fo = 100 Mg/(Mg + Fe) (all Fe as Fe2+) or An = 100 Ca/(Ca + Na + K) in
    moles; a missing sigma of a minor member (K2O) counts as zero. Returns
    (values, note); note is "" when the needed sigma columns are absent.
    """
    def moles(oxide):
        ox = OXIDES[oxide]
        wt = spots[oxide].to_numpy(float) if oxide in spots else np.zeros(len(spots))
        sd = (spots[f"{oxide}_sigma"].to_numpy(float) if f"{oxide}_sigma" in spots
              else np.full(len(spots), np.nan))
        factor = ox.n_cations / ox.molar_mass
        return np.nan_to_num(wt) * factor, sd * factor

    if mineral == "olivine":
        needed = ("MgO", "FeO")
        if not all(f"{c}_sigma" in spots for c in needed):
            return None, ""
        (m, sm), (f, sf) = moles("MgO"), moles("FeO")
        total = m + f
        sigma = 100.0 / total**2 * np.hypot(f * sm, m * sf)
        what = "FeO and MgO"
    else:
        needed = ("CaO", "Na2O")
        if not all(f"{c}_sigma" in spots for c in needed):
            return None, ""
        (c, sc), (n, sn), (k, sk) = moles("CaO"), moles("Na2O"), moles("K2O")
        sk = np.nan_to_num(sk)
        total = c + n + k
        sigma = 100.0 / total**2 * np.sqrt(((n + k) * sc) ** 2 + (c * sn) ** 2 + (c * sk) ** 2)
        what = "CaO, Na2O" + (" and K2O" if "K2O_sigma" in spots else " (K2O sigma taken as 0)")
    record = _RECORD[mineral]
    return sigma, (f"{record} 1-sigma per spot propagated from the file's {what} 1-sigma "
                   "columns (first order, independent errors)")


def read_traverses(
    path: str | os.PathLike,
    *,
    mineral: str | None = None,
    column_map: Mapping[str, str] | None = None,
    orientation: str | None = None,
    core_position_um: float | None = None,
    checks: QualitySettings | Mapping | None = None,
    sheet: str | int | None = None,
    iron: str = "FeO",
) -> list[Traverse]:
    """Read a microprobe export into checked core-to-rim traverses.

    Parameters
    ----------
    path : str or path-like
        CSV/TXT export or ``.xlsx`` workbook (see
        :func:`zoning.io.readers.read_export` for the dialects understood).
    mineral : {"olivine", "plagioclase"}, optional
        Analysed mineral. Detected from the oxides when not given (the notes
        say so). Analyses that clearly belong to the other mineral are
        refused with :class:`~zoning.exceptions.ProfileFormatError`.
    column_map : mapping of str to str, optional
        Canonical name → header in the file, for files the column
        recognition does not understand (e.g. ``{"FeO": "FeO tot"}``).
    orientation : {"core-to-rim", "rim-to-core", "rim-to-rim"}, optional
        Override the automatic orientation decision (relative to increasing
        position along the traverse).
    core_position_um : float, optional
        Override the core position along the traverse [µm] (in the file's
        distance values, or from the first spot for stage X/Y input).
    checks : QualitySettings or mapping, optional
        Quality-check thresholds (default :class:`~zoning.minerals.QualitySettings`).
    sheet : str or int, optional
        Worksheet of an ``.xlsx`` file (default: the first).
    iron : {"FeO", "reported", "charge-balance"}, optional
        Iron treatment in the structural formula (default: all Fe as FeO);
        see :func:`zoning.minerals.structural_formula`.

    Returns
    -------
    list of Traverse
        One per traverse in the file, in file order. ``spots`` holds every
        input row in input order (column contract in :mod:`zoning.traverse`,
        plus ``x_um``/``y_um`` when the file has stage coordinates).

    Raises
    ------
    ProfileFormatError
        Unreadable file, no position information, a wrong or undetectable
        mineral, or invalid settings. The message names the file and says
        what to do.

    Notes
    -----
    Positions: with stage X/Y (and no distance column) ``position_um`` is
    measured along the best-fit line from the first spot; with a distance
    column the file's own values are kept (the column also gives the
    position when X/Y are present, which are then used only to check the
    off-line scatter). A distance header that says "from core" or "from rim"
    fixes the orientation unless ``orientation``/``core_position_um`` are
    given; otherwise it is decided from the profile (see
    :func:`zoning.orientation.locate_core`), and the basis is in the notes.

    The analytical total is the file's total column where given, else the
    sum of the oxides read.

    A traverse with a single spot or with every spot flagged is returned
    (so that it can be inspected) with a note starting "cannot be fitted";
    fitting refuses it.
    """
    from zoning.io.readers import read_export

    if mineral is not None and mineral not in MINERALS:
        raise ProfileFormatError(
            f"unknown mineral {mineral!r}; expected one of {', '.join(MINERALS)}. "
            "Use --mineral olivine or --mineral plagioclase, or leave it out to detect it."
        )
    if orientation is not None and orientation not in ORIENTATIONS:
        raise ProfileFormatError(
            f"unknown orientation {orientation!r}; expected one of {', '.join(ORIENTATIONS)}."
        )
    if iron not in IRON_OPTIONS:
        raise ProfileFormatError(
            f"unknown iron option {iron!r}; expected one of {', '.join(IRON_OPTIONS)}."
        )
    settings = quality_settings(checks)
    if core_position_um is not None:
        try:
            core_position_um = float(core_position_um)
        except (TypeError, ValueError):
            raise ProfileFormatError(
                f"core position {core_position_um!r} is not a number; give it in µm."
            ) from None
    tables = read_export(path, column_map=column_map, sheet=sheet)
    return [
        build_traverse(
            t, mineral=mineral, orientation=orientation, core_position_um=core_position_um,
            checks=settings, iron=iron, sheet=sheet,
        )
        for t in tables
    ]


def build_traverse(
    raw,
    *,
    mineral: str | None = None,
    orientation: str | None = None,
    core_position_um: float | None = None,
    checks: QualitySettings | Mapping | None = None,
    iron: str = "FeO",
    sheet: str | int | None = None,
) -> Traverse:
    """Recalculate, check and orient one raw table (see :func:`read_traverses`).

    Parameters
    ----------
    raw : zoning.io.readers.RawTable
        Table as read from the file (``name``, ``source``, ``data``,
        ``column_map``, ``notes``).
    mineral, orientation, core_position_um, checks, iron, sheet
        As in :func:`read_traverses`.

    Returns
    -------
    Traverse
        The checked traverse.
    """
    # Absurd cell values (1e308, denormals) must end as flagged spots, not as
    # floating-point warnings: every non-finite result is flagged downstream.
    with np.errstate(all="ignore"):
        return _build(raw, mineral=mineral, orientation=orientation,
                      core_position_um=core_position_um, checks=checks, iron=iron, sheet=sheet)


def _build(raw, *, mineral, orientation, core_position_um, checks, iron, sheet) -> Traverse:
    settings = quality_settings(checks)
    data = raw.data.reset_index(drop=True)
    source = str(raw.source)
    n = len(data)
    where = f"{source}" + (f" (traverse {raw.name!r})" if raw.name else "")
    oxides = [c for c in CANONICAL_OXIDES if c in data.columns]
    if not oxides:
        raise ProfileFormatError(
            f"{where}: no oxide columns were recognised; expected columns such as SiO2, "
            "FeO, MgO, CaO, Na2O. Name them with --column-map MgO='MgO wt.%' (project key "
            'column_map = { MgO = "MgO wt.%" }).'
        )
    notes: list[str] = list(raw.notes)
    read_flags = (data["read_flags"].fillna("").astype(str) if "read_flags" in data
                  else pd.Series([""] * n))
    clean = read_flags.eq("").to_numpy()
    basis = data.loc[clean, oxides] if clean.any() else data[oxides]

    if mineral is None:
        try:
            mineral, note = detect_mineral(basis)
        except ProfileFormatError as exc:
            raise ProfileFormatError(f"{where}: {exc}") from None
        notes.append(note)
        detected = True
    else:
        check_mineral(basis, mineral, source)
        notes.append(f"mineral {mineral} as given")
        detected = False
    record = _RECORD[mineral]
    major = MAJOR_COLUMN[mineral]

    formula = structural_formula(data[oxides], mineral, iron=iron)
    members = end_members(formula, mineral)

    # Analytical total: the file's own total where given, else the oxide sum.
    oxide_sum = data[oxides].sum(axis=1, min_count=1).to_numpy(float)
    if "total_reported" in data.columns:
        reported = pd.to_numeric(data["total_reported"], errors="coerce").to_numpy(float)
        total = np.where(np.isfinite(reported), reported, oxide_sum)
        n_rep = int(np.isfinite(reported).sum())
        notes.append(f"analytical total from the file's total column for {n_rep} of {n} spots"
                     + ("" if n_rep == n else ", sum of the oxides for the others"))
    else:
        total = oxide_sum
        notes.append("analytical total computed as the sum of the oxides read")

    # Positions along the traverse.
    has_xy = "x_um" in data.columns and "y_um" in data.columns
    has_d = "distance_um" in data.columns
    offline_flag = np.full(n, "", dtype=object)
    x = data["x_um"].to_numpy(float) if has_xy else None
    y = data["y_um"].to_numpy(float) if has_xy else None
    if has_xy:
        fit = project_traverse(x, y, offline_limit_um=settings.offline_limit_um,
                               offline_sigmas=settings.offline_sigmas)
        idx = np.flatnonzero(fit.far)
        offline_flag[idx] = [
            f"{fit.offline_um[i]:.3g} µm off the traverse line (limit {fit.limit_um:.3g} µm)"
            for i in idx
        ]
        offline = fit.offline_um
        if has_d:
            position = data["distance_um"].to_numpy(float)
            notes.append("positions from the file's distance column; " + fit.note)
        else:
            position = fit.position_um
            notes.append(fit.note)
    elif has_d:
        position = data["distance_um"].to_numpy(float)
        offline = np.where(np.isfinite(position), 0.0, np.nan)
        notes.append("positions from the file's distance column (no stage X/Y: off-line "
                     "scatter not checked)")
    else:
        raise ProfileFormatError(
            f"{where}: no position information; expected a distance column (µm or mm) or "
            "stage X and Y columns. Name them with --column-map distance_um='Dist' (or "
            "--column-map x_um='X' --column-map y_um='Y'; project key column_map = "
            '{ distance_um = "Dist" }).'
        )
    missing_pos = ~np.isfinite(position)
    # Stray positions (typos, stage glitches) are flagged before the core is
    # placed and never used to place it.
    stray_reason = find_stray_positions(position)
    stray = stray_reason != ""

    spots = pd.DataFrame({
        "row": data["row"].to_numpy() if "row" in data else np.arange(1, n + 1),
        "point": (data["point"].astype(str) if "point" in data
                  else pd.Series(np.arange(1, n + 1)).astype(str)).to_numpy(object),
        "label": (data["label"].fillna("").astype(str) if "label" in data
                  else pd.Series([""] * n)).to_numpy(object),
        "position_um": position,
        "offline_um": offline,
    })
    if has_xy:
        spots["x_um"] = x
        spots["y_um"] = y
    for c in oxides:
        spots[c] = data[c].to_numpy(float)
    spots["total_wt"] = total
    spots["cation_sum"] = formula["cation_sum"].to_numpy(float)
    for c in members.columns:
        spots[c] = members[c].to_numpy(float)
    sigma_col = f"{major}_sigma"
    spots[sigma_col] = (pd.to_numeric(data[sigma_col], errors="coerce").to_numpy(float)
                        if sigma_col in data else np.nan)
    oxide_sigmas = [f"{c}_sigma" for c in CANONICAL_OXIDES if f"{c}_sigma" in data.columns]
    for c in oxide_sigmas:
        spots[c] = pd.to_numeric(data[c], errors="coerce").to_numpy(float)
    if sigma_col not in data and oxide_sigmas:
        derived, note = _record_sigma_from_oxides(spots, mineral)
        if note:
            spots[sigma_col] = derived
            notes.append(note)

    to_check = spots.copy()
    to_check["read_flags"] = join_reasons(
        read_flags.to_numpy(object),
        np.where(missing_pos & read_flags.eq("").to_numpy(), "position missing", ""),
        stray_reason,
    )
    to_check["offline_flag"] = offline_flag
    checked = check_spots(to_check, mineral, settings)

    ok = (checked["status"] == "ok").to_numpy()
    hint = None
    if orientation is None and core_position_um is None and has_d:
        hint = _distance_header_hint(raw.column_map.get("distance_um", ""), position)
    if hint is not None:
        decision = locate_core(position, spots[major].to_numpy(float), usable=ok,
                               orientation=hint[0], core_position_um=hint[1], record=record,
                               trusted=~stray)
        decision = replace(decision, basis=hint[2], confidence="high")
    else:
        decision = locate_core(
            position, spots[major].to_numpy(float), usable=ok, orientation=orientation,
            core_position_um=core_position_um, record=record, mineral=mineral,
            oxides={c: spots[c].to_numpy(float) for c in oxides},
            names=(str(raw.name), os.path.basename(source)),
            labels=spots["label"].to_numpy(object), trusted=~stray)
    spots.insert(5, "distance_um", decision.distance_um)
    spots.insert(6, "side", decision.side)
    spots["status"] = checked["status"].to_numpy(object)
    spots["reason"] = checked["reason"].to_numpy(object)
    if decision.confidence == "uncertain":
        notes.append(f"orientation: uncertain, not fitted until confirmed ({decision.basis})")
    else:
        notes.append(f"orientation: {decision.orientation}, {decision.confidence} confidence "
                     f"({decision.basis})")

    n_ok = int(ok.sum())
    values = spots.loc[ok, major].to_numpy(float)
    values = values[np.isfinite(values)]
    if values.size:
        notes.append(f"{record} of the {n_ok} usable spots: {values.min():.2f}-{values.max():.2f}"
                     " mol%")
    known = position[np.isfinite(position)]
    if n == 1:
        notes.append("cannot be fitted: the traverse has a single spot; a profile needs "
                     "several spots from core to rim")
    elif known.size == n and np.ptp(known) == 0:
        column = raw.column_map.get("distance_um") or raw.column_map.get("x_um") or "position"
        notes.append(f"cannot be fitted: all {n} spots have the same position ({known[0]:g} µm "
                     f"in column {column!r}), so there is no profile; give the column that holds "
                     "the distances or stage X/Y (--column-map distance_um=<header>, project key "
                     "column_map)")
    elif n_ok == 0:
        notes.append(f"cannot be fitted: all {n} spots are flagged (see the reasons); correct "
                     "the data or the quality-check settings, or force flagged spots back in")
    elif n_ok == 1:
        notes.append("cannot be fitted: only one spot passes the checks")

    from zoning import __version__

    run_settings = {
        "mineral": mineral,
        "mineral_detected": detected,
        "column_map": dict(raw.column_map),
        "orientation": orientation,
        "core_position_um": core_position_um,
        "checks": settings.to_dict(),
        "iron": iron,
        "sheet": sheet,
        "zoning_version": __version__,
    }
    return Traverse(
        name=str(raw.name),
        source=source,
        mineral=mineral,
        spots=spots,
        orientation=decision.orientation,
        core_position_um=decision.core_position_um,
        notes=tuple(notes),
        settings=run_settings,
        orientation_confidence=decision.confidence,
        orientation_basis=decision.basis,
        sample=raw.sample,
    )
