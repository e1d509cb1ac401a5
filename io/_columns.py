"""Recognition of the column headers of microprobe and laser-ablation exports.

A header cell is normalised (case, sub-/superscript digits, micro signs,
separators) and split into a base name and a unit (``"SiO2 (wt.%)"`` →
``("sio2", "wt%")``). The base name is then matched against the spellings
instrument software and spreadsheets commonly use. The result says which
canonical column a header feeds (``"SiO2"``, ``"distance_um"``, ``"point"``,
...), the factor that converts its unit to the canonical unit, and a plain
statement for the reading notes.

Canonical names
---------------
oxides (wt%)   ``SiO2 TiO2 Al2O3 Cr2O3 FeO Fe2O3 MnO MgO NiO CaO Na2O K2O SrO BaO P2O5``;
               also from element ppm columns (``Sr (ppm)``, ``Ni60 ppm``), converted
               to the oxide with the molar masses of :mod:`zoning.oxides`
position       ``distance_um`` (distance along the traverse), ``x_um`` and
               ``y_um`` (stage coordinates), all converted to µm
identifiers    ``point`` (point number), ``label`` (comment), ``sample``,
               ``crystal`` and ``traverse`` (names that split a file into
               traverses)
others         ``total`` (the file's analytical total), ``fo_sigma`` and
               ``an_sigma`` (per-spot 1-sigma of Fo or An), ``<oxide>_sigma``
               (per-spot 1-sigma of an oxide [wt%]), ``exclude`` (spots the
               user marked to leave out)
"""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass

from zoning.oxides import ATOMIC_WEIGHTS, parse_oxide_name
from zoning.oxides import OXIDES as _OXIDE_TABLE

__all__ = [
    "OXIDES",
    "CANONICAL",
    "ColumnMatch",
    "normalise_header",
    "split_unit",
    "recognise",
    "is_unit_token",
    "position_scale",
    "element_ppm_factor",
    "SIGMA_KEYS",
]

#: Canonical oxide column names, in output order.
OXIDES = (
    "SiO2",
    "TiO2",
    "Al2O3",
    "Cr2O3",
    "FeO",
    "Fe2O3",
    "MnO",
    "MgO",
    "NiO",
    "CaO",
    "Na2O",
    "K2O",
    "SrO",
    "BaO",
    "P2O5",
)

#: Canonical names of the per-spot 1-sigma columns of the oxides [wt%].
SIGMA_KEYS = tuple(f"{ox}_sigma" for ox in OXIDES)

#: Columns whose values name a traverse, outermost first; a change of any splits a file.
NAME_KEYS = ("sample", "crystal", "traverse")

#: Every canonical name a header can be mapped to (keys allowed in ``column_map``).
CANONICAL = OXIDES + (
    "point",
    "label",
    *NAME_KEYS,
    "distance_um",
    "x_um",
    "y_um",
    "total",
    "fo_sigma",
    "an_sigma",
    *SIGMA_KEYS,
    "exclude",
)

#: Oxide each element is reported as (total iron as FeO).
_OXIDE_OF_ELEMENT: dict[str, str] = {}
for _ox in _OXIDE_TABLE.values():
    _OXIDE_OF_ELEMENT.setdefault(_ox.element, _ox.name)
_ELEMENT_BY_LOWER = {el.lower(): el for el in _OXIDE_OF_ELEMENT}


def element_ppm_factor(element: str) -> float:
    """Return the factor from ppm of an element to wt% of its oxide [wt% per ppm].

    Parameters
    ----------
    element : str
        Element symbol, e.g. ``"Sr"`` (iron gives FeO).

    Returns
    -------
    float
        ``1e-4 M(oxide) / (n M(element))`` with n cations per oxide formula
        and the molar masses of :mod:`zoning.oxides` (IUPAC 2021 atomic
        weights).

    Examples
    --------
    >>> round(element_ppm_factor("Sr") * 1e4, 4)  # SrO/Sr
    1.1826
    """
    ox = _OXIDE_TABLE[_OXIDE_OF_ELEMENT[element]]
    return 1e-4 * ox.molar_mass / (ox.n_cations * ATOMIC_WEIGHTS[element])

