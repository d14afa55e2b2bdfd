"""Tests of fringecount.bridge: fringe-rate carry across gaps, input checks, the log reader.

Synthetic tracks are built directly as tables from a known count history
(``fringecount._bridge._simulate.tables_from_count``): Gaussian phase noise on
every trusted frame, a random whole number removed from every stretch after the
first, so that across a gap only the fraction survives.

Sources of the checks
---------------------
* Constant-velocity mirror: N = 2 d / lambda grows linearly in time (REFERENCES
  section 3d, d = N lambda / (2 n_air)); the count across a gap is then exactly
  the rate times the gap time.
* Choosing the integer that puts the measured fraction nearest a prediction: the
  method of exact fractions (Benoit 1898, REFERENCES section 6), checked against
  a brute-force search over integers written here.
* Phase noise per frame and what it means for the end phases: the Rife-Boorstyn
  bound (REFERENCES section 6) is the reason a decided gap carries only the noise
  of its two end phases.
* Coverage: for a Gaussian error, 68.27 % of draws fall within 1 sigma and
  95.45 % within 2 sigma (common practice); the tolerance is 3 binomial standard
  deviations of the observed fraction, sqrt(p (1 - p) / n_draws).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fringecount._bridge._simulate import tables_from_count
from fringecount.bridge import (OUTPUT_COLUMNS, BridgeInputError, WavelengthLogError, bridge_gaps,
                                read_wavelength_log)
from fringecount._bridge._integers import choose_integer
from fringecount.errors import InputError

FPS = 30.0


def _true_across(true_fringes, gaps_row, n_frames):
    """True count change across one gap, as the bridge defines it."""
    first, last = int(gaps_row["first_frame"]), int(gaps_row["last_frame"])
    a = first - 1 if first > 0 else first
    b = last + 1 if last + 1 < n_frames else last
    return float(true_fringes[b] - true_fringes[a])


def _binomial_band(p: float, n: int) -> float:
    """3 binomial standard deviations of an observed fraction (the stated coverage tolerance)."""
    return 3.0 * math.sqrt(p * (1 - p) / n)


def _brute_force_integer(fraction: float, prediction: float) -> int:
    """Integer k in [-1000, 1000] minimising |fraction + k - prediction| (independent check)."""
    ks = np.arange(-1000, 1001)
    return int(ks[np.argmin(np.abs(fraction + ks - prediction))])


# --------------------------------------------------------------------------- rate carry


@pytest.mark.parametrize("rate", [0.8, 3.3, -2.45])
def test_constant_velocity_dark_gap_right_integer_small_sigma(rate):
    # Constant-velocity mirror (REFERENCES 3d: N proportional to displacement), 5-frame dark gap.
    rng = np.random.default_rng(1234)
    t = np.arange(400) / FPS
    true = rate * t + 0.3
    untrusted = np.zeros(t.size, bool)
    untrusted[150:155] = True
    noise = 0.01  # fringes per frame
    track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=noise, rng=rng)
    out = bridge_gaps(track, gaps)
    row = out.iloc[0]
    truth = _true_across(true, row, t.size)
    assert row["method"] == "rate"
    assert not row["ambiguous"] and not row["hop_suspected"]
    assert row["p_chosen"] > 0.99
    # Decided gap: sigma is the noise of the two end phases only, sqrt(2) * 0.01.
    assert row["fringes_across_sigma"] == pytest.approx(math.sqrt(2) * noise, rel=1e-9)
    # Right integer: the error is end-phase noise, below 5 sigma (5 * 0.014 = 0.07 fringe).
    assert abs(row["fringes_across"] - truth) < 5 * row["fringes_across_sigma"]
    # The integer must agree with a brute-force search (Benoit 1898: nearest candidate).
    k = _brute_force_integer(row["fraction_measured"], row["rate_prediction"])
    assert row["fringes_across"] == pytest.approx(row["fraction_measured"] + k, abs=1e-12)
    # Rate prediction itself: within 4 sigma of the truth.
    assert abs(row["rate_prediction"] - truth) < 4 * row["rate_prediction_sigma"]


def test_integer_choice_matches_brute_force_over_many_gaps():
    # Benoit 1898 (least-squares choice among integer candidates) vs brute force, many random rates.
    rng = np.random.default_rng(7)
    t = np.arange(240) / FPS
    for _ in range(30):
        v = rng.uniform(-6, 6)
        true = v * t + 0.5 * rng.uniform(-1, 1) * t ** 2
        untrusted = np.zeros(t.size, bool)
        g0 = int(rng.integers(40, 180))
        untrusted[g0:g0 + int(rng.integers(1, 30))] = True
        track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.02, rng=rng)
        row = bridge_gaps(track, gaps).iloc[0]
        k = _brute_force_integer(row["fraction_measured"], row["rate_prediction"])
        assert row["fringes_across"] == pytest.approx(row["fraction_measured"] + k, abs=1e-12)
        assert -0.5 <= row["fraction_measured"] < 0.5


def test_long_gap_with_velocity_change_is_ambiguous_and_covered():
    # Mirror slows from 4 to 1.5 fringe/s at an unknown moment inside a 3 s dark gap.
    # The truth lies between v_before T and v_after T; the model term |dv| T / sqrt(12) must cover it.
    rng = np.random.default_rng(99)
    t = np.arange(600) / FPS
    g0, g1 = 200, 290  # 90 untrusted frames = 3 s
    for t_change in np.linspace(t[g0], t[g1], 7):
        true = np.where(t < t_change, 4.0 * t, 4.0 * t_change + 1.5 * (t - t_change))
        untrusted = np.zeros(t.size, bool)
        untrusted[g0:g1] = True
        track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.01, rng=rng)
        row = bridge_gaps(track, gaps).iloc[0]
        truth = _true_across(true, row, t.size)
        assert row["ambiguous"]
        assert row["p_chosen"] < 0.99
        # Uniform model: the worst error is half the interval = sqrt(3) sigma_model < 2 sigma.
        assert abs(row["fringes_across"] - truth) <= 2.0 * row["fringes_across_sigma"]
        assert row["fringes_across_sigma"] > 1.0  # |dv| T / sqrt(12) = 2.5 * 3 / 3.46 = 2.2 fringes


def test_rate_carry_sigma_coverage_decided_gaps():
    # Repeated draws of a constant-velocity track with a 4-frame dark gap: the error of a decided gap is
    # end-phase noise, so it must follow N(0, sigma): 68.27 % within 1 sigma, 95.45 % within 2 (common
    # practice), each with a 3-binomial-sigma tolerance for 300 draws. A false hop alarm (|z| > HOP_Z = 4)
    # has Gaussian probability 6.3e-5 per gap; more than 2 in 300 draws (Poisson p < 1e-6) fails.
    rng = np.random.default_rng(2024)
    t = np.arange(160) / FPS
    n_draws = 300
    within1 = within2 = alarms = 0
    for _ in range(n_draws):
        v = rng.uniform(-5, 5)
        true = v * t + rng.uniform(0, 1)
        untrusted = np.zeros(t.size, bool)
        untrusted[80:84] = True
        track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.03, rng=rng)
        row = bridge_gaps(track, gaps).iloc[0]
        if row["ambiguous"]:
            assert row["hop_suspected"]
            alarms += 1
            continue
        err = abs(row["fringes_across"] - _true_across(true, row, t.size)) / row["fringes_across_sigma"]
        within1 += err <= 1
        within2 += err <= 2
    assert alarms <= 2
    n_ok = n_draws - alarms
    assert abs(within1 / n_ok - 0.6827) <= _binomial_band(0.6827, n_ok)
    assert abs(within2 / n_ok - 0.9545) <= _binomial_band(0.9545, n_ok)


def test_rate_carry_sigma_coverage_ambiguous_gaps():
    # Velocity changes by a random amount at a random moment inside a long gap. Whatever the integer
    # outcome, the reported sigma must cover the truth at least as often as a Gaussian 2-sigma interval
    # (95.45 %, minus a 3-binomial-sigma tolerance for 200 draws); a decided-but-wrong integer
    # (p_chosen > 0.99 and wrong by a whole fringe) must not occur.
    rng = np.random.default_rng(31)
    t = np.arange(300) / FPS
    n_draws = 200
    within2 = 0
    for _ in range(n_draws):
        v0 = rng.uniform(-4, 4)
        v1 = v0 + rng.normal(0, 0.5)
        g0 = 120
        glen = int(rng.integers(20, 60))
        tc = rng.uniform(t[g0], t[g0 + glen])
        true = np.where(t < tc, v0 * t, v0 * tc + v1 * (t - tc))
        untrusted = np.zeros(t.size, bool)
        untrusted[g0:g0 + glen] = True
        track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.02, rng=rng)
        row = bridge_gaps(track, gaps).iloc[0]
        err = row["fringes_across"] - _true_across(true, row, t.size)
        within2 += abs(err) <= 2 * row["fringes_across_sigma"]
        assert not (row["p_chosen"] > 0.99 and abs(err) > 0.5)
    assert within2 / n_draws >= 0.9545 - _binomial_band(0.9545, n_draws)


def test_phase_returning_off_prediction_is_a_suspected_hop():
    # A mode hop moves the count by D * delta_sigma (REFERENCES 3b: ~3.9 fringes for 10 mm fused silica),
    # so the phase returns where the rate does not put it. The gap's reason is "dark" (no visibility hint):
    # the inconsistency alone must trigger the hop prior, sigma ~ hop_range / sqrt(3).
    rng = np.random.default_rng(5)
    t = np.arange(300) / FPS
    true = 1.2 * t
    true[150:] += 3.9  # hop during the gap
    untrusted = np.zeros(t.size, bool)
    untrusted[148:153] = True
    track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.01, rng=rng)
    row = bridge_gaps(track, gaps, hop_range_fringes=6.0).iloc[0]
    truth = _true_across(true, row, t.size)
    assert row["hop_suspected"] and row["ambiguous"]
    assert row["fringes_across_sigma"] == pytest.approx(math.sqrt(6.0 ** 2 / 3 + 2 * 0.01 ** 2), rel=1e-3)
    assert abs(row["fringes_across"] - truth) <= 2 * row["fringes_across_sigma"]
    # The fraction is still measured exactly: the error is a whole number of fringes (+ end noise).
    assert abs(wrap(row["fringes_across"] - truth)) < 0.07


def wrap(x):
    return x - math.floor(x + 0.5)


@pytest.mark.parametrize("reason", ["low_visibility", "too_fast"])
@pytest.mark.parametrize("n_frames, expect_hop", [(1, False), (2, False), (3, True), (12, True)])
def test_low_visibility_rule_without_log(n_frames, expect_hop, reason):
    # Documented rule (bridge module docstring): a low-visibility gap may hide a mode hop, a too-fast gap a rate
    # excursion; only a 1-2 frame gap whose phase returns where a tight rate prediction puts it is trusted.
    rng = np.random.default_rng(11)
    t = np.arange(200) / FPS
    true = 2.0 * t
    untrusted = np.zeros(t.size, bool)
    untrusted[100:100 + n_frames] = True
    track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.01, rng=rng, reasons=reason)
    row = bridge_gaps(track, gaps, hop_range_fringes=4.0).iloc[0]
    assert bool(row["hop_suspected"]) is expect_hop
    assert bool(row["ambiguous"]) is expect_hop
    if expect_hop:
        assert row["fringes_across_sigma"] >= 4.0 / math.sqrt(3)
    else:
        assert row["fringes_across_sigma"] == pytest.approx(math.sqrt(2) * 0.01)
    # The same gap with reason "dark" is never a suspected hop (the phase is where the rate puts it).
    gaps_dark = gaps.assign(reason="dark")
    assert not bridge_gaps(track, gaps_dark).iloc[0]["hop_suspected"]


def test_too_fast_gap_with_rate_spike_is_covered():
    # A stage jerk: 0.25 fringe/frame on both sides, 0.8 fringe/frame for 5 frames inside the gap (aliased for
    # the tracker, Itoh 1982: steps above half a fringe cannot be unwrapped). The edge rates agree, so the rate
    # carry alone would be confidently wrong by ~3 fringes; the too_fast rule must flag it and cover the truth
    # within 2 sigma (sigma ~ hop_range / sqrt(3) = 3.46 fringes).
    rng = np.random.default_rng(21)
    n = 200
    step = np.full(n, 0.25)
    step[100:105] = 0.8
    true = np.r_[0.0, np.cumsum(step[:-1])]
    t = np.arange(n) / FPS
    untrusted = np.zeros(n, bool)
    untrusted[99:106] = True
    track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.01, rng=rng, reasons="too_fast")
    row = bridge_gaps(track, gaps).iloc[0]
    truth = _true_across(true, row, n)
    assert row["ambiguous"] and row["hop_suspected"]
    assert abs(row["fringes_across"] - truth) > 2.0  # the rate carry alone misses the spike
    assert abs(row["fringes_across"] - truth) <= 2 * row["fringes_across_sigma"]


def test_hop_range_zero_removes_prior_width():
    rng = np.random.default_rng(12)
    t = np.arange(200) / FPS
    true = 2.0 * t
    untrusted = np.zeros(t.size, bool)
    untrusted[100:110] = True
    track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.01, rng=rng, reasons="low_visibility")
    row = bridge_gaps(track, gaps, hop_range_fringes=0.0).iloc[0]
    assert row["hop_suspected"]
    assert row["fringes_across_sigma"] == pytest.approx(math.sqrt(2) * 0.01)


@pytest.mark.parametrize("at_start", [True, False])
def test_gap_at_clip_edge_is_extrapolated(at_start):
    # Constant acceleration: N = v t + a t^2 / 2; the one-sided quadratic extrapolation must reach the clip
    # edge within its sigma (3 sigma, Gaussian).
    rng = np.random.default_rng(3)
    t = np.arange(200) / FPS
    true = 2.0 * t + 0.2 * t ** 2
    untrusted = np.zeros(t.size, bool)
    if at_start:
        untrusted[:8] = True
    else:
        untrusted[-8:] = True
    track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.01, rng=rng)
    row = bridge_gaps(track, gaps).iloc[0]
    truth = _true_across(true, row, t.size)
    assert row["method"] == "one_sided_rate"
    assert math.isnan(row["p_chosen"]) and math.isnan(row["fraction_measured"])
    assert abs(row["fringes_across"] - truth) <= 3 * row["fringes_across_sigma"]
    assert row["fringes_across_sigma"] < 0.1
    assert not row["ambiguous"]


def test_clip_edge_extrapolation_coverage():
    # Random velocity, acceleration and jerk; an untrusted run of 3-40 frames at the clip start. The one-sided
    # quadratic extrapolation's sigma (fit covariance + curvature term) must cover the truth within 2 sigma at
    # least as often as a Gaussian (95.45 %) minus 3 binomial sigma for 150 draws.
    n_draws = 150
    within2 = 0
    t = np.arange(200) / FPS
    for seed in range(n_draws):
        rng = np.random.default_rng(500 + seed)
        v, a, j = rng.uniform(-3, 3), rng.normal(0, 0.5), rng.normal(0, 0.2)
        true = v * t + a * t ** 2 / 2 + j * t ** 3 / 6
        untrusted = np.zeros(t.size, bool)
        n_gap = int(rng.integers(3, 40))
        untrusted[:n_gap] = True
        track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.02, rng=rng)
        row = bridge_gaps(track, gaps).iloc[0]
        within2 += abs(row["fringes_across"] - (true[n_gap] - true[0])) <= 2 * row["fringes_across_sigma"]
    assert within2 / n_draws >= 0.9545 - _binomial_band(0.9545, n_draws)


@given(fraction=st.floats(-0.5, 0.4999), prediction=st.floats(-900, 900), pred_sigma=st.floats(1e-3, 20),
       meas_sigma=st.floats(1e-4, 0.1))
@settings(max_examples=200, deadline=None)
def test_choose_integer_properties(fraction, prediction, pred_sigma, meas_sigma):
    # Exact fractions (Benoit 1898) for one integer: the most probable candidate is the one nearest the
    # prediction (brute force), probabilities are proper, and the covering sigma is at least the rms spread.
    choice = choose_integer(fraction, prediction, pred_sigma, meas_sigma)
    k = _brute_force_integer(fraction, prediction)
    assert abs(fraction + choice.k - prediction) <= abs(fraction + k - prediction) + 1e-9
    assert 0 < choice.p_chosen <= 1
    assert choice.cover_sigma >= choice.spread_sigma >= 0


def test_total_count_sigma_covers_truth_over_draws():
    # Pipeline contract: total = (sum of in-stretch changes) + (sum of fringes_across); its sigma is the
    # root-sum-square of the end noise and every fringes_across_sigma. Over draws with several gaps of
    # mixed kinds, |total error| <= 2 sigma must hold at least 95.45 % - 3 binomial sigma of the time.
    rng = np.random.default_rng(77)
    t = np.arange(500) / FPS
    n_draws = 60
    within2 = 0
    for _ in range(n_draws):
        v = rng.uniform(0.5, 3.0)
        true = v * t + 0.05 * np.sin(t)
        untrusted = np.zeros(t.size, bool)
        untrusted[60:64] = True
        untrusted[200:240] = True
        untrusted[350:353] = True
        track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.02, rng=rng,
                                        reasons=["dark", "low_visibility", "too_fast"])
        out = bridge_gaps(track, gaps)
        seg = track[track.segment >= 0].groupby("segment")["fringes"]
        total = float((seg.last() - seg.first()).sum() + out["fringes_across"].sum())
        sigma = math.sqrt(2 * 0.02 ** 2 + float((out["fringes_across_sigma"] ** 2).sum()))
        within2 += abs(total - (true[-1] - true[0])) <= 2 * sigma
    assert within2 / n_draws >= 0.9545 - _binomial_band(0.9545, n_draws)


# --------------------------------------------------------------------------- table contract


def test_output_keeps_rows_order_index_and_does_not_touch_inputs():
    rng = np.random.default_rng(8)
    t = np.arange(300) / FPS
    true = 1.5 * t
    untrusted = np.zeros(t.size, bool)
    untrusted[:3] = True
    untrusted[100:104] = True
    untrusted[200:230] = True
    untrusted[-2:] = True
    track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.01, rng=rng,
                                    reasons=["dark", "saturated", "center_lost", "dark"])
    gaps = gaps.iloc[::-1].set_index(pd.Index([40, 30, 20, 10]))
    gaps["extra"] = ["a", "b", "c", "d"]
    track_before, gaps_before = track.copy(), gaps.copy()
    out = bridge_gaps(track, gaps)
    pd.testing.assert_frame_equal(track, track_before)
    pd.testing.assert_frame_equal(gaps, gaps_before)
    assert list(out.index) == [40, 30, 20, 10]
    assert list(out["extra"]) == ["a", "b", "c", "d"]
    for c in OUTPUT_COLUMNS:
        assert c in out.columns
    assert out["ambiguous"].dtype == bool
    assert np.isfinite(out["fringes_across"]).all() and np.isfinite(out["fringes_across_sigma"]).all()
    assert set(out["method"]) == {"rate", "one_sided_rate"}


def test_no_gaps_gives_empty_table_with_columns():
    rng = np.random.default_rng(9)
    t = np.arange(50) / FPS
    track, gaps = tables_from_count(t, t, np.zeros(t.size, bool), fringes_sigma=0.01, rng=rng)
    out = bridge_gaps(track, gaps)
    assert len(out) == 0
    assert all(c in out.columns for c in OUTPUT_COLUMNS)


def test_single_frame_stretch_uses_other_side():
    # A 1-frame stretch gives no rate: the other side's fit carries the gap alone.
    rng = np.random.default_rng(10)
    t = np.arange(200) / FPS
    true = 1.0 * t
    untrusted = np.zeros(t.size, bool)
    untrusted[100:103] = True
    untrusted[104:107] = True  # frame 103 is a 1-frame stretch
    track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=0.01, rng=rng)
    out = bridge_gaps(track, gaps)
    assert list(out["method"]) == ["one_sided_rate", "one_sided_rate"]
    for _, row in out.iterrows():
        assert abs(row["fringes_across"] - _true_across(true, row, t.size)) < 5 * row["fringes_across_sigma"]


# --------------------------------------------------------------------------- bad input


def _small_tables():
    rng = np.random.default_rng(0)
    t = np.arange(60) / FPS
    untrusted = np.zeros(t.size, bool)
    untrusted[30:33] = True
    return tables_from_count(t, t, untrusted, fringes_sigma=0.01, rng=rng)


@pytest.mark.parametrize("mutate, match", [
    (lambda tr, g: (tr.drop(columns="fringes_sigma"), g), "fringes_sigma"),
    (lambda tr, g: (tr, g.drop(columns="segment_after")), "segment_after"),
    (lambda tr, g: (tr.assign(time_s=tr.time_s[::-1].to_numpy()), g), "increase"),
    (lambda tr, g: (tr, g.assign(segment_after=7)), "not a segment"),
    (lambda tr, g: (tr, g.assign(last_frame=1)), "ends before"),
    (lambda tr, g: (tr.assign(frame=tr.frame.astype(object).where(tr.frame != 5, "x")), g), "non-numeric"),
    (lambda tr, g: (tr.iloc[0:0], g), "empty"),
    (lambda tr, g: ([1, 2], g), "DataFrame"),
])
def test_bad_tables_raise_one_line_input_error(mutate, match):
    track, gaps = mutate(*_small_tables())
    with pytest.raises(BridgeInputError, match=match) as info:
        bridge_gaps(track, gaps)
    assert isinstance(info.value, InputError)
    assert "\n" not in str(info.value)


def test_docstring_examples_run():
    import doctest

    import fringecount.bridge

    result = doctest.testmod(fringecount.bridge, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0


def test_bad_hop_range_raises():
    track, gaps = _small_tables()
    with pytest.raises(InputError, match="hop_range"):
        bridge_gaps(track, gaps, hop_range_fringes=-1)


@pytest.mark.parametrize("text, match", [
    (None, "not found"),
    ("time_s,wl\n0,670\n", "wavelength_nm"),
    ("time_s,wavelength_nm\n", "no readings"),
    ("time_s,wavelength_nm\n0,670.1\n1,abc\n", "non-numeric"),
    ("time_s,wavelength_nm\n0,670.1\n2,670.2\n1,670.3\n", "strictly increasing"),
    ("time_s,wavelength_nm\n0,0.6701\n1,0.6702\n", "nanometres"),
    ("time_s,wavelength_nm\n0,670.1\n1,\n", "non-finite"),
    ("time_s,wavelength_nm,wavelength_sigma_nm\n0,670.1,0\n", "wavelength_sigma_nm"),
])
def test_read_wavelength_log_errors(tmp_path, text, match):
    path = tmp_path / "log.csv"
    if text is not None:
        path.write_text(text)
    with pytest.raises(WavelengthLogError, match=match) as info:
        read_wavelength_log(path)
    assert "\n" not in str(info.value)


def test_read_wavelength_log_reads_comments_and_spaces(tmp_path):
    path = tmp_path / "log.csv"
    path.write_text("# wavemeter, vacuum\ntime_s, wavelength_nm\n0.0, 670.0012\n0.5, 670.0031\n")
    log = read_wavelength_log(path)
    assert list(log.columns) == ["time_s", "wavelength_nm"]
    np.testing.assert_allclose(log["wavelength_nm"], [670.0012, 670.0031])
