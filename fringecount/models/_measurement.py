"""Result and reference-value containers, and linear uncertainty propagation.

Every model returns :class:`Measurement` objects: a value, its 1-sigma standard
uncertainty, a unit string and the uncertainty budget (which input contributes
how much). Published constants are :class:`Reference` objects that carry their
source, in the manner of a table of physical constants.

Propagation is first order (GUM, JCGM 100:2008, law of propagation of
uncertainty for uncorrelated inputs): sigma_y² = Σ (∂f/∂x_i)² sigma_i². The
partial derivatives are taken numerically by central differences with a step of
1 % of each input's sigma, which keeps the truncation error of the derivative
below about 1e-4 relative for the smooth models here. The tests cross-check
every model against a Monte Carlo draw of the inputs.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

from ..units import Uncertain

__all__ = ["Measurement", "Reference", "propagate", "budget_table"]


@dataclass(frozen=True)
class Reference:
    """A published reference value: value, absolute 1-sigma, unit and source.

    ``uncertainty`` is 0 for defined or conventional coefficients.
    """

    value: float
    uncertainty: float
    unit: str
    source: str


@dataclass(frozen=True)
class Measurement:
    """A derived quantity with its 1-sigma standard uncertainty.

    Parameters
    ----------
    value : float
        Best estimate, in ``unit``.
    uncertainty : float
        1-sigma standard uncertainty, in ``unit``.
    unit : str
        Plain unit string: ``"m"``, ``"1/K"``, ``"1/Pa"``, ``""`` (dimensionless)...
    budget : tuple of (str, float)
        Contribution of each input to ``uncertainty`` (|∂f/∂x|·sigma_x, in ``unit``),
        largest first. Their root sum of squares is ``uncertainty`` unless a fit
        term (e.g. ``"fit"``) is listed too.
    note : str
        One line on how the value was obtained.
    """

    value: float
    uncertainty: float
    unit: str
    budget: tuple[tuple[str, float], ...] = field(default=())
    note: str = ""

    def as_dict(self) -> dict:
        """``{"value", "sigma", "unit"}`` plus the budget, for JSON output."""
        return {"value": self.value, "sigma": self.uncertainty, "unit": self.unit,
                "budget": {k: v for k, v in self.budget}}

    def scaled(self, factor: float, unit: str) -> "Measurement":
        """The same measurement expressed in another unit (value and sigmas times ``factor``)."""
        return Measurement(self.value * factor, self.uncertainty * abs(factor), unit,
                           tuple((k, v * abs(factor)) for k, v in self.budget), self.note)


def propagate(func: Callable[..., float], inputs: Mapping[str, Uncertain | float], unit: str,
              *, note: str = "", extra: Mapping[str, float] | None = None) -> Measurement:
    """Evaluate ``func(**values)`` and propagate the input sigmas to first order.

    Parameters
    ----------
    func : callable
        Model taking keyword arguments named as ``inputs``; returns a float.
    inputs : mapping of str to Uncertain or float
        Input values with their 1-sigma (a bare float is exact).
    unit : str
        Unit of the result.
    note : str
        Stored in the result.
    extra : mapping of str to float, optional
        Further independent 1-sigma terms in the result's unit (e.g. a fit's
        statistical sigma), added in quadrature and listed in the budget.

    Returns
    -------
    Measurement
    """
    vals = {k: (v.value if isinstance(v, Uncertain) else float(v)) for k, v in inputs.items()}
    sigmas = {k: (v.sigma if isinstance(v, Uncertain) else 0.0) for k, v in inputs.items()}
    y = float(func(**vals))
    parts: list[tuple[str, float]] = []
    for k, s in sigmas.items():
        if s <= 0:
            continue
        h = 0.01 * s
        up = dict(vals, **{k: vals[k] + h})
        dn = dict(vals, **{k: vals[k] - h})
        deriv = (float(func(**up)) - float(func(**dn))) / (2 * h)
        parts.append((k, float(abs(deriv) * s)))
    for k, s in (extra or {}).items():
        parts.append((k, abs(float(s))))
    parts.sort(key=lambda kv: -kv[1])
    sigma = math.sqrt(sum(c * c for _, c in parts))
    return Measurement(y, sigma, unit, tuple(parts), note)


def budget_table(m: Measurement) -> list[tuple[str, float, float]]:
    """Rows ``(input, contribution, share of variance)`` for a printed budget."""
    total = m.uncertainty ** 2
    return [(k, c, (c * c / total if total > 0 else 0.0)) for k, c in m.budget]