_OXIDE_BY_LOWER = {ox.lower(): ox for ox in OXIDES}

_SUBSCRIPTS = str.maketrans("₀₁₂₃₄₅₆₇₈₉⁰¹²³⁴⁵⁶⁷⁸⁹", "01234567890123456789")


@dataclass(frozen=True)
class ColumnMatch:
    """What one header cell was recognised as.

    Parameters
    ----------
    header : str
        The header cell as found in the file (stripped).
    canonical : str
        Canonical column it feeds, or "" when the column is not used.
    unit : str
        Unit read from the header ("" when none was given).
    scale : float
        Factor converting the file's values to the canonical unit (wt% for
        oxides, µm for positions, 1-sigma for uncertainties); NaN for
        position columns whose unit must still be decided from the data.
    note : str
        Plain statement for the reading notes ("" when nothing to say).
    ignored_kind : str
        For unused columns: "element" (element wt%, not an oxide),
        "reported" (Fo/An/Mg# computed by the instrument), "unit" (oxide
        in a unit other than wt% or ppm), "sigma" (a bare uncertainty
        header such as ``±`` or ``1s``, which belongs to the column on its
        left), "other"; "" for used columns.
    weak : bool
        True for a position column that is the distance only when the file
        has no other position column (``z (µm)``, ``d [µm]``).
    reading : str
        How the column is read, in plain words, for the reading notes
        (e.g. ``"SrO wt% = Sr ppm x 1.183e-4"``); "" for unused columns.
    """

    header: str
    canonical: str
    unit: str = ""
    scale: float = 1.0
    note: str = ""
    ignored_kind: str = ""
    weak: bool = False
    reading: str = ""


def normalise_header(header: str) -> str:
    """Return a header cell lower-cased with unified spelling of digits and units.

    Parameters
    ----------
    header : str
        Raw header cell.

    Returns
    -------
    str
        Lower-case text with subscript digits made plain, every micro sign
        written ``µ`` (also the ``Âµ`` left by a wrong decoding), ``_``
        turned into a space and runs of white space collapsed.
    """
    h = str(header).replace("\ufeff", "").translate(_SUBSCRIPTS)
    h = h.replace("Âµ", "µ").replace("\u03bc", "µ").replace("Î¼", "µ")
    h = h.lower().replace("_", " ")
    return re.sub(r"\s+", " ", h).strip()


_UNIT_WORDS = (
    r"µm|um|micron|microns|micrometers?|micrometres?|mm|nm|"
    r"wt\s*\.?\s*%|wt\s*\.?\s*pct|wt\.?|ox(?:ide)?\s*%|%|mass\s*%|ppmw?|µg/g|ug/g|mg/kg|"
    r"mol\s*%|apfu|cations?|cat\.?"
)
_BRACKET_UNIT = re.compile(r"^(?P<base>.*?)\s*[\(\[]\s*(?P<unit>[^\)\]]*?)\s*[\)\]]\s*$")
_SUFFIX_UNIT = re.compile(rf"^(?P<base>.*?)[\s/]+(?P<unit>{_UNIT_WORDS})$")
_JOINED_UNIT = re.compile(r"^(?P<base>.*?[a-z0-9*])(?P<unit>wt%|%)$")
_LEADING_PERCENT = re.compile(r"^(?P<unit>%)\s*(?P<base>[a-z].*)$")
_PREFIX_UNIT = re.compile(rf"^(?P<unit>wt\s*\.?\s*%|{_UNIT_WORDS})\s+(?P<base>.+)$")


def _canonical_unit(unit: str) -> str:
    u = re.sub(r"\s+", "", unit.lower())
    if u in ("", ):
        return ""
    if u in ("µm", "um", "micron", "microns", "micrometer", "micrometers", "micrometre",
             "micrometres"):
        return "µm"
    if u == "mm":
        return "mm"
    if u == "nm":
        return "nm"
    if u in ("wt%", "wt.%", "wt", "wt.", "%", "mass%", "wtpct", "wt.pct", "oxidewt%", "ox%",
             "oxide%"):
        return "wt%"
    if u in ("ppm", "ppmw", "ppm(w)", "µg/g", "ug/g", "mg/kg", "µgg-1", "ugg-1", "µg.g-1"):
        return "ppm"
    return u


