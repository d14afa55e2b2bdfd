"""Validation grid: ``count`` against ground truth over the conditions labs record.

Truth source: the synthetic generator (``fringecount.synthetic``), whose forward model
is checked against outside physics in tests/test_synthetic.py (REFERENCES §3e exact
Haidinger ring radii and on-axis order, §3b group-index scan, §3a tilted plate, §3c gas
cell). The truth is the change of the on-axis order, ``truth["fringes"]``; the
untrusted intervals are the generator's ``dark`` and ``multimode`` frames and the
frame-to-frame steps above ``max_step_fringes``.

Each case is one condition at a time on a small clip (160 x 120 px, 60-125 frames,
25 frames/s) so the whole file stays well under a minute and a half on 2 cores. Cases
that fail today are ``xfail(strict=True)`` with the exact failure: they turn into
passing tests (and then XPASS -> error, so the mark gets removed) when the core is
fixed. Tests that duplicate tests/test_pipeline.py are left out (the 128 x 96 lossless
sweep, the sample clips, the CLI contract).

Tolerances
----------
* ``BOUND_FRINGES = 0.01``: a stated bound, one hundredth of a fringe. Counting by eye
  reads about a tenth of a fringe (common practice); the README promises "a small
  fraction of a fringe". The reported sigmas in the passing cases are 0.0005-0.005.
* ``Z_MAX = 4``: |error| / sigma. The grid has 45 cases; with a correct Gaussian sigma
  a 3-sigma limit fails at least one case with probability 1 - 0.9973**45 = 11 %, a
  4-sigma limit with 1 - 0.99994**45 = 0.3 %.
* Gap edges: +-2 frames. A frame whose exposure (half a frame interval here) is partly
  dark or partly multimode is flagged by the generator but may still carry a usable
  phase, and the blurred edge of a washed-out interval may be flagged by the tracker;
  2 frames covers both edges of a half-frame exposure with one frame of margin.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pytest

import fringecount.synthetic as S
from fringecount.errors import NoFringesError
from fringecount.pipeline import count
from fringecount.settings import CountSettings

FPS = 25.0
HENE_M = 632.9908e-9          # unstabilised He-Ne, vacuum (CIPM 2007; REFERENCES §5)
BOUND_FRINGES = 0.01          # see module docstring
Z_MAX = 4.0                   # see module docstring
EDGE_FRAMES = 2               # see module docstring
CAM = S.Camera(width=160, height=120, focal_px=500.0)
C0 = (81.3, 58.7)             # ring centre inside the frame, off the pixel grid


def rate_m_s(fringes_per_frame: float, wavelength_m: float = HENE_M) -> float:
    """Mirror speed for a given count rate: one fringe per lambda/2 of gap (REFERENCES §3d)."""
    return fringes_per_frame * wavelength_m * FPS / 2.0


@dataclass(frozen=True)
class Burst:
    """Mirror displacement (m): a slow ramp with a fast stretch of ``dur_s`` from ``t0_s`` (a stage jerk)."""

    slow_m_s: float
    fast_m_s: float
    t0_s: float
    dur_s: float

    def __call__(self, time_s):
        return self.slow_m_s * time_s + (self.fast_m_s - self.slow_m_s) * min(max(time_s - self.t0_s, 0.0), self.dur_s)


@dataclass(frozen=True)
class Case:
    scene: S.Scene
    sweep: object
    camera: S.Camera = CAM
    n: int = 60
    fmt: str = "npy"                 # npy | tiff | mjpg | ffv1
    settings: dict = field(default_factory=dict)
    wavelength_log: bool = False
    # Sign of the pipeline's count relative to the generator's truth. Straight fringes:
    # the generator moves fringes AGAINST the carrier k for a positive order change
    # (fringecount/synthetic.py docstring); the pipeline counts positive when they move
    # ALONG the carrier (pipeline.SIGN_CONVENTION). Both are documented conventions.
    sign: int = 1
    bound: float | None = BOUND_FRINGES   # None: no error bound (ambiguous by design), z only
    ambiguous: bool | None = False        # expected summary["ambiguous"] (None: not checked)
    check_gaps: bool = True
    seed: int = 7                         # noise/shake draw of the generator


_PLATE_T_M, _DIODE_NM = 5e-3, 658.0
_N_BK7 = float(S.plate_index("N-BK7", _DIODE_NM * 1e-9))
_COMP_GAP_M = _PLATE_T_M * (1.0 - 1.0 / _N_BK7)  # gap cancelling the plate's ring curvature (REFERENCES §3a/3e)


def _mirror(d0_m=0.3e-3, fr_per_frame=0.05, **kw):
    return S.MirrorSweep(d0_m, rate_m_s(fr_per_frame, kw.get("wavelength_m", HENE_M)), **kw)


def _diode(hops=()):
    return S.DiodeScan(start_nm=_DIODE_NM, rate_nm_s=0.05, hops=hops, plate_thickness_m=_PLATE_T_M,
                       material="N-BK7", gap_m=_COMP_GAP_M + 0.15e-3)


# ------------------------------------------------------------------ cases that work today
WORKING = {
    # ring density: ~30 rings in the field (~10 rings: ffv1_lossless, mjpg ... below)
    "rings_30_dense": Case(S.Scene(center_xy=C0), _mirror(), camera=S.Camera(width=160, height=120, focal_px=280.0)),
    # ring centre near the edge and outside the frame (only arcs)
    "centre_near_edge": Case(S.Scene(center_xy=(150.0, 60.0)), _mirror()),
    "centre_outside_right": Case(S.Scene(center_xy=(200.0, 60.0)), _mirror()),
    "centre_outside_few_rings": Case(S.Scene(center_xy=(200.0, 60.0)), _mirror(d0_m=0.08e-3)),
    # swept quantities
    "gas_fill": Case(S.Scene(center_xy=C0), S.GasFill(cell_length_m=40e-3, rate_pa_s=6000.0, gap_m=0.3e-3)),
    # aluminium, 50 mm, 0.0115 K/s for 2.4 s: 0.1 fringe in all (REFERENCES §3f, §4)
    "thermal_0p1_fringe": Case(S.Scene(center_xy=C0), S.ThermalExpansion(d0_m=0.3e-3, sample_length_m=50e-3,
                                                                          rate_K_s=0.0115)),
    # one full period of a sinusoidal piezo drive: two reversals, peak 0.2 fringe/frame
    "piezo_reversal": Case(S.Scene(center_xy=C0),
                           S.MirrorSweep(0.3e-3, displacement_m=S.sinusoidal_drive(0.6e-6, 2.4))),
    "diode_scan_plate": Case(S.Scene(center_xy=C0), _diode()),
    "plate_chirp_mirror": Case(S.Scene(center_xy=C0),
                               _mirror(_COMP_GAP_M + 0.15e-3, wavelength_m=_DIODE_NM * 1e-9,
                                       plate_thickness_m=_PLATE_T_M, material="N-BK7")),
    # straight fringes (tilted mirror); sign per the two conventions, see Case.sign
    "straight_horizontal": Case(S.Scene(geometry="straight", carrier_cyc_px=(0.0, 0.06)), _mirror(), sign=-1),
    "straight_plate_tilt": Case(S.Scene(geometry="straight", carrier_cyc_px=(0.05, 0.012)),
                                S.PlateTilt(thickness_m=1e-3, material=1.5, start_deg=2.0, rate_deg_s=1.0), sign=-1),
    "straight_4_fringes_given": Case(S.Scene(geometry="straight", carrier_cyc_px=(0.025, 0.0)), _mirror(), sign=-1,
                                     settings={"geometry": "straight"}),
    # light, noise and camera
    "low_visibility_0p05": Case(S.Scene(center_xy=C0, visibility=0.05), _mirror()),
    "dim_and_noisy": Case(S.Scene(center_xy=C0, peak_fraction=0.02, background_fraction=0.01), _mirror(),
                          camera=S.Camera(width=160, height=120, focal_px=500.0, read_noise_e=20.0)),
    "saturated_25pct": Case(S.Scene(center_xy=C0, peak_fraction=0.8), _mirror()),
    "exposure_steps_power_drift": Case(S.Scene(center_xy=C0, power_drift_per_s=-0.1,
                                               exposure_steps=((0.8, 0.5), (1.6, 1.8))), _mirror()),
    "tiff_12bit": Case(S.Scene(center_xy=C0), _mirror(), camera=S.Camera(width=160, height=120, focal_px=500.0,
                                                                           bit_depth=12), fmt="tiff"),
    "tiff_16bit_dim": Case(S.Scene(center_xy=C0, peak_fraction=0.05), _mirror(),
                           camera=S.Camera(width=160, height=120, focal_px=500.0, bit_depth=16), fmt="tiff"),
    "ffv1_lossless": Case(S.Scene(center_xy=C0), _mirror(), fmt="ffv1"),
    "mjpg_dense": Case(S.Scene(center_xy=C0), _mirror(), camera=S.Camera(width=160, height=120, focal_px=280.0),
                       fmt="mjpg"),
    "rgb_red_laser_mjpg": Case(S.Scene(center_xy=C0), _mirror(),
                               camera=S.Camera(width=160, height=120, focal_px=500.0, rgb=True), fmt="mjpg"),
    "centre_outside_low_vis_mjpg": Case(S.Scene(center_xy=(190.0, 40.0), visibility=0.5, power_drift_per_s=-0.05),
                                        _mirror(0.2e-3, 0.08), fmt="mjpg"),
    # motion of the rings: shake with the centre inside, slow drift
    "shake_0p4px_centre_inside": Case(S.Scene(center_xy=C0, shake_px=0.4), _mirror(0.2e-3, 0.08)),
    "drift_1px_s": Case(S.Scene(center_xy=C0, center_drift_px_s=(1.0, -0.5)), _mirror(), n=125),
    # dark intervals (beam blocked) bridged by the fringe rate; the edges fall between two
    # exposures (frame k is exposed over (k -+ 0.25) / 25 s), so no frame is partly dark
    "dark_0p8s_middle": Case(S.Scene(center_xy=C0, dark_intervals_s=((0.81, 1.61),)), _mirror()),
    "dark_at_start": Case(S.Scene(center_xy=C0, dark_intervals_s=((0.0, 0.5),)), _mirror()),
    "dark_at_end": Case(S.Scene(center_xy=C0, dark_intervals_s=((1.9, 3.0),)), _mirror()),
    # speed: below the default max step (0.35 fringe/frame), and 0.40 with the limit raised
    "fast_0p30": Case(S.Scene(center_xy=C0), _mirror(fr_per_frame=0.30)),
    "fast_0p40_limit_0p45": Case(S.Scene(center_xy=C0), _mirror(fr_per_frame=0.40),
                                 settings={"max_step_fringes": 0.45}),
    # mode hops without a log: the gap is found and the sigma covers the hidden whole fringes
    "instant_hop_no_log": Case(S.Scene(center_xy=C0), _diode((S.ModeHop(1.2, 0.165, 0.0),)),
                               bound=None, ambiguous=True),
    "hop_0p2s_with_log": Case(S.Scene(center_xy=C0), _diode((S.ModeHop(1.0, 0.165, 0.2),)), n=100,
                              wavelength_log=True, ambiguous=None),
    # fixed after the first validation run (were strict xfails)
    "saturated_40pct": Case(S.Scene(center_xy=C0, peak_fraction=1.0), _mirror()),
    "centre_outside_corner": Case(S.Scene(center_xy=(-30.0, -25.0)), _mirror()),
    "drift_3px_s": Case(S.Scene(center_xy=C0, center_drift_px_s=(3.0, -1.5)), _mirror(), n=125),
    "drift_1px_s_100_frames": Case(S.Scene(center_xy=C0, center_drift_px_s=(1.0, -0.5)), _mirror(), n=100),
    "dark_half_lit_edges": Case(S.Scene(center_xy=C0, dark_intervals_s=((0.8, 1.6),)), _mirror()),
    "one_ring": Case(S.Scene(center_xy=C0), _mirror(d0_m=0.03e-3)),
    "straight_4_fringes_auto": Case(S.Scene(geometry="straight", carrier_cyc_px=(0.025, 0.0)), _mirror(), sign=-1),
    "two_rings_noise_draw_1": Case(S.Scene(center_xy=C0), _mirror(d0_m=0.06e-3), n=100, seed=1),
}

# ------------------------------------------------------------------ cases that fail today
_FAILING = {
    "half_ring": (Case(S.Scene(center_xy=C0), _mirror(d0_m=0.012e-3)),
                  "0.4 ring in the field: error -0.017 fringe (the on-axis growth of the pattern is fitted, "
                  "but with under half a ring the axis is extrapolated far)"),
    "centre_outside_shake_0p4": (Case(S.Scene(center_xy=(190.0, 40.0), shake_px=0.4), _mirror(0.2e-3, 0.08)),
                                 "shake with the centre off the frame moves the arcs: per-frame phase jitter "
                                 "~0.1 fringe, now in the sigma (empirical floor), but spurious one-frame "
                                 "too_fast gaps appear where the truth has none"),
    "shake_0p5px_centre_inside": (Case(S.Scene(center_xy=C0, shake_px=0.5), _mirror()),
                                  "0.5 px rms shake, centre inside: the count is right (+0.003, sigma 0.009, "
                                  "not ambiguous) but 6 one-to-three-frame 'center_lost' gaps appear (truth: none)"),
    "centre_far_outside": (Case(S.Scene(center_xy=(300.0, 60.0)), _mirror()),
                           "centre 140 px beyond the right edge (arcs of ~10 rings): 2.45 +- 0.59 for 2.95, "
                           "ambiguous; model term 0.53 and centre term 0.26 dominate"),
    "plate_tilt_rings": (Case(S.Scene(center_xy=C0), S.PlateTilt(thickness_m=1e-3, material=1.5, rate_deg_s=0.5,
                                                                 gap_m=1.0e-3),
                              camera=S.Camera(width=160, height=120, focal_px=900.0), n=100),
                         "a tilting plate moves the ring centre (16 px here); the pipeline follows it and counts the "
                         "order at the ring centre (+0.944, the OPD extremum) where the plate-rotation formula "
                         "(REFERENCES §3a) and the truth need the order on the optical axis (+0.629): z = +13"),
    "compensated_plate_near_zero": (Case(S.Scene(center_xy=C0),
                                         _mirror(_COMP_GAP_M + 0.01e-3, wavelength_m=_DIODE_NM * 1e-9,
                                                 plate_thickness_m=_PLATE_T_M, material="N-BK7")),
                                    "plate compensated to 10 um (4th-order plate term dominates, the radial phase turns "
                                    "back): since e876fbc flagged sign_determined=false and ambiguous, but the size "
                                    "is 2.974 for 2.950 (error 0.024 > 0.01, sigma 0.088); the on-axis sign is "
                                    "physically defined (rings near the axis expand) yet reported negative"),
}

FAILING_EXC = (AssertionError, NoFringesError)


def _params():
    out = [pytest.param(name, case, id=name) for name, case in WORKING.items()]
    for name, (case, reason) in _FAILING.items():
        out.append(pytest.param(name, case, id=name,
                                marks=pytest.mark.xfail(strict=True, raises=FAILING_EXC, reason=reason)))
    return out


# ------------------------------------------------------------------ helpers
def _write(case: Case, frames: np.ndarray, tmp_path, name: str):
    if case.fmt == "npy":
        path = tmp_path / f"{name}.npy"
        np.save(path, frames)
        return path
    if case.fmt == "tiff":
        return S.write_tiff_stack(tmp_path / f"{name}.tif", iter(frames))
    codec, ext = {"mjpg": ("MJPG", ".avi"), "ffv1": ("FFV1", ".mkv")}[case.fmt]
    return S.write_video(tmp_path / f"{name}{ext}", iter(frames), FPS, codec=codec)


def _wavelength_log(case: Case, duration_s: float, path) -> str:
    """Wavemeter log like the bundled demo's: every 0.5 s, 0.002 nm rms, shown to 0.001 nm, silent while multimode."""
    rng = np.random.default_rng(11)
    rows = []
    for t in np.arange(0.0, duration_s + 1e-9, 0.5):
        st = case.sweep.state(float(t))
        if not st.multimode:
            rows.append({"time_s": round(float(t), 3),
                         "wavelength_nm": round(st.wavelengths_m[0] * 1e9 + rng.normal(0.0, 0.002), 3)})
    pd.DataFrame(rows).to_csv(path, index=False)
    return str(path)


