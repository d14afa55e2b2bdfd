"""Fringe phase and visibility of each frame from its profile.

Model of one profile (bins at coordinate x = s/s_ref for rings, u/u_ref for
straight fringes)::

    P(x) = B(x) + A(x) [c cos(kappa h(x)) + d sin(kappa h(x))]

``B`` is a smooth background (Legendre polynomial, fitted per frame, so laser
power drifts and exposure steps cancel), ``A`` the clip's normalised envelope,
``h(x) = x + c2 x^2 + c3 x^3`` the radial phase shape (equal-inclination rings
are only approximately periodic in r^2; a glass plate bends the shape further)
and ``kappa`` the ring frequency, refined per frame by Gauss-Newton and then
smoothed in time. The fringe phase at the centre (x = 0) is
``phi = atan2(d, c)``; it grows by 2*pi per fringe, positive when rings are born
at the centre and expand. Visibility is ``hypot(c, d) / mean(B)``.

The shape coefficients are fitted once per clip on a sample of frames and kept
only when they lower the residual significantly. The phase sigma combines the
least-squares covariance with the uncertainty of the smoothed ``kappa``.
"""

from __future__ import annotations

import dataclasses
import logging
import math
from dataclasses import dataclass

import numpy as np
from numpy.polynomial import legendre
from scipy import ndimage, optimize

__all__ = ["RadialModel", "estimate_model", "fit_phases", "PhaseFits"]

logger = logging.getLogger(__name__)

_N_BG = 4  # background polynomial terms (degree 3)
#: Below this many fringes across the ROI the fringe patterns are learnt from the clip.
FEW_FRINGES = 3.0


@dataclass(frozen=True)
class RadialModel:
    """Radial phase model of a clip: ``phase(x) = phi - kappa * h(x)``, x = coord / coord_scale."""

    coord_scale: float
    shape: tuple[float, float]
    kappa: float
    envelope: np.ndarray
    order: int
    envelope_x: np.ndarray | None = None
    basis: np.ndarray | None = None   # (3, n_bins) mean, cos and sin patterns (few-fringe mode)
    gamma: float = 0.0                # few-fringe mode: growth of the radial phase per fringe counted
    sign_known: bool = True           # False when the field shows too little radial structure to tell

    @property
    def mode(self) -> str:
        """``"radial"`` (phase model across the ROI) or ``"temporal"`` (few fringes: patterns from the clip)."""
        return "radial" if self.basis is None else "temporal"

    def envelope_at(self, x: np.ndarray) -> np.ndarray:
        """Envelope on another bin grid (interpolated), normalised to mean 1."""
        if self.envelope_x is None or (x.shape == self.envelope_x.shape and np.allclose(x, self.envelope_x)):
            return self.envelope
        e = np.interp(x, self.envelope_x, self.envelope)
        return np.maximum(e / max(float(e.mean()), 1e-12), 1e-3)

    def h(self, x: np.ndarray) -> np.ndarray:
        c2, c3 = self.shape
        return x + c2 * x * x + c3 * x ** 3

    def with_shape(self, shape, order) -> "RadialModel":
        return RadialModel(self.coord_scale, tuple(shape), self.kappa, self.envelope, order, self.envelope_x)


@dataclass
class PhaseFits:
    """Per-frame fit results (arrays of length n_frames)."""

    phase: np.ndarray          # wrapped fringe phase at the centre, rad
    phase_sigma: np.ndarray    # 1-sigma, rad
    visibility: np.ndarray     # fringe amplitude / background
    brightness: np.ndarray     # mean background level, counts
    kappa: np.ndarray          # ring frequency used, rad per unit x
    residual: np.ndarray       # rms residual / fringe amplitude
    valid_fraction: np.ndarray # fraction of bins with data


def _design_bg(x: np.ndarray) -> np.ndarray:
    lo, hi = float(x.min()), float(x.max())
    t = (2 * x - (lo + hi)) / max(hi - lo, 1e-12)
    return legendre.legvander(t, _N_BG - 1)