def split_unit(normalised: str) -> tuple[str, str]:
    """Split a normalised header into base name and canonical unit.

    Parameters
    ----------
    normalised : str
        Output of :func:`normalise_header`.

    Returns
    -------
    base : str
        Name without the unit.
    unit : str
        ``"µm"``, ``"mm"``, ``"nm"``, ``"wt%"``, ``"ppm"``, another
        lower-case unit text, or ``""`` when the header gives none.
    """
    h = normalised
    m = _BRACKET_UNIT.match(h)
    if m and m.group("base"):
        base, unit = m.group("base"), m.group("unit")
        # "FeO(T)" and "FeO (tot)" mark total iron, not a unit.
        if unit.strip() in ("t", "tot", "tot.", "total"):
            return h.replace(" ", ""), ""
        return base.strip(), _canonical_unit(unit)
    m = _SUFFIX_UNIT.match(h)
    if m and m.group("base"):
        return m.group("base").strip(), _canonical_unit(m.group("unit"))
    m = _PREFIX_UNIT.match(h)
    if m:
        return m.group("base").strip(), _canonical_unit(m.group("unit"))
    m = _JOINED_UNIT.match(h)
    if m:
        return m.group("base").strip(), _canonical_unit(m.group("unit"))
    m = _LEADING_PERCENT.match(h)
    if m:
        return m.group("base").strip(), "wt%"
    return h, ""


_ELEMENT_RE = re.compile(r"^(si|ti|al|cr|fe|mn|mg|ni|ca|na|k|sr|ba|p|o)$")
# Laser-ablation style element columns: "Sr", "Sr88", "88Sr", "Sr 88", "Mg24 ppm mean".
_ISOTOPE_RE = re.compile(
    r"^(?P<m1>\d{1,3})?\s*(?P<el>si|ti|al|cr|fe|mn|mg|ni|ca|na|k|sr|ba|p)\s*(?P<m2>\d{1,3})?"
    r"(?:\s+(?P<unit>ppmw?|µg/g|ug/g|mg/kg))?(?:\s+(?P<stat>mean|avg|average|conc\.?))?$"
)
_REPORTED_RE = re.compile(r"^(fo|fa|an|ab|or|mg#|mg ?number|ca#|xfo|xan)$")
# Uncertainty words; a leading 2 (2s, 2σ, 2sd, 2se, "2 sigma") marks a 2-sigma value.
_SIGMA_WORD = (
    r"(?:(?P<k>[12])?\s*(?:σ|sigma|s\.?d\.?|std\.?|stdev|st\.?\s*dev\.?|s\.?e\.?|err(?:or)?|"
    r"±|\+/-|\+-|unc(?:ert(?:ainty)?)?\.?)|(?P<k2>[12])\s*s)"
)
_SIGMA_ONLY_RE = re.compile(rf"^(?:abs\.?\s*)?{_SIGMA_WORD}(?:\s*\((?:abs|1|2)\))?$")
_SIGMA_TARGET = r"(?P<t>fo|an|[a-z][a-z0-9]{0,4}?\*?)"
_SIGMA_PREFIX_RE = re.compile(rf"^{_SIGMA_WORD}\s*[\(\[]?\s*{_SIGMA_TARGET}\s*[\)\]]?$")
_SIGMA_SUFFIX_RE = re.compile(rf"^{_SIGMA_TARGET}\s*[-_ ]?\s*{_SIGMA_WORD}$")
_LOD_RE = re.compile(r"^(?P<t>[a-z][a-z0-9]{0,4})\s*[-_ ]?\s*(?:ppm\s*)?"
                     r"(?:lod|l\.o\.d\.?|dl|d\.l\.|mdl|det\.?\s*lim(?:it)?\.?)$")
