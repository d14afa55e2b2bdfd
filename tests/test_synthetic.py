"""Checks of the synthetic-recording generator against outside physics.

Sources are named beside each check; "REFERENCES" is /work/shared/REFERENCES.md
(../shared/REFERENCES.md from the repository).
"""

from __future__ import annotations

import inspect
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from fringecount.errors import InputError
from fringecount.synthetic import (Camera, DiodeScan, GasFill, MirrorSweep, ModeHop, PlateTilt, Scene,
                                   ThermalExpansion, plate_index, render_clip,
                                   render_frames, ring_center_offset_px, write_image_folder,
                                   write_tiff_stack, write_video)

# A nearly noiseless camera: 16 bit, deep well, no read noise, instantaneous exposure.
QUIET = Camera(width=64, height=48, bit_depth=16, full_well_e=1e7, read_noise_e=0.0,
               exposure_fraction=0.0)
FLAT = dict(envelope_radius_px=1e6, background_fraction=0.0)


def bright_ring_radii(frame: np.ndarray, cx: float, cy: float, n: int) -> np.ndarray:
    """Radii (px) of the first ``n`` bright rings from the azimuthal average.

    The pattern is a cosine of (almost) r^2, so the average is taken in bins of r^2
    (equal-area annuli), where each bright ring is a symmetric peak; a parabola
    fitted over +-``half`` bins around each local maximum locates it.
    """
    h, w = frame.shape
    yy, xx = np.mgrid[0:h, 0:w]
    r2 = ((xx - cx) ** 2 + (yy - cy) ** 2).ravel()
    good = r2 < min(cx, cy, w - 1 - cx, h - 1 - cy) ** 2
    r2, vals = r2[good], frame.ravel()[good].astype(float)
    step = 4.0  # px^2 per bin
    idx = (r2 / step).astype(int)
    count = np.bincount(idx)
    keep = count > 0
    prof = (np.bincount(idx, vals) / np.maximum(count, 1))[keep]
    centre = (np.bincount(idx, r2) / np.maximum(count, 1))[keep]  # mean r^2 of each bin
    half = 8
    radii = []
    for i in range(half, prof.size - half):
        window = prof[i - half:i + half + 1]
        if prof[i] == window.max() and prof[i] > prof.mean():
            coef = np.polyfit(centre[i - half:i + half + 1] - centre[i], window, 2)
            radii.append(math.sqrt(centre[i] - coef[1] / (2 * coef[0])))
        if len(radii) == n:
            break
    return np.array(radii)


# ---------------------------------------------------------------- ring geometry
def test_ring_radii_match_exact_haidinger_formula():
    # REFERENCES 3e (computed example): d = 1.000 mm, lambda = 632.8 nm, f = 100 mm gives
    # exact radii 1.87641, 3.13931, 4.02438, 4.74785, 5.37536 mm (small-angle values differ by
    # up to 0.0058 mm at r5). Here f = 2500 px, i.e. 25 px per mm at the 100 mm scale.
    scale_px_per_mm = 25.0
    cam = Camera(width=301, height=301, focal_px=100.0 * scale_px_per_mm, bit_depth=16,
                 full_well_e=1e7, read_noise_e=0.0, exposure_fraction=0.0)
    scene = Scene(visibility=1.0, **FLAT)
    sweep = MirrorSweep(d0_m=1.000e-3, wavelength_m=632.8e-9)
    frames, truth = render_clip(scene, cam, sweep, 1, 1.0)
    radii_mm = bright_ring_radii(frames[0], 150.0, 150.0, 5) / scale_px_per_mm
    exact_mm = np.array([1.87641, 3.13931, 4.02438, 4.74785, 5.37536])
    small_angle_mm = np.array([1.87617, 3.13815, 4.02194, 4.74384, 5.36954])
    # Tolerance 0.002 mm = 0.05 px: pixel sampling of the ring plus the 4 px^2 bins (the
    # parabola peak error on a cosine sampled at ~40 bins per fringe is < 0.01 bin). It is
    # tighter than the small-angle error at r4, r5 so this test tells the two apart.
    np.testing.assert_allclose(radii_mm, exact_mm, atol=0.002)
    assert np.abs(radii_mm - small_angle_mm)[-1] > 0.004
    # Order: m0 = 2d/lambda = 3160.5563 (REFERENCES 3e).
    assert truth["order"].iloc[0] == pytest.approx(3160.5563, abs=1e-4)


