"""Speed and peak memory of fringecount, measured outside the test suite.

Usage (from the repository root)::

    python benchmarks/run_benchmarks.py            # full set, writes benchmarks/results/latest.md
    python benchmarks/run_benchmarks.py --quick    # a couple of minutes, writes benchmarks/results/quick.md
    python benchmarks/run_benchmarks.py --profile  # also cProfile count() on the 640x480x1000 clip

Synthetic clips (invented scene: a mirror oscillating on a sinusoidal drive in a
He-Ne Michelson, clean rings) are rendered frame by frame with
``fringecount.synthetic.render_frames`` and streamed into the writers, so the
generator never holds a whole clip. They are cached under ``benchmarks/out/``
(git-ignored) and reused while their generation parameters are unchanged.

Every measurement runs in a fresh Python subprocess (this file with
``--measure``). The child imports the same modules in every case, records its
peak resident set size (``ru_maxrss``) after the imports (the baseline), does
the work, and reports the wall time of the work and its peak RSS; a second
child with ``tracemalloc`` running reports the peak of Python/NumPy
allocations. Nothing here is part of the pytest suite; everything is CPU only.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import subprocess
import sys
import time
from dataclasses import asdict, dataclass
from pathlib import Path

HERE = Path(__file__).resolve().parent
OUT_DIR = HERE / "out"
RESULTS_DIR = HERE / "results"

FPS = 25.0
#: Bump when the scene or camera below changes: cached clips are then re-rendered.
SCENE_VERSION = 1


# ----------------------------------------------------------------------------- clips
@dataclass(frozen=True)
class ClipSpec:
    """One synthetic benchmark clip."""

    width_px: int
    height_px: int
    n_frames: int
    container: str  # "avi" (MJPG, 8 bit) or "tif" (16-bit TIFF stack)

    @property
    def name(self) -> str:
        return f"rings_{self.width_px}x{self.height_px}_n{self.n_frames}.{self.container}"

    @property
    def label(self) -> str:
        kind = "MJPG avi" if self.container == "avi" else "16-bit TIFF"
        return f"{self.width_px}x{self.height_px}x{self.n_frames} {kind}"

    def generation(self) -> dict:
        return {"scene_version": SCENE_VERSION, **asdict(self), "fps": FPS}


def _scene(spec: ClipSpec):
    """Scene, camera and sweep of a benchmark clip.

    The ring pattern scales with the frame (focal length 3.5 x width, as the
    bundled samples use 700 px for 200 px), so every size shows the same rings.
    The mirror oscillates: amplitude 1.5 um, period 8 s, i.e. at most
    2 pi 1.5 um / 8 s x 2 / 633 nm = 3.7 fringes/s = 0.15 fringe per frame at 25 fps;
    the scene is statistically the same over a 10 s or a 160 s clip.
    """
    from fringecount.synthetic import Camera, MirrorSweep, Scene, sinusoidal_drive

    camera = Camera(width=spec.width_px, height=spec.height_px, focal_px=3.5 * spec.width_px,
                    bit_depth=8 if spec.container == "avi" else 16,
                    n_subsamples=2)  # 2 instants per exposure: a little blur, half the render time
    sweep = MirrorSweep(d0_m=0.2e-3, displacement_m=sinusoidal_drive(1.5e-6, 8.0))
    scene = Scene(visibility=0.85, shake_px=0.05)
    return scene, camera, sweep


def true_fringes(spec: ClipSpec, n_frames: int) -> float:
    """True count of the clip's first ``n_frames`` frames (on-axis order, dominant mode; no blur)."""
    from fringecount.synthetic import on_axis_order

    _, _, sweep = _scene(spec)
    return on_axis_order(sweep.state((n_frames - 1) / FPS)) - on_axis_order(sweep.state(0.0))


def ensure_clip(spec: ClipSpec, out_dir: Path, log) -> Path:
    """Render ``spec`` into ``out_dir`` unless an up-to-date copy is cached there."""
    import numpy as np
    from fringecount.synthetic import render_frames, write_tiff_stack, write_video

    path = out_dir / spec.name
    meta = path.with_name(path.name + ".json")
    want = spec.generation()
    if path.exists() and meta.exists():
        try:
            if json.loads(meta.read_text()) == want:
                return path
        except ValueError:
            pass
    log(f"rendering {spec.label} -> {path.name}")
    t0 = time.perf_counter()
    scene, camera, sweep = _scene(spec)
    frames = render_frames(scene, camera, sweep, np.arange(spec.n_frames) / FPS, rng=spec.n_frames)
    if spec.container == "avi":
        write_video(path, frames, FPS, codec="MJPG")
    else:
        write_tiff_stack(path, frames)
    meta.write_text(json.dumps(want, indent=1))
    log(f"  {time.perf_counter() - t0:.1f} s, {path.stat().st_size / 1e6:.1f} MB")
    return path


