"""One-page visual report of a fringe count, drawn with matplotlib (Agg only).

The page shows, against time, the cumulative fringe count with every untrusted
interval ("gap") shaded by its reason, the fringe visibility, the normalised
fit residual and the drift of the ring centre; a strip of frames taken from
the gaps (when the recording is at hand); and the summary numbers.

Examples
--------
>>> from fringecount.results import read_result        # doctest: +SKIP
>>> from fringecount.report import write_report        # doctest: +SKIP
>>> write_report(read_result("results/run1"), "results/run1", force=True)  # doctest: +SKIP
[PosixPath('results/run1/report.png'), PosixPath('results/run1/report.html')]

Notes
-----
Figures are built on :class:`matplotlib.figure.Figure` with an Agg canvas and
never through ``pyplot``, so drawing a report changes no global state and needs
no display. Colours come from the Okabe–Ito palette (Okabe & Ito 2008, "Color
Universal Design"), which stays distinguishable for the common colour-vision
deficiencies; gap reasons additionally carry a hatch so the page also reads in
black-and-white print.
"""

from __future__ import annotations

import base64
import html
import io
import logging
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np

from . import __version__
from ._atomic import write_bytes_atomic, write_text_atomic
from .errors import InputError, ResultExistsError

__all__ = [
    "OKABE_ITO",
    "ReportFigure",
    "RoiFigure",
    "format_value_sigma",
    "reason_label",
    "reason_styles",
    "render_report",
    "render_roi",
    "write_report",
    "write_roi_image",
]

logger = logging.getLogger(__name__)

#: Okabe–Ito colour-universal palette (Okabe & Ito 2008), as sRGB hex.
OKABE_ITO: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky blue": "#56B4E9",
    "bluish green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish purple": "#CC79A7",
}

#: Colours for gap reasons, in the order reasons are met (black draws the data; blue, which draws the
#: count, is left for a seventh, unknown reason).
_REASON_COLOURS = ("orange", "vermillion", "reddish purple", "sky blue", "bluish green", "yellow", "blue")
#: Hatches for gap reasons, so that the shading survives greyscale print.
_REASON_HATCHES = ("///", "\\\\\\", "xxx", "...", "+++", "ooo", "---", "|||")
#: Fixed styles for the reasons fringecount.gaps gives (colour name, hatch).
_KNOWN_REASONS = {
    "low_visibility": ("orange", "///"),
    "dark": ("reddish purple", "\\\\\\"),
    "saturated": ("vermillion", "xxx"),
    "center_lost": ("bluish green", "..."),
    "too_fast": ("sky blue", "+++"),
    "unreadable": ("yellow", "ooo"),
}

#: Opacity of the gap tint on the count panel (the other panels use two thirds of it).
GAP_TINT = 0.28

#: Panel titles, in page order.
PANEL_SUMMARY = "Summary"
PANEL_COUNT = "Cumulative fringe count"
PANEL_VISIBILITY = "Fringe visibility"
PANEL_RESIDUAL = "Fit residual (rms, normalised)"
PANEL_DRIFT = "Centre drift"
PANEL_THUMBNAILS = "Frames from the untrusted intervals"

#: Page size: A4 portrait in inches, and the raster resolution.
_PAGE_IN = (8.27, 11.69)
_DPI = 150
#: At most this many gap thumbnails (the longest gaps are shown).
_MAX_THUMBNAILS = 8
#: Thumbnails are shrunk to about this many pixels on their long side.
_THUMB_PX = 160


@dataclass(frozen=True)
class ReportFigure:
    """A drawn report page.

    Attributes
    ----------
    figure : matplotlib.figure.Figure
        The page (Agg canvas attached).
    panels : tuple of str
        Titles of the panels drawn, in page order.
    thumbnail_frames : tuple of int
        Clip frame number of every thumbnail shown, in strip order (empty
        without a clip). With up to three gaps each gets three: the frame
        before it, its middle frame and the frame after it; with more, the
        middle frames of the longest eight.
    gap_labels : tuple of str
        Label of each gap as printed on the page (``G1``, ``G2``...), in table order.
    notes : tuple of str
        Anything the page had to leave out, in words (e.g. "clip not found").
    """

    figure: Any
    panels: tuple[str, ...]
    thumbnail_frames: tuple[int, ...]
    gap_labels: tuple[str, ...]
    notes: tuple[str, ...]


def format_value_sigma(value: float, sigma: float, *, unit: str = "", signed: bool = True) -> str:
    """Format ``value ± sigma`` with the uncertainty rounded to two significant digits.

    Parameters
    ----------
    value, sigma : float
        Value and its standard uncertainty (same unit).
    unit : str, optional
        Appended after a space when not empty.
    signed : bool, optional
        Print a ``+`` in front of positive values.

    Returns
    -------
    str
        e.g. ``"+16.14 ± 0.05 fringes"``.

    Notes
    -----
    The uncertainty keeps at most two significant digits and the value is rounded
    to the same decimal place (JCGM 100:2008, GUM, 7.2.6). A missing or zero
    uncertainty prints the value with three decimals.
    """
    suffix = f" {unit}" if unit else ""
    if value is None or not math.isfinite(value):
        return f"n/a{suffix}"
    sign = "+" if signed else ""
    if sigma is None or not math.isfinite(sigma) or sigma <= 0:
        return f"{value:{sign}.3f}{suffix}"
    decimals = max(0, 1 - int(math.floor(math.log10(sigma))))
    return f"{value:{sign}.{decimals}f} ± {sigma:.{decimals}f}{suffix}"