def test_rings_expand_when_order_grows():
    # Sign convention (DEVELOPERS.md; REFERENCES 3e "as d grows rings are born"): the gap
    # grows by lambda/8 between the frames, so the order grows by 1/4 and every ring widens.
    lam = 632.8e-9
    cam = Camera(width=161, height=161, focal_px=900.0, bit_depth=16, full_well_e=1e7,
                 read_noise_e=0.0, exposure_fraction=0.0)
    sweep = MirrorSweep(d0_m=0.3e-3, velocity_m_s=lam / 8, wavelength_m=lam)
    frames, truth = render_clip(Scene(visibility=1.0, **FLAT), cam, sweep, 2, 1.0)
    r0 = bright_ring_radii(frames[0], 80.0, 80.0, 3)
    r1 = bright_ring_radii(frames[1], 80.0, 80.0, 3)
    assert truth["fringes"].iloc[1] == pytest.approx(0.25, abs=1e-9)
    assert np.all(r1 > r0 + 1.0)  # r^2 grows by ~0.25 ring spacing, > 1 px for these rings


# ---------------------------------------------------------------- counts vs worked examples
def test_diode_scan_plate_count_matches_reference():
    # REFERENCES 3b: fused silica (Malitson), t = 10.00 mm, 670.0 -> 670.5 nm: 10.52684 fringes
    # (rounded to 5e-6). Scanning up lowers the order, so the signed count is negative.
    sweep = DiodeScan(start_nm=670.0, rate_nm_s=0.5, plate_thickness_m=10e-3,
                      material="fused_silica", gap_m=0.0)
    _, truth = render_clip(Scene(), Camera(width=8, height=8), sweep, 2, 1.0)
    assert truth["fringes"].iloc[-1] == pytest.approx(-10.52684, abs=5e-6)
    assert truth["wavelength_m"].iloc[-1] == pytest.approx(670.5e-9, rel=1e-12)


@pytest.mark.parametrize("material, value", [
    ("fused_silica", 1.4560115),  # REFERENCES 1.1 computed table, 670 nm (7 decimals)
    ("N-BK7", 1.5139054),         # REFERENCES 1.2 computed table, 670 nm
])
def test_sellmeier_table_values(material, value):
    assert plate_index(material, 670.0e-9) == pytest.approx(value, abs=1e-7)


def test_nbk7_catalogue_nd():
    # SCHOTT catalogue nd = 1.5168 at 587.5618 nm; REFERENCES 1.2 says the formula gives it to 1e-7.
    assert plate_index("N-BK7", 587.5618e-9) == pytest.approx(1.5168, abs=1e-6)


@pytest.mark.parametrize("thickness_m, material, angle_deg, expected", [
    (1e-3, 1.5, 10.0, 16.1413),            # REFERENCES 3a worked example (4 decimals)
    (1e-3, 1.5, 5.0, 4.0174),              # same table
    (3e-3, "fused_silica", 15.0, 103.3701),  # same table, n = 1.4570179 at 632.8 nm
])
def test_plate_tilt_count_matches_reference(thickness_m, material, angle_deg, expected):
    sweep = PlateTilt(thickness_m=thickness_m, material=material, start_deg=0.0, rate_deg_s=angle_deg,
                      wavelength_m=632.8e-9)
    _, truth = render_clip(Scene(geometry="straight"), Camera(width=8, height=8), sweep, 2, 1.0)
    assert truth["fringes"].iloc[-1] == pytest.approx(expected, abs=5e-5)


def test_gas_fill_count_matches_reference():
    # REFERENCES 3c: dry air 20 C, n - 1 = 2.71800e-4 (Ciddor), L = 50 mm, 632.991 nm, 0 -> 101.325 kPa:
    # N = 42.94 fringes (2 decimals).
    sweep = GasFill(cell_length_m=50e-3, start_pa=0.0, rate_pa_s=101325.0, wavelength_m=632.991e-9)
    _, truth = render_clip(Scene(), Camera(width=8, height=8), sweep, 2, 1.0)
    assert truth["fringes"].iloc[-1] == pytest.approx(42.94, abs=0.005)


