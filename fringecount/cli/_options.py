"""Options shared by ``count``, ``roi`` and ``batch``: the clip, its timing and the ROI.

``roi`` and ``count`` accept exactly the same ROI options, so a user tunes the
region with ``roi`` and then passes the same options to ``count``.
"""

from __future__ import annotations

import argparse

from ..errors import SettingsError
from ..settings import CHANNELS, GEOMETRIES, CountSettings

__all__ = ["add_clip_arguments", "add_roi_arguments", "add_gap_arguments", "settings_from_args"]


def _numbers(text: str, n: int, what: str, example: str, cast=float) -> tuple:
    parts = [p for p in text.replace(" ", "").split(",") if p != ""]
    try:
        values = tuple(cast(p) for p in parts)
    except ValueError:
        values = ()
    if len(values) != n:
        raise SettingsError(f"{what} must be {n} comma-separated numbers, got {text!r}; e.g. {example}")
    return values


def _frame_range(text: str) -> tuple[int, int | None, int]:
    parts = text.split(":")
    if not 1 <= len(parts) <= 3:
        raise SettingsError(f"--frames must be FIRST[:LAST[:STEP]], got {text!r}; e.g. --frames 100:900:2")
    try:
        first = int(parts[0]) if parts[0] else 0
        last = int(parts[1]) if len(parts) > 1 and parts[1] else None
        step = int(parts[2]) if len(parts) > 2 and parts[2] else 1
    except ValueError:
        raise SettingsError(f"--frames must be whole numbers FIRST[:LAST[:STEP]], got {text!r}") from None
    return first, last, step


def add_clip_arguments(parser: argparse.ArgumentParser) -> None:
    """Timing and channel options for reading a clip."""
    g = parser.add_argument_group("recording")
    g.add_argument("--fps", type=float, default=None,
                   help="frame rate in frames/s (overrides the file; required for image folders without timing)")
    g.add_argument("--channel", choices=CHANNELS, default="auto",
                   help="colour channel carrying the fringes (default: the one with most fringe contrast)")
    g.add_argument("--frames", metavar="FIRST[:LAST[:STEP]]", default=None,
                   help="frame range, 0-based and LAST inclusive, with an optional stride")


def add_roi_arguments(parser: argparse.ArgumentParser) -> None:
    """Region-of-interest options (identical for ``roi`` and ``count``)."""
    g = parser.add_argument_group("region of interest")
    g.add_argument("--center", metavar="X,Y", default=None,
                   help="ring centre in pixels (x = column, y = row); default: found from the data")
    g.add_argument("--inner", metavar="PX", type=float, default=0.0,
                   help="inner radius of the analysed annulus in pixels (default 0)")
    g.add_argument("--outer", metavar="PX", type=float, default=None,
                   help="outer radius of the analysed annulus in pixels (default: as far as the frame allows)")
    g.add_argument("--crop", metavar="X0,Y0,X1,Y1", default=None,
                   help="analyse only this rectangle of the frame (pixels, X1/Y1 exclusive)")
    g.add_argument("--saturation", metavar="LEVEL", type=float, default=None,
                   help="pixel value treated as saturated and masked (default: top of the sample type)")
    g.add_argument("--geometry", choices=GEOMETRIES, default="auto",
                   help="rings (equal inclination) or straight fringes (tilted mirror); default: detect")
    g.add_argument("--fixed-center", action="store_true",
                   help="keep one centre for the whole clip instead of following a drift")


def add_gap_arguments(parser: argparse.ArgumentParser) -> None:
    """Options for untrusted intervals and their bridging (``count`` and ``batch``)."""
    g = parser.add_argument_group("gaps and bridging")
    g.add_argument("--wavelengths", metavar="LOG.csv", default=None,
                   help="wavemeter log (columns time_s, wavelength_nm; vacuum) to bridge mode hops")
    g.add_argument("--log-offset", metavar="SECONDS", type=float, default=0.0,
                   help="added to the log's times to put them on the clip's clock")
    g.add_argument("--air-wavelengths", action="store_true", help="the log holds air wavelengths")
    g.add_argument("--hop-range", metavar="FRINGES", type=float, default=6.0,
                   help="without a log: largest whole-fringe jump a mode hop may hide (default 6)")
    g.add_argument("--min-visibility", type=float, default=None,
                   help="visibility below which a frame is not trusted (default: from the clip)")
    g.add_argument("--max-step", metavar="FRINGES", type=float, default=0.35,
                   help="largest frame-to-frame step followed, in fringes (default 0.35; 0.5 is the aliasing limit)")


def settings_from_args(args: argparse.Namespace, **more) -> CountSettings:
    """Build :class:`CountSettings` from parsed clip and ROI options (plus ``more``)."""
    kw: dict = {}
    if getattr(args, "fps", None) is not None:
        kw["fps"] = args.fps
    kw["channel"] = getattr(args, "channel", "auto")
    if getattr(args, "frames", None):
        kw["first_frame"], kw["last_frame"], kw["step"] = _frame_range(args.frames)
    if getattr(args, "center", None):
        kw["center"] = _numbers(args.center, 2, "--center", "--center 320.5,240")
    kw["inner_radius_px"] = getattr(args, "inner", 0.0) or 0.0
    kw["outer_radius_px"] = getattr(args, "outer", None)
    if getattr(args, "crop", None):
        kw["crop"] = _numbers(args.crop, 4, "--crop", "--crop 100,50,540,430", cast=int)
    kw["saturation_level"] = getattr(args, "saturation", None)
    kw["geometry"] = getattr(args, "geometry", "auto")
    kw["track_center"] = not getattr(args, "fixed_center", False)
    gap_options = {"wavelengths": "wavelength_log", "log_offset": "log_offset_s",
                   "air_wavelengths": "log_air_wavelengths", "hop_range": "hop_range_fringes",
                   "min_visibility": "min_visibility", "max_step": "max_step_fringes"}
    for option, field_name in gap_options.items():
        if hasattr(args, option):
            kw[field_name] = getattr(args, option)
    kw.update(more)
    return CountSettings(**kw)