def clip_specs(quick: bool) -> list[ClipSpec]:
    if quick:
        return [ClipSpec(320, 240, 250, "avi"), ClipSpec(320, 240, 1000, "avi"),
                ClipSpec(640, 480, 250, "avi"), ClipSpec(320, 240, 250, "tif")]
    specs = [ClipSpec(w, h, n, "avi") for (w, h) in ((320, 240), (640, 480)) for n in (250, 1000, 4000)]
    specs += [ClipSpec(320, 240, n, "tif") for n in (250, 1000, 4000)]
    return specs


# ----------------------------------------------------------------------------- child side
def _maxrss_mib() -> float:
    import resource

    kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    return kib / 1024.0


class _AnonSampler:
    """Samples RssAnon/RssFile of /proc/self/status every ``interval_s`` (Linux) and keeps the maxima.

    ``ru_maxrss`` counts file-backed pages too (a memory-mapped TIFF stack shows up in
    it although those pages are clean page cache that the kernel can drop); the
    anonymous part is the memory the process really allocated.
    """

    def __init__(self, interval_s: float = 0.02):
        import threading

        self.interval_s = interval_s
        self.anon_kib = self.file_kib = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _read(self) -> None:
        try:
            text = Path("/proc/self/status").read_text()
        except OSError:
            return
        for line in text.splitlines():
            if line.startswith("RssAnon:"):
                self.anon_kib = max(self.anon_kib, int(line.split()[1]))
            elif line.startswith("RssFile:"):
                self.file_kib = max(self.file_kib, int(line.split()[1]))

    def _run(self) -> None:
        while not self._stop.wait(self.interval_s):
            self._read()

    def __enter__(self):
        self._read()
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self._read()


def _work(kind: str, path: Path) -> dict:
    """Run one measured task; return the number of frames and task-specific facts."""
    if kind == "cv2_read":
        import cv2

        cap = cv2.VideoCapture(str(path))
        n = 0
        try:
            while True:
                ok, img = cap.read()
                if not ok:
                    break
                n += 1
        finally:
            cap.release()
        return {"frames": n}
    if kind == "tifffile_read":
        import tifffile

        n = 0
        with tifffile.TiffFile(path) as tif:
            for page in tif.pages:
                page.asarray()
                n += 1
        return {"frames": n}
    if kind == "open_frames":
        from fringecount.frames import open_frames

        n = 0
        checksum = 0
        with open_frames(path, fps=FPS) as src:
            for fr in src:
                checksum += int(fr.image[0, 0])  # touch the decoded frame
                n += 1
        return {"frames": n}
    if kind == "count":
        from fringecount.pipeline import count
        from fringecount.settings import CountSettings

        res = count(path, CountSettings(fps=FPS))
        s = res.summary
        return {"frames": int(s["frames"]), "total_fringes": s["total_fringes"],
                "total_fringes_sigma": s["total_fringes_sigma"], "n_bins": s["radial_model"]["n_bins"],
                "gaps": len(s["gaps"])}
    raise ValueError(f"unknown measurement {kind!r}")


def measure_child(kind: str, path: Path, use_tracemalloc: bool) -> dict:
    """Body of the ``--measure`` subprocess."""
    import logging

    logging.disable(logging.WARNING)
    # the same imports in every child, so that the baselines agree
    import cv2  # noqa: F401
    import numpy  # noqa: F401
    import pandas  # noqa: F401
    import tifffile  # noqa: F401
    import fringecount.frames  # noqa: F401
    import fringecount.pipeline  # noqa: F401

    base = _maxrss_mib()
    sampler = _AnonSampler()
    sampler._read()
    anon_base = sampler.anon_kib / 1024.0
    if use_tracemalloc:
        import tracemalloc

        tracemalloc.start()
    with sampler:
        t0 = time.perf_counter()
        facts = _work(kind, path)
        wall = time.perf_counter() - t0
    out = {"kind": kind, "wall_s": wall, "rss_base_mib": base, "rss_peak_mib": _maxrss_mib(),
           "anon_base_mib": anon_base, "anon_peak_mib": sampler.anon_kib / 1024.0,
           "file_peak_mib": sampler.file_kib / 1024.0,
           "package_dir": str(Path(fringecount.pipeline.__file__).parent), **facts}
    if use_tracemalloc:
        out["py_peak_mib"] = tracemalloc.get_traced_memory()[1] / 2 ** 20
        tracemalloc.stop()
    return out


