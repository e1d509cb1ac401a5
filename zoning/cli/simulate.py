"""``zoning simulate``: write the profile a crystallization scenario would record.

A scenario is a parent melt (exchanging-pair ratio plus a reference melt
analysis), an exchange coefficient, the crystallized fraction when the rim
grew, and the retention r (0 fractional, 1 equilibrium). The command writes
one row per simulated spot, core to rim, as CSV with a metadata header, and
optionally a figure comparing r = 0, the given r and r = 1.

Columns: ``distance_um`` (when ``--radius-um`` is given), ``f``, ``fo`` or
``an`` [mol%], ``melt_mg_number`` or ``melt_ca_number`` [fraction], the melt
oxides of the exchanging pair [wt%], ``temperature_c`` where a law gives it,
and trace columns when asked.
"""

from __future__ import annotations

import argparse
import copy
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from zoning.exceptions import ModelDomainError, ZoningError, ZoningWarning

__all__ = ["add_parser", "run", "simulate_table"]

_MAJOR = {"olivine": "fo", "plagioclase": "an"}
_RATIO = {"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"}
_FIGURE_SUFFIXES = (".png", ".pdf", ".svg")


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``zoning simulate`` on the sub-command parsers.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction

    Returns
    -------
    argparse.ArgumentParser
    """
    p = subparsers.add_parser(
        "simulate",
        help="write the zoning profile a crystallization scenario would record",
        description=(
            "Compute the core-to-rim profile recorded by olivine or plagioclase growing "
            "from a parent melt while a fraction F crystallizes, with retention r "
            "(0 = crystals removed, fractional; 1 = crystals kept in exchange, "
            "equilibrium), and write it as CSV."
        ),
    )
    p.add_argument("--out", required=True, metavar="FILE.csv", help="output CSV file")
    p.add_argument("--mineral", choices=("olivine", "plagioclase"), default="olivine",
                   help="recording mineral (default olivine)")
    p.add_argument("--melt", action="append", metavar="OXIDE=WT",
                   help="parent/reference melt analysis [wt%%], repeatable, e.g. --melt "
                        "MgO=12.6 --melt FeO=9.2 (olivine needs FeO, plagioclase Na2O; "
                        "MgO or CaO sets the melt ratio unless given below)")
    p.add_argument("--mg-number", type=float, metavar="X",
                   help="parent melt Mg/(Mg+Fe2+) [fraction] (olivine)")
    p.add_argument("--ca-number", type=float, metavar="X",
                   help="parent melt Ca/(Ca+Na) [fraction] (plagioclase)")
    p.add_argument("--kd", type=float,
                   help="exchange coefficient: olivine Kd(Fe-Mg) (default 0.30, Roeder & "
                        "Emslie 1970); plagioclase KD(Ca-Na) (default 2.0)")
    p.add_argument("--kd-law", choices=("toplis_2005", "blundy_2020"),
                   help="olivine: compute Kd for the parent melt at its liquidus olivine "
                        "(needs a full melt analysis for toplis_2005)")
    p.add_argument("--h2o", type=float, metavar="WT",
                   help="plagioclase: melt water [wt%%]; picks KD(Ca-Na) by a rule of thumb "
                        "(1.7 dry to 5.5 at 6 wt%%, after Sisson & Grove 1993)")
    p.add_argument("--fe3", type=float,
                   help="olivine: melt Fe3+/FeT [fraction] (default 0.10)")
    p.add_argument("--delta-qfm", type=float, metavar="DQFM",
                   help="olivine: compute Fe3+/FeT from fO2 relative to QFM with Kress & "
                        "Carmichael (1991) (needs a full melt analysis)")
    p.add_argument("--retention", type=float, default=0.0,
                   help="share of each crystal increment kept in exchange with the melt, "
                        "0..1 (default 0, fractional)")
    p.add_argument("--f-rim", type=float, default=0.10,
                   help="mass fraction crystallized when the rim grew (default 0.10)")
    p.add_argument("--f-core", type=float, default=0.0,
                   help="mass fraction crystallized when the core grew (default 0)")
    p.add_argument("--geometry", choices=("sphere", "cylinder", "slab"), default="sphere",
                   help="growth geometry: F grows as (x/R)^3, ^2 or ^1 (default sphere)")
    p.add_argument("--radius-um", type=float, metavar="R",
                   help="core-to-rim distance [µm]; spots are then evenly spaced in distance")
    p.add_argument("--beam-um", type=float, default=0.0,
                   help="average over a Gaussian beam of this FWHM [µm] (default 0: point "
                        "values; 2 µm is typical of a focused beam)")
    p.add_argument("--points", type=int, default=50, metavar="N",
                   help="number of spots, core to rim (default 50)")
    p.add_argument("--trace", action="append", metavar="EL[=C0]",
                   help="record a trace element (olivine Ni; plagioclase Sr, Mg), "
                        "optionally with its initial melt content in ppm (Mg: melt MgO "
                        "in wt%%), e.g. --trace Ni=300; repeatable")
    p.add_argument("--trace-d", action="append", metavar="EL=D",
                   help="constant crystal/melt partition coefficient (wt basis) for a traced "
                        "element, replacing its law or adding an element without one, e.g. "
                        "--trace-d Co=3; repeatable")
    p.add_argument("--temperature-c", type=float, metavar="T",
                   help="melt temperature [°C] (plagioclase trace laws and Fe3+ from fO2; "
                        "default for olivine: glass thermometer from melt MgO)")
    p.add_argument("--thermometer", default="helz_thornber_1987",
                   choices=("helz_thornber_1987", "montierth_1995", "shea_2022"),
                   help="olivine: glass MgO thermometer for the temperature column "
                        "(default helz_thornber_1987)")
    p.add_argument("--loop", action="store_true",
                   help="use the ideal binary loop (forsterite-fayalite or anorthite-albite) "
                        "instead of constant-Kd exchange: for experiments and analogue "
                        "systems; the melt ratio is the bulk liquid composition")
    p.add_argument("--figure", metavar="FIG.png|pdf",
                   help="also draw the recorded profile for r = 0, the given r and r = 1")
    p.set_defaults(run=run)
    return p


# ----------------------------------------------------------------------------- helpers
def _parse_traces(items):
    out = []
    for item in items or []:
        name, sep, value = item.partition("=")
        name = name.strip()
        c0 = math.nan
        if sep:
            try:
                c0 = float(value)
            except ValueError:
                c0 = math.nan
            if not (c0 > 0 and math.isfinite(c0)):
                raise ZoningError(
                    f"--trace expects EL or EL=C0 with a positive initial content; got "
                    f"{item!r}. Give e.g. --trace Ni=300 (ppm)."
                )
        if not name:
            raise ZoningError(f"--trace expects an element name; got {item!r}.")
        out.append((name, c0))
    return out


def _parse_trace_d(items):
    out = {}
    for item in items or []:
        name, sep, value = item.partition("=")
        try:
            d = float(value)
        except ValueError:
            d = math.nan
        if not sep or not name.strip() or not (d > 0 and math.isfinite(d)):
            raise ZoningError(
                f"--trace-d expects EL=D with a positive partition coefficient; got {item!r}. "
                "Give e.g. --trace-d Ni=12."
            )
        out[name.strip()] = d
    return out


def _check_fraction(name, value, *, open_low=False, high=1.0):
    if value is None:
        return None
    ok = math.isfinite(value) and (value > 0 if open_low else value >= 0) and value <= high
    if not ok:
        hint = " (give a fraction, e.g. 0.65, not a percentage)" if value > 1 else ""
        raise ZoningError(
            f"{name} must lie in {'(' if open_low else '['}0, {high:g}]; got {value!r}{hint}."
        )
    return value


def _melt_ratio(mineral, melt, fe3):
    """Molar Mg/(Mg+Fe2+) or Ca/(Ca+Na) of a melt analysis, or None."""
    from zoning.redox import MOLAR_MASS

    if mineral == "olivine":
        if "MgO" not in melt or "FeO" not in melt:
            return None
        fe = melt["FeO"] + melt.get("Fe2O3", 0.0) * 2 * MOLAR_MASS["FeO"] / MOLAR_MASS["Fe2O3"]
        a = melt["MgO"] / MOLAR_MASS["MgO"]
        b = fe * (1.0 - fe3) / MOLAR_MASS["FeO"]
    else:
        if "CaO" not in melt or "Na2O" not in melt:
            return None
        a = melt["CaO"] / MOLAR_MASS["CaO"]
        b = 2.0 * melt["Na2O"] / MOLAR_MASS["Na2O"]
    if not (a + b) > 0:
        return None
    return a / (a + b)


def _require_full_melt(melt, what):
    needed = ("SiO2", "Al2O3", "FeO", "MgO", "CaO", "Na2O")
    missing = [ox for ox in needed if ox not in melt]
    if missing:
        raise ZoningError(
            f"{what} needs a full melt analysis; missing {missing} in --melt. Give every "
            "major oxide (e.g. --melt SiO2=50.1 --melt Al2O3=14.8 ...) or give the value "
            "directly."
        )


class _Scenario:
    """Resolved settings of one simulation (everything the CSV header records)."""

    def __init__(self, args):
        from zoning.cli.fit import parse_melt

        self.mineral = args.mineral
        self.loop = bool(args.loop)
        self.melt = parse_melt(args.melt)
        self._check_melt_names()
        self.notes: list[str] = []
        mineral = self.mineral
        wrong_ratio = "--ca-number" if mineral == "olivine" else "--mg-number"
        if (args.ca_number if mineral == "olivine" else args.mg_number) is not None:
            raise ZoningError(
                f"{wrong_ratio} does not apply to {mineral}; use "
                f"{'--mg-number' if mineral == 'olivine' else '--ca-number'}."
            )
        if mineral == "plagioclase":
            for opt, val in (("--fe3", args.fe3), ("--delta-qfm", args.delta_qfm),
                             ("--kd-law", args.kd_law)):
                if val is not None:
                    raise ZoningError(f"{opt} applies to olivine only; remove it for plagioclase.")
        elif args.h2o is not None:
            raise ZoningError("--h2o applies to plagioclase only (KD(Ca-Na) from melt water); "
                              "remove it, or use --kd-law for olivine.")
        self.retention = _check_fraction("--retention", args.retention)
        self.f_rim = _check_fraction("--f-rim", args.f_rim, open_low=True,
                                     high=1.0 if self.loop else 0.95)
        self.f_core = _check_fraction("--f-core", args.f_core, high=0.95)
        if not self.f_core < self.f_rim:
            raise ZoningError(
                f"--f-core ({self.f_core:g}) must be smaller than --f-rim ({self.f_rim:g})."
            )
        if args.points is None or args.points < 2 or args.points > 100000:
            raise ZoningError(f"--points must be an integer from 2 to 100000; got {args.points}.")
        self.points = int(args.points)
        if args.radius_um is not None and not (math.isfinite(args.radius_um)
                                                and args.radius_um > 0):
            raise ZoningError(f"--radius-um must be a distance > 0 µm; got {args.radius_um!r}.")
        self.radius_um = args.radius_um
        if not (math.isfinite(args.beam_um) and args.beam_um >= 0):
            raise ZoningError(f"--beam-um must be >= 0 µm; got {args.beam_um!r}.")
        self.beam_um = args.beam_um
        self.geometry = args.geometry
        self.temperature_c = args.temperature_c
        self.traces = _parse_traces(args.trace)
        self.trace_d = _parse_trace_d(args.trace_d)
        if not self.loop:
            self._check_traces()
        self.thermometer = args.thermometer
        ratio = args.mg_number if mineral == "olivine" else args.ca_number
        _check_fraction("--mg-number" if mineral == "olivine" else "--ca-number", ratio,
                        open_low=True)
        if self.loop:
            self._resolve_loop(args, ratio)
        else:
            self._resolve_exchange(args, ratio)

    def _check_melt_names(self):
        from zoning.redox import MOLAR_MASS

        unknown = sorted(set(self.melt) - set(MOLAR_MASS))
        if unknown:
            raise ZoningError(
                f"--melt names unknown oxide(s) {unknown}; expected names among "
                f"{sorted(MOLAR_MASS)} (wt%). Check the spelling, e.g. --melt FeO=9.2."
            )

    def _check_traces(self):
        laws = {"olivine": ("Ni",), "plagioclase": ("Sr", "Mg")}[self.mineral]
        names = [n for n, _ in self.traces]
        extra = sorted(set(self.trace_d) - set(names))
        if extra:
            raise ZoningError(
                f"--trace-d gives D for {extra} but no --trace asks for them; add --trace "
                f"{extra[0]}."
            )
        for name in names:
            if name not in laws and name not in self.trace_d:
                raise ZoningError(
                    f"no partitioning law for {name} in {self.mineral} (laws: "
                    f"{', '.join(laws)}); give a constant coefficient with --trace-d {name}=D."
                )
            if (self.mineral == "plagioclase" and name in laws and name not in self.trace_d
                    and self.temperature_c is None):
                raise ZoningError(
                    f"the plagioclase {name} law (RT ln D = A X_An + B) needs a temperature: "
                    f"give --temperature-c, or a constant coefficient with --trace-d {name}=D."
                )

    # -- binary loop ------------------------------------------------------------
    def _resolve_loop(self, args, ratio):
        for opt, val in (("--kd", args.kd), ("--kd-law", args.kd_law), ("--h2o", args.h2o),
                         ("--fe3", args.fe3), ("--delta-qfm", args.delta_qfm),
                         ("--trace", args.trace), ("--trace-d", args.trace_d),
                         ("--temperature-c", args.temperature_c)):
            if val is not None:
                raise ZoningError(
                    f"{opt} does not apply with --loop: the binary loop sets the partitioning "
                    "and the temperature itself. Remove it."
                )
        if self.beam_um > 0:
            raise ZoningError("--beam-um is not available with --loop; remove it.")
        if ratio is None:
            ratio = _melt_ratio(self.mineral, self.melt, 0.0)
        if ratio is None:
            name = "--mg-number" if self.mineral == "olivine" else "--ca-number"
            raise ZoningError(
                f"--loop needs the bulk liquid composition: give {name} (fraction of "
                f"{'forsterite' if self.mineral == 'olivine' else 'anorthite'}) or --melt "
                f"with {'MgO and FeO' if self.mineral == 'olivine' else 'CaO and Na2O'}."
            )
        self.ratio = ratio
        self.kd = math.nan
        self.fe3 = math.nan
        self.kd_source = "binary loop (ideal mixing)"

    # -- constant-Kd exchange --------------------------------------------------------
    def _resolve_exchange(self, args, ratio):
        from zoning.partitioning import EXCHANGE_LAWS

        mineral = self.mineral
        law = EXCHANGE_LAWS[mineral]
        if law.other_oxide not in self.melt and not (mineral == "olivine"
                                                     and "Fe2O3" in self.melt):
            raise ZoningError(
                f"{mineral} needs the reference melt {law.other_oxide} [wt%]: give "
                f"--melt {law.other_oxide}=... from a glass or whole-rock analysis."
            )
        # Fe3+/FeT
        if args.fe3 is not None and args.delta_qfm is not None:
            raise ZoningError("give either --fe3 or --delta-qfm, not both.")
        self.fe3 = 0.10 if mineral == "olivine" else 0.0
        self.fe3_source = "default" if mineral == "olivine" else "not used"
        if args.fe3 is not None:
            self.fe3 = _check_fraction("--fe3", args.fe3, high=0.9)
            self.fe3_source = "given"
        elif args.delta_qfm is not None:
            from zoning.redox import fe3_fraction_kress_carmichael

            _require_full_melt(self.melt, "--delta-qfm")
            t = self._liquidus_temperature()
            self.fe3 = float(fe3_fraction_kress_carmichael(
                {k: v for k, v in self.melt.items() if k != "H2O"}, t, args.delta_qfm))
            self.fe3_source = (f"Kress & Carmichael (1991) at QFM{args.delta_qfm:+g}, "
                               f"{t:.0f} °C")
            self.notes.append(f"melt Fe3+/FeT = {self.fe3:.3f} ({self.fe3_source})")
        # melt ratio
        if ratio is None:
            ratio = _melt_ratio(mineral, self.melt, self.fe3)
        if ratio is None:
            name = "--mg-number" if mineral == "olivine" else "--ca-number"
            pair = "MgO" if mineral == "olivine" else "CaO"
            raise ZoningError(
                f"the parent melt ratio is missing: give {name} or --melt {pair}=... "
                "with the reference melt."
            )
        self.ratio = ratio
        # exchange coefficient
        if args.kd is not None and (args.kd_law is not None or args.h2o is not None):
            raise ZoningError("give either --kd or a rule to compute it (--kd-law, --h2o), "
                              "not both.")
        self.kd = law.kd_default
        self.kd_source = ("Roeder & Emslie (1970) default" if mineral == "olivine"
                          else "anhydrous default (about 1-2, Sisson & Grove 1993)")
        if args.kd is not None:
            self.kd = args.kd
            self.kd_source = "given"
        elif args.kd_law is not None:
            from zoning.kd_laws import liquidus_olivine_kd

            if args.kd_law == "toplis_2005":
                _require_full_melt(self.melt, "--kd-law toplis_2005")
            melt = {k: v for k, v in self.melt.items() if k != "H2O"}
            res = liquidus_olivine_kd(
                melt, args.kd_law, temperature_c=self._liquidus_temperature(),
                fe3_fraction=self.fe3, melt_mg_number=self.ratio,
                h2o_wt=self.melt.get("H2O", 0.0),
            )
            self.kd = float(res.kd)
            self.kd_source = (f"{args.kd_law} at the liquidus olivine Fo{res.fo:.1f}, "
                              f"{res.temperature_c:.0f} °C (held constant along the path)")
            self.notes.append(f"Kd = {self.kd:.4f} ({self.kd_source})")
        elif args.h2o is not None:
            from zoning.kd_laws import plagioclase_kd_from_water

            self.kd = float(plagioclase_kd_from_water(args.h2o))
            self.kd_source = (f"rule of thumb from {args.h2o:g} wt% H2O (common practice, "
                              "not a calibration)")
            self.notes.append(f"KD(Ca-Na) = {self.kd:.2f} ({self.kd_source})")

    def _liquidus_temperature(self):
        if self.temperature_c is not None:
            return self.temperature_c
        from zoning.thermometry import melt_temperature

        if "MgO" not in self.melt:
            raise ZoningError(
                "a melt temperature is needed: give --temperature-c or --melt MgO=... "
                "(glass thermometer)."
            )
        return float(melt_temperature(self.melt["MgO"], self.thermometer))

    # -- model -----------------------------------------------------------------------
    def model(self):
        if self.loop:
            from zoning.loops import LoopModel

            return LoopModel(self.mineral, geometry=self.geometry)
        from zoning.models import CrystallizationModel

        trace_names = tuple(name for name, _ in self.traces)
        kwargs = {}
        if self.mineral == "olivine":
            kwargs["fe3_fraction"] = self.fe3
            kwargs["thermometer"] = self.thermometer
        melt = {k: v for k, v in self.melt.items() if k in ("SiO2", "TiO2", "Al2O3", "FeO",
                                                              "Fe2O3", "MnO", "MgO", "CaO",
                                                              "Na2O", "K2O", "P2O5", "H2O")}
        return CrystallizationModel(
            self.mineral, melt, kd=self.kd, traces=trace_names, trace_d=self.trace_d or None,
            geometry=self.geometry,
            beam_um=self.beam_um, temperature_c=self.temperature_c, **kwargs,
        )

    def params(self, model, retention):
        p = {_RATIO[self.mineral]: self.ratio, "f_rim": self.f_rim, "retention": retention,
             "f_core": self.f_core}
        if not self.loop:
            p["kd"] = self.kd
            specs = {s.name: s for s in model.parameters}
            for (name, c0), tr in zip(self.traces, model.traces, strict=True):
                if math.isfinite(c0):
                    p[tr.parameter] = c0
                if tr.parameter not in specs:  # pragma: no cover - model contract
                    raise ZoningError(f"trace {name} has no initial-content parameter.")
        return p

    def metadata(self):
        meta = {
            "mineral": self.mineral,
            "law": "binary loop" if self.loop else "constant exchange coefficient",
            _RATIO[self.mineral]: f"{self.ratio:.6g}",
            "kd": "loop" if self.loop else f"{self.kd:.6g} ({self.kd_source})",
            "retention": f"{self.retention:g}",
            "f_rim": f"{self.f_rim:g}",
            "f_core": f"{self.f_core:g}",
            "geometry": self.geometry,
            "radius_um": "none" if self.radius_um is None else f"{self.radius_um:g}",
            "points": str(self.points),
        }
        if not self.loop:
            meta["melt_wt"] = ", ".join(f"{k}={v:g}" for k, v in self.melt.items())
            if self.mineral == "olivine":
                meta["fe3_fraction"] = f"{self.fe3:.6g} ({self.fe3_source})"
                meta["temperature"] = f"glass thermometer {self.thermometer} from melt MgO"
            if self.traces:
                meta["traces"] = ", ".join(
                    n if not math.isfinite(c) else f"{n}={c:g}" for n, c in self.traces)
            if self.trace_d:
                meta["trace_d"] = ", ".join(f"{n}={d:g}" for n, d in self.trace_d.items())
            if self.beam_um:
                meta["beam_um"] = f"{self.beam_um:g}"
            meta["assumptions"] = (
                "one exchange coefficient for the whole path; crystals grew self-similarly "
                "from the core and the section passes through it; no diffusion after growth "
                "(diffusion makes a record look more equilibrium-like)"
            )
        else:
            meta["assumptions"] = (
                "ideal binary loop at 1 atm (pure end-member melt, no other components); "
                "for experiments and analogue systems, not natural melts"
            )
        return meta


def simulate_table(scenario: _Scenario, retention: float | None = None) -> pd.DataFrame:
    """Evaluate a scenario and return the output table (one row per spot).

    Parameters
    ----------
    scenario : _Scenario
        Resolved settings.
    retention : float, optional
        Override the scenario's retention (used for the r = 0 / r = 1 figure panels).

    Returns
    -------
    pandas.DataFrame
        Columns as in the module docstring.
    """
    model = scenario.model()
    r = scenario.retention if retention is None else retention
    params = scenario.params(model, r)
    if scenario.radius_um is not None:
        x = np.linspace(0.0, scenario.radius_um, scenario.points)
        out = model.profile(x, scenario.radius_um, **params)
    else:
        f = np.linspace(scenario.f_core, scenario.f_rim, scenario.points)
        params = {k: v for k, v in params.items() if k not in ("f_rim", "f_core")}
        out = model.path(f, **params)
    major = _MAJOR[scenario.mineral]
    cols = {}
    if "distance_um" in out:
        cols["distance_um"] = out["distance_um"]
    cols["f"] = out["f"]
    cols[major] = out["crystal"]
    cols[_RATIO[scenario.mineral]] = out["melt_ratio"]
    pair = ("melt_mgo_wt", "melt_feo_wt") if scenario.mineral == "olivine" else (
        "melt_cao_wt", "melt_na2o_wt")
    for key in pair:
        cols[key] = out[key]
    # Olivine: the model's glass thermometer (scenario.thermometer); warn once when
    # the reported temperatures leave its calibration range.
    temperature = np.asarray(out["temperature_c"], dtype=float)
    if scenario.mineral == "olivine" and not scenario.loop:
        from zoning.thermometry import THERMOMETERS

        THERMOMETERS[scenario.thermometer].check_range(out["melt_mgo_wt"], stacklevel=2)
    if np.any(np.isfinite(temperature)):
        cols["temperature_c"] = temperature
    skip = set(cols) | {"crystal", "melt_ratio", "temperature_c", "distance_um"}
    for key in sorted(k for k in out if k not in skip):
        cols[key] = out[key]
    return pd.DataFrame({k: np.asarray(v, dtype=float) for k, v in cols.items()})


def _figure(scenario, tables, spots, path):
    from matplotlib.figure import Figure

    from zoning.io.figures import PALETTE

    major = _MAJOR[scenario.mineral]
    label = "Fo [mol%]" if major == "fo" else "An [mol%]"
    xkey = "distance_um" if scenario.radius_um is not None else "f"
    xlabel = ("distance from core [µm]" if xkey == "distance_um"
              else "crystallized fraction F [mass fraction]")
    fig = Figure(figsize=(9.0, 3.4), layout="constrained")
    axes = fig.subplots(1, 3, sharey=True)
    styles = [
        ("fractional, r = 0", PALETTE["orange"], "--"),
        (f"given, r = {scenario.retention:g}", PALETTE["blue"], "-"),
        ("equilibrium, r = 1", PALETTE["green"], ":"),
    ]
    for ax, table, (title, colour, ls) in zip(axes, tables, styles, strict=True):
        ax.plot(table[xkey], table[major], color=colour, ls=ls, lw=2.0)
        ax.set_title(title, fontsize=10)
        if ls == "-":
            ax.plot(spots[xkey], spots[major], "o", ms=3.5, color=colour,
                    label="simulated spots")
            ax.legend(frameon=False, fontsize=8)
        ax.set_xlabel(xlabel)
        ax.grid(True, color=PALETTE["grey"], alpha=0.25, lw=0.5)
    axes[0].set_ylabel(f"crystal {label}")
    fig.suptitle(
        f"{scenario.mineral} zoning recorded up to F = {scenario.f_rim:g} "
        f"({'binary loop' if scenario.loop else f'Kd = {scenario.kd:.3g}'})",
        fontsize=11,
    )
    fig.savefig(path)


def run(args: argparse.Namespace) -> int:
    """Run ``zoning simulate`` with parsed arguments.

    Parameters
    ----------
    args : argparse.Namespace

    Returns
    -------
    int
        0 on success.
    """
    from zoning.io.writers import standard_metadata, write_csv

    out_path = Path(args.out)
    if out_path.suffix.lower() != ".csv":
        raise ZoningError(f"--out must name a .csv file; got {args.out!r}.")
    fig_path = None
    if args.figure is not None:
        fig_path = Path(args.figure)
        if fig_path.suffix.lower() not in _FIGURE_SUFFIXES:
            raise ZoningError(
                f"--figure must end in {', '.join(_FIGURE_SUFFIXES)}; got {args.figure!r}."
            )
        if fig_path.resolve() == out_path.resolve():
            raise ZoningError("--figure and --out name the same file; give two names.")
    try:
        scenario = _Scenario(args)
        table = simulate_table(scenario)
        tables = None
        if fig_path is not None:
            # the comparison panels repeat the main run's range warnings: silence them
            dense = copy.copy(scenario)
            dense.points = max(scenario.points, 201)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ZoningWarning)
                tables = [simulate_table(dense, r) for r in (0.0, scenario.retention, 1.0)]
    except ModelDomainError as exc:
        raise ZoningError(f"cannot simulate this scenario: {exc}") from None
    meta = standard_metadata("zoning profile recorded by a simulated crystallization",
                             **scenario.metadata())
    write_csv(table, out_path, metadata=meta)
    if tables is not None:
        _figure(scenario, tables, table, fig_path)
    for note in scenario.notes:
        print(note)
    major = _MAJOR[scenario.mineral]
    print(
        f"wrote {len(table)} spots to {out_path}: {major.capitalize()} "
        f"{table[major].iloc[0]:.2f} (core) to {table[major].iloc[-1]:.2f} (rim), "
        f"r = {scenario.retention:g}, F_rim = {scenario.f_rim:g}"
        + (f"; figure {fig_path}" if fig_path is not None else "")
    )
    return 0
