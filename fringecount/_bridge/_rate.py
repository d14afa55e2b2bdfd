"""Fringe-rate carry: predicting the count change across a gap from the rate on its sides.

Each side is fitted by weighted least squares over the trusted frames nearest the
gap (common practice; the covariance is scaled by the Birge ratio
max(1, chi2/dof) so that rate wobble beyond the stated phase noise widens it).

* Two sides: the velocity is taken as linear in time through the two fitted
  rates (each belongs to the centre time of its window), and integrated over the
  gap. That is exact for constant acceleration. Model term: if the rate changes
  monotonically at some unknown moment inside the gap, the true change lies
  between ``v_a T`` and ``v_b T``; a uniform distribution over that interval has
  sigma ``|v_b - v_a| T / sqrt(12)`` (the noise part of ``v_b - v_a`` is
  subtracted in quadrature so it is not counted twice).
* One side: a weighted quadratic fit is extrapolated (fit covariance
  propagated); the size of the curvature correction is added again as its own
  model uncertainty, since nothing shows how the rate goes on inside the gap.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ._inputs import Stretch

__all__ = ["RATE_WINDOW_FRAMES", "SideFit", "fit_side", "RatePrediction", "predict_two_sided",
           "predict_one_sided"]

#: Trusted frames nearest the gap used for each side's fit.
RATE_WINDOW_FRAMES = 25


@dataclass(frozen=True)
class SideFit:
    """Weighted polynomial fit of the count near one edge of a gap.

    ``coef`` are the coefficients of ``c0 + c1 x + c2 x**2`` with ``x = t - center_time_s``
    (fringes, fringes/s, fringes/s**2); ``cov`` their covariance (Birge-scaled).
    """

    center_time_s: float
    coef: np.ndarray
    cov: np.ndarray
    n: int
    birge: float

    @property
    def rate(self) -> float:
        return float(self.coef[1])

    @property
    def rate_var(self) -> float:
        return float(self.cov[1, 1])


@dataclass(frozen=True)
class RatePrediction:
    """Predicted count change across a gap (fringes) with its fit and model variances."""

    value: float
    fit_var: float
    model_var: float

    @property
    def sigma(self) -> float:
        return math.sqrt(self.fit_var + self.model_var)


def _weighted_polyfit(x: np.ndarray, y: np.ndarray, sigma: np.ndarray, degree: int):
    """Weighted least-squares polynomial (ascending powers); coefficients, covariance, Birge ratio."""
    a = np.vander(x, degree + 1, increasing=True)
    w = 1.0 / sigma
    aw = a * w[:, None]
    coef, *_ = np.linalg.lstsq(aw, y * w, rcond=None)
    cov = np.linalg.pinv(aw.T @ aw)
    dof = x.size - (degree + 1)
    birge = 1.0
    if dof >= 1:
        chi2 = float(np.sum(((a @ coef - y) * w) ** 2))
        birge = max(1.0, chi2 / dof)
    return coef, cov * birge, birge


def fit_side(stretch: Stretch, edge: str, *, degree: int = 1, window_frames: int = RATE_WINDOW_FRAMES):
    """Fit the count near the ``"end"`` or ``"start"`` of a stretch; None when under 2 frames.

    The degree drops to what the number of frames supports (a quadratic needs 4).
    """
    n = stretch.n
    if n < 2:
        return None
    m = min(n, window_frames)
    sl = slice(n - m, n) if edge == "end" else slice(0, m)
    t, y, s = stretch.time_s[sl], stretch.fringes[sl], stretch.sigma[sl]
    if degree >= 2 and m < 4:
        degree = 1
    w = 1.0 / s ** 2
    tc = float(np.sum(w * t) / np.sum(w))
    coef, cov, birge = _weighted_polyfit(t - tc, y - y.mean(), s, degree)
    coef = coef.copy()
    coef[0] += y.mean()
    full = np.zeros(3)
    full[: coef.size] = coef
    fcov = np.zeros((3, 3))
    fcov[: coef.size, : coef.size] = cov
    return SideFit(center_time_s=tc, coef=full, cov=fcov, n=m, birge=birge)


def predict_two_sided(before: SideFit, after: SideFit, t_from_s: float, t_to_s: float) -> RatePrediction:
    """Count change from ``t_from_s`` (last frame before) to ``t_to_s`` (first frame after)."""
    span = t_to_s - t_from_s
    t_mid = 0.5 * (t_from_s + t_to_s)
    base = after.center_time_s - before.center_time_s
    w_after = (t_mid - before.center_time_s) / base
    w_before = 1.0 - w_after
    value = span * (w_before * before.rate + w_after * after.rate)
    fit_var = span ** 2 * (w_before ** 2 * before.rate_var + w_after ** 2 * after.rate_var)
    excess = (after.rate - before.rate) ** 2 - (before.rate_var + after.rate_var)
    model_var = max(0.0, excess) * span ** 2 / 12.0
    return RatePrediction(value=value, fit_var=fit_var, model_var=model_var)


def predict_one_sided(side: SideFit, t_from_s: float, t_to_s: float) -> RatePrediction:
    """Count change from ``t_from_s`` to ``t_to_s`` extrapolated from one side's polynomial."""
    x0, x1 = t_from_s - side.center_time_s, t_to_s - side.center_time_s
    grad = np.array([0.0, x1 - x0, x1 ** 2 - x0 ** 2])
    value = float(grad @ side.coef)
    fit_var = float(grad @ side.cov @ grad)
    curvature = side.coef[2] * grad[2]
    return RatePrediction(value=value, fit_var=fit_var, model_var=float(curvature ** 2))
