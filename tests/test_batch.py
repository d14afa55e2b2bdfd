"""Batch re-analysis: planning (folders, manifests), resumability and failure isolation.

The orchestration tests inject a small clip-analysis function (``analyse=``) so
that they can make a clip fail, crash its worker or hang on purpose; the
end-to-end tests at the bottom run the real ``count`` on synthetic clips.
"""

from __future__ import annotations

import importlib.util
import json
import os
import signal
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import tifffile
from hypothesis import HealthCheck, given, settings, strategies as st

from fringecount import batch as B
from fringecount.errors import ClipError, InputError, SettingsError
from fringecount.settings import CountSettings

#: The running tests write real result folders (fringecount.results) of CountResult objects.
needs_core = pytest.mark.skipif(
    importlib.util.find_spec("fringecount.results") is None or importlib.util.find_spec("fringecount.pipeline") is None,
    reason="fringecount.results / fringecount.pipeline not in this checkout yet")


# --------------------------------------------------------------------------- planning

def _touch(path: Path, data: bytes = b"x") -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(data)
    return path


def test_find_clips_picks_videos_stacks_and_image_folders(tmp_path):
    root = tmp_path / "archive"
    _touch(root / "a.avi")
    _touch(root / "2026" / "b.MP4")
    _touch(root / "2026" / "deep" / "c.mkv")
    _touch(root / "arr.npy")
    (root / "stacks").mkdir()
    for name in ("s1.tif", "s2.tif"):  # multi-page TIFFs: one clip each
        tifffile.imwrite(root / "stacks" / name, np.zeros((3, 8, 8), np.uint8), photometric="minisblack")
    for k in (1, 2, 10):  # a folder of numbered PNGs is one clip
        _touch(root / "seq_png" / f"img{k}.png")
    (root / "seq_tif").mkdir()
    for k in (1, 2, 10):  # numbered single-page TIFFs: one clip too
        tifffile.imwrite(root / "seq_tif" / f"f{k}.tif", np.zeros((4, 4), np.uint8))
    _touch(root / "notes.txt")
    _touch(root / "single" / "only.png")  # one image is not an image folder
    _touch(root / ".hidden" / "x.avi")
    _touch(root / "results" / "old.avi")  # the output folder is excluded
    items = B.find_clips(root, exclude=[root / "results"])
    assert [it.name for it in items] == [
        "2026/b.MP4", "2026/deep/c.mkv", "a.avi", "arr.npy", "seq_png", "seq_tif",
        "stacks/s1.tif", "stacks/s2.tif"]
    assert items[0].clip == root / "2026" / "b.MP4"
    assert all(it.settings == CountSettings() for it in items)


def test_find_clips_empty_folder_is_an_input_error(tmp_path):
    _touch(tmp_path / "readme.txt")
    with pytest.raises(InputError, match="no clips found"):
        B.find_clips(tmp_path)


def test_extensions_agree_with_the_frame_readers():
    # Every extension the batch searches for must be one the readers open.
    from fringecount import frames

    assert set(B.VIDEO_EXTENSIONS) <= set(frames.VIDEO_SUFFIXES)
    assert set(B.IMAGE_EXTENSIONS) | {".tif", ".tiff"} == set(frames.IMAGE_SUFFIXES)


@pytest.mark.parametrize("names", [
    ("a/b.avi", "a__b.avi", "a b.avi", "a_b.avi", "a/b.AVI"),
    ("x.avi", "./x.avi", ".x.avi", "x.avi "),
])
def test_result_folder_names_are_unique_stable_and_safe(names):
    folders = [B.result_folder_name(n) for n in names]
    assert len(set(folders)) == len(names)
    assert folders == [B.result_folder_name(n) for n in names]  # stable
    for f in folders:
        assert not f.startswith(".") and "/" not in f and " " not in f
        assert B._STAGING_RE.match(f".{f}.abc_1234.part")