def reason_styles(reasons: Iterable[str]) -> dict[str, tuple[str, str]]:
    """Colour (hex) and hatch for each gap reason.

    Parameters
    ----------
    reasons : iterable of str
        Reasons as they appear in the gap table (repeats allowed).

    Returns
    -------
    dict
        ``reason -> (colour, hatch)``. The reasons of :mod:`fringecount.gaps`
        keep one style in every report (``saturated`` is vermillion, as the
        saturated pixels of the ROI picture); other reasons take the unused
        Okabe–Ito colours in order of appearance. Six reasons get six colours;
        beyond that colours repeat with a different hatch.
    """
    reasons = list(dict.fromkeys(reasons))
    reserved = {_KNOWN_REASONS[r][0] for r in reasons if r in _KNOWN_REASONS}
    reserved_hatches = {_KNOWN_REASONS[r][1] for r in reasons if r in _KNOWN_REASONS}
    styles: dict[str, tuple[str, str]] = {}
    used_colours: list[str] = []
    for reason in reasons:
        colour_name, hatch = _KNOWN_REASONS.get(reason, (None, None))
        if colour_name is None or colour_name in used_colours:
            # colours no known reason here needs come first, then any unused one
            free = ([c for c in _REASON_COLOURS if c not in used_colours and c not in reserved]
                    + [c for c in _REASON_COLOURS if c not in used_colours and c in reserved])
            colour_name = free[0] if free else _REASON_COLOURS[len(styles) % len(_REASON_COLOURS)]
        used_hatches = [h for _, h in styles.values()]
        if hatch is None or hatch in used_hatches:
            free_hatches = ([h for h in _REASON_HATCHES if h not in used_hatches and h not in reserved_hatches]
                            + [h for h in _REASON_HATCHES if h not in used_hatches and h in reserved_hatches])
            hatch = free_hatches[0] if free_hatches else _REASON_HATCHES[len(styles) % len(_REASON_HATCHES)]
        used_colours.append(colour_name)
        styles[reason] = (OKABE_ITO[colour_name], hatch)
    return styles


def reason_label(reason: str) -> str:
    """A gap reason as words (``low_visibility`` -> ``low visibility``)."""
    return str(reason).replace("_", " ")


# --------------------------------------------------------------------------- helpers


def _column(table, name: str, default: float = np.nan) -> np.ndarray:
    """Column ``name`` as a float array, or ``default`` everywhere when absent."""
    if name in table.columns:
        return np.asarray(table[name], dtype=float)
    return np.full(len(table), default, dtype=float)


def _frame_period_s(frames, summary: dict) -> float:
    """Seconds per frame, from the summary's fps or the median time step (NaN if unknown)."""
    fps = summary.get("fps")
    if isinstance(fps, (int, float)) and math.isfinite(fps) and fps > 0:
        return 1.0 / float(fps)
    t = _column(frames, "time_s")
    if t.size > 1:
        dt = np.diff(t[np.isfinite(t)])
        dt = dt[dt > 0]
        if dt.size:
            return float(np.median(dt))
    return float("nan")


def _gap_spans(gaps, period_s: float) -> list[tuple[float, float]]:
    """(left, right) time of each gap, widened by half a frame on each side."""
    half = 0.5 * period_s if math.isfinite(period_s) else 0.0
    start = _column(gaps, "start_s")
    stop = _column(gaps, "stop_s")
    return [(a - half, b + half) for a, b in zip(start, stop)]


def _shade_gaps(ax, spans, reasons, styles, *, alpha: float) -> None:
    for (left, right), reason in zip(spans, reasons):
        if not (math.isfinite(left) and math.isfinite(right)):
            continue
        colour, hatch = styles[reason]
        ax.axvspan(left, right, facecolor=colour, alpha=alpha, edgecolor="none", zorder=0)
        # the hatch on its own, opaque-ish, so it survives greyscale print
        ax.axvspan(left, right, facecolor="none", edgecolor=colour, hatch=hatch,
                   linewidth=0.0, alpha=0.9, zorder=0.5)


def _style_axes(ax, title: str) -> None:
    ax.set_title(title, loc="left", fontsize=10, fontweight="bold", pad=4)
    ax.grid(True, color="#d0d0d0", linewidth=0.5)
    ax.tick_params(labelsize=8)
    ax.ticklabel_format(axis="y", style="sci", scilimits=(-3, 4), useMathText=True)
    ax.yaxis.get_offset_text().set_fontsize(7)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _gaps_table(result):
    gaps = getattr(result, "gaps", None)
    if gaps is None:
        import pandas as pd

        return pd.DataFrame(columns=["first_frame", "last_frame", "start_s", "stop_s", "reason",
                                     "fringes_across", "fringes_across_sigma", "method", "ambiguous"])
    return gaps


def _is_true(value) -> bool:
    try:
        return bool(value) and not (isinstance(value, float) and math.isnan(value))
    except (TypeError, ValueError):
        return False


def _summary_lines(result, labels: Sequence[str]) -> tuple[list[str], list[str]]:
    """Two columns of text for the summary panel."""
    summary = dict(getattr(result, "summary", {}) or {})
    frames = result.frames
    gaps = _gaps_table(result)
    total = summary.get("total_fringes")
    total_sigma = summary.get("total_fringes_sigma")
    left: list[str] = []
    left.append("Total count   " + format_value_sigma(
        float(total) if total is not None else float("nan"),
        float(total_sigma) if total_sigma is not None else float("nan"), unit="fringes"))
    n_frames = summary.get("frames", len(frames))
    fps = summary.get("fps")
    t = _column(frames, "time_s")
    duration = float(np.nanmax(t) - np.nanmin(t)) if np.isfinite(t).any() else float("nan")
    fps_text = f" at {fps:g} frames/s" if isinstance(fps, (int, float)) and math.isfinite(fps) else ""
    dur_text = f", {duration:.2f} s" if math.isfinite(duration) else ""
    left.append(f"Frames        {n_frames}{fps_text}{dur_text}")
    trusted = np.asarray(frames["trusted"], dtype=bool) if "trusted" in frames.columns else None
    if trusted is not None and trusted.size:
        left.append(f"Trusted       {trusted.mean():.1%} of frames")
    geometry = summary.get("geometry")
    center = summary.get("center")
    geo = str(geometry) if geometry else "n/a"
    if isinstance(center, dict):
        cx, cy = center.get("x"), center.get("y")
    elif isinstance(center, (list, tuple)) and len(center) >= 2:
        cx, cy = center[0], center[1]
    else:
        cx = cy = None
    if isinstance(cx, (int, float)) and isinstance(cy, (int, float)):
        geo += f", centre x = {cx:.2f} px, y = {cy:.2f} px"
    left.append(f"Geometry      {geo}")
    vis = _column(frames, "visibility")
    if np.isfinite(vis).any():
        left.append(f"Visibility    median {np.nanmedian(vis):.2f}, "
                    f"range {np.nanmin(vis):.2f}–{np.nanmax(vis):.2f}")

    right: list[str] = []
    n_gaps = len(gaps)
    right.append(f"Untrusted   {n_gaps} interval{'s' if n_gaps != 1 else ''}")
    if n_gaps:
        counts: dict[str, int] = {}
        for reason in gaps["reason"].astype(str):
            counts[reason] = counts.get(reason, 0) + 1
        items = list(counts.items())
        items.sort(key=lambda item: -item[1])
        shown = items if len(items) <= 2 else items[:1]
        for reason, n in shown:
            right.append(f"  {n} × {reason_label(reason)}")
        if len(items) > len(shown):
            right.append(f"  {sum(n for _, n in items[1:])} × {len(items) - 1} other reasons")
    if n_gaps and "method" in gaps.columns:
        methods: dict[str, int] = {}
        for method in gaps["method"].fillna("").astype(str):
            methods[method or "none"] = methods.get(method or "none", 0) + 1
        right.append("Bridged by  " + ", ".join(f"{n} × {reason_label(m)}" for m, n in methods.items()))
    ambiguous = [lab for lab, a in zip(labels, gaps.get("ambiguous", [False] * n_gaps)) if _is_true(a)]
    if ambiguous:
        listed = ", ".join(ambiguous[:3]) + (", ..." if len(ambiguous) > 3 else "")
        right.append(f"Ambiguous   {len(ambiguous)} ({listed}): whole")
        right.append("            fringes across not certain")
    else:
        right.append("Ambiguous   none")
    clip = summary.get("clip") or summary.get("clip_path") or ""
    if clip:
        right.append(f"Recording   {Path(str(clip)).name}")
    left.append(f"Software      fringecount {summary.get('version', __version__)}")
    return left, right


