"""Choosing the whole number of fringes that goes with a measured fraction.

Given a measured fractional jump ``f`` and a prediction ``mu +- s`` of the whole
count change, every integer ``k`` gives a candidate ``f + k``; its weight is the
predictive density of ``f + k`` (Gaussian, or Student-t when the prediction's
scale was estimated from few residual degrees of freedom). This is the
least-squares choice among integer candidates of the method of exact fractions
(Benoit 1898), written for one unknown integer.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats
from scipy.special import logsumexp

__all__ = ["IntegerChoice", "wrap_fraction", "choose_integer", "choice_from_weights", "candidate_range",
           "gaussian_logw", "MAX_CANDIDATES"]

#: Probability inside +-3 sigma of a Gaussian.
COVER_3SIGMA = 0.9973

#: Cap on the number of integer candidates scored (beyond it the weights are flat anyway).
MAX_CANDIDATES = 4001


@dataclass(frozen=True)
class IntegerChoice:
    """Outcome of scoring the integer candidates of one gap.

    Attributes
    ----------
    k : int
        Chosen whole number; the count change is ``fraction + k``.
    value : float
        ``fraction + k`` in fringes.
    p_chosen : float
        Probability of ``k`` among all scored candidates (uniform prior over them).
    z : float
        ``(value - prediction) / total_sigma``.
    total_sigma : float
        sqrt(prediction_sigma**2 + measure_sigma**2), in fringes.
    spread_sigma : float
        sqrt(sum_k p_k (k - k_chosen)**2): the spread of the candidates about the
        chosen one, in fringes.
    cover_sigma : float
        max(spread_sigma, h / 3), with h the smallest whole-fringe distance from the
        chosen candidate that holds COVER_3SIGMA of the probability: a sigma whose
        +-3 sigma interval holds as much as a Gaussian's, even for heavy-tailed
        candidate distributions.
    candidates : str
        The three most probable candidates, ``"value (p); ..."``.
    """

    k: int
    value: float
    p_chosen: float
    z: float
    total_sigma: float
    spread_sigma: float
    cover_sigma: float
    candidates: str


def wrap_fraction(x):
    """Map ``x`` (fringes) onto [-0.5, 0.5)."""
    return x - np.floor(np.asarray(x, dtype=float) + 0.5)


def choice_from_weights(fraction: float, ks: np.ndarray, logw: np.ndarray, prediction: float,
                        total_sigma: float) -> IntegerChoice:
    """Pick the most probable of the candidates ``fraction + ks`` given their log-weights."""
    logp = logw - logsumexp(logw)
    p = np.exp(logp)
    best = int(np.argmax(logp))
    k = int(ks[best])
    spread = math.sqrt(float(np.sum(p * (ks - k) ** 2)))
    dist = np.abs(ks - k)
    by_dist = np.bincount(dist, weights=p)
    h = int(np.searchsorted(np.cumsum(by_dist), COVER_3SIGMA * float(np.sum(p))))
    cover = max(spread, min(h, dist.max()) / 3.0)
    order = np.argsort(-logp, kind="stable")[:3]
    cands = "; ".join(f"{fraction + ks[i]:.3f} ({p[i]:.3g})" for i in order)
    return IntegerChoice(k=k, value=float(fraction + k), p_chosen=float(p[best]),
                         z=float((fraction + k - prediction) / total_sigma), total_sigma=total_sigma,
                         spread_sigma=spread, cover_sigma=cover, candidates=cands)


def candidate_range(fraction: float, low: float, high: float) -> np.ndarray:
    """Integers k with ``fraction + k`` in [low, high] widened by two, capped at MAX_CANDIDATES."""
    k0, k1 = math.floor(low - fraction) - 2, math.ceil(high - fraction) + 2
    if k1 - k0 + 1 > MAX_CANDIDATES:
        mid = (k0 + k1) // 2
        k0, k1 = mid - MAX_CANDIDATES // 2, mid + MAX_CANDIDATES // 2
    return np.arange(k0, k1 + 1)


def gaussian_logw(fraction: float, ks: np.ndarray, prediction: float, total_sigma: float,
                  dof: float = math.inf) -> np.ndarray:
    """Log predictive density of each candidate (Gaussian, or Student-t on ``dof``)."""
    r = (fraction + ks - prediction) / total_sigma
    if math.isinf(dof):
        return -0.5 * r ** 2
    return stats.t.logpdf(r, df=max(dof, 1.0))


def choose_integer(fraction: float, prediction: float, prediction_sigma: float, measure_sigma: float,
                   *, dof: float = math.inf) -> IntegerChoice:
    """Score the integers ``k`` for which ``fraction + k`` matches ``prediction``.

    Parameters
    ----------
    fraction : float
        Measured fractional jump in [-0.5, 0.5), fringes.
    prediction, prediction_sigma : float
        Predicted count change and its 1-sigma uncertainty, fringes.
    measure_sigma : float
        1-sigma noise of the measured fraction (both end phases), fringes.
    dof : float
        Degrees of freedom behind ``prediction_sigma``; ``inf`` for a known scale
        (Gaussian predictive), finite for a Student-t predictive.

    Returns
    -------
    IntegerChoice
    """
    total = math.hypot(prediction_sigma, measure_sigma)
    reach = 8.0 * total * (1.0 if math.isinf(dof) else 3.0)
    ks = candidate_range(fraction, prediction - reach, prediction + reach)
    return choice_from_weights(fraction, ks, gaussian_logw(fraction, ks, prediction, total, dof), prediction, total)
