"""Mirror displacement from a fringe count, and a drive's sensitivity and hysteresis.

    d = N λ_vac / (p · n_air)

with p = 2 passes for a Michelson arm (the beam goes to the mirror and back), the
**vacuum** wavelength and the air index from the Ciddor equation at the stated
conditions (REFERENCES §3d). Ignoring the air index makes d about 2.7e-4 too long
at room conditions.

Assumptions: the mirror moves along the beam (cosine error not included), the
air index is uniform and constant along the moving path, the count is the whole
signed count between the two positions. The uncertainty of the Ciddor equation
itself (a few 1e-8) is not in the budget.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..units import Uncertain
from ._measurement import Measurement, propagate
from .air import AirConditions, air_index, derive_air_index
from .fit_log import LineFit, weighted_line_fit

__all__ = ["displacement_from_fringes", "derive_displacement", "DriveFit", "fit_drive"]


def displacement_from_fringes(fringes, wavelength_m, air_index_value, passes: int = 2):
    """d = N λ_vac / (passes · n_air), in m (signed like N)."""
    return np.asarray(fringes, dtype=float) * wavelength_m / (passes * air_index_value)


def _displacement(equation, passes):
    def f(fringes, wavelength_m, temperature_K, pressure_Pa, humidity_percent, co2_ppm):
        n = air_index(wavelength_m, temperature_K - 273.15, pressure_Pa, humidity_percent, co2_ppm, equation=equation)
        return float(displacement_from_fringes(fringes, wavelength_m, n, passes))
    return f


def derive_displacement(fringes: Uncertain, wavelength_m: Uncertain, air: AirConditions, *, passes: int = 2,
                        equation: str = "ciddor") -> dict[str, Measurement]:
    """Displacement (m) and the air index used, with their budgets.

    Parameters
    ----------
    fringes : Uncertain
        Signed fringe count.
    wavelength_m : Uncertain
        **Vacuum** wavelength, m.
    air : AirConditions
        Conditions along the path.
    passes : int
        Beam passes over the displacement (2 for a Michelson arm).
    equation : {"ciddor", "edlen"}
        Air-index equation.
    """
    if passes < 1:
        raise InputError("--passes must be a positive whole number (2 for a Michelson arm)")
    inputs = {"fringes": fringes, "wavelength_m": wavelength_m, **air.as_inputs()}
    d = propagate(_displacement(equation, passes), inputs, "m",
                  note=f"d = N lambda_vac/({passes} n_air), n_air by {equation}")
    n = derive_air_index(wavelength_m, air.temperature_K, air.pressure_Pa, air.humidity_percent, air.co2_ppm,
                         equation=equation)
    return {"displacement": d, "refractive_index": n}


@dataclass(frozen=True)
class DriveFit:
    """Displacement against a drive quantity (e.g. piezo voltage).

    ``sensitivity`` is in m per drive unit; ``hysteresis`` is the largest gap (m)
    between the up and down strokes over their common drive range (NaN when the
    log has only one direction); ``fit`` is the count-versus-drive line;
    ``residuals_m`` the fit residuals converted to displacement.
    """

    sensitivity: Measurement
    hysteresis: Measurement
    hysteresis_fraction: float
    fit: LineFit
    residuals_m: np.ndarray
    n_up: int
    n_down: int


def _stroke_curve(x, y):
    order = np.argsort(x, kind="stable")
    xs, ys = x[order], y[order]
    ux, inv = np.unique(xs, return_inverse=True)
    uy = np.bincount(inv, weights=ys) / np.bincount(inv)
    return ux, uy


def fit_drive(drive, fringes, fringes_sigma, wavelength_m: Uncertain, air: AirConditions, *, passes: int = 2,
              equation: str = "ciddor", drive_unit: str = "V") -> DriveFit:
    """Sensitivity (m/drive unit) from a weighted line fit, and up/down-stroke hysteresis.

    Parameters
    ----------
    drive, fringes, fringes_sigma : (K,) arrays
        Drive value, cumulative count and its 1-sigma for each trusted frame, in time order.
    wavelength_m : Uncertain
        Vacuum wavelength, m.
    air : AirConditions
    drive_unit : str
        Unit of the drive values, used in the sensitivity's unit (``"m/V"``).

    Notes
    -----
    Strokes are split by the sign of the drive's change between frames. The
    hysteresis compares the two strokes interpolated on a common grid of 200
    drive values; its sigma is taken as √2 times the median count sigma
    converted to displacement.
    """
    x = np.asarray(drive, dtype=float)
    y = np.asarray(fringes, dtype=float)
    fit = weighted_line_fit(x, y, fringes_sigma)
    n_air = air_index(wavelength_m.value, air.temperature_K.value - 273.15, air.pressure_Pa.value,
                      air.humidity_percent.value, air.co2_ppm.value, equation=equation)
    per_fringe = wavelength_m.value / (passes * n_air)
    inputs = {"fringes": Uncertain(fit.slope, fit.slope_sigma), "wavelength_m": wavelength_m, **air.as_inputs()}
    sens = propagate(_displacement(equation, passes), inputs, f"m/{drive_unit}",
                     note="weighted least-squares slope of count against drive")
    sens = Measurement(sens.value, sens.uncertainty, sens.unit,
                       tuple(("fit" if k == "fringes" else k, v) for k, v in sens.budget), sens.note)
    step = np.gradient(x)
    up, down = step > 0, step < 0
    hyst = float("nan")
    frac = float("nan")
    if up.sum() >= 2 and down.sum() >= 2:
        xu, yu = _stroke_curve(x[up], y[up])
        xd, yd = _stroke_curve(x[down], y[down])
        lo, hi = max(xu[0], xd[0]), min(xu[-1], xd[-1])
        if hi > lo:
            grid = np.linspace(lo, hi, 200)
            gap = np.interp(grid, xu, yu) - np.interp(grid, xd, yd)
            hyst = float(np.max(np.abs(gap)) * per_fringe)
            span = float(np.ptp(y) * per_fringe)
            frac = hyst / span if span > 0 else float("nan")
    sig = np.asarray(fringes_sigma, dtype=float) if fringes_sigma is not None else np.array([np.nan])
    sig_count = float(np.nanmedian(sig)) if np.any(np.isfinite(sig)) else fit.rms_residual
    hyst_sigma = float(np.sqrt(2) * sig_count * per_fringe)
    return DriveFit(sens, Measurement(hyst, hyst_sigma, "m", (("count", hyst_sigma),),
                                      "largest up/down stroke gap"),
                    frac, fit, fit.residuals * per_fringe, int(up.sum()), int(down.sum()))