def _write(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path


def test_csv_manifest_per_clip_settings(tmp_path):
    manifest = _write(tmp_path / "m" / "runs.csv", (
        "# clips of the March campaign\n"
        "path,fps,channel,frames,center,inner,outer,crop,saturation,fixed_center,wavelengths,log_offset,"
        "model,params.thickness,params.angle\n"
        "a.avi,60,green,100:900:2,\"320.5,240\",5,200,\"0,0,640,480\",4000,yes,logs/a.csv,-1.5,"
        "plate-rotation,1.000+/-0.002mm,10deg\n"
        "sub/b.avi,,,,,,,,,,,,,,\n"))
    base = CountSettings(fps=30.0, channel="red")
    first, second = B.read_manifest(manifest, settings=base)
    assert first.name == "a.avi" and first.clip == tmp_path / "m" / "a.avi"
    s = first.settings
    assert (s.fps, s.channel, s.first_frame, s.last_frame, s.step) == (60.0, "green", 100, 900, 2)
    assert s.center == (320.5, 240.0) and (s.inner_radius_px, s.outer_radius_px) == (5.0, 200.0)
    assert s.crop == (0, 0, 640, 480) and s.saturation_level == 4000.0 and s.track_center is False
    assert s.wavelength_log == str(tmp_path / "m" / "logs" / "a.csv") and s.log_offset_s == -1.5
    assert first.model == "plate-rotation"
    assert dict(first.model_params) == {"thickness": "1.000+/-0.002mm", "angle": "10deg"}
    # Empty cells take the command-line settings.
    assert second.settings == base and second.model is None and second.clip == tmp_path / "m" / "sub" / "b.avi"


def test_toml_manifest_defaults_and_params(tmp_path):
    manifest = _write(tmp_path / "runs.toml", """
[defaults]
fps = 25
channel = "gray"
model = "plate-rotation"
params.wavelength = "632.8nm"

[[clip]]
path = "a.avi"
center = [10, 12.5]
frames = "5:"
params.thickness = "1mm"

[[clip]]
path = "/data/b.avi"
fps = 50.0
fixed_center = true
params = { thickness = "2mm", wavelength = "543.5nm" }
""")
    a, b = B.read_manifest(manifest)
    assert a.settings.fps == 25.0 and a.settings.channel == "gray" and a.settings.center == (10.0, 12.5)
    assert (a.settings.first_frame, a.settings.last_frame) == (5, None)
    assert dict(a.model_params) == {"wavelength": "632.8nm", "thickness": "1mm"}
    assert b.clip == Path("/data/b.avi") and b.name == "/data/b.avi"
    assert b.settings.fps == 50.0 and b.settings.track_center is False
    assert dict(b.model_params) == {"thickness": "2mm", "wavelength": "543.5nm"}


@pytest.mark.parametrize("suffix,text,key", [
    (".csv", "path,fsp\na.avi,30\n", "fsp"),
    (".csv", "path,params\na.avi,1\n", "params"),
    (".toml", "[[clip]]\npath = 'a.avi'\nroi = 3\n", "roi"),
    (".toml", "[defaults]\nwavelenghts = 'x.csv'\n[[clip]]\npath = 'a.avi'\n", "wavelenghts"),
    (".toml", "[[clips]]\npath = 'a.avi'\n", "clips"),
])
def test_unknown_manifest_key_is_named(tmp_path, suffix, text, key):
    manifest = _write(tmp_path / f"m{suffix}", text)
    with pytest.raises(SettingsError) as err:
        B.read_manifest(manifest)
    assert repr(key) in str(err.value) and "\n" not in str(err.value)


@pytest.mark.parametrize("suffix,text,fragment", [
    (".csv", "path,fps\na.avi,-30\n", "line 2"),
    (".csv", "path,fps\na.avi,thirty\n", "fps must be a number"),
    (".csv", "path,center\na.avi,\"1,2,3\"\n", "center must be 2 numbers"),
    (".csv", "path,frames\na.avi,9:3\n", "line 2"),
    (".csv", "path,frames\na.avi,a:b\n", "FIRST[:LAST[:STEP]]"),
    (".csv", "path\na.avi\na.avi\n", "listed twice"),
    (".csv", "fps\n30\n", "no 'path' column"),
    (".csv", "path,params.angle\na.avi,10deg\n", "without a model"),
    (".csv", "path,model\na.avi,plate-rotaton\n", "unknown model 'plate-rotaton'"),
    (".csv", "path,model,params.thicknes\na.avi,plate-rotation,1mm\n", "no parameter thicknes"),
    (".csv", "# only a comment\n", "empty"),
    (".toml", "[[clip]]\npath = 'a.avi'\nfps = true\n", "fps must be a number"),
    (".toml", "[[clip]]\npath = 'a.avi'\nfixed_center = 'maybe'\n", "true or false"),
    (".toml", "[[clip]]\nfps = 30\n", "no clip path"),
    (".toml", "[defaults]\nfps = 30\n", "lists no clips"),
    (".toml", "[[clip]\npath = 'a.avi'\n", "not valid TOML"),
    (".txt", "path\na.avi\n", "manifests end in .csv or .toml"),
])
def test_bad_manifest_values_are_one_line_settings_errors(tmp_path, suffix, text, fragment):
    manifest = _write(tmp_path / f"m{suffix}", text)
    with pytest.raises(InputError) as err:
        B.read_manifest(manifest)
    assert fragment in str(err.value) and "\n" not in str(err.value)


def test_manifest_values_are_data_not_code(tmp_path):
    # A value that would run code if evaluated is only ever a bad number.
    marker = tmp_path / "executed"
    manifest = _write(tmp_path / "m.toml",
                      f"[[clip]]\npath = 'a.avi'\nfps = \"__import__('pathlib').Path('{marker}').touch() or 30\"\n")
    with pytest.raises(SettingsError, match="fps must be a number"):
        B.read_manifest(manifest)
    assert not marker.exists()


_CELL_KEYS = ("fps", "channel", "frames", "center", "inner", "outer", "crop", "saturation", "geometry",
              "fixed_center", "min_visibility", "max_step", "hop_range", "log_offset", "air_wavelengths")


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(key=st.sampled_from(_CELL_KEYS), cell=st.text(max_size=30))
def test_any_csv_cell_is_a_setting_or_a_one_line_settings_error(tmp_path, key, cell):
    # Whatever a lab types into a cell, reading the manifest ends in settings or in a
    # SettingsError naming the line, never in another exception.
    import csv as _csv
    import io as _io

    buffer = _io.StringIO()
    _csv.writer(buffer).writerows([["path", key], ["a.avi", cell]])
    manifest = _write(tmp_path / "m.csv", buffer.getvalue())
    try:
        (item,) = B.read_manifest(manifest)
    except SettingsError as exc:
        assert "\n" not in str(exc) and "m.csv" in str(exc)
    else:
        assert isinstance(item.settings, CountSettings)


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(value=st.recursive(st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=10),
                          lambda inner: st.lists(inner, max_size=4), max_leaves=6),
       key=st.sampled_from(_CELL_KEYS + ("path", "model")))
