"""Published conversion factors and default values, each kept with its unit and source.

Every factor is a :class:`Factor` record so that outputs can list the
"methods and factors" actually used (``Factor.to_method()``).

Values marked "value from memory; check against the source" in a comment were
entered from the cited table without a copy of it at hand.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Factor:
    """One constant: what it is, its value, its unit and where it comes from."""

    name: str
    value: float
    unit: str
    source: str

    def to_method(self) -> dict[str, object]:
        """The ``methods`` entry for outputs: name, value, unit, source."""
        return {"name": self.name, "value": self.value, "unit": self.unit, "source": self.source}


C_TO_CO2 = Factor(
    name="C to CO2",
    value=44.0 / 12.0,
    unit="t CO2 / t C",
    source="Ratio of molecular weights CO2/C (44/12), as used in IPCC 2006 Guidelines Vol. 4",
)

N2ON_TO_N2O = Factor(
    name="N2O-N to N2O",
    value=44.0 / 28.0,
    unit="t N2O / t N2O-N",
    source="Ratio of molecular weights N2O/N2 (44/28), IPCC 2006 Guidelines Vol. 4 Ch. 11",
)

_AR6_SOURCE = "IPCC AR6 WG1 Ch. 7 Table 7.15 (GWP100)"
_AR5_SOURCE = "IPCC AR5 WG1 Ch. 8 Table 8.7 (GWP100, no climate-carbon feedback)"
_GWP_UNIT = "t CO2e / t gas"

# AR6 and AR5 values: value from memory; check against the source.
GWP100_AR6: dict[str, Factor] = {
    "CO2": Factor("GWP100 CO2 (AR6)", 1.0, _GWP_UNIT, _AR6_SOURCE),
    "CH4": Factor("GWP100 CH4, fossil (AR6)", 29.8, _GWP_UNIT, _AR6_SOURCE),
    "CH4_non_fossil": Factor("GWP100 CH4, non-fossil (AR6)", 27.0, _GWP_UNIT, _AR6_SOURCE),
    "N2O": Factor("GWP100 N2O (AR6)", 273.0, _GWP_UNIT, _AR6_SOURCE),
}

GWP100_AR5: dict[str, Factor] = {
    "CO2": Factor("GWP100 CO2 (AR5)", 1.0, _GWP_UNIT, _AR5_SOURCE),
    "CH4": Factor("GWP100 CH4 (AR5)", 28.0, _GWP_UNIT, _AR5_SOURCE),
    # AR5 Table 8.7 gives one CH4 value; fossil and non-fossil methane share it.
    "CH4_non_fossil": Factor("GWP100 CH4 (AR5)", 28.0, _GWP_UNIT, _AR5_SOURCE),
    "N2O": Factor("GWP100 N2O (AR5)", 265.0, _GWP_UNIT, _AR5_SOURCE),
}

GWP_SETS: dict[str, dict[str, Factor]] = {"AR6": GWP100_AR6, "AR5": GWP100_AR5}
GAS_CODES: tuple[str, ...] = ("CO2", "CH4", "CH4_non_fossil", "N2O")


def _canonical(code: str, accepted: tuple[str, ...] | list[str]) -> str | None:
    wanted = str(code).strip().casefold()
    return next((c for c in accepted if c.casefold() == wanted), None)


def gwp100(gas: str, gwp_set: str) -> Factor:
    """100-year global warming potential of ``gas`` from the chosen IPCC report.

    ``gas`` is one of ``CO2``, ``CH4``, ``CH4_non_fossil``, ``N2O`` (case and
    surrounding spaces ignored); ``gwp_set`` is ``AR6`` (IPCC AR6 WG1 Ch. 7
    Table 7.15) or ``AR5`` (IPCC AR5 WG1 Ch. 8 Table 8.7, no climate-carbon
    feedback).

    Plain ``CH4`` takes the *fossil* methane value in AR6 (29.8 rather than
    27.0 for non-fossil): the higher value is the conservative choice for
    project emissions, which reduce credits. Use ``CH4_non_fossil`` when the
    methane is demonstrably biogenic. AR5 gives a single CH4 value (28).

    Raises ``ValueError`` for an unknown gas or set.
    """
    set_key = _canonical(gwp_set, list(GWP_SETS))
    if set_key is None:
        raise ValueError(f"unknown GWP set {gwp_set!r}; use one of {', '.join(GWP_SETS)}")
    gas_key = _canonical(gas, GAS_CODES)
    if gas_key is None:
        raise ValueError(f"unknown gas {gas!r}; use one of {', '.join(GAS_CODES)}")
    return GWP_SETS[set_key][gas_key]


# Diesel reference (used by tests and as a documented example of a derived factor).
# Value from memory; check against the source.
DIESEL_CO2_EF = Factor(
    name="Default CO2 emission factor, gas/diesel oil",
    value=74_100.0,
    unit="kg CO2 / TJ",
    source="IPCC 2006 Guidelines Vol. 2 Ch. 2 Table 2.2",
)
# Value from memory; check against the source.
DIESEL_NCV = Factor(
    name="Net calorific value, gas/diesel oil",
    value=43.0,
    unit="TJ / Gg",
    source="IPCC 2006 Guidelines Vol. 2 Ch. 1 Table 1.2",
)
# Typical road-diesel density (about 0.82-0.845 kg/L at 15 degC); value from memory,
# common practice, no source.
DIESEL_DENSITY = Factor(
    name="Density, diesel",
    value=0.84,
    unit="kg / L",
    source="Typical value, common practice, no source",
)


def fuel_co2_kg_per_litre(ef_kg_co2_per_tj: float, ncv_tj_per_gg: float, density_kg_per_l: float) -> float:
    """CO2 per litre of fuel from an energy-based emission factor.

    kg CO2/TJ x TJ/Gg gives kg CO2 per Gg of fuel; / 1e6 gives kg CO2 per kg of
    fuel; x density gives kg CO2 per litre (IPCC 2006 Guidelines Vol. 2 Ch. 2,
    Eq. 2.1 with the Vol. 2 Ch. 1 Table 1.2 NCV for the unit conversion).
    """
    return ef_kg_co2_per_tj * ncv_tj_per_gg / 1.0e6 * density_kg_per_l