def _runs(flags: np.ndarray) -> list[tuple[int, int]]:
    idx = np.flatnonzero(flags)
    if idx.size == 0:
        return []
    cuts = np.flatnonzero(np.diff(idx) > 1)
    starts = np.r_[idx[0], idx[cuts + 1]]
    stops = np.r_[idx[cuts], idx[-1]]
    return list(zip(starts.tolist(), stops.tolist()))


#: Gap reason expected for each kind of untrusted truth frame (fringecount.gaps.REASONS):
#: a blocked beam is dark, a mode hop washes the fringes out, a step above the limit is too fast
#: (or washed out, when the step happens within one exposure: an instantaneous mode hop).
TRUTH_REASONS = {"dark": {"dark"}, "multimode": {"low_visibility"}, "fast": {"too_fast", "low_visibility"}}


def truth_untrusted(truth: pd.DataFrame, max_step_fringes: float) -> dict[str, np.ndarray]:
    """Frames the generator marks untrusted, by kind: dark, multimode, or a step above the limit."""
    step = np.abs(np.diff(truth["fringes"].to_numpy(), prepend=truth["fringes"].iloc[0]))
    return {"dark": truth["dark"].to_numpy(bool), "multimode": truth["multimode"].to_numpy(bool),
            "fast": (step > max_step_fringes) & ~truth["multimode"].to_numpy(bool)}


