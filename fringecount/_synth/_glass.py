"""A tiny local Sellmeier evaluator for the synthetic generator.

Only the two glasses the generator needs; the materials catalogue proper lives in
:mod:`fringecount.models`. Coefficients from /work/shared/REFERENCES.md section 1.
"""

from __future__ import annotations

import math
from typing import Union

import numpy as np

from ..errors import InputError

__all__ = ["SELLMEIER", "plate_index", "check_material"]

#: name -> (B1, B2, B3), (C1, C2, C3) in um^2 (already squared resonance wavelengths).
SELLMEIER: dict[str, tuple[tuple[float, float, float], tuple[float, float, float]]] = {
    # I. H. Malitson, J. Opt. Soc. Am. 55, 1205 (1965); lambda_i = 0.0684043, 0.1162414, 9.896161 um.
    "fused_silica": ((0.6961663, 0.4079426, 0.8974794),
                     (0.0684043 ** 2, 0.1162414 ** 2, 9.896161 ** 2)),
    # SCHOTT N-BK7 data sheet (Zemax catalogue 2017-01-20); C already squared.
    "N-BK7": ((1.03961212, 0.231792344, 1.01046945),
              (0.00600069867, 0.0200179144, 103.560653)),
}

Material = Union[str, float]


def check_material(material: Material) -> None:
    """Raise :class:`InputError` unless ``material`` is a known glass name or an index > 1."""
    if isinstance(material, str):
        if material not in SELLMEIER:
            raise InputError(f"unknown plate material {material!r}; use one of "
                             f"{', '.join(SELLMEIER)} or a constant refractive index such as 1.5")
        return
    if not (isinstance(material, (int, float)) and math.isfinite(material) and 1.0 <= material < 5.0):
        raise InputError(f"plate index {material!r} is not a number in [1, 5); "
                         "pass a glass name or a constant index such as 1.5")


def plate_index(material: Material, wavelength_m):
    """Refractive index of the plate at ``wavelength_m`` (scalar or array, metres).

    A float ``material`` is a constant index. A name selects a Sellmeier formula
    n^2 - 1 = sum B_i lambda^2 / (lambda^2 - C_i) with lambda in micrometres. The
    catalogue index is relative to air; the generator uses it as the index relative
    to the medium inside the interferometer, whose own index it takes as 1.
    """
    check_material(material)
    if not isinstance(material, str):
        return float(material) + 0.0 * np.asarray(wavelength_m, dtype=float)
    b, c = SELLMEIER[material]
    lam2 = (np.asarray(wavelength_m, dtype=float) * 1e6) ** 2
    n2 = 1.0 + sum(bi * lam2 / (lam2 - ci) for bi, ci in zip(b, c))
    return np.sqrt(n2)
