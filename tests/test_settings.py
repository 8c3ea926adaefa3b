"""Settings: scale parsing, units and validation of ExtractionSettings."""

from __future__ import annotations

import math

import pytest

from lineament.errors import SettingsError
from lineament.settings import DEFAULT_SCALES, ExtractionSettings, Scale, parse_scales


@pytest.mark.parametrize("text, value, unit", [
    ("30", 30.0, "m"),
    ("30m", 30.0, "m"),
    (" 30 m ", 30.0, "m"),
    ("0.5km", 500.0, "m"),       # 1 km = 1000 m (SI definition)
    ("2px", 2.0, "px"),
    ("2PX", 2.0, "px"),
    ("1e2", 100.0, "m"),
    (".5px", 0.5, "px"),
    (45, 45.0, "m"),
    (12.5, 12.5, "m"),
])
def test_scale_parse_accepts_numbers_and_units(text, value, unit):
    s = Scale.parse(text)
    assert s == Scale(value, unit)
    assert math.isclose(s.value, value)


@pytest.mark.parametrize("text", ["0", "0m", "0km", "0px", "-5", "-5m", "abc", "", "30ft", "30 m m",
                                  "nan", "inf", "1,5"])
def test_scale_parse_refuses_bad_text(text):
    with pytest.raises(SettingsError):
        Scale.parse(text)


def test_scale_parse_names_unknown_unit():
    with pytest.raises(SettingsError, match=r"unknown unit 'ft'"):
        Scale.parse("30ft")


@pytest.mark.parametrize("value", [0.0, -1.0, float("nan"), float("inf")])
def test_scale_refuses_non_positive_or_non_finite_values(value):
    with pytest.raises(SettingsError):
        Scale(value, "m")


def test_scale_refuses_unknown_unit_object():
    with pytest.raises(SettingsError):
        Scale(3.0, "ft")


def test_sigma_m_in_pixels_uses_geometric_mean_pixel_size():
    # analytic: 2 px on a 10 m x 40 m grid is 2 * sqrt(10 * 40) = 40 m
    assert math.isclose(Scale(2.0, "px").sigma_m((10.0, 40.0)), 40.0)
    assert math.isclose(Scale(25.0, "m").sigma_m((10.0, 40.0)), 25.0)


def test_scale_str_round_trips_through_parse():
    for s in (Scale(30.0, "m"), Scale(2.5, "px"), Scale(1200.0, "m")):
        assert Scale.parse(str(s)) == s


def test_parse_scales_sorts_ascending_and_accepts_sequences():
    assert parse_scales("120,30,60") == (Scale(30.0), Scale(60.0), Scale(120.0))
    assert parse_scales([60, "30m", Scale(90.0)]) == (Scale(30.0), Scale(60.0), Scale(90.0))
    assert parse_scales("0.03km,40") == (Scale(30.0), Scale(40.0))


@pytest.mark.parametrize("text, pattern", [
    ("", "no scales"),
    (" , ", "no scales"),
    ("30,2px", "mix metres and pixels"),
    ("30,30m", "twice"),
    ("30,abc", "cannot read scale"),
])
def test_parse_scales_refuses_bad_lists(text, pattern):
    with pytest.raises(SettingsError, match=pattern):
        parse_scales(text)


def test_default_settings_are_valid_and_use_default_scales():
    s = ExtractionSettings()
    assert s.scales == DEFAULT_SCALES
    assert s.operator == "log"


def test_settings_parse_scale_text():
    s = ExtractionSettings(scales="60,30")
    assert s.scales == (Scale(30.0), Scale(60.0))


@pytest.mark.parametrize("kwargs, pattern", [
    ({"operator": "sobel"}, "operator"),
    ({"z_factor": 0.0}, "z_factor"),
    ({"z_factor": -1.0}, "z_factor"),
    ({"z_factor": float("nan")}, "z_factor"),
    ({"high_noise_multiple": 0.0}, "high_noise_multiple"),
    ({"low_noise_multiple": 5.0, "high_noise_multiple": 4.0}, "low_noise_multiple"),
    ({"min_length_m": -1.0}, "min_length_m"),
    ({"simplify_tolerance_m": float("inf")}, "simplify_tolerance_m"),
    ({"high_threshold": -0.1}, "high_threshold"),
    ({"low_threshold": 5.0, "high_threshold": 1.0}, "low threshold"),
    ({"band": 0}, "band"),
    ({"band": -2}, "band"),
    ({"band": 1.5}, "band"),
    ({"truncate": 2.0}, "truncate"),
    ({"void_margin_sigmas": -1.0}, "void_margin_sigmas"),
    ({"scales": "0"}, "scale"),
])
def test_settings_refuse_bad_values(kwargs, pattern):
    with pytest.raises(SettingsError, match=pattern):
        ExtractionSettings(**kwargs)


def test_settings_error_is_also_value_error():
    # errors.py promises that each error also derives from the built-in a caller expects
    with pytest.raises(ValueError):
        ExtractionSettings(z_factor=0.0)


def test_settings_are_frozen():
    s = ExtractionSettings()
    with pytest.raises(AttributeError):
        s.z_factor = 2.0  # type: ignore[misc]


def test_to_dict_is_json_ready_and_lists_scales_as_text():
    import json

    s = ExtractionSettings(scales="30,60", min_length_m=500.0, assume_crs="EPSG:32633")
    d = json.loads(json.dumps(s.to_dict()))
    assert d["scales"] == ["30m", "60m"]
    assert d["min_length_m"] == 500.0
    assert d["assume_crs"] == "EPSG:32633"
