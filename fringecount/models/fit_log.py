"""Count result folder + drive log: read, align in time, and fit.

A count result folder (written by ``fringecount count --out``) holds
``frames.csv`` (columns ``frame, time_s, fringes, fringes_sigma, visibility,
trusted``) and ``summary.json``. A drive log is a CSV with a time column (s) and
a value column (the driven quantity: angle, wavelength, pressure, voltage,
temperature). :func:`align_log` interpolates the log linearly onto the frame
times (after shifting the log by ``offset_s``); :func:`weighted_line_fit` fits
the cumulative count of the trusted frames against the driven quantity.

The cumulative count's per-frame sigmas are correlated (each frame's count
builds on the previous one); the fit treats them as independent weights and
then scales the parameter covariance by the reduced chi-square when that exceeds
one (Birge ratio, common practice), so the quoted sigma follows the scatter
actually seen in the residuals.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError

__all__ = ["CountRecord", "LineFit", "read_count_result", "read_drive_log", "align_log", "weighted_line_fit",
           "trusted_series"]

_FRAME_COLUMNS = ("frame", "time_s", "fringes")


@dataclass(frozen=True)
class CountRecord:
    """A count result read back: the per-frame table and the summary dict."""

    frames: pd.DataFrame
    summary: dict
    path: Path


@dataclass(frozen=True)
class LineFit:
    """Weighted straight-line fit y = intercept + slope·x.

    ``slope_sigma``/``intercept_sigma`` are 1-sigma, scaled by sqrt(chi2_red) when
    chi2_red > 1. ``residuals`` are y − fit in y units, one per point used.
    """

    slope: float
    intercept: float
    slope_sigma: float
    intercept_sigma: float
    covariance: tuple[tuple[float, float], tuple[float, float]]
    chi2_reduced: float
    n_points: int
    residuals: np.ndarray
    x_mean: float

    @property
    def rms_residual(self) -> float:
        return float(np.sqrt(np.mean(self.residuals**2))) if self.n_points else float("nan")


def read_count_result(folder: str | Path) -> CountRecord:
    """Read ``frames.csv`` and ``summary.json`` from a count result folder.

    Raises
    ------
    InputError
        Folder or file missing, unreadable, or without the required columns.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"count result folder {str(folder)!r} not found; pass the --out folder of 'fringecount count'")
    frames_path = folder / "frames.csv"
    if not frames_path.is_file():
        raise InputError(f"{frames_path} is missing; pass a folder written by 'fringecount count --out'")
    try:
        frames = pd.read_csv(frames_path)
    except Exception as exc:
        raise InputError(f"cannot read {frames_path} ({type(exc).__name__}); rerun 'fringecount count --out'") from None
    missing = [c for c in _FRAME_COLUMNS if c not in frames.columns]
    if missing:
        raise InputError(f"{frames_path} lacks column(s) {', '.join(missing)}; rerun 'fringecount count --out'")
    if "trusted" not in frames.columns:
        frames["trusted"] = True
    else:
        frames["trusted"] = frames["trusted"].map(
            lambda v: str(v).strip().lower() in ("true", "1", "yes", "1.0")).astype(bool)
    if "fringes_sigma" not in frames.columns:
        frames["fringes_sigma"] = np.nan
    summary: dict = {}
    summary_path = folder / "summary.json"
    if summary_path.is_file():
        try:
            summary = json.loads(summary_path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise InputError(f"cannot read {summary_path} ({type(exc).__name__}); "
                             "rerun 'fringecount count --out'") from None
    return CountRecord(frames, summary, folder)


def read_drive_log(path: str | Path, *, time_column: str | None = None, value_column: str | None = None) -> pd.DataFrame:
    """Read a drive log CSV into a DataFrame with columns ``time_s`` and ``value``.

    Parameters
    ----------
    path : path
        CSV file with a header row.
    time_column : str, optional
        Name of the time column (s). Default: ``time_s``, ``time`` or ``t``, else the first column.
    value_column : str, optional
        Name of the driven-quantity column. Default: the first column that is not the time column.

    Raises
    ------
    InputError
        File missing or unreadable, column absent, fewer than two rows, or times not increasing.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"drive log {str(path)!r} not found; pass a CSV with a time column and a value column")
    try:
        log = pd.read_csv(path)
    except Exception as exc:
        raise InputError(f"cannot read drive log {path} ({type(exc).__name__}); it must be CSV with a header") from None
    cols = list(log.columns)
    if time_column is None:
        time_column = next((c for c in ("time_s", "time", "t") if c in cols), cols[0] if cols else None)
    if time_column not in cols:
        raise InputError(f"drive log {path.name} has no column {time_column!r}; columns are {', '.join(map(str, cols))}")
    if value_column is None:
        others = [c for c in cols if c != time_column]
        if not others:
            raise InputError(f"drive log {path.name} has only one column; add the driven quantity as a second column")
        value_column = others[0]
    if value_column not in cols:
        raise InputError(f"drive log {path.name} has no column {value_column!r}; "
                         f"choose --log-column from {', '.join(map(str, cols))}")
    out = pd.DataFrame({"time_s": pd.to_numeric(log[time_column], errors="coerce"),
                        "value": pd.to_numeric(log[value_column], errors="coerce")}).dropna()
    if len(out) < 2:
        raise InputError(f"drive log {path.name} has fewer than two numeric rows; log at least start and end")
    if not np.all(np.diff(out["time_s"].to_numpy()) > 0):
        raise InputError(f"drive log {path.name}: times in {time_column!r} must strictly increase; sort the log")
    out.attrs["value_column"] = value_column
    return out.reset_index(drop=True)


def align_log(frames: pd.DataFrame, log: pd.DataFrame, *, offset_s: float = 0.0) -> pd.DataFrame:
    """Add a ``drive`` column to a copy of ``frames``: the log interpolated at the frame times.

    The log's time axis is shifted by ``offset_s`` (log time + offset = frame time).
    Frames outside the log's span get NaN. A log that does not overlap the
    recording at all is rejected.

    Raises
    ------
    InputError
        No overlap between the log and the frame times.
    """
    t_log = log["time_s"].to_numpy(dtype=float) + offset_s
    t = frames["time_s"].to_numpy(dtype=float)
    lo, hi = t_log[0], t_log[-1]
    if not (np.nanmax(t) >= lo and np.nanmin(t) <= hi) or not np.any((t >= lo) & (t <= hi)):
        raise InputError(f"the drive log covers {lo:.3f}-{hi:.3f} s but the recording covers "
                         f"{np.nanmin(t):.3f}-{np.nanmax(t):.3f} s (no overlap); fix --log-offset or the log")
    out = frames.copy()
    inside = (t >= lo) & (t <= hi)
    out["drive"] = np.where(inside, np.interp(t, t_log, log["value"].to_numpy(dtype=float)), np.nan)
    return out


def trusted_series(aligned: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """``(drive, fringes, fringes_sigma, n_excluded)`` for trusted frames inside the log span."""
    ok = aligned["trusted"].to_numpy(bool) & np.isfinite(aligned["drive"].to_numpy(float)) \
        & np.isfinite(aligned["fringes"].to_numpy(float))
    n_excluded = int(len(aligned) - ok.sum())
    sub = aligned.loc[ok]
    if len(sub) < 3:
        raise InputError(f"only {len(sub)} trusted frames overlap the drive log; at least 3 are needed to fit")
    return (sub["drive"].to_numpy(float), sub["fringes"].to_numpy(float),
            sub["fringes_sigma"].to_numpy(float), n_excluded)


def weighted_line_fit(x, y, sigma=None) -> LineFit:
    """Weighted least-squares line through (x, y) with 1-sigma ``sigma`` on y.

    Missing, zero or non-finite sigmas fall back to an unweighted fit whose
    parameter sigmas come from the residual scatter.

    Raises
    ------
    InputError
        Fewer than 3 points, or no spread in x.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = len(x)
    if n < 3:
        raise InputError(f"a line fit needs at least 3 points, got {n}; record more trusted frames")
    if np.ptp(x) == 0:
        raise InputError("the driven quantity does not change over the trusted frames; check --log-column")
    weighted = sigma is not None and np.all(np.isfinite(sigma)) and np.all(np.asarray(sigma) > 0)
    w = 1.0 / np.asarray(sigma, dtype=float) ** 2 if weighted else np.ones(n)
    xm = float(np.sum(w * x) / np.sum(w))
    dx = x - xm
    sxx = float(np.sum(w * dx * dx))
    slope = float(np.sum(w * dx * y) / sxx)
    ym = float(np.sum(w * y) / np.sum(w))
    intercept_c = ym  # intercept at x = xm
    resid = y - (intercept_c + slope * dx)
    chi2 = float(np.sum(w * resid**2))
    dof = max(n - 2, 1)
    chi2_red = chi2 / dof
    scale = max(1.0, chi2_red) if weighted else chi2_red
    var_slope = scale / sxx
    var_c = scale / float(np.sum(w))
    intercept = intercept_c - slope * xm
    var_intercept = var_c + xm * xm * var_slope
    cov_ab = -xm * var_slope
    return LineFit(slope, intercept, math.sqrt(var_slope), math.sqrt(var_intercept),
                   ((var_intercept, cov_ab), (cov_ab, var_slope)), chi2_red, n, resid, xm)