# ----------------------------------------------------------------------------- parent side
#: Extra environment of the measuring children (PYTHONPATH of the code snapshot).
CHILD_ENV: dict[str, str] = {}


def snapshot_package(out_dir: Path, log, rev: str = "HEAD") -> tuple[str, Path] | None:
    """Export ``fringecount/`` at git ``rev`` (default HEAD) into ``out_dir/snapshot-REV`` and return (rev, folder).

    Other developers change the working tree while a long run goes on; measuring a
    fixed commit keeps all rows comparable and names exactly what was measured.
    """
    try:
        rev = subprocess.run(["git", "-C", str(HERE.parent), "rev-parse", "--short", rev],
                             capture_output=True, text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return None
    dest = out_dir / f"snapshot-{rev}"
    if not (dest / "fringecount" / "__init__.py").exists():
        dest.mkdir(parents=True, exist_ok=True)
        archive = subprocess.run(["git", "-C", str(HERE.parent), "archive", rev, "fringecount"],
                                 capture_output=True, check=True).stdout
        subprocess.run(["tar", "-x", "-C", str(dest)], input=archive, check=True)
    log(f"measuring fringecount at commit {rev} (snapshot in {dest.relative_to(HERE.parent)})")
    return rev, dest


def run_child(kind: str, path: Path, use_tracemalloc: bool = False) -> dict:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--measure", kind, str(path)]
    if use_tracemalloc:
        cmd.append("--tracemalloc")
    proc = subprocess.run(cmd, capture_output=True, text=True,
                          env={**os.environ, "PYTHONHASHSEED": "0", **CHILD_ENV})
    if proc.returncode != 0:
        raise RuntimeError(f"{kind} on {path.name} failed:\n{proc.stderr[-3000:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def measure_clip(spec: ClipSpec, path: Path, repeat: int, use_tracemalloc: bool, log) -> dict:
    plain = "cv2_read" if spec.container == "avi" else "tifffile_read"
    row: dict = {"clip": spec.label, "name": spec.name, "width": spec.width_px, "height": spec.height_px,
                 "n_frames": spec.n_frames, "container": spec.container,
                 "size_mb": path.stat().st_size / 1e6, "plain_reader": plain}
    for kind in (plain, "open_frames", "count"):
        runs = []
        for _ in range(repeat):
            runs.append(run_child(kind, path))
            log(f"  {kind:14s} {runs[-1]['wall_s']:8.2f} s  peak RSS {runs[-1]['rss_peak_mib']:7.1f} MiB")
        best = min(runs, key=lambda r: r["wall_s"])
        row[kind] = {**best, "wall_s_all": [r["wall_s"] for r in runs],
                     "rss_peak_mib": max(r["rss_peak_mib"] for r in runs),
                     "anon_peak_mib": max(r["anon_peak_mib"] for r in runs)}
        if use_tracemalloc and kind in ("open_frames", "count"):
            tm = run_child(kind, path, use_tracemalloc=True)
            row[kind]["py_peak_mib"] = tm["py_peak_mib"]
            log(f"  {kind:14s} tracemalloc peak {tm['py_peak_mib']:7.1f} MiB")
    n = row["count"]["frames"]
    row["true_fringes"] = true_fringes(spec, row["count"]["frames"])
    row["count_fps"] = n / row["count"]["wall_s"]
    row["decode_fps"] = n / row["open_frames"]["wall_s"]
    row["ratio_count_decode"] = row["count"]["wall_s"] / row["open_frames"]["wall_s"]
    row["ratio_reader_plain"] = row["open_frames"]["wall_s"] / row[plain]["wall_s"]
    return row


def profile_count(path: Path, out_txt: Path, log, measured: str) -> None:
    """cProfile of count() on ``path`` (in a subprocess), sorted by cumulative time."""
    prof = OUT_DIR / (path.stem + ".prof")
    code = ("import cProfile, logging, sys\n"
            "logging.disable(logging.WARNING)\n"
            "from fringecount.pipeline import count\n"
            "from fringecount.settings import CountSettings\n"
            "prof = cProfile.Profile()\n"
            "prof.enable()\n"
            f"count(sys.argv[1], CountSettings(fps={FPS!r}))\n"
            "prof.disable()\n"
            "prof.dump_stats(sys.argv[2])\n")
    log(f"profiling count() on {path.name}")
    # cwd outside the repository: with -c the current folder comes first on sys.path
    subprocess.run([sys.executable, "-c", code, str(path), str(prof)], check=True, cwd=str(OUT_DIR),
                   env={**os.environ, **CHILD_ENV})
    import io
    import pstats

    buf = io.StringIO()
    stats = pstats.Stats(str(prof), stream=buf)
    stats.strip_dirs().sort_stats("cumulative").print_stats(45)
    buf.write("\n\n---- sorted by own (tottime) ----\n")
    stats.sort_stats("tottime").print_stats(25)
    text = buf.getvalue()
    root = str(HERE.parent) + os.sep
    out_txt.write_text(f"# cProfile of fringecount.pipeline.count on {path.name} "
                       f"({measured}, {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())})\n\n"
                       + text.replace(root, ""))
    log(f"  written {out_txt.relative_to(HERE.parent)}")


# ----------------------------------------------------------------------------- report
def _cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def _git_rev() -> str:
    try:
        rev = subprocess.run(["git", "-C", str(HERE.parent), "rev-parse", "--short", "HEAD"],
                             capture_output=True, text=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(HERE.parent), "status", "--porcelain", "--", "fringecount"],
                               capture_output=True, text=True).stdout.strip()
        return rev + ("+uncommitted changes in fringecount/" if dirty else "")
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def environment() -> dict:
    import cv2
    import numpy
    import pandas
    import scipy
    import tifffile

    import fringecount

    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    return {"cpu": _cpu_model(), "cores": os.cpu_count(), "python": platform.python_version(),
            "platform": platform.platform(), "fringecount": fringecount.__version__, "git": _git_rev(),
            "numpy": numpy.__version__, "scipy": scipy.__version__, "pandas": pandas.__version__,
            "opencv": cv2.__version__, "tifffile": tifffile.__version__,
            "load_before": [round(v, 2) for v in load],
            "started_utc": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())}