def test_thermal_expansion_count_matches_reference():
    # REFERENCES 3f: aluminium, L0 = 50 mm, dT = 10 K, alpha = 23.1e-6: dL = 11.55 um, N = 36.50 at
    # 632.991 nm with n_air = 1.0002718. The generator neglects the air index (module docstring),
    # so it gives 2 dL / lambda_vac = 36.4931 (computed), 2.7e-4 relative below 36.50 x n_air.
    sweep = ThermalExpansion(sample_length_m=50e-3, expansion_per_K=23.1e-6, rate_K_s=10.0,
                             wavelength_m=632.991e-9)
    _, truth = render_clip(Scene(), Camera(width=8, height=8), sweep, 2, 1.0)
    assert truth["gap_m"].iloc[-1] - truth["gap_m"].iloc[0] == pytest.approx(11.55e-6, rel=1e-9)
    assert truth["fringes"].iloc[-1] * 1.0002718 == pytest.approx(36.50, abs=0.005)


# ---------------------------------------------------------------- multimode and blur
def test_two_equal_modes_wash_out_visibility_as_derived():
    # Derivation: (1 + V cos p1)/2 + (1 + V cos p2)/2 = 1 + V cos((p1 - p2)/2) cos((p1 + p2)/2), so
    # two equal modes whose orders differ by dN show V_eff = V |cos(pi dN)|.
    # Mode hop of 0.19 nm (REFERENCES 3b: ~3.9 fringes for 10 mm fused silica); the frame at t = 1 s
    # sits in the middle of a 2 s hop, where both modes carry half the power.
    lam1, jump = 670.0e-9, 0.19e-9
    sweep = DiodeScan(start_nm=670.0, rate_nm_s=0.0, hops=[ModeHop(0.0, 0.19, 2.0)],
                      plate_thickness_m=10e-3, gap_m=0.7e-3)
    n1, n2 = plate_index("fused_silica", lam1), plate_index("fused_silica", lam1 + jump)
    d_order = (2 * 0.7e-3 + 2 * 10e-3 * (n1 - 1)) / lam1 - (2 * 0.7e-3 + 2 * 10e-3 * (n2 - 1)) / (lam1 + jump)
    expected = 0.9 * abs(math.cos(math.pi * d_order))
    scene = Scene(geometry="straight", carrier_cyc_px=(1 / 16, 0.0), visibility=0.9, **FLAT)
    frames, truth = render_clip(scene, QUIET, sweep, 2, 1.0)
    assert bool(truth["multimode"].iloc[1])
    assert truth["visibility"].iloc[1] == pytest.approx(expected, abs=1e-9)
    # Measure it in the image: least-squares a + b cos + c sin at the known carrier.
    prof = frames[1].astype(float).mean(axis=0)
    x = np.arange(prof.size)
    design = np.column_stack([np.ones_like(x), np.cos(2 * np.pi * x / 16), np.sin(2 * np.pi * x / 16)])
    a, b, c = np.linalg.lstsq(design, prof, rcond=None)[0]
    # Tolerance 0.005: shot noise of 4.5e6 e- per pixel averaged over 48 x 64 px is < 1e-5 relative.
    assert math.hypot(b, c) / a == pytest.approx(expected, abs=0.005)
    assert expected < 0.8  # the chosen gap makes the wash-out visible (not a trivial pass)


def test_exposure_blur_visibility_is_discrete_sinc():
    # n equally spaced sub-samples of a linear phase ramp delta (fringes) apart average to
    # |sin(n pi delta) / (n sin(pi delta))| (geometric sum of phasors; common practice).
    fps, n_sub, frac = 10.0, 5, 0.8
    lam = 632.8e-9
    velocity = 2.0 * lam / 2 * fps  # 2 fringes per frame interval
    cam = Camera(width=8, height=8, exposure_fraction=frac, n_subsamples=n_sub)
    _, truth = render_clip(Scene(visibility=1.0), cam, MirrorSweep(velocity_m_s=velocity, wavelength_m=lam),
                           3, fps)
    delta = 2.0 * frac / n_sub
    expected = abs(math.sin(n_sub * math.pi * delta) / (n_sub * math.sin(math.pi * delta)))
    np.testing.assert_allclose(truth["visibility"], expected, atol=1e-9)


