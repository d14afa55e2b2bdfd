"""Bridging mode hops with a wavemeter log: group OPD from the stable stretches, exact fractions across hops.

Model (REFERENCES 3b): within a stable stretch the count follows the vacuum
wavenumber sigma = 1/lambda as N = D sigma + c, with D = dN/dsigma the group
optical path difference (2 t (n_g - 1) for a plate, plus 2 dL n_g,air for an
arm imbalance); the second-order term is negligible over a diode scan.

The fringe count interpolates the wavenumber inside a stretch far better than
the wavemeter does, so the log is regressed on the count: for each reading j in
stretch s, ``sigma_j = a_G + b (N_j + K_s)`` with one slope ``b = 1/D`` common to
all stretches and one intercept per *group* G of stretches whose relative
whole numbers K_s are already known (weighted least squares; without a
``wavelength_sigma_nm`` column the log noise is estimated from the pooled
residuals and the predictive distribution is Student-t on those degrees of
freedom). Across a gap between groups the predicted count change is
``(sigma_after - sigma_before) / b`` at the two edge frames: linearised with the
fit covariance while D is known to 5 %, otherwise sampled from the fitted
parameters (multivariate normal or t), so that a poorly known D gives the
skewed, heavy-tailed prediction it should. The integer is chosen among the
candidates ``fraction + k`` (method of exact fractions, Benoit 1898). Gaps whose
integer is decided with p >= P_MERGE merge their two groups (the whole numbers
are then known) and the fit is repeated, so that D and the remaining intercepts
use all the stretches jointly. Given the joint fit, gaps are scored one at a
time (their marginal predictive distributions); the correlation between gaps is
not used for the choice. It is used for the sigmas: undecided gaps share the
fitted D, so their errors add coherently, and their sigmas are scaled so that
the root-sum-square the pipeline forms covers their sum.

Where the rate carry trusts the gap (no hop suspected: e.g. a ``dark`` gap whose
phase returns where the rate puts it) and its prediction agrees with the log's,
the rate is an independent second opinion: its Gaussian weight multiplies the
log's weight of every candidate. Across a suspected hop the rate says nothing
about the whole number and the log decides alone.

Fallbacks (the rate carry's result is kept, with a note): a stretch next to the
gap that has no reading although the log spans it (too short for the logging
interval); a log that shows no wavelength change inside the stretches, so that D
is not determined (slope zero within 2 sigma). A log whose time span misses a
stretch next to a gap is an error (wrong file or log_offset_s).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ._carry import HOP_Z, P_DECIDED, edge_measurements
from ._inputs import GapSpec, Stretch, WavelengthLogError
from ._integers import IntegerChoice, candidate_range, choice_from_weights, gaussian_logw

__all__ = ["P_MERGE", "N_AIR_SIGMA", "GroupOpd", "solve_log"]

#: Probability at which a decided gap merges its two groups for the next joint fit.
P_MERGE = 0.999
#: A fitted slope with a relative 1-sigma above this (zero within 2 sigma) is "group OPD not determined".
MAX_SLOPE_REL_SIGMA = 0.5
#: Up to this relative 1-sigma of the slope the prediction is linearised; above it, sampled.
LINEAR_MAX_REL = 0.05
#: Samples of the fit parameters for the sampled prediction, and the pseudo-count given to
#: candidates no sample reached (keeps their probability at ~1/(10 n) rather than zero).
MC_SAMPLES = 20000
MC_PSEUDO_COUNT = 0.1
#: 1-sigma assumed for the lab air index when the log holds air wavelengths (covers about +-10 K and
#: +-10 kPa about 20 C, 101.325 kPa: dn/dT ~ -0.9e-6 /K, dn/dp ~ 2.7e-6 /kPa; Ciddor 1996 via models.air).
N_AIR_SIGMA = 3e-5


@dataclass(frozen=True)
class GroupOpd:
    """Group optical path difference D = dN/dsigma_vac fitted from the log, in m.

    ``group_opd_m`` is signed: positive when the count grows with the wavenumber.
    ``readings`` counts the log readings used, ``dof`` the residual degrees of freedom,
    ``log_sigma_nm`` the (stated or estimated) log noise at the mean wavelength.
    """

    group_opd_m: float
    group_opd_sigma_m: float
    readings: int
    dof: float
    log_sigma_nm: float


@dataclass
class _Fit:
    theta: np.ndarray
    cov: np.ndarray
    col: dict          # group root -> parameter column
    xbar: dict         # group root -> mean group coordinate of its readings
    wn0: float         # wavenumber offset subtracted before the fit, 1/m
    dof: float         # degrees of freedom of the predictive (inf: stated noise)
    n: int
    resid_sigma_wn: float
    samples: np.ndarray | None = None   # parameter draws, made once per fit when needed

    def draws(self, rng: np.random.Generator) -> np.ndarray:
        """(MC_SAMPLES, p) parameter draws: multivariate normal, or t on ``dof``."""
        if self.samples is None:
            vals, vecs = np.linalg.eigh(self.cov)
            root = vecs * np.sqrt(np.clip(vals, 0.0, None))
            z = rng.standard_normal((MC_SAMPLES, self.theta.size))
            if math.isfinite(self.dof):
                z *= np.sqrt(self.dof / rng.chisquare(self.dof, MC_SAMPLES))[:, None]
            self.samples = self.theta + z @ root.T
        return self.samples

    @property
    def b(self) -> float:
        return float(self.theta[-1])

    @property
    def b_rel_sigma(self) -> float:
        return math.sqrt(self.cov[-1, -1]) / abs(self.b) if self.b != 0 else math.inf


class _Groups:
    """Union-find of stretches with the whole-number offset K of each stretch within its group."""

    def __init__(self, segments):
        self.root = {s: s for s in segments}
        self.k = {s: 0 for s in segments}

    def find(self, s: int) -> int:
        return self.root[s]

    def merge(self, before: int, after: int, shift_after: int) -> None:
        ra, rb = self.root[before], self.root[after]
        for s, r in self.root.items():
            if r == rb:
                self.root[s] = ra
                self.k[s] += shift_after


@dataclass(frozen=True)
class _Readings:
    """Log readings that fall inside trusted stretches, with the count interpolated at their times."""

    segment: np.ndarray    # stretch id of each reading
    count: np.ndarray      # count of the stretch at the reading time, fringes
    count_sigma: np.ndarray
    wn: np.ndarray         # wavenumber of the log's medium, 1/m
    wn_sigma: np.ndarray   # stated 1-sigma, 1/m (NaN when the log has none)

    def in_segment(self, seg: int) -> int:
        return int(np.count_nonzero(self.segment == seg))


def _collect_readings(stretches: dict[int, Stretch], t_s: np.ndarray, wn: np.ndarray,
                      wn_sigma: np.ndarray) -> _Readings:
    """Keep the readings inside each stretch's trusted time span; readings inside gaps are dropped."""
    segs, counts, csig, keep = [], [], [], []
    for seg, st in stretches.items():
        lo = np.searchsorted(t_s, st.time_s[0], side="left")
        hi = np.searchsorted(t_s, st.time_s[-1], side="right")
        j = np.arange(lo, hi)
        if j.size == 0:
            continue
        segs.append(np.full(j.size, seg))
        counts.append(np.interp(t_s[j], st.time_s, st.fringes))
        csig.append(np.interp(t_s[j], st.time_s, st.sigma))
        keep.append(j)
    if not keep:
        return _Readings(*(np.empty(0) for _ in range(5)))
    j = np.concatenate(keep)
    return _Readings(np.concatenate(segs), np.concatenate(counts), np.concatenate(csig), wn[j], wn_sigma[j])


