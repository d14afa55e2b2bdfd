"""``fringecount count CLIP``: the signed fringe count of a recording, with its gaps.

Examples
--------
::

    fringecount count sample_clips/diode_scan_hops.avi
    fringecount count clip.avi --json
    fringecount count clip.avi --out results/run1 --report
    fringecount count clip.avi --wavelengths wavemeter.csv --center 160.5,120 --outer 110
"""

from __future__ import annotations

import argparse
import sys

from . import add_output_arguments
from ._options import add_clip_arguments, add_gap_arguments, add_roi_arguments, settings_from_args

__all__ = ["register", "run"]


def register(sub) -> None:
    p = sub.add_parser("count", help="count the fringes in a recording",
                       description="Count the fringes that passed in a recording (signed, sub-fringe), "
                                   "mark the intervals that cannot be followed and bridge them.")
    p.add_argument("clip", help="video, TIFF stack, .npy array or folder of numbered images")
    add_clip_arguments(p)
    add_roi_arguments(p)
    add_gap_arguments(p)
    o = p.add_argument_group("output")
    o.add_argument("--out", metavar="DIR", default=None,
                   help="write DIR/frames.csv, DIR/gaps.csv, DIR/summary.json (atomically)")
    o.add_argument("--force", action="store_true", help="replace an existing result in --out")
    o.add_argument("--report", action="store_true", help="also write DIR/report.png (needs --out)")
    add_output_arguments(p)
    p.set_defaults(func=run)


def _summary_text(s: dict) -> str:
    lines = []
    amb = "  (AMBIGUOUS: the sigma admits another whole fringe)" if s.get("ambiguous") else ""
    lines.append(f"clip            {s['clip']}")
    lines.append(f"frames          {s['frames']} at {s['fps']:.3f} frames/s ({s['duration_s']:.2f} s), "
                 f"{100 * s['trusted_fraction']:.1f} % trusted")
    if s.get("center"):
        c = s["center"]
        drift = c.get("drift", {})
        dr = f", drift up to {drift.get('max_drift_px', 0):.2f} px followed" if drift.get("drift_accepted") else ""
        lines.append(f"geometry        rings, centre x={c['x']:.2f}±{c['x_err']:.2f} y={c['y']:.2f}±{c['y_err']:.2f} px{dr}")
    else:
        lines.append("geometry        straight fringes (sign relative to the carrier direction)")
    v = s.get("visibility", {})
    if v.get("median") is not None:
        lines.append(f"visibility      median {v['median']:.2f}, 10th percentile {v['p10']:.2f}")
    lines.append(f"TOTAL           {s['total_fringes']:+.4f} ± {s['total_fringes_sigma']:.4f} fringes{amb}")
    b = s.get("sigma_budget", {})
    if b:
        lines.append("sigma budget    " + ", ".join(f"{k} {v:.4f}" for k, v in b.items()))
    gaps = s.get("gaps", [])
    if gaps:
        lines.append(f"gaps            {len(gaps)} untrusted interval(s):")
        for g in gaps:
            fa, fs = g.get("fringes_across"), g.get("fringes_across_sigma")
            across = f"{fa:+.3f} ± {fs:.3f}" if fa is not None and fs is not None else "n/a"
            flag = " ambiguous" if g.get("ambiguous") else ""
            lines.append(f"  frames {g['first_frame']:>6}-{g['last_frame']:<6} {g['reason']:<15} "
                         f"across {across} ({g.get('method', '')}){flag}")
    else:
        lines.append("gaps            none: every frame was followed")
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    from ..errors import SettingsError
    from ..pipeline import count
    from ..results import summary_json, write_result

    if args.report and not args.out:
        raise SettingsError("--report needs --out DIR (the report is written into the result folder)")
    if args.out and not args.force:
        from pathlib import Path
        if (Path(args.out) / "summary.json").exists():
            from ..errors import ResultExistsError
            raise ResultExistsError(f"{args.out} already holds a result; pass --force to replace it or choose another --out")
    settings = settings_from_args(args)
    bar = None
    progress = None
    if not args.quiet:
        from tqdm import tqdm

        def progress(done, total, _state={}):
            nonlocal bar
            if bar is None:
                bar = tqdm(total=total, unit="frame", desc="counting", file=sys.stderr, leave=False,
                           mininterval=0.5, delay=1.0)
            bar.update(done - bar.n)
    try:
        result = count(args.clip, settings, progress=progress)
    finally:
        if bar is not None:
            bar.close()
    if args.out:
        paths = write_result(result, args.out, force=args.force, report=args.report, clip=args.clip)
        if not args.json and not args.quiet:
            print(f"wrote {len(paths)} files to {args.out}", file=sys.stderr)
    if args.json:
        print(summary_json(result.summary))
    elif not args.quiet:
        print(_summary_text(result.summary))
    return 0
