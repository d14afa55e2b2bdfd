"""``fringecount report DIR``: redraw the report page of a saved result.

Examples
--------
::

    fringecount report results/run1                 # writes results/run1/report.png (+ .html)
    fringecount report results/run1 --force         # replace an existing report
    fringecount report results/run1 --clip clip.avi # take the gap frames from this recording
    fringecount report results/run1 --out page.png --no-html
"""

from __future__ import annotations

import argparse
import json
import logging
from pathlib import Path

from . import add_output_arguments

__all__ = ["register", "run"]

logger = logging.getLogger(__name__)


def register(subparsers) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "report",
        help="redraw the report page (PNG + HTML) of a saved result folder",
        description="Redraw DIR/report.png (and DIR/report.html) from the result saved in DIR. "
                    "Frames from each untrusted interval are shown when the recording can be found.",
    )
    parser.add_argument("result_dir", metavar="DIR", help="result folder written by 'fringecount count --out DIR'")
    parser.add_argument("--clip", metavar="CLIP", default=None,
                        help="recording to take the gap frames from (default: the one named in DIR/summary.json)")
    parser.add_argument("--no-thumbnails", action="store_true",
                        help="do not read the recording; draw the page without gap frames")
    parser.add_argument("--out", metavar="FILE.png", default=None,
                        help="write the picture here instead of DIR/report.png")
    parser.add_argument("--no-html", action="store_true", help="write only the PNG, no HTML page")
    parser.add_argument("--force", action="store_true", help="replace an existing report")
    add_output_arguments(parser)
    parser.set_defaults(func=run)
    return parser


def _clip_from_summary(result, result_dir: Path) -> Path | None:
    """The recording named in the summary, tried as given and relative to the result folder."""
    summary = dict(getattr(result, "summary", {}) or {})
    named = summary.get("clip") or summary.get("clip_path")
    if not named:
        return None
    named = Path(str(named))
    for candidate in (named, result_dir / named, result_dir / named.name):
        if candidate.exists():
            return candidate
    logger.warning("recording %s named in the result was not found; drawing without gap frames "
                   "(pass --clip to point at it)", named)
    return None


def run(args: argparse.Namespace) -> int:
    from ..errors import InputError
    from ..report import write_report
    from ..results import read_result

    result_dir = Path(args.result_dir)
    if not result_dir.is_dir():
        raise InputError(f"result folder {result_dir} not found; pass the folder given to 'count --out'")
    result = read_result(result_dir)
    clip = None
    if not args.no_thumbnails:
        if args.clip is not None:
            clip = Path(args.clip)
            if not clip.exists():
                raise InputError(f"recording {clip} not found; fix --clip or pass --no-thumbnails")
        else:
            clip = _clip_from_summary(result, result_dir)
    out = Path(args.out) if args.out else result_dir
    written = write_report(result, out, clip=clip, force=args.force,
                           html_page=False if args.no_html else None)
    if args.json:
        print(json.dumps({"written": [str(p) for p in written]}))
    elif not args.quiet:
        for path in written:
            print(path)
    return 0
