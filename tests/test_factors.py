from __future__ import annotations

import pytest

from verify import factors


def test_molecular_weight_ratios() -> None:
    # 44/12 and 44/28: molecular weights as used in IPCC 2006 Guidelines Vol. 4 (Ch. 2; Ch. 11 for N2O).
    assert factors.C_TO_CO2.value == pytest.approx(3.666667, abs=1e-6)
    assert factors.N2ON_TO_N2O.value == pytest.approx(1.571429, abs=1e-6)


@pytest.mark.parametrize(
    ("gas", "expected"),
    # IPCC AR6 WG1 Ch. 7 Table 7.15, GWP100 (values from memory; check against the source).
    [("CO2", 1.0), ("CH4", 29.8), ("CH4_non_fossil", 27.0), ("N2O", 273.0)],
)
def test_gwp100_ar6(gas: str, expected: float) -> None:
    factor = factors.gwp100(gas, "AR6")
    assert factor.value == expected
    assert "AR6 WG1 Ch. 7 Table 7.15" in factor.source


@pytest.mark.parametrize(
    ("gas", "expected"),
    # IPCC AR5 WG1 Ch. 8 Table 8.7, GWP100 without climate-carbon feedback (values from memory).
    [("CO2", 1.0), ("CH4", 28.0), ("CH4_non_fossil", 28.0), ("N2O", 265.0)],
)
def test_gwp100_ar5(gas: str, expected: float) -> None:
    factor = factors.gwp100(gas, "AR5")
    assert factor.value == expected
    assert "AR5 WG1 Ch. 8 Table 8.7" in factor.source


def test_plain_methane_is_the_fossil_value_in_ar6() -> None:
    # AR6 Table 7.15: fossil CH4 29.8 > non-fossil 27.0; plain CH4 takes the conservative one.
    assert factors.gwp100("CH4", "AR6").value == factors.gwp100("CH4_non_fossil", "AR6").value + 2.8


def test_codes_ignore_case_and_spaces() -> None:
    assert factors.gwp100(" n2o ", "ar6").value == 273.0  # AR6 Table 7.15


@pytest.mark.parametrize(("gas", "gwp_set"), [("SF6", "AR6"), ("CH4", "AR4"), ("", "AR6")])
def test_unknown_codes_raise(gas: str, gwp_set: str) -> None:
    with pytest.raises(ValueError):
        factors.gwp100(gas, gwp_set)


def test_diesel_co2_per_litre() -> None:
    # IPCC 2006 Vol. 2 Ch. 2 Table 2.2: 74,100 kg CO2/TJ; Vol. 2 Ch. 1 Table 1.2: NCV 43.0 TJ/Gg
    # (both from memory; check against the source); density 0.84 kg/L (common practice, no source).
    # By hand: 74,100 x 43.0 = 3,186,300 kg CO2/Gg = 3.1863 kg CO2/kg; x 0.84 = 2.676492 kg CO2/L.
    assert factors.DIESEL_CO2_EF.value == 74_100.0
    assert factors.DIESEL_NCV.value == 43.0
    kg_per_litre = factors.fuel_co2_kg_per_litre(
        factors.DIESEL_CO2_EF.value, factors.DIESEL_NCV.value, factors.DIESEL_DENSITY.value
    )
    assert kg_per_litre == pytest.approx(2.676492, abs=1e-9)
    assert round(kg_per_litre, 3) == 2.676


def test_factor_as_method_entry() -> None:
    assert factors.gwp100("N2O", "AR5").to_method() == {
        "name": "GWP100 N2O (AR5)",
        "value": 265.0,  # AR5 WG1 Ch. 8 Table 8.7
        "unit": "t CO2e / t gas",
        "source": "IPCC AR5 WG1 Ch. 8 Table 8.7 (GWP100, no climate-carbon feedback)",
    }