def _scale_to_trusted(ax, values: np.ndarray, trusted: np.ndarray) -> None:
    """Scale the y axis to the trusted frames; say so when untrusted ones run off it."""
    good = values[trusted & np.isfinite(values)]
    allv = values[np.isfinite(values)]
    if good.size < 2 or allv.size == 0:
        return
    lo, hi = float(good.min()), float(good.max())
    pad = 0.15 * (hi - lo) if hi > lo else max(abs(hi), 1e-12) * 0.5
    lo, hi = lo - pad, hi + pad
    if allv.min() < lo or allv.max() > hi:
        ax.set_ylim(lo, hi)
        ax.text(1.0, 1.02, "scaled to the trusted frames; untrusted ones run off the scale",
                transform=ax.transAxes, ha="right", va="bottom", fontsize=7)


def _cumulative_sigma(frames, gaps) -> np.ndarray:
    """1-sigma of the count at each frame relative to the first: frame noise and the gaps so far.

    ``sqrt(fringes_sigma**2 + sum of fringes_across_sigma**2 over the gaps that start at
    or before the frame)``; a gap counts in full from its first frame on. Gaps are
    taken as independent, as the total's sigma does.
    """
    own = np.nan_to_num(_column(frames, "fringes_sigma", default=0.0), nan=0.0)
    var = own ** 2
    if len(gaps) and "frame" in frames.columns:
        numbers = np.asarray(frames["frame"], dtype=float)
        first = _column(gaps, "first_frame")
        gap_var = np.nan_to_num(_column(gaps, "fringes_across_sigma", default=0.0), nan=0.0) ** 2
        order = np.argsort(first, kind="stable")
        so_far = np.r_[0.0, np.cumsum(gap_var[order])]
        var = var + so_far[np.searchsorted(first[order], numbers, side="right")]
    return np.sqrt(var)


def _thumbnail_choice(gaps, limit: int) -> list[int]:
    """Row numbers of the gaps that get a thumbnail: the longest ``limit``, in time order."""
    n = len(gaps)
    if n == 0:
        return []
    length = _column(gaps, "last_frame") - _column(gaps, "first_frame")
    order = np.argsort(-np.nan_to_num(length, nan=-1), kind="stable")[:limit]
    return sorted(int(i) for i in order)


