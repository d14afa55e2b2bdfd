"""Ring centre from the data: radial-symmetry centre, refined by fringe contrast.

The centre of equal-inclination rings is where every intensity-gradient line
meets; the radial-symmetry centre (Parthasarathy 2012) is the weighted least-
squares point closest to all of them. It seeds a refinement that maximises the
fringe contrast surviving azimuthal averaging: only at the true centre do whole
rings fall into single equal-area bins. Both work on "fringe images": frames with
the static background and the beam envelope removed, so the beam centre (which
need not coincide with the ring centre) does not pull the estimate.

Coordinates: x = column, y = row, origin at the centre of pixel (0, 0); pixels.

References
----------
R. Parthasarathy, "Rapid, accurate particle tracking by calculation of radial
symmetry centers", Nature Methods 9, 724-726 (2012), doi:10.1038/nmeth.2071.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage, optimize

__all__ = ["CenterFit", "FailedFit", "fringe_images", "radial_symmetry_center",
           "ring_contrast", "refine_center", "locate_center"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class CenterFit:
    """A ring centre (x, y) in px with 1-sigma errors and the contrast it achieves (0..1)."""

    x: float
    y: float
    x_err: float
    y_err: float
    contrast: float
    method: str
    n_frames: int

    def __bool__(self) -> bool:
        return True

    @property
    def xy(self) -> tuple[float, float]:
        return (self.x, self.y)


@dataclass(frozen=True)
class FailedFit:
    """A centre estimate that failed; falsy, carries the reason."""

    reason: str

    def __bool__(self) -> bool:
        return False


def fringe_images(frames: np.ndarray, *, envelope_sigma_px: float | None = None) -> np.ndarray:
    """Fringe part of each frame: static background removed, envelope divided out.

    Parameters
    ----------
    frames : (k, M, N) ndarray
        A few frames spread over the clip (any numeric dtype).
    envelope_sigma_px : float, optional
        Width of the Gaussian that estimates the beam envelope; default 1/8 of
        the larger frame side.

    Returns
    -------
    (k, M, N) float32 ndarray
        Zero-mean fringe images with roughly unit fringe amplitude. When the
        fringes moved between the frames, the temporal mean (the static part) is
        subtracted; otherwise a spatial high-pass is used.
    """
    f = np.asarray(frames, dtype=np.float32)
    if f.ndim == 2:
        f = f[None]
    k, rows, cols = f.shape
    sig = envelope_sigma_px or max(rows, cols) / 8.0
    blurred = np.stack([_blur(fr, sig) for fr in f])
    env = blurred.mean(axis=0)      # the blur is linear: the blur of the mean frame
    env = np.maximum(env, 1e-3 * max(float(env.max()), 1e-6))
    highpass = f - blurred
    if k >= 3:
        moving = f - f.mean(axis=0, keepdims=True)
        # moving fringes: the temporal part carries as much structure as the spatial one
        if float(np.mean(moving ** 2)) > 0.3 * float(np.mean(highpass ** 2)):
            return (moving / env).astype(np.float32)
    return (highpass / env).astype(np.float32)


def _blur(img: np.ndarray, sigma_px: float) -> np.ndarray:
    """Gaussian blur with replicated edges (OpenCV's separable filter: fast for wide kernels)."""
    import cv2

    img = np.ascontiguousarray(img, dtype=np.float32)
    f = int(max(1, min(8, sigma_px // 8)))  # a wide blur loses nothing on a 1/f-size copy
    if f == 1:
        return cv2.GaussianBlur(img, (0, 0), float(sigma_px), borderType=cv2.BORDER_REPLICATE)
    rows, cols = img.shape
    small = cv2.resize(img, (max(1, cols // f), max(1, rows // f)), interpolation=cv2.INTER_AREA)
    small = cv2.GaussianBlur(small, (0, 0), float(sigma_px) / f, borderType=cv2.BORDER_REPLICATE)
    return cv2.resize(small, (cols, rows), interpolation=cv2.INTER_LINEAR)


def radial_symmetry_center(image: np.ndarray, *, smooth_px: float = 1.0,
                           weights_from: tuple[float, float] | None = None):
    """Radial-symmetry centre of one 2-D image (Parthasarathy 2012).

    Returns ``(x, y, condition)`` where ``condition`` is the ratio of the two
    eigenvalues of the normal matrix (near 0 for parallel gradient lines, i.e.
    straight fringes), or a :class:`FailedFit`.
    The gradient lines are taken on a regular subsample of at most about 100 000
    pixels (enough for a seed; the contrast refinement does the rest).
    """
    img = np.asarray(image, dtype=np.float64)
    if smooth_px:
        img = ndimage.gaussian_filter(img, smooth_px)
    gy, gx = np.gradient(img)
    g2 = gx * gx + gy * gy
    rows, cols = img.shape
    stride = int(max(1, math.ceil(math.sqrt(rows * cols / 1e5))))
    gx, gy, g2 = gx[::stride, ::stride], gy[::stride, ::stride], g2[::stride, ::stride]
    yy, xx = np.mgrid[0:rows:stride, 0:cols:stride].astype(np.float64)
    sel = g2 > np.median(g2)
    gx, gy, g2, xx, yy = gx[sel], gy[sel], g2[sel], xx[sel], yy[sel]
    if g2.size < 10 or not np.isfinite(g2).all() or g2.sum() == 0:
        return FailedFit("no intensity gradients")
    gn = np.sqrt(g2)
    nx, ny = -gy / gn, gx / gn            # unit normal to each gradient line
    cx0, cy0 = weights_from if weights_from else (
        float((g2 * xx).sum() / g2.sum()), float((g2 * yy).sum() / g2.sum()))
    for _ in range(3):
        dist = np.sqrt((xx - cx0) ** 2 + (yy - cy0) ** 2) + 1.0
        w = g2 / dist
        a11, a12, a22 = (w * nx * nx).sum(), (w * nx * ny).sum(), (w * ny * ny).sum()
        proj = nx * xx + ny * yy
        b1, b2 = (w * nx * proj).sum(), (w * ny * proj).sum()
        A = np.array([[a11, a12], [a12, a22]])
        ev = np.linalg.eigvalsh(A)
        if ev[-1] <= 0:
            return FailedFit("degenerate gradient field")
        cond = float(ev[0] / ev[-1])
        if cond < 1e-6:
            return FailedFit("gradient lines are parallel (straight fringes?)")
        cx0, cy0 = np.linalg.solve(A, [b1, b2])
    return float(cx0), float(cy0), cond


class _ContrastEvaluator:
    """Fraction of fringe-image variance explained by the azimuthal average about a centre."""

    def __init__(self, images: np.ndarray, mask: np.ndarray | None, n_bins: int,
                 inner_px: float = 0.0, outer_px: float | None = None, max_pixels: int = 40000):
        k, rows, cols = images.shape
        yy, xx = np.mgrid[0:rows, 0:cols]
        m = np.ones((rows, cols), bool) if mask is None else mask.copy()
        budget = max(max_pixels // max(k, 1), 4000)
        if m.sum() > budget:  # a regular pixel subsample keeps the evaluation cheap on large frames
            stride = int(math.ceil(math.sqrt(m.sum() / budget)))
            sub = np.zeros_like(m)
            sub[::stride, ::stride] = True
            m &= sub
        self.x = xx[m].astype(np.float64)
        self.y = yy[m].astype(np.float64)
        self.v = images[:, m].astype(np.float64)          # (k, n_pix)
        self.v -= self.v.mean(axis=1, keepdims=True)
        self.total = float((self.v ** 2).sum())
        self.n_bins = n_bins
        self.inner2 = inner_px ** 2
        self.outer2 = None if outer_px is None else outer_px ** 2

    def __call__(self, cx: float, cy: float) -> float:
        s = (self.x - cx) ** 2 + (self.y - cy) ** 2
        sel = s >= self.inner2
        if self.outer2 is not None:
            sel &= s <= self.outer2
        if sel.sum() < 4 * self.n_bins or self.total == 0:
            return 0.0
        s = s[sel]
        lo, hi = float(s.min()), float(s.max()) + 1e-9
        t = (s - lo) / (hi - lo) * (self.n_bins - 1)
        i0 = np.floor(t).astype(np.intp)
        w1 = t - i0
        w0 = 1.0 - w1
        i1 = np.minimum(i0 + 1, self.n_bins - 1)
        cnt = (np.bincount(i0, weights=w0, minlength=self.n_bins)
               + np.bincount(i1, weights=w1, minlength=self.n_bins))
        explained = 0.0
        ok = cnt > 0.5
        for vk in self.v[:, sel]:
            sums = (np.bincount(i0, weights=w0 * vk, minlength=self.n_bins)
                    + np.bincount(i1, weights=w1 * vk, minlength=self.n_bins))
            explained += float((sums[ok] ** 2 / cnt[ok]).sum())
        return explained / self.total


def ring_contrast(images: np.ndarray, center: tuple[float, float], *, mask=None, n_bins: int = 400) -> float:
    """Fraction (0..1) of the fringe images' variance explained by azimuthal averaging about ``center``."""
    imgs = np.asarray(images, dtype=np.float32)
    if imgs.ndim == 2:
        imgs = imgs[None]
    return _ContrastEvaluator(imgs, mask, n_bins)(*center)


def refine_center(images: np.ndarray, start: tuple[float, float], *, mask=None,
                  n_bins: int | None = None, step_px: float = 2.0, inner_px: float = 0.0,
                  outer_px: float | None = None, max_error_frames: int = 4) -> CenterFit | FailedFit:
    """Maximise the azimuthally averaged fringe contrast, starting from ``start`` (x, y).

    The 1-sigma error comes from the scatter of the optima of up to
    ``max_error_frames`` single frames (or, with fewer than 3, from the curvature
    of the contrast around its maximum).
    """
    imgs = np.asarray(images, dtype=np.float32)
    if imgs.ndim == 2:
        imgs = imgs[None]
    k, rows, cols = imgs.shape
    npix = int(mask.sum()) if mask is not None else rows * cols
    nb = n_bins or int(np.clip(npix / 40, 64, 600))
    ev = _ContrastEvaluator(imgs, mask, nb, inner_px, outer_px)

    def best(evaluator, x0):
        res = optimize.minimize(lambda p: -evaluator(p[0], p[1]), x0, method="Nelder-Mead",
                                options={"xatol": 0.01, "fatol": 1e-7, "maxiter": 200,
                                         "initial_simplex": [x0, x0 + [step_px, 0], x0 + [0, step_px]]})
        return res.x, -res.fun

    xy, c = best(ev, np.asarray(start, float))
    if not np.all(np.isfinite(xy)) or c <= 0:
        return FailedFit("fringe contrast vanished around the start point")
    if k >= 3 and max_error_frames >= 3:
        per = []
        for j in np.linspace(0, k - 1, min(k, max_error_frames)).astype(int):
            evj = _ContrastEvaluator(imgs[j:j + 1], mask, nb, inner_px, outer_px)
            per.append(best(evj, xy)[0])
        per = np.asarray(per)
        err = per.std(axis=0, ddof=1) / math.sqrt(len(per))
    else:
        err = _curvature_error(ev, xy, c, npix)
    return CenterFit(float(xy[0]), float(xy[1]), float(max(err[0], 1e-3)), float(max(err[1], 1e-3)),
                     float(c), "contrast", int(k))


def _curvature_error(ev, xy, c, npix):
    h = 0.25
    errs = []
    for d in ([h, 0], [0, h]):
        d = np.asarray(d)
        curv = (ev(*(xy + d)) - 2 * c + ev(*(xy - d))) / h ** 2
        # contrast is an explained-variance ratio; its noise is about 1/npix per pixel sample
        errs.append(math.sqrt(2.0 / (npix * max(-curv, 1e-12))) if curv < 0 else 1.0)
    return np.asarray(errs)


def _coarse_search(images, mask, extent, n=13):
    """Grid search of the contrast on 4x downsampled images over ``extent`` (x0, x1, y0, y1)."""
    f = 4
    k, rows, cols = images.shape
    small = images[:, : rows // f * f, : cols // f * f].reshape(k, rows // f, f, cols // f, f).mean(axis=(2, 4))
    m = None if mask is None else mask[: rows // f * f, : cols // f * f].reshape(rows // f, f, cols // f, f).all(axis=(1, 3))
    ev = _ContrastEvaluator(small, m, 150)
    best, bxy = -1.0, None
    for x in np.linspace(extent[0], extent[1], n):
        for y in np.linspace(extent[2], extent[3], n):
            c = ev((x + 0.5) / f - 0.5, (y + 0.5) / f - 0.5)
            if c > best:
                best, bxy = c, (x, y)
    return bxy, best


def locate_center(images: np.ndarray, *, mask: np.ndarray | None = None) -> CenterFit | FailedFit:
    """Ring centre from a stack of fringe images (see :func:`fringe_images`).

    Seeds with the median radial-symmetry centre of the images, checks it
    against a coarse contrast grid search (which also covers a centre outside
    the frame), then refines by contrast maximisation.
    """
    imgs = np.asarray(images, dtype=np.float32)
    if imgs.ndim == 2:
        imgs = imgs[None]
    k, rows, cols = imgs.shape
    seeds = []
    for im in imgs:
        r = radial_symmetry_center(np.where(mask, im, 0) if mask is not None else im)
        if r:
            seeds.append(r[:2])
    ev = _ContrastEvaluator(imgs[: min(k, 4)], mask, 300)
    cands = []
    if seeds:
        sx, sy = np.median(np.asarray(seeds), axis=0)
        if abs(sx) < 20 * cols and abs(sy) < 20 * rows:
            cands.append(((float(sx), float(sy)), ev(sx, sy)))
    for span in (1.0, 3.0):
        ext = (-(span - 1) / 2 * cols * 2, cols - 1 + (span - 1) * cols, -(span - 1) * rows, rows - 1 + (span - 1) * rows)
        gxy, _ = _coarse_search(imgs[: min(k, 4)], mask, ext)
        cands.append((gxy, ev(*gxy)))
    # raw contrasts of far-apart starts are not comparable (fine rings vanish in the coarse grid):
    # refine the radial-symmetry seed and the two best grid points, keep the best refined one
    cands.sort(key=lambda t: t[1], reverse=True)
    starts = [c[0] for c in cands[:2]]
    if seeds:
        sx, sy = np.median(np.asarray(seeds), axis=0)
        if abs(sx) < 20 * cols and abs(sy) < 20 * rows and (float(sx), float(sy)) not in starts:
            starts.append((float(sx), float(sy)))
    quick = []
    for s in starts:
        r = refine_center(imgs[: min(k, 4)], s, mask=mask, max_error_frames=0)
        if r:
            quick.append(r)
    logger.debug("centre seeds %s -> refined %s", cands, [(q.x, q.y, q.contrast) for q in quick])
    if not quick or max(q.contrast for q in quick) < 0.02:
        return FailedFit("no ring pattern found (azimuthal averaging keeps under 2% of the fringe variance)")
    best = max(quick, key=lambda q: q.contrast)
    return refine_center(imgs, best.xy, mask=mask, step_px=0.5)
