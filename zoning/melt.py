"""Reading a reference melt analysis as users give it.

A reference melt (glass or whole-rock analysis) arrives as a mapping of
names to wt%, from ``--melt FeO=9.5`` on the command line or a ``melt = {
FeO = 9.5 }`` table in a project file. :func:`read_melt` turns it into the
canonical oxides the forward model needs and says, in plain words, what it
did with every value:

* oxide names are read as people write them (``FeOT``, ``FeO*``, ``Fe0``,
  case-insensitive; :func:`zoning.oxides.parse_oxide_name`); total iron is
  carried as FeO (``Fe2O3T`` is converted with 2 M(FeO)/M(Fe2O3));
* a melt given as FeO **and** Fe2O3 sets the melt Fe3+/FeT from them,
  Fe3+/FeT = 2 n(Fe2O3) / (n(FeO) + 2 n(Fe2O3)) in moles, and the iron is
  carried as total FeO; a separately given Fe3+/FeT that disagrees is an
  error (the user must say which one holds);
* a value the fit will not use (MgO when the melt Mg# is fitted, SiO2, H2O
  ...) is reported, never silently dropped.

Trace elements given by their symbol (``Ni``, ``Sr`` [ppm]) are reported and
left out: the initial melt contents of the traces are fitted from the profile.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

from zoning.exceptions import ModelDomainError
from zoning.oxides import FEO_PER_FE2O3, OXIDES, parse_oxide_name

__all__ = ["MeltInput", "read_melt", "merge_melts", "DEFAULT_FE3_FRACTION",
           "FE3_AGREEMENT"]

#: Melt Fe3+/FeT used when neither Fe3+/FeT nor FeO + Fe2O3 is given (typical of
#: basalts near the FMQ buffer; common practice).
DEFAULT_FE3_FRACTION = 0.10

#: A given Fe3+/FeT and the one computed from FeO + Fe2O3 agree within this
#: (rounding of published analyses to 0.01 wt% and of the ratio to 0.01).
FE3_AGREEMENT = 0.01

#: Oxide of each mineral's exchange pair taken from the reference melt, and the
#: one whose melt ratio is fitted.
_FIXED = {"olivine": "FeO", "plagioclase": "Na2O"}
_FITTED = {"olivine": ("MgO", "Mg#"), "plagioclase": ("CaO", "Ca#")}
_TRACE_SYMBOLS = {"olivine": ("Ni",), "plagioclase": ("Sr", "Mg")}


@dataclass(frozen=True)
class MeltInput:
    """A reference melt as read, with what was done to each value.

    Parameters
    ----------
    oxides : dict of str to float
        Canonical oxide names to values passed to the model [wt%] (iron as
        total FeO when FeO + Fe2O3 or a total-iron name was given); other
        names given are kept unchanged, trace elements of the mineral's
        models are left out (reported in ``notes``).
    fe3_fraction : float
        Melt Fe3+/FeT to use [fraction].
    fe3_source : str
        Where it comes from: "given", "from the melt FeO and Fe2O3" or
        "default".
    notes : tuple of str
        Plain statements: names read, Fe3+/FeT computed, values not used.
    """

    oxides: dict[str, float]
    fe3_fraction: float
    fe3_source: str
    notes: tuple[str, ...] = ()


def _canonical(name: str) -> tuple[str, bool, str]:
    """(canonical key, total-iron marker, note) of one melt name."""
    text = str(name).strip()
    parsed = parse_oxide_name(text)
    if parsed is None:
        return text, False, ""
    oxide, total, zero = parsed
    note = f"melt {text!r} read as {oxide} (digit 0 read as the letter O)" if zero else ""
    return oxide, total, note


def merge_melts(base: Mapping[str, float], override: Mapping[str, float]) -> dict[str, float]:
    """Return ``base`` updated by ``override``, matching names as :func:`read_melt` does.

    A value in ``override`` replaces the value of the same oxide in ``base``
    however it is spelled (``FeOT`` replaces ``FeO``); any iron in
    ``override`` replaces all iron of ``base`` (FeO, Fe2O3 and total iron).

    Parameters
    ----------
    base, override : mapping of str to float
        Melt analyses [wt%], e.g. the project ``[defaults]`` and a sample.

    Returns
    -------
    dict of str to float
    """
    over_keys = {_canonical(k)[0] for k in override}
    iron = {"FeO", "Fe2O3"}
    out = {}
    for key, value in base.items():
        canon = _canonical(key)[0]
        if canon in over_keys or (canon in iron and over_keys & iron):
            continue
        out[key] = value
    out.update(override)
    return out


def read_melt(
    melt: Mapping[str, float],
    mineral: str,
    *,
    fe3_fraction: float | None = None,
) -> MeltInput:
    """Read a reference melt analysis for a fit or a forward model.

    Parameters
    ----------
    melt : mapping of str to float
        Name to value: oxides [wt%] spelled as users write them (``FeO``,
        ``FeOT``, ``FeO*``, ``Fe2O3``, ``MgO`` ...), trace elements by symbol
        [ppm].
    mineral : {"olivine", "plagioclase"}
        Mineral whose exchange the melt feeds.
    fe3_fraction : float, optional
        Melt Fe3+/FeT given by the user [fraction]. When the melt holds FeO
        and Fe2O3, these set the ratio instead; a given value that differs
        by more than :data:`FE3_AGREEMENT` is an error. Default (neither
        given): :data:`DEFAULT_FE3_FRACTION`.

    Returns
    -------
    MeltInput

    Raises
    ------
    ModelDomainError
        A value that is not a number in [0, 100]; the same oxide given twice
        (``FeO`` and ``FeOT``); total iron given together with Fe2O3; Fe2O3
        without FeO; a given Fe3+/FeT that contradicts FeO + Fe2O3; the
        oxide the model needs missing. Messages spell the fix as command-line
        options and project keys.

    Examples
    --------
    >>> m = read_melt({"FeO": 8.0, "Fe2O3": 2.0}, "olivine")
    >>> round(m.fe3_fraction, 3), round(m.oxides["FeO"], 3)
    (0.184, 9.8)
    """
    if mineral not in _FIXED:
        raise ModelDomainError(
            f"unknown mineral {mineral!r}; expected olivine or plagioclase (--mineral)."
        )
    if not isinstance(melt, Mapping):
        raise ModelDomainError(
            f"the reference melt must be oxide = wt% pairs (--melt FeO=9.5, project key "
            f"melt = {{ FeO = 9.5 }}); got {type(melt).__name__}."
        )
    notes: list[str] = []
    values: dict[str, float] = {}
    written: dict[str, str] = {}
    total_iron: list[str] = []
    for name, value in melt.items():
        try:
            v = float(value)
        except (TypeError, ValueError):
            raise ModelDomainError(
                f"melt {name} must be a number [wt%]; got {value!r}. Give e.g. --melt FeO=9.5."
            ) from None
        key, total, note = _canonical(name)
        if not math.isfinite(v) or v < 0 or (key in OXIDES and v > 100):
            raise ModelDomainError(
                f"melt {name} = {value!r} is outside [0, 100]; give oxide wt% (trace "
                "elements by symbol in ppm, not negative)."
            )
        if note:
            notes.append(note)
        if key in values:
            raise ModelDomainError(
                f"the melt gives {key} twice ({written[key]!r} and {str(name)!r}); give it "
                f"once, e.g. --melt {key}={v:g}."
            )
        if total:
            total_iron.append(str(name))
            if key == "Fe2O3":
                notes.append(f"melt {str(name)!r} = {v:g} wt% (total iron as Fe2O3) read as "
                             f"FeO* = {FEO_PER_FE2O3 * v:.4g} wt% (x 2 M(FeO)/M(Fe2O3))")
                v = FEO_PER_FE2O3 * v
                key = "FeO"
                if key in values:
                    raise ModelDomainError(
                        f"the melt gives total iron as {str(name)!r} and also FeO; give one of "
                        "them."
                    )
            elif str(name) != key:
                notes.append(f"melt {str(name)!r} read as total iron as FeO")
        values[key] = v
        written[key] = str(name)

    fe3_given = None if fe3_fraction is None else float(fe3_fraction)
    if fe3_given is not None and not (0.0 <= fe3_given < 1.0):
        raise ModelDomainError(
            f"melt Fe3+/FeT must be in [0, 1); got {fe3_fraction!r}. Give e.g. --fe3 0.15 "
            "(project key fe3)."
        )
    fe3, source = (DEFAULT_FE3_FRACTION, "default") if fe3_given is None else (fe3_given,
                                                                                "given")
    has_fe2o3 = "Fe2O3" in values
    if has_fe2o3 and total_iron:
        raise ModelDomainError(
            f"the melt gives total iron ({', '.join(repr(t) for t in total_iron)}) and Fe2O3; "
            "give either FeO and Fe2O3 (which set Fe3+/FeT) or total iron alone, e.g. "
            "--melt FeOT=10.2."
        )
    if has_fe2o3:
        fe2o3 = values.pop("Fe2O3")
        if mineral == "plagioclase":
            notes.append(f"melt Fe2O3 = {fe2o3:g} wt% not used: iron is not part of the "
                         "plagioclase exchange model")
        elif "FeO" not in values:
            raise ModelDomainError(
                "the melt gives Fe2O3 but no FeO; give FeO and Fe2O3 (e.g. --melt FeO=8.1 "
                "--melt Fe2O3=1.6), or total iron as --melt FeOT=... with --fe3."
            )
        else:
            feo = values["FeO"]
            n_fe2 = feo / OXIDES["FeO"].molar_mass
            n_fe3 = 2.0 * fe2o3 / OXIDES["Fe2O3"].molar_mass
            ratio = n_fe3 / (n_fe2 + n_fe3) if n_fe2 + n_fe3 > 0 else 0.0
            if fe3_given is not None and abs(fe3_given - ratio) > FE3_AGREEMENT:
                raise ModelDomainError(
                    f"the melt FeO {feo:g} and Fe2O3 {fe2o3:g} wt% give Fe3+/FeT = {ratio:.3f}, "
                    f"but Fe3+/FeT {fe3_given:g} was also given (--fe3 / project key fe3); "
                    "give only one of them."
                )
            values["FeO"] = feo + FEO_PER_FE2O3 * fe2o3
            fe3, source = ratio, "from the melt FeO and Fe2O3"
            notes.append(
                f"melt Fe3+/FeT = {ratio:.3f} from the melt FeO {feo:g} and Fe2O3 {fe2o3:g} "
                f"wt% (moles); total iron FeO* = {values['FeO']:.4g} wt%"
            )
    needed = _FIXED[mineral]
    if needed not in values:
        raise ModelDomainError(
            f"the reference melt for {mineral} needs {needed} [wt%] (the less compatible "
            f"member of the exchange pair); got {sorted(written.values()) or 'nothing'}. Give "
            f"e.g. --melt {needed}=<wt%> (project key melt = {{ {needed} = <wt%> }}) from a "
            "glass or whole-rock analysis."
        )
    if mineral == "plagioclase" and fe3_given is not None:
        notes.append("Fe3+/FeT not used: iron is not part of the plagioclase exchange model")
    ratio_oxide, ratio_name = _FITTED[mineral]
    traces = _TRACE_SYMBOLS[mineral]
    for key in list(values):
        shown = written[key]
        if key == needed:
            continue
        if key == ratio_oxide:
            notes.append(f"melt {shown} = {values[key]:g} wt% not used by the fit: the parent "
                         f"melt {ratio_name} is fitted (the value only sets its starting point)")
        elif mineral == "plagioclase" and key == "MgO":
            notes.append(f"melt {shown} = {values[key]:g} wt% not used by the fit: the initial "
                         "melt MgO is fitted (the value only sets its starting point)")
        elif key in traces:
            notes.append(f"melt {shown} = {values[key]:g} ppm not used: the initial melt "
                         f"{key} is fitted from the profile")
            del values[key]
        elif key in OXIDES:
            notes.append(f"melt {shown} = {values[key]:g} wt% not used: not part of the "
                         f"{mineral} exchange model (inert melt mass)")
        else:
            notes.append(f"melt {shown!r} = {values[key]:g} not used: not an oxide name or a "
                         f"trace element of the {mineral} models")
    return MeltInput(values, float(fe3), source, tuple(notes))