def _fit(groups: _Groups, readings: _Readings, has_sigma: bool, b_guess: float | None) -> _Fit | None:
    """Weighted least squares of the log wavenumbers on the group coordinates; None without a slope."""
    roots_of = np.array([groups.find(int(s)) for s in readings.segment])
    roots = sorted(set(roots_of.tolist()))
    col = {r: i for i, r in enumerate(roots)}
    g = np.array([col[r] for r in roots_of])
    x = readings.count + np.array([groups.k[int(s)] for s in readings.segment])
    y = readings.wn
    n, p = y.size, len(roots) + 1
    if has_sigma:
        var = readings.wn_sigma ** 2
        if b_guess is not None:
            var = var + (b_guess * readings.count_sigma) ** 2
    else:
        var = np.ones(n)
    xbar_arr = np.array([float(np.mean(x[g == i])) for i in range(len(roots))])
    a = np.zeros((n, p))
    a[np.arange(n), g] = 1.0
    a[:, -1] = x - xbar_arr[g]
    if not np.any(np.abs(a[:, -1]) > 0):
        return None
    wn0 = float(np.mean(y))
    w = 1.0 / np.sqrt(var)
    aw = a * w[:, None]
    theta, *_ = np.linalg.lstsq(aw, (y - wn0) * w, rcond=None)
    cov = np.linalg.pinv(aw.T @ aw)
    dof = n - p
    chi2 = float(np.sum(((a @ theta - (y - wn0)) * w) ** 2))
    if has_sigma:
        scale = max(1.0, chi2 / dof) if dof >= 1 else 1.0
        dof_pred = math.inf
    else:
        if dof < 1:
            raise WavelengthLogError(f"wavelength log has only {n} readings inside the stable stretches, too few "
                                     "to estimate its noise; log more often or add a wavelength_sigma_nm column")
        scale = chi2 / dof
        dof_pred = float(dof)
    resid_sigma = math.sqrt(scale * float(np.mean(var)))
    return _Fit(theta, cov * scale, col, dict(zip(roots, xbar_arr.tolist())), wn0, dof_pred, n, resid_sigma)


