"""Above-ground biomass of single trees from allometric models (vectorised).

The four model forms are the ones the workbook's ``Allometry`` sheet allows
(see the design note on the input workbook). Units throughout: diameter at
breast height D in cm, total height H in m, wood density rho in g/cm3, result
in kg of above-ground dry matter.

Reference case: Chave, J. et al. (2014) Improved allometric models to estimate
the aboveground biomass of tropical trees. Global Change Biology 20:3177-3190,
Eq. 4: AGB = 0.0673 * (rho * D^2 * H)^0.976, which is the ``density_height``
form with a = 0.0673 and b = 0.976.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

FORMS: tuple[str, ...] = ("power", "power_height", "density_height", "log_power")

_FORMS_WITH_HEIGHT = frozenset({"power_height", "density_height"})
_FORMS_WITH_DENSITY = frozenset({"density_height"})


def needs_height(form: str) -> bool:
    """True when the model form uses total tree height H (m)."""
    return form in _FORMS_WITH_HEIGHT


def needs_density(form: str) -> bool:
    """True when the model form uses wood density rho (g/cm3)."""
    return form in _FORMS_WITH_DENSITY


def agb_kg(
    form: str,
    a: ArrayLike,
    b: ArrayLike,
    c: ArrayLike,
    dbh_cm: ArrayLike,
    height_m: ArrayLike | None = None,
    wood_density_g_cm3: ArrayLike | None = None,
) -> np.ndarray:
    """Above-ground biomass (kg dry matter) per tree for one model form.

    Forms (workbook contract, ``Allometry`` sheet):

    - ``power``: a * D^b
    - ``power_height``: a * (D^2 * H)^b
    - ``density_height``: a * (rho * D^2 * H)^b  (Chave et al. 2014, Global
      Change Biology 20:3177-3190, Eq. 4 with a = 0.0673, b = 0.976)
    - ``log_power``: exp(a + b * ln D) * c, c being a correction factor
      (e.g. for log-transformation bias); a blank (NaN) c means 1.

    ``c`` is used only by ``log_power``. All arguments broadcast, so one call
    can evaluate many trees with per-tree coefficients. Physically impossible
    or blank inputs (negative D, H or rho; NaN) give NaN, never an exception.

    Raises ValueError for an unknown form, or when the form needs height or
    density and the argument was not passed at all (a caller error, not a
    data problem).
    """
    if form not in FORMS:
        raise ValueError(f"unknown allometric form {form!r}; expected one of {FORMS}")
    a_arr = np.asarray(a, dtype=float)
    b_arr = np.asarray(b, dtype=float)
    d = _non_negative(dbh_cm)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        if form == "power":
            return a_arr * d**b_arr
        if form == "log_power":
            c_arr = np.asarray(c, dtype=float)
            correction = np.where(np.isnan(c_arr), 1.0, c_arr)
            return np.exp(a_arr + b_arr * np.log(d)) * correction
        h = _required(height_m, "height_m", form)
        if form == "power_height":
            return a_arr * (d**2 * h) ** b_arr
        rho = _required(wood_density_g_cm3, "wood_density_g_cm3", form)
        return a_arr * (rho * d**2 * h) ** b_arr


def _required(values: ArrayLike | None, name: str, form: str) -> np.ndarray:
    if values is None:
        raise ValueError(f"form {form!r} needs {name}")
    return _non_negative(values)


def _non_negative(values: ArrayLike) -> np.ndarray:
    """Values as float, negative ones replaced by NaN (squaring would hide the sign)."""
    arr = np.asarray(values, dtype=float)
    return np.where(arr < 0, np.nan, arr)


def outside_valid_range(
    dbh_cm: ArrayLike, min_dbh_cm: ArrayLike, max_dbh_cm: ArrayLike
) -> np.ndarray:
    """Boolean array: True where D lies outside [min_dbh_cm, max_dbh_cm].

    The range is the diameter range of the data the model was fitted on; a
    tree outside it is an extrapolation. A NaN limit means no limit on that
    side; a NaN diameter is never flagged (there is nothing to compare).
    """
    d = np.asarray(dbh_cm, dtype=float)
    lo = np.asarray(min_dbh_cm, dtype=float)
    hi = np.asarray(max_dbh_cm, dtype=float)
    below = ~np.isnan(lo) & (d < lo)
    above = ~np.isnan(hi) & (d > hi)
    return np.asarray(below | above, dtype=bool)
