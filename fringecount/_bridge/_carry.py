"""Per-gap decisions shared by the rate carry and the wavelength-log method."""

from __future__ import annotations

import math

from ._inputs import Stretch
from ._integers import IntegerChoice, choose_integer, wrap_fraction
from ._rate import RatePrediction, fit_side, predict_one_sided, predict_two_sided

__all__ = ["P_DECIDED", "HOP_Z", "HOP_REASONS", "FAST_REASONS", "SHORT_GAP_FRAMES", "ONE_SIDED_DECIDED_SIGMA",
           "empty_row", "edge_measurements", "rate_prediction", "integer_row", "apply_hop_prior", "rate_row",
           "edge_row"]

#: A candidate integer is taken as decided when its probability reaches this.
P_DECIDED = 0.99
#: |chosen value - prediction| beyond this many sigma means the phase came back where the
#: prediction does not put it (for the rate carry: the signature of a mode hop). 4 rather than 3:
#: a Gaussian false alarm costs the gap a sigma of hop_range/sqrt(3), and at 3 sigma it would
#: strike 1 gap in 370 (2.7e-3); at 4 sigma 1 in 16 000 (6.3e-5). A hop whose fraction lands
#: within 4 sigma of the prediction is missed either way; that is why visibility-loss gaps
#: carry the hop prior regardless (see HOP_REASONS).
HOP_Z = 4.0
#: Gap reasons that, without a wavelength log, may hide a mode hop (visibility collapsed).
HOP_REASONS = frozenset({"low_visibility", "mode_hop"})
#: Gap reasons where the count itself outran the tracker: a rate excursion inside the gap (a jerk of
#: the stage) may hide whole fringes that no edge rate shows. Treated like HOP_REASONS.
FAST_REASONS = frozenset({"too_fast"})
#: A low-visibility gap of at most this many analysed frames with a tight, consistent rate
#: prediction is treated as a blur, not a hop.
SHORT_GAP_FRAMES = 2
#: Gaps at the clip start/end are flagged ambiguous when the extrapolation sigma exceeds this
#: (then +-3 sigma spans a whole fringe).
ONE_SIDED_DECIDED_SIGMA = 1.0 / 6.0


def empty_row() -> dict:
    """Output columns of one gap with neutral values."""
    return {
        "fringes_across": math.nan, "fringes_across_sigma": math.nan, "method": "none",
        "p_chosen": math.nan, "ambiguous": True, "fraction_measured": math.nan,
        "rate_prediction": math.nan, "rate_prediction_sigma": math.nan, "hop_suspected": False,
        "candidates": "", "log_prediction": math.nan, "log_prediction_sigma": math.nan,
        "wavelength_before_nm": math.nan, "wavelength_after_nm": math.nan,
        "synthetic_wavelength_m": math.nan, "note": "",
    }


def edge_measurements(before: Stretch, after: Stretch) -> tuple[float, float, float, float, float]:
    """(t_from_s, t_to_s, raw jump, wrapped fraction, end-phase sigma) across an inner gap."""
    raw = float(after.fringes[0] - before.fringes[-1])
    sigma_meas = math.hypot(before.sigma[-1], after.sigma[0])
    return before.time_s[-1], after.time_s[0], raw, float(wrap_fraction(raw)), sigma_meas


def rate_prediction(before: Stretch | None, after: Stretch | None, t_from_s: float,
                    t_to_s: float) -> tuple[RatePrediction | None, str]:
    """Two-sided prediction when both sides can be fitted, else one-sided; with its method name."""
    fb = fit_side(before, "end") if before is not None else None
    fa = fit_side(after, "start") if after is not None else None
    if fb is not None and fa is not None:
        return predict_two_sided(fb, fa, t_from_s, t_to_s), "rate"
    if fb is None and fa is None:
        return None, "none"
    side = fit_side(before, "end", degree=2) if fb is not None else fit_side(after, "start", degree=2)
    return predict_one_sided(side, t_from_s, t_to_s), "one_sided_rate"