@dataclass(frozen=True)
class _Edge:
    """Fitted wavenumber at a gap edge as a linear form in the fit parameters."""

    value: float
    grad: np.ndarray


def _edge(fit: _Fit, groups: _Groups, seg: int, count: float) -> _Edge:
    root = groups.find(seg)
    u = count + groups.k[seg] - fit.xbar[root]
    grad = np.zeros(fit.theta.size)
    grad[fit.col[root]] = 1.0
    grad[-1] = u
    return _Edge(fit.wn0 + float(grad @ fit.theta), grad)


def _log_weights(fit: _Fit, ea: _Edge, eb: _Edge, fraction: float, sigma_meas: float, rng):
    """Candidates, their log-weights from the log fit, the prediction and its sigma (fringes).

    Linearised (delta method) while the slope is known to LINEAR_MAX_REL; otherwise the
    parameters are sampled from the fit (multivariate normal, or t on the fit's degrees of
    freedom) and the ratio (sigma_after - sigma_before) / b is formed sample by sample.
    """
    b = fit.b
    dgrad = eb.grad - ea.grad
    dwn = eb.value - ea.value
    if fit.b_rel_sigma <= LINEAR_MAX_REL:
        grad = dgrad / b
        grad[-1] -= dwn / b ** 2
        mu = dwn / b
        s_mu = math.sqrt(max(float(grad @ fit.cov @ grad), 0.0))
        total = math.hypot(s_mu, sigma_meas)
        reach = 8.0 * total * (1.0 if math.isinf(fit.dof) else 3.0)
        ks = candidate_range(fraction, mu - reach, mu + reach)
        return ks, gaussian_logw(fraction, ks, mu, total, fit.dof), mu, s_mu
    theta = fit.draws(rng)
    mu_s = (theta @ dgrad) / theta[:, -1]
    mu = float(np.median(mu_s))
    q16, q84 = np.quantile(mu_s, [0.15865, 0.84135])
    s_mu = 0.5 * float(q84 - q16)
    y = mu_s + rng.normal(0.0, sigma_meas, MC_SAMPLES)
    lo, hi = np.quantile(y, [0.0005, 0.9995])
    ks = candidate_range(fraction, float(lo), float(hi))
    idx = np.rint(y - fraction).astype(np.int64) - ks[0]
    counts = np.bincount(idx[(idx >= 0) & (idx < ks.size)], minlength=ks.size).astype(float)
    return ks, np.log(counts + MC_PSEUDO_COUNT), mu, s_mu


