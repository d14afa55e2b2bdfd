"""End-to-end checks of the counting pipeline against ground truth.

Ground truth comes from the synthetic generator (fringecount.synthetic), whose
forward model is itself checked against outside physics in tests/test_synthetic.py
(REFERENCES §3e exact Haidinger ring radii, §3b group-index scan, §3a tilted plate).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import fringecount.synthetic as S
from fringecount.cli import main
from fringecount.pipeline import count
from fringecount.settings import CountSettings

CLIPS = Path(__file__).resolve().parent.parent / "sample_clips"


def _npy_clip(tmp_path, *, seed=0, n=80, center=(60.0, 45.0), velocity=0.6e-6, dark=()):
    rng = np.random.default_rng(seed)
    scene = S.Scene(center_xy=center, dark_intervals_s=dark)
    cam = S.Camera(width=128, height=96, focal_px=250.0)
    sweep = S.MirrorSweep(d0_m=0.3e-3, velocity_m_s=velocity)
    frames, truth = S.render_clip(scene, cam, sweep, n, 25.0, rng=rng)
    path = tmp_path / f"clip{seed}.npy"
    np.save(path, frames)
    return path, truth


def test_lossless_mirror_sweep_sub_millifringe(tmp_path):
    # Truth: on-axis order change of the generator (REFERENCES §3e forward model).
    path, truth = _npy_clip(tmp_path)
    r = count(path, CountSettings(fps=25.0))
    err = r.total_fringes - truth["fringes"].iloc[-1]
    # issue #2 asks for 1/1000 fringe with an honest sigma: both must hold here
    assert abs(err) < 1e-3
    assert abs(err) < 4 * r.total_fringes_sigma
    assert r.summary["gaps"] == []


def test_sign_follows_expanding_rings(tmp_path):
    # Convention (common practice, stated in the issue): rings born at the centre and
    # expanding = increasing on-axis order = positive count; a receding mirror reverses it.
    p_out, t_out = _npy_clip(tmp_path, seed=1, velocity=+0.5e-6)
    p_in, t_in = _npy_clip(tmp_path, seed=2, velocity=-0.5e-6)
    assert t_out["fringes"].iloc[-1] > 1 and t_in["fringes"].iloc[-1] < -1
    assert count(p_out, CountSettings(fps=25.0)).total_fringes > 1
    assert count(p_in, CountSettings(fps=25.0)).total_fringes < -1


def test_sigma_coverage_over_repeated_draws(tmp_path):
    # Coverage of the reported 1-sigma on independent noise draws and centres.
    # With 6 draws, P(all |z| < 3) = 0.984 for a Gaussian with the right width.
    zs = []
    for seed in range(6):
        rng = np.random.default_rng(100 + seed)
        c = (60 + rng.uniform(-6, 6), 45 + rng.uniform(-6, 6))
        path, truth = _npy_clip(tmp_path, seed=100 + seed, center=c, n=60)
        r = count(path, CountSettings(fps=25.0))
        zs.append((r.total_fringes - truth["fringes"].iloc[-1]) / r.total_fringes_sigma)
    assert np.all(np.abs(zs) < 3), zs


def test_centre_found_to_subpixel(tmp_path):
    # atol 0.1 px: the noise-free-centre tolerance used for clean blobs in trackpy's tests (STYLE §10)
    path, truth = _npy_clip(tmp_path, center=(57.3, 48.6))
    r = count(path, CountSettings(fps=25.0))
    c = r.summary["center"]
    assert abs(c["x"] - truth["center_x"].iloc[0]) < 0.1
    assert abs(c["y"] - truth["center_y"].iloc[0]) < 0.1


def test_dark_interval_is_a_gap_and_is_bridged(tmp_path):
    path, truth = _npy_clip(tmp_path, seed=3, n=90, dark=((1.4, 1.7),))
    r = count(path, CountSettings(fps=25.0))
    gaps = r.gaps
    assert len(gaps) == 1 and gaps["reason"].iloc[0] == "dark"
    dark_frames = truth.loc[truth["dark"], "frame"]
    assert gaps["first_frame"].iloc[0] <= dark_frames.min() + 1
    assert gaps["last_frame"].iloc[0] >= dark_frames.max() - 1
    err = r.total_fringes - truth["fringes"].iloc[-1]
    assert abs(err) < max(3 * r.total_fringes_sigma, 0.01)
    # frames that were dark for the whole exposure (truth visibility 0) are never trusted
    fully_dark = truth.loc[truth["visibility"] < 0.05, "frame"]
    assert len(fully_dark) > 0
    assert not bool(r.frames.loc[r.frames["frame"].isin(fully_dark), "trusted"].any())


def test_sample_clip_with_mode_hops_and_wavelength_log():
    # Bundled demo: two mode hops bridged with the wavemeter log (method of exact fractions).
    truth = json.loads((CLIPS / "diode_scan_hops.json").read_text())
    r = count(CLIPS / "diode_scan_hops.avi",
              CountSettings(wavelength_log=str(CLIPS / "diode_scan_hops.wavelength_log.csv")))
    err = r.total_fringes - truth["total_fringes"]
    assert abs(err) < 3 * r.total_fringes_sigma
    assert len(r.gaps) == 2 and set(r.gaps["reason"]) == {"low_visibility"}
    assert not r.summary["ambiguous"]


def test_sample_clip_without_log_is_flagged_ambiguous():
    # Without a wavelength log a mode hop may hide whole fringes: the sigma must say so.
    truth = json.loads((CLIPS / "diode_scan_hops.json").read_text())
    r = count(CLIPS / "diode_scan_hops.avi")
    assert r.summary["ambiguous"]
    assert abs(r.total_fringes - truth["total_fringes"]) < 3 * r.total_fringes_sigma


def test_cli_json_contract_and_result_folder(tmp_path, capsys):
    path, truth = _npy_clip(tmp_path, seed=4, n=40)
    out = tmp_path / "res"
    assert main(["count", str(path), "--fps", "25", "--json", "--out", str(out), "-q"]) == 0
    summary = json.loads(capsys.readouterr().out)
    for key in ("total_fringes", "total_fringes_sigma", "frames", "fps", "gaps"):
        assert key in summary
    frames = pd.read_csv(out / "frames.csv")
    assert {"frame", "time_s", "fringes", "visibility", "trusted"} <= set(frames.columns)
    assert json.loads((out / "summary.json").read_text())["total_fringes"] == summary["total_fringes"]
    # an existing result is never silently overwritten
    assert main(["count", str(path), "--fps", "25", "--out", str(out), "-q"]) != 0
    err = capsys.readouterr().err
    assert "--force" in err and "Traceback" not in err


@pytest.mark.parametrize("args, needle", [
    (["count", "no_such_clip.avi"], "no such file"),
    (["count", "{clip}", "--fps", "25", "--center", "5000,5000", "--outer", "10"], "region of interest"),
    (["count", "{clip}", "--fps", "25", "--crop", "900,900,1000,1000"], "crop"),
])
def test_bad_input_ends_in_one_line(tmp_path, capsys, args, needle):
    path, _ = _npy_clip(tmp_path, seed=5, n=20)
    argv = [a.replace("{clip}", str(path)) for a in args]
    assert main(argv) != 0
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and needle in err.lower(), err


def test_no_fringes_is_a_clear_error(tmp_path, capsys):
    rng = np.random.default_rng(7)
    noise = rng.integers(90, 110, size=(20, 64, 64), dtype=np.uint8)
    np.save(tmp_path / "flat.npy", noise)
    assert main(["count", str(tmp_path / "flat.npy"), "--fps", "10"]) != 0
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "fringe" in err.lower()


@pytest.mark.parametrize("carrier", [(0.05, 0.02), (0.0, 0.06), (0.08, -0.03)])
def test_straight_fringes_follow_the_carrier_convention(tmp_path, carrier):
    # Straight fringes (tilted mirror): no absolute sign without a reference. fringecount
    # counts positive when fringes move along its carrier direction (x > 0, or y > 0 when
    # vertical); the generator's phase 2*pi*(k.x + m0) moves fringes against k as m0 grows,
    # so the two agree up to the sign of k . direction.
    scene = S.Scene(geometry="straight", carrier_cyc_px=carrier)
    cam = S.Camera(width=160, height=120, focal_px=400.0)
    frames, truth = S.render_clip(scene, cam, S.MirrorSweep(d0_m=0.3e-3, velocity_m_s=0.4e-6), 60, 25.0,
                                  rng=np.random.default_rng(3))
    np.save(tmp_path / "s.npy", frames)
    r = count(tmp_path / "s.npy", CountSettings(fps=25.0))
    assert r.summary["geometry"] == "straight"
    d = np.asarray(r.summary["carrier_direction"])
    expected = -truth["fringes"].iloc[-1] * np.sign(np.dot(carrier, d))
    assert abs(r.total_fringes - expected) < max(4 * r.total_fringes_sigma, 2e-3)


@pytest.mark.parametrize("center", [(-30.0, 60.0), (200.0, -40.0), (150.0, 110.0)])
def test_ring_centre_outside_or_at_the_edge_of_the_frame(tmp_path, center):
    # Only arcs of the rings are visible; the count still refers to the on-axis order.
    cam = S.Camera(width=160, height=120, focal_px=500.0)
    frames, truth = S.render_clip(S.Scene(center_xy=center), cam, S.MirrorSweep(d0_m=0.2e-3, velocity_m_s=0.5e-6),
                                  60, 25.0, rng=np.random.default_rng(4))
    np.save(tmp_path / "o.npy", frames)
    r = count(tmp_path / "o.npy", CountSettings(fps=25.0))
    assert r.summary["geometry"] == "rings"
    assert abs(r.summary["center"]["x"] - center[0]) < 1.0 and abs(r.summary["center"]["y"] - center[1]) < 1.0
    assert abs(r.total_fringes - truth["fringes"].iloc[-1]) < max(4 * r.total_fringes_sigma, 2e-3)


def test_rings_finer_than_the_pixels_are_left_out(tmp_path):
    # Beyond the radius where rings are closer than ~3 px (sampling limit, common practice)
    # the pattern aliases; the fit keeps to the resolved rings.
    cam = S.Camera(width=160, height=120, focal_px=250.0)
    frames, truth = S.render_clip(S.Scene(center_xy=(80.0, 60.0)), cam,
                                  S.MirrorSweep(d0_m=0.5e-3, velocity_m_s=0.5e-6), 60, 25.0,
                                  rng=np.random.default_rng(5))
    np.save(tmp_path / "f.npy", frames)
    r = count(tmp_path / "f.npy", CountSettings(fps=25.0))
    assert r.summary["roi"]["outer_px"] < 100
    assert abs(r.total_fringes - truth["fringes"].iloc[-1]) < max(4 * r.total_fringes_sigma, 2e-3)


def test_motion_too_fast_to_follow_is_a_gap_that_admits_whole_fringes(tmp_path):
    # A burst at 0.45 fringe/frame: near the 0.5 fringe/frame aliasing limit of temporal
    # unwrapping (Itoh 1982), so the steps cannot be followed; the gap must be flagged and its
    # sigma must cover the fringes that passed unseen.
    lam = 632.9908e-9

    def displacement(t):
        v1, v2 = 0.1 * 25 * lam / 2, 0.45 * 25 * lam / 2
        t = np.asarray(t, float)
        return np.where(t < 1.0, v1 * t, np.where(t < 1.4, v1 + v2 * (t - 1.0), v1 + 0.4 * v2 + v1 * (t - 1.4)))

    cam = S.Camera(width=160, height=120, focal_px=500.0, exposure_fraction=0.1)
    frames, truth = S.render_clip(S.Scene(center_xy=(80.0, 60.0)), cam,
                                  S.MirrorSweep(d0_m=0.2e-3, displacement_m=displacement), 75, 25.0,
                                  rng=np.random.default_rng(1))
    np.save(tmp_path / "fast.npy", frames)
    r = count(tmp_path / "fast.npy", CountSettings(fps=25.0))
    assert list(r.gaps["reason"]) == ["too_fast"]
    g = r.gaps.iloc[0]
    assert 24 <= g["first_frame"] <= 27 and 33 <= g["last_frame"] <= 37
    assert r.summary["ambiguous"]
    assert abs(r.total_fringes - truth["fringes"].iloc[-1]) < 3 * r.total_fringes_sigma


def test_a_bumped_centre_is_flagged_center_lost_and_bridged(tmp_path):
    # The ring centre jumps by ~7 px for 0.4 s (a bumped mirror) and returns: the fringes are
    # still there but no longer symmetric about the centre, so those frames are 'center_lost'
    # (not a mode hop), and the steady motion is carried across them.
    def path(t):
        bump = np.where((np.asarray(t) > 1.2) & (np.asarray(t) < 1.6), 6.0, 0.0)
        return (80.0 + bump, 60.0 + 0.5 * bump)

    cam = S.Camera(width=160, height=120, focal_px=500.0)
    frames, truth = S.render_clip(S.Scene(center_path=path), cam, S.MirrorSweep(d0_m=0.2e-3, velocity_m_s=0.4e-6),
                                  75, 25.0, rng=np.random.default_rng(2))
    np.save(tmp_path / "bump.npy", frames)
    r = count(tmp_path / "bump.npy", CountSettings(fps=25.0))
    assert list(r.gaps["reason"]) == ["center_lost"]
    assert abs(r.total_fringes - truth["fringes"].iloc[-1]) < 3 * r.total_fringes_sigma


def test_back_and_forth_motion_keeps_an_honest_small_sigma(tmp_path):
    # A mirror swinging +-2 fringes several times: the count returns near zero, and the sigma
    # must stay at the noise level (the cyclic-error estimate follows the path, not the net span).
    drive = S.sinusoidal_drive(0.6e-6, 1.6)   # 0.6 um amplitude, 1.6 s period (<= 0.3 fringe/frame)
    cam = S.Camera(width=128, height=96, focal_px=250.0)
    frames, truth = S.render_clip(S.Scene(center_xy=(60.0, 45.0)), cam,
                                  S.MirrorSweep(d0_m=0.3e-3, displacement_m=drive), 120, 25.0,
                                  rng=np.random.default_rng(8))
    np.save(tmp_path / "swing.npy", frames)
    r = count(tmp_path / "swing.npy", CountSettings(fps=25.0))
    assert r.summary["gaps"] == []
    assert r.total_fringes_sigma < 0.02 and not r.summary["ambiguous"]
    assert abs(r.total_fringes - truth["fringes"].iloc[-1]) < max(4 * r.total_fringes_sigma, 2e-3)