def test_any_toml_value_is_a_setting_or_a_one_line_settings_error(tmp_path, key, value):
    import json as _json

    if value is None:
        return  # TOML has no null
    entry = {"path": "a.avi", key: value}
    lines = ["[[clip]]"] + [f"{k} = {_toml(v)}" for k, v in entry.items()]
    manifest = _write(tmp_path / "m.toml", "\n".join(lines) + "\n")
    try:
        B.read_manifest(manifest)
    except InputError as exc:  # SettingsError, or a bad-TOML error for values TOML cannot hold
        assert "\n" not in str(exc), _json.dumps(str(exc))


def _toml(value) -> str:
    """A Python value as a TOML value (None inside lists becomes an empty string)."""
    import json as _json
    import math as _math

    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and not _math.isfinite(value):
        return "nan" if _math.isnan(value) else ("inf" if value > 0 else "-inf")
    if isinstance(value, list):
        return "[" + ", ".join(_toml("" if v is None else v) for v in value) + "]"
    return _json.dumps(value)


def test_plan_batch_dispatches_and_reports_missing_source(tmp_path):
    _touch(tmp_path / "clips" / "a.avi")
    assert [it.name for it in B.plan_batch(tmp_path / "clips")] == ["a.avi"]
    _write(tmp_path / "m.csv", "path\nclips/a.avi\n")
    assert [it.clip for it in B.plan_batch(tmp_path / "m.csv")] == [tmp_path / "clips" / "a.avi"]
    with pytest.raises(InputError, match="does not exist"):
        B.plan_batch(tmp_path / "nothing")