def _rate_logw(ks: np.ndarray, fraction: float, rate_row: dict, mu_log: float, s_log: float) -> tuple[np.ndarray, str]:
    """Log-weights a trusted fringe rate adds to the candidates, and a note on how it was used.

    Only a rate the carry trusts (no hop suspected) that agrees with the log within HOP_Z
    sigma is used; across a suspected hop the rate says nothing about the whole number
    and the log decides alone.
    """
    mu_r, s_r = rate_row["rate_prediction"], rate_row["rate_prediction_sigma"]
    if rate_row["hop_suspected"] or not (math.isfinite(mu_r) and math.isfinite(s_r) and s_r > 0):
        return np.zeros(ks.size), ""
    if abs(mu_r - mu_log) > HOP_Z * math.hypot(s_r, s_log):
        return np.zeros(ks.size), "the fringe rate disagrees with the log (hop in a non-visibility gap?)"
    return -0.5 * ((fraction + ks - mu_r) / s_r) ** 2, "combined with the fringe rate"


def _score(fit, groups, before, after, rate_row, rng) -> tuple[IntegerChoice, dict]:
    """Integer choice for one gap from the current fit; also the log columns of the row."""
    _t0, _t1, _raw, fraction, sigma_meas = edge_measurements(before, after)
    ea = _edge(fit, groups, before.segment, float(before.fringes[-1]))
    eb = _edge(fit, groups, after.segment, float(after.fringes[0]))
    ks, logw, mu, s_mu = _log_weights(fit, ea, eb, fraction, sigma_meas, rng)
    rate_w, how = _rate_logw(ks, fraction, rate_row, mu, s_mu)
    choice = choice_from_weights(fraction, ks, logw + rate_w, mu, math.hypot(s_mu, sigma_meas))
    cols = {"log_prediction": mu, "log_prediction_sigma": s_mu, "_wn_before": ea.value, "_wn_after": eb.value,
            "_how": how, "_sigma_meas": sigma_meas}
    return choice, cols