_DISTANCE_RE = re.compile(
    r"^(?:rel(?:ative|\.)?\s*)?(?:dist(?:ance)?\.?|position|pos\.?|length)"
    r"(?:\s+(?:from|along|to)\s+\w+(?:\s+\w+)?)?$"
)
_X_RE = re.compile(r"^(?:stage\s*)?x(?:\s*-?\s*(?:stage|pos\.?|position|coord\.?|coordinate))?$")
_Y_RE = re.compile(r"^(?:stage\s*)?y(?:\s*-?\s*(?:stage|pos\.?|position|coord\.?|coordinate))?$")
_Z_RE = re.compile(r"^(?:stage\s*)?z(?:\s*-?\s*(?:stage|pos\.?|position|coord\.?|coordinate))?$")
_D_RE = re.compile(r"^(?:d|x\s*-?\s*dist\.?|r)$")
_POINT_RE = re.compile(
    r"^(?:point|pt|spot|no|nr|n°|#|number|num|dataset\s*/\s*point)\.?$"
    r"|^(?:point|spot|analysis|pt)\s*(?:no\.?|nr\.?|#|number|num\.?|id)$"
)
_LABEL_RE = re.compile(
    r"^(?:comment|comments|label|name|description|remark|remarks|note|notes|analysis|"
    r"analysis name|spot name|point name|id|spot id|point id)$"
)
_NAME_SUFFIX = r"(?:\s*-?\s*(?:name|id|no\.?|nr\.?|#|number|label|code))?"
_SAMPLE_RE = re.compile(rf"^(?:sample|specimen|thin\s*section|section){_NAME_SUFFIX}$")
_CRYSTAL_RE = re.compile(rf"^(?:grain|crystal|xtal|xl|mineral\s*grain){_NAME_SUFFIX}$")
_TRAVERSE_RE = re.compile(
    rf"^(?:profile|prof\.?|transect|line|line\s*scan|linescan|traverse|trav\.?|spot\s*-?\s*set|"
    rf"spotset|scan){_NAME_SUFFIX}$"
)
_EXCLUDE_RE = re.compile(
    r"^(?:bad|bad\s*spots?|bad\s*points?|marked\s*bad|is\s*bad|exclude[ds]?|exclusion|ignored?|"
    r"reject(?:ed)?|omit(?:ted)?|discard(?:ed)?|skip(?:ped)?|outlier)\s*\??$"
)
_TOTAL_RE = re.compile(
    r"^(?:total|totals|sum|oxide total|total oxides|oxide sum|analytical total)$"
)

_POSITION_FACTOR = {"µm": 1.0, "mm": 1000.0, "nm": 1e-3}


def position_scale(unit: str) -> float:
    """Return the factor converting a position unit to µm.

    Parameters
    ----------
    unit : str
        Canonical unit from :func:`split_unit`.

    Returns
    -------
    float
        1 for µm, 1000 for mm, 0.001 for nm; NaN for "" (no unit given) and
        for anything else.
    """
    return _POSITION_FACTOR.get(unit, float("nan"))


def _oxide_of(compact: str, base: str) -> tuple[str, bool, bool] | None:
    """(canonical oxide, total-iron marker, digit zero read as O) or None."""
    return parse_oxide_name(compact) or parse_oxide_name(base)


def _element_of(text: str) -> tuple[str, str, str] | None:
    """(element symbol, unit, isotope) of an element column, or None."""
    m = _ISOTOPE_RE.match(text)
    if not m:
        return None
    if m.group("m1") and m.group("m2"):
        return None
    return _ELEMENT_BY_LOWER[m.group("el")], _canonical_unit(m.group("unit") or ""), (
        m.group("m1") or m.group("m2") or "")


def _sigma_target(target: str) -> tuple[str, float, str] | None:
    """Canonical sigma key, unit factor and quantity of an uncertainty target."""
    if target in ("fo", "an"):
        return f"{target}_sigma", 1.0, target.capitalize()
    ox = _oxide_of(target.replace(" ", ""), target)
    if ox is not None:
        return f"{ox[0]}_sigma", 1.0, ox[0]
    return None


