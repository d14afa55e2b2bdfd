"""Robustness of the whole ``count`` path, and a batch killed with SIGKILL and resumed.

Every bad input must end in one clear line on stderr (``fringecount: error: ...``)
and a non-zero exit: never a traceback, never an "internal error", never a hang.
The checks run the CLI in-process (``fringecount.cli.main``), as a user would.
"""

from __future__ import annotations

import contextlib
import importlib.util
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from fringecount import batch as B
from fringecount.cli import main

pytestmark = pytest.mark.skipif(
    importlib.util.find_spec("fringecount.pipeline") is None or importlib.util.find_spec("fringecount.cli.count") is None,
    reason="fringecount.pipeline / the count command not in this checkout yet")

#: Longest a single bad input may take before it counts as a hang (s); a small clip
#: that is analysed takes well under a second.
HANG_S = 20


class Hang(BaseException):
    """Raised by the alarm: not an Exception, so the CLI's last-resort handler cannot swallow it."""


@contextlib.contextmanager
def no_hang(seconds: float = HANG_S):
    def alarm(signum, frame):
        raise Hang(f"no answer within {seconds} s")

    old = signal.signal(signal.SIGALRM, alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


def run_cli(capsys, argv: list[str]) -> tuple[int, str, str]:
    with no_hang():
        code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def assert_clean_failure(code: int, err: str) -> None:
    """A non-zero exit with exactly one line on stderr that names the problem."""
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code != 0, err
    assert "Traceback" not in err and "internal error" not in err, err
    assert len(lines) == 1 and lines[0].startswith("fringecount: error: "), err
    assert len(lines[0]) > len("fringecount: error: ") + 10, err  # says something


# --------------------------------------------------------------------------- small good clips

def _frames(n: int = 40, size: int = 96, seed: int = 1234) -> np.ndarray:
    """A short synthetic ring clip (8 bit), about 0.1 fringe per frame at 30 frames/s."""
    from fringecount.synthetic import Camera, MirrorSweep, Scene, render_clip

    # Gap speed v gives 2 v / lambda fringes per second on axis (two passes, common
    # practice for a Michelson); 0.95 um/s at 632.99 nm is about 3 fringes/s.
    frames, _ = render_clip(Scene(), Camera(width=size, height=size, n_subsamples=1),
                            MirrorSweep(velocity_m_s=0.95e-6), n, 30.0, rng=seed)
    return frames


@pytest.fixture(scope="module")
def good_npy(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("good") / "clip.npy"
    np.save(path, _frames())
    return path


@pytest.fixture(scope="module")
def good_avi(tmp_path_factory) -> Path:
    from fringecount.synthetic import write_video

    return write_video(tmp_path_factory.mktemp("good") / "clip.avi", _frames(), 30.0)


def test_good_clip_counts(capsys, good_npy, tmp_path):
    # The baseline the bad variants below start from: the same clip, analysed fine.
    code, out, err = run_cli(capsys, ["count", str(good_npy), "--fps", "30", "--out", str(tmp_path / "r"),
                                      "--quiet"])
    assert code == 0, err
    assert (tmp_path / "r" / "summary.json").exists()


# --------------------------------------------------------------------------- corrupt and odd files

@pytest.mark.parametrize("suffix", [".avi", ".mp4", ".mov", ".mkv", ".tif", ".npy", ".png"])
def test_zero_length_file(capsys, tmp_path, suffix):
    clip = tmp_path / f"empty{suffix}"
    clip.write_bytes(b"")
    assert_clean_failure(*run_cli(capsys, ["count", str(clip), "--fps", "30", "--quiet"])[::2])


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.binary(min_size=1, max_size=4096), suffix=st.sampled_from([".avi", ".mp4", ".mkv", ".mov", ".tif"]))
def test_random_bytes_with_a_clip_extension(capsys, tmp_path, data, suffix):
    clip = tmp_path / f"noise{suffix}"
    clip.write_bytes(data)
    assert_clean_failure(*run_cli(capsys, ["count", str(clip), "--fps", "30", "--quiet"])[::2])


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(keep=st.floats(min_value=0.0, max_value=0.2))
def test_truncated_video(capsys, tmp_path, good_avi, keep):
    # The first few percent of a video: at best a handful of frames, usually no index.
    data = good_avi.read_bytes()
    clip = tmp_path / "cut.avi"
    clip.write_bytes(data[: int(len(data) * keep)])
    code, _, err = run_cli(capsys, ["count", str(clip), "--out", str(tmp_path / "r"), "--force", "--quiet"])
    if code == 0:  # enough frames survived to count: then a complete result exists
        assert (tmp_path / "r" / "summary.json").exists()
    else:
        assert_clean_failure(code, err)


def test_missing_file_and_empty_folder(capsys, tmp_path):
    assert_clean_failure(*run_cli(capsys, ["count", str(tmp_path / "nothing.avi"), "--quiet"])[::2])
    (tmp_path / "empty").mkdir()
    assert_clean_failure(*run_cli(capsys, ["count", str(tmp_path / "empty"), "--fps", "30", "--quiet"])[::2])


def test_folder_with_one_bad_image(capsys, tmp_path):
    import cv2

    folder = tmp_path / "seq"
    folder.mkdir()
    for k, frame in enumerate(_frames(n=20)):
        cv2.imwrite(str(folder / f"img_{k:03d}.png"), frame)
    (folder / "img_007.png").write_bytes(b"\x89PNG\r\n\x1a\n" + os.urandom(64))  # a damaged frame
    code, _, err = run_cli(capsys, ["count", str(folder), "--fps", "30", "--out", str(tmp_path / "r"), "--quiet"])
    if code == 0:  # analysing around the damaged frame is fine if the result says so
        summary = json.loads((tmp_path / "r" / "summary.json").read_text())
        frames = pd.read_csv(tmp_path / "r" / "frames.csv")
        flagged = (any(g["first_frame"] <= 7 <= g["last_frame"] for g in summary["gaps"])
                   or 7 in summary.get("clip_metadata", {}).get("unreadable", [])
                   or (7 in set(frames["frame"]) and not frames.set_index("frame").loc[7, "trusted"]))
        assert flagged, "a damaged frame was left out without a trace in the result"
    else:
        assert_clean_failure(code, err)
        assert "img_007.png" in err


@pytest.mark.parametrize("array", [
    np.zeros(10),                          # one dimension
    np.zeros((0, 32, 32), np.uint8),       # no frames
    np.full((5, 32, 32), np.nan),          # no numbers
    np.array(["a", "b"]),                  # text
    np.zeros((3, 2, 2), np.complex64),     # complex
], ids=["1d", "no-frames", "nan", "text", "complex"])
def test_odd_npy_arrays(capsys, tmp_path, array):
    clip = tmp_path / "odd.npy"
    np.save(clip, array)
    assert_clean_failure(*run_cli(capsys, ["count", str(clip), "--fps", "30", "--quiet"])[::2])


def test_npy_with_pickled_objects_is_not_loaded(capsys, tmp_path):
    # An object array needs pickle to load, which could run code: it must be refused.
    clip = tmp_path / "objects.npy"
    np.save(clip, np.array([{"a": 1}, None], dtype=object), allow_pickle=True)
    assert_clean_failure(*run_cli(capsys, ["count", str(clip), "--fps", "30", "--quiet"])[::2])


# --------------------------------------------------------------------------- absurd settings

@pytest.mark.parametrize("options", [
    ["--fps", "0"], ["--fps", "-30"], ["--fps", "nan"], ["--fps", "inf"], ["--fps", "1e12"],
    # A centre a little off the frame is legitimate (arcs of rings); these are far off it.
    ["--center", "5000,5000"], ["--center=-3000,20"], ["--center", "nan,3"], ["--center", "1,2,3"],
    ["--outer", "0"], ["--inner", "-3"],
    ["--inner", "500", "--outer", "600"],  # an annulus wholly outside the frame
    # A crop larger than the frame is clipped to it (lenient by design); these miss it.
    ["--crop", "200,200,300,300"], ["--crop", "90,90,95,95"], ["--crop", "10,10,5,5"],
    ["--frames", "500:900"], ["--frames", "9:3"], ["--frames", "0:10:0"], ["--frames", "a:b"],
    ["--saturation", "0"],
], ids=lambda o: " ".join(o))
def test_absurd_settings(capsys, tmp_path, good_npy, options):
    argv = ["count", str(good_npy), "--out", str(tmp_path / "r"), "--quiet"]
    if "--fps" not in options:
        argv += ["--fps", "30"]
    assert_clean_failure(*run_cli(capsys, argv + options)[::2])
    assert not (tmp_path / "r" / "summary.json").exists()


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(x=st.floats(allow_nan=False, allow_infinity=False, min_value=-1e6, max_value=1e6),
       y=st.floats(allow_nan=False, allow_infinity=False, min_value=-1e6, max_value=1e6),
       outer=st.one_of(st.none(), st.floats(min_value=0.5, max_value=1e6)))
def test_any_center_and_radius_ends_cleanly(capsys, tmp_path, good_npy, x, y, outer):
    argv = ["count", str(good_npy), "--fps", "30", f"--center={x},{y}", "--out", str(tmp_path / "r"),
            "--force", "--quiet"]
    if outer is not None:
        argv += ["--outer", repr(outer)]
    code, _, err = run_cli(capsys, argv)
    if code != 0:
        assert_clean_failure(code, err)


# --------------------------------------------------------------------------- batch: kill -9 and resume

def _batch_cmd(src: Path, out: Path, jobs: int) -> list[str]:
    return [sys.executable, "-m", "fringecount", "batch", str(src), "--out", str(out), "--jobs", str(jobs),
            "--fps", "30", "--quiet"]


def _snapshot(out: Path) -> dict[str, dict[str, tuple[int, int]]]:
    """Inode and mtime of every file of every complete result folder."""
    snap = {}
    for folder in sorted(out.iterdir()):
        if (folder / "summary.json").exists():
            snap[folder.name] = {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in folder.iterdir()}
    return snap


def _stop_after_results(cmd: list[str], out: Path, n_results: int, how: signal.Signals, env) -> int:
    """Start the batch, send ``how`` once ``n_results`` results are complete; return its exit code."""
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and not (out.is_dir() and len(_snapshot(out)) >= n_results):
            assert proc.poll() is None, proc.stderr.read().decode()
            time.sleep(0.02)
        assert len(_snapshot(out)) >= n_results, f"no {n_results} results within 60 s"
        proc.send_signal(how)
        return proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        proc.stderr.close()


@pytest.mark.slow
def test_batch_stopped_and_killed_resumes_without_losing_results(tmp_path):
    src = tmp_path / "archive"
    src.mkdir()
    n_clips = 4
    for k in range(n_clips):
        np.save(src / f"run_{k}.npy", _frames(n=30, seed=k))
    (src / "broken.avi").write_bytes(b"RIFF\x00\x00\x00\x00AVI junk")
    out = tmp_path / "out"
    env = {**os.environ, "PYTHONWARNINGS": "ignore"}
    # One clip at a time, so that each stop lands after a new result and before the last.
    # 1. SIGTERM (a batch system ending the job): stops like Ctrl-C and writes the table.
    code = _stop_after_results(_batch_cmd(src, out, 1), out, 1, signal.SIGTERM, env)
    assert code == 130
    first = _snapshot(out)
    table = pd.read_csv(out / "batch.csv")
    assert set(table["clip"]) <= {f"run_{k}.npy" for k in range(n_clips)} | {"broken.avi"}
    assert {c for c in table.loc[table["status"] == "ok", "clip"]} == {
        f"run_{k}.npy" for k in range(n_clips) if B.result_folder_name(f"run_{k}.npy") in first}
    # 2. SIGKILL: no cleanup of any kind in the batch process.
    _stop_after_results(_batch_cmd(src, out, 1), out, len(first) + 1, signal.SIGKILL, env)
    second = _snapshot(out)
    assert len(first) < len(second) < n_clips  # stopped part-way through, twice
    # 3. The same command finishes the rest and touches nothing that was finished.
    done = subprocess.run(_batch_cmd(src, out, 2), env=env, capture_output=True, text=True, timeout=120)
    assert done.returncode == 1, done.stderr  # the broken clip failed; exit 1 says so
    after = _snapshot(out)
    assert len(after) == n_clips
    for name, files in second.items():  # finished results untouched: same inodes, same mtimes
        assert after[name] == files
    table = pd.read_csv(out / "batch.csv").set_index("clip")
    assert dict(table["status"]) == {**{f"run_{k}.npy": "ok" for k in range(n_clips)}, "broken.avi": "error"}
    assert table["reused"].sum() == len(second)
    assert not [p.name for p in out.iterdir() if p.name.startswith(".") and p.name != ".batch.lock"]
