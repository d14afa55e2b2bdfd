"""Track and gap tables from a known count history, for tests, demos and notebooks.

The tables have exactly the layout :func:`fringecount.bridge.bridge_gaps` takes.
Each trusted stretch keeps the count only up to a whole number (a random integer
is removed from every stretch after the first), as a tracker that loses the
pattern would leave it: across a gap only the fraction survives.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

__all__ = ["tables_from_count"]


def tables_from_count(time_s: np.ndarray, true_fringes: np.ndarray, untrusted: np.ndarray, *,
                      fringes_sigma: float, reasons: str | Sequence[str] = "dark",
                      rng: np.random.Generator, max_offset: int = 50) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Build ``(track, gaps)`` tables from a true count and a mask of untrusted frames.

    Parameters
    ----------
    time_s : (n,) ndarray
        Frame times in s (increasing).
    true_fringes : (n,) ndarray
        True cumulative count at each frame, in fringes.
    untrusted : (n,) bool ndarray
        Frames inside gaps.
    fringes_sigma : float
        1-sigma Gaussian phase noise added to every trusted frame, in fringes.
    reasons : str or sequence of str
        Reason of every gap, or one per gap in time order.
    rng : numpy.random.Generator
        Source of the noise and of the integer offsets.
    max_offset : int
        Stretches after the first are shifted by a random integer in [-max_offset, max_offset].

    Returns
    -------
    track, gaps : pandas.DataFrame
        See :func:`fringecount.bridge.bridge_gaps`.
    """
    time_s = np.asarray(time_s, dtype=float)
    true_fringes = np.asarray(true_fringes, dtype=float)
    untrusted = np.asarray(untrusted, dtype=bool)
    n = time_s.size
    trusted = ~untrusted
    starts = np.flatnonzero(trusted & ~np.r_[False, trusted[:-1]])
    segment = np.full(n, -1, dtype=np.int64)
    fringes = np.full(n, np.nan)
    noisy = true_fringes + rng.normal(0.0, fringes_sigma, n)
    for sid, s0 in enumerate(starts):
        s1 = s0
        while s1 + 1 < n and trusted[s1 + 1]:
            s1 += 1
        segment[s0:s1 + 1] = sid
        offset = 0 if sid == 0 else int(rng.integers(-max_offset, max_offset + 1))
        fringes[s0:s1 + 1] = noisy[s0:s1 + 1] - offset
    track = pd.DataFrame({"frame": np.arange(n), "time_s": time_s, "segment": segment, "fringes": fringes,
                          "fringes_sigma": np.where(trusted, fringes_sigma, np.nan)})
    g_starts = np.flatnonzero(untrusted & ~np.r_[False, untrusted[:-1]])
    g_ends = np.flatnonzero(untrusted & ~np.r_[untrusted[1:], False])
    if isinstance(reasons, str):
        reasons = [reasons] * g_starts.size
    rows = []
    for first, last, reason in zip(g_starts, g_ends, reasons):
        rows.append({"first_frame": int(first), "last_frame": int(last), "reason": reason,
                     "segment_before": int(segment[first - 1]) if first > 0 else -1,
                     "segment_after": int(segment[last + 1]) if last + 1 < n else -1})
    gaps = pd.DataFrame(rows, columns=["first_frame", "last_frame", "reason", "segment_before", "segment_after"])
    return track, gaps
