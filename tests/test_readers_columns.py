"""Header recognition of zoning.io._columns (spellings seen in microprobe exports)."""

import math

import pytest
from zoning.io._columns import CANONICAL, OXIDES, recognise, split_unit


@pytest.mark.parametrize(
    "header,canonical,scale",
    [
        ("SiO2", "SiO2", 1.0),
        ("SiO2 wt%", "SiO2", 1.0),
        ("SiO2(wt%)", "SiO2", 1.0),
        ("SiO2 (wt.%)", "SiO2", 1.0),
        ("SiO2 [wt%]", "SiO2", 1.0),
        ("sio2", "SiO2", 1.0),
        ("wt% SiO2", "SiO2", 1.0),
        ("SiO₂", "SiO2", 1.0),
        ("Al2O3%", "Al2O3", 1.0),
        ("SiO2(Mass%)", "SiO2", 1.0),
        ("SiO2 Ox%", "SiO2", 1.0),
        ("%SiO2", "SiO2", 1.0),
        ("SiO2 [wt. %]", "SiO2", 1.0),
        ("K2O_wt", "K2O", 1.0),
        ("NiO (ppm)", "NiO", 1e-4),
        ("FeO*", "FeO", 1.0),
        ("FeOt", "FeO", 1.0),
        ("FeOT", "FeO", 1.0),
        ("FeO(T)", "FeO", 1.0),
        ("FeO total", "FeO", 1.0),
        ("FeOtot", "FeO", 1.0),
        ("FeO_T", "FeO", 1.0),
        ("FeO (tot.)", "FeO", 1.0),
        ("Fe2O3", "Fe2O3", 1.0),
        ("P2O5", "P2O5", 1.0),
        ("SrO", "SrO", 1.0),
        ("BaO", "BaO", 1.0),
        ("Distance (µm)", "distance_um", 1.0),
        ("Distance (μm)", "distance_um", 1.0),  # Greek mu, not the micro sign
        ("Distance (Âµm)", "distance_um", 1.0),  # UTF-8 micro sign read as Windows-1252
        ("Dist [um]", "distance_um", 1.0),
        ("distance_mm", "distance_um", 1000.0),
        ("Distance (mm)", "distance_um", 1000.0),
        ("Distance from core (µm)", "distance_um", 1.0),
        ("Relative distance (microns)", "distance_um", 1.0),
        ("X", "x_um", math.nan),
        ("Stage X (mm)", "x_um", 1000.0),
        ("X [µm]", "x_um", 1.0),
        ("x_um", "x_um", 1.0),
        ("Y-stage", "y_um", math.nan),
        ("Y pos (mm)", "y_um", 1000.0),
        ("Point", "point", 1.0),
        ("No.", "point", 1.0),
        ("#", "point", 1.0),
        ("Point #", "point", 1.0),
        ("Spot No.", "point", 1.0),
        ("DataSet/Point", "point", 1.0),
        ("Comment", "label", 1.0),
        ("Label", "label", 1.0),
        ("Sample", "sample", 1.0),
        ("Traverse", "traverse", 1.0),
        ("Crystal", "crystal", 1.0),
        ("Total", "total", 1.0),
        ("Total (wt%)", "total", 1.0),
        ("Fo err", "fo_sigma", 1.0),
        ("Fo_sd", "fo_sigma", 1.0),
        ("Fo 1s", "fo_sigma", 1.0),
        ("Fo 2σ", "fo_sigma", 0.5),
        ("An ±", "an_sigma", 1.0),
    ],
)
def test_header_spellings(header, canonical, scale):
    m = recognise(header)
    assert m.canonical == canonical
    if math.isnan(scale):
        assert math.isnan(m.scale)
    else:
        assert m.scale == scale


@pytest.mark.parametrize(
    "header,kind",
    [
        ("Mg", "element"), ("Si (wt%)", "element"), ("K", "element"), ("Fe wt%", "element"),
        ("Fo", "reported"), ("An", "reported"), ("Mg#", "reported"),
        ("SiO2 DL", "other"), ("S", "other"), ("s", "other"), ("Sr88", "unit"),
        ("Sr88_ppm_LOD", "other"), ("±", "sigma"), ("1s", "sigma"), ("err", "sigma"),
        ("sd", "sigma"), ("2σ", "sigma"), ("z", "other"), ("d", "other"),
        ("K2O (mol%)", "unit"), ("Dist (pixels)", "unit"), ("Z", "other"), ("", "other"),
        ("Date", "other"),
    ],
)
def test_headers_that_are_not_used(header, kind):
    m = recognise(header)
    assert m.canonical == ""
    assert m.ignored_kind == kind


def test_total_iron_note():
    assert recognise("FeO*").note == "column 'FeO*' read as FeO (total Fe as FeO)"
    assert recognise("FeO").note == ""


def test_split_unit():
    assert split_unit("sio2 (wt.%)") == ("sio2", "wt%")
    assert split_unit("distance mm") == ("distance", "mm")
    assert split_unit("x [µm]") == ("x", "µm")
    assert split_unit("mgo") == ("mgo", "")


def test_every_oxide_is_recognised_by_its_own_name():
    assert all(recognise(ox).canonical == ox for ox in OXIDES)
    assert set(OXIDES) <= set(CANONICAL)
