"""Trust flags per frame and the table of untrusted intervals ("gaps").

A frame is not trusted when its fringes cannot be followed: the visibility
collapsed (a laser mode hop makes the source multimode and washes the pattern
out; vibration blurs it), the frame is dark (beam blocked), too many pixels are
saturated, the ring centre was lost, or the phase stepped too far since the
previous frame (at half a fringe per frame the step is ambiguous: Itoh 1982).
Flags add columns and never drop rows.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import ndimage

__all__ = ["REASONS", "flag_frames", "find_gaps", "unwrap_segments"]

#: Gap reasons, most severe first (a mixed gap takes the first that applies).
REASONS = ("unreadable", "dark", "low_visibility", "saturated", "center_lost", "too_fast")

_DESCRIPTIONS = {
    "unreadable": "frame could not be decoded (damaged file or image)",
    "dark": "too little light (beam blocked or laser off)",
    "low_visibility": "fringes washed out (laser mode hop / multimode, or blur)",
    "saturated": "too many saturated pixels in the region of interest",
    "center_lost": "ring centre could not be followed",
    "too_fast": "fringes moved too far between frames to follow (aliasing risk)",
}


def describe(reason: str) -> str:
    """One-line description of a gap reason."""
    return _DESCRIPTIONS.get(reason, reason)


def _wrap(x):
    return (x + np.pi) % (2 * np.pi) - np.pi


def flag_frames(table: pd.DataFrame, *, min_visibility: float | None = None,
                max_step_fringes: float = 0.35, max_phase_sigma_fringes: float = 0.05,
                min_stretch: int = 3) -> pd.DataFrame:
    """Add ``flag_<reason>`` columns, ``reason`` and ``trusted`` to a per-frame table.

    Parameters
    ----------
    table : pandas.DataFrame
        Columns ``phase`` (wrapped, rad), ``phase_sigma`` (rad), ``visibility``,
        ``brightness``, ``saturated_fraction``, ``valid_fraction`` and optionally
        ``center_ok``.
    min_visibility : float, optional
        Visibility floor; default 35 % of the clip's typical (75th percentile)
        visibility.
    max_step_fringes : float
        Largest frame-to-frame phase step (fringes) that is followed.
    max_phase_sigma_fringes : float
        Frames whose phase is noisier than this (1 sigma, fringes) are low-visibility.
    min_stretch : int
        Trusted runs shorter than this are too short to carry a fringe rate and
        join the neighbouring gap.
    """
    t = table.copy()
    n = len(t)
    b = t["brightness"].to_numpy(float)
    v = t["visibility"].to_numpy(float)
    bright_ref = np.nanpercentile(b, 90) if n else 0.0
    # a blocked beam leaves the camera's background; a dark fringe in a nearly uniform field
    # still keeps (1 - V) of the light, so the threshold sits well below the bright level
    dark = ~(b > 0.12 * bright_ref)
    if dark.any() and (~dark).any():
        # frames next to a dark interval that were dark for part of their exposure: their
        # phase is biased (the exposure centroid moved), so they join the interval
        idx = np.arange(n)
        lit = b > 0.5 * bright_ref  # reference from clearly lit frames only
        lit = lit if lit.any() else ~dark
        local = ndimage.median_filter(np.interp(idx, idx[lit], b[lit]), size=min(31, 2 * (n // 2) + 1),
                                      mode="nearest")
        partial = b < 0.85 * local
        for _ in range(n):
            nxt = dark | (partial & (np.r_[False, dark[:-1]] | np.r_[dark[1:], False]))
            if (nxt == dark).all():
                break
            dark = nxt
    vis_ref = np.nanpercentile(v[~dark], 75) if (~dark).any() else 0.0
    vmin = min_visibility if min_visibility is not None else 0.35 * vis_ref
    noisy = ~(t["phase_sigma"].to_numpy(float) < 2 * np.pi * max_phase_sigma_fringes)
    low = (~dark) & ((v < vmin) | noisy | ~np.isfinite(v))
    # saturated pixels are masked; a frame is lost to saturation only when too few bins are left
    sat = (~dark) & (t["valid_fraction"].to_numpy(float) < 0.4) & ~low
    lost = ~t["center_ok"].to_numpy(bool) if "center_ok" in t else np.zeros(n, bool)
    if "nonradial_fraction" in t:
        # fringes still there but no longer symmetric about the centre: the centre was lost
        # (a bumped mirror, a jump of the camera); a washed-out pattern leaves only noise instead
        nr = t["nonradial_fraction"].to_numpy(float)
        typical_nr = np.nanmedian(nr[~dark]) if (~dark).any() else np.nan
        lost |= (~dark) & (v < 0.7 * vis_ref) & (nr > max(typical_nr + 0.35, 2.5 * typical_nr))
    unreadable = t["unreadable"].to_numpy(bool) if "unreadable" in t else np.zeros(n, bool)
    dark &= ~unreadable
    low &= ~unreadable & ~lost
    sat &= ~unreadable
    bad = dark | low | sat | lost | unreadable
    # grow washed-out intervals into their partly blurred edges (phase biased there)
    soft = v < 0.7 * vis_ref
    grow = low.copy()
    for _ in range(n):
        nxt = grow | (soft & (np.r_[False, grow[:-1]] | np.r_[grow[1:], False]))
        if (nxt == grow).all():
            break
        grow = nxt
    low = grow & ~dark & ~unreadable & ~lost
    bad = dark | low | sat | lost | unreadable
    # too fast: step since the previous frame, when both are otherwise good
    phase = t["phase"].to_numpy(float)
    fast = np.zeros(n, bool)
    step = np.full(n, np.nan)
    for k in range(1, n):
        if not bad[k] and not bad[k - 1]:
            step[k] = _wrap(phase[k] - phase[k - 1]) / (2 * np.pi)
            fast[k] = abs(step[k]) > max_step_fringes
    bad |= fast
    # short trusted runs join their gap
    trusted = ~bad
    k = 0
    short = np.zeros(n, bool)
    while k < n:
        if trusted[k]:
            j = k
            while j < n and trusted[j]:
                j += 1
            if j - k < min_stretch and (k > 0 or j < n):
                short[k:j] = True
            k = j
        else:
            k += 1
    t["flag_unreadable"] = unreadable
    t["flag_dark"] = dark
    t["flag_low_visibility"] = low
    t["flag_saturated"] = sat
    t["flag_center_lost"] = lost
    t["flag_too_fast"] = fast
    t["step_fringes"] = step
    trusted = ~(dark | low | sat | lost | fast | short | unreadable)
    reason = np.full(n, "", dtype=object)
    for r in reversed(REASONS):
        reason[t[f"flag_{r}"].to_numpy(bool)] = r
    t["trusted"] = trusted
    t["reason"] = reason
    t.attrs["visibility_floor"] = float(vmin)
    t.attrs["visibility_typical"] = float(vis_ref)
    # short runs: inherit the reason of the preceding gap frame (or following)
    idx = np.flatnonzero(short & (reason == ""))
    for i in idx:
        left = i - 1
        while left >= 0 and reason[left] == "" and short[left]:
            left -= 1
        src = left if left >= 0 and reason[left] else None
        if src is None:
            right = i + 1
            while right < n and reason[right] == "":
                right += 1
            src = right if right < n else None
        t.iat[i, t.columns.get_loc("reason")] = reason[src] if src is not None else "too_fast"
    return t


def find_gaps(table: pd.DataFrame) -> tuple[np.ndarray, pd.DataFrame]:
    """Segment ids (-1 in gaps) and the gap table from a flagged per-frame table.

    Returns
    -------
    segment : (n,) int ndarray
    gaps : pandas.DataFrame
        ``first_frame``, ``last_frame`` (original frame numbers, inclusive),
        ``start_s``, ``stop_s``, ``reason``, ``segment_before``, ``segment_after``,
        ``n_frames``.
    """
    trusted = table["trusted"].to_numpy(bool)
    frames = table["frame"].to_numpy(int)
    times = table["time_s"].to_numpy(float)
    reasons = table["reason"].to_numpy(object)
    n = len(table)
    seg = np.full(n, -1, int)
    rows = []
    s = -1
    k = 0
    while k < n:
        if trusted[k]:
            s += 1
            while k < n and trusted[k]:
                seg[k] = s
                k += 1
        else:
            j = k
            while j < n and not trusted[j]:
                j += 1
            rs = [r for r in reasons[k:j] if r]
            reason = next((r for r in REASONS if r in rs), "low_visibility")
            if rs:
                counts = {r: rs.count(r) for r in set(rs)}
                top = max(counts.values())
                reason = next(r for r in REASONS if counts.get(r, 0) == top)
            rows.append(dict(first_frame=int(frames[k]), last_frame=int(frames[j - 1]),
                             start_s=float(times[k]), stop_s=float(times[j - 1]), reason=reason,
                             segment_before=s, segment_after=(s + 1) if j < n else -1, n_frames=j - k))
            k = j
    gaps = pd.DataFrame(rows, columns=["first_frame", "last_frame", "start_s", "stop_s", "reason",
                                       "segment_before", "segment_after", "n_frames"])
    return seg, gaps


def unwrap_segments(phase: np.ndarray, segment: np.ndarray) -> np.ndarray:
    """Fringes (phase / 2 pi) unwrapped within each segment (Itoh 1982), NaN in gaps.

    Every segment starts at its own wrapped phase / 2 pi, so all segments share
    one phase zero and the fractional jump across a gap is measured.
    """
    out = np.full(phase.shape, np.nan)
    for s in np.unique(segment[segment >= 0]):
        idx = np.flatnonzero(segment == s)
        p = phase[idx]
        steps = _wrap(np.diff(p))
        out[idx] = (p[0] + np.r_[0.0, np.cumsum(steps)]) / (2 * np.pi)
    return out
