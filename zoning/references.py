"""Citation registry: every published method, law or constant the code uses.

Modules that implement or use a published law name its key, e.g.::

    #: Citation key of this law (zoning.references).
    citation = "hart_davis_1978"

and the report, ``fit.json`` and the README's "Citing" section are built from
the keys actually used, through :func:`cite`, :func:`short_cite` and
:func:`reference_list`. A fit records what it rests on as a tuple of
:class:`MethodUse` (role, citation key, detail in words).

Each :class:`Reference` carries a ``from_memory`` flag: True when the
bibliographic details were recalled rather than checked against the
publication or a second source; ``checked_against`` says what confirmed the
others. Reports mark from-memory entries so that a user checks them before
copying them into a thesis.

Adding an entry: pick the key ``<first author surname>_<year>`` (lower case,
``_et_al`` never; add a letter for two papers of one author and year), fill
every field you know, leave ``doi``/``pages`` empty rather than guessing, and
set ``from_memory`` honestly. ``tests/test_references.py`` checks the shape of
every entry.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass

from zoning.exceptions import ZoningError

__all__ = [
    "Reference",
    "MethodUse",
    "REFERENCES",
    "cite",
    "short_cite",
    "reference_list",
    "check_keys",
    "citing_markdown",
]

#: Kinds of publication a reference can be.
KINDS = ("article", "chapter", "book", "software", "report", "web")


@dataclass(frozen=True, slots=True)
class Reference:
    """Bibliographic record of one publication.

    Parameters
    ----------
    key : str
        Registry key, ``<surname>_<year>`` in lower case.
    authors : tuple of str
        Authors as ``"Surname, I. N."``, in publication order.
    year : int
        Year of publication.
    title : str
        Title of the article, chapter, book or software.
    journal : str
        Journal, or the book / series / publisher the work appeared in.
    volume : str
        Volume (or article number), "" when not applicable.
    pages : str
        Page range ("275-289") or article number, "" when unknown.
    doi : str
        DOI without the resolver prefix, "" when unknown.
    from_memory : bool
        True when the details were recalled, not checked against the
        publication or a second source.
    kind : str
        One of :data:`KINDS`.
    checked_against : str
        What confirmed the details when ``from_memory`` is False.
    """

    key: str
    authors: tuple[str, ...]
    year: int
    title: str
    journal: str
    volume: str = ""
    pages: str = ""
    doi: str = ""
    from_memory: bool = True
    kind: str = "article"
    checked_against: str = ""

    @property
    def surnames(self) -> tuple[str, ...]:
        """Surnames of the authors (text before the first comma)."""
        return tuple(a.split(",")[0].strip() for a in self.authors)

    def short(self) -> str:
        """In-text citation, e.g. ``"Roeder & Emslie (1970)"``."""
        names = self.surnames
        if len(names) == 1:
            who = names[0]
        elif len(names) == 2:
            who = f"{names[0]} & {names[1]}"
        else:
            who = f"{names[0]} et al."
        return f"{who} ({self.year})"

    def full(self) -> str:
        """Full reference in the usual earth-science style.

        ``Surname, I. & Surname, I. (year). Title. Journal volume, pages.
        https://doi.org/...``
        """
        authors = list(self.authors)
        who = authors[0] if len(authors) == 1 else ", ".join(authors[:-1]) + " & " + authors[-1]
        title = self.title.rstrip(".")
        where = self.journal
        if self.volume:
            where += f" {self.volume}"
        if self.pages:
            where += f", {self.pages}" if self.volume else f" {self.pages}"
        text = f"{who} ({self.year}). {title}. {where}."
        if self.doi:
            text += f" https://doi.org/{self.doi}"
        return text


@dataclass(frozen=True, slots=True)
class MethodUse:
    """One published method a result rests on.

    Parameters
    ----------
    role : str
        What the method does in this result, in words a methods paragraph
        can use: ``"olivine-melt Fe-Mg exchange coefficient"``,
        ``"melt temperature"``, ``"posterior sampling"``, ...
    key : str
        Citation key in :data:`REFERENCES`; "" for a user-given value with
        no published source.
    detail : str
        The value or setting as used, e.g. ``"K_D = 0.30 +/- 0.03"``.
    """

    role: str
    key: str
    detail: str = ""

    def as_dict(self) -> dict[str, str]:
        """Plain mapping for JSON (``role``, ``key``, ``citation``, ``detail``)."""
        return {"role": self.role, "key": self.key,
                "citation": short_cite(self.key) if self.key else "", "detail": self.detail}


def _ref(key, authors, year, title, journal, volume="", pages="", doi="", *,
         from_memory=True, kind="article", checked_against="") -> Reference:
    return Reference(key, tuple(authors), year, title, journal, volume, pages, doi,
                     from_memory, kind, checked_against)


_ENTRIES = (
    # --- diffusion after growth ---------------------------------------------
    _ref("crank_1975", ["Crank, J."], 1975, "The Mathematics of Diffusion (2nd edition)",
         "Clarendon Press, Oxford", kind="book"),
    _ref("dohmen_chakraborty_2007", ["Dohmen, R.", "Chakraborty, S."], 2007,
         "Fe-Mg diffusion in olivine II: point defect chemistry, change of diffusion "
         "mechanisms and a model for calculation of diffusion coefficients in natural olivine",
         "Physics and Chemistry of Minerals", "34", "409-430"),
    _ref("costa_chakraborty_2004", ["Costa, F.", "Chakraborty, S."], 2004,
         "Decadal time gaps between mafic intrusion and silicic eruption obtained from "
         "chemical zoning patterns in olivine", "Earth and Planetary Science Letters", "227",
         "517-530"),
    _ref("costa_2003", ["Costa, F.", "Chakraborty, S.", "Dohmen, R."], 2003,
         "Diffusion coupling between trace and major elements and a model for calculation "
         "of magma residence times using plagioclase", "Geochimica et Cosmochimica Acta",
         "67", "2189-2200"),
    _ref("giletti_casserly_1994", ["Giletti, B. J.", "Casserly, J. E. D."], 1994,
         "Strontium diffusion kinetics in plagioclase feldspars",
         "Geochimica et Cosmochimica Acta", "58", "3785-3793"),
    _ref("zellmer_1999", ["Zellmer, G. F.", "Blake, S.", "Vance, D.", "Hawkesworth, C.",
                          "Turner, S."], 1999,
         "Plagioclase residence times at two island arc volcanoes (Kameni Islands, Santorini, "
         "and Soufriere, St. Vincent) determined by Sr diffusion systematics",
         "Contributions to Mineralogy and Petrology", "136", "345-357"),
    _ref("grove_1984", ["Grove, T. L.", "Baker, M. B.", "Kinzler, R. J."], 1984,
         "Coupled CaAl-NaSi diffusion in plagioclase feldspar: experiments and applications "
         "to cooling rate speedometry", "Geochimica et Cosmochimica Acta", "48", "2113-2121"),
    _ref("petry_2004", ["Petry, C.", "Chakraborty, S.", "Palme, H."], 2004,
         "Experimental determination of Ni diffusion coefficients in olivine and their "
         "dependence on temperature, composition, oxygen fugacity, and crystallographic "
         "orientation", "Geochimica et Cosmochimica Acta", "68", "4179-4188"),
    _ref("coogan_2005", ["Coogan, L. A.", "Hain, A.", "Stahl, S.", "Chakraborty, S."], 2005,
         "Experimental determination of the diffusion coefficient for calcium in olivine "
         "between 900 °C and 1500 °C", "Geochimica et Cosmochimica Acta", "69", "3683-3694"),
    _ref("chakraborty_2010", ["Chakraborty, S."], 2010,
         "Diffusion coefficients in olivine, wadsleyite and ringwoodite",
         "Reviews in Mineralogy and Geochemistry", "72", "603-639", kind="chapter"),
    # --- Fe-Mg and Ca-Na exchange -------------------------------------------
    _ref("roeder_emslie_1970", ["Roeder, P. L.", "Emslie, R. F."], 1970,
         "Olivine-liquid equilibrium", "Contributions to Mineralogy and Petrology", "29",
         "275-289", "10.1007/BF00371276"),
    _ref("toplis_2005", ["Toplis, M. J."], 2005,
         "The thermodynamics of iron and magnesium partitioning between olivine and liquid: "
         "criteria for assessing and predicting equilibrium in natural and experimental "
         "systems", "Contributions to Mineralogy and Petrology", "149", "22-39",
         "10.1007/s00410-004-0629-4"),
    _ref("blundy_2020", ["Blundy, J.", "Melekhova, E.", "Ziberna, L.", "Humphreys, M. C. S.",
                         "Cerantola, V.", "Brooker, R. A.", "McCammon, C. A.", "Pichavant, M.",
                         "Ulmer, P."], 2020,
         "Effect of redox on Fe-Mg-Mn exchange between olivine and melt and an oxybarometer "
         "for basalts", "Contributions to Mineralogy and Petrology", "175", "103",
         "10.1007/s00410-020-01736-7"),
    _ref("sisson_grove_1993", ["Sisson, T. W.", "Grove, T. L."], 1993,
         "Experimental investigations of the role of H2O in calc-alkaline differentiation "
         "and subduction zone magmatism", "Contributions to Mineralogy and Petrology", "113",
         "143-166", "10.1007/BF00283225"),
    # --- melt redox and thermometry -----------------------------------------
    _ref("kress_carmichael_1991", ["Kress, V. C.", "Carmichael, I. S. E."], 1991,
         "The compressibility of silicate liquids containing Fe2O3 and the effect of "
         "composition, temperature, oxygen fugacity and pressure on their redox states",
         "Contributions to Mineralogy and Petrology", "108", "82-92", "10.1007/BF00307328"),
    _ref("frost_1991", ["Frost, B. R."], 1991,
         "Introduction to oxygen fugacity and its petrologic importance",
         "Reviews in Mineralogy", "25", "1-9", kind="chapter"),
    _ref("helz_thornber_1987", ["Helz, R. T.", "Thornber, C. R."], 1987,
         "Geothermometry of Kilauea Iki lava lake, Hawaii", "Bulletin of Volcanology", "49",
         "651-668", "10.1007/BF01080357"),
    _ref("montierth_1995", ["Montierth, C.", "Johnston, A. D.", "Cashman, K. V."], 1995,
         "An empirical glass-composition-based geothermometer for Mauna Loa lavas",
         "In: Rhodes, J. M. & Lockwood, J. P. (eds) Mauna Loa Revealed: Structure, "
         "Composition, History, and Hazards. AGU Geophysical Monograph", "92", "207-217",
         kind="chapter"),
    _ref("shea_2022", ["Shea, T.", "Matzen, A. K.", "Mourey, A. J."], 2022,
         "Experimental study of Fe-Mg partitioning and zoning during rapid growth of olivine "
         "in Hawaiian tholeiites", "Contributions to Mineralogy and Petrology", "177", "114"),
    # --- trace-element partitioning -----------------------------------------
    _ref("hart_davis_1978", ["Hart, S. R.", "Davis, K. E."], 1978,
         "Nickel partitioning between olivine and silicate melt",
         "Earth and Planetary Science Letters", "40", "203-219",
         "10.1016/0012-821X(78)90091-2"),
    _ref("blundy_wood_1991", ["Blundy, J. D.", "Wood, B. J."], 1991,
         "Crystal-chemical controls on the partitioning of Sr and Ba between plagioclase "
         "feldspar, silicate melts, and hydrothermal solutions",
         "Geochimica et Cosmochimica Acta", "55", "193-209", "10.1016/0016-7037(91)90411-W"),
    _ref("bindeman_1998", ["Bindeman, I. N.", "Davis, A. M.", "Drake, M. J."], 1998,
         "Ion microprobe study of plagioclase-basalt partition experiments at natural "
         "concentration levels of trace elements", "Geochimica et Cosmochimica Acta", "62",
         "1175-1193", "10.1016/S0016-7037(98)00047-7"),
    # --- crystallization models -----------------------------------------------
    _ref("rayleigh_1896", ["Rayleigh, Lord"], 1896,
         "Theoretical considerations respecting the separation of gases by diffusion and "
         "similar processes", "Philosophical Magazine (5th series)", "42", "493-498",
         "10.1080/14786449608620944"),
    _ref("shaw_1970", ["Shaw, D. M."], 1970, "Trace element fractionation during anatexis",
         "Geochimica et Cosmochimica Acta", "34", "237-243", "10.1016/0016-7037(70)90009-8"),
    _ref("brody_flemings_1966", ["Brody, H. D.", "Flemings, M. C."], 1966,
         "Solute redistribution in dendritic solidification",
         "Transactions of the Metallurgical Society of AIME", "236", "615-624"),
    _ref("pearce_1984", ["Pearce, T. H."], 1984,
         "The analysis of zoning in magmatic crystals with emphasis on olivine",
         "Contributions to Mineralogy and Petrology", "86", "149-154", "10.1007/BF00381842"),
    _ref("shea_2015", ["Shea, T.", "Costa, F.", "Krimer, D.", "Hammer, J. E."], 2015,
         "Accuracy of timescales retrieved from diffusion modeling in olivine: a 3D "
         "perspective", "American Mineralogist", "100", "2026-2042", "10.2138/am-2015-5163"),
    # --- binary loops -----------------------------------------------------------
    _ref("bowen_1913", ["Bowen, N. L."], 1913,
         "The melting phenomena of the plagioclase feldspars", "American Journal of Science",
         "35", "577-599", from_memory=False,
         checked_against="citation confirmed against a second public source (project science "
                         "notes)"),
    _ref("bowen_schairer_1935", ["Bowen, N. L.", "Schairer, J. F."], 1935,
         "The system MgO-FeO-SiO2", "American Journal of Science", "29", "151-217",
         from_memory=False,
         checked_against="citation confirmed against a second public source (project science "
                         "notes)"),
    _ref("navrotsky_1989", ["Navrotsky, A.", "Ziegler, D.", "Oestrike, R.", "Maniar, P."], 1989,
         "Calorimetry of silicate melts at 1773 K: measurement of enthalpies of fusion and of "
         "mixing in the systems diopside-anorthite-albite and anorthite-forsterite",
         "Contributions to Mineralogy and Petrology", "101", "122-130", "10.1007/BF00375300"),
    _ref("stebbins_carmichael_1984", ["Stebbins, J. F.", "Carmichael, I. S. E."], 1984,
         "The heat of fusion of fayalite", "American Mineralogist", "69", "292-297"),
    _ref("stebbins_1983", ["Stebbins, J. F.", "Carmichael, I. S. E.", "Weill, D. F."], 1983,
         "The high temperature liquid and glass heat contents and the heats of fusion of "
         "diopside, albite, sanidine and nepheline", "American Mineralogist", "68", "717-730"),
    # --- mineral recalculation and reference materials ------------------------
    _ref("droop_1987", ["Droop, G. T. R."], 1987,
         "A general equation for estimating Fe3+ concentrations in ferromagnesian silicates "
         "and oxides from microprobe analyses, using stoichiometric criteria",
         "Mineralogical Magazine", "51", "431-435", "10.1180/minmag.1987.051.361.10"),
    _ref("jarosewich_1980", ["Jarosewich, E.", "Nelen, J. A.", "Norberg, J. A."], 1980,
         "Reference samples for electron microprobe analysis", "Geostandards Newsletter", "4",
         "43-47", "10.1111/j.1751-908X.1980.tb00273.x"),
    _ref("prohaska_2022", ["Prohaska, T.", "Irrgeher, J.", "Benefield, J.", "Böhlke, J. K.",
                           "Chesson, L. A.", "Coplen, T. B.", "Ding, T.", "Dunn, P. J. H.",
                           "Gröning, M.", "Holden, N. E.", "Meijer, H. A. J.", "Moossen, H.",
                           "Possolo, A.", "Takahashi, Y.", "Vogl, J.", "Walczyk, T.",
                           "Wang, J.", "Wieser, M. E.", "Yoneda, S.", "Zhu, X.-K.",
                           "Meija, J."], 2022,
         "Standard atomic weights of the elements 2021 (IUPAC Technical Report)",
         "Pure and Applied Chemistry", "94", "573-600", "10.1515/pac-2019-0603"),
    _ref("tiesinga_2021", ["Tiesinga, E.", "Mohr, P. J.", "Newell, D. B.", "Taylor, B. N."],
         2021, "CODATA recommended values of the fundamental physical constants: 2018",
         "Reviews of Modern Physics", "93", "025010", "10.1103/RevModPhys.93.025010"),
    # --- fitting and statistics -------------------------------------------------
    _ref("newville_2014", ["Newville, M.", "Stensitzki, T.", "Allen, D. B.", "Ingargiola, A."],
         2014, "LMFIT: Non-Linear Least-Square Minimization and Curve-Fitting for Python",
         "Zenodo (software)", "", "", "10.5281/zenodo.11813", kind="software"),
    _ref("foreman_mackey_2013", ["Foreman-Mackey, D.", "Hogg, D. W.", "Lang, D.",
                                 "Goodman, J."], 2013,
         "emcee: the MCMC hammer", "Publications of the Astronomical Society of the Pacific",
         "125", "306-312", "10.1086/670067", from_memory=False,
         checked_against="BibTeX record shipped with the emcee package (emcee.__bibtex__)"),
    _ref("goodman_weare_2010", ["Goodman, J.", "Weare, J."], 2010,
         "Ensemble samplers with affine invariance",
         "Communications in Applied Mathematics and Computational Science", "5", "65-80",
         "10.2140/camcos.2010.5.65"),
    _ref("ter_braak_2006", ["ter Braak, C. J. F."], 2006,
         "A Markov Chain Monte Carlo version of the genetic algorithm Differential Evolution: "
         "easy Bayesian computing for real parameter spaces", "Statistics and Computing", "16",
         "239-249", "10.1007/s11222-006-8769-1"),
    _ref("ter_braak_vrugt_2008", ["ter Braak, C. J. F.", "Vrugt, J. A."], 2008,
         "Differential Evolution Markov Chain with snooker updater and fewer chains",
         "Statistics and Computing", "18", "435-446", "10.1007/s11222-008-9104-9"),
    _ref("gelman_1996", ["Gelman, A.", "Roberts, G. O.", "Gilks, W. R."], 1996,
         "Efficient Metropolis jumping rules",
         "In: Bernardo, J. M. et al. (eds) Bayesian Statistics 5. Oxford University Press",
         "", "599-607", kind="chapter"),
    _ref("sokal_1997", ["Sokal, A."], 1997,
         "Monte Carlo methods in statistical mechanics: foundations and new algorithms",
         "In: DeWitt-Morette, C., Cartier, P. & Folacci, A. (eds) Functional Integration: "
         "Basics and Applications. NATO ASI Series B", "361", "131-192", kind="chapter"),
    _ref("akaike_1974", ["Akaike, H."], 1974,
         "A new look at the statistical model identification",
         "IEEE Transactions on Automatic Control", "19", "716-723",
         "10.1109/TAC.1974.1100705"),
    _ref("schwarz_1978", ["Schwarz, G."], 1978, "Estimating the dimension of a model",
         "Annals of Statistics", "6", "461-464", "10.1214/aos/1176344136"),
    _ref("kass_raftery_1995", ["Kass, R. E.", "Raftery, A. E."], 1995, "Bayes factors",
         "Journal of the American Statistical Association", "90", "773-795",
         "10.1080/01621459.1995.10476572"),
    _ref("berger_1990", ["Berger, J. O."], 1990,
         "Robust Bayesian analysis: sensitivity to the prior",
         "Journal of Statistical Planning and Inference", "25", "303-328"),
    _ref("wilks_1938", ["Wilks, S. S."], 1938,
         "The large-sample distribution of the likelihood ratio for testing composite "
         "hypotheses", "Annals of Mathematical Statistics", "9", "60-62",
         "10.1214/aoms/1177732360"),
    _ref("roberts_rosenthal_2009", ["Roberts, G. O.", "Rosenthal, J. S."], 2009,
         "Examples of adaptive MCMC", "Journal of Computational and Graphical Statistics",
         "18", "349-367", "10.1198/jcgs.2009.06134"),
    _ref("vrugt_2009", ["Vrugt, J. A.", "ter Braak, C. J. F.", "Diks, C. G. H.",
                        "Robinson, B. A.", "Hyman, J. M.", "Higdon, D."], 2009,
         "Accelerating Markov chain Monte Carlo simulation by differential evolution with "
         "self-adaptive randomized subspace sampling",
         "International Journal of Nonlinear Sciences and Numerical Simulation", "10",
         "273-290", "10.1515/IJNSNS.2009.10.3.273"),
    _ref("rosner_1983", ["Rosner, B."], 1983,
         "Percentage points for a generalized ESD many-outlier procedure", "Technometrics",
         "25", "165-172", "10.1080/00401706.1983.10487848"),
    _ref("vehtari_2021", ["Vehtari, A.", "Gelman, A.", "Simpson, D.", "Carpenter, B.",
                          "Bürkner, P.-C."], 2021,
         "Rank-normalization, folding, and localization: an improved R-hat for assessing "
         "convergence of MCMC", "Bayesian Analysis", "16", "667-718", "10.1214/20-BA1221"),
    _ref("parno_marzouk_2018", ["Parno, M. D.", "Marzouk, Y. M."], 2018,
         "Transport map accelerated Markov chain Monte Carlo",
         "SIAM/ASA Journal on Uncertainty Quantification", "6", "645-682"),
    _ref("gelman_rubin_1992", ["Gelman, A.", "Rubin, D. B."], 1992,
         "Inference from iterative simulation using multiple sequences", "Statistical Science",
         "7", "457-472", "10.1214/ss/1177011136"),
    _ref("metropolis_1953", ["Metropolis, N.", "Rosenbluth, A. W.", "Rosenbluth, M. N.",
                             "Teller, A. H.", "Teller, E."], 1953,
         "Equation of state calculations by fast computing machines",
         "Journal of Chemical Physics", "21", "1087-1092", "10.1063/1.1699114"),
    _ref("birge_1932", ["Birge, R. T."], 1932,
         "The calculation of errors by the method of least squares", "Physical Review", "40",
         "207-227", "10.1103/PhysRev.40.207"),
    # --- figures ------------------------------------------------------------------
    _ref("okabe_ito_2008", ["Okabe, M.", "Ito, K."], 2008,
         "Color Universal Design (CUD): how to make figures and presentations that are "
         "friendly to colorblind people", "J*Fly (web publication)", kind="web"),
)

#: Every reference the code cites, by key.
REFERENCES: dict[str, Reference] = {r.key: r for r in _ENTRIES}


def check_keys(keys: Iterable[str]) -> list[str]:
    """Return the keys as a list, raising for any key not in the registry.

    Parameters
    ----------
    keys : iterable of str
        Citation keys ("" entries are skipped).

    Returns
    -------
    list of str
        The non-empty keys, in the order given.

    Raises
    ------
    ZoningError
        For an unknown key; the message lists the closest registered keys.
    """
    out = []
    for key in keys:
        if not key:
            continue
        if key not in REFERENCES:
            import difflib

            close = difflib.get_close_matches(str(key), list(REFERENCES), n=3, cutoff=0.5)
            raise ZoningError(
                f"unknown citation key {key!r}; closest registered keys: {close or 'none'}. "
                "Add the reference to zoning/references.py or fix the key."
            )
        out.append(key)
    return out


def cite(key: str) -> str:
    """Full reference of one key.

    Parameters
    ----------
    key : str
        Citation key, e.g. ``"roeder_emslie_1970"``.

    Returns
    -------
    str
        E.g. ``"Roeder, P. L. & Emslie, R. F. (1970). Olivine-liquid
        equilibrium. Contributions to Mineralogy and Petrology 29, 275-289.
        https://doi.org/10.1007/BF00371276"``.

    Examples
    --------
    >>> cite("schwarz_1978")[:40]
    'Schwarz, G. (1978). Estimating the dimen'
    """
    check_keys([key])
    return REFERENCES[key].full()


def short_cite(key: str) -> str:
    """In-text citation of one key, e.g. ``"Hart & Davis (1978)"``.

    Parameters
    ----------
    key : str
        Citation key.

    Returns
    -------
    str

    Examples
    --------
    >>> short_cite("blundy_2020")
    'Blundy et al. (2020)'
    """
    check_keys([key])
    return REFERENCES[key].short()


def _sort_key(ref: Reference) -> tuple:
    surname = re.sub(r"^(ter|van|von|de|da|di)\s+", "", ref.surnames[0], flags=re.I)
    return (surname.lower(), len(ref.authors) > 2, [s.lower() for s in ref.surnames[1:]],
            ref.year, ref.key)


def reference_list(keys: Iterable[str]) -> list[Reference]:
    """Return the references of the given keys, each once, in reference-list order.

    Order: first author's surname (ignoring a lower-case particle such as
    "ter"), single and two-author papers before "et al." ones, then the
    co-authors, then year.

    Parameters
    ----------
    keys : iterable of str
        Citation keys, repeats and "" allowed.

    Returns
    -------
    list of Reference
    """
    unique = dict.fromkeys(check_keys(keys))
    return sorted((REFERENCES[k] for k in unique), key=_sort_key)


# ------------------------------------------------------------------- README "Citing"
#: Opening of the README's "Citing" section.
_CITING_INTRO = (
    "Cite `zoning` itself as given in `CITATION.cff` (replace the author placeholder there "
    "with the names the project asks for, and give the version you used), and cite the "
    "published methods your result rests on. Every `report.pdf` ends with the full reference "
    "list of its own fit, and `fit.json` lists the same methods (`methods`: role, citation "
    "key, detail) with their references (`references`). The lists below are those of the "
    "default settings, generated from the same records as the reports "
    "(`zoning.references.citing_markdown()`); entries marked [†] were recalled and should "
    "be checked against the publication before citing."
)


def _uses_by_kind():
    """Return the method records of each kind of result, from the functions the fits call.

    Imported here, not at module level: the registry stays importable on its own.
    """
    from zoning.fitting.methods import fit_methods, joint_methods
    from zoning.models import CrystallizationModel
    from zoning.thermometry import THERMOMETERS

    ol_model = CrystallizationModel("olivine", {"FeO": 9.8}, traces=("Ni",))
    pl_model = CrystallizationModel("plagioclase", {"Na2O": 3.1}, traces=("Sr", "Mg"),
                                    temperature_c=1150.0)
    ol = ol_model.methods() + fit_methods("olivine", kd_mean=0.30, kd_sd=0.03,
                                          kd_default=True, fe3_fraction=0.10,
                                          fe3_source="default")
    pl = pl_model.methods() + fit_methods("plagioclase", kd_mean=2.0, kd_sd=0.3,
                                          kd_default=False)
    base_keys = {u.key for u in ol + pl}

    def added(uses):
        return tuple(u for u in uses if u.key and u.key not in base_keys)

    thermometers = tuple(
        MethodUse("melt temperature (glass MgO thermometer)", th.citation, name)
        for name, th in THERMOMETERS.items() if th.citation not in base_keys)
    section = added(ol_model.methods(processes=("section",)) + fit_methods(
        "olivine", kd_mean=0.30, kd_sd=0.03, kd_default=True, section_free=True))
    diffusion = {m: added(model.methods(processes=("diffusion",)))
                 for model, m in ((ol_model, "olivine"), (pl_model, "plagioclase"))}
    birge = added(fit_methods("olivine", kd_mean=0.30, kd_sd=0.03, kd_default=True,
                              sigma_scale=2.0))
    joint = ol_model.methods() + joint_methods("olivine", kd_mean=0.30, kd_sd=0.03,
                                               kd_default=True, fe3_fraction=0.10,
                                               fe3_source="default")
    return (
        ("Olivine traverse (`zoning fit`, `zoning batch`)", ol),
        ("Plagioclase traverse (`--temperature-c` for the SrO and MgO profiles)", pl),
        ("Joint fit of the crystals of a sample (`--joint`)", joint),
        ("Another glass thermometer (`--thermometer`, olivine)", thermometers),
        ("Off-centre section fitted", section),
        ("Diffusion after growth fitted, olivine", diffusion["olivine"]),
        ("Diffusion after growth fitted, plagioclase", diffusion["plagioclase"]),
        ("Scatter larger than the stated uncertainties (sigma scaled by the Birge ratio)",
         birge),
    )


def citing_markdown() -> str:
    """Return the README's "Citing" section (Markdown), generated from the method records.

    For each kind of result (olivine traverse, plagioclase traverse, joint
    fit, and the options and processes that add a method) the roles and in-text citations of the
    methods used with the default settings, then the full reference of every
    key. The records are those the fits store in ``FitResult.methods``
    (:meth:`zoning.models.CrystallizationModel.methods` and
    :func:`zoning.fitting.methods.fit_methods`), so the README and the
    reports cannot drift apart; ``tests/test_references.py`` checks that the
    README holds exactly this text.

    Returns
    -------
    str
        From the ``## Citing`` heading to the last reference, ending in a
        newline.
    """
    import textwrap

    def wrap(text, indent=""):
        return textwrap.fill(text, width=88, subsequent_indent=indent, break_long_words=False,
                             break_on_hyphens=False)

    out = ["## Citing", "", wrap(_CITING_INTRO), ""]
    keys: list[str] = []
    for title, uses in _uses_by_kind():
        out += [f"### {title}", ""]
        roles: dict[str, list[str]] = {}
        for u in uses:
            if u.key:
                roles.setdefault(u.role, [])
                if short_cite(u.key) not in roles[u.role]:
                    roles[u.role].append(short_cite(u.key))
                keys.append(u.key)
        for role, cites in roles.items():
            out.append(wrap(f"- {role}: {'; '.join(cites)}", "  "))
        out.append("")
    out += ["### References", ""]
    for ref in reference_list(keys):
        mark = " [†]" if ref.from_memory else ""
        out.append(wrap(f"- {ref.full()}{mark}", "  "))
    return "\n".join(out) + "\n"