# --------------------------------------------------------------------------- running (injected analysis)
# The "clips" here are small text files that tell the injected analysis what to do,
# so each failure mode (bad clip, bug, worker crash, hang) happens on purpose.

def _fake_result(total: float, clip: Path, settings: CountSettings):
    from fringecount.pipeline import CountResult

    frames = pd.DataFrame({"frame": [0, 1], "time_s": [0.0, 0.1], "fringes": [0.0, total],
                           "visibility": [0.5, 0.5], "trusted": [True, True]})
    gaps = pd.DataFrame(columns=["first_frame", "last_frame", "reason", "fringes_across",
                                 "fringes_across_sigma", "ambiguous"])
    summary = {"total_fringes": total, "total_fringes_sigma": 0.01, "frames": 2, "fps": 10.0,
               "gaps": [], "clip": str(clip), "settings": settings.to_dict()}
    return CountResult(frames=frames, gaps=gaps, summary=summary, settings=settings)


def scripted_analyse(clip, settings):
    """Analysis injected into the batch: the clip file says what happens."""
    kind, _, arg = Path(clip).read_text().strip().partition(" ")
    if kind == "ok":
        return _fake_result(float(arg), clip, settings)
    if kind == "bad":
        raise ClipError(f"{Path(clip).name} is truncated after frame 3; export it again")
    if kind == "bug":
        raise ZeroDivisionError("division by zero in a stage")
    if kind == "exit":
        os._exit(3)  # a worker that dies without a word
    if kind == "segv":
        os.kill(os.getpid(), signal.SIGSEGV)  # a crashing decoder
    if kind == "hang":
        time.sleep(60)
    if kind == "halfway":  # stopped while its result folder is being staged
        from fringecount._atomic import staged_directory

        with staged_directory(Path(clip).parent.parent / "out" / B.result_folder_name(Path(clip).name)) as stage:
            (stage / "frames.csv").write_text("frame\n0\n")
            time.sleep(60)
    raise AssertionError(kind)


def _archive(root: Path, scripts: dict[str, str]) -> Path:
    for name, script in scripts.items():
        _touch(root / name, script.encode())
    return root


def _stat(folder: Path) -> dict[str, tuple[int, int]]:
    return {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in sorted(folder.iterdir())}


@needs_core
def test_failures_are_isolated_and_reported_per_clip(tmp_path):
    src = _archive(tmp_path / "src", {
        "a_ok.avi": "ok 12.5", "b_bad.avi": "bad", "c_bug.avi": "bug", "d_exit.avi": "exit",
        "e_segv.avi": "segv", "f_ok.avi": "ok -3.25"})
    out = tmp_path / "out"
    seen = []
    report = B.run_batch(src, out, jobs=2, analyse=scripted_analyse, progress=seen.append)
    t = report.table.set_index("clip")
    assert list(report.table["clip"]) == sorted(t.index)  # batch order, not finishing order
    assert sorted(r["clip"] for r in seen) == sorted(t.index)
    assert t.loc["a_ok.avi", "status"] == "ok" and t.loc["a_ok.avi", "total_fringes"] == 12.5
    assert t.loc["f_ok.avi", "total_fringes"] == -3.25 and t.loc["f_ok.avi", "n_gaps"] == 0
    assert t.loc["b_bad.avi", "error"] == "b_bad.avi is truncated after frame 3; export it again"
    assert t.loc["c_bug.avi", "error"].startswith("internal error: ZeroDivisionError")
    assert "exit code 3" in t.loc["d_exit.avi", "error"]
    assert "SIGSEGV" in t.loc["e_segv.avi", "error"]
    assert (t["status"] == "error").sum() == 4 and report.n_failed == 4 and report.n_ok == 2
    assert t.loc["b_bad.avi", ["total_fringes", "result_dir"]].isna().all()
    for clip in ("a_ok.avi", "f_ok.avi"):
        folder = out / t.loc[clip, "result_dir"]
        assert json.loads((folder / "summary.json").read_text())["total_fringes"] == t.loc[clip, "total_fringes"]
    assert not any(p.name.startswith(".") and p.name != ".batch.lock" for p in out.iterdir())
    # The table on disk is the returned one, as CSV and Parquet.
    on_disk = pd.read_csv(out / "batch.csv")
    assert list(on_disk.columns) == list(B.BATCH_COLUMNS)
    assert list(on_disk["status"]) == list(report.table["status"])
    np.testing.assert_array_equal(pd.read_parquet(out / "batch.parquet")["total_fringes"],
                                  report.table["total_fringes"])


