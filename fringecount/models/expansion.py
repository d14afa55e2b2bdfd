"""Thermal expansion coefficient from the fringes counted while heating a specimen.

The specimen's free end carries (or is) the moving mirror; heating it by ΔT
lengthens it by ΔL, which a double-pass Michelson arm counts as

    ΔL = N λ_vac / (2 n_air),    α = ΔL / (L₀ ΔT)

(REFERENCES §3f). With a temperature log the slope dN/dT of all trusted frames
gives α = (dN/dT)·λ_vac/(2 n_air L₀), the mean coefficient over the logged range.

Assumptions: only the specimen expands (mount and reference-arm expansion are
not corrected: measure them with a blank run), the specimen is at a uniform
temperature when read, the air index on the path stays constant (a heated air
path changes it: keep the beam out of the furnace's hot air or correct for it).
The quoted α is the mean over ΔT, not the instantaneous coefficient.
"""

from __future__ import annotations

from ..errors import InputError
from ..units import Uncertain
from ._measurement import Measurement, propagate
from .air import AirConditions, air_index
from .displacement import derive_displacement, displacement_from_fringes
from .fit_log import LineFit

__all__ = ["expansion_coefficient", "derive_expansion", "derive_expansion_slope"]


def expansion_coefficient(fringes, wavelength_m, air_index_value, length_m, delta_t_K, passes: int = 2):
    """α = N λ_vac / (passes · n_air · L₀ · ΔT), in 1/K."""
    return displacement_from_fringes(fringes, wavelength_m, air_index_value, passes) / (length_m * delta_t_K)


def _alpha(equation, passes):
    def f(fringes, wavelength_m, length_m, delta_t_K, temperature_K, pressure_Pa, humidity_percent, co2_ppm):
        n = air_index(wavelength_m, temperature_K - 273.15, pressure_Pa, humidity_percent, co2_ppm, equation=equation)
        return float(expansion_coefficient(fringes, wavelength_m, n, length_m, delta_t_K, passes))
    return f


def derive_expansion(fringes: Uncertain, length_m: Uncertain, delta_t_K: Uncertain, wavelength_m: Uncertain,
                     air: AirConditions, *, passes: int = 2, equation: str = "ciddor") -> dict[str, Measurement]:
    """Mean expansion coefficient (1/K), the length change (m) and the air index used.

    Parameters
    ----------
    fringes : Uncertain
        Signed count over the heating (negative for a contraction).
    length_m : Uncertain
        Specimen length L₀ at the start temperature, m.
    delta_t_K : Uncertain
        Temperature change ΔT, K (a difference; ``10K`` or ``10degC`` on the CLI).
    wavelength_m : Uncertain
        **Vacuum** wavelength, m.
    air : AirConditions
        Conditions on the (unheated) beam path.
    """
    if length_m.value <= 0:
        raise InputError("expansion: --length must be positive, e.g. --length 50mm")
    if delta_t_K.value == 0:
        raise InputError("expansion: --delta-t is zero; give the temperature change, e.g. --delta-t 10K")
    inputs = {"fringes": fringes, "wavelength_m": wavelength_m, "length_m": length_m, "delta_t_K": delta_t_K,
              **air.as_inputs()}
    alpha = propagate(_alpha(equation, passes), inputs, "1/K",
                      note=f"alpha = N lambda_vac/({passes} n_air L0 dT)")
    d = derive_displacement(fringes, wavelength_m, air, passes=passes, equation=equation)
    return {"expansion_coefficient": alpha, "displacement": d["displacement"],
            "refractive_index": d["refractive_index"]}


def derive_expansion_slope(fit: LineFit, length_m: Uncertain, wavelength_m: Uncertain, air: AirConditions, *,
                           passes: int = 2, equation: str = "ciddor") -> dict[str, Measurement]:
    """Mean α from the slope dN/dT (fringes per K) of a temperature-log fit."""
    inputs = {"fringes": Uncertain(fit.slope, fit.slope_sigma), "wavelength_m": wavelength_m,
              "length_m": length_m, "delta_t_K": 1.0, **air.as_inputs()}
    a = propagate(_alpha(equation, passes), inputs, "1/K", note="weighted slope of count against temperature")
    a = Measurement(a.value, a.uncertainty, a.unit,
                    tuple(("fit" if k == "fringes" else k, v) for k, v in a.budget), a.note)
    return {"expansion_coefficient": a}
