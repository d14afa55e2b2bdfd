"""Bridging gaps: the whole-fringe count across each interval the tracker could not follow.

A gap is a run of untrusted frames (mode hop, beam blocked, fringes too fast,
saturation, centre lost). Across it only the fractional phase jump is measured;
the whole number of fringes has to come from elsewhere:

* **fringe-rate carry** (no wavelength log, and the fallback): the count rate on
  both sides predicts the change across the gap, and the integer that puts the
  measured fraction nearest that prediction is chosen;
* **wavelength log** (a wavemeter record of the laser): within each stable
  stretch the count is linear in the wavenumber with slope the group optical
  path difference D; the wavenumbers either side of a mode hop then predict the
  count change across it, and the integer follows as in the method of exact
  fractions (Benoit 1898).

Every gap gets a value, an honest 1-sigma, a method name, the probability of the
chosen integer and an ``ambiguous`` flag for gaps the data cannot decide.

Decision without a log for visibility-loss gaps
-----------------------------------------------
A gap whose reason is ``"low_visibility"`` (or ``"mode_hop"``) is where a laser
mode hop shows in a video: the visibility collapses while two modes run. A hop
moves the count by D * (sigma_2 - sigma_1), which can be several whole fringes
plus any fraction; the video alone cannot tell a hop whose size is close to a
whole number from a blur. Rule chosen: without a log such a gap is bridged to
the integer nearest the rate prediction but kept ``ambiguous`` with a uniform
whole-fringe prior over +-``hop_range_fringes`` added in quadrature
(sigma^2 += hop_range**2 / 3), **unless** it spans at most
:data:`SHORT_GAP_FRAMES` analysed frames and the rate prediction is tight
(chosen integer at p >= :data:`P_DECIDED` and within :data:`HOP_Z` sigma): a
1-2 frame dip with the phase back exactly where the rate puts it is taken as a
blur. A ``"too_fast"`` gap gets the same rule: the fringes outran the tracker,
so the rate inside the gap exceeded what either edge shows and may have hidden
whole fringes (``hop_range_fringes`` then bounds that excursion too). Any gap
(whatever its reason) whose phase returns more than ``HOP_Z`` sigma from the
rate prediction gets the same prior.

With a wavelength log
---------------------
Gaps between two stable stretches are bridged by the log (see
``fringecount._bridge._wavelog`` for the model): one group OPD common to all
stretches, the log regressed on the fringe count, decided hops joined and the
fit repeated, each remaining gap scored on its marginal predictive
distribution. Undecided gaps are ``ambiguous`` and their sigma covers the
candidates (at least the rms spread, and +-3 sigma holding 99.73 % of the
candidates' probability); because they share the fitted D, their sigmas are
scaled so that the root-sum-square covers their sum. Gaps at the clip
start/end are always extrapolated from the fringe rate.

Laser safety: a wavelength scan uses a laser diode; follow local rules and your
laser safety officer (beam enclosures, eyewear rated for the wavelength, no
direct viewing, camera instead of eye at the output).
"""

from __future__ import annotations

import logging
import math

import numpy as np
import pandas as pd

from ._bridge._carry import (FAST_REASONS, HOP_REASONS, HOP_Z, ONE_SIDED_DECIDED_SIGMA, P_DECIDED, SHORT_GAP_FRAMES,
                             edge_row, rate_row)
from ._bridge._inputs import (BridgeInputError, WavelengthLogError, check_gaps, check_log, check_track,
                              frame_time_s, gap_frame_count, read_log_csv, stretches_from_track)
from ._bridge._rate import RATE_WINDOW_FRAMES
from ._bridge._simulate import tables_from_count
from ._bridge._wavelog import solve_log

