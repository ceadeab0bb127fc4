"""Soil pathway: layer stocks of soil organic carbon (SOC), profile stocks, stock change.

Inputs are the validated ``SoilSamples`` table (workbook contract headers plus
an int ``row``, the worksheet row). One *profile* is the layers of one point at
one event. The chain (accounting design, section 1, ``soil``):

- per layer: fine-earth mass (t/ha) = bulk_density_g_cm3 x thickness_cm x
  (1 - coarse_fragments_pct/100) x 100, and SOC stock (t C/ha) =
  soc_pct/100 x that mass. ``bulk_density_g_cm3`` is the density of the fine
  earth itself, so (1 - coarse fragments by volume) takes it to the whole
  soil volume;
- per profile (``fixed_depth``): the layer stocks summed to the *common
  depth*, the shallowest total depth sampled by every usable profile of the
  first and last events. A deeper profile is cut at that depth; the layer
  that crosses it counts by its linear share (uniform concentration and
  density within a layer, the assumption of a layer mean);
- per profile (``equivalent_soil_mass``): cumulative SOC at the reference
  cumulative fine-earth mass, the mean over the first event's profiles of
  their cumulative mass at the common depth (Ellert & Bettany 1995; Wendt &
  Hauser 2013). Cumulative SOC is interpolated *linearly* between the
  cumulative (mass, SOC) points of the profile, starting at (0, 0); beyond the
  deepest layer it is continued at the deepest layer's SOC concentration
  (the deepest-layer adjustment of Ellert & Bettany 1995), with a warning;
- t C/ha x 44/12 = tCO2e/ha, then the stratified estimator of the change
  (:func:`verify.sampling.stratified_change`; points play the role of plots,
  paired when the same point_id is sampled at both events).

Layer order problems (inverted, overlapping or gapped layers) are found by
:func:`layer_problems`, which the workbook check also uses.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from verify.factors import C_TO_CO2
from verify.findings import Finding
from verify.pathway import SAMPLING_METHODS, PathwayEstimate, gross_from_change, strata_rows
from verify.sampling import stratified_change

SHEET = "SoilSamples"
METHODS = ("fixed_depth", "equivalent_soil_mass")
# g/cm2 to t/ha: 1 ha = 1e8 cm2, 1 t = 1e6 g.
T_PER_HA_PER_G_CM2 = 100.0

ELLERT_BETTANY_1995 = (
    "Ellert, B.H. & Bettany, J.R. (1995) Calculation of organic matter and nutrients stored in "
    "soils under contrasting management regimes. Can. J. Soil Sci. 75:529-538"
)
WENDT_HAUSER_2013 = (
    "Wendt, J.W. & Hauser, S. (2013) An equivalent soil mass procedure for monitoring soil "
    "organic carbon in multiple soil layers. Eur. J. Soil Sci. 64:58-65"
)

PROFILE_COLUMNS: tuple[str, ...] = (
    "point_id",
    "stratum_id",
    "event",
    "measured_on",
    "n_layers",
    "sampled_depth_cm",
    "fine_earth_t_per_ha",
    "soc_t_c_per_ha",
    "tco2e_per_ha",
    "extrapolated_mass_t_per_ha",
    "row",
)


# ---------------------------------------------------------------- layer equations


def layer_fine_earth_t_per_ha(
    bulk_density_g_cm3: Any, thickness_cm: Any, coarse_fragments_pct: Any
) -> np.ndarray:
    """Fine-earth mass of a layer (t/ha) = BD x thickness x (1 - CF/100) x 100.

    ``bulk_density_g_cm3`` is the fine-earth density, ``coarse_fragments_pct``
    the volume share of fragments > 2 mm. Accounting design, section 1; the
    fine-earth mass is the coordinate of the equivalent soil mass method
    (Ellert & Bettany 1995, Can. J. Soil Sci. 75:529-538).
    """
    bd = np.asarray(bulk_density_g_cm3, dtype=float)
    thickness = np.asarray(thickness_cm, dtype=float)
    fine_share = 1.0 - np.asarray(coarse_fragments_pct, dtype=float) / 100.0
    return bd * thickness * fine_share * T_PER_HA_PER_G_CM2


def layer_soc_t_c_per_ha(
    soc_pct: Any, bulk_density_g_cm3: Any, thickness_cm: Any, coarse_fragments_pct: Any
) -> np.ndarray:
    """SOC stock of a layer (t C/ha) = SOC/100 x BD x thickness x (1 - CF/100) x 100.

    Accounting design, section 1 (``soil``); ``soc_pct`` is g C per 100 g of
    fine earth, so the stock is the concentration times the fine-earth mass
    of :func:`layer_fine_earth_t_per_ha`.
    """
    mass = layer_fine_earth_t_per_ha(bulk_density_g_cm3, thickness_cm, coarse_fragments_pct)
    return np.asarray(soc_pct, dtype=float) / 100.0 * mass


def amount_to_depth(
    depth_top_cm: Any, depth_bottom_cm: Any, amount_per_layer: Any, depth_cm: float
) -> float:
    """Sum of a per-layer amount (SOC or fine-earth mass) from the surface to ``depth_cm``.

    Layers must be contiguous from 0 cm (see :func:`layer_problems`). The
    layer crossing ``depth_cm`` counts by its linear share
    (depth_cm - top) / (bottom - top), i.e. the amount is spread evenly within
    a layer. NaN when the profile does not reach ``depth_cm`` or an amount is NaN.
    """
    top = np.asarray(depth_top_cm, dtype=float)
    bottom = np.asarray(depth_bottom_cm, dtype=float)
    amount = np.asarray(amount_per_layer, dtype=float)
    if top.size == 0 or not np.isfinite(depth_cm) or depth_cm > bottom.max():
        return float("nan")
    share = np.clip((depth_cm - top) / (bottom - top), 0.0, 1.0)
    return float(np.sum(amount * share))


def soc_at_reference_mass(
    cumulative_fine_earth_t_per_ha: Any,
    cumulative_soc_t_c_per_ha: Any,
    reference_mass_t_per_ha: float,
) -> tuple[float, float]:
    """Cumulative SOC (t C/ha) of one profile at a reference fine-earth mass.

    Equivalent soil mass (Ellert & Bettany 1995, Can. J. Soil Sci.
    75:529-538; Wendt & Hauser 2013, Eur. J. Soil Sci. 64:58-65): the profile's
    cumulative points (mass_i, SOC_i), from the surface point (0, 0), are
    joined by straight lines and read at the reference mass (linear
    interpolation, as ``numpy.interp``; Wendt & Hauser also describe a cubic
    spline, not used here). Beyond the deepest point the last segment is
    continued, i.e. the missing mass carries the deepest layer's SOC
    concentration (Ellert & Bettany's adjustment of the deepest layer).

    Returns (SOC at the reference mass, fine-earth mass extrapolated beyond
    the deepest layer, 0 when none). NaN inputs give (NaN, NaN).
    """
    mass = np.concatenate(([0.0], np.asarray(cumulative_fine_earth_t_per_ha, dtype=float)))
    soc = np.concatenate(([0.0], np.asarray(cumulative_soc_t_c_per_ha, dtype=float)))
    reference = float(reference_mass_t_per_ha)
    if mass.size < 2 or not (np.all(np.isfinite(mass)) and np.all(np.isfinite(soc)) and math.isfinite(reference)):
        return float("nan"), float("nan")
    if reference <= mass[-1]:
        return float(np.interp(reference, mass, soc)), 0.0
    concentration = (soc[-1] - soc[-2]) / (mass[-1] - mass[-2])
    extra = reference - mass[-1]
    return float(soc[-1] + concentration * extra), float(extra)


# ---------------------------------------------------------------- layer order


@dataclass(frozen=True)
class LayerProblem:
    """A layer that cannot be placed in its profile: the SoilSamples row and header to fix."""

    row: int
    column: str
    code: str
    message: str


def _profile_label(point_id: Any, event: Any) -> str:
    return f"point {point_id!r} at event {event!r}"


def _order_problems(layers: pd.DataFrame, label: str) -> list[LayerProblem]:
    """Gaps and overlaps within one profile whose layers all have bottom > top."""
    problems = []
    reached_cm = 0.0
    reached_row: int | None = None
    for layer in layers.sort_values(["depth_top_cm", "depth_bottom_cm", "row"]).itertuples(index=False):
        top, bottom, row = float(layer.depth_top_cm), float(layer.depth_bottom_cm), int(layer.row)
        if top > reached_cm:
            after = "the surface (0 cm)" if reached_row is None else f"row {reached_row}, which ends at {reached_cm:g} cm"
            problems.append(LayerProblem(
                row, "depth_top_cm", "soil_layer_gap",
                f"Layer {top:g}-{bottom:g} cm of {label} leaves a gap after {after}. Layers of a "
                "profile must follow each other from the surface without gaps; correct the depths "
                "or add the missing layer.",
            ))
        elif top < reached_cm:
            problems.append(LayerProblem(
                row, "depth_top_cm", "soil_layer_overlap",
                f"Layer {top:g}-{bottom:g} cm of {label} overlaps row {reached_row}, which ends at "
                f"{reached_cm:g} cm. Layers of a profile must not overlap; correct the depths.",
            ))
        if bottom > reached_cm:
            reached_cm, reached_row = bottom, row
    return problems


def layer_problems(samples: pd.DataFrame) -> list[LayerProblem]:
    """Layers that break the profile geometry, in row order.

    Per profile (point_id, event):

    - ``soil_layer_inverted`` at depth_bottom_cm: depth_bottom_cm <= depth_top_cm;
    - ``soil_layer_gap`` at depth_top_cm: the layer starts below the bottom of
      every layer above it (the first layer must start at 0 cm);
    - ``soil_layer_overlap`` at depth_top_cm: the layer starts above the
      bottom of a layer above it.

    Rows with a blank point_id, event or depth are skipped (their cell check
    reports them), as are repeats of a (point_id, event, depth_top_cm) key
    (the unique-key check reports those).
    """
    keys = ["point_id", "event", "depth_top_cm", "depth_bottom_cm"]
    rows = samples.reindex(columns=[*keys, "row"]).dropna(subset=keys)
    rows = rows.drop_duplicates(subset=["point_id", "event", "depth_top_cm"], keep="first")
    problems: list[LayerProblem] = []
    inverted = rows["depth_bottom_cm"] <= rows["depth_top_cm"]
    for layer in rows[inverted].itertuples(index=False):
        problems.append(LayerProblem(
            int(layer.row), "depth_bottom_cm", "soil_layer_inverted",
            f"depth_bottom_cm {layer.depth_bottom_cm:g} is not below depth_top_cm "
            f"{layer.depth_top_cm:g} ({_profile_label(layer.point_id, layer.event)}); a layer's "
            "bottom must be deeper than its top. Correct the depths.",
        ))
    for (point_id, event), layers in rows[~inverted].groupby(["point_id", "event"], sort=False):
        problems.extend(_order_problems(layers, _profile_label(point_id, event)))
    return sorted(problems, key=lambda p: p.row)


def stratum_problems(samples: pd.DataFrame) -> list[LayerProblem]:
    """``soil_point_stratum_mismatch`` at stratum_id: a point named in two strata.

    A sampling point belongs to one stratum; the paired estimator needs the
    same point in the same stratum at both events. Each row whose stratum
    differs from the point's first row (in row order) is reported.
    """
    rows = samples.reindex(columns=["point_id", "stratum_id", "row"]).dropna()
    rows = rows.sort_values("row")
    first = rows.groupby("point_id", sort=False)["stratum_id"].transform("first")
    first_row = rows.groupby("point_id", sort=False)["row"].transform("first")
    differ = rows["stratum_id"] != first
    return [
        LayerProblem(
            int(r.row), "stratum_id", "soil_point_stratum_mismatch",
            f"Point {r.point_id!r} is in stratum {r.stratum_id!r} here but in stratum {s!r} at "
            f"row {int(fr)}; a sampling point belongs to one stratum. Correct the stratum_id or "
            "give the point a new point_id.",
        )
        for r, s, fr in zip(rows[differ].itertuples(index=False), first[differ], first_row[differ])
    ]


# ---------------------------------------------------------------- profiles


@dataclass(frozen=True)
class Profile:
    """The layers of one point at one event, sorted from the surface down.

    ``usable`` is False when a layer has a blank or out-of-order value: the
    profile then gets no stock.
    """

    point_id: str
    stratum_id: Any
    event: str
    measured_on: Any
    depth_top_cm: np.ndarray
    depth_bottom_cm: np.ndarray
    fine_earth_t_per_ha: np.ndarray
    soc_t_c_per_ha: np.ndarray
    rows: np.ndarray
    usable: bool

    @property
    def sampled_depth_cm(self) -> float:
        return float(self.depth_bottom_cm[-1]) if self.usable else float("nan")

    @property
    def deepest_row(self) -> int:
        return int(self.rows[-1])


def build_profiles(samples: pd.DataFrame, events: tuple[str, ...]) -> list[Profile]:
    """Profiles of ``events`` with per-layer fine-earth mass and SOC stock (t/ha, t C/ha)."""
    columns = (
        "point_id", "stratum_id", "event", "measured_on", "depth_top_cm", "depth_bottom_cm",
        "soc_pct", "bulk_density_g_cm3", "coarse_fragments_pct", "row",
    )
    rows = samples.reindex(columns=list(columns))
    rows = rows[rows["event"].isin(list(events)) & rows["point_id"].notna()]
    bad_rows = {p.row for p in layer_problems(rows)}
    profiles = []
    for (point_id, event), layers in rows.groupby(["point_id", "event"], sort=False):
        layers = layers.sort_values(["depth_top_cm", "depth_bottom_cm", "row"])
        top = layers["depth_top_cm"].to_numpy(dtype=float)
        bottom = layers["depth_bottom_cm"].to_numpy(dtype=float)
        mass = layer_fine_earth_t_per_ha(
            layers["bulk_density_g_cm3"], bottom - top, layers["coarse_fragments_pct"]
        )
        soc = layer_soc_t_c_per_ha(
            layers["soc_pct"], layers["bulk_density_g_cm3"], bottom - top, layers["coarse_fragments_pct"]
        )
        usable = (
            bool(np.all(np.isfinite(soc)))
            and bool(np.all(np.isfinite(top)) and np.all(np.isfinite(bottom)))
            and not bad_rows.intersection(layers["row"].tolist())
        )
        dates = layers["measured_on"].dropna()
        profiles.append(Profile(
            point_id=point_id,
            stratum_id=layers["stratum_id"].iloc[0],
            event=event,
            measured_on=dates.min() if not dates.empty else None,
            depth_top_cm=top,
            depth_bottom_cm=bottom,
            fine_earth_t_per_ha=mass,
            soc_t_c_per_ha=soc,
            rows=layers["row"].to_numpy(dtype=int),
            usable=usable,
        ))
    return profiles


def common_depth(profiles: list[Profile]) -> tuple[float, Profile | None]:
    """The shallowest sampled depth (cm) of the usable profiles, and the profile that sets it."""
    usable = [p for p in profiles if p.usable]
    if not usable:
        return float("nan"), None
    shallowest = min(usable, key=lambda p: (p.sampled_depth_cm, p.deepest_row))
    return shallowest.sampled_depth_cm, shallowest


def reference_mass_t_per_ha(profiles: list[Profile], first_event: str, depth_cm: float) -> float:
    """Mean cumulative fine-earth mass (t/ha) of the first event's usable profiles at ``depth_cm``.

    The reference mass of the equivalent soil mass comparison (accounting
    design, section 1; Wendt & Hauser 2013, Eur. J. Soil Sci. 64:58-65).
    """
    masses = [
        amount_to_depth(p.depth_top_cm, p.depth_bottom_cm, p.fine_earth_t_per_ha, depth_cm)
        for p in profiles
        if p.usable and p.event == first_event
    ]
    return float(np.mean(masses)) if masses else float("nan")


def _fixed_depth_row(profile: Profile, depth_cm: float) -> dict[str, Any]:
    def to_depth(amount: np.ndarray) -> float:
        return amount_to_depth(profile.depth_top_cm, profile.depth_bottom_cm, amount, depth_cm)

    return {
        "fine_earth_t_per_ha": to_depth(profile.fine_earth_t_per_ha),
        "soc_t_c_per_ha": to_depth(profile.soc_t_c_per_ha),
        "extrapolated_mass_t_per_ha": 0.0,
    }


def _esm_row(profile: Profile, reference_t_per_ha: float) -> dict[str, Any]:
    soc, extrapolated = soc_at_reference_mass(
        np.cumsum(profile.fine_earth_t_per_ha), np.cumsum(profile.soc_t_c_per_ha), reference_t_per_ha
    )
    return {
        "fine_earth_t_per_ha": reference_t_per_ha,
        "soc_t_c_per_ha": soc,
        "extrapolated_mass_t_per_ha": extrapolated,
    }


def profile_stocks(
    profiles: list[Profile], value: Callable[[Profile], dict[str, Any]]
) -> pd.DataFrame:
    """One row per profile (PROFILE_COLUMNS): SOC in t C/ha and tCO2e/ha (x 44/12)."""
    records = []
    for p in profiles:
        stock = value(p) if p.usable else {
            "fine_earth_t_per_ha": float("nan"), "soc_t_c_per_ha": float("nan"),
            "extrapolated_mass_t_per_ha": float("nan"),
        }
        records.append({
            "point_id": p.point_id,
            "stratum_id": p.stratum_id,
            "event": p.event,
            "measured_on": p.measured_on,
            "n_layers": int(p.rows.size),
            "sampled_depth_cm": p.sampled_depth_cm,
            **stock,
            "tco2e_per_ha": stock["soc_t_c_per_ha"] * C_TO_CO2.value,
            "row": int(p.rows[0]),
        })
    return pd.DataFrame.from_records(records, columns=list(PROFILE_COLUMNS))


# ---------------------------------------------------------------- findings


def _truncation_findings(
    profiles: list[Profile], depth_cm: float, shallowest: Profile, cell: Callable[[str, int], str]
) -> list[Finding]:
    deeper = [p for p in profiles if p.usable and p.sampled_depth_cm > depth_cm]
    if not deeper:
        return []
    return [Finding(
        "warning", "soil_profiles_truncated", cell("depth_bottom_cm", shallowest.deepest_row),
        f"The profile of {_profile_label(shallowest.point_id, shallowest.event)} reaches only "
        f"{depth_cm:g} cm, the shallowest profile, so stocks are compared to {depth_cm:g} cm: "
        f"{len(deeper)} deeper profile(s) were cut at that depth (the layer crossing it counts by "
        "its linear share). Sample every point to the same depth, or check this profile.",
    )]


def _extrapolation_findings(
    profiles: list[Profile], stocks: pd.DataFrame, reference_t_per_ha: float,
    cell: Callable[[str, int], str],
) -> list[Finding]:
    extra = stocks["extrapolated_mass_t_per_ha"].to_numpy(dtype=float)
    hit = np.flatnonzero(np.nan_to_num(extra) > 0.0)
    if hit.size == 0:
        return []
    worst = int(hit[np.argmax(extra[hit])])
    profile = profiles[worst]
    return [Finding(
        "warning", "esm_extrapolated", cell("depth_bottom_cm", profile.deepest_row),
        f"{hit.size} profile(s) hold less fine-earth mass than the reference mass of "
        f"{reference_t_per_ha:.6g} t/ha; their SOC was extrapolated beyond the deepest layer at that "
        f"layer's concentration. The largest extrapolation is {extra[worst]:.6g} t/ha "
        f"({extra[worst] / reference_t_per_ha * 100:.3g} % of the reference mass), "
        f"{_profile_label(profile.point_id, profile.event)}. Sampling one layer deeper at every "
        "point avoids it.",
    )]


# ---------------------------------------------------------------- the pathway


def _methods(method: str, depth_cm: float, reference_t_per_ha: float) -> list[dict[str, Any]]:
    methods: list[dict[str, Any]] = [
        {"name": "Soil method", "value": method, "unit": "", "source": "Project sheet, soil_method"},
        {"name": "SOC stock per layer",
         "value": "soc_pct/100 x bulk_density_g_cm3 x thickness_cm x (1 - coarse_fragments_pct/100) x 100",
         "unit": "t C/ha", "source": "Accounting chain design, section 1 (soil); fine-earth bulk density"},
        {"name": "Common depth", "value": depth_cm, "unit": "cm",
         "source": "Shallowest total depth sampled by the usable profiles of the first and last events"},
    ]
    if method == "equivalent_soil_mass":
        methods += [
            {"name": "Fine-earth mass per layer",
             "value": "bulk_density_g_cm3 x thickness_cm x (1 - coarse_fragments_pct/100) x 100",
             "unit": "t/ha", "source": ELLERT_BETTANY_1995},
            {"name": "Reference fine-earth mass", "value": reference_t_per_ha, "unit": "t/ha",
             "source": "Mean cumulative fine-earth mass of the first event's profiles at the common depth "
                       f"(accounting chain design, section 1); {WENDT_HAUSER_2013}"},
            {"name": "Equivalent soil mass interpolation",
             "value": "linear between cumulative (fine-earth mass, SOC) points from (0, 0); beyond the "
                      "deepest layer, continued at the deepest layer's SOC concentration (warning "
                      "esm_extrapolated); no spline",
             "unit": "t C/ha", "source": f"{ELLERT_BETTANY_1995}; {WENDT_HAUSER_2013}"},
        ]
    else:
        methods.append(
            {"name": "Profile stock to the common depth",
             "value": "sum of layer stocks; the layer crossing the common depth counts by its linear share",
             "unit": "t C/ha", "source": "Accounting chain design, section 1 (soil)"}
        )
    return methods + [C_TO_CO2.to_method(), *SAMPLING_METHODS]


def quantify(
    book: Any,
    first_event: str,
    last_event: str,
    confidence_pct: float,
    method: str | None = None,
) -> PathwayEstimate:
    """Gross removals of a validated soil workbook (accounting design, section 1).

    SoilSamples -> profile SOC stocks (fixed depth or equivalent soil mass,
    ``method`` defaulting to the Project's ``soil_method``) -> tCO2e/ha ->
    stratified change between ``first_event`` and ``last_event``
    (:func:`verify.sampling.stratified_change`). Never raises on bad data:
    unusable profiles get no value and a finding.
    """
    method = method or book.project.get("soil_method") or "fixed_depth"
    samples = book.table(SHEET)

    def cell(column: str, row: int) -> str:
        return book.cell(SHEET, column, row)

    profiles = build_profiles(samples, (first_event, last_event))
    depth_cm, shallowest = common_depth(profiles)
    reference = float("nan")
    findings: list[Finding] = []
    if method == "equivalent_soil_mass":
        reference = reference_mass_t_per_ha(profiles, first_event, depth_cm)
        stocks = profile_stocks(profiles, lambda p: _esm_row(p, reference))
        findings += _extrapolation_findings(profiles, stocks, reference, cell)
    else:
        stocks = profile_stocks(profiles, lambda p: _fixed_depth_row(p, depth_cm))
        if shallowest is not None:
            findings += _truncation_findings(profiles, depth_cm, shallowest, cell)
    units = stocks.rename(columns={"point_id": "unit_id", "tco2e_per_ha": "value_per_ha"})
    areas = dict(zip(book.table("Strata")["stratum_id"], book.table("Strata")["area_ha"]))
    change = stratified_change(units, areas, first_event, last_event, confidence_pct, sheet=SHEET)
    return PathwayEstimate(
        gross_from_change(change),
        strata_rows(change),
        _methods(method, depth_cm, reference),
        findings + change.findings,
        units=stocks,
    )