def _sigma_match(raw: str, base: str, unit: str) -> ColumnMatch | None:
    """Recognise a 1- or 2-sigma uncertainty column of Fo, An or an oxide."""
    for regex in (_SIGMA_PREFIX_RE, _SIGMA_SUFFIX_RE):
        m = regex.match(base)
        if not m:
            continue
        target = _sigma_target(m.group("t"))
        if target is None:
            el = _element_of(m.group("t"))
            if el is None or not (unit == "ppm" or el[1] == "ppm"):
                continue
            ox = _OXIDE_OF_ELEMENT[el[0]]
            factor = element_ppm_factor(el[0])
            target = (f"{ox}_sigma", factor, f"{ox} (from {el[0]} ppm x {factor:.4g})")
        key, factor, what = target
        if key.endswith("_sigma") and key[:-6] in OXIDES and unit not in ("", "wt%", "ppm"):
            return None
        if unit == "ppm" and key[:-6] in OXIDES and factor == 1.0:
            factor = 1e-4
        two = "2" in (m.group("k"), m.group("k2"))
        scale = factor * (0.5 if two else 1.0)
        size = "2-sigma, halved to 1-sigma" if two else "1-sigma"
        return ColumnMatch(raw, key, unit, scale,
                           f"column '{raw}' read as the {size} of {what}" if two else "",
                           reading=f"{size} uncertainty of {what}")
    return None