__all__ = [
    "bridge_gaps",
    "read_wavelength_log",
    "fit_group_opd",
    "tables_from_count",
    "BridgeInputError",
    "WavelengthLogError",
    "P_DECIDED",
    "HOP_Z",
    "HOP_REASONS",
    "FAST_REASONS",
    "SHORT_GAP_FRAMES",
    "ONE_SIDED_DECIDED_SIGMA",
    "RATE_WINDOW_FRAMES",
    "OUTPUT_COLUMNS",
]

logger = logging.getLogger(__name__)

#: Columns added to the gap table, in order.
OUTPUT_COLUMNS = (
    "fringes_across", "fringes_across_sigma", "method", "p_chosen", "ambiguous", "fraction_measured",
    "rate_prediction", "rate_prediction_sigma", "hop_suspected", "candidates", "log_prediction",
    "log_prediction_sigma", "wavelength_before_nm", "wavelength_after_nm", "synthetic_wavelength_m", "note",
)


def read_wavelength_log(path) -> pd.DataFrame:
    """Read a wavemeter log from a CSV file.

    Parameters
    ----------
    path : str or path-like
        CSV with a header and at least the columns ``time_s`` (s, strictly
        increasing) and ``wavelength_nm`` (nm). An optional column
        ``wavelength_sigma_nm`` gives each reading's 1-sigma noise; without it the
        noise is estimated from the scatter of the log about the fringe count.
        Lines starting with ``#`` are comments.

    Returns
    -------
    pandas.DataFrame
        ``time_s``, ``wavelength_nm`` (and ``wavelength_sigma_nm`` if present), floats.

    Raises
    ------
    WavelengthLogError
        (an :class:`~fringecount.errors.InputError`) when the file is missing or
        unreadable, a column is missing or non-numeric, times are not strictly
        increasing, the log is empty, or values are not nanometres.
    """
    return read_log_csv(path)