def solve_log(stretches: dict[int, Stretch], gaps: list[GapSpec], rate_rows: list[dict], log: pd.DataFrame, *,
              log_offset_s: float, air_wavelengths: bool, rng: np.random.Generator) -> tuple[dict[int, dict], GroupOpd | None]:
    """Bridge every inner gap with the wavelength log.

    Returns the column updates per gap position (gaps left to the rate carry are absent) and the fitted
    group OPD (None when the log cannot give one).
    """
    if not math.isfinite(log_offset_s):
        raise WavelengthLogError(f"log offset must be a finite number of seconds, got {log_offset_s!r}")
    t_s = log["time_s"].to_numpy(dtype=float) + log_offset_s
    lam_m = log["wavelength_nm"].to_numpy(dtype=float) * 1e-9
    wn = 1.0 / lam_m
    has_sigma = "wavelength_sigma_nm" in log.columns
    wn_sigma = (log["wavelength_sigma_nm"].to_numpy(dtype=float) * 1e-9 / lam_m ** 2 if has_sigma
                else np.full(wn.size, np.nan))
    n_air, n_air_sigma = 1.0, 0.0
    if air_wavelengths:
        from ..models.air import air_index_ciddor  # standard lab air: 20 C, 101.325 kPa, 50 %, 450 ppm

        n_air = float(air_index_ciddor(float(np.median(lam_m)) * 1.00027, 20.0, 101325.0, 50.0, 450.0))
        n_air_sigma = N_AIR_SIGMA
    readings = _collect_readings(stretches, t_s, wn, wn_sigma)
    inner = [i for i, g in enumerate(gaps) if g.segment_before in stretches and g.segment_after in stretches]
    needed = sorted({s for i in inner for s in (gaps[i].segment_before, gaps[i].segment_after)})
    if readings.segment.size == 0:
        raise WavelengthLogError(f"no reading of the wavelength log ({t_s[0]:.3f}..{t_s[-1]:.3f} s on the clip "
                                 "clock) falls in a stable stretch of the clip; check log_offset_s and the log file")
    for s in needed:
        st = stretches[s]
        if readings.in_segment(s) == 0 and (st.time_s[-1] < t_s[0] or st.time_s[0] > t_s[-1]):
            raise WavelengthLogError(f"the wavelength log ({t_s[0]:.3f}..{t_s[-1]:.3f} s on the clip clock) does "
                                     f"not cover the stable stretch at {st.time_s[0]:.3f}..{st.time_s[-1]:.3f} s; "
                                     "check log_offset_s or log for the whole recording")

    groups = _Groups(stretches)
    merged: dict[int, tuple[IntegerChoice, dict]] = {}
    fit = _fit(groups, readings, has_sigma, None)
    if fit is not None and has_sigma:
        fit = _fit(groups, readings, has_sigma, fit.b)
    while fit is not None and fit.b_rel_sigma <= MAX_SLOPE_REL_SIGMA:
        new = []
        for i in inner:
            g = gaps[i]
            if i in merged:
                continue
            ra, rb = groups.find(g.segment_before), groups.find(g.segment_after)
            if ra == rb or ra not in fit.col or rb not in fit.col:
                continue
            choice, cols = _score(fit, groups, stretches[g.segment_before], stretches[g.segment_after],
                                  rate_rows[i], rng)
            if choice.p_chosen >= P_MERGE and abs(choice.z) <= HOP_Z:
                new.append((i, choice, cols))
        if not new:
            break
        for i, choice, cols in new:
            g = gaps[i]
            if groups.find(g.segment_before) == groups.find(g.segment_after):
                continue
            before, after = stretches[g.segment_before], stretches[g.segment_after]
            raw = float(after.fringes[0] - before.fringes[-1])
            # Stretch 'after' joins the group of 'before' with K chosen so that the group coordinates
            # differ across the gap by exactly the decided value.
            k_after = groups.k[g.segment_before] + choice.k - int(round(raw - (choice.value - choice.k)))
            groups.merge(g.segment_before, g.segment_after, k_after - groups.k[g.segment_after])
            merged[i] = (choice, cols)
        fit = _fit(groups, readings, has_sigma, fit.b if has_sigma else None)

    updates: dict[int, dict] = {}
    shared: list[tuple[int, np.ndarray]] = []
    determined = fit is not None and fit.b_rel_sigma <= MAX_SLOPE_REL_SIGMA
    for i in inner:
        g = gaps[i]
        before, after = stretches[g.segment_before], stretches[g.segment_after]
        if i in merged:
            choice, cols = merged[i]
        elif not determined:
            updates[i] = {"note": _append(rate_rows[i]["note"], "wavelength log does not determine the group "
                                          "OPD (no wavelength change inside the stable stretches): rate carry")}
            continue
        elif fit.col.get(groups.find(g.segment_before)) is None or fit.col.get(groups.find(g.segment_after)) is None:
            updates[i] = {"note": _append(rate_rows[i]["note"], "no wavelength-log reading in a neighbouring "
                                          "stable stretch: rate carry")}
            continue
        else:
            choice, cols = _score(fit, groups, before, after, rate_rows[i], rng)
        updates[i] = _row_from_choice(choice, cols, n_air, i in merged)
        if updates[i]["ambiguous"] and i not in merged:
            shared.append((i, _linear_grad(fit, groups, before, after)))
    _scale_for_shared_slope(updates, shared, fit)

    opd = None
    if determined:
        d_medium = 1.0 / fit.b
        rel = fit.b_rel_sigma
        d_vac = d_medium * n_air
        sigma = abs(d_vac) * math.hypot(rel, n_air_sigma / n_air)
        lam_mid = 1.0 / fit.wn0
        opd = GroupOpd(d_vac, sigma, fit.n, fit.dof, fit.resid_sigma_wn * lam_mid ** 2 * 1e9 * n_air)
    return updates, opd


