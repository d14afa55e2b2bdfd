"""Time and Python/NumPy memory of each stage of ``fringecount.pipeline.count``.

Usage (from the repository root, after ``run_benchmarks.py`` has rendered the clips)::

    python benchmarks/stage_breakdown.py benchmarks/out/rings_320x240_n1000.avi benchmarks/out/rings_320x240_n4000.avi

For each clip, in a fresh subprocess, the stage functions that ``count`` calls
from ``fringecount.pipeline`` (frame sampling, geometry and centre, the
streaming pass, drift tracking, model, phase fits, flags, gaps, unwrapping,
bridging, assembly) are wrapped: each wrapper notes the wall time of the call,
and in a second run with tracemalloc on, the traced memory when it starts and
tracemalloc's peak during it (tracemalloc slows Python-heavy stages down
several-fold, so the times come from the first run, without it). The stages are
called one after another by ``count`` (a wrapped stage called from inside
another is accounted to the outer one), so resetting the peak per stage is safe.
Writes a markdown table to stdout (``--out FILE`` to save it).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
from pathlib import Path

STAGES = ("_sample_frames", "_find_geometry", "_bins_for", "_stream", "_drift_track", "estimate_model",
          "fit_phases", "temporal_model", "flag_frames", "find_gaps", "unwrap_segments", "bridge_gaps",
          "_assemble")


def _child(path: str, fps: float, trace: bool) -> dict:
    import functools
    import logging
    import time
    import tracemalloc

    logging.disable(logging.WARNING)
    import fringecount.pipeline as pl
    from fringecount.settings import CountSettings

    records: dict[str, dict] = {}
    depth = [0]

    def wrap(name, fn):
        @functools.wraps(fn)
        def inner(*args, **kwargs):
            if depth[0]:  # called from inside another wrapped stage: account to the outer one
                return fn(*args, **kwargs)
            depth[0] += 1
            start_mem = tracemalloc.get_traced_memory()[0]
            if trace:
                tracemalloc.reset_peak()
            t0 = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                dt = time.perf_counter() - t0
                peak = tracemalloc.get_traced_memory()[1]
                rec = records.setdefault(name, {"calls": 0, "wall_s": 0.0, "peak_mib": 0.0, "held_at_start_mib": 0.0})
                rec["calls"] += 1
                rec["wall_s"] += dt
                rec["peak_mib"] = max(rec["peak_mib"], peak / 2 ** 20)
                rec["held_at_start_mib"] = max(rec["held_at_start_mib"], start_mem / 2 ** 20)
                depth[0] -= 1
        return inner

    for name in STAGES:
        if hasattr(pl, name):
            setattr(pl, name, wrap(name, getattr(pl, name)))
    if trace:
        tracemalloc.start()
    t0 = time.perf_counter()
    res = pl.count(path, CountSettings(fps=fps))
    total = time.perf_counter() - t0
    overall_peak = max([r["peak_mib"] for r in records.values()] + [tracemalloc.get_traced_memory()[1] / 2 ** 20])
    tracemalloc.stop()
    return {"clip": Path(path).name, "frames": int(res.summary["frames"]), "total_s": total,
            "overall_peak_mib": overall_peak, "n_bins": int(res.summary["radial_model"]["n_bins"]),
            "stages": records}


def _table(result: dict) -> str:
    lines = [f"### {result['clip']} ({result['frames']} frames, n_bins {result['n_bins']}, "
             f"count {result['total_s']:.1f} s, traced peak {result['overall_peak_mib']:.1f} MiB)", "",
             "| stage (fringecount.pipeline name) | calls | wall s | share | traced MiB held at start | traced peak MiB |",
             "|---|---:|---:|---:|---:|---:|"]
    for name, r in sorted(result["stages"].items(), key=lambda kv: -kv[1]["wall_s"]):
        lines.append(f"| {name} | {r['calls']} | {r['wall_s']:.2f} | {100 * r['wall_s'] / result['total_s']:.0f} % | "
                     f"{r['held_at_start_mib']:.1f} | {r['peak_mib']:.1f} |")
    rest = result["total_s"] - sum(r["wall_s"] for r in result["stages"].values())
    lines.append(f"| (rest of count) | | {rest:.2f} | {100 * rest / result['total_s']:.0f} % | | |")
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("clips", nargs="+", help="recordings to analyse")
    parser.add_argument("--fps", type=float, default=25.0, help="frame rate for TIFF stacks, frames/s")
    parser.add_argument("--out", type=Path, default=None, help="write the markdown here too")
    parser.add_argument("--child", choices=("time", "trace"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(_child(args.clips[0], args.fps, args.child == "trace")))
        return 0
    parts = []
    for clip in args.clips:
        runs = {}
        for mode in ("time", "trace"):
            proc = subprocess.run([sys.executable, str(Path(__file__).resolve()), "--child", mode,
                                   "--fps", str(args.fps), clip], capture_output=True, text=True)
            if proc.returncode != 0:
                print(proc.stderr[-3000:], file=sys.stderr)
                return 1
            runs[mode] = json.loads(proc.stdout.strip().splitlines()[-1])
        merged = runs["time"]
        merged["overall_peak_mib"] = runs["trace"]["overall_peak_mib"]
        for name, rec in merged["stages"].items():
            traced = runs["trace"]["stages"].get(name, {})
            rec["peak_mib"] = traced.get("peak_mib", float("nan"))
            rec["held_at_start_mib"] = traced.get("held_at_start_mib", float("nan"))
        parts.append(_table(merged))
        print(parts[-1], flush=True)
    if args.out:
        args.out.write_text("# count() by stage (benchmarks/stage_breakdown.py)\n\n" + "\n".join(parts))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
