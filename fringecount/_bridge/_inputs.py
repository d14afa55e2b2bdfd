"""Checking the track, gap and wavelength-log tables and cutting the track into stretches."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError

__all__ = [
    "BridgeInputError",
    "WavelengthLogError",
    "Stretch",
    "TRACK_COLUMNS",
    "GAP_COLUMNS",
    "LOG_COLUMNS",
    "check_track",
    "check_gaps",
    "check_log",
    "read_log_csv",
    "TrackArrays",
    "GapSpec",
    "stretches_from_track",
    "frame_time_s",
    "gap_frame_count",
]

TRACK_COLUMNS = ("frame", "time_s", "segment", "fringes", "fringes_sigma")
GAP_COLUMNS = ("first_frame", "last_frame", "reason", "segment_before", "segment_after")
LOG_COLUMNS = ("time_s", "wavelength_nm")

#: Plausible vacuum/air wavelengths in nm (deep UV to far IR); outside this the unit is wrong.
WAVELENGTH_RANGE_NM = (150.0, 20000.0)

#: Floor on a per-frame phase sigma (fringes), so that weights stay finite.
MIN_FRINGES_SIGMA = 1e-6


class BridgeInputError(InputError):
    """The track or gap table handed to the bridge is not usable."""


class WavelengthLogError(InputError):
    """A wavemeter log that is missing, unreadable or does not fit the recording."""


@dataclass(frozen=True)
class Stretch:
    """One run of consecutive trusted frames (a track segment).

    Attributes
    ----------
    segment : int
        Segment id from the track.
    frame : (n,) ndarray of int
        Original frame numbers, increasing.
    time_s : (n,) ndarray
        Frame times in s.
    fringes : (n,) ndarray
        Unwrapped count within the stretch, in fringes.
    sigma : (n,) ndarray
        1-sigma noise of ``fringes``, in fringes.
    """

    segment: int
    frame: np.ndarray
    time_s: np.ndarray
    fringes: np.ndarray
    sigma: np.ndarray

    @property
    def n(self) -> int:
        return int(self.frame.size)


def _numeric(table: pd.DataFrame, column: str, what: str, error: type[InputError]) -> np.ndarray:
    raw = table[column]
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    bad = np.isnan(values) & ~raw.isna().to_numpy()
    if bad.any():
        raise error(f"{what} column {column!r} holds a non-numeric value {raw[bad].iloc[0]!r}; "
                    "fix the table so it holds numbers")
    return values


def _require_columns(table, columns, what: str, error: type[InputError]) -> None:
    if not isinstance(table, pd.DataFrame):
        raise error(f"{what} must be a pandas DataFrame, got {type(table).__name__}; pass the table itself")
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise error(f"{what} lacks column(s) {', '.join(missing)}; it needs {', '.join(columns)}")


@dataclass(frozen=True)
class TrackArrays:
    """A checked track as arrays sorted by frame (see :func:`check_track`)."""

    frame: np.ndarray
    time_s: np.ndarray
    segment: np.ndarray
    fringes: np.ndarray
    sigma: np.ndarray


@dataclass(frozen=True)
class GapSpec:
    """One checked row of the gap table."""

    first_frame: int
    last_frame: int
    reason: str
    segment_before: int
    segment_after: int


def check_track(track: pd.DataFrame) -> TrackArrays:
    """Return the track as numeric arrays sorted by frame, or raise BridgeInputError."""
    _require_columns(track, TRACK_COLUMNS, "track table", BridgeInputError)
    if len(track) == 0:
        raise BridgeInputError("track table is empty; analyse at least one frame before bridging gaps")
    cols = {c: _numeric(track, c, "track table", BridgeInputError) for c in TRACK_COLUMNS}
    for c in ("frame", "time_s", "segment"):
        if not np.isfinite(cols[c]).all():
            raise BridgeInputError(f"track table column {c!r} has missing or infinite values; every row needs one")
    if not (np.all(cols["frame"] == np.round(cols["frame"])) and np.all(cols["segment"] == np.round(cols["segment"]))):
        raise BridgeInputError("track table columns 'frame' and 'segment' must hold whole numbers")
    order = np.argsort(cols["frame"], kind="stable")
    frame = cols["frame"][order].astype(np.int64)
    time_s = cols["time_s"][order]
    segment = cols["segment"][order].astype(np.int64)
    fringes = cols["fringes"][order]
    sigma = cols["fringes_sigma"][order]
    if np.any(np.diff(frame) == 0):
        dup = int(frame[1:][np.diff(frame) == 0][0])
        raise BridgeInputError(f"track table lists frame {dup} twice; keep one row per analysed frame")
    if np.any(np.diff(time_s) <= 0):
        raise BridgeInputError("track table times must increase with frame number; check time_s (or the fps)")
    if np.any(segment < -1):
        raise BridgeInputError("track table segment ids must be >= 0 for trusted frames and -1 inside gaps")
    trusted = segment >= 0
    for name, values in (("fringes", fringes), ("fringes_sigma", sigma)):
        if not np.isfinite(values[trusted]).all():
            raise BridgeInputError(f"track table column {name!r} must be finite on every trusted frame "
                                   "(segment >= 0)")
    if np.any(sigma[trusted] < 0):
        raise BridgeInputError("track table column 'fringes_sigma' must be >= 0 fringes")
    return TrackArrays(frame, time_s, segment, fringes, sigma)


def check_gaps(gaps: pd.DataFrame, segments: set[int]) -> list[GapSpec]:
    """Return the gap rows (same order) as :class:`GapSpec`, or raise BridgeInputError."""
    _require_columns(gaps, GAP_COLUMNS, "gap table", BridgeInputError)
    ints = {}
    for c in ("first_frame", "last_frame", "segment_before", "segment_after"):
        values = _numeric(gaps, c, "gap table", BridgeInputError)
        if not (np.isfinite(values).all() and np.all(values == np.round(values))):
            raise BridgeInputError(f"gap table column {c!r} must hold whole numbers on every row")
        ints[c] = values.astype(np.int64).tolist()
    out = []
    for i, reason in enumerate(gaps["reason"].astype(str).tolist()):
        row = GapSpec(ints["first_frame"][i], ints["last_frame"][i], reason, ints["segment_before"][i],
                      ints["segment_after"][i])
        where = f"gap at frames {row.first_frame}..{row.last_frame}"
        if row.last_frame < row.first_frame:
            raise BridgeInputError(f"{where} ends before it starts; last_frame is inclusive and must be "
                                   ">= first_frame")
        for name, s in (("segment_before", row.segment_before), ("segment_after", row.segment_after)):
            if s != -1 and s not in segments:
                raise BridgeInputError(f"{where} names {name}={s}, which is not a segment of the track; "
                                       "use -1 at the clip start/end")
        if row.segment_before != -1 and row.segment_before == row.segment_after:
            raise BridgeInputError(f"{where} has the same segment on both sides; a gap must separate two "
                                   "segments")
        out.append(row)
    return out


def stretches_from_track(track: TrackArrays) -> dict[int, Stretch]:
    """Cut a checked track into its trusted stretches, keyed by segment id."""
    out: dict[int, Stretch] = {}
    for seg in np.unique(track.segment[track.segment >= 0]):
        m = track.segment == seg
        sigma = np.maximum(track.sigma[m], MIN_FRINGES_SIGMA)
        out[int(seg)] = Stretch(int(seg), track.frame[m], track.time_s[m], track.fringes[m], sigma)
    return out


def frame_time_s(track: TrackArrays, frame: int, fallback: str) -> float:
    """Time (s) of ``frame`` in the track; the clip's first/last time when the frame is absent."""
    i = int(np.searchsorted(track.frame, frame))
    if i < track.frame.size and track.frame[i] == frame:
        return float(track.time_s[i])
    return float(track.time_s[0] if fallback == "first" else track.time_s[-1])