def test_mode_hop_truth_steps_and_flags():
    sweep = DiodeScan(start_nm=670.0, rate_nm_s=0.0, hops=[(0.5, 0.19, 0.25)], plate_thickness_m=10e-3)
    _, truth = render_clip(Scene(), Camera(width=8, height=8, exposure_fraction=0.0), sweep, 12, 10.0)
    mm = truth["multimode"].to_numpy()
    assert mm.tolist() == [False] * 5 + [True] * 3 + [False] * 4  # frames at 0.5, 0.6, 0.7 s
    # After the hop the count has jumped by the plate term only (gap 0): REFERENCES 3b,
    # dN = 2 t (n_g - 1) d_sigma with n_g = 1.472917 at 670.0 nm (REFERENCES 1.1 table) gives
    # -4.0021 for a 0.19 nm hop (the sheet's "about 3.9" is a rounded scale). Tolerance 0.003:
    # using n_g at the scan end instead of mid-scan errs by ~ d_sigma/sigma ~ 3e-4 relative.
    d_sigma = 1 / 670.0e-9 - 1 / 670.19e-9
    assert truth["fringes"].iloc[-1] == pytest.approx(-2 * 10e-3 * 0.472917 * d_sigma, abs=0.003)
    assert truth["wavelength_m"].iloc[-1] == pytest.approx(670.19e-9, rel=1e-12)


# ---------------------------------------------------------------- camera model
@pytest.mark.parametrize("bit_depth, gain, read_noise_e", [(16, 1.0, 0.0), (12, 4.0, 20.0)])
def test_shot_noise_variance(bit_depth, gain, read_noise_e):
    # Poisson statistics (photon transfer, common practice): var_DN = mean_DN / (e-/DN)
    # + (read noise / (e-/DN))^2 + 1/12 (rounding). A flat field: visibility 0, huge envelope.
    cam = Camera(width=64, height=48, bit_depth=bit_depth, full_well_e=10000, gain=gain,
                 read_noise_e=read_noise_e, exposure_fraction=0.0)
    scene = Scene(visibility=0.0, envelope_radius_px=1e6, peak_fraction=0.2, background_fraction=0.01)
    frames, _ = render_clip(scene, cam, MirrorSweep(), 1, 1.0, rng=1234)
    values = frames[0].astype(float).ravel()
    epd = cam.electrons_per_dn
    expected = values.mean() / epd + (read_noise_e / epd) ** 2 + 1 / 12
    # The sample variance of N Gaussian values has relative sd sqrt(2/(N-1)) = 2.6 % for N = 3072;
    # allow 4 sd.
    tol = 4 * math.sqrt(2 / (values.size - 1))
    assert values.var(ddof=1) == pytest.approx(expected, rel=tol)
    assert values.mean() == pytest.approx(0.21 * 10000 / epd, rel=0.01)


def test_saturation_clips_at_full_scale():
    cam = Camera(width=32, height=24, read_noise_e=0.0, exposure_fraction=0.0)
    frames, truth = render_clip(Scene(peak_fraction=1.2, **FLAT), cam, MirrorSweep(), 1, 1.0)
    assert frames.max() == 255
    assert truth["saturated_fraction"].iloc[0] > 0.3


def test_dark_interval_power_drift_and_exposure_step():
    scene = Scene(dark_intervals_s=[(0.3, 0.5)], power_drift_per_s=-0.1, exposure_steps=[(0.75, 0.5)],
                  background_fraction=0.05, **{"envelope_radius_px": 1e6})
    cam = Camera(width=32, height=24, exposure_fraction=0.0)
    frames, truth = render_clip(scene, cam, MirrorSweep(), 10, 10.0)
    assert truth["dark"].tolist() == [False] * 3 + [True] * 2 + [False] * 5
    assert (truth["brightness"][truth["dark"]] == 0).all()
    assert (truth["visibility"][truth["dark"]] == 0).all()
    # Dark frames hold the background only: 0.05 of full scale, within shot noise.
    assert frames[3].mean() == pytest.approx(0.05 * 255, rel=0.02)
    assert truth["brightness"].iloc[2] == pytest.approx(1 - 0.1 * 0.2)
    assert truth["brightness"].iloc[8] == pytest.approx((1 - 0.1 * 0.8) * 0.5)


