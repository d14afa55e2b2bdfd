"""Refractive index of air: the Ciddor (1996) equation and the modified Edlén equation.

Both take the **vacuum** wavelength. Temperature is in °C (as in the published
equations; T = t + 273.15 K), pressure in Pa, relative humidity in percent
(over water) and the CO₂ mole fraction in µmol/mol.

The saturation vapour pressure defaults to the NIST (IAPWS) form, over ice below
0 °C, so that the NIST Engineering Metrology Toolbox table is reproduced;
``saturation="davis"`` selects the Davis (1992) form used in Ciddor's paper.

References
----------
P. E. Ciddor, "Refractive index of air: new equations for the visible and near
infrared", Appl. Opt. 35, 1566-1573 (1996), doi:10.1364/AO.35.001566.
P. Giacomo, Metrologia 18, 33-40 (1982); R. S. Davis, Metrologia 29, 67-70 (1992)
(BIPM moist-air density equation used by Ciddor).
K. P. Birch and M. J. Downs, Metrologia 30, 155-162 (1993) and 31, 315-316 (1994)
(updated Edlén equation); J. A. Stone and J. H. Zimmerman, "Index of Refraction of
Air", NIST Engineering Metrology Toolbox (modified Edlén with the 292.75/T water
term, and the IAPWS saturation-vapour-pressure form).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..units import Uncertain
from ._measurement import Measurement, Reference, propagate

__all__ = [
    "STANDARD_CONDITIONS",
    "saturation_vapour_pressure",
    "water_mole_fraction",
    "compressibility",
    "air_index_ciddor",
    "air_index_edlen",
    "air_index",
    "derive_air_index",
    "vacuum_to_air_wavelength",
    "air_to_vacuum_wavelength",
    "GAS_CONSTANT",
    "AirConditions",
    "air_conditions",
]

#: Default conditions used when the user states none (reported in every result).
STANDARD_CONDITIONS = {"temperature_C": 20.0, "pressure_Pa": 101325.0, "humidity_percent": 50.0,
                       "co2_ppm": 450.0}

#: Gas constant of the NIST implementation (it cancels in Ciddor's density ratios).
GAS_CONSTANT = Reference(8.314472, 0.0, "J/(mol K)", "NIST Engineering Metrology Toolbox (Stone & Zimmerman)")

# Ciddor (1996) dispersion of standard air and of water vapour (S in µm^-2).
_K0, _K1, _K2, _K3 = 238.0185, 5792105.0, 57.362, 167917.0
_W0, _W1, _W2, _W3 = 295.235, 2.6422, -0.032380, 0.004028
# BIPM-1981/91 compressibility coefficients.
_A0, _A1, _A2 = 1.58123e-6, -2.9331e-8, 1.1043e-10
_B0, _B1 = 5.707e-6, -2.051e-8
_C0, _C1 = 1.9898e-4, -2.376e-6
_D, _E = 1.83e-11, -0.765e-8
_MW = 0.018015
# NIST / IAPWS saturation vapour pressure over water.
_K = (1.16705214528e3, -7.24213167032e5, -1.70738469401e1, 1.20208247025e4, -3.23255503223e6,
      1.49151086135e1, -4.82326573616e3, 4.05113405421e5, -2.38555575678e-1, 6.50175348448e2)
# Modified Edlén (Birch & Downs 1993/94, NIST form).
_EA, _EB, _EC, _ED, _EE, _EF, _EG = 8342.54, 2406147.0, 15998.0, 96095.43, 0.601, 0.00972, 0.003661


def _check(wavelength_m, temperature_C, pressure_Pa, humidity_percent, co2_ppm) -> None:
    lam = np.asarray(wavelength_m, dtype=float)
    if np.any(lam < 0.2e-6) or np.any(lam > 2.5e-6):
        raise InputError("air index: vacuum wavelength outside 0.2-2.5 um (the equations are fitted "
                         "for 0.3-1.7 um); check the unit, e.g. --wavelength 632.991nm")
    t = np.asarray(temperature_C, dtype=float)
    if np.any(t < -60) or np.any(t > 150):
        raise InputError("air index: temperature outside -60..150 degC; check the unit, e.g. --temperature 20degC")
    p = np.asarray(pressure_Pa, dtype=float)
    if np.any(p < 0) or np.any(p > 300e3):
        raise InputError("air index: pressure outside 0..300 kPa; check the unit, e.g. --pressure 101.325kPa")
    h = np.asarray(humidity_percent, dtype=float)
    if np.any(h < 0) or np.any(h > 100):
        raise InputError("air index: relative humidity outside 0..100 %; e.g. --humidity 45%")
    c = np.asarray(co2_ppm, dtype=float)
    if np.any(c < 0) or np.any(c > 1e5):
        raise InputError("air index: CO2 mole fraction outside 0..100000 umol/mol; e.g. --co2 450ppm")


def saturation_vapour_pressure(temperature_C, *, saturation: str = "nist"):
    """Saturation vapour pressure in Pa.

    Parameters
    ----------
    temperature_C : float or ndarray
        Temperature in °C.
    saturation : {"nist", "davis"}
        ``"nist"``: IAPWS form over water, and over ice below 0 °C (NIST toolbox).
        ``"davis"``: Davis (1992) form over water, as in Ciddor (1996).
    """
    t = np.asarray(temperature_C, dtype=float)
    T = t + 273.15
    if saturation == "davis":
        return np.exp(1.2378847e-5 * T**2 - 1.9121316e-2 * T + 33.93711047 - 6.3431645e3 / T)
    if saturation != "nist":
        raise InputError(f"saturation vapour pressure variant {saturation!r} unknown; use 'nist' or 'davis'")
    om = T + _K[8] / (T - _K[9])
    a = om**2 + _K[0] * om + _K[1]
    b = _K[2] * om**2 + _K[3] * om + _K[4]
    c = _K[5] * om**2 + _K[6] * om + _K[7]
    x = -b + np.sqrt(b**2 - 4 * a * c)
    water = 1e6 * (2 * c / x) ** 4
    theta = T / 273.16
    ice = 611.657 * np.exp(-13.928169 * (1 - theta**-1.5) + 34.7078238 * (1 - theta**-1.25))
    return np.where(t < 0, ice, water)


def water_mole_fraction(temperature_C, pressure_Pa, humidity_percent=0.0, *,
                        vapour_pressure_Pa=None, saturation: str = "nist"):
    """Mole fraction of water vapour x_w = f·p_w/p (Ciddor 1996, enhancement factor f).

    ``vapour_pressure_Pa`` (partial pressure), when given, replaces the humidity.
    """
    t = np.asarray(temperature_C, dtype=float)
    p = np.asarray(pressure_Pa, dtype=float)
    if vapour_pressure_Pa is None:
        pw = np.asarray(humidity_percent, dtype=float) / 100.0 * saturation_vapour_pressure(t, saturation=saturation)
    else:
        pw = np.asarray(vapour_pressure_Pa, dtype=float)
    f = 1.00062 + 3.14e-8 * p + 5.6e-7 * t**2
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(p > 0, f * pw / np.where(p > 0, p, 1.0), 0.0)


def compressibility(temperature_C, pressure_Pa, water_fraction):
    """Compressibility factor Z of moist air (BIPM-1981/91 equation)."""
    t = np.asarray(temperature_C, dtype=float)
    T = t + 273.15
    p = np.asarray(pressure_Pa, dtype=float)
    xw = np.asarray(water_fraction, dtype=float)
    return (1 - (p / T) * (_A0 + _A1 * t + _A2 * t**2 + (_B0 + _B1 * t) * xw + (_C0 + _C1 * t) * xw**2)
            + (p / T) ** 2 * (_D + _E * xw**2))


def air_index_ciddor(wavelength_m, temperature_C, pressure_Pa, humidity_percent=0.0, co2_ppm=450.0, *,
                     vapour_pressure_Pa=None, saturation: str = "nist"):
    """Refractive index of moist air by the Ciddor (1996) equation.

    Parameters
    ----------
    wavelength_m : float or ndarray
        **Vacuum** wavelength in m (fitted range 0.3-1.69 µm).
    temperature_C : float or ndarray
        Air temperature in °C (−40 to +100).
    pressure_Pa : float or ndarray
        Total pressure in Pa (80-120 kPa validated; lower pressures follow the density law).
    humidity_percent : float or ndarray
        Relative humidity in percent (over water; over ice below 0 °C with ``saturation="nist"``).
    co2_ppm : float or ndarray
        CO₂ mole fraction in µmol/mol.
    vapour_pressure_Pa : float or ndarray, optional
        Water-vapour partial pressure in Pa; replaces ``humidity_percent``.
    saturation : {"nist", "davis"}
        Saturation-vapour-pressure form (see :func:`saturation_vapour_pressure`).

    Returns
    -------
    float or ndarray
        n (not n − 1).

    Notes
    -----
    Steps 1-10 of Ciddor (1996): standard-air and water-vapour dispersion, CO₂
    correction, BIPM densities with compressibility Z, then
    n − 1 = (ρ_a/ρ_axs)(n_axs − 1) + (ρ_w/ρ_ws)(n_ws − 1). The gas constant cancels.
    """
    _check(wavelength_m, temperature_C, pressure_Pa, humidity_percent, co2_ppm)
    s = 1.0 / (np.asarray(wavelength_m, dtype=float) * 1e6) ** 2
    t = np.asarray(temperature_C, dtype=float)
    T = t + 273.15
    p = np.asarray(pressure_Pa, dtype=float)
    xc = np.asarray(co2_ppm, dtype=float)
    n_as = 1e-8 * (_K1 / (_K0 - s) + _K3 / (_K2 - s))
    n_axs = n_as * (1 + 0.534e-6 * (xc - 450.0))
    n_ws = 1e-8 * 1.022 * (_W0 + _W1 * s + _W2 * s**2 + _W3 * s**3)
    ma = 1e-3 * (28.9635 + 12.011e-6 * (xc - 400.0))
    r = GAS_CONSTANT.value
    xw = water_mole_fraction(t, p, humidity_percent, vapour_pressure_Pa=vapour_pressure_Pa, saturation=saturation)
    rho_axs = 101325.0 * ma / (compressibility(15.0, 101325.0, 0.0) * r * 288.15)
    rho_ws = 1333.0 * _MW / (compressibility(20.0, 1333.0, 1.0) * r * 293.15)
    z = compressibility(t, p, xw)
    rho_a = p * ma * (1 - xw) / (z * r * T)
    rho_w = p * _MW * xw / (z * r * T)
    n = 1 + (rho_a / rho_axs) * n_axs + (rho_w / rho_ws) * n_ws
    return float(n) if np.ndim(n) == 0 else n


def air_index_edlen(wavelength_m, temperature_C, pressure_Pa, humidity_percent=0.0, co2_ppm=450.0, *,
                    vapour_pressure_Pa=None, saturation: str = "nist"):
    """Refractive index of moist air by the modified Edlén equation (NIST form).

    Birch & Downs (1993, 1994) with NIST's water term
    −1e-10 (292.75/T)(3.7345 − 0.0401 S) p_v. Parameters as :func:`air_index_ciddor`.
    The equation is written for 450 µmol/mol CO₂; ``co2_ppm`` is only range-checked
    (use Ciddor for other CO₂ contents).
    """
    _check(wavelength_m, temperature_C, pressure_Pa, humidity_percent, co2_ppm)
    s = 1.0 / (np.asarray(wavelength_m, dtype=float) * 1e6) ** 2
    t = np.asarray(temperature_C, dtype=float)
    T = t + 273.15
    p = np.asarray(pressure_Pa, dtype=float)
    if vapour_pressure_Pa is None:
        pv = np.asarray(humidity_percent, dtype=float) / 100.0 * saturation_vapour_pressure(t, saturation=saturation)
    else:
        pv = np.asarray(vapour_pressure_Pa, dtype=float)
    ns = 1e-8 * (_EA + _EB / (130.0 - s) + _EC / (38.9 - s))
    x = (1 + 1e-8 * (_EE - _EF * t) * p) / (1 + _EG * t)
    ntp = p * ns * x / _ED
    n = 1 + ntp - 1e-10 * (292.75 / T) * (3.7345 - 0.0401 * s) * pv
    return float(n) if np.ndim(n) == 0 else n


_EQUATIONS = {"ciddor": air_index_ciddor, "edlen": air_index_edlen}


def air_index(wavelength_m, temperature_C, pressure_Pa, humidity_percent=0.0, co2_ppm=450.0, *,
              equation: str = "ciddor", saturation: str = "nist"):
    """Refractive index of air by ``equation`` (``"ciddor"`` or ``"edlen"``)."""
    try:
        fn = _EQUATIONS[equation]
    except KeyError:
        raise InputError(f"air-index equation {equation!r} unknown; use 'ciddor' or 'edlen'") from None
    return fn(wavelength_m, temperature_C, pressure_Pa, humidity_percent, co2_ppm, saturation=saturation)


def derive_air_index(wavelength_m: Uncertain | float, temperature_K: Uncertain | float,
                     pressure_Pa: Uncertain | float, humidity_percent: Uncertain | float = 0.0,
                     co2_ppm: Uncertain | float = 450.0, *, equation: str = "ciddor",
                     saturation: str = "nist") -> Measurement:
    """Air index with its 1-sigma from the sigmas of the conditions.

    Parameters use the canonical units of :mod:`fringecount.units` (temperature in K).
    The uncertainty of the equation itself (a few 1e-8, Ciddor 1996) is not included.

    Returns
    -------
    Measurement
        n, dimensionless (unit ``""``), with a budget over wavelength, temperature,
        pressure, humidity and CO₂.
    """
    def f(wavelength_m, temperature_K, pressure_Pa, humidity_percent, co2_ppm):
        return air_index(wavelength_m, temperature_K - 273.15, pressure_Pa, humidity_percent, co2_ppm,
                         equation=equation, saturation=saturation)

    return propagate(f, {"wavelength_m": wavelength_m, "temperature_K": temperature_K,
                         "pressure_Pa": pressure_Pa, "humidity_percent": humidity_percent,
                         "co2_ppm": co2_ppm}, "", note=f"{equation} equation, vacuum wavelength")


def vacuum_to_air_wavelength(wavelength_m: float, temperature_C: float = 20.0, pressure_Pa: float = 101325.0,
                             humidity_percent: float = 50.0, co2_ppm: float = 450.0) -> float:
    """Air wavelength λ_vac / n_air (Ciddor) in m, for the stated conditions."""
    return float(wavelength_m) / air_index_ciddor(wavelength_m, temperature_C, pressure_Pa, humidity_percent,
                                                  co2_ppm)


def air_to_vacuum_wavelength(wavelength_air_m: float, temperature_C: float = 20.0, pressure_Pa: float = 101325.0,
                             humidity_percent: float = 50.0, co2_ppm: float = 450.0) -> float:
    """Vacuum wavelength λ_air·n_air in m (fixed-point iteration on Ciddor, converges to 1e-15)."""
    lam = float(wavelength_air_m)
    for _ in range(4):
        lam = wavelength_air_m * air_index_ciddor(lam, temperature_C, pressure_Pa, humidity_percent, co2_ppm)
    return lam



@dataclass(frozen=True)
class AirConditions:
    """Ambient air along the beam, in canonical units, each with its 1-sigma.

    ``assumed`` lists the conditions that were not stated and took the defaults of
    :data:`STANDARD_CONDITIONS` (reported in every result's notes).
    """

    temperature_K: Uncertain = Uncertain(293.15)
    pressure_Pa: Uncertain = Uncertain(101325.0)
    humidity_percent: Uncertain = Uncertain(50.0)
    co2_ppm: Uncertain = Uncertain(450.0)
    assumed: tuple[str, ...] = ()

    def as_inputs(self) -> dict[str, Uncertain]:
        """The four conditions as keyword inputs for :func:`propagate`."""
        return {"temperature_K": self.temperature_K, "pressure_Pa": self.pressure_Pa,
                "humidity_percent": self.humidity_percent, "co2_ppm": self.co2_ppm}

    def note(self) -> str:
        if not self.assumed:
            return ""
        return ("air conditions not stated, assumed: " + ", ".join(self.assumed)
                + "; give them with +/- uncertainties for a complete budget")


def air_conditions(temperature_K: Uncertain | None = None, pressure_Pa: Uncertain | None = None,
                   humidity_percent: Uncertain | None = None, co2_ppm: Uncertain | None = None) -> AirConditions:
    """Build :class:`AirConditions`, filling what is missing from :data:`STANDARD_CONDITIONS`."""
    assumed = []
    if temperature_K is None:
        temperature_K = Uncertain(STANDARD_CONDITIONS["temperature_C"] + 273.15)
        assumed.append("20 degC")
    if pressure_Pa is None:
        pressure_Pa = Uncertain(STANDARD_CONDITIONS["pressure_Pa"])
        assumed.append("101.325 kPa")
    if humidity_percent is None:
        humidity_percent = Uncertain(STANDARD_CONDITIONS["humidity_percent"])
        assumed.append("50 %RH")
    if co2_ppm is None:
        co2_ppm = Uncertain(STANDARD_CONDITIONS["co2_ppm"])
        assumed.append("450 umol/mol CO2")
    return AirConditions(temperature_K, pressure_Pa, humidity_percent, co2_ppm, tuple(assumed))