def run_case(name: str, case: Case, tmp_path):
    frames, truth = S.render_clip(case.scene, case.camera, case.sweep, case.n, FPS, rng=case.seed)
    path = _write(case, frames, tmp_path, name)
    kw = {"fps": FPS, **case.settings}
    if case.wavelength_log:
        kw["wavelength_log"] = _wavelength_log(case, case.n / FPS, tmp_path / f"{name}.log.csv")
    return count(path, CountSettings(**kw)), truth, kw


def check_against_truth(name: str, case: Case, result, truth, settings: dict) -> None:
    true_total = float(truth["fringes"].iloc[-1])
    error = case.sign * result.total_fringes - true_total
    if result.summary.get("sign_determined") is False:
        # documented contract: the size of the count is measured, its sign is not (summary note);
        # then only the size is compared, and the result must say it is ambiguous
        assert result.summary["ambiguous"], f"{name}: sign undetermined but not ambiguous"
        error = abs(result.total_fringes) - abs(true_total)
    sigma = result.total_fringes_sigma
    assert sigma > 0 and math.isfinite(sigma)
    assert abs(error) < Z_MAX * sigma, f"{name}: error {error:+.4f}, sigma {sigma:.4f}, z {error / sigma:+.1f}"
    if case.bound is not None:
        assert abs(error) < case.bound, f"{name}: error {error:+.4f} fringe > {case.bound}"
    if case.ambiguous is not None:
        assert bool(result.summary["ambiguous"]) == case.ambiguous, f"{name}: ambiguous {result.summary['ambiguous']}"
    if case.check_gaps:
        kinds = truth_untrusted(truth, settings.get("max_step_fringes", CountSettings().max_step_fringes))
        bad = np.logical_or.reduce(list(kinds.values()))
        gaps = result.gaps
        for a, b in _runs(bad):  # every untrusted interval of the truth is reported, with its cause
            near = gaps[(gaps["first_frame"] <= b + EDGE_FRAMES) & (gaps["last_frame"] >= a - EDGE_FRAMES)]
            spans = gaps[["first_frame", "last_frame"]].values.tolist()
            assert len(near), f"{name}: truth interval {a}-{b} not among the gaps {spans}"
            expected = set().union(*(TRUTH_REASONS[k] for k, flags in kinds.items() if flags[a:b + 1].any()))
            assert set(near["reason"]) & expected, \
                f"{name}: gap {a}-{b} reason {set(near['reason'])}, expected {expected}"
        bad_idx = np.flatnonzero(bad)
        for f, l, why in zip(gaps["first_frame"], gaps["last_frame"], gaps["reason"]):  # no gap without a cause
            assert np.any((bad_idx >= f - EDGE_FRAMES) & (bad_idx <= l + EDGE_FRAMES)), \
                f"{name}: spurious {why} gap {f}-{l}"