@needs_core
def test_rerun_skips_finished_clips_and_retries_failed_ones(tmp_path):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.5", "b.avi": "bad", "c.avi": "ok 2.0"})
    out = tmp_path / "out"
    first = B.run_batch(src, out, jobs=2, analyse=scripted_analyse)
    folders = {name: out / d for name, d in zip(first.table["clip"], first.table["result_dir"]) if isinstance(d, str)}
    before = {name: _stat(f) for name, f in folders.items()}
    (src / "b.avi").write_text("ok 7.0")  # the damaged clip was replaced
    (src / "a.avi").write_text("exit")  # would crash if it were analysed again
    second = B.run_batch(src, out, jobs=2, analyse=scripted_analyse)
    t = second.table.set_index("clip")
    assert list(t["status"]) == ["ok", "ok", "ok"]
    assert list(t["reused"]) == [True, False, True]
    assert t.loc["a.avi", "total_fringes"] == 1.5 and np.isnan(t.loc["a.avi", "elapsed_s"])
    assert t.loc["b.avi", "total_fringes"] == 7.0
    assert {name: _stat(f) for name, f in folders.items()} == before  # untouched
    # --force analyses everything again: a's crash now shows.
    forced = B.run_batch(src, out, jobs=2, analyse=scripted_analyse, force=True).table.set_index("clip")
    assert forced.loc["a.avi", "status"] == "error" and not forced["reused"].any()
    assert (out / t.loc["a.avi", "result_dir"] / "summary.json").exists()  # a failed re-run keeps the old result


@needs_core
def test_stale_staging_is_cleaned_and_interrupted_replacement_restored(tmp_path):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0", "b.avi": "ok 2.0"})
    out = tmp_path / "out"
    B.run_batch(src, out, jobs=0, analyse=scripted_analyse)
    name_a, name_b = B.result_folder_name("a.avi"), B.result_folder_name("b.avi")
    # What kill -9 can leave: a half-written result, a table copy, and a result moved
    # aside for replacement (--force) whose successor never arrived.
    _touch(out / f".{name_a}.k2x_9abc.part" / "frames.csv")
    _touch(out / ".batch.csv.zz81_q0a.part", b"clip,sta")
    os.replace(out / name_b, out / f".{name_b}.p1q2r3s4.old")
    keep = _touch(out / ".notes.part" / "mine.txt")  # not ours: left alone
    removed = B.clean_stale_staging(out)
    assert sorted(p.name for p in removed) == sorted([f".{name_a}.k2x_9abc.part", ".batch.csv.zz81_q0a.part"])
    assert json.loads((out / name_b / "summary.json").read_text())["total_fringes"] == 2.0
    assert keep.exists()


@needs_core
def test_timeout_stops_a_hanging_clip(tmp_path):
    src = _archive(tmp_path / "src", {"a.avi": "hang", "b.avi": "ok 4.0"})
    start = time.monotonic()
    t = B.run_batch(src, tmp_path / "out", jobs=2, timeout_s=1.5, analyse=scripted_analyse).table
    assert time.monotonic() - start < 30  # far below the 60 s the clip would hang
    assert "1.5 s timeout" in t.loc[0, "error"] and t.loc[1, "status"] == "ok"


def test_second_batch_on_the_same_output_is_refused(tmp_path):
    import fcntl

    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0"})
    out = tmp_path / "out"
    out.mkdir()
    with open(out / ".batch.lock", "a+b") as fh:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX)
        with pytest.raises(InputError, match="another batch is writing"):
            B.run_batch(src, out, jobs=0, analyse=scripted_analyse)