def _fmt(v, nd=2) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:.{nd}f}"


def memory_growth(rows: list[dict]) -> list[dict]:
    """Per (size, container): peak-RSS growth of count from the shortest to the longest clip."""
    groups: dict = {}
    for r in rows:
        groups.setdefault((r["width"], r["height"], r["container"]), []).append(r)
    out = []
    for (w, h, c), rs in groups.items():
        rs = sorted(rs, key=lambda r: r["n_frames"])
        if len(rs) < 2:
            continue
        a, b = rs[0], rs[-1]
        dn = b["count"]["frames"] - a["count"]["frames"]
        n_bins = b["count"].get("n_bins") or 0
        d_rss = b["count"]["rss_peak_mib"] - a["count"]["rss_peak_mib"]
        d_dec = b["open_frames"]["rss_peak_mib"] - a["open_frames"]["rss_peak_mib"]
        d_anon = b["count"].get("anon_peak_mib", float("nan")) - a["count"].get("anon_peak_mib", float("nan"))
        d_dec_anon = (b["open_frames"].get("anon_peak_mib", float("nan"))
                      - a["open_frames"].get("anon_peak_mib", float("nan")))
        d_py = (b["count"].get("py_peak_mib", float("nan")) - a["count"].get("py_peak_mib", float("nan")))
        out.append({"group": f"{w}x{h} {'MJPG avi' if c == 'avi' else '16-bit TIFF'}",
                    "from": a["n_frames"], "to": b["n_frames"], "growth": b["n_frames"] / a["n_frames"],
                    "d_rss_count_mib": d_rss, "d_rss_decode_mib": d_dec, "d_py_count_mib": d_py,
                    "d_anon_count_mib": d_anon, "d_anon_decode_mib": d_dec_anon,
                    "kib_per_frame": d_rss * 1024 / dn if dn else float("nan"),
                    "py_kib_per_frame": d_py * 1024 / dn if dn else float("nan"),
                    "n_bins": n_bins, "frame_kib": w * h * (1 if c == "avi" else 2) / 1024})
    return out


