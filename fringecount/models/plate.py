"""Plate rotation: index of a plate from the fringes counted while tilting it.

A plate of thickness t in one arm of a Michelson, tilted from normal incidence
to angle θ at a fixed wavelength, changes the double-pass optical path by

    N λ = 2t [√(n² − sin²θ) − cos θ − n + 1]                    (forward)

and the exact closed-form inverse is

    n = [(2t − Nλ)(1 − cos θ) + N²λ²/(4t)] / [2t(1 − cos θ) − Nλ].

Use the index relative to air and the wavelength in air (a plate in air
displaces air, REFERENCES §1); the small-angle form N ≈ tθ²(n − 1)/(nλ) is not
used. Assumptions: plane parallel plate, collimated beam, rotation about an axis
perpendicular to the beam, no lateral beam walk-off effect on the count.

References
----------
Standard textbook result (Michelson interferometer chapters of Fowles,
*Introduction to Modern Optics*, and Pedrotti; from memory). The inverse is
obtained by squaring √(n² − sin²θ) = n + a + cos θ − 1 with a = Nλ/(2t).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from ..errors import InputError
from ..units import Uncertain
from ._measurement import Measurement, propagate

__all__ = ["plate_fringes", "plate_index", "plate_thickness", "derive_plate_rotation", "PlateFit",
           "fit_plate_rotation"]


def plate_fringes(index, thickness_m, wavelength_m, angle_rad):
    """Fringes N counted from normal incidence to ``angle_rad`` (exact forward model)."""
    th = np.asarray(angle_rad, dtype=float)
    return 2 * thickness_m * (np.sqrt(index**2 - np.sin(th) ** 2) - np.cos(th) - index + 1) / wavelength_m


def plate_index(fringes, thickness_m, wavelength_m, angle_rad):
    """Exact closed-form inverse: the index n from N, t, λ (air) and θ.

    Raises
    ------
    InputError
        If the angle is too small for the count (denominator ≤ 0) or the result is below 1.
    """
    nl = np.asarray(fringes, dtype=float) * wavelength_m
    one_minus_cos = 1 - np.cos(angle_rad)
    den = 2 * thickness_m * one_minus_cos - nl
    if np.any(den <= 0):
        raise InputError("plate rotation: the count is too large for this angle and thickness "
                         "(2t(1-cos θ) <= Nλ); check --angle, --thickness and the unit of each")
    n = ((2 * thickness_m - nl) * one_minus_cos + nl**2 / (4 * thickness_m)) / den
    return n


def plate_thickness(fringes, index, wavelength_m, angle_rad):
    """Thickness t = Nλ / (2[√(n² − sin²θ) − cos θ − n + 1]) of a plate of known index."""
    g = np.sqrt(index**2 - np.sin(angle_rad) ** 2) - np.cos(angle_rad) - index + 1
    return np.asarray(fringes, dtype=float) * wavelength_m / (2 * g)


def derive_plate_rotation(fringes: Uncertain, thickness_m: Uncertain, wavelength_m: Uncertain,
                          angle_rad: Uncertain) -> dict[str, Measurement]:
    """Index of a tilted plate with its uncertainty budget.

    Parameters
    ----------
    fringes : Uncertain
        Fringes counted from normal incidence to the final angle (sign ignored).
    thickness_m : Uncertain
        Plate thickness in m.
    wavelength_m : Uncertain
        Wavelength **in air**, m.
    angle_rad : Uncertain
        Tilt from normal incidence, rad. Its sigma includes the zero-angle uncertainty.

    Returns
    -------
    dict
        ``refractive_index`` (relative to air, dimensionless).
    """
    if angle_rad.value == 0:
        raise InputError("plate rotation: --angle is 0; give the tilt from normal incidence, e.g. --angle 10deg")

    def f(fringes, thickness_m, wavelength_m, angle_rad):
        return float(plate_index(abs(fringes), thickness_m, wavelength_m, angle_rad))

    n = propagate(f, {"fringes": fringes, "thickness_m": thickness_m, "wavelength_m": wavelength_m,
                      "angle_rad": angle_rad}, "", note="exact closed-form inverse; index relative to air")
    if n.value <= 1:
        raise InputError(f"plate rotation: the count gives n = {n.value:.6f} <= 1; check the count and the units")
    return {"refractive_index": n}


@dataclass(frozen=True)
class PlateFit:
    """Fit of N(θ) = F(n, θ − θ₀) + c over many angles.

    Attributes are the index ``refractive_index`` (Measurement), the zero-angle
    offset ``zero_angle_rad`` (Measurement, rad), the count offset ``count_offset``
    (fringes), the residuals (fringes) and the reduced chi-square.
    """

    refractive_index: Measurement
    zero_angle_rad: Measurement
    count_offset: Measurement
    residuals: np.ndarray
    chi2_reduced: float
    n_points: int


def _fit_core(angles, fringes, weights, thickness_m, wavelength_m, guess):
    def resid(p):
        n, th0, c = p
        return (plate_fringes(n, thickness_m, wavelength_m, angles - th0) + c - fringes) * weights

    sol = least_squares(resid, guess, x_scale=(0.1, 1e-3, 1.0), method="lm", xtol=1e-14, ftol=1e-14)
    return sol


def fit_plate_rotation(angles_rad, fringes, fringes_sigma, thickness_m: Uncertain, wavelength_m: Uncertain) -> PlateFit:
    """Fit the index, the zero-angle offset θ₀ and a count offset to N measured at many angles.

    Parameters
    ----------
    angles_rad : (K,) array
        Tilt reading of each frame, rad (any zero; θ₀ is fitted).
    fringes : (K,) array
        Cumulative count at each frame (any zero; the count offset is fitted).
    fringes_sigma : (K,) array or None
        1-sigma per point; None or non-finite for an unweighted fit.
    thickness_m, wavelength_m : Uncertain
        Plate thickness and air wavelength, m; their sigmas are propagated by refitting.

    Notes
    -----
    F is even in θ − θ₀, so θ₀ is found from the asymmetry of the curve; angles on
    both sides of normal incidence make it much better determined. Parameter
    sigmas come from the Jacobian, scaled by sqrt(chi2_red) when chi2_red > 1.
    """
    th = np.asarray(angles_rad, dtype=float)
    y = np.asarray(fringes, dtype=float)
    if len(th) < 4:
        raise InputError("plate-rotation fit needs at least 4 trusted frames with angles")
    sig = None if fringes_sigma is None else np.asarray(fringes_sigma, dtype=float)
    weighted = sig is not None and np.all(np.isfinite(sig)) and np.all(sig > 0)
    w = 1 / sig if weighted else np.ones_like(y)
    # starting values from the small-angle quadratic y ≈ k(θ − θ₀)² + c, k = t(n − 1)/(nλ)
    a2, a1, a0 = np.polyfit(th, y, 2)
    if a2 == 0:
        raise InputError("plate-rotation fit: the count does not curve with angle; check the log column")
    sgn = np.sign(a2)
    y = y * sgn  # count direction is a convention; the physical curve opens upwards
    a2, a1, a0 = a2 * sgn, a1 * sgn, a0 * sgn
    th0 = -a1 / (2 * a2)
    ratio = a2 * wavelength_m.value / thickness_m.value
    n0 = 1 / (1 - ratio) if 0 < ratio < 0.9 else 1.5
    c0 = a0 - a2 * th0**2
    guess = np.array([n0, th0, c0])
    sol = _fit_core(th, y, w, thickness_m.value, wavelength_m.value, guess)
    p = sol.x
    res = (sol.fun / w)
    dof = max(len(y) - 3, 1)
    chi2 = float(np.sum(sol.fun**2)) / dof
    jtj = sol.jac.T @ sol.jac
    try:
        cov = np.linalg.inv(jtj)
    except np.linalg.LinAlgError:
        raise InputError("plate-rotation fit is degenerate (angles span too small); tilt further") from None
    scale = max(1.0, chi2) if weighted else chi2
    cov = cov * scale
    stat = np.sqrt(np.diag(cov))

    def refit(thickness_m, wavelength_m):
        return float(_fit_core(th, y, w, thickness_m, wavelength_m, p).x[0])

    n_meas = propagate(refit, {"thickness_m": thickness_m, "wavelength_m": wavelength_m}, "",
                       extra={"fit": stat[0]}, note="least-squares fit of the exact model over all trusted angles")
    return PlateFit(n_meas,
                    Measurement(float(p[1]), float(stat[1]), "rad", (("fit", float(stat[1])),)),
                    Measurement(float(p[2] * sgn), float(stat[2]), "", (("fit", float(stat[2])),)),
                    res * sgn, chi2, len(y))
