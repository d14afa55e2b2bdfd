"""Gas cell: refractivity of a gas from the fringes counted while filling a cell.

A cell of inner length L in one arm, evacuated and then filled (or ramped in
pressure), counts (double pass)

    n − 1 = N λ_vac / (2L)

at the final pressure p and temperature T. Refractivity is nearly proportional to
density, so it is reduced to reference conditions (p_ref, T_ref) by the ideal-gas
density ratio: (n − 1)_ref = (n − 1)·(p_ref/p)·(T/T_ref). Compressibility bends
this by less than 3e-4 relative for air below 1 atm (REFERENCES §2.5); the
reduction leaves that out. With a pressure log the slope dN/dp of all trusted
frames gives (n − 1)/p = (λ/2L)·dN/dp.

For air, the result is compared with the Ciddor (1996) and modified Edlén
equations at the user's temperature, pressure, humidity and CO₂.

Assumptions: the cell windows do not move or bend with pressure (window
deflection adds a spurious count), the gas temperature is uniform and constant,
the count starts at vacuum (or the pressure log covers the whole ramp).
"""

from __future__ import annotations

from ..errors import InputError
from ..units import Uncertain
from ._measurement import Measurement, propagate
from .air import AirConditions, air_index
from .fit_log import LineFit

__all__ = ["gas_refractivity", "gas_fringes", "reduce_refractivity", "derive_gas_cell", "derive_gas_cell_slope"]


def gas_refractivity(fringes, length_m, wavelength_m):
    """n − 1 = |N| λ_vac / (2L)."""
    return abs(fringes) * wavelength_m / (2 * length_m)


def gas_fringes(refractivity, length_m, wavelength_m):
    """Forward model: N = 2L(n − 1)/λ_vac."""
    return 2 * length_m * refractivity / wavelength_m


def reduce_refractivity(refractivity, temperature_K, pressure_Pa, reference_temperature_K=288.15,
                        reference_pressure_Pa=101325.0):
    """Ideal-gas reduction of n − 1 to reference conditions."""
    return refractivity * (reference_pressure_Pa / pressure_Pa) * (temperature_K / reference_temperature_K)


def _predicted(equation, wavelength_m, air: AirConditions):
    def f(wavelength_m, temperature_K, pressure_Pa, humidity_percent, co2_ppm):
        return air_index(wavelength_m, temperature_K - 273.15, pressure_Pa, humidity_percent, co2_ppm,
                         equation=equation) - 1
    return propagate(f, {"wavelength_m": wavelength_m, **air.as_inputs()}, "",
                     note=f"{equation} equation for air at the stated conditions")


def derive_gas_cell(fringes: Uncertain, length_m: Uncertain, wavelength_m: Uncertain, air: AirConditions, *,
                    reference_temperature_K: float = 288.15,
                    reference_pressure_Pa: float = 101325.0) -> dict[str, Measurement]:
    """Refractivity from a fill of the cell from vacuum to ``air.pressure_Pa``.

    Returns
    -------
    dict
        ``refractivity`` and ``refractive_index`` at the cell conditions,
        ``refractivity_reference`` reduced to (``reference_temperature_K``,
        ``reference_pressure_Pa``), ``refractivity_ciddor`` and
        ``refractivity_edlen`` predicted for air at the cell conditions, all dimensionless.
    """
    if length_m.value <= 0:
        raise InputError("gas cell: --length must be positive, e.g. --length 50mm")
    if air.pressure_Pa.value <= 0:
        raise InputError("gas cell: the fill pressure must be above 0; e.g. --pressure 101.325kPa")
    base = {"fringes": fringes, "length_m": length_m, "wavelength_m": wavelength_m}
    r = propagate(gas_refractivity, base, "", note="n - 1 = N lambda_vac/(2L)")

    def reduced(fringes, length_m, wavelength_m, temperature_K, pressure_Pa):
        return reduce_refractivity(gas_refractivity(fringes, length_m, wavelength_m), temperature_K, pressure_Pa,
                                   reference_temperature_K, reference_pressure_Pa)

    r_ref = propagate(reduced, {**base, "temperature_K": air.temperature_K, "pressure_Pa": air.pressure_Pa}, "",
                      note=f"ideal-gas reduction to {reference_temperature_K - 273.15:g} degC, "
                           f"{reference_pressure_Pa / 1e3:g} kPa")
    return {"refractivity": r,
            "refractive_index": Measurement(1 + r.value, r.uncertainty, "", r.budget, r.note),
            "refractivity_reference": r_ref,
            "refractivity_ciddor": _predicted("ciddor", wavelength_m, air),
            "refractivity_edlen": _predicted("edlen", wavelength_m, air)}


def derive_gas_cell_slope(fit: LineFit, length_m: Uncertain, wavelength_m: Uncertain, air: AirConditions, *,
                          reference_temperature_K: float = 288.15,
                          reference_pressure_Pa: float = 101325.0) -> dict[str, Measurement]:
    """Refractivity from the slope dN/dp (fringes per Pa) of a pressure-ramp fit.

    Returns ``refractivity_per_pressure`` (1/Pa) at the cell temperature,
    ``refractivity`` at ``air.pressure_Pa`` (slope × p, the cell temperature),
    ``refractivity_reference`` (slope × p_ref × T/T_ref) and the Ciddor/Edlén
    predictions at the cell temperature and ``air.pressure_Pa``.
    """
    slope = Uncertain(abs(fit.slope), fit.slope_sigma)
    base = {"slope": slope, "length_m": length_m, "wavelength_m": wavelength_m}

    def per_p(slope, length_m, wavelength_m):
        return slope * wavelength_m / (2 * length_m)

    def at_p(slope, length_m, wavelength_m, pressure_Pa):
        return per_p(slope, length_m, wavelength_m) * pressure_Pa

    def at_ref(slope, length_m, wavelength_m, temperature_K):
        return per_p(slope, length_m, wavelength_m) * reference_pressure_Pa * temperature_K / reference_temperature_K

    rename = lambda m: Measurement(m.value, m.uncertainty, m.unit,  # noqa: E731
                                   tuple(("fit" if k == "slope" else k, v) for k, v in m.budget), m.note)
    r_p = rename(propagate(per_p, base, "1/Pa", note="weighted slope of count against pressure"))
    r = rename(propagate(at_p, {**base, "pressure_Pa": air.pressure_Pa}, "", note="slope x pressure"))
    r_ref = rename(propagate(at_ref, {**base, "temperature_K": air.temperature_K}, "",
                             note=f"ideal-gas reduction to {reference_temperature_K - 273.15:g} degC, "
                                  f"{reference_pressure_Pa / 1e3:g} kPa"))
    return {"refractivity_per_pressure": r_p, "refractivity": r,
            "refractive_index": Measurement(1 + r.value, r.uncertainty, "", r.budget, r.note),
            "refractivity_reference": r_ref,
            "refractivity_ciddor": _predicted("ciddor", wavelength_m, air),
            "refractivity_edlen": _predicted("edlen", wavelength_m, air)}
