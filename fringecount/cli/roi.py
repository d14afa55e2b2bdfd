"""``fringecount roi CLIP``: find the ring centre and tune the region of interest.

``roi`` accepts exactly the clip and ROI options of ``count``. Iterate ``roi``
until the region looks right, then pass the printed options to ``count``.

Examples
--------
::

    fringecount roi clip.avi
    fringecount roi clip.avi --image roi.png --frame 40
    fringecount roi clip.avi --inner 12 --outer 180 --image roi.png
    fringecount roi clip.avi --json
"""

from __future__ import annotations

import argparse
import json
import math
import shlex
from typing import Any

from . import add_output_arguments
from ._options import add_clip_arguments, add_roi_arguments, settings_from_args

__all__ = ["register", "run", "count_options", "inspection_to_dict"]


def register(subparsers) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "roi",
        help="find the ring centre, the usable radii and a suggested region of interest",
        description="Find the ring centre (sub-pixel), the usable radius range, the ring spacing, "
                    "the fringe visibility and the saturated fraction on one frame, and suggest a "
                    "region of interest as options to paste into 'fringecount count'. Accepts the "
                    "same clip and ROI options as 'count'.",
    )
    parser.add_argument("clip", metavar="CLIP", help="recording: video file, TIFF stack or image folder")
    parser.add_argument("--frame", metavar="N", type=int, default=None,
                        help="frame to inspect, 0-based within the --frames range (default: its middle)")
    parser.add_argument("--image", metavar="FILE.png", default=None,
                        help="write the frame with the centre, the annuli, masked and saturated pixels "
                             "and the radial profile (replaced if it exists)")
    add_clip_arguments(parser)
    add_roi_arguments(parser)
    add_output_arguments(parser)
    parser.set_defaults(func=run)
    return parser


#: Width of the label column of the text output.
_LABEL_WIDTH = 17


def _number(value: float) -> str:
    """Pixels rounded to 0.1 px, printed without trailing zeros."""
    return f"{round(float(value), 1):g}"


def count_options(args: argparse.Namespace, suggested: dict[str, Any]) -> list[str]:
    """Command-line options for ``count``: the given clip/ROI options with the suggestion applied.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed ``roi`` options (same clip and ROI options as ``count``).
    suggested : dict
        ``inner``, ``outer`` (px), ``crop`` (``(x0, y0, x1, y1)`` or None) and
        optionally ``center`` (``(x, y)`` px); a key that is absent keeps the
        option as given.

    Returns
    -------
    list of str
        Options, ready for :func:`shlex.join`.
    """
    inner = suggested.get("inner") if "inner" in suggested else args.inner
    outer = suggested.get("outer") if "outer" in suggested else args.outer
    crop = suggested.get("crop") if "crop" in suggested else args.crop
    opts: list[str] = []
    if args.fps is not None:
        opts += ["--fps", f"{args.fps:g}"]
    if args.channel != "auto":
        opts += ["--channel", args.channel]
    if args.frames:
        opts += ["--frames", args.frames]
    center = suggested.get("center") if suggested.get("center") is not None else args.center
    if center:
        if isinstance(center, str):
            opts += ["--center", center.replace(" ", "")]
        else:
            opts += ["--center", ",".join(f"{round(float(v), 2):g}" for v in center)]
    if inner is not None and float(inner) > 0:
        opts += ["--inner", _number(inner)]
    if outer is not None and math.isfinite(float(outer)):
        opts += ["--outer", _number(outer)]
    if crop is not None:
        if isinstance(crop, str):
            opts += ["--crop", crop.replace(" ", "")]
        else:
            opts += ["--crop", ",".join(str(int(v)) for v in crop)]
    if args.saturation is not None:
        opts += ["--saturation", f"{args.saturation:g}"]
    if args.geometry != "auto":
        opts += ["--geometry", args.geometry]
    if args.fixed_center:
        opts += ["--fixed-center"]
    return opts


def _plain(value: Any) -> Any:
    """JSON-safe copy: tuples to lists, numpy scalars to Python, non-finite floats to None."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if hasattr(value, "item") and getattr(value, "ndim", 1) == 0:
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def inspection_to_dict(inspection) -> dict[str, Any]:
    """The scalar findings of an ROI inspection as a JSON-ready dict (no images)."""
    return _plain({
        "center": list(inspection.center),
        "center_sigma": list(inspection.center_sigma),
        "geometry": inspection.geometry,
        "radius_range_px": list(inspection.radius_range_px),
        "ring_spacing_px": inspection.ring_spacing_px,
        "visibility": inspection.visibility,
        "saturated_fraction": inspection.saturated_fraction,
        "suggested": dict(inspection.suggested),
        "frame": inspection.frame_index,
    })


def _fmt(value, spec: str, unit: str = "") -> str:
    if value is None or not math.isfinite(float(value)):
        return "n/a"
    return f"{float(value):{spec}}{unit}"


def _text(args, inspection, options: list[str]) -> str:
    d = inspection_to_dict(inspection)
    (cx, cy), (sx, sy) = inspection.center, inspection.center_sigma
    r_in, r_out = inspection.radius_range_px
    straight = inspection.geometry == "straight"
    rows = [
        ("frame", f"{d['frame']}"),
        ("geometry", f"{inspection.geometry}"),
        ("reference point" if straight else "centre",
         f"x = {_fmt(cx, '.2f')} ± {_fmt(sx, '.2f')} px, y = {_fmt(cy, '.2f')} ± {_fmt(sy, '.2f')} px"),
        ("usable range" if straight else "usable radius",
         f"{_fmt(r_in, '.1f')} to {_fmt(r_out, '.1f', ' px')}" + (" across the fringes" if straight else "")),
        ("fringe spacing" if straight else "ring spacing",
         _fmt(inspection.ring_spacing_px, ".2f", " px") + ("" if straight else " near the outer edge")),
        ("visibility", _fmt(inspection.visibility, ".3f")),
        ("saturated", f"{_fmt(100 * inspection.saturated_fraction, '.2f', ' %')} of the pixels in the ROI"),
        ("suggested ROI", shlex.join(options) if options else "(no options needed)"),
    ]
    width = _LABEL_WIDTH
    lines = [f"{label:<{width}}{value}" for label, value in rows]
    lines += ["", f"{'count with:':<{width}}" + shlex.join(["fringecount", "count", args.clip] + options)]
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    settings = settings_from_args(args)  # bad options fail before the recording is opened
    from ..errors import InputError
    from ..pipeline import inspect_roi
    from ..report import write_roi_image

    if args.image and not args.image.lower().endswith(".png"):
        raise InputError(f"--image {args.image} must end in .png; pass e.g. --image roi.png")
    inspection = inspect_roi(args.clip, settings, frame=args.frame)
    options = count_options(args, dict(inspection.suggested or {}))
    written = write_roi_image(inspection, args.image) if args.image else None
    if args.json:
        out = inspection_to_dict(inspection)
        out["count_options"] = options
        if written is not None:
            out["image"] = str(written)
        print(json.dumps(out))
        return 0
    print(_text(args, inspection, options))
    if written is not None and not args.quiet:
        print(f"{'picture':<{_LABEL_WIDTH}}{written}")
    return 0