def _fit_chunk(P, valid, x, h, kappa, env, w, bg, *, newton: bool):
    """Weighted LS of one chunk of profiles. Returns coefficient arrays and covariances."""
    m, nb = P.shape
    arg = kappa[:, None] * h[None, :]
    C = env * np.cos(arg)
    S = env * np.sin(arg)
    cols = [np.broadcast_to(bg[None, :, j], (m, nb)) for j in range(bg.shape[1])] + [C, S]
    if newton:
        cols += [h * C, h * S]
    X = np.stack(cols, axis=-1)                       # (m, nb, p)
    ww = np.where(valid, w[None, :], 0.0)
    sw = np.sqrt(ww)
    Xw = X * sw[..., None]
    Pw = np.where(valid, P, 0.0) * sw
    XwT = Xw.transpose(0, 2, 1)
    G = XwT @ Xw
    p = G.shape[-1]
    G += np.eye(p)[None] * (1e-12 * np.trace(G, axis1=1, axis2=2)[:, None, None] + 1e-300)
    rhs = (XwT @ Pw[..., None])[..., 0]
    beta = np.linalg.solve(G, rhs[..., None])[..., 0]
    res = Pw - (Xw @ beta[..., None])[..., 0]
    nvalid = valid.sum(axis=1)
    dof = np.maximum(nvalid - p, 1)
    s2 = (res ** 2).sum(axis=1) / dof
    Ginv = np.linalg.inv(G)
    return beta, Ginv * s2[:, None, None], s2, nvalid


def _solve_frames(P, valid, x, h, kappa0, env, w, bg, *, iterations=4, chunk=256, free_kappa=True):
    """Per-frame fit; with ``free_kappa`` kappa is refined by Gauss-Newton steps."""
    n = P.shape[0]
    kappa = np.array(kappa0, dtype=float).copy()
    out_beta = np.zeros((n, bg.shape[1] + (4 if free_kappa else 2)))
    out_cov = np.zeros((n, out_beta.shape[1], out_beta.shape[1]))
    out_s2 = np.zeros(n)
    nval = np.zeros(n)
    kq = bg.shape[1]
    for a in range(0, n, chunk):
        sl = slice(a, min(n, a + chunk))
        k = kappa[sl].copy()
        for _ in range(iterations if free_kappa else 1):
            beta, cov, s2, nv = _fit_chunk(P[sl], valid[sl], x, h, k, env, w, bg, newton=free_kappa)
            if not free_kappa:
                break
            c, d, e, g = beta[:, kq], beta[:, kq + 1], beta[:, kq + 2], beta[:, kq + 3]
            amp2 = c * c + d * d
            with np.errstate(invalid="ignore", divide="ignore"):
                step = (e * d - g * c) / amp2
            step = np.where(np.isfinite(step), np.clip(step, -0.2 * np.abs(k), 0.2 * np.abs(k)), 0.0)
            k = k + step
        kappa[sl] = k
        out_beta[sl], out_cov[sl], out_s2[sl], nval[sl] = beta, cov, s2, nv
    return kappa, out_beta, out_cov, out_s2, nval


def _phase_stats(beta, cov, kq):
    c, d = beta[:, kq], beta[:, kq + 1]
    amp2 = c * c + d * d
    phi = np.arctan2(d, c)
    j = np.stack([-d, c], axis=1) / np.maximum(amp2, 1e-300)[:, None]
    sub = cov[:, kq:kq + 2, kq:kq + 2]
    var = np.einsum("mi,mij,mj->m", j, sub, j)
    return phi, np.sqrt(np.maximum(var, 0)), np.sqrt(amp2)


def _normalised(P, valid, bg, counts):
    """Background-free profiles q = P / B - 1 (B: per-frame Legendre fit), zeros where invalid."""
    Pz = np.where(valid, P, 0.0)
    sw = np.sqrt(counts)[None, :] * valid
    smooth = np.zeros_like(Pz)
    for i in range(P.shape[0]):
        A = bg * sw[i][:, None]
        c = np.linalg.lstsq(A, Pz[i] * sw[i], rcond=None)[0]
        smooth[i] = bg @ c
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(valid & (smooth > 0), Pz / smooth - 1.0, np.nan)
    # fill invalid bins by linear interpolation so the analytic signal stays continuous
    idx = np.arange(out.shape[1])
    for i in np.flatnonzero(~np.isfinite(out).all(axis=1)):
        ok = np.isfinite(out[i])
        out[i] = np.interp(idx, idx[ok], out[i][ok]) if ok.sum() >= 2 else 0.0
    return out, smooth


