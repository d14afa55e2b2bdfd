"""Parsing of quantities with units and VALUE+/-SIGMA (fringecount.units).

Conversion factors are exact definitions (SI prefixes, 1 deg = pi/180 rad,
T/K = t/degC + 273.15, 1 degF interval = 5/9 K): common practice.
"""

import math

import pytest

from fringecount.errors import InputError, UnitError
from fringecount.units import Uncertain, convert_value, parse_number, parse_quantity


@pytest.mark.parametrize("text, kind, value, sigma", [
    ("10mm", "length", 0.010, 0.0),
    ("632.8nm", "wavelength", 632.8e-9, 0.0),
    ("20degC", "temperature", 293.15, 0.0),
    ("20 °C", "temperature", 293.15, 0.0),
    ("293.15K", "temperature", 293.15, 0.0),
    ("101.325kPa", "pressure", 101325.0, 0.0),
    ("760torr", "pressure", 101325.0, 0.0),
    ("45%", "humidity", 45.0, 0.0),
    ("10deg", "angle", math.radians(10), 0.0),
    ("10°", "angle", math.radians(10), 0.0),
    ("10K", "temperature_difference", 10.0, 0.0),
    ("450ppm", "co2", 450.0, 0.0),
    ("450umol/mol", "co2", 450.0, 0.0),
    ("450", "co2", 450.0, 0.0),  # a bare CO2 content is in ppm (common practice)
    ("450µmol/mol", "co2", 450.0, 0.0),
    ("1.000+/-0.002mm", "length", 1e-3, 2e-6),
    ("1.000mm+/-0.002mm", "length", 1e-3, 2e-6),
    ("1.000mm+/-0.002", "length", 1e-3, 2e-6),
    ("1.000mm+/-2um", "length", 1e-3, 2e-6),
    ("(1.000+/-0.002)mm", "length", 1e-3, 2e-6),
    ("1.000±0.002mm", "length", 1e-3, 2e-6),
    ("10+/-0.05deg", "angle", math.radians(10), math.radians(0.05)),
])
def test_parse_quantity_converts_to_canonical_units(text, kind, value, sigma):
    q = parse_quantity(text, kind)
    assert q.value == pytest.approx(value, rel=1e-12)
    assert q.sigma == pytest.approx(sigma, rel=1e-12, abs=1e-300)


def test_temperature_sigma_is_an_interval_not_an_offset():
    # 20 +/- 0.1 degC: the sigma is 0.1 K, not 273.25 K (offset units, common practice)
    q = parse_quantity("20+/-0.1degC", "temperature")
    assert (q.value, q.sigma) == (pytest.approx(293.15), pytest.approx(0.1))
    assert parse_quantity("68+/-1.8degF", "temperature").sigma == pytest.approx(1.0)


@pytest.mark.parametrize("text", ["10K", "10degC", "10delta_degC", "18degF"])
def test_temperature_difference_from_any_temperature_unit(text):
    # a difference of 10 K = 10 degC = 18 degF (definition of the scales)
    assert parse_quantity(text, "temperature_difference").value == pytest.approx(10.0)


@pytest.mark.parametrize("text, kind", [
    ("10", "length"),             # missing unit
    ("10kg", "length"),           # wrong dimension
    ("45ppm", "humidity"),        # ratio, but not a percentage
    ("10%", "angle"),             # pint calls both dimensionless; an angle is not a percentage
    ("10deg", "co2"),
    ("abc", "length"),
    ("1mm+/-", "length"),
    ("1mm+/--0.1mm", "length"),
    ("-300degC", "temperature"),  # below absolute zero
    ("10 parsecs_per_fortnight", "length"),
    ("(1+/-0.1)mm mm", "length"),
])
def test_bad_quantities_raise_one_line_unit_error(text, kind):
    with pytest.raises(UnitError) as info:
        parse_quantity(text, kind, name="--x")
    msg = str(info.value)
    assert "\n" not in msg and msg.startswith("--x")
    assert isinstance(info.value, InputError)


def test_parse_number_for_counts():
    assert parse_number("16.1413+/-0.05") == Uncertain(16.1413, 0.05)
    assert parse_number("-3.5") == Uncertain(-3.5, 0.0)
    with pytest.raises(UnitError):
        parse_number("16mm")
    with pytest.raises(UnitError):
        parse_number("1+/--1")


def test_convert_value_for_log_columns():
    assert convert_value(1.0, "kPa", "pressure") == pytest.approx(1000.0)
    assert convert_value(20.0, "degC", "temperature") == pytest.approx(293.15)
    assert convert_value(500.0, "nm", "wavelength") == pytest.approx(5e-7)
    with pytest.raises(UnitError):
        convert_value(1.0, "V", "pressure")