def bridge_gaps(track: pd.DataFrame, gaps: pd.DataFrame, *, wavelength_log: pd.DataFrame | None = None,
                log_offset_s: float = 0.0, air_wavelengths: bool = False, hop_range_fringes: float = 6.0,
                rng=None) -> pd.DataFrame:
    """Estimate the count change across every gap, with an honest sigma.

    Parameters
    ----------
    track : pandas.DataFrame
        One row per analysed frame: ``frame`` (0-based original frame number),
        ``time_s`` (s), ``segment`` (id of the trusted stretch, -1 inside gaps),
        ``fringes`` (phase / 2 pi, unwrapped within its segment, all segments
        sharing one phase zero; NaN inside gaps) and ``fringes_sigma`` (1-sigma
        noise of ``fringes``, in fringes).
    gaps : pandas.DataFrame
        One row per gap: ``first_frame``, ``last_frame`` (0-based, inclusive),
        ``reason``, ``segment_before``, ``segment_after`` (-1 at the clip start/end).
    wavelength_log : pandas.DataFrame, optional
        Wavemeter readings ``time_s``, ``wavelength_nm`` (vacuum unless
        ``air_wavelengths``), optionally ``wavelength_sigma_nm``. When given, gaps
        between two stretches are bridged by the wavelength-log method.
    log_offset_s : float
        Added to the log's ``time_s`` to put it on the clip clock, in s.
    air_wavelengths : bool
        The log holds air wavelengths (the integer choice does not depend on it;
        only the reported group OPD and wavelengths are converted to vacuum).
    hop_range_fringes : float
        Largest whole-fringe jump a suspected mode hop is assumed to hide when
        no log decides it (uniform prior; sigma grows by hop_range / sqrt(3)).
    rng : numpy.random.Generator or int, optional
        Random source for the sampled (Monte Carlo) log prediction used when the
        group OPD is known only to worse than 5 %; ``None`` uses a fixed seed so
        that results are reproducible. The rate carry draws no random numbers.

    Returns
    -------
    pandas.DataFrame
        A copy of ``gaps`` (same rows, same order) with the columns of
        :data:`OUTPUT_COLUMNS`:

        ``fringes_across``
            Count change (fringes) from the last trusted frame before the gap to
            the first trusted frame after it; for a gap at the clip start/end,
            from the clip's first frame to the first trusted frame / from the last
            trusted frame to the clip's last frame (extrapolated).
        ``fringes_across_sigma``
            1 sigma (fringes). For a decided integer: the noise of the two end
            phases only; for an undecided one: the spread of the candidates; with
            a hop prior: widened by hop_range / sqrt(3).
        ``method``
            ``"rate"``, ``"one_sided_rate"``, ``"wavelength_log"`` or ``"none"``.
        ``p_chosen``
            Probability of the chosen integer among all candidates (NaN at clip
            edges, where no fraction is measured).
        ``ambiguous``
            True when the data do not decide the integer (p_chosen < P_DECIDED,
            a suspected hop, or an edge extrapolation with sigma > 1/6 fringe).
        ``fraction_measured``
            Measured fractional jump in [-0.5, 0.5) (NaN at clip edges).
        ``rate_prediction``, ``rate_prediction_sigma``
            The fringe-rate prediction of the change and its sigma.
        ``hop_suspected``
            A mode hop may hide whole fringes here (hop prior applied).
        ``candidates``
            The three most probable candidate values with their probabilities.
        ``log_prediction``, ``log_prediction_sigma``
            The wavelength-log prediction (``wavelength_log`` gaps).
        ``wavelength_before_nm``, ``wavelength_after_nm``, ``synthetic_wavelength_m``
            Vacuum wavelengths of the modes either side and the synthetic
            wavelength lambda1 lambda2 / |lambda1 - lambda2| (log gaps).
        ``note``
            Plain-text reason for an ambiguity or a fallback.

    Raises
    ------
    BridgeInputError
        Missing columns or inconsistent track/gap tables.
    WavelengthLogError
        A log that is malformed or does not cover the stable stretches next to the gaps.

    Notes
    -----
    The rate carry fits each side over the :data:`RATE_WINDOW_FRAMES` trusted
    frames nearest the gap (weighted least squares, Birge-scaled covariance),
    integrates a velocity linear in time between the two fitted rates and adds a
    model term ``|v_after - v_before| T / sqrt(12)`` for a rate change of unknown
    timing inside the gap. See the module docstring for the rule applied to
    visibility-loss gaps without a log.

    References
    ----------
    .. [1] R. Benoit, "Application des phenomenes d'interference a des
       determinations metrologiques", J. Phys. Theor. Appl. 7, 57-68 (1898).
    .. [2] K. Itoh, "Analysis of the phase unwrapping algorithm", Appl. Opt.
       21(14), 2470 (1982).

    Examples
    --------
    A mirror moving at 2 fringes/s, filmed at 30 frames/s, with the beam blocked
    for 5 frames: the rate carry recovers the whole count across the block.

    >>> import numpy as np
    >>> from fringecount.bridge import bridge_gaps, tables_from_count
    >>> t = np.arange(300) / 30.0
    >>> true = 2.0 * t
    >>> blocked = (t >= 4.0) & (t < 4.17)
    >>> track, gaps = tables_from_count(t, true, blocked, fringes_sigma=0.01,
    ...                                 rng=np.random.default_rng(0))
    >>> row = bridge_gaps(track, gaps).iloc[0]
    >>> row["method"], bool(row["ambiguous"])
    ('rate', False)
    >>> first, last = int(gaps.first_frame[0]), int(gaps.last_frame[0])
    >>> bool(abs(row["fringes_across"] - (true[last + 1] - true[first - 1])) < 0.07)
    True
    """
    rows, _opd = _bridge_all(track, gaps, wavelength_log, log_offset_s, air_wavelengths, hop_range_fringes, rng)
    added = pd.DataFrame(rows, columns=list(OUTPUT_COLUMNS)).astype({"ambiguous": bool, "hop_suspected": bool})
    added.index = gaps.index
    kept = gaps.drop(columns=[c for c in OUTPUT_COLUMNS if c in gaps.columns])
    return pd.concat([kept, added], axis=1)


