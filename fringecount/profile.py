"""Radial (equal-area) and straight-fringe profiles of frames.

Equal-inclination rings are nearly periodic in r², so ring profiles are binned
in equal steps of s = r² (equal-area annuli). Straight fringes are binned along
the carrier direction u. Bin labels are built once per centre; each frame then
costs one weighted ``np.bincount`` (two when pixels saturate).

Coordinates: x = column, y = row, origin at the centre of pixel (0, 0).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import SettingsError

__all__ = ["ProfileBins", "ring_bins", "line_bins", "frame_profile", "nonradial_fraction"]


@dataclass(frozen=True, eq=False)
class ProfileBins:
    """Pixel-to-bin labels for one region of interest.

    Attributes
    ----------
    kind : str
        ``"rings"`` (coordinate s = r² in px²) or ``"straight"`` (coordinate u in px).
    box : (int, int, int, int)
        Rows/cols ``(r0, r1, c0, c1)`` of the frame the labels cover.
    labels : (n_pixels,) int ndarray
        Bin of each pixel of the box in C order; ``n_bins`` marks pixels outside the ROI.
    coord : (n_bins,) ndarray
        Bin-centre coordinate (s in px² or u in px).
    counts : (n_bins,) ndarray
        Pixels per bin.
    center : (float, float)
        Ring centre (x, y) or straight-fringe reference point, in px.
    direction : (float, float)
        Unit carrier vector (straight fringes); (0, 0) for rings.
    """

    kind: str
    box: tuple[int, int, int, int]
    labels: np.ndarray
    coord: np.ndarray
    counts: np.ndarray
    center: tuple[float, float]
    direction: tuple[float, float]
    inner_px: float
    outer_px: float

    @property
    def n_bins(self) -> int:
        return int(self.coord.size)

    @property
    def n_pixels(self) -> int:
        return int(self.counts.sum())

    def mask(self, frame_shape: tuple[int, int]) -> np.ndarray:
        """(rows, cols) bool array of the pixels used."""
        m = np.zeros(frame_shape, bool)
        r0, r1, c0, c1 = self.box
        m[r0:r1, c0:c1] = (self.labels < self.n_bins).reshape(r1 - r0, c1 - c0)
        return m


def _box(frame_shape, crop) -> tuple[int, int, int, int]:
    rows, cols = frame_shape
    if crop is None:
        return 0, rows, 0, cols
    x0, y0, x1, y1 = crop
    if x0 >= cols or y0 >= rows:
        raise SettingsError(f"crop {tuple(crop)} starts outside the {cols}x{rows} frame; "
                            "choose --crop inside the frame")
    return int(y0), int(min(y1, rows)), int(x0), int(min(x1, cols))


def _finish(kind, box, coord_px, inside, n_bins, lo, hi, center, direction, inner, outer, keep_empty=False):
    edges = np.linspace(lo, hi, n_bins + 1)
    lab = np.full(coord_px.shape, n_bins, np.intp)
    idx = np.clip(((coord_px - lo) / (hi - lo) * n_bins).astype(np.intp), 0, n_bins - 1)
    lab[inside] = idx[inside]
    counts = np.bincount(lab.ravel(), minlength=n_bins + 1)[:n_bins].astype(float)
    keep = counts > 0
    if keep.sum() < 8:
        raise SettingsError("the region of interest holds too few pixels to make a profile; "
                            "widen --inner/--outer or --crop")
    centres = 0.5 * (edges[:-1] + edges[1:])
    if not keep.all() and not keep_empty:  # drop empty bins and relabel
        new = np.full(n_bins + 1, int(keep.sum()), np.intp)
        new[np.flatnonzero(keep)] = np.arange(int(keep.sum()))
        lab = new[lab]
        centres, counts = centres[keep], counts[keep]
    return ProfileBins(kind, box, lab.ravel(), centres, counts, center, direction, inner, outer)


def ring_bins(frame_shape, center, *, inner_px: float = 0.0, outer_px: float | None = None,
              crop=None, n_bins: int | None = None, min_pixels_per_bin: float = 12.0,
              keep_empty: bool = False) -> ProfileBins:
    """Equal-area annular bins around ``center`` (x, y) between ``inner_px`` and ``outer_px``.

    ``outer_px=None`` reaches the farthest pixel of the (cropped) frame. With
    ``n_bins=None`` the number of bins is chosen so each holds about
    ``min_pixels_per_bin`` pixels or more (at most 512 bins). ``keep_empty`` keeps
    bins without pixels (their profile value is NaN), so bins built around nearby
    centres with the same ``n_bins`` and radii share one grid.
    """
    r0, r1, c0, c1 = _box(frame_shape, crop)
    cx, cy = center
    yy = (np.arange(r0, r1, dtype=float) - cy)[:, None]
    xx = (np.arange(c0, c1, dtype=float) - cx)[None, :]
    s = yy * yy + xx * xx
    far = float(np.sqrt(s.max()))
    outer = far if outer_px is None else min(float(outer_px), far)
    inner = float(inner_px)
    if outer <= inner + 1.0:
        raise SettingsError(f"the annulus {inner:.0f}-{outer:.0f} px around centre ({cx:.1f}, {cy:.1f}) "
                            "does not reach the frame; fix --center/--inner/--outer")
    inside = (s >= inner * inner) & (s <= outer * outer)
    n_in = int(inside.sum())
    if n_bins is None:
        n_bins = int(np.clip(n_in / min_pixels_per_bin, 16, 512))
    return _finish("rings", (r0, r1, c0, c1), s, inside, n_bins, inner * inner, outer * outer,
                   (float(cx), float(cy)), (0.0, 0.0), inner, outer, keep_empty)


def line_bins(frame_shape, reference, direction, *, crop=None, outer_px: float | None = None,
              n_bins: int | None = None, min_pixels_per_bin: float = 12.0) -> ProfileBins:
    """Bins along the unit carrier vector ``direction`` through ``reference`` (x, y).

    Pixels are binned by u = (p - reference) · direction; straight fringes are
    constant along the perpendicular, so each bin averages along one fringe.
    ``outer_px`` limits |u| (and the perpendicular extent) to a disc.
    """
    r0, r1, c0, c1 = _box(frame_shape, crop)
    dx, dy = direction
    norm = math.hypot(dx, dy)
    dx, dy = dx / norm, dy / norm
    yy = (np.arange(r0, r1, dtype=float) - reference[1])[:, None]
    xx = (np.arange(c0, c1, dtype=float) - reference[0])[None, :]
    u = xx * dx + yy * dy
    inside = np.ones(u.shape, bool)
    if outer_px is not None:
        inside &= (xx * xx + yy * yy) <= outer_px ** 2
    lo, hi = float(u[inside].min()), float(u[inside].max()) + 1e-9
    if n_bins is None:
        n_bins = int(np.clip(inside.sum() / min_pixels_per_bin, 16, 512))
        n_bins = min(n_bins, max(16, int(2 * (hi - lo))))
    return _finish("straight", (r0, r1, c0, c1), u, inside, n_bins, lo, hi,
                   (float(reference[0]), float(reference[1])), (dx, dy), 0.0,
                   float(outer_px) if outer_px else float(max(abs(lo), abs(hi))))


def frame_profile(image: np.ndarray, bins: ProfileBins, saturation_level: float | None = None
                  ) -> tuple[np.ndarray, float]:
    """Mean intensity per bin of one 2-D ``image`` and the saturated fraction of ROI pixels.

    Saturated pixels (>= ``saturation_level``) are left out of their bin's mean;
    a bin with no unsaturated pixel is NaN.
    """
    r0, r1, c0, c1 = bins.box
    box = image[r0:r1, c0:c1]
    flat = box.ravel()
    n = bins.n_bins
    if saturation_level is not None and box.max() >= saturation_level:
        ok = flat < saturation_level
        lab = np.where(ok, bins.labels, n)
        sums = np.bincount(lab, weights=flat, minlength=n + 1)[:n]
        cnt = np.bincount(lab, minlength=n + 1)[:n].astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            prof = sums / cnt
        # a bin that lost more than 10 % of its pixels to saturation has a biased mean
        prof[cnt < 0.9 * bins.counts] = np.nan
        sat = 1.0 - cnt.sum() / bins.counts.sum()
        return prof, float(sat)
    sums = np.bincount(bins.labels, weights=flat, minlength=n + 1)[:n]
    with np.errstate(invalid="ignore", divide="ignore"):
        return sums / bins.counts, 0.0


def nonradial_fraction(image: np.ndarray, bins: ProfileBins, profile: np.ndarray) -> float:
    """Fraction (0..1) of the ROI's intensity variance that the 1-D profile does not explain.

    Small for a pattern centred on the bins (only noise is left within each bin);
    large when fringes are present but not symmetric about the centre (centre lost,
    pattern distorted).
    """
    r0, r1, c0, c1 = bins.box
    flat = image[r0:r1, c0:c1].ravel().astype(np.float64)
    n = bins.n_bins
    ss = np.bincount(bins.labels, weights=flat * flat, minlength=n + 1)[:n]
    ok = np.isfinite(profile) & (bins.counts > 0)
    if ok.sum() < 2:
        return float("nan")
    cnt = bins.counts[ok]
    mean_all = float((profile[ok] * cnt).sum() / cnt.sum())
    total = float(ss[ok].sum()) - cnt.sum() * mean_all ** 2
    within = float((ss[ok] - cnt * profile[ok] ** 2).sum())
    return within / total if total > 0 else float("nan")