def integer_row(row: dict, choice: IntegerChoice, sigma_meas: float) -> dict:
    """Fill value, sigma, p and ambiguity from an integer choice (no hop prior)."""
    row["fringes_across"] = choice.value
    row["p_chosen"] = choice.p_chosen
    row["candidates"] = choice.candidates
    if choice.p_chosen >= P_DECIDED and abs(choice.z) <= HOP_Z:
        row["fringes_across_sigma"] = sigma_meas
        row["ambiguous"] = False
    else:
        row["fringes_across_sigma"] = math.hypot(choice.cover_sigma, sigma_meas)
        row["ambiguous"] = True
    return row


def apply_hop_prior(row: dict, hop_range_fringes: float) -> dict:
    """Widen a gap that may hide a mode hop: uniform whole-fringe prior over +-hop_range."""
    row["hop_suspected"] = True
    row["ambiguous"] = True
    row["fringes_across_sigma"] = math.sqrt(row["fringes_across_sigma"] ** 2 + hop_range_fringes ** 2 / 3.0)
    if math.isfinite(row["p_chosen"]):
        row["p_chosen"] = row["p_chosen"] / (2 * math.floor(hop_range_fringes) + 1)
    return row


def rate_row(before: Stretch | None, after: Stretch | None, *, reason: str, gap_frames: int,
             hop_range_fringes: float) -> dict:
    """Bridge an inner gap (both neighbours exist) by the fringe-rate carry."""
    row = empty_row()
    t_from, t_to, _raw, fraction, sigma_meas = edge_measurements(before, after)
    row["fraction_measured"] = fraction
    pred, method = rate_prediction(before, after, t_from, t_to)
    if pred is None:
        # Neither side has two frames: nothing predicts the whole number.
        row.update(method="none", fringes_across=fraction, ambiguous=True, hop_suspected=True,
                   note="no side has two trusted frames to give a fringe rate",
                   fringes_across_sigma=math.sqrt(sigma_meas ** 2 + max(hop_range_fringes, 0.5) ** 2 / 3.0))
        return row
    row["method"] = method
    row["rate_prediction"] = pred.value
    row["rate_prediction_sigma"] = pred.sigma
    choice = choose_integer(fraction, pred.value, pred.sigma, sigma_meas)
    integer_row(row, choice, sigma_meas)
    inconsistent = abs(choice.z) > HOP_Z
    tight = choice.p_chosen >= P_DECIDED and not inconsistent
    notes = []
    if inconsistent:
        notes.append(f"phase returned {choice.z:+.1f} sigma from the rate prediction: possible mode hop")
    blur_ok = gap_frames <= SHORT_GAP_FRAMES and tight
    if any(r in reason for r in HOP_REASONS) and not blur_ok:  # substring: also "low_visibility+saturated"
        notes.append("visibility collapsed: a mode hop by whole fringes cannot be excluded without a "
                     "wavelength log")
    elif any(r in reason for r in FAST_REASONS) and not blur_ok:
        notes.append("fringes outran the tracker: a rate excursion inside the gap may hide whole fringes")
    if notes:
        apply_hop_prior(row, hop_range_fringes)
        row["note"] = "; ".join(notes)
    return row


def edge_row(stretch: Stretch | None, t_edge_s: float, at_start: bool) -> dict:
    """Bridge a gap touching the clip start (``at_start``) or end by one-sided extrapolation."""
    row = empty_row()
    if stretch is None:
        row["note"] = "the whole clip is untrusted"
        return row
    if at_start:
        t_from, t_to = t_edge_s, float(stretch.time_s[0])
        side = fit_side(stretch, "start", degree=2)
    else:
        t_from, t_to = float(stretch.time_s[-1]), t_edge_s
        side = fit_side(stretch, "end", degree=2)
    if side is None:
        row["note"] = "a single trusted frame next to the clip edge gives no rate"
        return row
    pred = predict_one_sided(side, t_from, t_to)
    row.update(method="one_sided_rate", fringes_across=pred.value, fringes_across_sigma=pred.sigma,
               rate_prediction=pred.value, rate_prediction_sigma=pred.sigma,
               ambiguous=bool(pred.sigma > ONE_SIDED_DECIDED_SIGMA))
    return row