def _local_phase_fit(q, valid, x, weights, degree):
    """Fit the unwrapped local phase (analytic signal along x) of each profile with a polynomial.

    Returns (coefficients (n, degree + 1), rss) for theta(x) = sum a_j x^j; theta = kappa h(x) - phi.
    """
    from scipy.signal import hilbert
    n, nb = q.shape
    an = hilbert(q - q.mean(axis=1, keepdims=True), axis=1)
    amp = np.abs(an)
    theta = np.unwrap(np.angle(an), axis=1)
    edge = max(2, nb // 20)
    w = (amp ** 2) * weights[None, :] * valid
    w[:, :edge] = 0
    w[:, nb - edge:] = 0
    med = np.median(amp[:, edge:nb - edge], axis=1, keepdims=True)
    w = np.where(amp > 0.3 * med, w, 0.0)
    V = np.vander(x, degree + 1, increasing=True)
    G = np.einsum("mn,np,nq->mpq", w, V, V) + 1e-12 * np.eye(degree + 1)
    rhs = np.einsum("mn,np,mn->mp", w, V, theta)
    a = np.linalg.solve(G, rhs[..., None])[..., 0]
    rss = (w * (theta - a @ V.T) ** 2).sum(axis=1)
    return a, rss


def _profile_rss(shape, P, valid, x, kappa0, env, w, bg):
    c2, c3 = shape
    h = x + c2 * x * x + c3 * x ** 3
    kap, beta, cov, s2, nv = _solve_frames(P, valid, x, h, kappa0, env, w, bg)
    return float((s2 * np.maximum(nv - beta.shape[1], 1)).sum()), kap


def estimate_model(profiles: np.ndarray, coord: np.ndarray, counts: np.ndarray, *,
                   sample: np.ndarray | None = None, max_order: int = 3) -> RadialModel:
    """Fit the clip's radial phase model on a sample of frames.

    The shape comes from polynomial fits to the local phase (analytic signal
    along x) of the sampled profiles; each higher order is kept only when it
    lowers the residual of the full profile fit by more than 25 noise variances.

    Parameters
    ----------
    profiles : (n_frames, n_bins) ndarray
        Mean intensity per bin (NaN where a bin had no usable pixel).
    coord : (n_bins,) ndarray
        Bin coordinate: s = r^2 in px^2 (rings) or u in px (straight fringes).
    counts : (n_bins,) ndarray
        Pixels per bin (weights).
    sample : index array, optional
        Frames to use (default: up to 48 frames of the highest fringe energy).
    max_order : int
        Highest order of the shape polynomial h (1, 2 or 3).
    """
    P = np.asarray(profiles, dtype=float)
    scale = float(np.max(np.abs(coord)))
    x = coord / scale
    bg = _design_bg(x)
    valid_all = np.isfinite(P)
    if sample is None:
        pick = np.linspace(0, P.shape[0] - 1, min(P.shape[0], 200)).astype(int)
        qs, _ = _normalised(P[pick], valid_all[pick], bg, counts)
        energy = (qs ** 2).mean(axis=1)
        good = pick[np.argsort(energy)[::-1][: max(8, len(pick) // 2)]]
        sample = np.sort(good[: min(48, len(good))])
    Ps, Vs = P[sample], valid_all[sample]
    q, smooth = _normalised(Ps, Vs, bg, counts)
    env = np.median(smooth, axis=0)
    env = np.maximum(env / max(float(env.mean()), 1e-12), 1e-3)
    w = counts / env
    candidates = []
    for order in range(1, max_order + 1):
        a, _ = _local_phase_fit(q, Vs, x, counts, order)
        kap = np.median(a[:, 1])
        if not np.isfinite(kap) or kap == 0:
            continue
        shape = (float(np.median(a[:, 2] / a[:, 1])) if order >= 2 else 0.0,
                 float(np.median(a[:, 3] / a[:, 1])) if order >= 3 else 0.0)
        h = x + shape[0] * x * x + shape[1] * x ** 3
        if np.any(np.diff(h) * np.sign(kap) <= 0):
            continue
        rss, kk = _profile_rss(shape, Ps, Vs, x, a[:, 1], env, w, bg)
        candidates.append((order, shape, rss, float(np.median(kk))))
    fringes_in_roi = max((abs(c[3]) * float(np.ptp(x + c[1][0] * x * x + c[1][1] * x ** 3)) / (2 * np.pi)
                          for c in candidates), default=0.0)
    if fringes_in_roi < FEW_FRINGES:
        # a smooth background of degree 3 can imitate one or two fringe cycles, so with few fringes
        # across the field the patterns are learnt from the clip instead (needs some motion)
        logger.debug("only %.2f fringes across the ROI: temporal (clip-pattern) mode", fringes_in_roi)
        try:
            return temporal_model(P, x, counts, scale)
        except ValueError:
            if not candidates:
                raise
            logger.debug("too little motion for clip patterns; radial model kept")
    if not candidates:
        raise ValueError("no fringe frequency found in the profiles")
    npts = float(Vs.sum())
    best = candidates[0]
    s2 = best[2] / max(npts - len(sample) * (_N_BG + 4), 1)
    for cand in candidates[1:]:
        if best[2] - cand[2] > 25 * s2:
            best = cand
            s2 = best[2] / max(npts - len(sample) * (_N_BG + 4), 1)
    order, shape, _, kap = best
    logger.debug("radial model: order %d shape %s kappa %.3f (candidates %s)", order, shape, kap,
                 [(c[0], c[2]) for c in candidates])
    return RadialModel(scale, shape, kap, env, order, x)


def initial_kappa(profiles, coord, counts, model: RadialModel) -> np.ndarray:
    """Per-frame ring frequency from the local phase with the model's shape (start for Gauss-Newton)."""
    P = np.asarray(profiles, dtype=float)
    x = coord / model.coord_scale
    bg = _design_bg(x)
    valid = np.isfinite(P)
    h = model.h(x)
    out = np.empty(P.shape[0])
    from scipy.signal import hilbert
    for a in range(0, P.shape[0], 512):
        sl = slice(a, a + 512)
        q, _ = _normalised(P[sl], valid[sl], bg, counts)
        an = hilbert(q - q.mean(axis=1, keepdims=True), axis=1)
        amp = np.abs(an)
        theta = np.unwrap(np.angle(an), axis=1)
        nb = q.shape[1]
        edge = max(2, nb // 20)
        wgt = amp ** 2 * counts[None, :] * valid[sl]
        wgt[:, :edge] = 0
        wgt[:, nb - edge:] = 0
        hm = (wgt * h).sum(1) / np.maximum(wgt.sum(1), 1e-300)
        tm = (wgt * theta).sum(1) / np.maximum(wgt.sum(1), 1e-300)
        num = (wgt * (h - hm[:, None]) * (theta - tm[:, None])).sum(1)
        den = (wgt * (h - hm[:, None]) ** 2).sum(1)
        with np.errstate(invalid="ignore", divide="ignore"):
            k = num / den
        out[sl] = np.where(np.isfinite(k) & (np.abs(k - model.kappa) < 0.5 * abs(model.kappa)), k, model.kappa)
    return out


def _smooth_track(values, sigmas, good, window):
    """Weighted local straight-line fit of ``values`` over ``window`` frames (``good`` frames only).

    A local line (not a running mean) so a steady trend is not biased at the ends.
    Returns the smoothed track and its 1-sigma.
    """
    n = values.size
    wts = np.where(good & np.isfinite(values) & (sigmas > 0), 1.0 / np.maximum(sigmas, 1e-30) ** 2, 0.0)
    v = np.where(wts > 0, values, 0.0)
    t = (np.arange(n) - n / 2.0) / max(window, 1)
    f = lambda a: ndimage.uniform_filter1d(a, window, mode="constant", cval=0.0) * window  # noqa: E731
    s0, s1, s2 = f(wts), f(wts * t), f(wts * t * t)
    t0, t1 = f(wts * v), f(wts * t * v)
    det = s0 * s2 - s1 * s1
    ok = (s0 > 0) & (det > 1e-12 * np.maximum(s0 * s2, 1e-300))
    out = np.full(n, np.nan)
    sig = np.full(n, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        a = (s2 * t0 - s1 * t1) / det
        b = (s0 * t1 - s1 * t0) / det
        out[ok] = (a + b * t)[ok]
        sig[ok] = np.sqrt(np.maximum((s2 - 2 * t * s1 + t * t * s0) / det, 0))[ok]
        flat = ~ok & (s0 > 0)  # too few frames for a line: a weighted mean
        out[flat] = (t0 / s0)[flat]
        sig[flat] = (1.0 / np.sqrt(s0))[flat]
        ok |= flat
    if ok.any() and not ok.all():
        idx = np.arange(n)
        out = np.interp(idx, idx[ok], out[ok])
        sig = np.interp(idx, idx[ok], sig[ok]) * 2.0
    return out, sig


def _fill_bins(P):
    ok = np.isfinite(P)
    cnt = ok.sum(axis=0)
    colmean = np.where(cnt > 0, np.where(ok, P, 0.0).sum(axis=0) / np.maximum(cnt, 1), 0.0)
    return np.where(np.isfinite(P), P, colmean[None, :])


def _leading_components(D: np.ndarray, k: int = 2, iterations: int = 8):
    """The ``k`` leading right singular vectors of ``D`` by subspace iteration (cheap for k << n_bins)."""
    rng = np.random.default_rng(0)
    Y = D.T @ (D @ rng.standard_normal((D.shape[1], k + 4)))
    for _ in range(iterations):
        Q, _ = np.linalg.qr(Y)
        Y = D.T @ (D @ Q)
    Q, _ = np.linalg.qr(Y)
    small = Q.T @ (D.T @ (D @ Q))
    w, V = np.linalg.eigh(small)
    vecs = Q @ V[:, ::-1][:, :k]
    return tuple(vecs.T)


def _ellipse_to_circle(a: np.ndarray, b: np.ndarray):
    """Heydemann (1981) correction: conic fit of the Lissajous points, returns a map to the unit circle."""
    A = np.column_stack([a * a, a * b, b * b, a, b])
    theta = np.linalg.lstsq(A, np.ones_like(a), rcond=None)[0]
    M = np.array([[theta[0], theta[1] / 2], [theta[1] / 2, theta[2]]])
    if np.any(np.linalg.eigvalsh(M) <= 0):
        raise ValueError("Lissajous figure is not an ellipse")
    c = -0.5 * np.linalg.solve(M, theta[3:5])
    k = 1.0 + c @ M @ c
    L = np.linalg.cholesky(M / k).T  # u = L (p - c) on the unit circle
    return c, L


def temporal_model(P, x, counts, scale, refine: int = 3) -> "RadialModel":
    """Few fringes across the ROI: fringe patterns from the clip itself (rank-2 decomposition).

    Each bin's brightness-normalised signal is V cos(phi_t - psi(x)); the two
    leading principal components span it. Their scores trace an ellipse
    (Lissajous figure), mapped to a circle by the Heydemann (1981) conic fit;
    psi(x) then follows by regression, oriented so it grows outward.
    """
    Pf = _fill_bins(P)
    w = np.sqrt(np.maximum(counts, 0))
    bright = (Pf * counts).sum(1) / max(counts.sum(), 1e-12)
    ok = bright > 0.25 * np.percentile(bright, 75)
    Q = Pf[ok] / bright[ok, None]
    mean = Q.mean(axis=0)
    D = (Q - mean) * w
    if D.shape[0] < 4:
        raise ValueError("too few lit frames")
    v1, v2 = _leading_components(D)
    a, b = D @ v1, D @ v2
    r = np.hypot(a - a.mean(), b - b.mean())
    sel = r > 0.3 * np.median(r)
    try:
        c, L = _ellipse_to_circle(a[sel], b[sel])
    except (ValueError, np.linalg.LinAlgError):
        raise ValueError("fringe motion too small to calibrate the few-fringe patterns") from None
    u = (L @ (np.column_stack([a, b]) - c).T).T
    rad = np.hypot(u[:, 0], u[:, 1])
    good = (rad > 0.5) & (rad < 1.5)
    if good.sum() < 4:
        raise ValueError("too few frames on the Lissajous circle")
    X = np.column_stack([np.ones(good.sum()), u[good, 0] / rad[good], u[good, 1] / rad[good]])
    coef = np.linalg.lstsq(X, Q[good] - mean, rcond=None)[0]
    alpha, beta = coef[1], coef[2]
    psi = np.unwrap(np.arctan2(beta, alpha))
    wt = (alpha ** 2 + beta ** 2) * counts
    slope = np.polyfit(x, psi, 1, w=np.sqrt(wt))[0]
    # the sign of the count rests on the direction the pattern's phase runs across the field
    # (rings expanding or collapsing); a nearly uniform field, or one whose phase turns back,
    # cannot tell it
    local = np.gradient(psi, x)
    same = float((wt * (np.sign(local) == np.sign(slope))).sum() / max(float(wt.sum()), 1e-300))
    sign_known = bool(abs(slope) * float(np.ptp(x)) > 0.6 and same > 0.8)
    if slope < 0:  # rings expand when phi grows: psi must grow outward
        beta = -beta
    basis = np.vstack([mean, alpha, beta])
    env = np.maximum(mean / max(float(mean.mean()), 1e-12), 1e-3)
    model = RadialModel(scale, (0.0, 0.0), float(abs(slope)), env, 0, x, basis)
    model = _refine_temporal(model, P, counts, iterations=refine)
    return dataclasses.replace(_fit_growth(model, P, counts, x), sign_known=sign_known)


def _refine_temporal(model, P, counts, iterations=3):
    """Alternating least squares: frame phases from the patterns, then patterns from the phases.

    The first patterns come from brightness-normalised profiles, which a few wide
    fringes distort (the frame mean itself oscillates with the phase); refitting
    the raw profiles as ``b_t (m + cos(phi_t) alpha + sin(phi_t) beta)`` removes
    that distortion and with it most of the once-per-fringe (cyclic) error.
    """
    valid = np.isfinite(P)
    for _ in range(iterations):
        fits = _fit_temporal(P, model, counts)
        b = fits.brightness / max(float((model.basis[0] * counts).sum() / counts.sum()), 1e-300)
        rel = fits.visibility
        good = np.isfinite(fits.phase) & (b > 0) & (rel > 0.6 * np.nanmedian(rel))
        cols = valid[good].all(axis=0) & (counts > 0)
        if good.sum() < 8 or cols.sum() < 8:
            break
        A = np.column_stack([b[good], b[good] * np.cos(fits.phase[good]), b[good] * np.sin(fits.phase[good])])
        coef = model.basis.copy()
        coef[:, cols] = np.linalg.lstsq(A, P[np.ix_(good, cols)], rcond=None)[0]   # (3, n_bins)
        if not np.all(np.isfinite(coef[:, cols])):
            break
        model = RadialModel(model.coord_scale, model.shape, model.kappa, model.envelope, 0,
                            model.envelope_x, coef)
    return model


def _pattern_phase(model):
    """Amplitude and radial phase (zero on axis) of the few-fringe pattern."""
    _, al, be = model.basis
    return np.hypot(al, be), np.unwrap(np.arctan2(be, al))


def _fit_temporal(P, model, counts, dN=None, *, return_rss=False):
    """Per-frame least squares on the clip patterns; with ``model.gamma`` and the running count
    ``dN`` (fringes), the radial phase of the pattern grows as psi(x) (1 + gamma dN)."""
    Pf = np.where(np.isfinite(P), P, np.nan)
    valid = np.isfinite(Pf)
    m, al, be = model.basis
    n, nb = P.shape
    X = np.stack([m, al, be], axis=1)                      # (nb, 3)
    grow = model.gamma != 0.0 and dN is not None
    if grow:
        amp_x, psi_x = _pattern_phase(model)
    rss_total = 0.0
    phi = np.zeros(n)
    sphi = np.zeros(n)
    amp = np.zeros(n)
    brightness = np.zeros(n)
    resid = np.zeros(n)
    vf = valid.mean(axis=1)
    for i in range(n):
        ok = valid[i] & (counts > 0)
        if ok.sum() < 6:
            phi[i], sphi[i], amp[i], resid[i] = 0.0, np.inf, 0.0, np.inf
            continue
        wv = np.sqrt(counts[ok])
        if grow:
            ps = psi_x * (1.0 + model.gamma * dN[i])
            Xi = np.stack([m, amp_x * np.cos(ps), amp_x * np.sin(ps)], axis=1)[ok] * wv[:, None]
        else:
            Xi = X[ok] * wv[:, None]
        yi = Pf[i, ok] * wv
        G = Xi.T @ Xi
        beta = np.linalg.solve(G + 1e-12 * np.trace(G) * np.eye(3), Xi.T @ yi)
        r = yi - Xi @ beta
        rss_total += float(r @ r)
        s2 = float(r @ r) / max(ok.sum() - 3, 1)
        cov = np.linalg.inv(G) * s2
        bb, cc, dd = beta
        a2 = cc * cc + dd * dd
        phi[i] = math.atan2(dd, cc)
        j = np.array([-dd, cc]) / max(a2, 1e-300)
        sphi[i] = math.sqrt(max(j @ cov[1:, 1:] @ j, 0.0))
        brightness[i] = bb * float((m * counts).sum() / counts.sum())
        amp[i] = math.sqrt(a2)
        resid[i] = math.sqrt(s2 / max(float(counts[ok].mean()), 1e-300)) / max(abs(bb) * math.sqrt(a2), 1e-300)
    # pointwise visibility of the clip pattern is hypot(alpha, beta) / mean; a frame's scales with hypot(c, d) / b
    wsum = max(float(counts.sum()), 1e-300)
    pattern_vis = float((np.hypot(al, be) / np.maximum(np.abs(m), 1e-300) * counts).sum() / wsum)
    bcoef = brightness / max(float((m * counts).sum() / wsum), 1e-300)
    with np.errstate(invalid="ignore", divide="ignore"):
        vis = np.where(bcoef > 0, amp / bcoef * pattern_vis, 0.0)
    fits = PhaseFits(phase=phi, phase_sigma=sphi, visibility=vis, brightness=brightness,
                     kappa=np.full(n, model.kappa), residual=resid, valid_fraction=vf)
    return (fits, rss_total) if return_rss else fits


def _running_count(fits: PhaseFits) -> np.ndarray:
    """Approximate count (fringes) about its clip mean, from wrapped phases (frames without fringes interpolated)."""
    good = np.isfinite(fits.phase) & (fits.visibility > 0.3 * np.nanmedian(fits.visibility))
    idx = np.arange(fits.phase.size)
    if good.sum() < 2:
        return np.zeros(fits.phase.size)
    un = np.unwrap(fits.phase[good]) / (2 * np.pi)
    # centred: the clip patterns are an average over the clip, i.e. they belong to its mean count
    return np.interp(idx, idx[good], un - un.mean())


def _fit_growth(model, P, counts, coord_x):
    """Zero the pattern's radial phase on axis and fit its growth per counted fringe (gamma).

    With few rings, the phase fitted to the whole field is a field-weighted average;
    off axis the order changes by cos(theta) per on-axis fringe, so the pattern's
    radial phase grows as the count runs. Modelling that growth (one parameter,
    kept only if it lowers the residual by more than 25 noise variances) puts the
    phase back on the axis.
    """
    amp_x, psi_x = _pattern_phase(model)
    w = amp_x ** 2 * counts
    if w.sum() <= 0:
        return model
    coef = np.polyfit(coord_x, psi_x, 2, w=np.sqrt(w))
    psi0 = psi_x - coef[-1]                     # zero at x = 0, the ring centre
    m = model.basis[0]
    base = RadialModel(model.coord_scale, model.shape, model.kappa, model.envelope, 0, model.envelope_x,
                       np.vstack([m, amp_x * np.cos(psi0), amp_x * np.sin(psi0)]))
    fits0, rss0 = _fit_temporal(P, base, counts, return_rss=True)
    dN = _running_count(fits0)
    span = float(np.ptp(dN))
    if span < 0.5 or float(np.max(np.abs(psi0))) < 0.5:
        return base
    npts = float(np.isfinite(P).sum())
    s2 = rss0 / max(npts - 3 * P.shape[0], 1)

    def rss(g):
        trial = RadialModel(base.coord_scale, base.shape, base.kappa, base.envelope, 0, base.envelope_x,
                            base.basis, float(g))
        return _fit_temporal(P, trial, counts, dN, return_rss=True)[1]

    bound = 2.0 / max(span, 1.0)
    res = optimize.minimize_scalar(rss, bounds=(-bound, bound), method="bounded", options={"xatol": 1e-5})
    if rss0 - res.fun > 25 * s2:
        logger.debug("few-fringe pattern grows by gamma = %.4g per fringe", res.x)
        return RadialModel(base.coord_scale, base.shape, base.kappa, base.envelope, 0, base.envelope_x,
                           base.basis, float(res.x))
    return base


def fit_phases(profiles: np.ndarray, coord: np.ndarray, counts: np.ndarray, model: RadialModel, *,
               kappa_window: int = 31, chunk: int = 256) -> PhaseFits:
    """Fringe phase, its sigma and the visibility of every frame.

    ``kappa`` is first fitted per frame (Gauss-Newton), then smoothed over
    ``kappa_window`` frames (the ring frequency follows the slowly changing order),
    and the final phase is fitted with the smoothed ``kappa``. The phase sigma adds
    the smoothed-kappa uncertainty times the phase lever arm of the ROI.
    """
    P = np.asarray(profiles, dtype=float)
    if model.basis is not None:
        counts = np.asarray(counts, float)
        fits = _fit_temporal(P, model, counts)
        if model.gamma != 0.0:
            for _ in range(2):
                fits = _fit_temporal(P, model, counts, _running_count(fits))
        return fits
    n, nb = P.shape
    x = coord / model.coord_scale
    h = model.h(x)
    bg = _design_bg(x)
    valid = np.isfinite(P)
    env = model.envelope_at(x)
    w = counts / env
    kq = bg.shape[1]
    k0 = initial_kappa(P, coord, counts, model)
    kappa, beta, cov, s2, nval = _solve_frames(P, valid, x, h, k0, env, w, bg, chunk=chunk)
    _, _, amp_free = _phase_stats(beta, cov, kq)
    # kappa sigma from the Newton columns: var(step) ~ var(e, g) / amp^2
    c, d = beta[:, kq], beta[:, kq + 1]
    amp2 = np.maximum(c * c + d * d, 1e-300)
    jk = np.stack([d, -c], axis=1) / amp2[:, None]
    sig_k = np.sqrt(np.maximum(np.einsum("mi,mij,mj->m", jk, cov[:, kq + 2:kq + 4, kq + 2:kq + 4], jk), 0))
    good = np.isfinite(kappa) & (amp_free > 0) & (sig_k > 0) & (sig_k < 0.2 * np.abs(kappa))
    ksm, ksig = _smooth_track(kappa, sig_k, good, kappa_window)
    ksm = np.where(np.isfinite(ksm), ksm, model.kappa)
    ksig = np.where(np.isfinite(ksig), ksig, 0.05 * abs(model.kappa))
    _, beta2, cov2, s22, nval2 = _solve_frames(P, valid, x, h, ksm, env, w, bg, free_kappa=False, chunk=chunk)
    phi, sphi, amp = _phase_stats(beta2, cov2, kq)
    # lever arm: d(phi)/d(kappa) = amplitude-weighted mean of h over the ROI
    lever = float((w * env ** 2 * h).sum() / (w * env ** 2).sum())
    sphi = np.sqrt(sphi ** 2 + (lever * ksig) ** 2)
    bgmean = beta2[:, :kq] @ bg.mean(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        vis = np.where(bgmean > 0, amp / bgmean, 0.0)
        resid = np.sqrt(s22 / np.maximum((w * env ** 2).mean(), 1e-300)) / np.maximum(amp, 1e-300)
    return PhaseFits(phase=phi, phase_sigma=sphi, visibility=np.clip(vis, 0, None), brightness=bgmean,
                     kappa=ksm, residual=resid, valid_fraction=nval2 / nb)