def test_rgb_red_laser_mostly_in_red():
    cam = Camera(width=32, height=24, rgb=True, exposure_fraction=0.0)
    frames, _ = render_clip(Scene(background_fraction=0.0), cam, MirrorSweep(), 1, 1.0)
    means = frames[0].reshape(-1, 3).mean(axis=0)
    assert frames.shape == (1, 24, 32, 3)
    assert means[0] > 5 * means[1] > 0 and means[1] > means[2]


def test_center_drift_and_outside_center():
    scene = Scene(center_xy=(-40.0, 10.0), center_drift_px_s=(3.0, -1.0))
    _, truth = render_clip(scene, Camera(width=32, height=24), MirrorSweep(), 5, 2.0)
    np.testing.assert_allclose(truth["center_x"], -40.0 + 3.0 * truth["time_s"])
    np.testing.assert_allclose(truth["center_y"], 10.0 - 1.0 * truth["time_s"])


def test_shake_is_random_jitter_of_the_truth_center():
    scene = Scene(shake_px=0.5)
    _, truth = render_clip(scene, Camera(width=16, height=16), MirrorSweep(), 400, 100.0, rng=7)
    # Sample sd of 400 Gaussian draws: relative sd 1/sqrt(2*399) = 3.5 %; allow 4 sd.
    assert truth["center_x"].std() == pytest.approx(0.5, rel=0.14)


def test_render_clip_is_deterministic_for_a_seed():
    a, ta = render_clip(Scene(shake_px=0.3), Camera(width=16, height=16), MirrorSweep(), 3, 10.0, rng=5)
    b, tb = render_clip(Scene(shake_px=0.3), Camera(width=16, height=16), MirrorSweep(), 3, 10.0, rng=5)
    assert np.array_equal(a, b) and ta.equals(tb)


def test_render_frames_streams():
    gen = render_frames(Scene(), Camera(width=16, height=16), MirrorSweep(), np.arange(5) / 10.0)
    assert inspect.isgenerator(gen)
    first = next(gen)
    assert first.shape == (16, 16) and first.dtype == np.uint8


def test_straight_fringes_move_against_carrier_for_positive_count():
    # Docstring convention: phase 2 pi (k.(x - c) + m0); the fitted carrier phase at x = c tracks m0.
    lam = 632.8e-9
    scene = Scene(geometry="straight", carrier_cyc_px=(1 / 16, 0.0), center_xy=(0.0, 0.0), **FLAT)
    frames, truth = render_clip(scene, QUIET, MirrorSweep(velocity_m_s=0.1 * lam / 2, wavelength_m=lam), 3, 1.0)
    x = np.arange(64)
    design = np.column_stack([np.ones(64), np.cos(2 * np.pi * x / 16), np.sin(2 * np.pi * x / 16)])
    phases = []
    for f in frames:
        _, b, c = np.linalg.lstsq(design, f.astype(float).mean(axis=0), rcond=None)[0]
        phases.append(math.atan2(-c, b) / (2 * math.pi))
    measured = np.unwrap(np.array(phases) * 2 * np.pi) / (2 * np.pi)
    np.testing.assert_allclose(measured - measured[0], truth["fringes"], atol=1e-3)
    frac0 = truth["order"].iloc[0] % 1.0
    assert (phases[0] - frac0 + 0.5) % 1.0 - 0.5 == pytest.approx(0.0, abs=1e-3)


def test_tilted_plate_shifts_ring_center_towards_stationary_point():
    # With the plate normal leaning towards +x, the OPD's stationary point moves; check it is an
    # extremum of the model (derivative zero) rather than the optical axis.
    sweep = PlateTilt(thickness_m=1e-3, material=1.5, start_deg=3.0, gap_m=1.5e-3)
    st = sweep.state(0.0)
    u = ring_center_offset_px(st, 900.0)
    assert abs(u) > 1.0
    from fringecount.synthetic import opd_m
    f = 900.0

    def opd(x):
        cos_f = f / math.hypot(x, f)
        cos_i = (x * math.sin(st.plate_tilt_rad) + f * math.cos(st.plate_tilt_rad)) / math.hypot(x, f)
        return float(opd_m(st, st.wavelengths_m[0], cos_f, cos_i))
    slope = (opd(u + 0.01) - opd(u - 0.01)) / 0.02
    assert abs(slope) * 0.5 / 632.99e-9 < 1e-4  # < 1e-4 fringe per half pixel