@pytest.mark.parametrize("kwargs,fragment", [
    ({"jobs": -1}, "jobs must be"),
    ({"timeout_s": 0.0}, "timeout must be"),
])
def test_bad_run_options(tmp_path, kwargs, fragment):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0"})
    with pytest.raises(InputError, match=fragment):
        B.run_batch(src, tmp_path / "out", analyse=scripted_analyse, **kwargs)


# --------------------------------------------------------------------------- the command line

@pytest.mark.parametrize("argv,fragment", [
    (["{tmp}/nothing", "--out", "{tmp}/out"], "does not exist"),
    (["{tmp}/m.csv", "--out", "{tmp}/out"], "unknown key 'fsp'"),
    (["{tmp}/m.csv", "--out", "{tmp}/out", "--jobs", "0"], "--jobs must be at least 1"),
    (["{tmp}/m.csv", "--out", "{tmp}/out", "--dask", "tcp://127.0.0.1:9", "--timeout", "5"], "local runs only"),
    (["{tmp}/m.csv", "--out", "{tmp}/out", "--fps", "-1"], "fps must be"),
])
def test_cli_bad_invocation_exits_2_with_one_line(tmp_path, capsys, argv, fragment):
    from fringecount.cli import main

    _write(tmp_path / "m.csv", "path,fsp\na.avi,30\n")
    code = main(["batch"] + [a.replace("{tmp}", str(tmp_path)) for a in argv])
    out, err = capsys.readouterr()
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("fringecount: error: ") and fragment in err
    assert not (tmp_path / "out" / "batch.csv").exists()


def test_cli_help_exits_0(capsys):
    from fringecount.cli import main

    with pytest.raises(SystemExit) as exc:
        main(["batch", "--help"])
    assert exc.value.code == 0 and "--dask" in capsys.readouterr().out


@needs_core
def test_reused_result_made_with_other_settings_is_flagged(tmp_path):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0"})
    out = tmp_path / "out"
    first = B.run_batch(src, out, jobs=0, analyse=scripted_analyse, settings=CountSettings(fps=30.0)).table
    same = B.run_batch(src, out, jobs=0, analyse=scripted_analyse, settings=CountSettings(fps=30.0)).table
    other = B.run_batch(src, out, jobs=0, analyse=scripted_analyse, settings=CountSettings(fps=60.0)).table
    assert not first.loc[0, "reused"] and not first.loc[0, "settings_changed"]
    assert same.loc[0, "reused"] and not same.loc[0, "settings_changed"]
    assert other.loc[0, "reused"] and other.loc[0, "settings_changed"]  # kept, but flagged


# --------------------------------------------------------------------------- end to end with the real count

def _ring_clip(n: int = 40, seed: int = 7):
    """40 frames of 96 x 96 rings, about 0.1 fringe per frame at 30 frames/s, with its truth."""
    from fringecount.synthetic import Camera, MirrorSweep, Scene, render_clip

    # 2 v / lambda fringes per second on axis (Michelson, two passes: common practice):
    # 0.95 um/s at 632.99 nm is 3.0 fringes/s, 0.1 fringe per frame.
    frames, truth = render_clip(Scene(), Camera(width=96, height=96, n_subsamples=1),
                                MirrorSweep(velocity_m_s=0.95e-6), n, 30.0, rng=seed)
    return frames, float(truth["fringes"].iloc[-1])