def _linear_grad(fit: _Fit, groups: _Groups, before: Stretch, after: Stretch) -> np.ndarray:
    """Gradient of the predicted count change across a gap with respect to the fit parameters."""
    ea = _edge(fit, groups, before.segment, float(before.fringes[-1]))
    eb = _edge(fit, groups, after.segment, float(after.fringes[0]))
    grad = (eb.grad - ea.grad) / fit.b
    grad[-1] -= (eb.value - ea.value) / fit.b ** 2
    return grad


def _scale_for_shared_slope(updates: dict[int, dict], shared: list[tuple[int, np.ndarray]], fit: _Fit) -> None:
    """Widen undecided gaps whose errors add coherently through the common slope.

    The pipeline adds gap sigmas in quadrature. Undecided gaps predicted from one fit
    share its slope, so an error of D moves them all the same way; when the variance of
    their sum, 1' C 1, exceeds the sum of their variances, trace(C), every one of them is
    scaled by sqrt(1' C 1 / trace C) so that the root-sum-square covers the sum (each gap
    is then conservative on its own). Anti-correlated sets (shared stretches) are left as
    they are.
    """
    if len(shared) < 2:
        return
    g = np.array([grad for _i, grad in shared])
    c = g @ fit.cov @ g.T
    ratio = float(np.sum(c)) / float(np.trace(c)) if np.trace(c) > 0 else 1.0
    if ratio <= 1.0:
        return
    factor = math.sqrt(ratio)
    for i, _grad in shared:
        updates[i]["fringes_across_sigma"] *= factor
        updates[i]["note"] = _append(updates[i]["note"], f"sigma x{factor:.2f}: undecided gaps share the fitted "
                                                         "group OPD, so their errors add coherently")


def _append(note: str, text: str) -> str:
    return f"{note}; {text}" if note else text


def _row_from_choice(choice: IntegerChoice, cols: dict, n_air: float, merged: bool) -> dict:
    """Output columns of a gap bridged by the log."""
    sigma_meas = cols["_sigma_meas"]
    lam_a = n_air / cols["_wn_before"]
    lam_b = n_air / cols["_wn_after"]
    row = {
        "method": "wavelength_log", "fringes_across": choice.value, "p_chosen": choice.p_chosen,
        "candidates": choice.candidates, "hop_suspected": False,
        "log_prediction": cols["log_prediction"], "log_prediction_sigma": cols["log_prediction_sigma"],
        "wavelength_before_nm": lam_a * 1e9, "wavelength_after_nm": lam_b * 1e9,
        "synthetic_wavelength_m": lam_a * lam_b / abs(lam_a - lam_b) if lam_a != lam_b else math.inf,
        "note": cols["_how"],
    }
    if (merged or choice.p_chosen >= P_DECIDED) and abs(choice.z) <= HOP_Z:
        row.update(fringes_across_sigma=sigma_meas, ambiguous=False)
        return row
    if abs(choice.z) > HOP_Z:
        # The log puts the count where the measured fraction is not: widen to that disagreement.
        row["note"] = _append(row["note"], f"measured fraction lies {choice.z:+.1f} sigma from the log "
                                           "prediction (log timing, multimode readings or a wrong D?)")
        spread = math.hypot(choice.cover_sigma, abs(choice.z) * choice.total_sigma)
    else:
        row["note"] = _append(row["note"], "wavelength log cannot decide the whole number")
        spread = choice.cover_sigma
    row.update(fringes_across_sigma=math.hypot(spread, sigma_meas), ambiguous=True)
    return row