def _downsample(image: np.ndarray, target_px: int) -> tuple[np.ndarray, int]:
    """Block-average ``image`` so its long side is at most about ``target_px``; also the factor."""
    factor = max(1, int(math.ceil(max(image.shape[:2]) / target_px)))
    if factor == 1:
        return image.astype(float), 1
    rows = image.shape[0] // factor * factor
    cols = image.shape[1] // factor * factor
    im = image[:rows, :cols].astype(float)
    return im.reshape(rows // factor, factor, cols // factor, factor).mean(axis=(1, 3)), factor


def _first_float(table, key, column: str) -> float:
    """``table.loc[key, column]`` as one float (the first if the key repeats), NaN if absent."""
    if column not in table.columns:
        return float("nan")
    return float(np.asarray(table.loc[key, column], dtype=float).ravel()[0])


def _thumbnail_slots(gaps, chosen: Sequence[int], frames) -> list[tuple[int, str, int]]:
    """(gap row, role, frame) for the strip: before/middle/after for up to three gaps, else middles."""
    first = _column(gaps, "first_frame")
    last = _column(gaps, "last_frame")
    numbers = _column(frames, "frame") if "frame" in frames.columns else np.arange(len(frames), dtype=float)
    lo = np.nanmin(numbers) if numbers.size else 0
    hi = np.nanmax(numbers) if numbers.size else 0
    slots: list[tuple[int, str, int]] = []
    for row in chosen:
        a, b = int(first[row]), int(last[row])
        middle = (a + b) // 2
        if len(chosen) <= 3:
            if a - 1 >= lo:
                slots.append((row, "before", a - 1))
            slots.append((row, "middle", middle))
            if b + 1 <= hi:
                slots.append((row, "after", b + 1))
        else:
            slots.append((row, "middle", middle))
    return slots


def _value_range(image: np.ndarray, dtype) -> tuple[float, float]:
    """Display range: the full range of integer samples, else the data range."""
    if np.issubdtype(dtype, np.integer):
        return 0.0, float(np.iinfo(dtype).max)
    finite = image[np.isfinite(image)]
    if finite.size == 0:
        return 0.0, 1.0
    lo, hi = float(finite.min()), float(finite.max())
    return lo, hi if hi > lo else lo + 1.0


def _setting(settings, name: str, default=None):
    """A setting from a CountSettings, a plain dict, or None."""
    if isinstance(settings, dict):
        return settings.get(name, default)
    return getattr(settings, name, default)


def _read_thumbnails(clip, frame_numbers: Sequence[int], settings, fps) -> tuple[list, list[str]]:
    """Frames ``frame_numbers`` (original numbering) of ``clip``, None where unreadable, and notes."""
    from .frames import open_frames  # imported late: reading frames is optional here

    notes: list[str] = []
    kwargs: dict[str, Any] = {}
    channel = _setting(settings, "channel")
    if channel:
        kwargs["channel"] = channel
    fps = _setting(settings, "fps") or fps
    if isinstance(fps, (int, float)) and math.isfinite(fps) and fps > 0:
        kwargs["fps"] = float(fps)
    images: list = []
    try:
        source = open_frames(clip, **kwargs)
    except InputError as exc:
        return [None] * len(frame_numbers), [f"no thumbnails: {exc}"]
    with source:
        n = len(source)
        for k in frame_numbers:
            if not 0 <= k < n:
                images.append(None)
                notes.append(f"frame {k} is not in the recording ({n} frames)")
                continue
            try:
                frame = np.asarray(source[k])
            except InputError as exc:
                images.append(None)
                notes.append(f"frame {k} unreadable: {exc}")
                continue
            images.append(frame)
    return images, notes


def _draw_thumbnails(fig, cell, result, gaps, labels, reasons, styles, clip) -> tuple[list[int], list[str]]:
    """Fill the grid ``cell`` with frames from the gaps; return the frames shown and notes."""
    from matplotlib import patheffects

    frames = result.frames
    summary = dict(getattr(result, "summary", {}) or {})
    notes: list[str] = []
    chosen = _thumbnail_choice(gaps, _MAX_THUMBNAILS)
    shown: list[int] = []
    head = fig.add_subplot(cell)
    head.set_axis_off()
    head.set_title(PANEL_THUMBNAILS, loc="left", fontsize=10, fontweight="bold", pad=4)
    if not chosen:
        head.text(0.5, 0.5, "no untrusted intervals", ha="center", va="center", fontsize=9,
                  transform=head.transAxes)
    elif clip is None or not Path(clip).exists():
        why = "no recording given" if clip is None else f"recording {clip} not found"
        head.text(0.5, 0.5, f"{why}: pass the clip to see frames from each gap",
                  ha="center", va="center", fontsize=9, transform=head.transAxes)
        notes.append(f"no thumbnails: {why}")
    else:
        slots = _thumbnail_slots(gaps, chosen, frames)
        images, read_notes = _read_thumbnails(clip, [k for _, _, k in slots],
                                              getattr(result, "settings", None), summary.get("fps"))
        notes.extend(read_notes)
        by_frame = frames.set_index("frame") if "frame" in frames.columns else None
        strip = cell.subgridspec(2, len(slots), height_ratios=[0.4, 1.0], wspace=0.12, hspace=0.0)
        outline = [patheffects.withStroke(linewidth=2.6, foreground="black")]
        for slot, ((row, role, k), image) in enumerate(zip(slots, images)):
            ax = fig.add_subplot(strip[1, slot])
            ax.set_xticks([])
            ax.set_yticks([])
            colour, _ = styles[reasons[row]]
            inside = role == "middle"
            for spine in ax.spines.values():
                spine.set_edgecolor(colour if inside else "#888888")
                spine.set_linewidth(2.5 if inside else 0.8)
            ax.set_title(f"{labels[row]} {role}\nframe {k}", fontsize=7, pad=2)
            if image is None:
                ax.text(0.5, 0.5, "unreadable", ha="center", va="center", fontsize=7,
                        transform=ax.transAxes)
                continue
            grey = image if image.ndim == 2 else image.mean(axis=2)
            lo, hi = _value_range(grey, image.dtype)
            small, factor = _downsample(grey, _THUMB_PX)
            ax.imshow(small, cmap="gray", vmin=lo, vmax=hi, interpolation="nearest")
            if by_frame is not None and k in by_frame.index and summary.get("geometry") != "straight":
                x0 = _first_float(by_frame, k, "center_x")
                y0 = _first_float(by_frame, k, "center_y")
                if math.isfinite(x0) and math.isfinite(y0):
                    ax.plot([(x0 + 0.5) / factor - 0.5], [(y0 + 0.5) / factor - 0.5], marker="+",
                            color=OKABE_ITO["yellow"], markersize=7, markeredgewidth=1.2,
                            path_effects=outline)
            shown.append(k)
        if len(gaps) > len(chosen):
            notes.append(f"thumbnails of the {len(chosen)} longest of {len(gaps)} gaps")
            head.text(1.0, 1.02, f"the {len(chosen)} longest of {len(gaps)} gaps", ha="right",
                      va="bottom", fontsize=7, transform=head.transAxes)
        else:
            hint = "coloured border: inside the gap" + (
                "" if summary.get("geometry") == "straight" else "; + : centre found")
            head.text(1.0, 1.02, hint, ha="right",
                      va="bottom", fontsize=7, transform=head.transAxes)
    return shown, notes


# --------------------------------------------------------------------------- drawing


def render_report(result, *, clip: str | os.PathLike | None = None) -> ReportFigure:
    """Draw the one-page report of ``result``.

    Parameters
    ----------
    result : CountResult
        A count as returned by :func:`fringecount.pipeline.count` or
        :func:`fringecount.results.read_result`: ``frames`` (DataFrame with
        ``time_s``, ``fringes``, ``fringes_sigma``, ``visibility``, ``trusted``,
        ``residual``, ``center_x``, ``center_y``), ``gaps`` (DataFrame with
        ``first_frame``, ``last_frame``, ``start_s``, ``stop_s``, ``reason``,
        ``fringes_across``, ``fringes_across_sigma``, ``ambiguous``) and
        ``summary`` (dict).
    clip : path-like, optional
        The recording the result came from; frames from the gaps are shown (see
        :attr:`ReportFigure.thumbnail_frames`). Without it the strip says so.

    Returns
    -------
    ReportFigure
        The figure plus the panel titles and the frames shown.

    Raises
    ------
    InputError
        When ``result.frames`` lacks the columns the page plots.

    Notes
    -----
    Times are in seconds on the recording's clock. Each gap is shaded from half a
    frame before its first frame to half a frame after its last, so a one-frame
    gap is still visible. Centre drift is plotted relative to the median centre
    of the trusted frames, in pixels (x = column, y = row).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    frames = result.frames
    missing = [c for c in ("time_s", "fringes") if c not in frames.columns]
    if missing:
        raise InputError(f"result frames table lacks column(s) {', '.join(missing)}; "
                         "redo the count with this version of fringecount")
    summary = dict(getattr(result, "summary", {}) or {})
    gaps = _gaps_table(result)
    labels = tuple(f"G{i + 1}" for i in range(len(gaps)))
    reasons = [str(r) for r in gaps["reason"]] if len(gaps) else []
    styles = reason_styles(reasons)
    period = _frame_period_s(frames, summary)
    spans = _gap_spans(gaps, period)
    t = _column(frames, "time_s")
    trusted = (np.asarray(frames["trusted"], dtype=bool) if "trusted" in frames.columns
               else np.ones(len(frames), dtype=bool))

    fig = Figure(figsize=_PAGE_IN, dpi=_DPI, layout=None)
    FigureCanvasAgg(fig)
    grid = fig.add_gridspec(6, 1, height_ratios=[1.3, 3.0, 1.1, 1.1, 1.1, 1.6],
                            left=0.09, right=0.97, top=0.945, bottom=0.03, hspace=0.5)
    clip_name = summary.get("clip") or (str(clip) if clip else "")
    title = "fringecount report" + (f": {Path(str(clip_name)).name}" if clip_name else "")
    fig.suptitle(title, x=0.09, y=0.985, ha="left", fontsize=13, fontweight="bold")
    panels: list[str] = []
    notes: list[str] = []

    # ---- summary numbers
    ax_sum = fig.add_subplot(grid[0])
    ax_sum.set_axis_off()
    ax_sum.set_title(PANEL_SUMMARY, loc="left", fontsize=10, fontweight="bold", pad=4)
    left, right = _summary_lines(result, labels)
    ax_sum.text(0.0, 1.0, "\n".join(left), va="top", ha="left", family="monospace", fontsize=8,
                transform=ax_sum.transAxes, linespacing=1.4)
    ax_sum.text(0.56, 1.0, "\n".join(right), va="top", ha="left", family="monospace", fontsize=8,
                transform=ax_sum.transAxes, linespacing=1.4)
    panels.append(PANEL_SUMMARY)

    # ---- cumulative count
    ax_count = fig.add_subplot(grid[1])
    time_axes = [ax_count]
    _style_axes(ax_count, PANEL_COUNT)
    _shade_gaps(ax_count, spans, reasons, styles, alpha=GAP_TINT)
    fringes = _column(frames, "fringes")
    sigma = _cumulative_sigma(frames, gaps)
    blue = OKABE_ITO["blue"]
    band = np.isfinite(sigma) & np.isfinite(fringes)
    if band.any():
        ax_count.fill_between(t, fringes - sigma, fringes + sigma, where=band, color=blue,
                              alpha=0.25, linewidth=0, zorder=1)
    ax_count.plot(t, np.where(trusted, fringes, np.nan), color=blue, linewidth=1.4, zorder=3)
    if (~trusted).any():
        ax_count.plot(t, fringes, color=blue, linewidth=0.8, linestyle=":", zorder=2)
    ax_count.set_ylabel("fringes", fontsize=9)
    ylo, yhi = ax_count.get_ylim()
    ax_count.set_ylim(ylo, yhi + 0.06 * (yhi - ylo))  # headroom for the gap labels
    label_at = ax_count.get_xaxis_transform()
    for label, (a, b), amb in zip(labels, spans, gaps.get("ambiguous", [False] * len(gaps))):
        if math.isfinite(a) and math.isfinite(b) and len(labels) <= 24:
            ax_count.text(0.5 * (a + b), 0.985, label + ("?" if _is_true(amb) else ""),
                          transform=label_at, ha="center", va="top", fontsize=7,
                          bbox=dict(boxstyle="round,pad=0.15", facecolor="white", edgecolor="none",
                                    alpha=0.8))
    handles = [Line2D([], [], color=blue, linewidth=1.4, label="count (trusted frames)")]
    if band.any():
        handles.append(Patch(facecolor=blue, alpha=0.25, label="± 1 sigma (gaps so far)"))
    if (~trusted).any():
        handles.append(Line2D([], [], color=blue, linewidth=0.8, linestyle=":",
                              label="bridged across a gap"))
    for reason, (colour, hatch) in styles.items():
        handles.append(Patch(facecolor=colour, alpha=0.45, hatch=hatch, edgecolor=colour,
                             label=f"gap: {reason_label(reason)}"))
    # a sweep that counts up leaves the lower right empty, one that counts down the upper right
    finite = fringes[np.isfinite(fringes)]
    rising = finite.size < 2 or finite[-1] >= finite[0]
    ax_count.legend(handles=handles, loc="lower right" if rising else "upper right",
                    bbox_to_anchor=(1.0, 0.0 if rising else 0.92, 0.0, 0.0), fontsize=7,
                    frameon=True, framealpha=0.92, ncols=2 if len(handles) > 4 else 1)
    panels.append(PANEL_COUNT)

    # ---- visibility, residual, drift
    ax_vis = fig.add_subplot(grid[2], sharex=ax_count)
    time_axes.append(ax_vis)
    _style_axes(ax_vis, PANEL_VISIBILITY)
    _shade_gaps(ax_vis, spans, reasons, styles, alpha=GAP_TINT * 2 / 3)
    ax_vis.plot(t, _column(frames, "visibility"), color=blue, linewidth=1.0)
    threshold = summary.get("min_visibility")
    if threshold is None and isinstance(summary.get("visibility"), dict):
        threshold = summary["visibility"].get("floor", summary["visibility"].get("threshold"))
    if isinstance(threshold, (int, float)) and math.isfinite(threshold):
        ax_vis.axhline(threshold, color="black", linestyle="--", linewidth=0.8)
        ax_vis.text(1.0, threshold, f" trust limit {threshold:.2f}", transform=ax_vis.get_yaxis_transform(),
                    ha="right", va="bottom", fontsize=7)
    ax_vis.set_ylabel("visibility", fontsize=9)
    panels.append(PANEL_VISIBILITY)

    ax_res = fig.add_subplot(grid[3], sharex=ax_count)
    time_axes.append(ax_res)
    _style_axes(ax_res, PANEL_RESIDUAL)
    _shade_gaps(ax_res, spans, reasons, styles, alpha=GAP_TINT * 2 / 3)
    residual = _column(frames, "residual")
    ax_res.plot(t, residual, color=blue, linewidth=1.0)
    _scale_to_trusted(ax_res, residual, trusted)
    ax_res.set_ylabel("residual", fontsize=9)
    panels.append(PANEL_RESIDUAL)

    ax_drift = fig.add_subplot(grid[4], sharex=ax_count)
    time_axes.append(ax_drift)
    _style_axes(ax_drift, PANEL_DRIFT + " (px, from the median centre)")
    _shade_gaps(ax_drift, spans, reasons, styles, alpha=GAP_TINT * 2 / 3)
    cx, cy = _column(frames, "center_x"), _column(frames, "center_y")
    ref = trusted & np.isfinite(cx) & np.isfinite(cy)
    if summary.get("geometry") == "straight":
        ax_drift.text(0.5, 0.5, "straight fringes: no ring centre to follow", ha="center", va="center",
                      transform=ax_drift.transAxes, fontsize=8,
                      bbox=dict(facecolor="white", edgecolor="none", alpha=0.9, pad=2))
        ax_drift.set_yticks([])
    elif ref.any():
        ax_drift.plot(t, cx - np.median(cx[ref]), color=blue, linewidth=1.0, label="x (column)")
        ax_drift.plot(t, cy - np.median(cy[ref]), color="black", linewidth=1.0, linestyle="--",
                      label="y (row)")
        ax_drift.legend(loc="lower right", bbox_to_anchor=(1.0, 1.0), fontsize=7, ncols=2,
                        frameon=False, borderaxespad=0.0)
        drift = summary.get("center", {}).get("drift") if isinstance(summary.get("center"), dict) else None
        if isinstance(drift, dict) and drift.get("drift_accepted") is False:
            largest = drift.get("max_drift_px")
            extra = f" (largest drift seen {largest:.2f} px)" if isinstance(largest, (int, float)) else ""
            ax_drift.text(0.01, 0.06, "drift not significant: one centre for the whole clip" + extra,
                          transform=ax_drift.transAxes, fontsize=7, ha="left", va="bottom",
                          bbox=dict(facecolor="white", edgecolor="none", alpha=0.85, pad=1.5))
    else:
        ax_drift.text(0.5, 0.5, "no centre estimate in any trusted frame", ha="center", va="center",
                      transform=ax_drift.transAxes, fontsize=8)
        notes.append("no centre drift: no trusted frame has a centre")
    ax_drift.set_ylabel("Δ px", fontsize=9)
    ax_drift.set_xlabel("time (s)", fontsize=9)
    panels.append(PANEL_DRIFT)
    for ax in time_axes[:-1]:
        ax.tick_params(labelbottom=False)
    if np.isfinite(t).any():
        lo, hi = float(np.nanmin(t)), float(np.nanmax(t))
        pad = 0.5 * period if math.isfinite(period) else 0.0
        ax_count.set_xlim(lo - pad, hi + pad if hi > lo else lo + 1.0)

    # ---- thumbnails
    shown, strip_notes = _draw_thumbnails(fig, grid[5], result, gaps, labels, reasons, styles, clip)
    panels.append(PANEL_THUMBNAILS)
    notes.extend(strip_notes)
    for note in notes:
        logger.info("report: %s", note)
    return ReportFigure(figure=fig, panels=tuple(panels), thumbnail_frames=tuple(shown),
                        gap_labels=labels, notes=tuple(notes))


# --------------------------------------------------------------------------- writing


def _png_bytes(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI, metadata={"Software": f"fringecount {__version__}"})
    return buf.getvalue()


def _html_page(result, png: bytes, png_name: str, drawn: ReportFigure) -> str:
    """A self-contained page: the PNG inline plus the summary and gap tables as text."""
    summary = dict(getattr(result, "summary", {}) or {})
    gaps = _gaps_table(result)
    esc = html.escape
    rows = []
    for label, (_, g) in zip(drawn.gap_labels, gaps.iterrows()):
        across = format_value_sigma(float(g.get("fringes_across", np.nan)),
                                    float(g.get("fringes_across_sigma", np.nan)))
        rows.append(
            "<tr>" + "".join(f"<td>{esc(str(v))}</td>" for v in (
                label, int(g["first_frame"]), int(g["last_frame"]),
                f"{float(g['start_s']):.3f}", f"{float(g['stop_s']):.3f}", reason_label(g["reason"]), across,
                g.get("method", ""), "yes" if _is_true(g.get("ambiguous", False)) else "no")) + "</tr>")
    gap_notes = ""
    if "note" in gaps.columns:
        items = [f"<li><strong>{esc(label)}</strong>: {esc(str(n))}</li>"
                 for label, n in zip(drawn.gap_labels, gaps["note"]) if isinstance(n, str) and n.strip()]
        gap_notes = f"<ul class=\"notes\">{''.join(items)}</ul>" if items else ""
    clip = summary.get("clip") or ""
    recording = f"<p>Recording: <code>{esc(Path(str(clip)).name)}</code></p>" if clip else ""
    gap_table = ("<p>No untrusted intervals.</p>" if not rows else
                 "<table><thead><tr><th>gap</th><th>first frame</th><th>last frame</th><th>start (s)</th>"
                 "<th>stop (s)</th><th>reason</th><th>fringes across</th><th>method</th><th>ambiguous</th>"
                 "</tr></thead><tbody>" + "".join(rows) + "</tbody></table>")
    total = format_value_sigma(float(summary.get("total_fringes", np.nan) or np.nan),
                               float(summary.get("total_fringes_sigma", np.nan) or np.nan),
                               unit="fringes")
    data = base64.b64encode(png).decode("ascii")
    notes = "".join(f"<li>{esc(n)}</li>" for n in drawn.notes)
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>fringecount report: {esc(total)}</title>
<style>
body {{ font-family: sans-serif; max-width: 60rem; margin: 1.5rem auto; padding: 0 1rem; color: #111; }}
img {{ width: 100%; height: auto; border: 1px solid #ccc; }}
table {{ border-collapse: collapse; font-size: 0.9rem; }}
td, th {{ border: 1px solid #bbb; padding: 0.2rem 0.5rem; text-align: right; }}
th {{ background: #eee; }}
ul.notes {{ font-size: 0.9rem; }}
</style>
</head>
<body>
<h1>fringecount report</h1>
<p><strong>Total count: {esc(total)}</strong> over {esc(str(summary.get('frames', len(result.frames))))} frames
(fringecount {esc(str(summary.get('version', __version__)))}).</p>
{recording}
<h2>Untrusted intervals</h2>
{gap_table}
{gap_notes}
{f'<ul>{notes}</ul>' if notes else ''}
<h2>Page</h2>
<p><img src="data:image/png;base64,{data}" alt="Report page: cumulative fringe count, visibility, fit residual and centre drift against time, with the untrusted intervals shaded"></p>
<p>The same picture is saved as <code>{esc(png_name)}</code>.</p>
</body>
</html>
"""


def write_report(result, out: str | os.PathLike, *, clip: str | os.PathLike | None = None,
                 force: bool = False, html_page: bool | None = None) -> list[Path]:
    """Draw the report of ``result`` and write it atomically.

    Parameters
    ----------
    result : CountResult
        See :func:`render_report`.
    out : path-like
        A result folder (writes ``report.png`` and ``report.html`` in it) or a
        file name ending in ``.png``.
    clip : path-like, optional
        The recording, for frames from each gap; see :func:`render_report`.
    force : bool, optional
        Replace report files that already exist. Without it an existing report
        raises :class:`~fringecount.errors.ResultExistsError` and nothing is written.
    html_page : bool, optional
        Also write an HTML page that embeds the picture. Default: yes for a
        folder, no for a ``.png`` path (the page then goes next to it, ``.html``).

    Returns
    -------
    list of Path
        The files written, the PNG first.

    Raises
    ------
    ResultExistsError
        A report is already there and ``force`` is false.
    InputError
        ``out`` names a file that is not a ``.png``.
    """
    out = Path(out)
    if out.suffix.lower() == ".png":
        png_path = out
        if html_page is None:
            html_page = False
    elif out.suffix and not out.is_dir():
        raise InputError(f"report path {out} must be a folder or end in .png; "
                         "pass a result folder or e.g. report.png")
    else:
        png_path = out / "report.png"
        if html_page is None:
            html_page = True
    html_path = png_path.with_suffix(".html")
    targets = [png_path] + ([html_path] if html_page else [])
    if not force:
        existing = [p for p in targets if p.exists()]
        if existing:
            raise ResultExistsError(f"{existing[0]} already exists; pass --force to redraw it")
    drawn = render_report(result, clip=clip)
    png = _png_bytes(drawn.figure)
    written = [write_bytes_atomic(png_path, png)]
    if html_page:
        written.append(write_text_atomic(html_path, _html_page(result, png, png_path.name, drawn)))
    logger.info("report written: %s", ", ".join(str(p) for p in written))
    return written


# --------------------------------------------------------------------------- ROI picture

#: Panel titles of the ROI picture.
PANEL_ROI_FRAME = "Frame with region of interest"
PANEL_ROI_PROFILE = "Profile"


@dataclass(frozen=True)
class RoiFigure:
    """A drawn ROI picture.

    Attributes
    ----------
    figure : matplotlib.figure.Figure
        The picture (Agg canvas attached).
    panels : tuple of str
        Titles of the panels drawn (the frame, the profile inset).
    legend : tuple of str
        Legend entries, i.e. what is marked on the frame.
    """

    figure: Any
    panels: tuple[str, ...]
    legend: tuple[str, ...]


def _circle(ax, center, radius, **style) -> None:
    from matplotlib.patches import Circle

    if radius is None or not math.isfinite(radius) or radius <= 0:
        return
    ax.add_patch(Circle(center, radius, fill=False, **style))


def render_roi(inspection) -> RoiFigure:
    """Draw one frame with the found centre, the ROI annuli, masked and saturated pixels.

    Parameters
    ----------
    inspection : RoiInspection
        As returned by :func:`fringecount.pipeline.inspect_roi`: ``image``
        (M, N) ndarray, ``mask`` and ``saturated`` (M, N) bool, ``center``
        ``(x, y)`` px, ``roi`` (dict or tuple of ``inner``, ``outer``, ``crop``) in use, ``suggested``
        dict, ``radius_range_px``, ``profile_r_px`` and ``profile_values``.

    Returns
    -------
    RoiFigure

    Notes
    -----
    The profile panel sits under the frame (not over it) so that it hides no
    fringes. Pixel (row, col) is drawn centred on (x = col, y = row), so the origin is the
    centre of pixel (0, 0), as everywhere in fringecount. Pixels left out of the
    analysis are dimmed; saturated pixels are painted vermillion. Solid circles
    are the annulus in use, dashed ones the suggested annulus.
    """
    from matplotlib import patheffects
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch, Rectangle

    image = np.asarray(inspection.image)
    if image.ndim != 2:
        raise InputError(f"ROI picture needs a 2-D frame, got shape {image.shape}; pick a colour channel")
    rows, cols = image.shape
    lo, hi = _value_range(image.astype(float), image.dtype)
    # page in inches, top to bottom: title, frame, its x labels, profile, its x label, legend
    width_in = 7.0
    img_h_in = width_in * 0.86 * rows / cols
    prof_h_in, legend_in = 1.15, 0.55
    heights = (0.45, img_h_in, 0.6, prof_h_in, 0.45, legend_in)
    total_in = sum(heights)
    fig = Figure(figsize=(width_in, total_in), dpi=_DPI)
    FigureCanvasAgg(fig)
    img_bottom = (total_in - heights[0] - img_h_in) / total_in
    ax = fig.add_axes((0.07, img_bottom, 0.86, img_h_in / total_in))
    prof_box = (0.07, (heights[4] + legend_in) / total_in, 0.86, prof_h_in / total_in)
    ax.imshow(image, cmap="gray", vmin=lo, vmax=hi, interpolation="nearest")
    overlay = np.zeros((rows, cols, 4))
    mask = getattr(inspection, "mask", None)
    mask = np.ones((rows, cols), dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
    saturated = getattr(inspection, "saturated", None)
    saturated = np.zeros((rows, cols), dtype=bool) if saturated is None else np.asarray(saturated, dtype=bool)
    if mask.shape != (rows, cols) or saturated.shape != (rows, cols):
        raise InputError(f"ROI masks {mask.shape}/{saturated.shape} do not match the frame {(rows, cols)}; "
                         "this is a fringecount bug, please report it")
    overlay[~mask] = (0.0, 0.0, 0.0, 0.55)
    vermillion = np.array([0xD5, 0x5E, 0x00]) / 255
    overlay[saturated] = (*vermillion, 0.9)
    ax.imshow(overlay, interpolation="nearest")
    ax.set_xlim(-0.5, cols - 0.5)
    ax.set_ylim(rows - 0.5, -0.5)
    ax.tick_params(labelsize=7)
    ax.set_xlabel("x (column, px)", fontsize=8)
    ax.set_ylabel("y (row, px)", fontsize=8)

    cx, cy = (float(v) for v in inspection.center)
    geometry = getattr(inspection, "geometry", "")
    roi = getattr(inspection, "roi", None)
    if isinstance(roi, dict):
        inner, outer, crop = roi.get("inner"), roi.get("outer"), roi.get("crop")
    else:
        inner, outer, crop = (list(roi or ()) + [None, None, None])[:3]
    suggested = dict(inspection.suggested or {})
    sky, orange, green = OKABE_ITO["sky blue"], OKABE_ITO["orange"], OKABE_ITO["bluish green"]
    handles = []
    if math.isfinite(cx) and math.isfinite(cy):
        _circle(ax, (cx, cy), inner, edgecolor=sky, linewidth=1.6)
        _circle(ax, (cx, cy), outer, edgecolor=sky, linewidth=1.6)
        whole = (inner is None or inner <= 0) and outer is None
        handles.append(Line2D([], [], color=sky, linewidth=1.6,
                              label="annulus in use" + (" (whole frame)" if whole else "")))
        s_in, s_out = suggested.get("inner"), suggested.get("outer")
        if s_in is not None or s_out is not None:
            _circle(ax, (cx, cy), s_in, edgecolor=orange, linewidth=1.4, linestyle="--")
            _circle(ax, (cx, cy), s_out, edgecolor=orange, linewidth=1.4, linestyle="--")
            handles.append(Line2D([], [], color=orange, linewidth=1.4, linestyle="--",
                                  label="suggested annulus"))
        outline = [patheffects.withStroke(linewidth=3.2, foreground="black")]
        ax.plot([cx], [cy], marker="+", markersize=14, markeredgewidth=1.6, color=OKABE_ITO["yellow"],
                path_effects=outline)
        handles.append(Line2D([], [], marker="+", linestyle="none", markersize=10, markeredgewidth=1.6,
                              color=OKABE_ITO["yellow"], path_effects=outline,
                              label=f"{'reference point' if geometry == 'straight' else 'centre'} "
                                    f"x = {cx:.2f}, y = {cy:.2f} px"))
    for box, style, label in ((crop, "-", "crop in use"), (suggested.get("crop"), "--", "suggested crop")):
        if box is not None:
            x0, y0, x1, y1 = box
            ax.add_patch(Rectangle((x0 - 0.5, y0 - 0.5), x1 - x0, y1 - y0, fill=False,
                                   edgecolor=green, linewidth=1.4, linestyle=style))
            handles.append(Line2D([], [], color=green, linewidth=1.4, linestyle=style, label=label))
    handles.append(Patch(facecolor="black", alpha=0.55, label="not analysed (dimmed)"))
    handles.append(Patch(facecolor=OKABE_ITO["vermillion"], label=f"saturated ({saturated.sum()} px)"))
    legend = [h.get_label() for h in handles]
    fig.legend(handles=handles, loc="lower center", ncols=3, fontsize=7, frameon=False,
               bbox_to_anchor=(0.5, 0.0))
    frame_index = getattr(inspection, "frame_index", None)
    ax.set_title(f"{PANEL_ROI_FRAME}: frame {frame_index}, {geometry}", loc="left", fontsize=9,
                 fontweight="bold")
    panels = [PANEL_ROI_FRAME]

    r = np.asarray(getattr(inspection, "profile_r_px", []), dtype=float)
    values = np.asarray(getattr(inspection, "profile_values", []), dtype=float)
    if r.size and r.size == values.size:
        # the profile sits under the frame rather than over it, so it hides no fringes
        inset = fig.add_axes(prof_box)
        _style_axes(inset, "")
        inset.plot(r, values, color=OKABE_ITO["blue"], linewidth=1.0)
        usable = getattr(inspection, "radius_range_px", None)
        if usable is not None and all(v is not None and math.isfinite(v) for v in usable):
            inset.axvspan(usable[0], usable[1], color=OKABE_ITO["bluish green"], alpha=0.15, linewidth=0)
        for value in (inner, outer):
            if value is not None and math.isfinite(value) and value > 0:
                inset.axvline(value, color=sky, linewidth=1.2)
        for key in ("inner", "outer"):
            value = suggested.get(key)
            if value is not None and math.isfinite(value) and value > 0:
                inset.axvline(value, color=orange, linewidth=1.2, linestyle="--")
        what = "radial profile" if geometry != "straight" else "profile across the fringes"
        inset.set_title(f"{PANEL_ROI_PROFILE}: {what} (shaded: usable range; solid: in use; "
                        "dashed: suggested)", loc="left", fontsize=8, fontweight="bold", pad=3)
        inset.set_xlabel("r (px, from the centre)" if geometry != "straight" else "distance (px)",
                         fontsize=8, labelpad=1)
        inset.set_ylabel("mean value", fontsize=8)
        inset.tick_params(labelsize=7)
        panels.append(PANEL_ROI_PROFILE)
    return RoiFigure(figure=fig, panels=tuple(panels), legend=tuple(legend))


def write_roi_image(inspection, path: str | os.PathLike) -> Path:
    """Draw :func:`render_roi` and write it atomically as a PNG to ``path``.

    An existing file is replaced: the picture is a working view, redrawn each
    time the region is tuned.

    Raises
    ------
    InputError
        ``path`` does not end in ``.png``.
    """
    path = Path(path)
    if path.suffix.lower() != ".png":
        raise InputError(f"ROI picture {path} must end in .png; pass e.g. --image roi.png")
    drawn = render_roi(inspection)
    return write_bytes_atomic(path, _png_bytes(drawn.figure))
