from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pandas as pd
import pytest

from verify import forest

# Chave, J. et al. (2014) Global Change Biology 20:3177-3190, Eq. 4.
CHAVE_A, CHAVE_B = 0.0673, 0.976
# IPCC 2006 Guidelines Vol. 4, Ch. 4, Table 4.3: default carbon fraction of
# dry matter, 0.47 (value from memory; check against the source).
CARBON_FRACTION = 0.47
# IPCC 2006 Guidelines Vol. 4, Ch. 4, Table 4.4: root-to-shoot ratio of
# tropical moist deciduous forest with above-ground biomass > 125 t/ha, 0.24
# (value from memory; check against the source).
ROOT_SHOOT = 0.24
# Carbon to CO2: ratio of molecular weights 44/12 (IPCC 2006 Vol. 4).
CO2_PER_C = 44.0 / 12.0


def _chave_tco2e(dbh_cm: float, height_m: float, rho: float) -> float:
    agb = CHAVE_A * (rho * dbh_cm**2 * height_m) ** CHAVE_B
    return agb * (1.0 + ROOT_SHOOT) * CARBON_FRACTION * CO2_PER_C / 1000.0


def _species() -> pd.DataFrame:
    return pd.DataFrame(
        [
            ("Tectona grandis", "chave14", 0.6, ROOT_SHOOT, CARBON_FRACTION, 2),
            ("Cedrela odorata", "local_power", np.nan, ROOT_SHOOT, CARBON_FRACTION, 3),
        ],
        columns=[
            "species", "model_id", "wood_density_g_cm3",
            "root_shoot_ratio", "carbon_fraction", "row",
        ],
    )


def _allometry() -> pd.DataFrame:
    return pd.DataFrame(
        [
            ("chave14", "density_height", CHAVE_A, CHAVE_B, np.nan, 5.0, 50.0, "Chave 2014", 2),
            ("local_power", "power", 0.1, 2.4, np.nan, np.nan, np.nan, "demo only", 3),
        ],
        columns=["model_id", "form", "a", "b", "c", "min_dbh_cm", "max_dbh_cm", "source", "row"],
    )


def _plots() -> pd.DataFrame:
    return pd.DataFrame(
        [
            ("P1", "S1", "start", dt.date(2024, 3, 1), 400.0, 100.0, 10.0, 2),
            ("P2", "S1", "start", dt.date(2024, 3, 2), 500.0, np.nan, np.nan, 3),
        ],
        columns=[
            "plot_id", "stratum_id", "event", "measured_on",
            "plot_area_m2", "subplot_area_m2", "subplot_max_dbh_cm", "row",
        ],
    )


def _trees(records: list[tuple]) -> pd.DataFrame:
    return pd.DataFrame(
        records,
        columns=["plot_id", "event", "tree_id", "species", "dbh_cm", "height_m", "status", "row"],
    )


def test_hand_computed_nested_plot() -> None:
    trees = _trees(
        [
            ("P1", "start", "T1", "Tectona grandis", 30.0, 22.0, "live", 2),
            ("P1", "start", "T2", "Tectona grandis", 8.0, 7.0, "live", 3),  # subplot tree
            ("P1", "start", "T3", "Tectona grandis", 25.0, 18.0, "dead", 4),
        ]
    )
    table = forest.tree_biomass(trees, _species(), _allometry())
    plots = forest.plot_densities(_plots(), table)

    # Chave 2014 Eq. 4 per tree; T1 stands for 10000/400 trees/ha (main plot),
    # T2 (DBH 8 < 10 cm) for 10000/100 trees/ha (subplot); dead T3 counts zero.
    expected = (
        _chave_tco2e(30.0, 22.0, 0.6) * 10000 / 400 + _chave_tco2e(8.0, 7.0, 0.6) * 10000 / 100
    )
    p1 = plots.set_index("plot_id").loc["P1"]
    assert p1["tco2e_per_ha"] == pytest.approx(expected, rel=1e-12)
    assert p1["n_live_trees"] == 2
    assert p1["measured_on"] == dt.date(2024, 3, 1)
    # Chave 2014 Eq. 4 hand check for T1: 0.0673 * 11880^0.976 = 638.3 kg
    assert table.loc[0, "agb_kg"] == pytest.approx(638.3, abs=0.05)
    assert table.loc[0, "bgb_kg"] == pytest.approx(638.3162641506756 * ROOT_SHOOT, rel=1e-9)