def gap_frame_count(track: TrackArrays, first: int, last: int) -> int:
    """Number of analysed frames inside a gap (frame numbers when none were analysed)."""
    inside = int(np.searchsorted(track.frame, last, side="right") - np.searchsorted(track.frame, first))
    return inside if inside > 0 else last - first + 1


def check_log(log: pd.DataFrame, source: str = "wavelength log") -> pd.DataFrame:
    """Validate a wavemeter log table; return ``time_s, wavelength_nm[, wavelength_sigma_nm]`` as floats."""
    _require_columns(log, LOG_COLUMNS, source, WavelengthLogError)
    if len(log) == 0:
        raise WavelengthLogError(f"{source} has no readings; log the wavelength while recording")
    out = pd.DataFrame({c: _numeric(log, c, source, WavelengthLogError) for c in LOG_COLUMNS})
    extra = "wavelength_sigma_nm" in log.columns
    if extra:
        out["wavelength_sigma_nm"] = _numeric(log, "wavelength_sigma_nm", source, WavelengthLogError)
    if not np.isfinite(out.to_numpy()).all():
        raise WavelengthLogError(f"{source} has empty or non-finite values; every reading needs time_s and "
                                 "wavelength_nm")
    t = out["time_s"].to_numpy()
    if np.any(np.diff(t) <= 0):
        i = int(np.argmax(np.diff(t) <= 0))
        raise WavelengthLogError(f"{source} times are not strictly increasing (row {i + 1}: {t[i]} then "
                                 f"{t[i + 1]} s); sort the log by time_s and drop repeated readings")
    lam = out["wavelength_nm"].to_numpy()
    lo, hi = WAVELENGTH_RANGE_NM
    if np.any(lam < lo) or np.any(lam > hi):
        bad = float(lam[(lam < lo) | (lam > hi)][0])
        raise WavelengthLogError(f"{source} wavelength {bad} is not a wavelength in nm ({lo:g}..{hi:g}); "
                                 "convert the column to nanometres")
    if extra and np.any(out["wavelength_sigma_nm"].to_numpy() <= 0):
        raise WavelengthLogError(f"{source} column wavelength_sigma_nm must be > 0 nm; drop it to let the "
                                 "noise be estimated from the log")
    return out


def read_log_csv(path) -> pd.DataFrame:
    """Read and validate a wavemeter CSV (``time_s``, ``wavelength_nm``)."""
    p = Path(path)
    if not p.is_file():
        raise WavelengthLogError(f"wavelength log {str(p)!r} not found; pass the path of a CSV with columns "
                                 "time_s, wavelength_nm")
    try:
        table = pd.read_csv(p, comment="#", skipinitialspace=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise WavelengthLogError(f"wavelength log {p.name!r} is not a readable CSV ({first}); save it as "
                                 "comma-separated text with a header time_s,wavelength_nm") from None
    table.columns = [str(c).strip() for c in table.columns]
    return check_log(table, source=f"wavelength log {p.name!r}")