@needs_core
def test_batch_cli_end_to_end_on_every_container(tmp_path, capsys):
    from fringecount.cli import main
    from fringecount.pipeline import count
    from fringecount.synthetic import write_image_folder, write_tiff_stack, write_video

    frames, true_total = _ring_clip()
    src = tmp_path / "archive"
    src.mkdir()
    np.save(src / "raw.npy", frames)
    write_tiff_stack(src / "stacks" / "stack.tif", frames)
    write_image_folder(src / "seq", frames)
    write_video(src / "video" / "clip.avi", frames, 30.0)
    (src / "video" / "broken.mp4").write_bytes(np.random.default_rng(1234).bytes(3000))
    out = tmp_path / "out"

    code = main(["batch", str(src), "--out", str(out), "--fps", "30", "--jobs", "2", "--quiet"])
    assert code == 1, capsys.readouterr().err  # one clip failed
    t = pd.read_csv(out / "batch.csv").set_index("clip")
    assert list(t.index) == ["raw.npy", "seq", "stacks/stack.tif", "video/broken.mp4", "video/clip.avi"]
    assert t.loc["video/broken.mp4", "status"] == "error"
    assert "broken.mp4" in t.loc["video/broken.mp4", "error"] and "internal" not in t.loc["video/broken.mp4", "error"]
    good = t.drop("video/broken.mp4")
    assert (good["status"] == "ok").all() and (good["frames"] == 40).all()
    # The batch passes each clip through count unchanged: same number as a direct call.
    from fringecount.settings import CountSettings

    direct = count(src / "raw.npy", CountSettings(fps=30.0)).summary
    assert good.loc["raw.npy", "total_fringes"] == pytest.approx(direct["total_fringes"], rel=1e-12)
    summary = json.loads((out / good.loc["raw.npy", "result_dir"] / "summary.json").read_text())
    assert summary["total_fringes"] == pytest.approx(direct["total_fringes"], rel=1e-12)
    # Every container of the same recording counts the synthetic truth to within a tenth
    # of a fringe (the resolution a fringe count is usually quoted to: common practice).
    np.testing.assert_allclose(good["total_fringes"], true_total, atol=0.1)

    # Again: nothing is analysed twice, the broken clip is tried again.
    before = {d: _stat(out / d) for d in good["result_dir"]}
    assert main(["batch", str(src), "--out", str(out), "--fps", "30", "--jobs", "2", "--quiet"]) == 1
    again = pd.read_csv(out / "batch.csv").set_index("clip")
    assert again.loc[good.index, "reused"].all() and not again.loc["video/broken.mp4", "reused"]
    assert {d: _stat(out / d) for d in good["result_dir"]} == before


@needs_core
def test_batch_cli_manifest_with_per_clip_settings(tmp_path, capsys):
    from fringecount.cli import main

    frames, _ = _ring_clip()
    np.save(tmp_path / "a.npy", frames)
    np.save(tmp_path / "b.npy", frames)
    manifest = _write(tmp_path / "runs.toml", """
[defaults]
fps = 30

[[clip]]
path = "a.npy"
frames = "0:19"

[[clip]]
path = "b.npy"
fixed_center = true
model = "plate-rotation"
params.thickness = "1.000+/-0.002mm"
params.wavelength = "632.8nm"
params.angle = "5deg"
""")
    code = main(["batch", str(manifest), "--out", str(tmp_path / "out"), "--jobs", "1", "--json"])
    out, err = capsys.readouterr()
    assert code == 0, err
    doc = json.loads(out)
    assert (doc["clips"], doc["ok"], doc["failed"]) == (2, 2, 0)
    rows = {r["clip"]: r for r in doc["rows"]}
    assert rows["a.npy"]["frames"] == 20 and rows["b.npy"]["frames"] == 40
    assert rows["b.npy"]["model"] == "plate-rotation" and rows["a.npy"]["model"] is None
    params = json.loads(rows["b.npy"]["model_params"])
    assert params == {"thickness": "1.000+/-0.002mm", "wavelength": "632.8nm", "angle": "5deg"}
    summary_b = json.loads((tmp_path / "out" / rows["b.npy"]["result_dir"] / "summary.json").read_text())
    assert summary_b["settings"]["track_center"] is False and summary_b["settings"]["fps"] == 30
    # The derived columns are the model run on the clip's own count.
    from fringecount.models import derive_by_name

    index = derive_by_name("plate-rotation", summary_b, **params)["refractive_index"]
    assert rows["b.npy"]["derived_refractive_index"] == pytest.approx(index.value, rel=1e-12)
    assert rows["b.npy"]["derived_refractive_index_sigma"] == pytest.approx(index.uncertainty, rel=1e-12)
    assert rows["b.npy"]["derived_refractive_index_unit"] == ""
    assert rows["a.npy"]["derived_refractive_index"] is None


