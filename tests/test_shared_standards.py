"""Shared helpers against outside sources: unit factors and the VIN check digit."""

import math

import pytest

from tracktrue import units
from tracktrue.vin import check_digit, vin_problem, with_check_digit


def test_unit_factors_are_the_exact_nist_values():
    # NIST SP 811 (2008), appendix B.8/B.9: 1 mi = 1609.344 m, 1 ft = 0.3048 m (exact).
    assert units.MILE_M == 1609.344
    assert units.FOOT_M == 0.3048
    assert units.MPH_MPS == pytest.approx(0.44704, abs=1e-15)
    assert 3600 * units.MPH_MPS / 1000 == pytest.approx(1.609344, abs=1e-15)
    # 3rd CGPM (1901) / ISO 80000-3: standard gravity, exact.
    assert units.G0_MPS2 == 9.80665
    assert units.DEG_RAD * 180 == pytest.approx(math.pi)


def test_vin_check_digit_matches_the_commonly_quoted_worked_example():
    # CHECKS.md: 1M8GDM9AXKP042788 with check digit X, a commonly quoted example
    # of the 49 CFR 565 computation (from memory).
    assert check_digit("1M8GDM9AXKP042788") == "X"
    assert vin_problem("1M8GDM9AXKP042788") is None


def test_vin_with_a_wrong_check_digit_is_reported():
    problem = vin_problem("1M8GDM9A1KP042788")
    assert problem is not None and "check digit" in problem


@pytest.mark.parametrize("vin,word", [("1M8GDM9AXKP04278", "characters"), ("1M8GDM9AXKP04278O", "not allowed")])
def test_vin_of_wrong_length_or_with_forbidden_letters_is_reported(vin, word):
    assert word in vin_problem(vin)


def test_with_check_digit_produces_a_valid_vin():
    assert vin_problem(with_check_digit("2TT00000000000001")) is None