# ---------------------------------------------------------------- writers
def test_video_roundtrip_lossless_and_mjpg(tmp_path):
    cv2 = pytest.importorskip("cv2")
    frames, _ = render_clip(Scene(), Camera(width=64, height=48), MirrorSweep(velocity_m_s=1e-6), 4, 10.0)
    for name, codec, lossless in [("a.mkv", "FFV1", True), ("b.avi", "MJPG", False)]:
        path = write_video(tmp_path / name, frames, 10.0, codec=codec)
        cap = cv2.VideoCapture(str(path))
        got = []
        while True:
            ok, img = cap.read()
            if not ok:
                break
            got.append(img[:, :, 1])
        cap.release()
        assert len(got) == 4
        err = np.abs(np.array(got).astype(int) - frames.astype(int))
        if lossless:
            assert err.max() == 0
        else:
            assert err.mean() < 4  # JPEG artefacts at OpenCV's default quality: a few DN (common practice)


def test_tiff_and_folder_roundtrip_16bit(tmp_path):
    tifffile = pytest.importorskip("tifffile")
    cv2 = pytest.importorskip("cv2")
    cam = Camera(width=32, height=24, bit_depth=12)
    frames, _ = render_clip(Scene(), cam, MirrorSweep(), 3, 10.0)
    assert frames.dtype == np.uint16 and frames.max() <= 4095
    path = write_tiff_stack(tmp_path / "s.tif", iter(frames))
    assert np.array_equal(tifffile.imread(path), frames)
    folder = write_image_folder(tmp_path / "imgs", frames)
    files = sorted(folder.iterdir())
    assert len(files) == 3
    assert np.array_equal(cv2.imread(str(files[2]), cv2.IMREAD_UNCHANGED), frames[2])


def test_bad_input_raises_input_error(tmp_path):
    with pytest.raises(InputError):
        Camera(bit_depth=7)
    with pytest.raises(InputError):
        DiodeScan(material="unobtainium")
    with pytest.raises(InputError):
        DiodeScan(hops=[(1.0, 0.2, 1.0), (1.5, 0.2, 0.1)])
    with pytest.raises(InputError):
        render_clip(Scene(), Camera(width=8, height=8), MirrorSweep(), 0, 10.0)
    with pytest.raises(InputError):
        render_clip(Scene(), Camera(width=8, height=8), object(), 2, 10.0)
    with pytest.raises(InputError):
        write_video(tmp_path / "x.avi", [np.zeros((8, 8), np.uint16)], 10.0)
    with pytest.raises(InputError):
        write_video(tmp_path / "x.mp4", [np.zeros((8, 8), np.uint8)], 10.0, codec="MJPG")


# ---------------------------------------------------------------- renderer agrees with its truth
@pytest.mark.parametrize("sweep", [
    MirrorSweep(d0_m=0.3e-3, velocity_m_s=0.37e-6),
    DiodeScan(start_nm=658.0, rate_nm_s=0.1, plate_thickness_m=5e-3, material="N-BK7", gap_m=1.9e-3),
], ids=["mirror", "diode+plate"])
def test_centre_pixel_follows_truth_order(sweep):
    # At the ring centre the model gives I = I0 (1 + V cos(2 pi m0)) (module docstring); the centre
    # pixel of a quiet render must follow the truth table's order, frame by frame.
    scene = Scene(visibility=0.9, center_xy=(31.0, 23.0), **FLAT)
    frames, truth = render_clip(scene, QUIET, sweep, 12, 2.0)
    centre = frames[:, 23, 31].astype(float)
    level = QUIET.full_well_e * scene.peak_fraction / QUIET.electrons_per_dn
    expected = level * (1 + 0.9 * np.cos(2 * np.pi * truth["order"].to_numpy()))
    # Shot noise: sqrt(9e6 e-) = 3000 e- = 2e-4 of the level per pixel; allow 1e-3 of the level.
    np.testing.assert_allclose(centre, expected, atol=1e-3 * level)


# ---------------------------------------------------------------- bundled sample clips
SAMPLES = Path(__file__).resolve().parents[1] / "sample_clips"
SAMPLE_NAMES_ON_DISK = ["diode_scan_hops", "gas_fill_dark_drift", "mirror_drive"]