def write_markdown(rows: list[dict], env: dict, out_md: Path, quick: bool, elapsed_s: float) -> None:
    lines = [f"# fringecount benchmarks{' (quick set)' if quick else ''}", "",
             f"Run started {env.get('started_utc', '?')} with "
             f"`python benchmarks/run_benchmarks.py{' --quick' if quick else ''}` "
             f"({elapsed_s / 60:.1f} min including clip rendering). See benchmarks/README.md for how to read it.", "",
             "## Machine", "",
             f"- CPU: {env['cpu']}, {env['cores']} cores (CPU only)",
             f"- Python {env['python']} on {env['platform']}",
             f"- fringecount {env['fringecount']}, measured code: {env.get('measured_code', 'git ' + env['git'])}; numpy {env['numpy']}, scipy {env['scipy']}, "
             f"pandas {env['pandas']}, opencv {env['opencv']}, tifffile {env['tifffile']}",
             f"- load average before the run: {env['load_before']} (a shared machine: other jobs ran "
             "alongside, so wall times carry tens of per cent of noise; ratios measured back to back are steadier)",
             "", "## Speed", "",
             "Wall times in seconds (best of the repeats), each in a fresh process, imports excluded. "
             "`plain` is a bare reader loop (cv2.VideoCapture.read for AVI, tifffile pages for TIFF); "
             "`decode` iterates `open_frames(path)` touching each frame; `count` is "
             "`fringecount.pipeline.count(path)`.", "",
             "| clip | MB | plain s | decode s | count s | count/decode | decode/plain | decode fps | count fps | counted fringes | true |",
             "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|"]
    for r in rows:
        lines.append(f"| {r['clip']} | {r['size_mb']:.0f} | {_fmt(r[r['plain_reader']]['wall_s'])} | "
                     f"{_fmt(r['open_frames']['wall_s'])} | {_fmt(r['count']['wall_s'])} | "
                     f"{_fmt(r['ratio_count_decode'], 1)} | {_fmt(r['ratio_reader_plain'])} | "
                     f"{_fmt(r['decode_fps'], 0)} | {_fmt(r['count_fps'], 1)} | "
                     f"{r['count']['total_fringes']:+.3f} ± {r['count']['total_fringes_sigma']:.3f} | "
                     f"{r.get('true_fringes', float('nan')):+.3f} |")
    lines += ["", "## Peak memory", "",
              "Peak resident set size (ru_maxrss of the measuring process) in MiB; `base` is the peak after "
              "the common imports (numpy, pandas, cv2, tifffile, fringecount), before any work. "
              "`py peak` is tracemalloc's peak of Python and NumPy allocations during the work "
              "(a separate run; OpenCV's and FFmpeg's own buffers are not traced). `anon` is the peak of the "
              "anonymous part of the RSS (RssAnon in /proc/self/status, sampled every 20 ms): unlike "
              "ru_maxrss it leaves out file-backed pages, e.g. a memory-mapped TIFF stack, which are page "
              "cache the kernel can drop.", "",
              "| clip | base | plain peak | decode peak | count peak | count - base | decode anon | count anon | decode py peak | count py peak |",
              "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|"]
    for r in rows:
        c = r["count"]
        lines.append(f"| {r['clip']} | {_fmt(c['rss_base_mib'], 0)} | {_fmt(r[r['plain_reader']]['rss_peak_mib'], 0)} | "
                     f"{_fmt(r['open_frames']['rss_peak_mib'], 0)} | {_fmt(c['rss_peak_mib'], 0)} | "
                     f"{_fmt(c['rss_peak_mib'] - c['rss_base_mib'], 0)} | "
                     f"{_fmt(r['open_frames'].get('anon_peak_mib'), 0)} | {_fmt(c.get('anon_peak_mib'), 0)} | "
                     f"{_fmt(r['open_frames'].get('py_peak_mib'), 1)} | {_fmt(c.get('py_peak_mib'), 1)} |")
    growth = memory_growth(rows)
    if growth:
        lines += ["", "## Does memory stay flat as the clip grows?", "",
                  "Growth of the peak from the shortest to the longest clip of each size. A streaming "
                  "pipeline grows only by what it keeps per frame: three float32 profiles (nominal centre and "
                  "two shifted centres) of `n_bins` values, plus a float64 copy of the nominal one and the "
                  "per-frame table, i.e. about (3 x 4 + 8) B x n_bins + ~0.2 KiB per frame; a pipeline that held the "
                  "clip would grow by a whole frame (`frame KiB`) per frame.", "",
                  "| frames | growth | decode peak change MiB (RSS / anon) | count peak change MiB (RSS / anon / py) | "
                  "count KiB/frame (RSS) | count KiB/frame (py) | n_bins | expected KiB/frame | frame KiB |",
                  "|---|---:|---:|---:|---:|---:|---:|---:|---:|"]
        for g in growth:
            expect = (20 * g["n_bins"] + 200) / 1024
            lines.append(f"| {g['group']}: {g['from']} -> {g['to']} | {g['growth']:.0f}x | "
                         f"{_fmt(g['d_rss_decode_mib'], 1)} / {_fmt(g['d_anon_decode_mib'], 1)} | "
                         f"{_fmt(g['d_rss_count_mib'], 1)} / {_fmt(g['d_anon_count_mib'], 1)} / "
                         f"{_fmt(g['d_py_count_mib'], 1)} | "
                         f"{_fmt(g['kib_per_frame'], 2)} | {_fmt(g['py_kib_per_frame'], 2)} | {g['n_bins']} | "
                         f"{expect:.1f} | {g['frame_kib']:.0f} |")
    lines += ["", "Raw numbers: `" + out_md.with_suffix(".json").name + "` next to this file.", ""]
    out_md.write_text("\n".join(lines))


