"""Bridging laser mode hops with a wavemeter log (fringecount.bridge, method "wavelength_log").

Physics of the synthetic scans (built here, independently of the package)
------------------------------------------------------------------------
A Fabry-Perot diode near 670 nm tunes continuously and hops by whole mode
spacings (about 0.19 nm: REFERENCES section 3b, chip values "from memory" there).
A fused-silica plate of thickness t in one arm of a Michelson (double pass) plus an
air-path imbalance dL gives the count

    N(lambda) = 2 t (n(lambda) - 1) / lambda + 2 dL / lambda          (REFERENCES 3b)

with n from the Malitson (1965) Sellmeier formula (REFERENCES 1.1), written out
below. (The Malitson index is relative to air with lambda in air; the synthetic
world here simply uses it with the vacuum wavelength, a 3e-4 shift of lambda that
changes nothing the tests check.) A hop makes the 10 mm plate jump about 4
fringes; the frames around it are a "low_visibility" gap. Each stretch keeps
the count only up to a random whole number. The wavemeter reads lambda with
Gaussian noise; readings taken while the laser is multimode (inside gaps) are
garbage.

The whole number across each hop is chosen by the method of exact fractions
(R. Benoit 1898, REFERENCES section 6): the integer for which the measured
fraction and the wavelengths agree. It is checked here against the truth of the
simulation and against a brute-force least-squares search over integer vectors
written in this file. The decidability boundary is checked against the theory of
synthetic-wavelength interferometry: the count across a hop is D / Lambda with
Lambda = lambda1 lambda2 / |lambda1 - lambda2| (common practice), and the integer
is undecidable once the prediction's sigma, about D * sigma(delta sigma), nears
half a fringe.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from fringecount._bridge._simulate import tables_from_count
from fringecount.bridge import WavelengthLogError, bridge_gaps, fit_group_opd
from fringecount.models.air import air_index_ciddor

# Malitson (1965) fused silica, REFERENCES 1.1: B_i and resonance wavelengths lambda_i (um), C_i = lambda_i^2.
MALITSON_B = (0.6961663, 0.4079426, 0.8974794)
MALITSON_C = (0.0684043 ** 2, 0.1162414 ** 2, 9.896161 ** 2)

FPS = 30.0
MODE_SPACING_NM = 0.19  # REFERENCES 3b (typical FP diode, from memory there)


def n_fused_silica(lam_um):
    l2 = np.asarray(lam_um, dtype=float) ** 2
    return np.sqrt(1.0 + sum(b * l2 / (l2 - c) for b, c in zip(MALITSON_B, MALITSON_C)))


def count_of(lam_m, thickness_m, air_path_m=0.0):
    """Michelson count of a double-pass plate plus an air imbalance (REFERENCES 3b)."""
    return 2 * thickness_m * (n_fused_silica(lam_m * 1e6) - 1) / lam_m + 2 * air_path_m / lam_m


def group_opd_m(lam_m, thickness_m, air_path_m=0.0):
    """dN/dsigma = 2 t (n_g - 1) + 2 dL, n_g = n - lambda dn/dlambda (REFERENCES 1, 3b), numerically."""
    h = 1e-13
    sig = 1.0 / lam_m
    return (count_of(1 / (sig + h * sig), thickness_m, air_path_m)
            - count_of(1 / (sig - h * sig), thickness_m, air_path_m)) / (2 * h * sig)


def scan(rng, *, thickness_m=0.01, air_path_m=0.0, hop_modes=(1, 1, 2, 1, -1, 1), stretch_s=6.0,
         tune_nm_per_s=0.02, gap_frames=(3, 8), lam0_nm=670.0, noise=0.01, log_every_s=0.5,
         log_noise_nm=0.002, reason="low_visibility", stretch_lengths_s=None):
    """A diode scan through the plate: (true count, track, gaps, log, true vacuum wavelength nm)."""
    lengths = stretch_lengths_s or [stretch_s] * (len(hop_modes) + 1)
    total_s = float(sum(lengths))
    t = np.arange(int(total_s * FPS)) / FPS
    hop_t = np.cumsum(lengths)[:-1]
    lam = lam0_nm + tune_nm_per_s * t
    for ht, m in zip(hop_t, hop_modes):
        lam = lam + np.where(t >= ht, m * MODE_SPACING_NM, 0.0)
    true = count_of(lam * 1e-9, thickness_m, air_path_m)
    untrusted = np.zeros(t.size, bool)
    for ht in hop_t:
        i = int(round(ht * FPS))
        g = int(rng.integers(gap_frames[0], gap_frames[1] + 1))
        a = i - int(rng.integers(0, g))
        untrusted[a:a + g] = True
    track, gaps = tables_from_count(t, true, untrusted, fringes_sigma=noise, rng=rng, reasons=reason)
    tl = np.arange(rng.uniform(0, log_every_s), total_s, log_every_s)
    lam_log = np.interp(tl, t, lam) + rng.normal(0, log_noise_nm, tl.size)
    multimode = np.interp(tl, t, untrusted.astype(float)) > 0
    lam_log[multimode] += rng.normal(0, 0.1, multimode.sum())  # garbage while multimode
    log = pd.DataFrame({"time_s": tl, "wavelength_nm": lam_log})
    return true, track, gaps, log, lam


def truth_across(true, gaps):
    return np.array([true[r.last_frame + 1] - true[r.first_frame - 1] for r in gaps.itertuples()])


def total_error_and_sigma(track, out, true, noise):
    """Pipeline-style total (stretch changes + fringes_across) minus truth, and its RSS sigma."""
    seg = track[track.segment >= 0].groupby("segment")["fringes"]
    total = float((seg.last() - seg.first()).sum() + out["fringes_across"].sum())
    sigma = math.sqrt(2 * noise ** 2 + float((out["fringes_across_sigma"] ** 2).sum()))
    return total - (true[-1] - true[0]), sigma


def _binomial_low(p, n):
    """Lower acceptance bound: p minus 3 binomial standard deviations (the stated tolerance)."""
    return p - 3 * math.sqrt(p * (1 - p) / n)


# --------------------------------------------------------------------------- the test physics itself


def test_scan_model_reproduces_reference_values():
    # REFERENCES 1.1 (computed table): n(0.6700 um) = 1.4560115, n(0.6705 um) = 1.4559989 (7 decimals).
    assert n_fused_silica(0.6700) == pytest.approx(1.4560115, abs=6e-8)
    assert n_fused_silica(0.6705) == pytest.approx(1.4559989, abs=6e-8)
    # REFERENCES 3b worked example: 10.00 mm plate, 670.0 -> 670.5 nm: exact dN = 10.52684 fringes (5 decimals),
    # and n_g(sigma_mid) = 1.4729023 from the inverse 1 + dN / (2 t dsigma).
    dn = count_of(670.0e-9, 0.01) - count_of(670.5e-9, 0.01)
    assert dn == pytest.approx(10.52684, abs=6e-6)
    dsigma = 1 / 670.0e-9 - 1 / 670.5e-9
    assert 1 + dn / (2 * 0.01 * dsigma) == pytest.approx(1.472902, abs=6e-7)
    # REFERENCES 3b: one 0.19 nm hop makes the 10 mm plate jump about 3.9 fringes (ours: the jump at 670 nm).
    hop = count_of(670.0e-9, 0.01) - count_of(670.19e-9, 0.01)
    assert 3.9 <= hop <= 4.1


# --------------------------------------------------------------------------- fine log: every hop right


@pytest.mark.parametrize("seed", range(6))
def test_fine_log_bridges_every_hop_and_total(seed):
    # Benoit 1898 exact fractions with a 0.002 nm / 0.5 s log over a REFERENCES 3b scan: every hop must get
    # the right integer (error = end-phase noise, below 5 * sqrt(2) * 0.01 = 0.071 fringe), decided, and the
    # total within 0.05 fringe (the brief's target; the total's noise is that of the first and last frame).
    rng = np.random.default_rng(1000 + seed)
    true, track, gaps, log, _lam = scan(rng)
    out = bridge_gaps(track, gaps, wavelength_log=log)
    err = out["fringes_across"].to_numpy() - truth_across(true, gaps)
    assert (out["method"] == "wavelength_log").all()
    assert np.all(np.abs(err) < 5 * math.sqrt(2) * 0.01)
    assert not out["ambiguous"].any()
    assert (out["p_chosen"] > 0.99).all()
    total_err, _ = total_error_and_sigma(track, out, true, 0.01)
    assert abs(total_err) < 0.05


def test_group_opd_matches_sellmeier_group_index():
    # REFERENCES 3b: dN/dsigma = 2 t (n_g - 1) + 2 dL. The fitted D must agree with the Sellmeier value at the
    # scan's mean wavenumber within 3 sigma, and the fine log must give it to better than 0.1 %.
    rng = np.random.default_rng(5)
    true, track, gaps, log, lam = scan(rng, thickness_m=0.01, air_path_m=0.4e-3)
    d, d_sigma = fit_group_opd(track, gaps, log)
    d_true = group_opd_m(1 / np.mean(1 / (lam * 1e-9)), 0.01, 0.4e-3)
    assert abs(d - d_true) <= 3 * d_sigma
    assert d_sigma / d_true < 1e-3


def test_air_wavelength_log_gives_same_integers_and_vacuum_outputs():
    # The log in air wavelengths (lambda_vac / n_air, Ciddor 1996 via fringecount.models.air at 20 C,
    # 101.325 kPa, 50 %): integers unchanged; D and the wavelength columns come back in vacuum terms
    # (D within its sigma, which includes the assumed 3e-5 air-index uncertainty).
    rng = np.random.default_rng(6)
    true, track, gaps, log, lam = scan(rng)
    n_air = air_index_ciddor(670.5e-9, 20.0, 101325.0, 50.0, 450.0)
    log_air = log.assign(wavelength_nm=log["wavelength_nm"] / n_air)
    vac = bridge_gaps(track, gaps, wavelength_log=log)
    air = bridge_gaps(track, gaps, wavelength_log=log_air, air_wavelengths=True)
    np.testing.assert_allclose(air["fringes_across"], vac["fringes_across"], atol=1e-12)
    np.testing.assert_allclose(air["wavelength_before_nm"], vac["wavelength_before_nm"], rtol=1e-6)
    d_vac, s_vac = fit_group_opd(track, gaps, log)
    d_air, s_air = fit_group_opd(track, gaps, log_air, air_wavelengths=True)
    assert abs(d_air - d_vac) <= s_air
    assert s_air > s_vac


def test_synthetic_wavelength_and_count_across_hop():
    # Synthetic wavelength Lambda = l1 l2 / |l1 - l2| (common practice); the reported wavelengths either side
    # must match the simulation within 0.003 nm (the edge value averages >= 12 readings of 0.002 nm noise:
    # about 0.001 nm with the extrapolation to the edge, so 3 sigma), and D / Lambda must equal the count
    # across the hop within 3 prediction sigmas plus the end-phase noise.
    rng = np.random.default_rng(7)
    true, track, gaps, log, lam = scan(rng, hop_modes=(1, 2))
    out = bridge_gaps(track, gaps, wavelength_log=log)
    d, _ = fit_group_opd(track, gaps, log)
    for row in out.itertuples():
        l1, l2 = lam[row.first_frame - 1], lam[row.last_frame + 1]
        assert row.wavelength_before_nm == pytest.approx(l1, abs=3e-3)
        assert row.wavelength_after_nm == pytest.approx(l2, abs=3e-3)
        lam_syn = (l1 * l2 / abs(l1 - l2)) * 1e-9
        # Lambda relative error = error of (l2 - l1) / (l2 - l1): sqrt(2) x 0.001 / 0.19 = 0.75 % at 1 sigma.
        assert row.synthetic_wavelength_m == pytest.approx(lam_syn, rel=0.03)
        # |count| = D / Lambda, sign: count falls as lambda grows (D > 0).
        assert abs(abs(row.fringes_across) - d / row.synthetic_wavelength_m) < 3 * row.log_prediction_sigma + 0.05


# --------------------------------------------------------------------------- coarse log: honest, never confident and wrong


def test_coarse_log_is_honest_over_draws():
    # 0.03 nm every 2 s: the hops are not decidable (D * sigma(delta sigma) ~ 0.5 fringe). Requirements:
    # never a confident wrong integer (p_chosen > 0.99 and |error| > 0.5) in any draw; per gap and for the
    # total, |error| <= 3 sigma at least as often as for a Gaussian (99.73 %) minus 3 binomial sigma.
    n_draws = 40
    gaps_ok = gaps_n = totals_ok = 0
    for seed in range(n_draws):
        rng = np.random.default_rng(2000 + seed)
        true, track, gaps, log, _lam = scan(rng, log_noise_nm=0.03, log_every_s=2.0)
        out = bridge_gaps(track, gaps, wavelength_log=log)
        err = out["fringes_across"].to_numpy() - truth_across(true, gaps)
        sigma = out["fringes_across_sigma"].to_numpy()
        assert not np.any((out["p_chosen"].to_numpy() > 0.99) & (np.abs(err) > 0.5))
        gaps_ok += int(np.sum(np.abs(err) <= 3 * sigma))
        gaps_n += err.size
        total_err, total_sigma = total_error_and_sigma(track, out, true, 0.01)
        totals_ok += abs(total_err) <= 3 * total_sigma
        # An undecided gap is flagged and its sigma covers the neighbouring candidates.
        undecided = out["p_chosen"] < 0.99
        assert out.loc[undecided, "ambiguous"].all()
        assert (out.loc[undecided, "fringes_across_sigma"] >= 0.3).all()
    assert gaps_ok / gaps_n >= _binomial_low(0.9973, gaps_n)
    assert totals_ok / n_draws >= _binomial_low(0.9973, n_draws)


# --------------------------------------------------------------------------- grid: decidability boundary


def _prediction_sigma_theory(track, gaps, log, true, thickness_m, log_noise_nm, count_noise):
    """Sigma (fringes) of the count predicted across one hop from a common-slope regression of the log.

    Textbook prediction variance of a straight-line fit with one slope and two intercepts: the
    count across the hop is D (sigma_b - sigma_a) with sigma_a, sigma_b the edge wavenumbers, so
    var = (D s)^2 [1/n_a + 1/n_b + dN_cc^2 / Sxx], where s is the reading noise in wavenumber
    (log noise plus the count noise converted with 1/D), n_a, n_b the readings per stretch,
    dN_cc the count between the two reading centroids and Sxx the pooled sum of squared count
    deviations within the stretches. Its first two terms are D * sigma(delta sigma) from the
    intercepts; the third is the error of D times the distance extrapolated.
    """
    d = group_opd_m(670e-9, thickness_m)
    s_fringes = math.hypot(d * log_noise_nm * 1e-9 / (670e-9) ** 2, count_noise)
    t = track.time_s.to_numpy()
    tl = log["time_s"].to_numpy()
    ta, tb = t[gaps.first_frame[0] - 1], t[gaps.last_frame[0] + 1]
    xa = np.interp(tl[(tl >= t[0]) & (tl <= ta)], t, true)
    xb = np.interp(tl[(tl >= tb) & (tl <= t[-1])], t, true)
    sxx = np.sum((xa - xa.mean()) ** 2) + np.sum((xb - xb.mean()) ** 2)
    return s_fringes * math.sqrt(1 / xa.size + 1 / xb.size + (xb.mean() - xa.mean()) ** 2 / sxx)


@pytest.mark.parametrize("thickness_m", [0.003, 0.01, 0.02])
def test_decidability_boundary_over_grid(thickness_m):
    # One hop between two 8 s stretches, over hop sizes (+1, +2, -1 modes; Lambda = 2.4, 1.2, 2.4 mm) and log
    # noise. The count across a hop is D / Lambda (synthetic wavelength, common practice) and its prediction
    # sigma follows _prediction_sigma_theory. With a Gaussian predictive the neighbouring integer keeps more than
    # 1 % of the probability for every position of the prediction once sigma > 1 / sqrt(2 ln 100) = 0.33 fringe,
    # and a wrong decision needs a > 4.5 sigma error below sigma = 0.1. Hence, checked here:
    #   theory < 0.08 fringe -> decided and right (0.08 leaves room for the estimated-noise scatter, ratio < 1.3);
    #   theory > 0.5 fringe  -> undecided (the brief's "D sigma(delta sigma) ~ half a fringe"; 0.5 x 0.67 > 0.33);
    #   everywhere           -> never a confident wrong integer; every decided integer right;
    #   theory <= 0.5        -> reported log_prediction_sigma / theory in [0.5, 2] (noise estimated from ~30
    #                           readings: its ratio to the truth scatters by about +-15 % at 1 sigma).
    decided_right = decided_n = 0
    for hop in (1, 2, -1):
        for log_noise_nm in (0.0003, 0.002, 0.01, 0.04):
            for draw in range(3):
                rng = np.random.default_rng([int(thickness_m * 1e4), hop + 5, int(log_noise_nm * 1e5), draw])
                true, track, gaps, log, lam = scan(rng, thickness_m=thickness_m, hop_modes=(hop,), stretch_s=8.0,
                                                   log_noise_nm=log_noise_nm)
                row = bridge_gaps(track, gaps, wavelength_log=log).iloc[0]
                wrong = abs(row["fringes_across"] - truth_across(true, gaps)[0]) > 0.5
                theory = _prediction_sigma_theory(track, gaps, log, true, thickness_m, log_noise_nm, 0.01)
                assert not (row["p_chosen"] > 0.99 and wrong)
                if theory <= 0.5:
                    assert 0.5 <= row["log_prediction_sigma"] / theory <= 2.0
                if theory < 0.08:
                    assert not row["ambiguous"] and not wrong
                if theory > 0.5:
                    assert row["ambiguous"] and row["p_chosen"] < 0.99
                if not row["ambiguous"]:
                    decided_n += 1
                    decided_right += not wrong
    assert decided_n > 0 and decided_right == decided_n


# --------------------------------------------------------------------------- brute force (Benoit 1898)


def _brute_force_offsets(track, gaps, log, search=12):
    """Integer offsets K (one per stretch after the first) minimising the residual of one common line
    sigma = a + b (N + K) through all log readings (exact fractions by exhaustive search)."""
    stretches = {s: part for s, part in track[track.segment >= 0].groupby("segment")}
    t_log = log["time_s"].to_numpy()
    wn = 1 / (log["wavelength_nm"].to_numpy() * 1e-9)
    seg_of, counts, ys = [], [], []
    for s, part in stretches.items():
        m = (t_log >= part.time_s.iloc[0]) & (t_log <= part.time_s.iloc[-1])
        seg_of += [s] * int(m.sum())
        counts += list(np.interp(t_log[m], part.time_s, part.fringes))
        ys += list(wn[m])
    seg_of, counts, ys = np.array(seg_of), np.array(counts), np.array(ys) - np.mean(ys)
    # Rough start: the raw jumps plus a rate-free guess of zero; search a window around the float solution.
    n_seg = len(stretches)
    best = (math.inf, None)
    # float solution per stretch from separate intercepts, to centre the search
    a = np.zeros((counts.size, n_seg + 1))
    a[np.arange(counts.size), seg_of] = 1
    a[:, -1] = counts
    coef, *_ = np.linalg.lstsq(a, ys, rcond=None)
    k_float = (coef[:n_seg] - coef[0]) / coef[-1]
    centres = np.rint(k_float[1:]).astype(int)
    grids = np.meshgrid(*[np.arange(c - search, c + search + 1) for c in centres], indexing="ij")
    for ks in zip(*(g.ravel() for g in grids)):
        k_all = np.r_[0, ks]
        x = counts + k_all[seg_of]
        design = np.c_[np.ones_like(x), x]
        _, res, *_ = np.linalg.lstsq(design, ys, rcond=None)
        rss = float(res[0]) if res.size else 0.0
        if rss < best[0]:
            best = (rss, k_all)
    return best[1]


@pytest.mark.parametrize("seed", range(3))
def test_integer_choice_matches_brute_force_search(seed):
    # Benoit 1898: the integers for which all wavelengths agree. Exhaustive search over integer vectors of the
    # common-line residual (this file) vs the package's merged joint fit, on a 3-stretch scan (2 hops).
    rng = np.random.default_rng(3000 + seed)
    true, track, gaps, log, _lam = scan(rng, hop_modes=(1, 2), stretch_s=7.0, log_noise_nm=0.004)
    out = bridge_gaps(track, gaps, wavelength_log=log)
    k_all = _brute_force_offsets(track, gaps, log)
    seg = {s: part for s, part in track[track.segment >= 0].groupby("segment")}
    for row in out.itertuples():
        before, after = seg[row.segment_before], seg[row.segment_after]
        brute = (after.fringes.iloc[0] + k_all[row.segment_after]) - (before.fringes.iloc[-1] + k_all[row.segment_before])
        assert row.fringes_across == pytest.approx(brute, abs=1e-9)
        assert abs(brute - truth_across(true, gaps)[row.Index]) < 0.1


# --------------------------------------------------------------------------- log handling


def test_readings_inside_gaps_are_ignored():
    # Multimode readings (inside gaps) are meaningless; wild ones must not change anything.
    rng = np.random.default_rng(8)
    true, track, gaps, log, _lam = scan(rng)
    base = bridge_gaps(track, gaps, wavelength_log=log)
    t_gap = [(track.time_s[r.first_frame - 1], track.time_s[r.last_frame + 1]) for r in gaps.itertuples()]
    extra_t = [0.5 * (a + b) for a, b in t_gap]
    wild = pd.concat([log, pd.DataFrame({"time_s": extra_t, "wavelength_nm": 675.0})]).sort_values("time_s")
    out = bridge_gaps(track, gaps, wavelength_log=wild.reset_index(drop=True))
    np.testing.assert_allclose(out["fringes_across"], base["fringes_across"], atol=1e-12)


def test_log_with_stated_sigma_column():
    # A wavelength_sigma_nm column replaces the estimated noise (Gaussian predictive); same integers.
    rng = np.random.default_rng(9)
    true, track, gaps, log, _lam = scan(rng)
    out = bridge_gaps(track, gaps, wavelength_log=log.assign(wavelength_sigma_nm=0.002))
    err = out["fringes_across"].to_numpy() - truth_across(true, gaps)
    assert np.all(np.abs(err) < 5 * math.sqrt(2) * 0.01)
    assert not out["ambiguous"].any()


def test_dark_gap_without_hop_uses_rate_too():
    # A beam block (reason "dark") with no hop: the trusted rate and the log agree and are combined.
    rng = np.random.default_rng(10)
    true, track, gaps, log, _lam = scan(rng, hop_modes=(0,), reason="dark", log_noise_nm=0.02)
    row = bridge_gaps(track, gaps, wavelength_log=log).iloc[0]
    assert row["method"] == "wavelength_log"
    assert "combined with the fringe rate" in row["note"]
    assert not row["ambiguous"]
    assert abs(row["fringes_across"] - truth_across(true, gaps)[0]) < 0.1


def test_log_that_misses_the_stretches_raises():
    rng = np.random.default_rng(11)
    true, track, gaps, log, _lam = scan(rng)
    with pytest.raises(WavelengthLogError, match="not cover|no reading") as info:
        bridge_gaps(track, gaps, wavelength_log=log[log.time_s < 20])
    assert "\n" not in str(info.value)
    with pytest.raises(WavelengthLogError, match="log_offset_s"):
        bridge_gaps(track, gaps, wavelength_log=log, log_offset_s=1000.0)


def test_short_stretch_without_reading_falls_back_to_rate():
    # A 1 s stretch between two hops gets no reading from a 2 s log: its two gaps fall back to the rate carry
    # (visibility-loss rule: ambiguous, hop prior), the others are bridged by the log; nothing raises.
    rng = np.random.default_rng(12)
    true, track, gaps, log, _lam = scan(rng, hop_modes=(1, 1, 1), stretch_lengths_s=[8.0, 1.0, 8.0, 8.0],
                                        log_every_s=2.0, log_noise_nm=0.001)
    t_short = track[track.segment == 1].time_s
    log = log[(log.time_s < t_short.min() - 0.2) | (log.time_s > t_short.max() + 0.2)].reset_index(drop=True)
    out = bridge_gaps(track, gaps, wavelength_log=log)
    assert list(out["method"]) == ["rate", "rate", "wavelength_log"]
    assert out["ambiguous"].iloc[:2].all()
    assert all("no wavelength-log reading" in n for n in out["note"].iloc[:2])
    err = out["fringes_across"].to_numpy() - truth_across(true, gaps)
    assert np.all(np.abs(err) <= 3 * out["fringes_across_sigma"].to_numpy())


def test_log_without_tuning_cannot_give_group_opd():
    # Wavelength constant inside every stretch: D is not determined; fit_group_opd says so, and the bridge
    # falls back to the rate carry (with the hop prior) instead of guessing.
    rng = np.random.default_rng(13)
    true, track, gaps, log, _lam = scan(rng, tune_nm_per_s=0.0)
    with pytest.raises(WavelengthLogError, match="group OPD"):
        fit_group_opd(track, gaps, log)
    out = bridge_gaps(track, gaps, wavelength_log=log)
    assert (out["method"] == "rate").all() and out["ambiguous"].all()


def test_sampled_prediction_is_reproducible_and_rng_explicit():
    # The coarse log takes the sampled (Monte Carlo) branch: rng=None must give identical results run to run;
    # another generator moves p_chosen only by sampling noise, sd sqrt(p (1 - p) / 20000) < 0.004, so the
    # 0.05 tolerance is over 10 sd.
    rng = np.random.default_rng(14)
    true, track, gaps, log, _lam = scan(rng, log_noise_nm=0.03, log_every_s=2.0)
    a = bridge_gaps(track, gaps, wavelength_log=log)
    b = bridge_gaps(track, gaps, wavelength_log=log)
    pd.testing.assert_frame_equal(a, b)
    c = bridge_gaps(track, gaps, wavelength_log=log, rng=np.random.default_rng(99))
    np.testing.assert_allclose(c["p_chosen"], a["p_chosen"], atol=0.05)
    assert (c["method"] == "wavelength_log").all()
