"""Fuzz open_frames with damaged input: it ends in InputError or a usable (shorter) source.

Never another exception, never a hang: a watchdog (faulthandler) aborts the run
with a stack dump if one case takes longer than ``HANG_LIMIT_S``. Example counts
stay modest so the suite runs in seconds.
"""

from __future__ import annotations

import faulthandler
import math
import pathlib
import tempfile

import numpy as np
import pytest
import tifffile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fringecount.errors import ClipError, InputError, SettingsError
from fringecount.frames import open_frames
from test_frames import FPS, grey_stack, write_folder, write_video

#: A single open-and-read of these tiny files takes milliseconds; a minute means a hang.
HANG_LIMIT_S = 60
FUZZ = settings(max_examples=40, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])

#: Headers that get random bytes past the first sniffing and into the real parsers.
HEADERS = {
    "none": b"",
    "riff-avi": b"RIFF\x00\x10\x00\x00AVI LIST",
    "iso-mp4": b"\x00\x00\x00\x18ftypisom\x00\x00\x02\x00isomiso2",
    "ebml-mkv": b"\x1a\x45\xdf\xa3\x9f\x42\x86\x81\x01",
    "tiff-le": b"II*\x00\x08\x00\x00\x00",
    "tiff-be": b"MM\x00*\x00\x00\x00\x08",
    "png": b"\x89PNG\r\n\x1a\n",
    "npy": b"\x93NUMPY\x01\x00",
    "jpeg": b"\xff\xd8\xff\xe0",
    "bmp": b"BM",
}
SUFFIXES = [".avi", ".mp4", ".mov", ".mkv", ".tif", ".tiff", ".png", ".jpg", ".bmp", ".npy"]


@pytest.fixture(autouse=True)
def watchdog():
    faulthandler.dump_traceback_later(HANG_LIMIT_S, exit=True)
    yield
    faulthandler.cancel_dump_traceback_later()


def exercise(path: pathlib.Path, **kwargs) -> dict | InputError:
    """Open and read everything; return the InputError raised, or what was read."""
    try:
        with open_frames(path, **kwargs) as clip:
            n = len(clip)
            assert n >= 1 and clip.indices.shape == (n,) and clip.times_s.shape == (n,)
            assert np.all(np.isfinite(clip.times_s)) and math.isfinite(clip.fps) and clip.fps > 0
            frames = list(clip)
            for f in frames:
                assert f.image.shape == clip.frame_shape and f.image.dtype == clip.dtype
            indices = [f.index for f in frames]
            assert indices == sorted(indices) and set(indices) <= set(clip.indices.tolist())
            clip.get_frame(0)
            clip.get_frame(n - 1) if n - 1 not in clip.metadata["unreadable"] else None
            return {"len": n, "decoded": len(frames), "meta": dict(clip.metadata), "frames": frames}
    except InputError as exc:
        assert "\n" not in str(exc) and str(exc)
        return exc


@FUZZ
@given(header=st.sampled_from(sorted(HEADERS)), body=st.binary(max_size=3000), suffix=st.sampled_from(SUFFIXES))
def test_random_bytes_end_in_input_error(header, body, suffix):
    with tempfile.TemporaryDirectory() as tmp:
        path = pathlib.Path(tmp) / f"junk{suffix}"
        path.write_bytes(HEADERS[header] + body)
        outcome = exercise(path, fps=FPS)
        # Random bytes are not a recording: a decoded "frame" from them would be a reader bug.
        assert isinstance(outcome, InputError), outcome


@pytest.mark.parametrize("suffix", SUFFIXES)
def test_zero_length_file_is_clip_error(tmp_path, suffix):
    (tmp_path / f"empty{suffix}").write_bytes(b"")
    with pytest.raises(ClipError, match="is empty"):
        open_frames(tmp_path / f"empty{suffix}", fps=FPS)


N_VALID = 20


def _valid_recordings(folder: pathlib.Path) -> dict[str, tuple[pathlib.Path, np.ndarray, bool]]:
    """name -> (path, frames written, lossless?)."""
    frames = grey_stack(N_VALID)
    frames16 = grey_stack(N_VALID, dtype=np.uint16)
    out = {
        "avi-mjpg": (write_video(folder / "c.avi", frames, "MJPG"), frames, False),
        "avi-ffv1": (write_video(folder / "f.avi", frames, "FFV1"), frames, True),
        "mkv-mjpg": (write_video(folder / "c.mkv", frames, "MJPG"), frames, False),
        "mp4-mp4v": (write_video(folder / "c.mp4", frames, "mp4v"), frames, False),
    }
    tifffile.imwrite(folder / "s.tif", frames16)
    tifffile.imwrite(folder / "z.tif", frames16, compression="zlib")
    np.save(folder / "s.npy", frames16)
    out["tiff-16"] = (folder / "s.tif", frames16, True)
    out["tiff-zlib"] = (folder / "z.tif", frames16, True)
    out["npy"] = (folder / "s.npy", frames16, True)
    return out


