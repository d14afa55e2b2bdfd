"""Wavelength scan: group index (and phase index) of a plate from a tunable-laser scan.

A plate of thickness t in one arm contributes the order m(σ) = 2t(n(σ) − 1)σ,
σ = 1/λ. Scanning from λ₁ to λ₂ counts

    N = m(σ₁) − m(σ₂) ≈ 2t (n_g(σ̄) − 1)(σ₁ − σ₂),   σ̄ = (σ₁ + σ₂)/2,

so the count measures the **group index** n_g = n − λ dn/dλ, not the phase
index: n itself changes during the scan. The mid-wavenumber form is exact to
second order in Δσ. The phase index follows only with a dispersion model:
n(λ̄) = n_g(λ̄) + λ̄ (dn/dλ)_model, λ̄ = 1/σ̄.

With a catalogue material the exact Sellmeier difference is used instead of the
mid-wavenumber form: the sample is modelled as the catalogue curve plus a
constant offset δ, N = N_model + 2tδ(σ₁ − σ₂), and n_g, n at λ̄ are the model
values plus δ.

Convention: wavelengths **in air**, indices relative to air (catalogue indices
are; REFERENCES §1). The sign of N is taken from the scan direction, so a count
recorded with either sign convention gives the same result. The air path is
counted too: an arm imbalance ΔL adds 2ΔL·n_g,air·Δσ, so balance the arms.

References
----------
Standard dispersion argument (REFERENCES §3b). Sellmeier data: see
:mod:`fringecount.models.dispersion`.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq

from ..errors import InputError
from ..units import Uncertain
from ._measurement import Measurement, propagate

__all__ = ["scan_fringes", "scan_group_index", "scan_thickness", "scan_stop_wavelength", "mid_wavelength",
           "derive_wavelength_scan"]


def _order(material, thickness_m, wavelength_m):
    return 2 * thickness_m * (material.index(wavelength_m) - 1) / wavelength_m


def scan_fringes(material, thickness_m, start_m, stop_m):
    """Exact count N = m(σ₁) − m(σ₂) for a plate of ``material`` (positive for a red scan)."""
    return float(_order(material, thickness_m, start_m) - _order(material, thickness_m, stop_m))


def mid_wavelength(start_m, stop_m):
    """λ̄ = 1/σ̄, the wavelength at the mid wavenumber, m."""
    return 2.0 / (1.0 / start_m + 1.0 / stop_m)


def scan_group_index(fringes, thickness_m, start_m, stop_m):
    """Group index at the mid wavenumber: n_g = 1 + |N| / (2t|σ₁ − σ₂|)."""
    dsig = abs(1.0 / start_m - 1.0 / stop_m)
    return 1 + abs(fringes) / (2 * thickness_m * dsig)


def scan_thickness(fringes, material, start_m, stop_m):
    """Thickness of a plate of known ``material`` from the count (exact Sellmeier difference)."""
    per_m = abs(scan_fringes(material, 1.0, start_m, stop_m))
    return abs(fringes) / per_m


def scan_stop_wavelength(fringes, thickness_m, start_m, material, *, direction: int = 1):
    """End wavelength of a scan that counted |N| fringes on a known plate (the source's tuning).

    ``direction`` = +1 for a scan towards longer wavelengths, −1 towards shorter.
    """
    target = abs(fringes)
    if target == 0:
        return float(start_m)
    # the count grows monotonically with |Δσ|; bracket up to a 30 % wavelength change
    def g(stop):
        return abs(scan_fringes(material, thickness_m, start_m, stop)) - target

    far = start_m * (1.3 if direction > 0 else 1 / 1.3)
    if g(far) < 0:
        raise InputError("wavelength scan: the count needs more than a 30 % tuning on this plate; "
                         "check --fringes, --thickness and the material")
    lo, hi = sorted((start_m, far))
    return float(brentq(g, lo, hi, xtol=1e-18, rtol=1e-15))


def _check(start_m, stop_m, material=None):
    if start_m == stop_m:
        raise InputError("wavelength scan: --start and --stop are equal; give the scan's two end wavelengths")
    if material is not None and hasattr(material, "range_um"):
        lo, hi = material.range_um
        for lam in (start_m, stop_m):
            if not lo <= lam * 1e6 <= hi:
                raise InputError(f"wavelength {lam * 1e9:.1f} nm is outside the {material.name} dispersion "
                                 f"formula's range {lo}-{hi} um; use another material model")


def derive_wavelength_scan(fringes: Uncertain, thickness_m: Uncertain | None, start_m: Uncertain,
                           stop_m: Uncertain | None, material=None) -> dict[str, Measurement]:
    """Group index, phase index, thickness or tuning from a wavelength scan.

    Exactly one of three uses, chosen by what is given:

    * ``thickness_m`` and ``stop_m`` given: ``group_index`` at λ̄; with a
      ``material`` also ``phase_index`` (exact Sellmeier difference);
    * ``thickness_m`` None, ``material`` given: ``thickness`` (m);
    * ``stop_m`` None, ``material`` given: ``stop_wavelength`` (m) and ``tuning`` (m).

    All wavelengths in air (m); indices relative to air. Every result also carries
    ``mid_wavelength`` (m, exact: derived from the inputs).
    """
    if thickness_m is None or stop_m is None:
        if material is None:
            raise InputError("wavelength scan: without --thickness or --stop, give --material to solve for it")
        if thickness_m is None and stop_m is None:
            raise InputError("wavelength scan: give --thickness or --stop (only one may be solved for)")
    out: dict[str, Measurement] = {}
    if thickness_m is None:
        _check(start_m.value, stop_m.value, material)
        out["thickness"] = propagate(lambda fringes, start_m, stop_m: scan_thickness(fringes, material, start_m, stop_m),
                                     {"fringes": fringes, "start_m": start_m, "stop_m": stop_m}, "m",
                                     note=f"exact Sellmeier difference, {material.name}")
        return out
    if stop_m is None:
        direction = 1 if fringes.value >= 0 else -1
        stop = propagate(lambda fringes, thickness_m, start_m: scan_stop_wavelength(
            fringes, thickness_m, start_m, material, direction=direction),
            {"fringes": fringes, "thickness_m": thickness_m, "start_m": start_m}, "m",
            note=f"solved on the {material.name} Sellmeier curve")
        _check(start_m.value, stop.value, material)
        out["stop_wavelength"] = stop
        out["tuning"] = propagate(lambda fringes, thickness_m, start_m: scan_stop_wavelength(
            fringes, thickness_m, start_m, material, direction=direction) - start_m,
            {"fringes": fringes, "thickness_m": thickness_m, "start_m": start_m}, "m")
        return out
    _check(start_m.value, stop_m.value, material)
    inputs = {"fringes": fringes, "thickness_m": thickness_m, "start_m": start_m, "stop_m": stop_m}
    lam_bar = mid_wavelength(start_m.value, stop_m.value)
    if material is None:
        out["group_index"] = propagate(scan_group_index, inputs, "",
                                       note="mid-wavenumber form, n_g = 1 + N/(2t Δσ)")
    else:
        def offset(fringes, thickness_m, start_m, stop_m):
            n_model = scan_fringes(material, thickness_m, start_m, stop_m)
            dsig = 1 / start_m - 1 / stop_m
            n_meas = abs(fringes) * np.sign(dsig)
            return (n_meas - n_model) / (2 * thickness_m * dsig)

        def group(fringes, thickness_m, start_m, stop_m):
            lb = mid_wavelength(start_m, stop_m)
            return float(material.group_index(lb)) + offset(fringes, thickness_m, start_m, stop_m)

        def phase(fringes, thickness_m, start_m, stop_m):
            lb = mid_wavelength(start_m, stop_m)
            return float(material.index(lb)) + offset(fringes, thickness_m, start_m, stop_m)

        out["group_index"] = propagate(group, inputs, "", note=f"exact Sellmeier difference ({material.name})")
        out["phase_index"] = propagate(phase, inputs, "",
                                       note=f"n = n_g + lambda dn/dlambda with the {material.name} model")
    out["mid_wavelength"] = Measurement(lam_bar, 0.0, "m", note="1/mean wavenumber of the scan")
    return out


def group_to_phase_index(group_index: float, wavelength_m: float, material) -> float:
    """Phase index n = n_g + λ (dn/dλ)_model at ``wavelength_m`` (mid-wavenumber form)."""
    return float(group_index + wavelength_m * material.dn_dlambda(wavelength_m))


__all__.append("group_to_phase_index")