@needs_core
def test_derive_failure_keeps_the_count_and_marks_the_row(tmp_path):
    src = _archive(tmp_path / "src", {"a.avi": "ok 3.0"})
    item = B.BatchItem(src / "a.avi", "a.avi", model="plate-rotation",
                       model_params={"thickness": "1mm", "angle": "5deg"})  # no wavelength
    t = B.run_batch([item], tmp_path / "out", jobs=0, analyse=scripted_analyse).table
    assert t.loc[0, "status"] == "error" and t.loc[0, "total_fringes"] == 3.0
    assert t.loc[0, "error"].startswith("derive plate-rotation: params.wavelength is required")
    assert (tmp_path / "out" / t.loc[0, "result_dir"] / "summary.json").exists()


@needs_core
def test_a_worker_stopped_mid_write_leaves_no_staging_folder(tmp_path):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0", "b.avi": "halfway"})
    out = tmp_path / "out"
    t = B.run_batch(src, out, jobs=2, timeout_s=2.0, analyse=scripted_analyse).table
    assert list(t["status"]) == ["ok", "error"] and "timeout" in t.loc[1, "error"]
    assert sorted(p.name for p in out.iterdir() if p.name.startswith(".")) == [".batch.lock"]


def test_manifest_examples_in_the_docs_are_valid(tmp_path):
    # docs/batch.md shows a CSV and a TOML manifest: both must read as documented.
    import re

    doc = (Path(__file__).resolve().parents[1] / "docs" / "batch.md").read_text(encoding="utf-8")
    for lang in ("csv", "toml"):
        block = re.search(rf"```{lang}\n(.*?)```", doc, re.S).group(1)
        items = B.read_manifest(_write(tmp_path / f"example.{lang}", block))
        assert items[0].name == "tilt/plate_a.avi" and items[0].settings.center == (318.0, 242.0)
        assert items[0].model == "plate-rotation" and items[0].settings.fps == 60.0


def test_a_folder_of_images_given_as_source_is_one_clip(tmp_path):
    for k in range(3):
        _touch(tmp_path / "run7" / f"img{k}.png")
    (item,) = B.find_clips(tmp_path / "run7")
    assert item.name == "run7" and item.clip == tmp_path / "run7"


@needs_core
def test_table_is_rewritten_while_the_batch_runs(tmp_path):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0", "b.avi": "ok 2.0", "c.avi": "bad"})
    seen_rows = []

    def progress(row):  # the table on disk already holds every clip finished before this one
        table = tmp_path / "out" / "batch.csv"
        seen_rows.append(len(pd.read_csv(table)) if table.exists() else 0)

    B.run_batch(src, tmp_path / "out", jobs=0, analyse=scripted_analyse, progress=progress, flush_every_s=0.0)
    assert seen_rows == [0, 1, 2]
    assert len(pd.read_csv(tmp_path / "out" / "batch.csv")) == 3


def test_an_analysis_that_cannot_reach_a_worker_is_an_input_error(tmp_path):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0"})
    with pytest.raises(InputError, match="module-level function"):
        B.run_batch(src, tmp_path / "out", jobs=1, analyse=lambda clip, settings: None)


@needs_core
def test_cli_lists_failed_clips_at_the_end(tmp_path, capsys, monkeypatch):
    import fringecount.cli.batch as cli_batch
    from fringecount.cli import main

    monkeypatch.setattr(cli_batch, "_LISTED_FAILURES", 2)  # 20 in use; 2 keeps the test short
    src = tmp_path / "src"
    for k in range(3):
        _touch(src / f"bad_{k}.avi", b"not a video")
    assert main(["batch", str(src), "--out", str(tmp_path / "out"), "--jobs", "2"]) == 1
    lines = [ln for ln in capsys.readouterr().err.splitlines() if ln.startswith("fringecount: ")]
    assert lines[0] == f"fringecount: batch: 0 ok (0 already done), 3 failed; table {tmp_path / 'out' / 'batch.csv'}"
    assert [ln.split(":")[2].strip() for ln in lines[1:3]] == ["bad_0.avi", "bad_1.avi"]
    assert lines[3].startswith("fringecount: ... and 1 more failed clips") and len(lines) == 4
