"""Dispersion models n(λ): Sellmeier and Cauchy forms and a small catalogue.

All catalogue entries give the index **relative to air** with the wavelength
**in air**, as glass catalogues and Malitson's measurements do. That is the index
a plate in an air-filled interferometer shows (REFERENCES §1: the OPD change is
2t(n_glass − n_air) = 2t·n_air·(n_rel − 1)). Evaluate them at air wavelengths.

Wavelengths are in metres at the interface and in micrometres inside the
formulas (as published).

References
----------
I. H. Malitson, J. Opt. Soc. Am. 55, 1205-1208 (1965) (fused silica).
SCHOTT optical glass data sheet, Zemax catalogue 2017-01-20 (N-BK7).
I. H. Malitson, Appl. Opt. 2, 1103-1107 (1963) (CaF2).
I. H. Malitson, J. Opt. Soc. Am. 52, 1377-1379 (1962) (sapphire, ordinary ray).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ..errors import InputError

__all__ = ["Sellmeier", "Cauchy", "CATALOGUE", "get_material", "material_names", "parse_coefficients"]


@dataclass(frozen=True)
class Sellmeier:
    """n² − 1 = Σᵢ Bᵢ λ² / (λ² − Cᵢ), λ in µm, Cᵢ in µm² (already squared).

    Parameters
    ----------
    b : tuple of float
        Oscillator strengths Bᵢ.
    c_um2 : tuple of float
        Cᵢ in µm². If a source gives resonance wavelengths λᵢ, pass λᵢ².
    name, source : str
        Display name and bibliographic source.
    temperature_C : float
        Temperature the coefficients belong to.
    range_um : (float, float)
        Fitted wavelength range in µm.
    """

    b: tuple[float, ...]
    c_um2: tuple[float, ...]
    name: str = "user Sellmeier"
    source: str = "user-given coefficients"
    temperature_C: float = float("nan")
    range_um: tuple[float, float] = (0.0, float("inf"))

    def index(self, wavelength_m):
        """Phase index n at ``wavelength_m`` (air wavelength for catalogue entries)."""
        lam2 = (np.asarray(wavelength_m, dtype=float) * 1e6) ** 2
        return np.sqrt(1 + sum(b * lam2 / (lam2 - c) for b, c in zip(self.b, self.c_um2)))

    def dn_dlambda(self, wavelength_m):
        """dn/dλ in 1/m (analytic: −(1/n) Σ Bᵢ Cᵢ λ/(λ² − Cᵢ)²)."""
        lam = np.asarray(wavelength_m, dtype=float) * 1e6
        lam2 = lam**2
        d_um = -sum(b * c * lam / (lam2 - c) ** 2 for b, c in zip(self.b, self.c_um2)) / self.index(wavelength_m)
        return d_um * 1e6

    def group_index(self, wavelength_m):
        """Group index n_g = n − λ dn/dλ."""
        return self.index(wavelength_m) - np.asarray(wavelength_m, dtype=float) * self.dn_dlambda(wavelength_m)


@dataclass(frozen=True)
class Cauchy:
    """n = A + B/λ² + C/λ⁴ + ..., λ in µm; ``coefficients`` = (A, B, C, ...)."""

    coefficients: tuple[float, ...]
    name: str = "user Cauchy"
    source: str = "user-given coefficients"
    temperature_C: float = float("nan")
    range_um: tuple[float, float] = (0.0, float("inf"))

    def index(self, wavelength_m):
        lam = np.asarray(wavelength_m, dtype=float) * 1e6
        return sum(a * lam ** (-2 * k) for k, a in enumerate(self.coefficients))

    def dn_dlambda(self, wavelength_m):
        lam = np.asarray(wavelength_m, dtype=float) * 1e6
        return 1e6 * sum(-2 * k * a * lam ** (-2 * k - 1) for k, a in enumerate(self.coefficients) if k)

    def group_index(self, wavelength_m):
        return self.index(wavelength_m) - np.asarray(wavelength_m, dtype=float) * self.dn_dlambda(wavelength_m)


def _sq(*lams: float) -> tuple[float, ...]:
    return tuple(x * x for x in lams)


#: Built-in materials (index relative to air, air wavelength). Keys are canonical names.
CATALOGUE: dict[str, Sellmeier] = {
    "fused-silica": Sellmeier(
        (0.6961663, 0.4079426, 0.8974794), _sq(0.0684043, 0.1162414, 9.896161),
        "fused silica", "Malitson, J. Opt. Soc. Am. 55, 1205 (1965)", 20.0, (0.21, 3.71)),
    "N-BK7": Sellmeier(
        (1.03961212, 0.231792344, 1.01046945), (0.00600069867, 0.0200179144, 103.560653),
        "N-BK7", "SCHOTT optical glass data sheet (Zemax catalogue 2017-01-20)", 20.0, (0.3, 2.5)),
    "CaF2": Sellmeier(
        (0.5675888, 0.4710914, 3.8484723), _sq(0.050263605, 0.1003909, 34.649040),
        "calcium fluoride", "Malitson, Appl. Opt. 2, 1103 (1963)", 24.0, (0.23, 9.7)),
    "sapphire-o": Sellmeier(
        (1.023798, 1.058264, 5.280792), _sq(0.06144821, 0.1106997, 17.92656),
        "sapphire, ordinary ray", "Malitson, J. Opt. Soc. Am. 52, 1377 (1962)", 24.0, (0.2652, 5.577)),
}

_ALIASES = {
    "fusedsilica": "fused-silica", "silica": "fused-silica", "sio2": "fused-silica", "fusedquartz": "fused-silica",
    "nbk7": "N-BK7", "bk7": "N-BK7",
    "caf2": "CaF2", "calciumfluoride": "CaF2",
    "sapphireo": "sapphire-o", "sapphire": "sapphire-o", "al2o3": "sapphire-o", "al2o3o": "sapphire-o",
}


def _key(name: str) -> str:
    return re.sub(r"[^a-z0-9]", "", name.lower())


def material_names() -> list[str]:
    """Canonical names of the built-in materials."""
    return list(CATALOGUE)


def get_material(name: str) -> Sellmeier:
    """Look up a catalogue material by name (case and punctuation are ignored).

    Raises
    ------
    InputError
        Unknown name; the message lists the known ones.
    """
    key = _key(name)
    for canonical in CATALOGUE:
        if _key(canonical) == key:
            return CATALOGUE[canonical]
    if key in _ALIASES:
        return CATALOGUE[_ALIASES[key]]
    raise InputError(f"material {name!r} is not in the catalogue; use one of {', '.join(CATALOGUE)} "
                     "or give --sellmeier/--cauchy coefficients")


def parse_coefficients(text: str, form: str):
    """Build a user dispersion model from a comma-separated list.

    ``form="sellmeier"``: ``B1,C1,B2,C2,...`` with Cᵢ in µm² (squared resonance
    wavelengths). ``form="cauchy"``: ``A,B,C,...`` with B in µm², C in µm⁴.
    """
    try:
        vals = [float(v) for v in text.replace(" ", "").split(",") if v]
    except ValueError:
        raise InputError(f"--{form} must be comma-separated numbers, got {text!r}") from None
    if form == "sellmeier":
        if not vals or len(vals) % 2:
            raise InputError("--sellmeier needs pairs B1,C1,B2,C2,... (C in um^2); "
                             "e.g. --sellmeier 0.6961663,0.00467914826,0.4079426,0.0135120631")
        return Sellmeier(tuple(vals[0::2]), tuple(vals[1::2]))
    if form == "cauchy":
        if not vals:
            raise InputError("--cauchy needs A,B[,C...] (lambda in um); e.g. --cauchy 1.4580,0.00354")
        return Cauchy(tuple(vals))
    raise ValueError(form)