@pytest.fixture(scope="module")
def valid(tmp_path_factory):
    return _valid_recordings(tmp_path_factory.mktemp("valid"))


@pytest.mark.parametrize("name", ["avi-mjpg", "avi-ffv1", "mkv-mjpg", "mp4-mp4v", "tiff-16", "tiff-zlib", "npy"])
@settings(max_examples=15, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(fraction=st.floats(0.0, 1.0, exclude_max=True))
def test_truncated_copies_end_in_input_error_or_a_shorter_source(valid, name, fraction):
    source, frames, lossless = valid[name]
    data = source.read_bytes()
    with tempfile.TemporaryDirectory() as tmp:
        cut = pathlib.Path(tmp) / f"cut{source.suffix}"
        cut.write_bytes(data[: int(len(data) * fraction)])
        kwargs = {} if source.suffix in (".avi", ".mkv", ".mp4") else {"fps": FPS}
        outcome = exercise(cut, **kwargs)
        if isinstance(outcome, InputError):
            return
        assert outcome["len"] <= N_VALID
        if outcome["len"] < N_VALID:
            assert outcome["meta"]["truncated"] is True
        if source.suffix in (".avi", ".mkv", ".mp4"):
            assert outcome["decoded"] == outcome["len"]
        else:
            assert outcome["decoded"] + len(outcome["meta"]["unreadable"]) == outcome["len"]
        if lossless:
            # What decodes from a cut lossless file is exactly what was written (no partial frame).
            for f in outcome["frames"]:
                np.testing.assert_array_equal(f.image, frames[f.index])


@FUZZ
@given(offset=st.floats(0.05, 0.95), junk=st.binary(min_size=1, max_size=64))
def test_damaged_middle_of_a_video_ends_in_input_error_or_frames(valid, offset, junk):
    source, _, _ = valid["avi-mjpg"]
    data = bytearray(source.read_bytes())
    at = int(len(data) * offset)
    data[at: at + len(junk)] = junk
    with tempfile.TemporaryDirectory() as tmp:
        path = pathlib.Path(tmp) / "damaged.avi"
        path.write_bytes(bytes(data))
        exercise(path)


@settings(max_examples=25, deadline=None, derandomize=True)
@given(n=st.integers(2, 7), data=st.data(), junk=st.binary(max_size=200))
def test_folder_with_one_bad_image(n, data, junk):
    bad = data.draw(st.integers(0, n - 1), label="bad")
    with tempfile.TemporaryDirectory() as tmp:
        folder = write_folder(pathlib.Path(tmp) / "frames", grey_stack(n))
        broken = folder / f"img{bad}.png"
        whole = broken.read_bytes()
        # Either random bytes behind a PNG signature or the real file cut short.
        cut = data.draw(st.integers(0, len(whole) - 1), label="cut")
        broken.write_bytes(b"\x89PNG\r\n\x1a\n" + junk if data.draw(st.booleans(), label="junk") else whole[:cut])
        outcome = exercise(folder, fps=FPS)
        if bad == 0:
            assert isinstance(outcome, ClipError) and "img0.png" in str(outcome)
        else:
            assert not isinstance(outcome, InputError), outcome
            assert outcome["len"] == n
            assert [f.index for f in outcome["frames"]] == [k for k in range(n) if k != bad]
            assert outcome["meta"]["unreadable"] == [bad]


@pytest.fixture(scope="module")
def small_npy(tmp_path_factory):
    path = tmp_path_factory.mktemp("npy") / "s.npy"
    np.save(path, grey_stack(3))
    return path


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(fps=st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.integers(-10**12, 10**12),
                     st.text(max_size=5), st.none()))
def test_any_fps_value_is_used_or_a_settings_error(small_npy, fps):
    valid = fps is None or (not isinstance(fps, str) and math.isfinite(fps) and 0 < fps <= 1e6)
    if fps is None:
        with pytest.raises(ClipError, match="pass --fps"):
            open_frames(small_npy, fps=fps)
    elif valid:
        with open_frames(small_npy, fps=fps) as clip:
            assert clip.fps == float(fps)
            np.testing.assert_allclose(clip.times_s, np.arange(3) / float(fps))
    else:
        with pytest.raises(SettingsError, match="fps"):
            open_frames(small_npy, fps=fps)