@functools.lru_cache(maxsize=4096)
def recognise(header: str) -> ColumnMatch:
    """Recognise one header cell.

    Parameters
    ----------
    header : str
        Header cell as found in the file.

    Returns
    -------
    ColumnMatch
        ``canonical == ""`` when the column is not used (see
        ``ignored_kind``).

    Examples
    --------
    >>> recognise("SiO2 (wt.%)").canonical
    'SiO2'
    >>> m = recognise("FeO*"); (m.canonical, m.note)
    ('FeO', "column 'FeO*' read as FeO (total Fe as FeO)")
    >>> m = recognise("Distance (mm)"); (m.canonical, m.scale)
    ('distance_um', 1000.0)
    >>> recognise("Mg").ignored_kind
    'element'
    >>> recognise("Al203").canonical
    'Al2O3'
    >>> m = recognise("Sr (ppm)"); (m.canonical, round(m.scale * 1e4, 4))
    ('SrO', 1.1826)
    """
    raw = str(header).strip()
    norm = normalise_header(raw)
    if not norm:
        return ColumnMatch(raw, "", ignored_kind="other")
    base, unit = split_unit(norm)
    compact = base.replace(" ", "")

    ox = _oxide_of(compact, base)
    if ox is not None and unit and _SIGMA_ONLY_RE.match(unit):
        sig = _sigma_match(raw, f"{base} {unit}", "")
        if sig is not None:
            return sig
    if ox is not None:
        name, total_marker, zero = ox
        if unit in ("", "wt%"):
            scale, unit_note = 1.0, ""
        elif unit == "ppm":
            scale, unit_note = 1e-4, "ppm converted to wt%"
        else:
            return ColumnMatch(
                raw, "", unit, note=f"column '{raw}' ignored: {name} in '{unit}', not wt%",
                ignored_kind="unit",
            )
        parts = []
        if total_marker:
            parts.append(f"total Fe as {name}")
        if zero:
            parts.append("digit 0 in the header read as the letter O")
        if unit_note:
            parts.append(unit_note)
        note = f"column '{raw}' read as {name} ({'; '.join(parts)})" if parts else ""
        reading = f"{name} wt%" + (f" ({'; '.join(parts)})" if parts else "")
        return ColumnMatch(raw, name, unit, scale, note, reading=reading)

    el = _element_of(compact) or _element_of(base)
    if el is not None:
        symbol, el_unit, isotope = el
        unit = unit or el_unit
        if unit == "ppm":
            oxide = _OXIDE_OF_ELEMENT[symbol]
            factor = element_ppm_factor(symbol)
            iso = f" (isotope {isotope})" if isotope else ""
            reading = (f"{oxide} wt% = {symbol} ppm{iso} x {factor:.4g} "
                       f"(molar masses {oxide}/{symbol})")
            return ColumnMatch(raw, oxide, unit, factor, f"column '{raw}' read as {reading}",
                               reading=reading)
        if isotope and not unit:
            return ColumnMatch(
                raw, "", unit, note=f"column '{raw}' ignored: {symbol} without a unit (counts "
                f"or ppm?); write ppm in the header, e.g. '{symbol}{isotope} (ppm)', to use it",
                ignored_kind="unit",
            )
        if isotope:
            return ColumnMatch(raw, "", unit, note=f"column '{raw}' ignored: {symbol} in "
                               f"'{unit}', not ppm", ignored_kind="unit")
        return ColumnMatch(raw, "", unit, ignored_kind="element")

    sig = _sigma_match(raw, base, unit)
    if sig is None and unit:
        # "σ(FeO)", "Fo (2s)": the bracket holds the quantity or the uncertainty word
        sig = _sigma_match(raw, f"{base} {unit}", "")
    if sig is not None:
        return sig
    only = _SIGMA_ONLY_RE.match(base)
    if only:
        two = "2" in (only.group("k"), only.group("k2"))
        return ColumnMatch(raw, "", unit, 0.5 if two else 1.0, ignored_kind="sigma")

    if _REPORTED_RE.match(compact) or _REPORTED_RE.match(base):
        return ColumnMatch(raw, "", unit, ignored_kind="reported")

    for regex, canonical in ((_X_RE, "x_um"), (_Y_RE, "y_um"), (_DISTANCE_RE, "distance_um")):
        if regex.match(base):
            if unit and unit not in _POSITION_FACTOR:
                return ColumnMatch(
                    raw, "", unit,
                    note=f"column '{raw}' ignored: position unit '{unit}' not understood "
                    "(use µm or mm in the header)",
                    ignored_kind="unit",
                )
            return ColumnMatch(raw, canonical, unit, position_scale(unit), "")
    if _Z_RE.match(base) or _D_RE.match(base):
        if unit in _POSITION_FACTOR:
            # a lone position column with a length unit ("z (µm)", "d [µm]"): the
            # distance, unless the file has stage X/Y or a distance column
            return ColumnMatch(raw, "distance_um", unit, position_scale(unit), "", weak=True)
        return ColumnMatch(raw, "", unit, ignored_kind="other")

    if _POINT_RE.match(base):
        return ColumnMatch(raw, "point", reading="point number")
    if _EXCLUDE_RE.match(base):
        return ColumnMatch(raw, "exclude",
                           reading="marks spots to leave out (any value but empty/0/no/false)")
    if _SAMPLE_RE.match(base):
        return ColumnMatch(raw, "sample", reading="sample name (splits the file)")
    if _CRYSTAL_RE.match(base):
        return ColumnMatch(raw, "crystal", reading="crystal name (splits the file)")
    if _TRAVERSE_RE.match(base):
        return ColumnMatch(raw, "traverse", reading="traverse name (splits the file)")
    if _LABEL_RE.match(base):
        return ColumnMatch(raw, "label", reading="spot label")
    if _TOTAL_RE.match(base):
        return ColumnMatch(raw, "total", unit, reading="analytical total wt% (as reported)")
    if _LOD_RE.match(base):
        return ColumnMatch(raw, "", unit, note=f"column '{raw}' (a detection limit) not used",
                           ignored_kind="other")
    return ColumnMatch(raw, "", unit, ignored_kind="other")


_UNIT_TOKEN_RE = re.compile(
    rf"^[\(\[]?\s*(?:{_UNIT_WORDS}|wt\s*%|oxide\s*wt\s*%)\s*[\)\]]?$"
)


def is_unit_token(cell: str) -> bool:
    """Tell whether a cell is only a unit, as in the units line below some headers.

    Parameters
    ----------
    cell : str
        Stripped cell text.

    Returns
    -------
    bool
    """
    return bool(_UNIT_TOKEN_RE.match(normalise_header(cell)))


def unit_of_token(cell: str) -> str:
    """Return the canonical unit written in a units-line cell.

    Parameters
    ----------
    cell : str
        Cell for which :func:`is_unit_token` is true.

    Returns
    -------
    str
        Canonical unit as from :func:`split_unit`.
    """
    t = normalise_header(cell).strip("()[] ")
    return _canonical_unit(t)