# ----------------------------------------------------------------------------- main
def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true", help="small set (a couple of minutes)")
    parser.add_argument("--repeat", type=int, default=None,
                        help="runs per measurement, best kept (default 1 full, 1 quick)")
    parser.add_argument("--no-tracemalloc", action="store_true", help="skip the tracemalloc runs")
    parser.add_argument("--profile", action="store_true",
                        help="also cProfile count() on the 640x480x1000 clip")
    parser.add_argument("--profile-only", action="store_true", help="only the profile")
    parser.add_argument("--working-tree", action="store_true",
                        help="measure the live working tree instead of a snapshot of fringecount/ at git HEAD")
    parser.add_argument("--rev", default="HEAD", help="git revision of fringecount/ to measure (default HEAD)")
    parser.add_argument("--out", type=Path, default=None, help="results markdown (default results/latest.md)")
    parser.add_argument("--from-json", type=Path, default=None,
                        help="only rewrite the markdown from a saved results JSON")
    parser.add_argument("--measure", nargs=2, metavar=("KIND", "PATH"), help=argparse.SUPPRESS)
    parser.add_argument("--tracemalloc", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)

    if args.measure:
        print(json.dumps(measure_child(args.measure[0], Path(args.measure[1]), args.tracemalloc)))
        return 0

    def log(msg: str) -> None:
        print(msg, file=sys.stderr, flush=True)

    if args.from_json:
        saved = json.loads(args.from_json.read_text())
        write_markdown(saved["rows"], saved["environment"], args.from_json.with_suffix(".md"),
                       saved.get("quick", False), saved.get("elapsed_s", float("nan")))
        return 0
    t_start = time.perf_counter()
    OUT_DIR.mkdir(parents=True, exist_ok=True)
    RESULTS_DIR.mkdir(parents=True, exist_ok=True)
    measured = "working tree"
    if not args.working_tree:
        snap = snapshot_package(OUT_DIR, log, args.rev)
        if snap is not None:
            CHILD_ENV["PYTHONPATH"] = os.pathsep.join([str(snap[1])] + [p for p in [os.environ.get("PYTHONPATH")] if p])
            measured = f"commit {snap[0]} (snapshot of fringecount/)"
    if args.profile_only:
        path = ensure_clip(ClipSpec(640, 480, 1000, "avi"), OUT_DIR, log)
        profile_count(path, RESULTS_DIR / "profile_count_640x480x1000.txt", log, measured)
        return 0
    env = environment()
    env["measured_code"] = measured
    repeat = args.repeat or 1
    rows = []
    for spec in clip_specs(args.quick):
        path = ensure_clip(spec, OUT_DIR, log)
        log(f"measuring {spec.label}")
        rows.append(measure_clip(spec, path, repeat, not args.no_tracemalloc, log))
    out_md = args.out or RESULTS_DIR / ("quick.md" if args.quick else "latest.md")
    elapsed = time.perf_counter() - t_start
    write_markdown(rows, env, out_md, args.quick, elapsed)
    out_md.with_suffix(".json").write_text(json.dumps({"environment": env, "rows": rows, "quick": args.quick,
                                                          "elapsed_s": elapsed}, indent=1))
    log(f"written {out_md}")
    if args.profile:
        path = ensure_clip(ClipSpec(640, 480, 1000, "avi"), OUT_DIR, log)
        profile_count(path, RESULTS_DIR / "profile_count_640x480x1000.txt", log, measured)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