def test_expansion_factor_threshold_and_blank_subplot() -> None:
    # 10000 m2 per ha divided by the area the tree was searched on
    factors = forest.expansion_per_ha(
        np.array([9.99, 10.0, 5.0, 5.0]),
        np.array([400.0, 400.0, 400.0, 0.0]),
        np.array([100.0, 100.0, np.nan, np.nan]),
        np.array([10.0, 10.0, 10.0, np.nan]),
    )
    assert factors[:3].tolist() == [100.0, 25.0, 25.0]
    assert math.isnan(factors[3])


def test_dead_trees_and_empty_plots_are_zero() -> None:
    trees = _trees([("P2", "start", "T9", "Tectona grandis", 40.0, 25.0, "dead", 2)])
    table = forest.tree_biomass(trees, _species(), _allometry())
    assert table.loc[0, ["agb_kg", "bgb_kg", "carbon_kg", "co2e_kg"]].tolist() == [0.0] * 4
    assert not table.loc[0, "extrapolated"]
    plots = forest.plot_densities(_plots(), table).set_index("plot_id")
    # P1 has no trees at all, P2 only a dead one: both valid zeros
    assert plots["tco2e_per_ha"].tolist() == [0.0, 0.0]
    assert plots["n_live_trees"].tolist() == [0, 0]


def test_power_form_species_without_nesting() -> None:
    trees = _trees([("P2", "start", "C1", "Cedrela odorata", 20.0, np.nan, "live", 2)])
    table = forest.tree_biomass(trees, _species(), _allometry())
    # Reference: numpy a * D^b, then the IPCC 2006 Vol. 4 Ch. 4 chain
    agb = 0.1 * 20.0**2.4
    assert table.loc[0, "agb_kg"] == pytest.approx(agb, rel=1e-12)
    co2e_kg = agb * (1 + ROOT_SHOOT) * CARBON_FRACTION * CO2_PER_C
    assert table.loc[0, "co2e_kg"] == pytest.approx(co2e_kg, rel=1e-12)
    density = forest.plot_densities(_plots(), table).set_index("plot_id").loc["P2", "tco2e_per_ha"]
    assert density == pytest.approx(co2e_kg / 1000 * 10000 / 500, rel=1e-12)


def test_extrapolation_flag_and_cell_address() -> None:
    trees = _trees(
        [
            ("P2", "start", "T1", "Tectona grandis", 62.0, 30.0, "live", 7),
            ("P2", "start", "T2", "Tectona grandis", 20.0, 15.0, "live", 8),
        ]
    )
    table = forest.tree_biomass(trees, _species(), _allometry())
    assert table["extrapolated"].tolist() == [True, False]
    assert forest.TREES_COLUMNS["dbh_cm"] == "E"
    (finding,) = forest.forest_findings(table)
    assert (finding.severity, finding.code, finding.location) == (
        "warning", "dbh_outside_model_range", "Trees!E7"
    )
    for part in ("chave14", "5 to 50 cm", "62"):
        assert part in finding.message
    # The extrapolated tree still counts (the warning asks for a check)
    assert np.isfinite(table["co2e_kg"]).all()


def test_column_letter_from_mapping() -> None:
    trees = _trees([("P2", "start", "T1", "Tectona grandis", 2.0, 3.0, "live", 11)])
    table = forest.tree_biomass(trees, _species(), _allometry())
    (finding,) = forest.forest_findings(table, columns={**forest.TREES_COLUMNS, "dbh_cm": "H"})
    assert finding.location == "Trees!H11"


def test_uncomputable_trees_give_nan_and_error_findings() -> None:
    trees = _trees(
        [
            ("P2", "start", "T1", "Unknown sp.", 20.0, 15.0, "live", 2),
            ("P2", "start", "T2", "Tectona grandis", 20.0, np.nan, "live", 3),
            ("P2", "start", "T3", "Tectona grandis", 20.0, 15.0, "fallen", 4),
        ]
    )
    table = forest.tree_biomass(trees, _species(), _allometry())
    assert table["co2e_kg"].isna().tolist() == [True, True, True]
    findings = forest.forest_findings(table)
    assert [(f.severity, f.code, f.location) for f in findings] == [
        ("error", "tree_biomass_not_computed", "Trees!D2"),
        ("error", "tree_biomass_not_computed", "Trees!F3"),
        ("error", "tree_biomass_not_computed", "Trees!G4"),
    ]
    density = forest.plot_densities(_plots(), table).set_index("plot_id").loc["P2", "tco2e_per_ha"]
    assert math.isnan(density)


def test_empty_tree_table() -> None:
    table = forest.tree_biomass(_trees([]), _species(), _allometry())
    assert list(table.columns) == list(forest.TREE_TABLE_COLUMNS)
    assert forest.forest_findings(table) == []
    plots = forest.plot_densities(_plots(), table)
    assert plots["tco2e_per_ha"].tolist() == [0.0, 0.0]
