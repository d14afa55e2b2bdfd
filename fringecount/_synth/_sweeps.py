"""Swept quantities: what the interferometer looks like at one instant.

Every sweep is a small frozen dataclass with one method, ``state(time_s)``,
returning an :class:`OpticalState`. The renderer only ever talks to that.

Conventions (all sweeps)
------------------------
* Wavelengths are vacuum wavelengths. The medium inside the interferometer is
  taken to have index 1 (the air index is neglected in the generator: ``gap_m``
  is the optical air gap). Glass indices come from :mod:`._glass` at the given
  wavelength. Synthetic truth is consistent with this; real data is not.
* Time is in seconds from the clip's clock origin.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Optional, Sequence

import numpy as np

from ..errors import InputError
from ._glass import Material, check_material, plate_index

__all__ = [
    "OpticalState", "opd_m", "on_axis_order",
    "MirrorSweep", "DiodeScan", "ModeHop", "GasFill", "PlateTilt", "ThermalExpansion",
    "sinusoidal_drive", "piezo_hysteresis_drive",
]

HENE_VACUUM_M = 632.9908e-9  # unstabilised He-Ne, vacuum (CIPM 2007; REFERENCES section 5)


def _finite(name: str, value: float, *, positive: bool = False, nonneg: bool = False) -> float:
    ok = isinstance(value, (int, float)) and math.isfinite(value)
    if ok and positive:
        ok = value > 0
    if ok and nonneg:
        ok = value >= 0
    if not ok:
        need = "a positive" if positive else "a non-negative" if nonneg else "a finite"
        raise InputError(f"{name} must be {need} number, got {value!r}; fix the sweep parameters")
    return float(value)


@dataclass(frozen=True)
class OpticalState:
    """The interferometer at one instant.

    Attributes
    ----------
    gap_m : float
        Air gap d between the mirror and the image of the other mirror, metres.
    wavelengths_m : tuple of float
        Vacuum wavelengths of the lasing modes (one outside mode hops).
    weights : tuple of float
        Power fraction of each mode; sums to 1.
    plate_thickness_m : float
        Glass plate in one arm (0 for none), metres.
    plate_material : str or float
        Glass name or constant index.
    plate_tilt_rad : float
        Tilt of the plate normal from the optical axis, about the image's vertical
        axis (the plate normal leans towards +x), radians.
    extra_opd_m : float
        OPD added equally at every field angle (a gas cell, to first order), metres.
    """

    gap_m: float
    wavelengths_m: tuple = (HENE_VACUUM_M,)
    weights: tuple = (1.0,)
    plate_thickness_m: float = 0.0
    plate_material: Material = "fused_silica"
    plate_tilt_rad: float = 0.0
    extra_opd_m: float = 0.0

    @property
    def dominant(self) -> int:
        """Index of the strongest mode (the first one on a tie)."""
        return int(np.argmax(self.weights))

    @property
    def multimode(self) -> bool:
        """The laser is inside a mode hop (two modes listed, whatever their powers)."""
        return len(self.weights) > 1


def opd_m(state: OpticalState, wavelength_m: float, cos_field, cos_incidence=None):
    """Optical path difference (metres) at the given field and plate-incidence cosines.

    OPD = 2 d cos(theta) + 2 t (sqrt(n^2 - sin^2 i) - cos i) + extra, with theta the
    field angle (to the mirror normal) and i the angle of incidence on the plate
    (i = theta for an untilted plate). The plate term is the double-pass plate path
    minus the air it displaces (REFERENCES section 3a).
    """
    cos_field = np.asarray(cos_field, dtype=float)
    out = 2.0 * state.gap_m * cos_field + state.extra_opd_m
    if state.plate_thickness_m > 0:
        ci = cos_field if cos_incidence is None else np.asarray(cos_incidence, dtype=float)
        n = plate_index(state.plate_material, wavelength_m)
        out = out + 2.0 * state.plate_thickness_m * (np.sqrt(n * n - (1.0 - ci * ci)) - ci)
    return out


def on_axis_order(state: OpticalState, mode: Optional[int] = None) -> float:
    """On-axis interference order OPD(0)/lambda of one mode (default: the dominant one)."""
    k = state.dominant if mode is None else mode
    lam = state.wavelengths_m[k]
    return float(opd_m(state, lam, 1.0, math.cos(state.plate_tilt_rad))) / lam


# --------------------------------------------------------------------------- drives
def sinusoidal_drive(amplitude_m: float, period_s: float, phase_rad: float = 0.0) -> Callable:
    """Displacement ``amplitude_m * sin(2 pi t / period_s + phase_rad)`` (metres)."""
    a = _finite("amplitude_m", amplitude_m)
    p = _finite("period_s", period_s, positive=True)

    def drive(time_s):
        return a * np.sin(2 * np.pi * np.asarray(time_s, dtype=float) / p + phase_rad)
    return drive


def piezo_hysteresis_drive(stroke_m: float, period_s: float, hysteresis: float = 0.15) -> Callable:
    """Triangle-wave piezo stack with hysteresis (metres).

    The voltage ramps 0 -> max -> 0 in ``period_s``; with u in [0, 1] the normalised
    voltage, the stack sits at ``stroke_m * (u - h u (1 - u))`` going up and at
    ``stroke_m * (u + h u (1 - u))`` coming down (h = ``hysteresis``). Both branches
    meet at the ends, so the loop closes each period; the mirror slows near the turning
    points as a real stack does. A common-practice caricature of piezo hysteresis, not
    a fitted model.
    """
    s = _finite("stroke_m", stroke_m)
    p = _finite("period_s", period_s, positive=True)
    h = _finite("hysteresis", hysteresis, nonneg=True)
    if h >= 1:
        raise InputError(f"hysteresis must be below 1, got {h}; typical piezo stacks show 0.1-0.2")

    def drive(time_s):
        ph = np.mod(np.asarray(time_s, dtype=float) / p, 1.0)
        up = ph < 0.5
        u = np.where(up, 2 * ph, 2 - 2 * ph)
        return s * np.where(up, u - h * u * (1 - u), u + h * u * (1 - u))
    return drive


# --------------------------------------------------------------------------- sweeps
@dataclass(frozen=True)
class MirrorSweep:
    """A moving mirror: gap ``d(t) = d0_m + velocity_m_s * t`` or ``d0_m + displacement_m(t)``.

    Parameters
    ----------
    d0_m : float
        Air gap at t = 0, metres (must stay positive over the clip).
    velocity_m_s : float
        Mirror speed in m/s (the gap grows for positive values) when no ``displacement_m``.
    displacement_m : callable or None
        ``f(time_s) -> metres`` added to ``d0_m``; e.g. :func:`sinusoidal_drive` or
        :func:`piezo_hysteresis_drive`.
    wavelength_m : float
        Vacuum wavelength of the (single-mode) laser.
    plate_thickness_m, material, plate_tilt_rad :
        Optional fixed glass plate in one arm.

    Notes
    -----
    Each lambda/2 of gap change is one fringe; the count is positive when d grows
    (rings born at the centre). REFERENCES section 3d/3e.
    """

    d0_m: float = 0.3e-3
    velocity_m_s: float = 0.0
    displacement_m: Optional[Callable] = None
    wavelength_m: float = HENE_VACUUM_M
    plate_thickness_m: float = 0.0
    material: Material = "fused_silica"
    plate_tilt_rad: float = 0.0

    def __post_init__(self) -> None:
        _finite("d0_m", self.d0_m, nonneg=True)
        _finite("velocity_m_s", self.velocity_m_s)
        _finite("wavelength_m", self.wavelength_m, positive=True)
        _finite("plate_thickness_m", self.plate_thickness_m, nonneg=True)
        check_material(self.material)

    def gap_at(self, time_s: float) -> float:
        """Air gap (metres) at ``time_s``."""
        if self.displacement_m is not None:
            return self.d0_m + float(self.displacement_m(time_s))
        return self.d0_m + self.velocity_m_s * time_s

    def state(self, time_s: float) -> OpticalState:
        return OpticalState(self.gap_at(time_s), (self.wavelength_m,), (1.0,),
                            self.plate_thickness_m, self.material, self.plate_tilt_rad)


@dataclass(frozen=True)
class ModeHop:
    """One mode hop of a diode laser.

    At ``time_s`` the laser starts to jump by ``jump_nm`` (one longitudinal-mode
    spacing, signed). For ``duration_s`` it runs on both modes, the new one taking
    over linearly (power fraction (t - time_s)/duration_s); afterwards it is single
    mode again on the new mode. ``duration_s = 0`` is an instantaneous hop.
    """

    time_s: float
    jump_nm: float
    duration_s: float = 0.0

    def __post_init__(self) -> None:
        _finite("hop time_s", self.time_s)
        _finite("hop jump_nm", self.jump_nm)
        _finite("hop duration_s", self.duration_s, nonneg=True)


def _as_hops(hops: Sequence) -> tuple:
    out = tuple(h if isinstance(h, ModeHop) else ModeHop(*h) for h in hops)
    out = tuple(sorted(out, key=lambda h: h.time_s))
    for a, b in zip(out, out[1:]):
        if b.time_s < a.time_s + a.duration_s:
            raise InputError(f"mode hops at {a.time_s} s and {b.time_s} s overlap; "
                             "start each hop after the previous one has finished")
    return out


@dataclass(frozen=True)
class DiodeScan:
    """A diode laser tuned continuously, with mode hops, through a glass plate.

    Parameters
    ----------
    start_nm : float
        Vacuum wavelength at t = 0, nm.
    rate_nm_s : float
        Continuous tuning rate, nm/s (a temperature or current ramp).
    hops : sequence of ModeHop or (time_s, jump_nm, duration_s)
        Mode hops; they must not overlap.
    plate_thickness_m : float
        Thickness of the plate in one arm, metres (REFERENCES 3b: 10 mm fused silica
        gives 10.52684 fringes over 670.0 -> 670.5 nm).
    material : str or float
        ``"fused_silica"`` (Malitson 1965), ``"N-BK7"`` (SCHOTT) or a constant index.
    gap_m : float
        Air gap d; 0 keeps only the plate term. A ring clip through a thick plate needs
        d a little above t(1 - 1/n), the gap that cancels the plate's own ring curvature.
    wavelength_nm : callable or None
        Replaces the linear tuning: ``f(time_s) -> nm`` (hops still add on top).

    Notes
    -----
    Scanning up in wavelength lowers every order, so the count is negative for a
    positive ``rate_nm_s``.
    """

    start_nm: float = 670.0
    rate_nm_s: float = 0.0
    hops: tuple = ()
    plate_thickness_m: float = 10e-3
    material: Material = "fused_silica"
    gap_m: float = 0.0
    wavelength_nm: Optional[Callable] = None

    def __post_init__(self) -> None:
        _finite("start_nm", self.start_nm, positive=True)
        _finite("rate_nm_s", self.rate_nm_s)
        _finite("plate_thickness_m", self.plate_thickness_m, nonneg=True)
        _finite("gap_m", self.gap_m, nonneg=True)
        check_material(self.material)
        object.__setattr__(self, "hops", _as_hops(self.hops))

    def _tuned_nm(self, time_s: float) -> float:
        if self.wavelength_nm is not None:
            return float(self.wavelength_nm(time_s))
        return self.start_nm + self.rate_nm_s * time_s

    def modes_nm(self, time_s: float) -> tuple[tuple, tuple]:
        """Mode wavelengths (nm) and power fractions at ``time_s``."""
        lam = self._tuned_nm(time_s)
        for hop in self.hops:  # sorted, non-overlapping
            if hop.time_s <= time_s < hop.time_s + hop.duration_s:
                s = (time_s - hop.time_s) / hop.duration_s
                return (lam, lam + hop.jump_nm), (1.0 - s, s)
            if time_s < hop.time_s:
                break
            lam += hop.jump_nm
        return (lam,), (1.0,)

    def state(self, time_s: float) -> OpticalState:
        lams, w = self.modes_nm(time_s)
        return OpticalState(self.gap_m, tuple(x * 1e-9 for x in lams), w,
                            self.plate_thickness_m, self.material, 0.0)


@dataclass(frozen=True)
class GasFill:
    """A gas cell in one arm being filled (or pumped out).

    The cell adds OPD = 2 L (n_gas - 1) with n_gas - 1 proportional to pressure:
    ``refractivity_per_pa * p``. The default 2.6825e-9 /Pa is dry air at 20 C, 633 nm
    (n - 1 = 2.71800e-4 at 101.325 kPa, Ciddor; REFERENCES section 2.1), and linear
    in p (compressibility bends it by < 3e-4 relative, section 2.5).

    The cell's extra path is applied equally at every field angle. That is first-order
    correct: the cell adds 2 L (n - 1)/cos(theta), which differs from the on-axis value
    by about L (n - 1) theta^2 (< 1e-3 fringe across a 0.2 rad field for a 50 mm air
    cell at one atmosphere).

    Parameters
    ----------
    cell_length_m : float
        Inner length L of the cell, metres.
    start_pa, rate_pa_s : float
        Pressure at t = 0 (Pa) and its linear rate (Pa/s), unless ``pressure_pa`` given.
    pressure_pa : callable or None
        ``f(time_s) -> Pa``.
    gap_m, wavelength_m : float
        Air gap of the interferometer (sets the rings) and laser vacuum wavelength.
    """

    cell_length_m: float = 50e-3
    start_pa: float = 0.0
    rate_pa_s: float = 0.0
    pressure_pa: Optional[Callable] = None
    refractivity_per_pa: float = 2.71800e-4 / 101325.0
    gap_m: float = 0.3e-3
    wavelength_m: float = HENE_VACUUM_M

    def __post_init__(self) -> None:
        _finite("cell_length_m", self.cell_length_m, nonneg=True)
        _finite("start_pa", self.start_pa, nonneg=True)
        _finite("rate_pa_s", self.rate_pa_s)
        _finite("refractivity_per_pa", self.refractivity_per_pa, nonneg=True)
        _finite("gap_m", self.gap_m, nonneg=True)
        _finite("wavelength_m", self.wavelength_m, positive=True)

    def pressure_at(self, time_s: float) -> float:
        """Cell pressure (Pa) at ``time_s``."""
        if self.pressure_pa is not None:
            return float(self.pressure_pa(time_s))
        return self.start_pa + self.rate_pa_s * time_s

    def state(self, time_s: float) -> OpticalState:
        extra = 2.0 * self.cell_length_m * self.refractivity_per_pa * self.pressure_at(time_s)
        return OpticalState(self.gap_m, (self.wavelength_m,), (1.0,), extra_opd_m=extra)


@dataclass(frozen=True)
class PlateTilt:
    """A glass plate rotated about the image's vertical axis.

    Tilt angle ``start_deg + rate_deg_s * t`` (or ``angle_deg(t)``). On axis the plate
    adds 2 t (sqrt(n^2 - sin^2 a) - cos a), so rotating from 0 to a counts
    N = 2 t [sqrt(n^2 - sin^2 a) - cos a - n + 1] / lambda fringes (REFERENCES 3a,
    e.g. 16.1413 for t = 1 mm, n = 1.5, 632.8 nm, 10 deg). The count is positive:
    tilting lengthens the path in glass.

    In ring geometry the renderer applies the plate term per pixel with the true angle
    of incidence, so a tilted plate also shifts the apparent ring centre towards the
    tilt (the truth table then gives the shifted centre; see ``render_clip``). Straight
    fringes avoid that complication.
    """

    thickness_m: float = 1e-3
    material: Material = 1.5
    start_deg: float = 0.0
    rate_deg_s: float = 0.0
    angle_deg: Optional[Callable] = None
    gap_m: float = 0.3e-3
    wavelength_m: float = HENE_VACUUM_M

    def __post_init__(self) -> None:
        _finite("thickness_m", self.thickness_m, nonneg=True)
        _finite("start_deg", self.start_deg)
        _finite("rate_deg_s", self.rate_deg_s)
        _finite("gap_m", self.gap_m, nonneg=True)
        _finite("wavelength_m", self.wavelength_m, positive=True)
        check_material(self.material)

    def angle_at(self, time_s: float) -> float:
        """Tilt angle (degrees) at ``time_s``."""
        if self.angle_deg is not None:
            return float(self.angle_deg(time_s))
        return self.start_deg + self.rate_deg_s * time_s

    def state(self, time_s: float) -> OpticalState:
        return OpticalState(self.gap_m, (self.wavelength_m,), (1.0,), self.thickness_m,
                            self.material, math.radians(self.angle_at(time_s)))


@dataclass(frozen=True)
class ThermalExpansion:
    """A heated sample of length L pushing a mirror: d(t) = d0 + L alpha (T(t) - T(0)).

    Parameters
    ----------
    d0_m : float
        Air gap at t = 0, metres.
    sample_length_m : float
        Sample length L at the start temperature, metres.
    expansion_per_K : float
        Linear expansion coefficient alpha, 1/K (REFERENCES section 4; aluminium 23.1e-6).
    start_K, rate_K_s : float
        Temperature at t = 0 (K) and heating rate (K/s), unless ``temperature_K`` given.
    temperature_K : callable or None
        ``f(time_s) -> K``.
    wavelength_m : float
        Laser vacuum wavelength.

    Notes
    -----
    The gap grows with the sample (positive count on heating). Air-index changes along a
    heated path and mount expansion are not modelled.
    """

    d0_m: float = 0.3e-3
    sample_length_m: float = 50e-3
    expansion_per_K: float = 23.1e-6
    start_K: float = 293.15
    rate_K_s: float = 0.0
    temperature_K: Optional[Callable] = None
    wavelength_m: float = HENE_VACUUM_M

    def __post_init__(self) -> None:
        _finite("d0_m", self.d0_m, nonneg=True)
        _finite("sample_length_m", self.sample_length_m, nonneg=True)
        _finite("expansion_per_K", self.expansion_per_K)
        _finite("start_K", self.start_K, positive=True)
        _finite("rate_K_s", self.rate_K_s)
        _finite("wavelength_m", self.wavelength_m, positive=True)

    def temperature_at(self, time_s: float) -> float:
        if self.temperature_K is not None:
            return float(self.temperature_K(time_s))
        return self.start_K + self.rate_K_s * time_s

    def state(self, time_s: float) -> OpticalState:
        t0 = self.temperature_at(0.0)
        gap = self.d0_m + self.sample_length_m * self.expansion_per_K * (self.temperature_at(time_s) - t0)
        return OpticalState(gap, (self.wavelength_m,), (1.0,))