@pytest.mark.parametrize("name", SAMPLE_NAMES_ON_DISK)
def test_sample_clip_files_agree(name):
    cv2 = pytest.importorskip("cv2")
    meta = json.loads((SAMPLES / f"{name}.json").read_text())
    truth = pd.read_csv(SAMPLES / f"{name}.truth.csv")
    cap = cv2.VideoCapture(str(SAMPLES / f"{name}.avi"))
    n_video = int(cap.get(cv2.CAP_PROP_FRAME_COUNT))
    ok, first = cap.read()
    cap.release()
    assert ok and first.shape[:2] == (meta["height"], meta["width"])
    assert n_video == len(truth) == meta["frames"]
    assert truth["fringes"].iloc[-1] == pytest.approx(meta["total_fringes"], abs=1e-8)
    # The brief's limit for followable motion: below 0.25 fringe/frame except across mode hops.
    steps = np.abs(np.diff(truth["fringes"]))
    hop = truth["multimode"].to_numpy()
    calm = ~(hop[1:] | hop[:-1])
    assert steps[calm].max() < 0.25
    for gap in meta["gaps"]:
        across = truth["fringes"].iloc[gap["to_frame"]] - truth["fringes"].iloc[gap["from_frame"]]
        assert across == pytest.approx(gap["fringes_across"], abs=1e-8)


def test_sample_wavelength_log_is_a_noisy_view_of_the_truth():
    log = pd.read_csv(SAMPLES / "diode_scan_hops.wavelength_log.csv")
    sweep_truth = pd.read_csv(SAMPLES / "diode_scan_hops.truth.csv")
    true_nm = np.interp(log["time_s"], sweep_truth["time_s"], sweep_truth["wavelength_m"] * 1e9)
    # 0.002 nm rms noise plus 0.0005 nm display rounding: 5 sd = 0.011 nm (the log has ~19 readings).
    assert np.abs(log["wavelength_nm"] - true_nm).max() < 0.011
    hop_times = sweep_truth.loc[sweep_truth["multimode"], "time_s"]
    for t in log["time_s"]:
        assert not ((hop_times - t).abs() < 0.02).any()  # no readings while multimode
    assert np.all(np.diff(log["time_s"]) >= 0.5 - 1e-9)


def test_demo_clip_sorts_first():
    videos = sorted(p.name for p in SAMPLES.iterdir()
                    if p.suffix not in (".json", ".md", ".txt", ".csv"))
    assert videos[0] == "diode_scan_hops.avi"


def test_sample_clip_truth_is_reproducible(tmp_path):
    from fringecount.synthetic import make_sample_clips
    make_sample_clips(tmp_path, names=["mirror_drive"])
    assert (tmp_path / "mirror_drive.truth.csv").read_text() == (SAMPLES / "mirror_drive.truth.csv").read_text()
    assert (json.loads((tmp_path / "mirror_drive.json").read_text())["total_fringes"]
            == json.loads((SAMPLES / "mirror_drive.json").read_text())["total_fringes"])


def test_entry_point_help_and_bad_choice(capsys):
    from fringecount.synthetic import main
    with pytest.raises(SystemExit) as exc:
        main(["--help"])
    assert exc.value.code == 0
    with pytest.raises(SystemExit) as exc:
        main(["out", "--only", "no_such_clip"])
    assert exc.value.code != 0


def test_piezo_hysteresis_loop_closes_and_branches_differ():
    from fringecount.synthetic import piezo_hysteresis_drive
    drive = piezo_hysteresis_drive(4e-6, 10.0, 0.15)
    assert drive(0.0) == pytest.approx(0.0, abs=1e-15) and drive(10.0) == pytest.approx(0.0, abs=1e-15)
    assert drive(5.0) == pytest.approx(4e-6)
    # Same voltage (u = 0.5) going up (t = 2.5 s) and down (t = 7.5 s): the branches differ by
    # 2 h u (1 - u) x stroke = 0.075 x 4 um (the model stated in the docstring).
    assert drive(7.5) - drive(2.5) == pytest.approx(2 * 0.15 * 0.25 * 4e-6, rel=1e-12)
    _, truth = render_clip(Scene(), Camera(width=8, height=8), MirrorSweep(displacement_m=drive), 11, 1.0)
    assert truth["fringes"].iloc[-1] == pytest.approx(0.0, abs=1e-9)
    assert truth["fringes"].max() == pytest.approx(2 * 4e-6 / 632.9908e-9, rel=1e-12)
