"""Mineral recalculation and spot quality checks for olivine and plagioclase.

Structural formulae follow the usual oxygen-normalisation procedure: moles of
each oxide (wt% / molar mass) are scaled so that the oxygens add up to the
formula basis (4 for olivine, 8 for plagioclase); cations then follow from the
oxide stoichiometry. Ferric iron can optionally be estimated from charge
balance after Droop (1987).

References
----------
Droop, G. T. R. (1987). A general equation for estimating Fe3+ concentrations
in ferromagnesian silicates and oxides from microprobe analyses, using
stoichiometric criteria. Mineralogical Magazine 51, 431-435.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from zoning.exceptions import ProfileFormatError
from zoning.oxides import CANONICAL_OXIDES, FEO_PER_FE2O3, OXIDES
from zoning.traverse import MINERALS

__all__ = [
    "FORMULA_OXYGENS",
    "IDEAL_CATIONS",
    "IRON_OPTIONS",
    "structural_formula",
    "end_members",
    "QualitySettings",
    "check_spots",
    "detect_mineral",
    "check_mineral",
    "join_reasons",
]

#: Citation key (:mod:`zoning.references`) of the Fe3+ estimate by charge balance.
CITATION = "droop_1987"

#: Oxygens per formula unit of each mineral.
FORMULA_OXYGENS = {"olivine": 4, "plagioclase": 8}

#: Ideal cations per formula unit on the basis of :data:`FORMULA_OXYGENS`.
IDEAL_CATIONS = {"olivine": 3.0, "plagioclase": 5.0}

#: Ways to treat iron in :func:`structural_formula`.
IRON_OPTIONS = ("FeO", "reported", "charge-balance")

#: Oxides that must be measured to compute the major-element record.
ESSENTIAL_OXIDES = {"olivine": ("MgO", "FeO"), "plagioclase": ("CaO", "Na2O")}

#: Phrases in a reader flag meaning the row is not an analysis at all.
NOT_ANALYSIS_MARKERS = ("not an analysis", "header row repeated", "no oxide values")

_CATION_COLUMNS = tuple(OXIDES[o].cation for o in CANONICAL_OXIDES)


def _check_mineral_name(mineral: str) -> str:
    if mineral not in MINERALS:
        raise ProfileFormatError(
            f"unknown mineral {mineral!r}; expected one of {', '.join(MINERALS)}. "
            "Use --mineral olivine or --mineral plagioclase."
        )
    return mineral


def structural_formula(
    oxides: pd.DataFrame,
    mineral: str,
    oxygens: float | None = None,
    iron: str = "FeO",
) -> pd.DataFrame:
    r"""Compute cations per formula unit for every analysis (row).

    Parameters
    ----------
    oxides : pandas.DataFrame
        Oxide contents [wt%], columns named by canonical oxide (see
        :data:`zoning.oxides.CANONICAL_OXIDES`); other columns are ignored.
        NaN (missing or below detection) counts as zero. Negative values
        are used as they are (they are flagged by :func:`check_spots`).
    mineral : {"olivine", "plagioclase"}
        Sets the default oxygen basis and the ideal cation sum.
    oxygens : float, optional
        Oxygen basis; default 4 for olivine and 8 for plagioclase.
    iron : {"FeO", "reported", "charge-balance"}, optional
        ``"FeO"`` (default): all iron as Fe2+ (reported Fe2O3 is converted
        to FeO, FeO* = FeO + 0.8998 Fe2O3), column ``Fe``; ``Fe3`` is 0.
        ``"reported"``: Fe2O3 is kept as Fe3+ when the file reports it.
        ``"charge-balance"``: all iron is first taken as FeO, then Fe3+ is
        estimated after Droop (1987),
        :math:`\mathrm{Fe^{3+}} = 2X(1 - T/S)` with X oxygens, T the ideal
        and S the observed cation sum, clipped to [0, total Fe], and the
        cations are rescaled to T.

    Returns
    -------
    pandas.DataFrame
        Same index as ``oxides``. Columns ``Si Ti Al Cr Fe Fe3 Mn Mg Ni Ca
        Na K Sr Ba P`` (cations per formula unit; ``Fe`` is ferrous iron,
        ``Fe3`` ferric), ``cation_sum`` and ``oxygens``. Rows without any
        usable oxide give NaN.

    Notes
    -----
    Fo and An (:func:`end_members`) use total iron (``Fe + Fe3``) and
    Ca, Na, K, so they do not depend on the ``iron`` option.

    References
    ----------
    Droop (1987), Mineralogical Magazine 51, 431-435.
    """
    _check_mineral_name(mineral)
    if iron not in IRON_OPTIONS:
        raise ProfileFormatError(
            f"unknown iron option {iron!r}; expected one of {', '.join(IRON_OPTIONS)}."
        )
    basis = float(FORMULA_OXYGENS[mineral] if oxygens is None else oxygens)
    n = len(oxides)
    wt = np.zeros((n, len(CANONICAL_OXIDES)))
    for j, name in enumerate(CANONICAL_OXIDES):
        if name in oxides.columns:
            wt[:, j] = np.nan_to_num(oxides[name].to_numpy(dtype=float), nan=0.0,
                                     posinf=np.nan, neginf=np.nan)
    # Non-finite values (inf) make the whole row unusable.
    bad_row = ~np.isfinite(wt).all(axis=1)
    wt = np.where(np.isfinite(wt), wt, 0.0)
    j_feo = CANONICAL_OXIDES.index("FeO")
    j_fe2o3 = CANONICAL_OXIDES.index("Fe2O3")
    if iron in ("FeO", "charge-balance"):
        wt[:, j_feo] = wt[:, j_feo] + FEO_PER_FE2O3 * wt[:, j_fe2o3]
        wt[:, j_fe2o3] = 0.0
    table = [OXIDES[o] for o in CANONICAL_OXIDES]
    mass = np.array([ox.molar_mass for ox in table])
    n_ox = np.array([ox.n_oxygens for ox in table], dtype=float)
    n_cat = np.array([ox.n_cations for ox in table], dtype=float)
    moles = wt / mass
    oxygen_total = moles @ n_ox
    with np.errstate(all="ignore"):
        factor = np.where(oxygen_total > 0, basis / oxygen_total, np.nan)
        factor = np.where(np.isfinite(factor), factor, np.nan)
        cations = moles * n_cat * factor[:, None]
    cations[bad_row] = np.nan
    out = pd.DataFrame(cations, index=oxides.index, columns=list(_CATION_COLUMNS))
    if iron == "charge-balance":
        ideal = IDEAL_CATIONS[mineral] * basis / FORMULA_OXYGENS[mineral]
        total = out.sum(axis=1, skipna=False).to_numpy()
        with np.errstate(all="ignore"):
            scale = ideal / total
            fe_total = out["Fe"].to_numpy() * scale
            fe3 = np.clip(2.0 * basis * (1.0 - ideal / total), 0.0, None)
            fe3 = np.minimum(fe3, np.clip(fe_total, 0.0, None))
        rescaled = out.mul(scale, axis=0)
        rescaled["Fe3"] = fe3
        rescaled["Fe"] = fe_total - fe3
        out = rescaled
    out["cation_sum"] = out[list(_CATION_COLUMNS)].sum(axis=1, skipna=False)
    out["oxygens"] = basis
    return out


def end_members(formula: pd.DataFrame, mineral: str) -> pd.DataFrame:
    """Return the end-member proportions of each analysis [mol%].

    Parameters
    ----------
    formula : pandas.DataFrame
        Output of :func:`structural_formula` (cations per formula unit).
    mineral : {"olivine", "plagioclase"}
        Olivine gives ``fo`` = 100 Mg/(Mg + Fe_total); plagioclase gives
        ``an`` = 100 Ca/(Ca + Na + K), ``ab`` = 100 Na/(...), ``or`` = 100 K/(...).

    Returns
    -------
    pandas.DataFrame
        Same index; ``fo`` or ``an``, ``ab``, ``or`` [mol%]; NaN where the
        denominator is not positive.
    """
    _check_mineral_name(mineral)
    with np.errstate(all="ignore"):
        if mineral == "olivine":
            mg = formula["Mg"].to_numpy(float)
            fe = formula["Fe"].to_numpy(float) + formula["Fe3"].to_numpy(float)
            den = mg + fe
            fo = np.where(den > 0, 100.0 * mg / den, np.nan)
            return pd.DataFrame({"fo": fo}, index=formula.index)
        ca, na, k = (formula[c].to_numpy(float) for c in ("Ca", "Na", "K"))
        den = ca + na + k
        ok = den > 0
        return pd.DataFrame(
            {
                "an": np.where(ok, 100.0 * ca / den, np.nan),
                "ab": np.where(ok, 100.0 * na / den, np.nan),
                "or": np.where(ok, 100.0 * k / den, np.nan),
            },
            index=formula.index,
        )


@dataclass(frozen=True)
class QualitySettings:
    """Thresholds of the spot quality checks.

    All windows are common practice in microprobe laboratories, not a single
    published standard; change them to suit your laboratory.

    Parameters
    ----------
    total_min_wt, total_max_wt : float
        Accepted analytical total [wt%] (default 98.5-101.5, common practice).
    olivine_cation_tolerance : float
        Accepted deviation from 3 cations per 4 O (default 0.02, common practice).
    plagioclase_cation_tolerance : float
        Accepted deviation from 5 cations per 8 O (default 0.05, common practice).
    olivine_max_al2o3_wt : float
        Al2O3 above this in olivine suggests a spinel, plagioclase or glass
        inclusion in the beam volume [wt%] (default 0.5; igneous olivine
        usually has < 0.1, common practice).
    olivine_max_cao_wt : float
        CaO above this in olivine suggests clinopyroxene, plagioclase or
        glass in the beam volume [wt%] (default 0.6; volcanic olivine
        usually 0.1-0.4, common practice).
    olivine_max_alkali_wt : float
        Na2O + K2O above this in olivine indicates glass or feldspar [wt%]
        (default 0.2; olivine holds almost no alkalis, common practice).
    olivine_max_cr2o3_wt : float
        Cr2O3 above this in olivine indicates a Cr-spinel inclusion [wt%]
        (default 0.5, common practice).
    plagioclase_max_mgo_wt : float
        MgO above this in plagioclase indicates a mafic mineral or glass
        [wt%] (default 0.5; plagioclase usually < 0.3, common practice).
    plagioclase_max_feo_wt : float
        FeO (total Fe) above this in plagioclase indicates glass or an
        Fe-Ti oxide [wt%] (default 1.5; plagioclase usually < 1, common practice).
    plagioclase_max_k2o_wt : float
        K2O above this in plagioclase indicates glass or alkali feldspar
        [wt%] (default 1.5, common practice).
    duplicate_distance_um : float
        Spots closer than this to an earlier spot are flagged as duplicate
        positions [µm] (default 0.5; below the beam interaction size).
    offline_limit_um : float
        Spots further than ``max(offline_sigmas * robust scatter,
        offline_limit_um)`` from the best-fit traverse line are flagged [µm]
        (default 5).
    offline_sigmas : float
        Multiple of the robust (MAD-based) off-line scatter (default 3).
    """

    total_min_wt: float = 98.5
    total_max_wt: float = 101.5
    olivine_cation_tolerance: float = 0.02
    plagioclase_cation_tolerance: float = 0.05
    olivine_max_al2o3_wt: float = 0.5
    olivine_max_cao_wt: float = 0.6
    olivine_max_alkali_wt: float = 0.2
    olivine_max_cr2o3_wt: float = 0.5
    plagioclase_max_mgo_wt: float = 0.5
    plagioclase_max_feo_wt: float = 1.5
    plagioclase_max_k2o_wt: float = 1.5
    duplicate_distance_um: float = 0.5
    offline_limit_um: float = 5.0
    offline_sigmas: float = 3.0

    def __post_init__(self):
        for name, value in asdict(self).items():
            if not np.isfinite(value) or value < 0:
                raise ProfileFormatError(
                    f"quality setting {name} = {value!r} is not allowed; "
                    "expected a finite number >= 0."
                )
        if self.total_min_wt >= self.total_max_wt:
            raise ProfileFormatError(
                f"total window {self.total_min_wt}-{self.total_max_wt} wt% is empty; "
                "total_min_wt must be below total_max_wt."
            )

    def to_dict(self) -> dict[str, float]:
        """Return the settings as a plain dict (for recording)."""
        return asdict(self)


def join_reasons(*columns: Sequence[str]) -> list[str]:
    """Join several per-row reason lists with ``"; "``, skipping empty ones.

    Parameters
    ----------
    *columns : sequence of str
        Equal-length sequences of reasons ("" for none).

    Returns
    -------
    list of str
        One joined reason per row (duplicates removed, order kept).
    """
    if not columns:
        return []
    arrays = []
    masks = []
    for c in columns:
        arr = np.asarray(c, dtype=object).ravel()
        arr = np.where(pd.isna(arr), "", arr)
        arrays.append(arr)
        masks.append(np.asarray((arr != "") & (arr != "nan"), dtype=bool))
    n = arrays[0].size
    if n == 0:
        return []
    matrix = np.column_stack(arrays)
    nonempty = np.column_stack(masks)
    out = [""] * n
    for i in np.flatnonzero(nonempty.any(axis=1)):
        seen: list[str] = []
        for part in matrix[i][nonempty[i]]:
            for piece in str(part).split("; "):
                piece = piece.strip()
                if piece and piece not in seen:
                    seen.append(piece)
        out[i] = "; ".join(seen)
    return out


def _where(mask: np.ndarray, template: str, values: np.ndarray) -> np.ndarray:
    """Reason text ``template.format(v)`` where ``mask``, "" elsewhere."""
    out = np.full(mask.shape[0], "", dtype=object)
    idx = np.flatnonzero(mask)
    out[idx] = [template.format(v) for v in values[idx]]
    return out


def _fmt(x: float) -> str:
    return f"{x:.3g}" if abs(x) < 1 else f"{x:.2f}"


def _exceeds(values: np.ndarray, limit: float, label: str, why: str) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        bad = values > limit
    out = np.full(values.shape[0], "", dtype=object)
    idx = np.flatnonzero(bad)
    out[idx] = [f"{label} {_fmt(v)} wt% > {limit:g} ({why})" for v in values[idx]]
    return out


def check_spots(
    spots: pd.DataFrame,
    mineral: str,
    settings: QualitySettings | None = None,
) -> pd.DataFrame:
    """Run every quality check on every spot and give each a status and reason.

    Parameters
    ----------
    spots : pandas.DataFrame
        One row per spot with the canonical oxide columns [wt%] that were
        measured, ``total_wt`` [wt%], ``cation_sum`` and ``fo`` (olivine)
        or ``an`` (plagioclase). Optional: ``read_flags`` (reasons found by
        the reader), ``position_um`` and ``offline_um`` [µm] for the
        duplicate-position check, ``offline_flag`` (reason from the line fit).
    mineral : {"olivine", "plagioclase"}
        Selects the cation basis and the contamination checks.
    settings : QualitySettings, optional
        Thresholds (default :class:`QualitySettings()`).

    Returns
    -------
    pandas.DataFrame
        Same index as ``spots``, columns ``status`` ("ok"/"flagged") and
        ``reason`` ("; "-joined reasons, "" when ok). Every input row gets
        a status; none is dropped.

    Notes
    -----
    Checks, each with its own reason text: reader flags; negative and
    non-finite oxide values; missing oxides needed for Fo or An; total
    outside the window; cation sum off ideal; contamination indicators;
    duplicate positions (the later spot is flagged); distance from the line.
    """
    _check_mineral_name(mineral)
    settings = QualitySettings() if settings is None else settings
    n = len(spots)
    empty = np.full(n, "", dtype=object)
    reasons: list[np.ndarray] = []

    if "read_flags" in spots.columns:
        reasons.append(spots["read_flags"].fillna("").astype(str).to_numpy(object))

    present = [c for c in CANONICAL_OXIDES if c in spots.columns]
    for name in present:
        values = spots[name].to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            negative = values < 0
        if negative.any():
            reasons.append(_where(negative, f"negative {name} ({{:.3g}} wt%)", values))
        infinite = np.isinf(values)
        if infinite.any():
            reasons.append(np.where(infinite, f"non-finite {name} value", ""))

    record = "Fo" if mineral == "olivine" else "An"
    any_missing = np.zeros(n, dtype=bool)
    for name in ESSENTIAL_OXIDES[mineral]:
        if name in spots.columns:
            vals = spots[name].to_numpy(dtype=float)
            if name == "FeO" and "Fe2O3" in spots.columns:
                vals = np.where(np.isnan(vals), spots["Fe2O3"].to_numpy(float), vals)
            missing = np.isnan(vals)
        else:
            missing = np.ones(n, dtype=bool)
        any_missing |= missing
        reasons.append(np.where(missing, f"cannot compute {record}: {name} missing", ""))
    major = record.lower()
    if major in spots.columns:
        undefined = ~np.isfinite(spots[major].to_numpy(dtype=float)) & ~any_missing
        pair = "Mg+Fe" if mineral == "olivine" else "Ca+Na+K"
        reasons.append(np.where(undefined, f"cannot compute {record}: {pair} not positive", ""))

    total = spots["total_wt"].to_numpy(dtype=float) if "total_wt" in spots else np.full(n, np.nan)
    lo, hi = settings.total_min_wt, settings.total_max_wt
    with np.errstate(invalid="ignore"):
        off_total = (total < lo) | (total > hi)
    reasons.append(_where(off_total, f"total {{:.2f}} wt% outside {lo:g}-{hi:g}", total))

    ideal = IDEAL_CATIONS[mineral]
    tol = (settings.olivine_cation_tolerance if mineral == "olivine"
           else settings.plagioclase_cation_tolerance)
    basis = FORMULA_OXYGENS[mineral]
    if "cation_sum" in spots.columns:
        csum = spots["cation_sum"].to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            off = np.abs(csum - ideal) > tol + 1e-12
        reasons.append(_where(
            off, f"cation sum {{:.3f}} per {basis} O outside {ideal - tol:g}-{ideal + tol:g}", csum
        ))

    def col(name):
        return spots[name].to_numpy(float) if name in spots.columns else np.full(n, np.nan)

    if mineral == "olivine":
        reasons.append(_exceeds(col("Al2O3"), settings.olivine_max_al2o3_wt, "Al2O3",
                                "inclusion or glass in beam?"))
        reasons.append(_exceeds(col("CaO"), settings.olivine_max_cao_wt, "CaO",
                                "pyroxene, plagioclase or glass in beam?"))
        alk = np.where(np.isnan(col("Na2O")) & np.isnan(col("K2O")), np.nan,
                       np.nan_to_num(col("Na2O")) + np.nan_to_num(col("K2O")))
        reasons.append(_exceeds(alk, settings.olivine_max_alkali_wt, "Na2O+K2O",
                                "glass or feldspar in beam?"))
        reasons.append(_exceeds(col("Cr2O3"), settings.olivine_max_cr2o3_wt, "Cr2O3",
                                "spinel inclusion?"))
    else:
        reasons.append(_exceeds(col("MgO"), settings.plagioclase_max_mgo_wt, "MgO",
                                "mafic mineral or glass in beam?"))
        feo = np.where(np.isnan(col("FeO")) & np.isnan(col("Fe2O3")), np.nan,
                       np.nan_to_num(col("FeO")) + FEO_PER_FE2O3 * np.nan_to_num(col("Fe2O3")))
        reasons.append(_exceeds(feo, settings.plagioclase_max_feo_wt, "FeO*",
                                "glass or oxide in beam?"))
        reasons.append(_exceeds(col("K2O"), settings.plagioclase_max_k2o_wt, "K2O",
                                "glass or alkali feldspar in beam?"))

    if "position_um" in spots.columns:
        reasons.append(_duplicate_positions(spots, settings.duplicate_distance_um))
    if "offline_flag" in spots.columns:
        reasons.append(spots["offline_flag"].fillna("").astype(str).to_numpy(object))

    joined = join_reasons(*reasons) if reasons else list(empty)
    if "read_flags" in spots.columns:
        # Rows the reader found not to be analyses (summary rows, repeated
        # headers, rows without oxides) keep only the reader's reason: the
        # analysis checks would add noise such as "total 0.57 wt% outside".
        flags = spots["read_flags"].fillna("").astype(str)
        not_analysis = flags.str.contains("|".join(NOT_ANALYSIS_MARKERS), regex=True).to_numpy()
        for i in np.flatnonzero(not_analysis):
            joined[i] = join_reasons([flags.iloc[i]])[0]
    status = np.where([bool(r) for r in joined], "flagged", "ok") if n else np.array([], str)
    return pd.DataFrame({"status": status, "reason": joined}, index=spots.index)


def _duplicate_positions(spots: pd.DataFrame, limit_um: float) -> np.ndarray:
    """Flag spots within ``limit_um`` of an earlier spot (by input order)."""
    n = len(spots)
    out = np.full(n, "", dtype=object)
    pos = spots["position_um"].to_numpy(float)
    off = spots["offline_um"].to_numpy(float) if "offline_um" in spots else np.zeros(n)
    off = np.nan_to_num(off, nan=0.0)
    rows = spots["row"].to_numpy() if "row" in spots else np.arange(1, n + 1)
    finite = np.flatnonzero(np.isfinite(pos))
    if finite.size < 2:
        return out
    order = finite[np.argsort(pos[finite], kind="stable")]
    p = pos[order]
    lo = np.searchsorted(p, p - limit_um, side="left")
    hi = np.searchsorted(p, p + limit_um, side="right")
    # Only spots with a neighbour inside the window need a closer look.
    for k in np.flatnonzero(hi - lo > 1):
        i = order[k]
        # Cap the comparison to the nearest 64 spots on each side in sorted
        # order, so that a file with all spots at one position stays fast.
        cands = order[max(lo[k], k - 64):min(hi[k], k + 65)]
        cands = cands[cands < i]  # earlier spots in input order
        if cands.size == 0:
            continue
        d = np.hypot(pos[cands] - pos[i], off[cands] - off[i])
        close = d < limit_um
        if close.any():
            j = int(cands[close].min())
            dist = float(np.hypot(pos[j] - pos[i], off[j] - off[i]))
            out[i] = f"same position as row {rows[j]} ({dist:.2g} µm apart)"
    return out


def detect_mineral(oxides: pd.DataFrame) -> tuple[str, str]:
    """Tell olivine from plagioclase by the median oxide contents.

    Parameters
    ----------
    oxides : pandas.DataFrame
        Oxide contents [wt%] of the spots (canonical column names).

    Returns
    -------
    mineral : str
        ``"olivine"`` or ``"plagioclase"``.
    note : str
        A plain-language statement of the evidence.

    Raises
    ------
    ProfileFormatError
        If the analyses look like neither mineral.
    """
    med = _medians(oxides)
    al, mgfe = med["Al2O3"], med["MgO+FeO"]
    cana, si = med["CaO+Na2O"], med["SiO2"]
    if np.isfinite(mgfe) and mgfe > 35 and not (np.isfinite(al) and al > 5):
        return "olivine", (
            f"mineral detected as olivine from the oxides (median MgO+FeO {mgfe:.1f} wt%, "
            f"Al2O3 {_med_txt(al)}); give --mineral to override"
        )
    if np.isfinite(al) and 20 <= al <= 40 and np.isfinite(cana) and cana > 8:
        return "plagioclase", (
            f"mineral detected as plagioclase from the oxides (median Al2O3 {al:.1f} wt%, "
            f"CaO+Na2O {cana:.1f} wt%); give --mineral to override"
        )
    raise ProfileFormatError(
        "cannot tell from the oxides whether these analyses are olivine or plagioclase "
        f"(median SiO2 {_med_txt(si)}, Al2O3 {_med_txt(al)}, MgO+FeO {_med_txt(mgfe)}, "
        f"CaO+Na2O {_med_txt(cana)}); expected olivine (MgO+FeO > 35 wt%, Al2O3 < 5) "
        "or plagioclase (Al2O3 20-40 wt%, CaO+Na2O > 8). Give --mineral olivine or "
        "--mineral plagioclase, and check that the oxide columns were recognised."
    )


def check_mineral(oxides: pd.DataFrame, mineral: str, source: str = "") -> None:
    """Refuse analyses that clearly belong to the other mineral.

    Parameters
    ----------
    oxides : pandas.DataFrame
        Oxide contents [wt%] of the spots.
    mineral : {"olivine", "plagioclase"}
        Mineral the user asked for.
    source : str, optional
        File name for the message.

    Raises
    ------
    ProfileFormatError
        When olivine was asked for but the analyses look like plagioclase,
        or the reverse.
    """
    _check_mineral_name(mineral)
    med = _medians(oxides)
    where = f" in '{source}'" if source else ""
    al, mgfe = med["Al2O3"], med["MgO+FeO"]
    if mineral == "olivine" and np.isfinite(al) and al > 15:
        raise ProfileFormatError(
            f"these analyses{where} look like plagioclase, not olivine (Al2O3 median "
            f"{al:.0f} wt%, MgO+FeO median {_med_txt(mgfe)}); Fo would be meaningless. "
            "Use --mineral plagioclase (or leave --mineral out to detect it)."
        )
    if mineral == "plagioclase" and np.isfinite(mgfe) and mgfe > 30 and not (
        np.isfinite(al) and al > 15
    ):
        raise ProfileFormatError(
            f"these analyses{where} look like olivine, not plagioclase (MgO+FeO median "
            f"{mgfe:.0f} wt%, Al2O3 median {_med_txt(al)}); An would be meaningless. "
            "Use --mineral olivine (or leave --mineral out to detect it)."
        )


def _med_txt(x: float) -> str:
    return f"{x:.1f} wt%" if np.isfinite(x) else "not measured"


def _medians(oxides: pd.DataFrame) -> dict[str, float]:
    def col(name):
        if name in oxides.columns:
            v = pd.to_numeric(oxides[name], errors="coerce").to_numpy(float)
            return np.where(np.isfinite(v), v, np.nan)
        return np.full(len(oxides), np.nan)

    def med(v):
        v = v[np.isfinite(v)]
        return float(np.median(v)) if v.size else np.nan

    def pair(a, b):
        both = np.isnan(a) & np.isnan(b)
        return np.where(both, np.nan, np.nan_to_num(a) + np.nan_to_num(b))

    feo = pair(col("FeO"), FEO_PER_FE2O3 * col("Fe2O3"))
    return {
        "SiO2": med(col("SiO2")),
        "Al2O3": med(col("Al2O3")),
        "MgO+FeO": med(pair(col("MgO"), feo)),
        "CaO+Na2O": med(pair(col("CaO"), col("Na2O"))),
    }