# ------------------------------------------------------------------ tests
@pytest.mark.parametrize("name, case", _params())
def test_count_matches_generator_truth(name, case, tmp_path):
    result, truth, kw = run_case(name, case, tmp_path)
    check_against_truth(name, case, result, truth, kw)


def test_whole_clip_too_fast_names_the_cause(tmp_path):
    # Expected: either a count whose gaps say too_fast, or an error naming the speed and the
    # --max-step setting (0.40 < 0.5 is still unambiguous: Itoh 1982 aliasing limit).
    case = Case(S.Scene(center_xy=C0), _mirror(fr_per_frame=0.40), n=60)
    try:
        result, _, _ = run_case("too_fast", case, tmp_path)
    except NoFringesError as exc:
        assert "fast" in str(exc).lower() or "step" in str(exc).lower(), str(exc)
    else:
        assert set(result.gaps["reason"]) == {"too_fast"} and result.summary["ambiguous"]


def test_stage_jerk_above_aliasing_is_flagged_too_fast(tmp_path):
    # 0.6 fringe/frame for 0.4 s inside a 0.05 fringe/frame ramp: the count cannot be followed there
    # (> 0.5 fringe/frame aliases, Itoh 1982); it must be a too_fast gap whose sigma covers the
    # whole fringes lost (here 10 frames x 0.55 = 5.5 fringes hidden, 5 of them whole).
    sweep = S.MirrorSweep(0.3e-3, displacement_m=Burst(rate_m_s(0.05), rate_m_s(0.6), 2.0, 0.4))
    result, truth, _ = run_case("jerk", Case(S.Scene(center_xy=C0), sweep, n=100), tmp_path)
    assert list(result.gaps["reason"]) == ["too_fast"]
    assert result.summary["ambiguous"]
    error = result.total_fringes - truth["fringes"].iloc[-1]
    assert abs(error) < Z_MAX * result.total_fringes_sigma


def test_overcompensated_plate_counts_ring_motion(tmp_path):
    # Gap below t (1 - 1/n): the effective gap d - t (1 - 1/n) is negative (REFERENCES §3a/3e
    # expansion to theta^2), the order grows outward, and rings COLLAPSE while the on-axis order
    # grows. From the images alone this is indistinguishable from a positive gap with the order
    # falling, so the pipeline (rings expanding = positive) reports minus the on-axis change.
    # Pinned here so a change of that behaviour is deliberate; the magnitude must be right.
    case = Case(S.Scene(center_xy=C0), _mirror(_COMP_GAP_M - 0.15e-3, wavelength_m=_DIODE_NM * 1e-9,
                                               plate_thickness_m=_PLATE_T_M, material="N-BK7"), sign=-1)
    result, truth, kw = run_case("overcomp", case, tmp_path)
    check_against_truth("overcomp", case, result, truth, kw)
