"""Rendering: optical state -> irradiance -> camera electrons -> integer frames."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Iterator, Optional, Sequence, Union

import numpy as np
import pandas as pd

from ..errors import InputError
from ._sweeps import OpticalState, on_axis_order, opd_m

__all__ = ["Camera", "Scene", "render_frames", "render_frames_with_truth", "render_clip",
           "TRUTH_COLUMNS", "ring_center_offset_px"]

TRUTH_COLUMNS = ("frame", "time_s", "fringes", "order", "wavelength_m", "center_x", "center_y",
                 "visibility", "multimode", "dark", "brightness", "gap_m", "saturated_fraction")

RngLike = Union[None, int, np.random.Generator]


@dataclass(frozen=True)
class Camera:
    """A monochrome (or colour) camera focused at infinity.

    Attributes
    ----------
    width, height : int
        Frame size in pixels.
    focal_px : float
        Lens focal length in pixels: a pixel at distance r from the optical axis sees
        the field angle atan(r / focal_px).
    bit_depth : int
        8 gives uint8 frames (0..255); 9..16 give uint16 frames holding values
        0..2**bit_depth - 1 (e.g. 12-bit data in 16-bit words, low-justified).
    full_well_e : float
        Full-well capacity in electrons.
    read_noise_e : float
        Gaussian read noise, electrons rms.
    gain : float
        Analogue gain relative to the conversion that maps the full well onto full
        scale: ``electrons_per_dn = full_well_e / (full_scale * gain)``. Shot noise
        then has variance ``mean_dn / electrons_per_dn`` in DN^2.
    exposure_fraction : float
        Exposure time as a fraction of the frame interval (0 = instantaneous). The
        exposure is centred on the frame's time stamp; the frame interval is the median
        spacing of the time stamps (a single frame is exposed instantaneously).
    n_subsamples : int
        Instants of the sweep averaged within the exposure (motion blur).
    rgb : bool
        Produce (H, W, 3) RGB frames; the laser colour is ``Scene.rgb_weights``.
    saturation : bool
        Clip electrons at the full well. Values are always clipped to the integer
        range 0..full scale.
    """

    width: int = 320
    height: int = 240
    focal_px: float = 900.0
    bit_depth: int = 8
    full_well_e: float = 10000
    read_noise_e: float = 5.0
    gain: float = 1.0
    exposure_fraction: float = 0.5
    n_subsamples: int = 5
    rgb: bool = False
    saturation: bool = True

    def __post_init__(self) -> None:
        for name in ("width", "height"):
            v = getattr(self, name)
            if not (isinstance(v, (int, np.integer)) and 8 <= v <= 8192):
                raise InputError(f"camera {name} must be an integer from 8 to 8192 pixels, got {v!r}")
        checks = [("focal_px", self.focal_px > 0), ("full_well_e", self.full_well_e > 0),
                  ("read_noise_e", self.read_noise_e >= 0), ("gain", self.gain > 0),
                  ("exposure_fraction", 0 <= self.exposure_fraction <= 1)]
        for name, ok in checks:
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and ok):
                raise InputError(f"camera {name} = {v!r} is out of range; see the Camera docstring")
        if self.bit_depth not in range(8, 17):
            raise InputError(f"camera bit_depth must be 8..16, got {self.bit_depth!r}; use 8, 12 or 16")
        if not (isinstance(self.n_subsamples, (int, np.integer)) and self.n_subsamples >= 1):
            raise InputError(f"camera n_subsamples must be an integer >= 1, got {self.n_subsamples!r}")

    @property
    def full_scale_dn(self) -> int:
        """Largest pixel value."""
        return 2 ** self.bit_depth - 1

    @property
    def dtype(self) -> type:
        """numpy dtype of the frames (uint8 for 8 bit, uint16 above)."""
        return np.uint8 if self.bit_depth == 8 else np.uint16

    @property
    def electrons_per_dn(self) -> float:
        """Conversion factor in electrons per digital number."""
        return self.full_well_e / (self.full_scale_dn * self.gain)


@dataclass(frozen=True)
class Scene:
    """What the camera looks at, apart from the swept quantity.

    Attributes
    ----------
    geometry : {"rings", "straight"}
        Equal-inclination rings, or straight fringes from a tilted mirror.
    center_xy : (float, float) or None
        Optical axis (ring centre) in pixels at t = 0, x = column, y = row, origin at
        the centre of pixel (0, 0). May lie outside the frame (only arcs visible).
        ``None`` is the frame centre.
    center_drift_px_s : (float, float)
        Linear drift of the ring centre, pixels per second.
    center_path : callable or None
        ``f(time_s) -> (x, y)`` in pixels; replaces ``center_xy`` and the drift.
    shake_px : float
        Camera shake: random Gaussian jitter of the whole image per frame, pixels rms
        per axis (moves rings and beam together).
    carrier_cyc_px : (float, float)
        Straight geometry: fringe carrier vector k, cycles per pixel along (x, y).
    envelope_center_xy : (float, float) or None
        Centre of the Gaussian beam envelope (pixels); ``None`` is the frame centre.
    envelope_radius_px : float or None
        1/e^2 intensity radius of the beam; ``None`` is 0.8 x the frame diagonal.
    peak_fraction : float
        Mean irradiance I0 at the envelope peak as a fraction of the full well (the
        bright fringes reach ``peak_fraction * (1 + visibility)``).
    visibility : float
        Fringe visibility V of a single-mode, unblurred pattern.
    background_fraction : float
        Stray light and dark signal as a fraction of the full well (present in dark frames).
    power_drift_per_s : float
        Relative laser power drift: brightness factor ``1 + power_drift_per_s * t``.
    exposure_steps : sequence of (time_s, factor)
        From ``time_s`` on, the brightness is multiplied by ``factor`` (exposure or gain
        change of the operator, an ND filter...).
    dark_intervals_s : sequence of (start_s, stop_s)
        Beam blocked: only background and noise.
    rgb_weights : (float, float, float)
        Laser irradiance reaching the R, G, B channels (a red laser: mostly R, a little G).
    """

    geometry: str = "rings"
    center_xy: Optional[tuple] = None
    center_drift_px_s: tuple = (0.0, 0.0)
    center_path: Optional[Callable] = None
    shake_px: float = 0.0
    carrier_cyc_px: tuple = (0.04, 0.0)
    envelope_center_xy: Optional[tuple] = None
    envelope_radius_px: Optional[float] = None
    peak_fraction: float = 0.45
    visibility: float = 0.85
    background_fraction: float = 0.03
    power_drift_per_s: float = 0.0
    exposure_steps: tuple = ()
    dark_intervals_s: tuple = ()
    rgb_weights: tuple = (1.0, 0.06, 0.01)

    def __post_init__(self) -> None:
        if self.geometry not in ("rings", "straight"):
            raise InputError(f"scene geometry must be 'rings' or 'straight', got {self.geometry!r}")
        if not (0 <= self.visibility <= 1):
            raise InputError(f"scene visibility must be in [0, 1], got {self.visibility!r}")
        for name in ("peak_fraction", "background_fraction", "shake_px"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v >= 0):
                raise InputError(f"scene {name} must be a finite number >= 0, got {v!r}")
        if self.envelope_radius_px is not None and not (self.envelope_radius_px > 0):
            raise InputError(f"scene envelope_radius_px must be > 0 pixels, got {self.envelope_radius_px!r}")
        for start, stop in self.dark_intervals_s:
            if not stop > start:
                raise InputError(f"dark interval ({start}, {stop}) must have stop > start (seconds)")
        for _, factor in self.exposure_steps:
            if not (math.isfinite(factor) and factor >= 0):
                raise InputError(f"exposure step factor must be >= 0, got {factor!r}")
        object.__setattr__(self, "exposure_steps", tuple(sorted(tuple(s) for s in self.exposure_steps)))
        object.__setattr__(self, "dark_intervals_s", tuple(tuple(s) for s in self.dark_intervals_s))

    def is_dark(self, time_s: float) -> bool:
        """The beam is blocked at ``time_s``."""
        return any(a <= time_s < b for a, b in self.dark_intervals_s)

    def brightness(self, time_s: float) -> float:
        """Laser brightness factor at ``time_s`` (0 when the beam is blocked)."""
        if self.is_dark(time_s):
            return 0.0
        b = max(0.0, 1.0 + self.power_drift_per_s * time_s)
        for t, factor in self.exposure_steps:
            if time_s >= t:
                b *= factor
        return b

    def axis_xy(self, time_s: float, camera: Camera) -> tuple[float, float]:
        """Optical axis position (pixels) at ``time_s`` before shake."""
        if self.center_path is not None:
            x, y = self.center_path(time_s)
            return float(x), float(y)
        x0, y0 = self.center_xy if self.center_xy is not None else (
            (camera.width - 1) / 2.0, (camera.height - 1) / 2.0)
        vx, vy = self.center_drift_px_s
        return x0 + vx * time_s, y0 + vy * time_s


# --------------------------------------------------------------------------- helpers
def _as_rng(rng: RngLike) -> np.random.Generator:
    if isinstance(rng, np.random.Generator):
        return rng
    return np.random.default_rng(0 if rng is None else rng)


def _cos_incidence(state: OpticalState, dx, dy, f: float):
    """Cosine of the angle of incidence on the (tilted) plate for pixel offsets dx, dy."""
    a = state.plate_tilt_rad
    return (dx * math.sin(a) + f * math.cos(a)) / np.sqrt(dx * dx + dy * dy + f * f)


def ring_center_offset_px(state: OpticalState, focal_px: float) -> float:
    """x offset (pixels) of the ring centre from the optical axis caused by a tilted plate.

    The ring centre is where the OPD is stationary; a plate tilted about the vertical
    axis moves it along x. Found by Newton iteration on a numerical derivative; 0 for an
    untilted plate.
    """
    if state.plate_thickness_m <= 0 or state.plate_tilt_rad == 0:
        return 0.0
    lam = state.wavelengths_m[state.dominant]
    f = float(focal_px)

    def opd(u):
        u = np.asarray(u, dtype=float)
        cos_field = f / np.sqrt(u * u + f * f)
        return opd_m(state, lam, cos_field, _cos_incidence(state, u, 0.0, f))

    u, h = 0.0, 0.5
    for _ in range(50):
        d1 = (opd(u + h) - opd(u - h)) / (2 * h)
        d2 = (opd(u + h) - 2 * opd(u) + opd(u - h)) / (h * h)
        if d2 == 0:
            break
        step = float(d1 / d2)
        u -= max(-f, min(f, step))
        if abs(step) < 1e-6:
            break
    return float(u)


def _frame_interval_s(times_s: np.ndarray) -> float:
    if times_s.size < 2:
        return 0.0
    return float(np.median(np.diff(times_s)))


# --------------------------------------------------------------------------- core
def render_frames_with_truth(scene: Scene, camera: Camera, sweep, times_s: Sequence[float], *,
                             rng: RngLike = None) -> Iterator[tuple[np.ndarray, dict]]:
    """Stream ``(frame, truth_row)`` pairs; see :func:`render_clip` for the columns."""
    times = np.asarray(times_s, dtype=float)
    if times.ndim != 1 or times.size == 0 or not np.all(np.isfinite(times)):
        raise InputError("times_s must be a non-empty 1-D sequence of finite times in seconds")
    if times.size > 1 and np.any(np.diff(times) <= 0):
        raise InputError("times_s must increase strictly; pass frame times in seconds in order")
    if not callable(getattr(sweep, "state", None)):
        raise InputError(f"sweep {type(sweep).__name__} has no state(time_s) method; pass a "
                         "MirrorSweep, DiodeScan, GasFill, PlateTilt or ThermalExpansion")
    gen = _as_rng(rng)
    shake_rng, noise_rng = gen.spawn(2)
    exposure_s = camera.exposure_fraction * _frame_interval_s(times)
    n_sub = camera.n_subsamples if exposure_s > 0 else 1
    offsets = exposure_s * ((np.arange(n_sub) + 0.5) / n_sub - 0.5)
    W, H, f = camera.width, camera.height, float(camera.focal_px)
    xs = np.arange(W, dtype=float)[None, :]
    ys = np.arange(H, dtype=float)[:, None]
    env_c = scene.envelope_center_xy or ((W - 1) / 2.0, (H - 1) / 2.0)
    env_w = scene.envelope_radius_px or 0.8 * math.hypot(W, H)
    weights_rgb = np.asarray(scene.rgb_weights, dtype=float) if camera.rgb else np.ones(1)
    fw = float(camera.full_well_e)
    order0 = None
    for k, t in enumerate(times):
        sx, sy = (shake_rng.normal(0.0, scene.shake_px, 2) if scene.shake_px > 0 else (0.0, 0.0))
        ax, ay = scene.axis_xy(t, camera)
        ax, ay = ax + sx, ay + sy
        dx, dy = xs - ax, ys - ay
        cos_field = f / np.sqrt(dx * dx + dy * dy + f * f)
        ex, ey = xs - env_c[0] - sx, ys - env_c[1] - sy
        envelope = np.exp(-2.0 * (ex * ex + ey * ey) / (env_w * env_w))
        fringe_sum = np.zeros((H, W))
        bright_sum, phasor, multimode, dark = 0.0, 0j, False, False
        for off in offsets:
            ts = t + off
            b = scene.brightness(ts)
            dark |= scene.is_dark(ts)
            if b == 0.0:
                continue
            st = sweep.state(ts)
            multimode |= st.multimode
            bright_sum += b
            cos_inc = _cos_incidence(st, dx, dy, f) if st.plate_tilt_rad else None
            for mode, (lam, w) in enumerate(zip(st.wavelengths_m, st.weights)):
                if w <= 0:
                    continue
                if scene.geometry == "rings":
                    opd = opd_m(st, lam, cos_field, cos_inc)
                    phase = (2 * np.pi / lam) * opd
                else:
                    carrier = scene.carrier_cyc_px[0] * dx + scene.carrier_cyc_px[1] * dy
                    phase = 2 * np.pi * (carrier + on_axis_order(st, mode))
                fringe_sum += (b * w) * (1.0 + scene.visibility * np.cos(phase))
                phasor += b * w * np.exp(2j * np.pi * on_axis_order(st, mode))
        irradiance = envelope * (fringe_sum / n_sub)
        frame = _expose(irradiance, scene, camera, weights_rgb, fw, noise_rng)
        st_mid = sweep.state(t)
        order = on_axis_order(st_mid)
        if order0 is None:
            order0 = order
        cx = ax + (ring_center_offset_px(st_mid, f) if scene.geometry == "rings" else 0.0)
        vis = scene.visibility * abs(phasor) / bright_sum if bright_sum > 0 else 0.0
        row = {
            "frame": k, "time_s": float(t), "fringes": order - order0, "order": order,
            "wavelength_m": st_mid.wavelengths_m[st_mid.dominant], "center_x": cx, "center_y": ay,
            "visibility": float(vis), "multimode": bool(multimode), "dark": bool(dark),
            "brightness": bright_sum / n_sub, "gap_m": st_mid.gap_m,
            "saturated_fraction": float(np.mean(frame >= camera.full_scale_dn)),
        }
        yield frame, row


def _expose(irradiance: np.ndarray, scene: Scene, camera: Camera, weights_rgb: np.ndarray,
            full_well_e: float, rng: np.random.Generator) -> np.ndarray:
    """Irradiance (fraction of I0) -> electrons with shot/read noise -> integer DN."""
    mean_e = full_well_e * (scene.background_fraction
                            + scene.peak_fraction * irradiance[..., None] * weights_rgb)
    electrons = rng.poisson(mean_e).astype(float)
    if camera.saturation:
        np.minimum(electrons, full_well_e, out=electrons)
    if camera.read_noise_e > 0:
        electrons += rng.normal(0.0, camera.read_noise_e, electrons.shape)
    dn = np.floor(electrons / camera.electrons_per_dn + 0.5)
    np.clip(dn, 0, camera.full_scale_dn, out=dn)
    dn = dn.astype(camera.dtype)
    return dn if camera.rgb else dn[..., 0]


def render_frames(scene: Scene, camera: Camera, sweep, times_s: Sequence[float], *,
                  rng: RngLike = None) -> Iterator[np.ndarray]:
    """Stream synthetic frames one at a time (constant memory for long clips).

    Parameters
    ----------
    scene : Scene
    camera : Camera
    sweep : object with ``state(time_s) -> OpticalState``
        e.g. :class:`MirrorSweep`, :class:`DiodeScan`, :class:`GasFill`,
        :class:`PlateTilt`, :class:`ThermalExpansion`.
    times_s : (n,) sequence of float
        Frame time stamps in seconds (the centre of each exposure), increasing.
    rng : None, int or numpy.random.Generator
        Randomness for shake and noise; ``None`` means seed 0 (the same call gives
        the same frames).

    Yields
    ------
    frame : (H, W) or (H, W, 3) ndarray of uint8 or uint16
        RGB channel order for colour frames.
    """
    for frame, _ in render_frames_with_truth(scene, camera, sweep, times_s, rng=rng):
        yield frame


def render_clip(scene: Scene, camera: Camera, sweep, n_frames: int, fps: float, *,
                rng: RngLike = None) -> tuple[np.ndarray, pd.DataFrame]:
    """Render a short clip into memory, with its ground-truth table.

    Frame k is exposed around ``time_s = k / fps``.

    Returns
    -------
    frames : (n, H, W) or (n, H, W, 3) ndarray of uint8 or uint16
    truth : pandas.DataFrame
        One row per frame:

        ``frame``, ``time_s``
            Index and time stamp (centre of the exposure), s.
        ``fringes``
            True cumulative count ``order - order[0]``; positive when the on-axis order
            grows (rings born at the centre and expanding).
        ``order``
            On-axis interference order OPD(0)/lambda of the dominant mode at ``time_s``
            (during a mode hop the dominant mode changes at the hop's midpoint, so the
            count steps there by the hop's whole jump).
        ``wavelength_m``
            Vacuum wavelength of the dominant mode.
        ``center_x``, ``center_y``
            Ring centre (rings) or carrier reference point (straight), pixels, including
            drift and shake (and the shift caused by a tilted plate).
        ``visibility``
            Effective on-axis visibility: V |sum_j b_j sum_k w_k exp(2 pi i m_k(t_j))| /
            sum_j b_j over the exposure sub-samples j and modes k; lowered by multimode
            blending and by motion blur. 0 in fully dark frames.
        ``multimode``, ``dark``
            Some part of the exposure ran on several modes / had the beam blocked.
        ``brightness``
            Laser brightness factor averaged over the exposure (0 when blocked).
        ``gap_m``
            Air gap d at ``time_s``.
        ``saturated_fraction``
            Fraction of pixel values at full scale.
    """
    if not (isinstance(n_frames, (int, np.integer)) and n_frames >= 1):
        raise InputError(f"n_frames must be an integer >= 1, got {n_frames!r}")
    if not (isinstance(fps, (int, float)) and math.isfinite(fps) and fps > 0):
        raise InputError(f"fps must be a positive number of frames per second, got {fps!r}")
    times = np.arange(n_frames) / float(fps)
    shape = (n_frames, camera.height, camera.width) + ((3,) if camera.rgb else ())
    frames = np.empty(shape, dtype=camera.dtype)
    rows = []
    for k, (frame, row) in enumerate(render_frames_with_truth(scene, camera, sweep, times, rng=rng)):
        frames[k] = frame
        rows.append(row)
    return frames, pd.DataFrame(rows, columns=list(TRUTH_COLUMNS))
