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

__all__ = ["IntegerChoice", "wrap_fraction", "choose_integer", "MAX_CANDIDATES"]

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
    candidates : str
        The three most probable candidates, ``"value (p); ..."``.
    """

    k: int
    value: float
    p_chosen: float
    z: float
    total_sigma: float
    spread_sigma: float
    candidates: str


def wrap_fraction(x):
    """Map ``x`` (fringes) onto [-0.5, 0.5)."""
    return x - np.floor(np.asarray(x, dtype=float) + 0.5)


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
    k0 = int(round(prediction - fraction))
    half = int(min((MAX_CANDIDATES - 1) // 2, math.ceil(8.0 * total) + 2))
    ks = np.arange(k0 - half, k0 + half + 1)
    resid = fraction + ks - prediction
    if math.isinf(dof):
        logp = -0.5 * (resid / total) ** 2
    else:
        logp = stats.t.logpdf(resid / total, df=max(dof, 1.0))
    logp = logp - logsumexp(logp)
    p = np.exp(logp)
    best = int(np.argmax(p))
    k = int(ks[best])
    spread = math.sqrt(float(np.sum(p * (ks - k) ** 2)))
    order = np.argsort(-logp, kind="stable")[:3]
    cands = "; ".join(f"{fraction + ks[i]:.3f} ({p[i]:.3g})" for i in order)
    return IntegerChoice(k=k, value=float(fraction + k), p_chosen=float(p[best]),
                         z=float((fraction + k - prediction) / total), total_sigma=total,
                         spread_sigma=spread, candidates=cands)
