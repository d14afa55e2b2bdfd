"""The bundled sample clips: invented scenarios, rendered deterministically.

``make_sample_clips(out_dir)`` (re)makes every clip with its truth table, scenario
JSON and (for the diode scan) a wavelength-meter log. ``python -m
fringecount.synthetic OUT_DIR`` does the same from the shell.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from .. import __version__
from .._atomic import write_text_atomic
from ._glass import plate_index
from ._render import Camera, Scene, render_frames_with_truth, TRUTH_COLUMNS
from ._sweeps import DiodeScan, GasFill, MirrorSweep, ModeHop, piezo_hysteresis_drive
from ._writers import _publish, write_video

__all__ = ["make_sample_clips", "ExponentialFill", "SAMPLE_NAMES"]

HENE_M = 632.9908e-9  # unstabilised He-Ne, vacuum (REFERENCES section 5)


@dataclass(frozen=True)
class ExponentialFill:
    """Pressure of a cell whose valve opens at ``open_s``: p = p_final (1 - exp(-(t - open_s)/tau))."""

    open_s: float
    final_pa: float
    time_constant_s: float

    def __call__(self, time_s: float) -> float:
        if time_s <= self.open_s:
            return 0.0
        return self.final_pa * (1.0 - math.exp(-(time_s - self.open_s) / self.time_constant_s))


@dataclass(frozen=True)
class _Sample:
    name: str
    description: str
    scene: Scene
    camera: Camera
    sweep: object
    n_frames: int
    fps: float
    seed: int
    parameters: dict
    wavelength_log: bool = False


def _diode_scan_hops() -> _Sample:
    t_plate, lam0_nm = 5.0e-3, 658.0
    n0 = float(plate_index("N-BK7", lam0_nm * 1e-9))
    # Gap a little above t (1 - 1/n): the plate's own ring curvature is cancelled except
    # for an effective 0.2 mm gap, which gives a handful of rings on the frame.
    gap = t_plate * (1.0 - 1.0 / n0) + 0.2e-3
    hops = (ModeHop(3.2, 0.165, 0.20), ModeHop(6.9, 0.165, 0.24))
    sweep = DiodeScan(start_nm=lam0_nm, rate_nm_s=0.05, hops=hops, plate_thickness_m=t_plate,
                      material="N-BK7", gap_m=gap)
    scene = Scene(center_xy=(104.3, 71.8), shake_px=0.1, envelope_center_xy=(96.0, 78.0),
                  envelope_radius_px=130.0, visibility=0.8, power_drift_per_s=-0.01)
    camera = Camera(width=200, height=150, focal_px=700.0)
    return _Sample(
        "diode_scan_hops",
        "A 5 mm N-BK7 window in one arm of a Michelson; a red Fabry-Perot diode laser near 658 nm "
        "is tuned by a slow temperature ramp (+0.05 nm/s) and mode-hops twice by +0.165 nm, running "
        "on two modes for 0.20 s and 0.24 s (washed-out fringes). Rings, slight camera shake, "
        "slow power drift.",
        scene, camera, sweep, 250, 25.0, 658,
        {"sweep": "DiodeScan", "start_nm": lam0_nm, "rate_nm_s": 0.05,
         "hops": [{"time_s": h.time_s, "jump_nm": h.jump_nm, "duration_s": h.duration_s} for h in hops],
         "plate_thickness_m": t_plate, "material": "N-BK7 (SCHOTT Sellmeier)",
         "plate_index_at_start": n0, "gap_m": gap,
         "wavelengths": "vacuum; air index neglected in the generator"},
        wavelength_log=True)


def _gas_fill_dark_drift() -> _Sample:
    fill = ExponentialFill(open_s=1.0, final_pa=95000.0, time_constant_s=6.0)
    sweep = GasFill(cell_length_m=40e-3, pressure_pa=fill, gap_m=0.25e-3, wavelength_m=HENE_M)
    scene = Scene(center_xy=(92.0, 80.0), center_drift_px_s=(-1.2, 0.6), shake_px=0.15,
                  envelope_center_xy=(100.0, 75.0), envelope_radius_px=140.0, visibility=0.75,
                  dark_intervals_s=((4.6, 5.6),), exposure_steps=((7.5, 0.6),))
    camera = Camera(width=200, height=150, focal_px=700.0, rgb=True)
    return _Sample(
        "gas_fill_dark_drift",
        "A 40 mm gas cell in one arm is filled with dry air through a valve opened at 1.0 s "
        "(pressure approaches 95 kPa with a 6 s time constant); He-Ne laser 632.991 nm (vacuum), "
        "colour camera (red laser). The beam is blocked by a card from 4.6 s to 5.6 s while the gas "
        "still flows; the ring centre drifts; the operator shortens the exposure at 7.5 s.",
        scene, camera, sweep, 250, 25.0, 4060,
        {"sweep": "GasFill", "cell_length_m": 40e-3, "refractivity_per_pa": sweep.refractivity_per_pa,
         "pressure": {"model": "p_final (1 - exp(-(t - open_s)/tau)) after open_s, else 0",
                      "open_s": fill.open_s, "final_pa": fill.final_pa,
                      "time_constant_s": fill.time_constant_s},
         "gap_m": sweep.gap_m, "wavelength_m": HENE_M,
         "note": "cell OPD applied equally at all field angles (first order)"})


def _mirror_drive() -> _Sample:
    stroke, period, hyst = 4.0e-6, 40.0 / 3.0, 0.15
    sweep = MirrorSweep(d0_m=0.2e-3, displacement_m=piezo_hysteresis_drive(stroke, period, hyst),
                        wavelength_m=HENE_M)
    scene = Scene(center_xy=(101.0, 73.5), visibility=0.85)
    camera = Camera(width=200, height=150, focal_px=700.0)
    return _Sample(
        "mirror_drive",
        "A piezo-driven mirror (4 um stroke, triangle drive of period 13.3 s with 15 % hysteresis) "
        "in a He-Ne Michelson; the clip ends three quarters into the period, on the way back. "
        "Clean rings: the plain case.",
        scene, camera, sweep, 250, 25.0, 633,
        {"sweep": "MirrorSweep", "d0_m": 0.2e-3,
         "drive": {"model": "piezo_hysteresis_drive", "stroke_m": stroke, "period_s": period,
                   "hysteresis": hyst},
         "wavelength_m": HENE_M})


_SAMPLES: dict[str, Callable[[], _Sample]] = {
    "diode_scan_hops": _diode_scan_hops,
    "gas_fill_dark_drift": _gas_fill_dark_drift,
    "mirror_drive": _mirror_drive,
}
SAMPLE_NAMES = tuple(_SAMPLES)


def _runs(flags: np.ndarray) -> list[list[int]]:
    """[[first, last], ...] (inclusive) of the True runs in ``flags``."""
    runs, start = [], None
    for i, f in enumerate(flags):
        if f and start is None:
            start = i
        if not f and start is not None:
            runs.append([start, i - 1])
            start = None
    if start is not None:
        runs.append([start, len(flags) - 1])
    return runs


def _gaps(truth: pd.DataFrame) -> list[dict]:
    """Multimode and dark runs with the true count change across each (frame before -> after)."""
    fr = truth["fringes"].to_numpy()
    gaps = []
    for reason in ("multimode", "dark"):
        for first, last in _runs(truth[reason].to_numpy()):
            before, after = max(first - 1, 0), min(last + 1, len(fr) - 1)
            gaps.append({"first_frame": first, "last_frame": last, "reason": reason,
                         "fringes_across": float(fr[after] - fr[before]),
                         "from_frame": before, "to_frame": after})
    return sorted(gaps, key=lambda g: g["first_frame"])


def _wavelength_log(sample: _Sample, duration_s: float) -> pd.DataFrame:
    """A wavemeter read every 0.5 s, 0.002 nm rms noise, 0.001 nm display, silent while multimode."""
    rng = np.random.default_rng(sample.seed + 1)
    rows = []
    for t in np.arange(0.0, duration_s + 1e-9, 0.5):
        noise = rng.normal(0.0, 0.002)
        state = sample.sweep.state(float(t))
        if state.multimode:
            continue
        rows.append({"time_s": round(float(t), 3),
                     "wavelength_nm": round(state.wavelengths_m[0] * 1e9 + noise, 3)})
    return pd.DataFrame(rows, columns=["time_s", "wavelength_nm"])


def _camera_dict(camera: Camera) -> dict:
    return {k: getattr(camera, k) for k in camera.__dataclass_fields__}


def _scene_dict(scene: Scene) -> dict:
    out = {}
    for k in scene.__dataclass_fields__:
        v = getattr(scene, k)
        out[k] = [list(x) if isinstance(x, tuple) else x for x in v] if isinstance(v, tuple) else v
    return out


def _write_text(path: Path, text: str) -> Path:
    """Atomic text write with ordinary file permissions."""
    tmp = write_text_atomic(path.with_name(f".{path.name}.tmp"), text)
    _publish(tmp, path)
    return path


def make_sample_clips(out_dir, *, names=None) -> list[Path]:
    """(Re)make the bundled sample clips in ``out_dir``.

    For each clip NAME it writes ``NAME.avi`` (MJPG), ``NAME.truth.csv`` (the truth
    table of :func:`render_clip`), ``NAME.json`` (scenario, parameters, true total count,
    hop and dark frames) and, for the diode scan, ``NAME.wavelength_log.csv``. Fixed seeds
    make the output repeatable (up to the JPEG encoder of the OpenCV build).

    Parameters
    ----------
    out_dir : str or Path
        Folder to write into (created if missing); existing files of the same names are
        replaced atomically.
    names : sequence of str or None
        Subset of ``SAMPLE_NAMES``; ``None`` makes all.

    Returns
    -------
    list of Path
        Every file written.
    """
    from ..errors import InputError

    out = Path(out_dir)
    names = list(SAMPLE_NAMES) if names is None else list(names)
    for n in names:
        if n not in _SAMPLES:
            raise InputError(f"unknown sample clip {n!r}; choose from {', '.join(SAMPLE_NAMES)}")
    written: list[Path] = []
    for n in names:
        s = _SAMPLES[n]()
        times = np.arange(s.n_frames) / s.fps
        rows: list[dict] = []

        def frames():
            for frame, row in render_frames_with_truth(s.scene, s.camera, s.sweep, times, rng=s.seed):
                rows.append(row)
                yield frame

        written.append(write_video(out / f"{n}.avi", frames(), s.fps, codec="MJPG"))
        truth = pd.DataFrame(rows, columns=list(TRUTH_COLUMNS))
        written.append(_write_text(out / f"{n}.truth.csv",
                                         truth.to_csv(index=False, float_format="%.10g")))
        if s.wavelength_log:
            log = _wavelength_log(s, float(times[-1]))
            written.append(_write_text(out / f"{n}.wavelength_log.csv",
                                             log.to_csv(index=False, float_format="%.3f")))
        steps = np.abs(np.diff(truth["fringes"].to_numpy()))
        calm = ~(truth["multimode"].to_numpy()[1:] | truth["multimode"].to_numpy()[:-1])
        meta = {
            "name": n,
            "description": s.description,
            "files": {"video": f"{n}.avi", "truth": f"{n}.truth.csv",
                      **({"wavelength_log": f"{n}.wavelength_log.csv"} if s.wavelength_log else {})},
            "frames": s.n_frames, "fps": s.fps, "width": s.camera.width, "height": s.camera.height,
            "codec": "MJPG", "seed": s.seed,
            "total_fringes": float(truth["fringes"].iloc[-1]),
            "sign_convention": "positive when the on-axis order increases (rings born at the centre)",
            "multimode_frames": _runs(truth["multimode"].to_numpy()),
            "dark_frames": _runs(truth["dark"].to_numpy()),
            "gaps": _gaps(truth),
            "max_step_fringes_outside_hops": float(steps[calm].max()) if calm.any() else None,
            "parameters": s.parameters,
            "scene": _scene_dict(s.scene),
            "camera": _camera_dict(s.camera),
            "generator": f"fringecount {__version__}: fringecount.synthetic.make_sample_clips",
        }
        written.append(_write_text(out / f"{n}.json", json.dumps(meta, indent=2, default=str) + "\n"))
    return written
