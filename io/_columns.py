"""Recognition of the column headers of microprobe exports.

A header cell is normalised (case, sub-/superscript digits, micro signs,
separators) and split into a base name and a unit (``"SiO2 (wt.%)"`` →
``("sio2", "wt%")``). The base name is then matched against the spellings
instrument software and spreadsheets commonly use. The result says which
canonical column a header feeds (``"SiO2"``, ``"distance_um"``, ``"point"``,
...), the factor that converts its unit to the canonical unit, and a plain
statement for the reading notes.

Canonical names
---------------
oxides (wt%)   ``SiO2 TiO2 Al2O3 Cr2O3 FeO Fe2O3 MnO MgO NiO CaO Na2O K2O SrO BaO P2O5``
position       ``distance_um`` (distance along the traverse), ``x_um`` and
               ``y_um`` (stage coordinates), all converted to µm
identifiers    ``point`` (point number), ``label`` (comment), ``sample``
               (sample/traverse/crystal name; used to split a file)
others         ``total`` (the file's analytical total), ``fo_sigma`` and
               ``an_sigma`` (per-spot 1-sigma of Fo or An)
"""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass

__all__ = [
    "OXIDES",
    "CANONICAL",
    "ColumnMatch",
    "normalise_header",
    "split_unit",
    "recognise",
    "is_unit_token",
    "position_scale",
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

#: Every canonical name a header can be mapped to (keys allowed in ``column_map``).
CANONICAL = OXIDES + (
    "point",
    "label",
    "sample",
    "distance_um",
    "x_um",
    "y_um",
    "total",
    "fo_sigma",
    "an_sigma",
)

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
        in a unit other than wt% or ppm), "other"; "" for used columns.
    """

    header: str
    canonical: str
    unit: str = ""
    scale: float = 1.0
    note: str = ""
    ignored_kind: str = ""


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
    r"wt\s*\.?\s*%|wt\s*\.?\s*pct|wt\.?|ox(?:ide)?\s*%|%|mass\s*%|ppm|mol\s*%|apfu|cations?|"
    r"cat\.?"
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
    if u == "ppm":
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


_OXIDE_RE = re.compile(
    r"^(?P<ox>sio2|tio2|al2o3|cr2o3|fe2o3|feo|mno|mgo|nio|cao|na2o|k2o|sro|bao|p2o5)"
    r"(?P<tot>\s*[-_]?\s*(\*|\(t\)|\(tot\.?\)|\(total\)|t|tot\.?|total))?$"
)
_ELEMENT_RE = re.compile(r"^(si|ti|al|cr|fe|mn|mg|ni|ca|na|k|sr|ba|p|o)$")
_REPORTED_RE = re.compile(r"^(fo|fa|an|ab|or|mg#|mg ?number|ca#|xfo|xan)$")
_SIGMA_RE = re.compile(
    r"^(?P<m>fo|an)\s*(?:err(?:or)?|sd|s\.d\.|std|stdev|sigma|σ|±|\+/-|unc(?:ertainty)?)"
    r"\s*\.?\s*(?P<k>[12])?\s*(?:s|σ|sigma|sd)?$"
    r"|^(?P<m2>fo|an)\s*(?P<k2>[12])\s*(?:s|σ|sigma|sd)$"
    r"|^(?:±|σ|err|error|sd|sigma)\s*(?P<m3>fo|an)$"
)
_DISTANCE_RE = re.compile(
    r"^(?:rel(?:ative|\.)?\s*)?(?:dist(?:ance)?\.?|position|pos\.?|length)"
    r"(?:\s+(?:from|along|to)\s+\w+(?:\s+\w+)?)?$"
)
_X_RE = re.compile(r"^(?:stage\s*)?x(?:\s*-?\s*(?:stage|pos\.?|position|coord\.?|coordinate))?$")
_Y_RE = re.compile(r"^(?:stage\s*)?y(?:\s*-?\s*(?:stage|pos\.?|position|coord\.?|coordinate))?$")
_Z_RE = re.compile(r"^(?:stage\s*)?z(?:\s*-?\s*(?:stage|pos\.?|position|coord\.?|coordinate))?$")
_POINT_RE = re.compile(
    r"^(?:point|pt|spot|no|nr|n°|#|number|num|dataset\s*/\s*point)\.?$"
    r"|^(?:point|spot|analysis|pt)\s*(?:no\.?|nr\.?|#|number|num\.?|id)$"
)
_LABEL_RE = re.compile(
    r"^(?:comment|comments|label|name|description|remark|remarks|note|notes|analysis|"
    r"analysis name|spot name|point name|id|spot id|point id)$"
)
_SAMPLE_RE = re.compile(r"^(?:sample|traverse|crystal)(?:\s*(?:name|id|no\.?))?$")
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
    """
    raw = str(header).strip()
    norm = normalise_header(raw)
    if not norm:
        return ColumnMatch(raw, "", ignored_kind="other")
    base, unit = split_unit(norm)
    compact = base.replace(" ", "")

    m = _OXIDE_RE.match(compact) or _OXIDE_RE.match(base)
    if m:
        ox = _OXIDE_BY_LOWER[m.group("ox")]
        total_marker = bool(m.group("tot"))
        if unit in ("", "wt%"):
            scale, unit_note = 1.0, ""
        elif unit == "ppm":
            scale, unit_note = 1e-4, "ppm converted to wt%"
        else:
            return ColumnMatch(
                raw, "", unit, note=f"column '{raw}' ignored: {ox} in '{unit}', not wt%",
                ignored_kind="unit",
            )
        parts = []
        if total_marker:
            parts.append(f"total Fe as {ox}")
        if unit_note:
            parts.append(unit_note)
        note = f"column '{raw}' read as {ox} ({'; '.join(parts)})" if parts else ""
        return ColumnMatch(raw, ox, unit, scale, note)

    if _ELEMENT_RE.match(compact):
        return ColumnMatch(raw, "", unit, ignored_kind="element")

    m = _SIGMA_RE.match(base)
    if m:
        mineral = m.group("m") or m.group("m2") or m.group("m3")
        k = m.group("k") or m.group("k2") or "1"
        canonical = f"{mineral}_sigma"
        if k == "2":
            return ColumnMatch(
                raw, canonical, unit, 0.5,
                f"column '{raw}' read as 2-sigma and halved to 1-sigma ({canonical})",
            )
        return ColumnMatch(raw, canonical, unit, 1.0, "")

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
    if _Z_RE.match(base):
        return ColumnMatch(raw, "", unit, ignored_kind="other")

    if _POINT_RE.match(base):
        return ColumnMatch(raw, "point")
    if _SAMPLE_RE.match(base):
        return ColumnMatch(raw, "sample")
    if _LABEL_RE.match(base):
        return ColumnMatch(raw, "label")
    if _TOTAL_RE.match(base):
        return ColumnMatch(raw, "total", unit)
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
