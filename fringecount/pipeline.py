"""The counting pipeline: a recording in, a signed sub-fringe count with its gaps out.

Stages: sample frames -> geometry (rings or straight) and centre -> one streaming
pass of profiles (frames are decoded one at a time; only a few hundred floats
per frame are kept) -> radial phase model and per-frame phase -> trust flags and
gaps -> unwrapping within trusted stretches -> bridging each gap -> the total
with its sigma budget.

Sign convention: the count is positive when the on-axis interference order
increases, i.e. rings are born at the centre and expand. For straight fringes
the sign is not defined without a reference: it is positive when the fringes
move along the carrier direction, taken to point right (or down, for horizontal
fringes).
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from . import __version__
from .bridge import bridge_gaps, read_wavelength_log
from .center import CenterFit, fringe_images, locate_center, radial_symmetry_center, refine_center, ring_contrast
from .errors import ClipError, InputError, NoFringesError, SettingsError
from .frames import FrameSource, open_frames
from .gaps import describe, find_gaps, flag_frames, unwrap_segments
from .phase import RadialModel, estimate_model, fit_phases, temporal_model
from .profile import ProfileBins, frame_profile, line_bins, nonradial_fraction, ring_bins
from .settings import CountSettings

__all__ = ["count", "CountResult", "inspect_roi", "RoiInspection", "SIGN_CONVENTION"]

logger = logging.getLogger(__name__)

SIGN_CONVENTION = ("positive when the on-axis order increases (rings born at the centre and expanding); "
                   "straight fringes: positive when fringes move along the carrier direction "
                   "(pointing right, or down for horizontal fringes) - no absolute sign without a reference")

FRAME_COLUMNS = ["frame", "time_s", "fringes", "fringes_sigma", "visibility", "trusted", "reason", "nonradial_fraction",
                 "phase_wrapped", "brightness", "saturated_fraction", "residual", "center_x", "center_y"]


@dataclass
class CountResult:
    """Result of :func:`count`: per-frame table, gap table, summary dict and the settings used."""

    frames: pd.DataFrame
    gaps: pd.DataFrame
    summary: dict
    settings: CountSettings
    model: RadialModel | None = field(default=None, repr=False)

    @property
    def total_fringes(self) -> float:
        return float(self.summary["total_fringes"])

    @property
    def total_fringes_sigma(self) -> float:
        return float(self.summary["total_fringes_sigma"])


@dataclass(frozen=True)
class Geometry:
    kind: str                      # "rings" or "straight"
    center: CenterFit | None
    direction: tuple[float, float]
    reference: tuple[float, float]
    contrast: float


#: Rings closer than this (px) are left out of the fit. Azimuthal averaging samples r at the
#: irregular distances of the pixel centres, so rings below the 2 px grid limit still show in the
#: profile; what limits them is the 1 px pixel aperture, whose response sinc(1/period) falls
#: below one half at 1.6 px.
MIN_RING_PERIOD_PX = 1.6


# ----------------------------------------------------------------------------- helpers
def _resolved_bins(model: RadialModel, bins: ProfileBins) -> np.ndarray:
    """Bins whose local ring period in pixels is at least :data:`MIN_RING_PERIOD_PX`."""
    x = bins.coord / model.coord_scale
    c2, c3 = model.shape
    dpsi_ds = abs(model.kappa) * (1 + 2 * c2 * x + 3 * c3 * x * x) / model.coord_scale
    r = np.sqrt(np.maximum(bins.coord, 0))
    with np.errstate(divide="ignore"):
        period = 2 * np.pi / np.maximum(dpsi_ds * 2 * r, 1e-300)
    ok = period >= MIN_RING_PERIOD_PX
    # keep the inner run of resolved bins (the period shrinks outward)
    bad = np.flatnonzero(~ok)
    if bad.size and bad[0] > 0:
        ok[bad[0]:] = False
    return ok


def _subset_bins(bins: ProfileBins, keep: np.ndarray) -> ProfileBins:
    """The same bins without those not in ``keep`` (their pixels leave the ROI)."""
    new = np.full(bins.n_bins + 1, int(keep.sum()), np.intp)
    new[np.flatnonzero(keep)] = np.arange(int(keep.sum()))
    return ProfileBins(bins.kind, bins.box, new[bins.labels], bins.coord[keep], bins.counts[keep], bins.center,
                       bins.direction, bins.inner_px, float(math.sqrt(bins.coord[keep].max())))

def _as_float(img: np.ndarray) -> np.ndarray:
    return np.asarray(img, dtype=np.float32)


def _saturation_level(source: FrameSource, settings: CountSettings) -> float | None:
    if settings.saturation_level is not None:
        return float(settings.saturation_level)
    if np.issubdtype(source.dtype, np.integer):
        bits = int(source.metadata.get("bit_depth") or np.iinfo(source.dtype).bits)
        return float(2 ** bits - 1)
    return None


def _sample_frames(source: FrameSource, k: int = 24) -> tuple[np.ndarray, np.ndarray]:
    n = len(source)
    idx = np.unique(np.linspace(0, n - 1, min(k, n)).astype(int))
    imgs, used = [], []
    for i in idx:
        try:
            imgs.append(_as_float(source.get_frame(int(i))))
            used.append(int(i))
        except ClipError as exc:  # one unreadable frame does not stop the analysis
            logger.warning("skipping unreadable sample frame %d: %s", i, exc)
    if len(imgs) < 2:
        raise ClipError(f"fewer than 2 frames of {source.path} could be decoded; check the file")
    return np.asarray(used), np.stack(imgs)


def _crop_mask(shape, crop):
    if crop is None:
        return None
    m = np.zeros(shape, bool)
    x0, y0, x1, y1 = crop
    m[y0:y1, x0:x1] = True
    return m


def _explained(fimgs: np.ndarray, bins: ProfileBins) -> float:
    """Fraction of fringe-image variance kept by the 1-D profile (0..1)."""
    num = den = 0.0
    r0, r1, c0, c1 = bins.box
    used = bins.labels < bins.n_bins
    for f in fimgs:
        box = f[r0:r1, c0:c1].ravel().astype(float)
        vals = box[used] - box[used].mean()
        lab = bins.labels[used]
        sums = np.bincount(lab, weights=vals, minlength=bins.n_bins)
        num += float((sums ** 2 / np.maximum(bins.counts, 1)).sum())
        den += float((vals ** 2).sum())
    return num / den if den > 0 else 0.0


def _carrier_direction(fimgs: np.ndarray) -> tuple[tuple[float, float], float]:
    """Carrier direction (unit x, y) and frequency (cycles/px) from the 2-D FFT peak (Takeda et al. 1982)."""
    k, rows, cols = fimgs.shape
    win = np.outer(np.hanning(rows), np.hanning(cols))
    power = np.zeros((rows, cols))
    for f in fimgs:
        power += np.abs(np.fft.fft2((f - f.mean()) * win)) ** 2
    fy = np.fft.fftfreq(rows)[:, None]
    fx = np.fft.fftfreq(cols)[None, :]
    rad = np.hypot(fx, fy)
    power[rad < 1.5 / min(rows, cols)] = 0
    iy, ix = np.unravel_index(int(np.argmax(power)), power.shape)
    vx, vy = float(fx[0, ix]), float(fy[iy, 0])
    if vx < -1e-12 or (abs(vx) <= 1e-12 and vy < 0):
        vx, vy = -vx, -vy
    nrm = math.hypot(vx, vy)
    return (vx / nrm, vy / nrm), nrm


def _find_geometry(samples: np.ndarray, settings: CountSettings) -> Geometry:
    rows, cols = samples.shape[1:]
    fimgs = fringe_images(samples)
    mask = _crop_mask((rows, cols), settings.crop)
    if mask is not None:
        fimgs = np.where(mask[None], fimgs, 0.0).astype(np.float32)
    want = settings.geometry
    ring = None
    if want in ("auto", "rings"):
        if settings.center is not None:
            cx, cy = settings.center
            ring = CenterFit(float(cx), float(cy), 0.0, 0.0, float("nan"), "given", 0)
        else:
            ring = locate_center(fimgs, mask=mask)
            if not ring and want == "rings":
                raise NoFringesError(f"no ring pattern found ({ring.reason}); check the clip, "
                                     "give --center X,Y or try --geometry straight")
    ring_contrast = 0.0
    if ring:
        try:
            rb = ring_bins((rows, cols), ring.xy, inner_px=settings.inner_radius_px,
                           outer_px=settings.outer_radius_px, crop=settings.crop)
            ring_contrast = _explained(fimgs, rb)
        except SettingsError:
            user_radii = settings.inner_radius_px > 0 or settings.outer_radius_px is not None
            if want == "rings" or settings.center is not None or user_radii:
                raise
            ring = None
    if (want == "rings" or settings.center is not None) and ring:
        # a centre given by the user means rings about it
        if ring_contrast < 0.02:
            raise NoFringesError(f"no ring pattern about the given centre ({ring.x:g}, {ring.y:g}); "
                                 "check --center or leave it out to find the centre from the data")
        return Geometry("rings", ring, (0.0, 0.0), ring.xy, ring_contrast)
    direction, _ = _carrier_direction(fimgs)
    ref = ((cols - 1) / 2.0, (rows - 1) / 2.0)
    if settings.crop is not None:
        x0, y0, x1, y1 = settings.crop
        ref = ((x0 + min(x1, cols) - 1) / 2.0, (y0 + min(y1, rows) - 1) / 2.0)
    lb = line_bins((rows, cols), ref, direction, crop=settings.crop, outer_px=settings.outer_radius_px)
    straight_contrast = _explained(fimgs, lb)
    logger.debug("geometry: ring contrast %.3f, straight contrast %.3f", ring_contrast, straight_contrast)
    far = bool(ring) and math.hypot(ring.x - (cols - 1) / 2, ring.y - (rows - 1) / 2) > 2 * math.hypot(rows, cols)
    # rings centred far off the frame look straight; when straight fringes explain the pattern
    # as well, the simpler description wins
    if want == "straight" or (straight_contrast > ring_contrast + 0.05) or not ring \
            or (far and straight_contrast >= 0.95 * ring_contrast):
        if straight_contrast < 0.02:
            raise NoFringesError("no fringes found: neither rings nor straight fringes stand out of the noise; "
                                 "check the clip (light, focus) or the --crop/--inner/--outer region")
        return Geometry("straight", None, direction, ref, straight_contrast)
    if ring_contrast < 0.02:
        raise NoFringesError("no fringes found in the region of interest; check the clip or widen the ROI")
    return Geometry("rings", ring, (0.0, 0.0), ring.xy, ring_contrast)


def _bins_for(geom: Geometry, shape, settings: CountSettings, center=None, like: ProfileBins | None = None
              ) -> ProfileBins:
    if geom.kind == "rings":
        if like is not None:  # same grid as ``like`` (moved or shifted centre)
            return ring_bins(shape, center, inner_px=like.inner_px, outer_px=like.outer_px, crop=settings.crop,
                             n_bins=like.n_bins, keep_empty=True)
        return ring_bins(shape, center or geom.center.xy, inner_px=settings.inner_radius_px,
                         outer_px=settings.outer_radius_px, crop=settings.crop, keep_empty=True)
    return line_bins(shape, center or geom.reference, geom.direction, crop=settings.crop,
                     outer_px=settings.outer_radius_px)


def _open(clip, settings: CountSettings) -> tuple[FrameSource, bool]:
    if isinstance(clip, FrameSource):
        return clip, False
    src = open_frames(clip, fps=settings.fps, channel=settings.channel, first_frame=settings.first_frame,
                      last_frame=settings.last_frame, step=settings.step)
    return src, True


def _check_roi(shape, settings: CountSettings) -> None:
    """Reject an ROI that misses the frame before any work is done."""
    rows, cols = shape
    if settings.crop is not None:
        x0, y0, x1, y1 = settings.crop
        if x0 >= cols or y0 >= rows or min(x1, cols) - x0 < 8 or min(y1, rows) - y0 < 8:
            raise SettingsError(f"crop {tuple(settings.crop)} lies (almost) outside the {cols}x{rows} frame; "
                                "choose --crop X0,Y0,X1,Y1 inside it")
    if settings.center is not None:
        ring_bins(shape, settings.center, inner_px=settings.inner_radius_px,
                  outer_px=settings.outer_radius_px, crop=settings.crop)


# ----------------------------------------------------------------------------- streaming pass
class _ProfileStream:
    """Accumulates profiles for the nominal centre and two shifted centres (centre sensitivity)."""

    def __init__(self, n: int, bins: list[ProfileBins]):
        self.bins = bins
        self.prof = [np.full((n, b.n_bins), np.nan, np.float32) for b in bins]
        self.sat = np.zeros(n)
        self.nonradial = np.full(n, np.nan)
        self.ok = np.zeros(n, bool)

    def add(self, k: int, img: np.ndarray, level: float | None) -> None:
        img = np.asarray(img, dtype=np.float64)   # one cast per frame for all the bincounts
        for j, b in enumerate(self.bins):
            p, s = frame_profile(img, b, level)
            self.prof[j][k] = p
            if j == 0:
                self.sat[k] = s
                self.nonradial[k] = nonradial_fraction(img, b, p)
        self.ok[k] = True


def _stream(source: FrameSource, bins_for_frame: Callable[[int], list[ProfileBins]], level,
            progress, block_len: int, block_samples: list | None):
    n = len(source)
    stream = None
    n_blocks = max(1, int(math.ceil(n / block_len)))
    per_block = max(1, min(3, int(math.ceil(24 / n_blocks))))  # about 24 centre samples in all
    frames = np.zeros(n, int)
    times = np.zeros(n)
    got = 0
    positions = np.asarray(source.indices)
    for fr in source:
        # place each frame by its original number (a reader may skip an unreadable frame)
        k = int(np.searchsorted(positions, fr.index))
        if k >= n or positions[k] != fr.index:
            continue
        blk = k // block_len
        bl = bins_for_frame(k)
        if stream is None:
            stream = _ProfileStream(n, bl)
        else:
            stream.bins = bl
        img = fr.image
        stream.add(k, img, level)
        frames[k] = fr.index
        times[k] = fr.time_s
        if block_samples is not None:
            pos = k % block_len
            if pos % max(1, block_len // per_block) == 0 and len(block_samples[blk]) < per_block:
                block_samples[blk].append((k, _as_float(img)))
        got += 1
        if progress is not None:
            progress(k + 1, n)
    if got == 0:
        raise InputError(f"no frame of {source.path} could be decoded; check the file (it may be corrupt)")
    last = int(np.flatnonzero(stream.ok)[-1]) + 1
    if last < n:
        logger.warning("only the first %d of %d frames could be decoded; the clip looks truncated", last, n)
    missing = np.flatnonzero(~stream.ok[:last])
    if missing.size:
        logger.warning("%d frame(s) could not be decoded and are marked unreadable: %s", missing.size,
                       ", ".join(str(int(positions[i])) for i in missing[:10]))
        frames[missing] = positions[missing]
        times[missing] = np.asarray(source.times_s)[missing]
    stream.prof = [p[:last] for p in stream.prof]
    stream.sat = stream.sat[:last]
    stream.nonradial = stream.nonradial[:last]
    stream.ok = stream.ok[:last]
    return stream, frames[:last], times[:last], last


def _drift_track(block_samples, geom: Geometry, settings: CountSettings, shape, n: int
                 ) -> tuple[np.ndarray | None, dict]:
    """Centre of single sampled frames, and a smooth drift track if it stands clear of their scatter.

    Each sampled frame gets its own centre (spatially high-passed, so no mixing of
    frames taken at different centres). Frames whose fringe contrast is weak (dark,
    washed out) are left out. A polynomial in frame number (degree 0, 1 or 2,
    chosen by the Bayesian information criterion) is fitted to each coordinate;
    the drift is accepted only when the trend departs from a constant by more than
    three standard errors and 0.1 px. Returns the per-frame centres (n, 2) or None.
    """
    mask = _crop_mask(shape, settings.crop)
    ks, xs, ys, cs = [], [], [], []
    prev = geom.center.xy
    for samples in block_samples:
        for k, img in samples:
            fimg = fringe_images(img)
            starts = [geom.center.xy, prev]
            seed = radial_symmetry_center(np.where(mask, fimg[0], 0) if mask is not None else fimg[0])
            if seed and math.hypot(seed[0] - geom.center.x, seed[1] - geom.center.y) < 0.25 * max(shape):
                starts.append(seed[:2])
            ev = [ring_contrast(fimg, s, mask=mask) for s in starts]
            start = starts[int(np.argmax(ev))]
            r = refine_center(fimg, start, mask=mask, step_px=0.5,
                              inner_px=settings.inner_radius_px, outer_px=settings.outer_radius_px,
                              max_error_frames=0)
            if r:
                prev = r.xy
                ks.append(k)
                xs.append(r.x)
                ys.append(r.y)
                cs.append(r.contrast)
    info = {"samples": len(ks), "drift_accepted": False, "max_drift_px": 0.0}
    if len(ks) < 6:
        return None, info
    ks, xs, ys, cs = map(np.asarray, (ks, xs, ys, cs))
    good = cs >= 0.5 * np.median(cs)
    med = np.array([np.median(xs[good]), np.median(ys[good])])
    dev = np.hypot(xs - med[0], ys - med[1])
    mad = 1.4826 * np.median(dev[good]) + 0.02
    good &= dev < max(5 * mad, 1.0) + np.ptp(ks) * 0  # drop wild single-frame fits
    if good.sum() < 6:
        return None, info
    t = (ks[good] - n / 2.0) / max(n, 1)
    tracks, ses, scat = [], [], []
    for v in (xs[good], ys[good]):
        best = None
        for deg in (0, 1, 2):
            if good.sum() <= deg + 3:
                break
            coef, res, *_ = np.polyfit(t, v, deg, full=True)
            rss = float(res[0]) if len(res) else float(((np.polyval(coef, t) - v) ** 2).sum())
            m = good.sum()
            bic = m * math.log(max(rss / m, 1e-12)) + (deg + 1) * math.log(m)
            if best is None or bic < best[0] - 2.0:
                best = (bic, deg, coef, math.sqrt(max(rss / max(m - deg - 1, 1), 1e-8)))
        _, deg, coef, s = best
        tt = (np.arange(n) - n / 2.0) / max(n, 1)
        track = np.polyval(coef, tt)
        tracks.append(track)
        scat.append(s)
        ses.append(s / math.sqrt(good.sum()))
    track = np.column_stack(tracks)
    departure = np.abs(track - track.mean(axis=0)).max(axis=0)
    accepted = bool(np.any((departure > 3 * np.asarray(ses)) & (departure > 0.1)))
    info.update(drift_accepted=accepted, max_drift_px=float(departure.max()),
                frame_scatter_px=[float(v) for v in scat], trend_sigma_px=[float(v) for v in ses],
                used_samples=int(good.sum()))
    return (track if accepted else None), info


# ----------------------------------------------------------------------------- main entry
def count(clip, settings: CountSettings | None = None, *,
          progress: Callable[[int, int], None] | None = None) -> CountResult:
    """Count the fringes in a recording.

    Parameters
    ----------
    clip : path or FrameSource
        The recording (video, TIFF stack, image folder, .npy).
    settings : CountSettings, optional
        Analysis settings (ROI, timing, thresholds, wavelength log).
    progress : callable(done, total), optional
        Called after each decoded frame (the CLI draws a progress bar with it).

    Returns
    -------
    CountResult
        ``frames`` (one row per analysed frame: frame, time_s, fringes (cumulative,
        signed), fringes_sigma, visibility, trusted, reason, ...), ``gaps`` (one row
        per untrusted interval with the count across it and its sigma) and
        ``summary`` (the JSON summary: total_fringes, total_fringes_sigma, frames,
        fps, gaps, centre, geometry, sigma budget, settings, version).

    Notes
    -----
    Units: pixels and frames inside; times in seconds. The count sign follows
    :data:`SIGN_CONVENTION`.
    """
    settings = settings or CountSettings()
    t_start = time.perf_counter()
    source, owned = _open(clip, settings)
    try:
        return _count_open(source, settings, progress, t_start)
    finally:
        if owned:
            source.close()


def _count_open(source: FrameSource, settings: CountSettings, progress, t_start) -> CountResult:
    n = len(source)
    if n < 4:
        raise InputError(f"{source.path} has {n} frame(s) in the selected range; a count needs at least 4 "
                         "(check --frames)")
    shape = tuple(source.frame_shape)
    level = _saturation_level(source, settings)
    wlog = read_wavelength_log(settings.wavelength_log) if settings.wavelength_log else None
    _check_roi(shape, settings)
    _, samples = _sample_frames(source)
    geom = _find_geometry(samples, settings)
    logger.info("geometry %s, centre/reference %s", geom.kind, geom.reference)

    delta = 0.5  # px: centre shift used to measure the count's sensitivity to the centre
    base = geom.center.xy if geom.kind == "rings" else geom.reference

    nominal = _bins_for(geom, shape, settings, base)

    def make_bins(center):
        if geom.kind != "rings":
            return [nominal]
        return [_bins_for(geom, shape, settings, center, like=nominal),
                _bins_for(geom, shape, settings, (center[0] + delta, center[1]), like=nominal),
                _bins_for(geom, shape, settings, (center[0], center[1] + delta), like=nominal)]

    fixed = make_bins(base)
    block_len = max(16, int(math.ceil(n / 16)))
    n_blocks = int(math.ceil(n / block_len))
    track_drift = geom.kind == "rings" and settings.track_center and settings.center is None
    block_samples = [[] for _ in range(n_blocks)] if track_drift else None
    stream, frames, times, got = _stream(source, lambda k: fixed, level, progress, block_len, block_samples)
    drift_info: dict = {"drift_accepted": False}
    centers = np.tile(np.asarray(base, float), (got, 1))
    if track_drift:
        track, drift_info = _drift_track(block_samples, geom, settings, shape, n)
        block_samples = None
        if track is not None:
            logger.info("ring centre drifts by up to %.2f px: second pass with a moving centre",
                        drift_info["max_drift_px"])
            cx, cy = track[:, 0], track[:, 1]
            cache: dict = {}

            def per_frame(k):
                key = (round(float(cx[k]) * 20), round(float(cy[k]) * 20))  # 0.05 px grid
                if key not in cache:
                    if len(cache) > 64:
                        cache.clear()
                    cache[key] = make_bins((key[0] / 20.0, key[1] / 20.0))
                return cache[key]

            stream, frames, times, got = _stream(source, per_frame, level, None, block_len, None)
            pos = np.searchsorted(np.asarray(source.indices), frames)
            centers = np.column_stack([cx[pos], cy[pos]])
    nb0 = stream.bins[0]
    profiles = stream.prof[0][:got].astype(float)
    usable = np.isfinite(profiles).sum(axis=1) >= max(8, nb0.n_bins // 4)
    if usable.sum() < 4:
        raise NoFringesError("fewer than 4 frames have a usable profile (too dark or saturated); "
                             "check exposure, --saturation and the ROI")
    try:
        model = estimate_model(profiles, nb0.coord, nb0.counts)
    except ValueError:
        raise NoFringesError("no fringe frequency found in the region of interest; "
                             "check the clip or tune the ROI with 'fringecount roi'") from None
    if geom.kind == "rings" and model.mode == "radial":
        keep = _resolved_bins(model, nb0)
        if keep.sum() < keep.size and keep.sum() >= 16:
            logger.info("rings finer than %.1f px beyond r = %.0f px are left out", MIN_RING_PERIOD_PX,
                        math.sqrt(nb0.coord[keep].max()))
            stream.prof = [p[:, keep] for p in stream.prof]
            stream.bins = [_subset_bins(b, keep) for b in stream.bins]
            nb0 = stream.bins[0]
            profiles = profiles[:, keep]
            model = estimate_model(profiles, nb0.coord, nb0.counts)
    fits = fit_phases(profiles, nb0.coord, nb0.counts, model)

    table = pd.DataFrame({
        "frame": frames, "time_s": times, "phase_wrapped": fits.phase, "phase": fits.phase,
        "phase_sigma": fits.phase_sigma, "visibility": fits.visibility, "brightness": fits.brightness,
        "saturated_fraction": stream.sat[:got], "valid_fraction": fits.valid_fraction,
        "residual": fits.residual, "kappa": fits.kappa,
        "center_x": centers[:, 0], "center_y": centers[:, 1], "unreadable": ~stream.ok[:got],
        "nonradial_fraction": stream.nonradial[:got],
    })
    table = flag_frames(table, min_visibility=settings.min_visibility,
                        max_step_fringes=settings.max_step_fringes)
    if not table["trusted"].any():
        raise NoFringesError(_no_trusted_message(table, settings))
    segment, gaps = find_gaps(table)
    fr_seg = unwrap_segments(fits.phase, segment)
    sig_fr = np.maximum(fits.phase_sigma / (2 * np.pi), _empirical_phase_noise(fr_seg, segment))
    track = pd.DataFrame({"frame": frames, "time_s": times, "segment": segment,
                          "fringes": fr_seg, "fringes_sigma": sig_fr})
    bridged = bridge_gaps(track, gaps, wavelength_log=wlog, log_offset_s=settings.log_offset_s,
                          air_wavelengths=settings.log_air_wavelengths,
                          hop_range_fringes=settings.hop_range_fringes)

    cumulative, total, budget = _assemble(track, bridged, sig_fr)
    # systematic terms: centre sensitivity and radial-model order
    sys_center = 0.0
    if geom.kind == "rings" and geom.center is not None and len(stream.prof) == 3:
        errs = (geom.center.x_err, geom.center.y_err)
        if "frame_scatter_px" in drift_info:
            # the end frames sit off the (constant or drifting) centre by the single-frame scatter (shake)
            errs = tuple(math.hypot(a, b) for a, b in zip(drift_info["trend_sigma_px"],
                                                           drift_info["frame_scatter_px"]))
            errs = (max(errs[0], geom.center.x_err), max(errs[1], geom.center.y_err))
        ends = _ends_fitter(segment, model)
        nominal_ends = ends(profiles, nb0, model)
        for j, err in ((1, errs[0]), (2, errs[1])):
            alt = ends(stream.prof[j][:got], stream.bins[j], model)
            d = _endpoint_change(alt, nominal_ends, segment)
            sys_center += (d * (err / delta)) ** 2
        sys_center = math.sqrt(sys_center)
    sys_model = 0.0
    if model.mode == "temporal":
        # few-fringe patterns calibrated on each half of the clip: their disagreement is the model term
        half = len(profiles) // 2
        for part in (slice(0, half), slice(half, None)):
            try:
                alt_model = temporal_model(profiles[part], nb0.coord / model.coord_scale, nb0.counts,
                                           model.coord_scale)
            except ValueError:
                continue
            alt = fit_phases(profiles, nb0.coord, nb0.counts, alt_model)
            sys_model = max(sys_model, abs(_endpoint_change(alt.phase, fits.phase, segment)))
    elif model.order > 1:
        lower = model.with_shape((model.shape[0], 0.0) if model.order == 3 else (0.0, 0.0), model.order - 1)
        ends = _ends_fitter(segment, model)
        sys_model = abs(_endpoint_change(ends(profiles, nb0, lower), ends(profiles, nb0, model), segment))
    budget["center"] = sys_center
    budget["model"] = sys_model
    budget["cyclic"] = _cyclic_error(fr_seg, fits.phase, segment)
    sigma = math.sqrt(sum(v ** 2 for v in budget.values()))

    frames_out = table.assign(fringes=cumulative)
    # 1-sigma of the cumulative count at each frame: end-phase noise plus the gaps bridged so far
    passed = np.zeros(len(frames_out))
    for g in bridged.to_dict("records"):
        passed[frames > int(g["last_frame"])] += float(g["fringes_across_sigma"]) ** 2
    frames_out["fringes_sigma"] = np.sqrt(sig_fr ** 2 + sig_fr[0] ** 2 + passed)
    frames_out = frames_out[FRAME_COLUMNS + [c for c in frames_out.columns if c.startswith("flag_")]
                            + ["step_fringes", "kappa"]]
    gap_cols = ["first_frame", "last_frame", "start_s", "stop_s", "reason", "fringes_across",
                "fringes_across_sigma", "method", "ambiguous", "p_chosen", "n_frames"]
    extra = [c for c in bridged.columns if c not in gap_cols and c not in ("segment_before", "segment_after")]
    gaps_out = bridged[gap_cols + extra].copy()
    ambiguous = bool(gaps_out["ambiguous"].any()) if len(gaps_out) else False
    if not ambiguous and sigma > 1.0 / 6.0:
        ambiguous = True
    notes = []
    if not model.sign_known:
        ambiguous = True
        notes.append("the field is nearly uniform (or its phase turns back across the ROI): the size of the "
                     "count is measured but its sign is not; check the direction with a known motion")
        logger.warning(notes[-1])
    fps = float(source.fps)
    vis = frames_out.loc[frames_out["trusted"], "visibility"]
    summary = {
        "total_fringes": float(total),
        "total_fringes_sigma": float(sigma),
        "ambiguous": ambiguous,
        "sign_determined": bool(model.sign_known),
        "notes": notes,
        "frames": int(got),
        "fps": fps,
        "first_frame": int(frames[0]),
        "last_frame": int(frames[-1]),
        "duration_s": float(times[-1] - times[0]),
        "trusted_fraction": float(frames_out["trusted"].mean()),
        "gaps": [_gap_json(row) for row in gaps_out.to_dict("records")],
        "geometry": geom.kind,
        "center": ({"x": geom.center.x, "y": geom.center.y, "x_err": geom.center.x_err,
                    "y_err": geom.center.y_err, "method": geom.center.method,
                    "drift": {k: v for k, v in drift_info.items()}}
                   if geom.center is not None else None),
        "carrier_direction": list(geom.direction) if geom.kind == "straight" else None,
        "visibility": {"median": _f(vis.median()), "p10": _f(vis.quantile(0.1)), "min": _f(vis.min()),
                       "floor": _f(table.attrs.get("visibility_floor"))},
        "sigma_budget": {k: float(v) for k, v in budget.items()},
        "radial_model": {"mode": model.mode, "order": model.order, "shape": list(model.shape), "kappa": model.kappa,
                         "coord_scale": model.coord_scale, "n_bins": int(nb0.n_bins)},
        "roi": {"inner_px": nb0.inner_px, "outer_px": nb0.outer_px, "crop": list(settings.crop) if settings.crop else None,
                "saturation_level": level},
        "sign_convention": SIGN_CONVENTION,
        "clip": str(source.path),
        "clip_metadata": {k: v for k, v in source.metadata.items() if isinstance(v, (str, int, float, bool))},
        "version": __version__,
        "settings": settings.to_dict(),
        "elapsed_s": round(time.perf_counter() - t_start, 3),
    }
    return CountResult(frames_out.reset_index(drop=True), gaps_out.reset_index(drop=True), summary, settings, model)


def _no_trusted_message(table: pd.DataFrame, settings: CountSettings) -> str:
    """One line naming why no frame could be followed, and what to do."""
    reasons = table["reason"].value_counts()
    top = reasons.index[0] if len(reasons) else ""
    fixes = {
        "too_fast": (f"the fringes move more than --max-step {settings.max_step_fringes} fringe between frames "
                     "almost everywhere; record at a higher frame rate or sweep slower (or raise --max-step, "
                     "at most 0.5)"),
        "dark": "the frames are dark; check that the beam reaches the camera and the exposure",
        "low_visibility": ("the fringes are washed out in every frame; check alignment and focus, "
                           "or tune the region with 'fringecount roi'"),
        "saturated": "too many pixels are saturated; lower the exposure or the laser power, or pass --saturation",
        "center_lost": "the ring centre could not be followed; give --center X,Y or try --fixed-center",
        "unreadable": "no frame could be decoded; check the file",
    }
    return "no frame has fringes that can be followed: " + fixes.get(top, "check the recording and the ROI")


def _f(v) -> float | None:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _gap_json(row: dict) -> dict:
    out = {}
    for k, v in row.items():
        if isinstance(v, (np.integer,)):
            v = int(v)
        elif isinstance(v, (np.floating, float)):
            v = _f(v)
        elif isinstance(v, np.bool_):
            v = bool(v)
        out[k] = v
    out["description"] = describe(row.get("reason", ""))
    return out


def _empirical_phase_noise(fringes: np.ndarray, segment: np.ndarray) -> float:
    """Frame-to-frame scatter of the unwrapped count (fringes, 1 sigma) from its second differences.

    The count minus a local cubic over 7 frames (Savitzky-Golay) keeps the noise and
    drops smooth motion, accelerations included; for white noise of sigma s that
    residual has the spread s sqrt(1 - 1/3) (the filter's central weight is 1/3).
    The median absolute deviation keeps a few jumps from dominating. This floors the
    least-squares phase sigma, which cannot see errors common to the whole frame
    (shake moving arcs of rings, vibration).
    """
    from scipy.signal import savgol_filter

    res = []
    for s in np.unique(segment[segment >= 0]):
        f = fringes[segment == s]
        if f.size >= 9:
            res.append(f - savgol_filter(f, 7, 3))
    if not res:
        return 0.0
    r = np.concatenate(res)
    return float(1.4826 * np.median(np.abs(r - np.median(r))) / math.sqrt(2.0 / 3.0))


def _cyclic_error(fringes: np.ndarray, phase: np.ndarray, segment: np.ndarray) -> float:
    """Sigma of the total from a once- or twice-per-fringe (cyclic) phase error, estimated from the data.

    Within each trusted stretch whose path runs over at least 1.5 fringes, the count minus its
    smooth trend (Savitzky-Golay over about two fringes) is regressed on cos/sin of
    the phase and of twice the phase. Motion noise is not locked to the phase and
    averages out; a cyclic error is. The total carries it at both end frames, so the
    term is sqrt(2) times its rms.
    """
    from scipy.signal import savgol_filter

    res, ph = [], []
    for s in np.unique(segment[segment >= 0]):
        idx = np.flatnonzero(segment == s)
        f = fringes[idx]
        path = float(np.nansum(np.abs(np.diff(f))))   # fringes passed, back and forth
        if idx.size < 20 or path < 1.5:
            continue
        per_fringe = idx.size / path
        win = int(max(7, 2 * per_fringe)) | 1
        if win >= idx.size:
            continue
        res.append(f - savgol_filter(f, win, 2))
        ph.append(phase[idx])
    if not res:
        return 0.0
    r = np.concatenate(res)
    p = np.concatenate(ph)
    A = np.column_stack([np.cos(p), np.sin(p), np.cos(2 * p), np.sin(2 * p)])
    coef = np.linalg.lstsq(A, r, rcond=None)[0]
    return float(math.sqrt(2.0) * math.sqrt(0.5 * float((coef ** 2).sum())))


def _ends_fitter(segment: np.ndarray, model: RadialModel, half: int = 40):
    """A function fitting phases only around the first and last trusted frames (all that the
    systematic terms use); the few-fringe mode, whose growth term needs the whole clip, fits all."""
    good = np.flatnonzero(segment >= 0)

    def fit(P, bins: ProfileBins, mdl: RadialModel) -> np.ndarray:
        P = np.asarray(P)
        if model.mode != "radial" or good.size < 2 or P.shape[0] <= 4 * half:
            return fit_phases(P.astype(float), bins.coord, bins.counts, mdl).phase
        out = np.full(P.shape[0], np.nan)
        for i in (good[0], good[-1]):
            lo, hi = max(0, i - half), min(P.shape[0], i + half + 1)
            out[lo:hi] = fit_phases(P[lo:hi].astype(float), bins.coord, bins.counts, mdl).phase
        return out

    return fit


def _endpoint_change(alt_phase: np.ndarray, nom_phase: np.ndarray, segment: np.ndarray) -> float:
    """Change of the total count (fringes) if ``alt_phase`` replaced ``nom_phase`` (same unwrapping)."""
    d = (alt_phase - nom_phase + np.pi) % (2 * np.pi) - np.pi
    good = np.flatnonzero(segment >= 0)
    if good.size < 2:
        return 0.0
    return float((d[good[-1]] - d[good[0]]) / (2 * np.pi))


def _assemble(track: pd.DataFrame, bridged: pd.DataFrame, sig_fr: np.ndarray):
    """Cumulative count per frame, total, and the noise/bridging sigma budget."""
    seg = track["segment"].to_numpy(int)
    fr = track["fringes"].to_numpy(float)
    frames = track["frame"].to_numpy(int)
    n = len(track)
    cum = np.full(n, np.nan)
    offset = 0.0
    pos = {int(f): i for i, f in enumerate(frames)}
    bridging_var = 0.0
    gaps_by_before = {int(r["segment_before"]): r for r in bridged.to_dict("records")}
    start_gap = gaps_by_before.get(-1)
    if start_gap is not None:
        offset = float(start_gap["fringes_across"])
        bridging_var += float(start_gap["fringes_across_sigma"]) ** 2
    segs = np.unique(seg[seg >= 0])
    last_val = None
    for s in segs:
        idx = np.flatnonzero(seg == s)
        if last_val is not None:
            g = gaps_by_before[int(s) - 1]
            across = float(g["fringes_across"])
            # noise of the two end phases is counted once, at the clip ends
            ends = math.hypot(sig_fr[idx[0]], sig_fr[pos_prev_end])
            bridging_var += max(float(g["fringes_across_sigma"]) ** 2 - ends ** 2, 0.0)
            offset = last_val + across - fr[idx[0]]
        else:
            offset = offset - fr[idx[0]]
        cum[idx] = fr[idx] + offset
        last_val = cum[idx[-1]]
        pos_prev_end = idx[-1]
    end_gap = [r for r in bridged.to_dict("records") if int(r["segment_after"]) == -1 and int(r["segment_before"]) >= 0]
    total_end = last_val
    if end_gap:
        g = end_gap[0]
        total_end = last_val + float(g["fringes_across"])
        bridging_var += float(g["fringes_across_sigma"]) ** 2
    # fill gap frames by linear interpolation of the cumulative count
    idx = np.arange(n)
    ok = np.isfinite(cum)
    cum_filled = np.interp(idx, idx[ok], cum[ok])
    if not ok[-1]:
        tail = ~ok & (idx > idx[ok][-1])
        cum_filled[tail] = np.linspace(cum[ok][-1], total_end, tail.sum() + 1)[1:]
    if not ok[0]:
        head = ~ok & (idx < idx[ok][0])
        cum_filled[head] = np.linspace(0.0, cum[ok][0], head.sum() + 1)[:-1]
    first_ok, last_ok = idx[ok][0], idx[ok][-1]
    noise = math.hypot(sig_fr[first_ok], sig_fr[last_ok])
    total = float(total_end)
    budget = {"phase_noise": noise, "bridging": math.sqrt(bridging_var)}
    return cum_filled, total, budget


# ----------------------------------------------------------------------------- ROI inspection
@dataclass(frozen=True, eq=False)
class RoiInspection:
    """What the analysis sees in one frame: centre, usable radii, ring spacing, visibility, masks."""

    center: tuple[float, float]
    center_sigma: tuple[float, float]
    geometry: str
    radius_range_px: tuple[float, float]
    ring_spacing_px: float
    visibility: float
    saturated_fraction: float
    suggested: dict
    frame_index: int
    image: np.ndarray
    profile_r_px: np.ndarray
    profile_values: np.ndarray
    mask: np.ndarray
    saturated: np.ndarray
    roi: dict


def inspect_roi(clip, settings: CountSettings | None = None, *, frame: int | None = None) -> RoiInspection:
    """Centre, usable radius range, ring spacing, visibility and a suggested ROI for one frame.

    The centre comes from frames spread over the clip (as :func:`count` finds it);
    ``frame`` (index within the selected range, default the middle) is the one shown.
    """
    settings = settings or CountSettings()
    source, owned = _open(clip, settings)
    try:
        n = len(source)
        if frame is not None and not 0 <= int(frame) < n:
            raise SettingsError(f"--frame {frame} is outside the clip (0..{n - 1})")
        shape = tuple(source.frame_shape)
        _check_roi(shape, settings)
        used, samples = _sample_frames(source)
        geom = _find_geometry(samples, settings)
        if frame is None:  # show a frame with fringes (not a dark or washed-out one)
            energy = fringe_images(samples).var(axis=(1, 2)) * (samples.mean(axis=(1, 2)) > 0)
            k = int(used[int(np.argmax(energy))])
        else:
            k = int(frame)
        img = source.get_frame(k)
        level = _saturation_level(source, settings)
        if geom.kind == "rings" and settings.center is None:
            # the centre of this very frame (the clip's centre may drift)
            own = refine_center(fringe_images(_as_float(img)), geom.center.xy, mask=_crop_mask(shape, settings.crop),
                                step_px=0.5, max_error_frames=0)
            if own and math.hypot(own.x - geom.center.x, own.y - geom.center.y) < 20:
                geom = Geometry("rings", own, geom.direction, own.xy, geom.contrast)
        bins = _bins_for(geom, shape, settings)
        prof, sat_frac = frame_profile(img, bins, level)
        many = np.stack([frame_profile(s, bins, level)[0] for s in samples])
        model = estimate_model(many, bins.coord, bins.counts)
        fits = fit_phases(prof[None, :], bins.coord, bins.counts, model)
        if geom.kind == "rings":
            r = np.sqrt(bins.coord)
            # ring spacing near the outer edge: one fringe = 2 pi / (kappa h'(x)) in x, times ds/dr
            x_out = 1.0
            dh = 1 + 2 * model.shape[0] * x_out + 3 * model.shape[1] * x_out ** 2
            ds = 2 * np.pi / (model.kappa * dh) * model.coord_scale
            spacing = float(ds / (2 * r.max()))
            cen = geom.center.xy
            csig = (geom.center.x_err, geom.center.y_err)
        else:
            r = bins.coord
            spacing = float(2 * np.pi / model.kappa * model.coord_scale)
            cen = geom.reference
            csig = (float("nan"), float("nan"))
        # usable radius range: bins whose fringe amplitude stays above a third of the typical
        env = model.envelope_at(bins.coord / model.coord_scale)
        usable = env > 0.25 * float(np.median(env))
        if geom.kind == "rings" and model.mode == "radial":
            usable &= _resolved_bins(model, bins)
        rr = (float(r[usable].min()), float(r[usable].max())) if usable.any() else (float(r.min()), float(r.max()))
        suggested = {"center": [round(cen[0], 2), round(cen[1], 2)], "inner": round(max(rr[0], 0.0), 1),
                     "outer": round(rr[1], 1), "crop": list(settings.crop) if settings.crop else None}
        sat = (np.asarray(img) >= level) if level is not None else np.zeros(shape, bool)
        return RoiInspection(center=(float(cen[0]), float(cen[1])), center_sigma=(float(csig[0]), float(csig[1])),
                             geometry=geom.kind, radius_range_px=rr, ring_spacing_px=spacing,
                             visibility=float(fits.visibility[0]), saturated_fraction=float(sat_frac),
                             suggested=suggested, frame_index=int(source.indices[k]),
                             image=np.asarray(img), profile_r_px=np.asarray(r, float),
                             profile_values=np.asarray(prof, float), mask=bins.mask(shape), saturated=sat,
                             roi={"inner": settings.inner_radius_px, "outer": settings.outer_radius_px,
                                  "crop": list(settings.crop) if settings.crop else None})
    finally:
        if owned:
            source.close()