def _bridge_all(track, gaps, wavelength_log, log_offset_s, air_wavelengths, hop_range_fringes, rng):
    """Rows of output columns for every gap (in order) and the log's group OPD (or None)."""
    if not (isinstance(hop_range_fringes, (int, float)) and math.isfinite(hop_range_fringes)
            and hop_range_fringes >= 0):
        raise BridgeInputError(f"hop_range_fringes must be a finite number >= 0, got {hop_range_fringes!r}")
    clean = check_track(track)
    stretches = stretches_from_track(clean)
    specs = check_gaps(gaps, set(stretches))
    rows: list[dict] = []
    for gap in specs:
        before = stretches.get(gap.segment_before)
        after = stretches.get(gap.segment_after)
        if before is not None and after is not None:
            row = rate_row(before, after, reason=gap.reason,
                           gap_frames=gap_frame_count(clean, gap.first_frame, gap.last_frame),
                           hop_range_fringes=float(hop_range_fringes))
        elif after is not None:
            row = edge_row(after, frame_time_s(clean, gap.first_frame, "first"), at_start=True)
        elif before is not None:
            row = edge_row(before, frame_time_s(clean, gap.last_frame, "last"), at_start=False)
        else:
            row = edge_row(None, math.nan, at_start=True)
        rows.append(row)
    opd = None
    if wavelength_log is not None:
        rng = np.random.default_rng(0) if rng is None else np.random.default_rng(rng)
        updates, opd = solve_log(stretches, specs, rows, check_log(wavelength_log),
                                 log_offset_s=float(log_offset_s), air_wavelengths=bool(air_wavelengths),
                                 rng=rng)
        for i, update in updates.items():
            rows[i].update(update)
    for gap, row in zip(specs, rows):
        logger.debug("gap %d..%d (%s): %s %.4f +- %.4f", gap.first_frame, gap.last_frame, gap.reason,
                     row["method"], row["fringes_across"], row["fringes_across_sigma"])
    return rows, opd


def fit_group_opd(track: pd.DataFrame, gaps: pd.DataFrame, wavelength_log: pd.DataFrame, *,
                  log_offset_s: float = 0.0, air_wavelengths: bool = False) -> tuple[float, float]:
    """Group optical path difference D = dN/dsigma from a wavelength scan, with its 1-sigma.

    Fits the wavemeter log against the fringe count in every stable stretch with one
    common slope (see :func:`bridge_gaps`; stretches whose whole numbers the log
    decides are joined, so D uses the count across those hops too).

    Parameters
    ----------
    track, gaps, wavelength_log, log_offset_s, air_wavelengths
        As for :func:`bridge_gaps`.

    Returns
    -------
    group_opd_m, group_opd_sigma_m : float
        D in m (signed: positive when the count grows with the vacuum wavenumber
        sigma = 1/lambda_vac) and its 1-sigma in m. For a plate of thickness t in
        a double-pass arm, D = 2 t (n_g - 1) plus 2 dL n_g,air for an arm
        imbalance dL (REFERENCES 3b). With air wavelengths D is converted to
        vacuum with the Ciddor index of standard lab air (20 C, 101.325 kPa,
        50 %), whose uncertainty (3e-5) is included.

    Raises
    ------
    WavelengthLogError
        When the log does not cover the stretches or does not change the
        wavelength inside any stretch (D undetermined).
    """
    _rows, opd = _bridge_all(track, gaps, wavelength_log, log_offset_s, air_wavelengths, 6.0, None)
    if opd is None:
        raise WavelengthLogError("the wavelength log does not determine the group OPD: no stable stretch shows "
                                 "both a wavelength change and a fringe change; log a scan with continuous tuning")
    return opd.group_opd_m, opd.group_opd_sigma_m
