from __future__ import annotations

import math

import numpy as np
import pytest

from verify import allometry

# Chave, J. et al. (2014) Global Change Biology 20:3177-3190, Eq. 4:
# AGB (kg) = 0.0673 * (rho * D^2 * H)^0.976, D cm, H m, rho g/cm3.
CHAVE_A = 0.0673
CHAVE_B = 0.976


def test_chave_2014_eq4_reference_tree() -> None:
    agb = allometry.agb_kg(
        "density_height", CHAVE_A, CHAVE_B, np.nan, 30.0, height_m=22.0, wood_density_g_cm3=0.6
    )
    # Hand check of Chave 2014 Eq. 4: 0.0673 * (0.6 * 30^2 * 22)^0.976 = 0.0673 * 11880^0.976
    assert float(agb) == pytest.approx(638.3, abs=0.05)
    assert float(agb) == pytest.approx(CHAVE_A * 11880.0**CHAVE_B, rel=1e-12)


def test_chave_2014_eq4_vectorised_over_trees() -> None:
    dbh = np.array([5.0, 12.5, 30.0, 80.0])
    height = np.array([4.0, 11.0, 22.0, 35.0])
    rho = np.array([0.45, 0.6, 0.6, 0.72])
    agb = allometry.agb_kg("density_height", CHAVE_A, CHAVE_B, np.nan, dbh, height, rho)
    # Reference: Chave 2014 Eq. 4 evaluated directly with numpy
    np.testing.assert_allclose(agb, CHAVE_A * (rho * dbh**2 * height) ** CHAVE_B, rtol=1e-12)


def test_power_matches_numpy() -> None:
    dbh = np.array([7.0, 15.0, 42.0])
    a = np.array([0.1, 0.12, 0.09])
    b = np.array([2.4, 2.5, 2.6])
    # Reference: numpy a * D^b, per-tree coefficients broadcast elementwise
    np.testing.assert_allclose(allometry.agb_kg("power", a, b, np.nan, dbh), a * dbh**b, rtol=1e-12)


def test_power_height_matches_numpy() -> None:
    dbh = np.array([7.0, 15.0, 42.0])
    height = np.array([6.0, 12.0, 28.0])
    # Reference: numpy a * (D^2 H)^b
    expected = 0.05 * (dbh**2 * height) ** 0.95
    np.testing.assert_allclose(
        allometry.agb_kg("power_height", 0.05, 0.95, np.nan, dbh, height_m=height),
        expected,
        rtol=1e-12,
    )


def test_log_power_equals_power_with_transformed_intercept() -> None:
    # Coefficients of Brown (1997), FAO Forestry Paper 134, moist tropical
    # forest: AGB = exp(-2.134 + 2.530 ln D) (value from memory; check against
    # the source). Identity: exp(a + b ln D) * c = (exp(a) * c) * D^b.
    a, b, c = -2.134, 2.530, 1.02
    dbh = np.array([10.0, 25.0, 60.0])
    log_form = allometry.agb_kg("log_power", a, b, c, dbh)
    power_form = allometry.agb_kg("power", math.exp(a) * c, b, np.nan, dbh)
    np.testing.assert_allclose(log_form, power_form, rtol=1e-12)


def test_log_power_blank_correction_means_one() -> None:
    dbh = np.array([10.0, 25.0])
    # Reference: numpy exp(a + b ln D) without correction
    np.testing.assert_allclose(
        allometry.agb_kg("log_power", -2.134, 2.530, np.nan, dbh),
        np.exp(-2.134 + 2.530 * np.log(dbh)),
        rtol=1e-12,
    )


def test_inputs_outside_formula_domain_give_nan() -> None:
    agb = allometry.agb_kg("power_height", 0.05, 0.95, np.nan, [-3.0, 10.0], height_m=[5.0, np.nan])
    assert np.isnan(agb).all()


def test_form_requirements() -> None:
    assert allometry.FORMS == ("power", "power_height", "density_height", "log_power")
    assert [allometry.needs_height(f) for f in allometry.FORMS] == [False, True, True, False]
    assert [allometry.needs_density(f) for f in allometry.FORMS] == [False, False, True, False]


def test_caller_errors_raise() -> None:
    with pytest.raises(ValueError):
        allometry.agb_kg("cubic", 1.0, 2.0, np.nan, 10.0)
    with pytest.raises(ValueError):
        allometry.agb_kg("density_height", CHAVE_A, CHAVE_B, np.nan, 10.0, height_m=8.0)


def test_outside_valid_range_flags() -> None:
    dbh = np.array([4.9, 5.0, 50.0, 50.1, np.nan, 120.0])
    flags = allometry.outside_valid_range(dbh, 5.0, 50.0)
    assert flags.tolist() == [True, False, False, True, False, True]
    assert flags.dtype == bool


def test_outside_valid_range_nan_limit_is_no_limit() -> None:
    dbh = np.array([1.0, 300.0])
    assert allometry.outside_valid_range(dbh, np.nan, np.nan).tolist() == [False, False]
    assert allometry.outside_valid_range(dbh, 5.0, np.nan).tolist() == [True, False]
    assert allometry.outside_valid_range(dbh, np.nan, 100.0).tolist() == [False, True]
