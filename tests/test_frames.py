"""Contract tests for fringecount.frames: every reader behind open_frames behaves alike.

The reference for every pixel check is the frame this test wrote with an outside
library (OpenCV's VideoWriter/imwrite, tifffile, numpy.save): lossless formats
(FFV1, PNG, TIFF, .npy) must return exactly those samples; lossy codecs are
compared within a bound measured for this pattern (see ``LOSSY_TOLERANCE``).
"""

from __future__ import annotations

import logging
import pathlib
import tracemalloc
from dataclasses import dataclass, field

import cv2
import numpy as np
import pytest
import tifffile

from fringecount.errors import ClipError, SettingsError
from fringecount.frames import Frame, FrameSource, open_frames
from fringecount.settings import CHANNELS

ROWS, COLS, N_FRAMES, FPS = 24, 32, 12, 30.0

# Lossy codecs, grey fringe pattern below, OpenCV's default quality. Measured on this
# machine (OpenCV 5.0 / FFmpeg 62): MJPG max 8, mean 1.7 counts; mp4v max 12, mean
# 3.1 counts. The bounds are twice the measured values, so a decoder that returns a
# different frame (errors of ~100 counts) fails while codec noise passes.
LOSSY_TOLERANCE = {"MJPG": (16, 3.5), "mp4v": (24, 6.5)}


def fringe_pattern(k: int, *, dtype=np.uint8, rows: int = ROWS, cols: int = COLS, phase_step: float = 0.6,
                   mean: float | None = None, amplitude: float | None = None) -> np.ndarray:
    """Straight tilted fringes moving by ``phase_step`` rad per frame ``k`` (invented test pattern)."""
    top = np.iinfo(dtype).max if np.dtype(dtype).kind == "u" else 1.0
    mean = 0.5 * top if mean is None else mean
    amplitude = 0.39 * top if amplitude is None else amplitude
    r = np.arange(rows)[:, None]
    c = np.arange(cols)[None, :]
    value = mean + amplitude * np.cos(2 * np.pi * (c / 16 + r / 40) + phase_step * k)
    if np.dtype(dtype).kind == "f":
        return value.astype(dtype)
    return np.clip(np.rint(value), 0, top).astype(dtype)


def grey_stack(n: int = N_FRAMES, dtype=np.uint8, **kw) -> np.ndarray:
    return np.stack([fringe_pattern(k, dtype=dtype, **kw) for k in range(n)])


def red_laser_bgr(n: int = N_FRAMES) -> tuple[np.ndarray, np.ndarray]:
    """A red-only fringe pattern over a dim, steady green/blue background: (BGR frames, red plane)."""
    red = grey_stack(n)
    bgr = np.stack([np.full_like(red, 20), np.full_like(red, 35), red], axis=-1)
    return bgr, red


def write_video(path: pathlib.Path, frames: np.ndarray, fourcc: str, fps: float = FPS) -> pathlib.Path:
    """Write frames (n, rows, cols) grey or (n, rows, cols, 3) BGR with cv2.VideoWriter."""
    if frames.ndim == 3:
        frames = np.repeat(frames[..., None], 3, axis=-1)
    writer = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*fourcc), fps, (frames.shape[2], frames.shape[1]))
    assert writer.isOpened(), f"OpenCV cannot write {fourcc} into {path.suffix} here"
    for image in frames:
        writer.write(np.ascontiguousarray(image))
    writer.release()
    return path


def write_folder(folder: pathlib.Path, frames: np.ndarray, suffix: str = ".png", stem: str = "img") -> pathlib.Path:
    """One image per frame, numbered without zero padding (img0, img1, ..., img10...)."""
    folder.mkdir(parents=True, exist_ok=True)
    for k, image in enumerate(frames):
        assert cv2.imwrite(str(folder / f"{stem}{k}{suffix}"), image)
    return folder


@dataclass
class Case:
    """One recording written by an outside library, and what reading it must give."""

    name: str
    path: pathlib.Path
    expected: np.ndarray                 # (n, rows, cols) plane the reader must return
    dtype: np.dtype
    open_kwargs: dict = field(default_factory=dict)
    tolerance: tuple[float, float] | None = None  # (max, mean) abs error for lossy codecs; None = exact
    channel: str = "gray"


def _build(name: str, tmp: pathlib.Path) -> Case:
    grey8 = grey_stack()
    grey16 = grey_stack(dtype=np.uint16)
    timed = {"fps": FPS}
    if name == "avi-mjpg":
        return Case(name, write_video(tmp / "c.avi", grey8, "MJPG"), grey8, np.dtype(np.uint8),
                    tolerance=LOSSY_TOLERANCE["MJPG"])
    if name == "avi-ffv1":
        return Case(name, write_video(tmp / "c.avi", grey8, "FFV1"), grey8, np.dtype(np.uint8))
    if name == "mkv-ffv1":
        return Case(name, write_video(tmp / "c.mkv", grey8, "FFV1"), grey8, np.dtype(np.uint8))
    if name == "mp4-mp4v":
        return Case(name, write_video(tmp / "c.mp4", grey8, "mp4v"), grey8, np.dtype(np.uint8),
                    tolerance=LOSSY_TOLERANCE["mp4v"])
    if name == "mov-mp4v":
        return Case(name, write_video(tmp / "c.mov", grey8, "mp4v"), grey8, np.dtype(np.uint8),
                    tolerance=LOSSY_TOLERANCE["mp4v"])
    if name == "avi-ffv1-red":
        bgr, red = red_laser_bgr()
        return Case(name, write_video(tmp / "c.avi", bgr, "FFV1"), red, np.dtype(np.uint8), channel="red")
    if name == "png-folder-8":
        return Case(name, write_folder(tmp / "pngs", grey8), grey8, np.dtype(np.uint8), timed)
    if name == "png-folder-16":
        return Case(name, write_folder(tmp / "pngs", grey16), grey16, np.dtype(np.uint16), timed)
    if name == "png-folder-red":
        bgr, red = red_laser_bgr()
        return Case(name, write_folder(tmp / "pngs", bgr), red, np.dtype(np.uint8), timed, channel="red")
    if name == "tif-folder-16":
        return Case(name, write_folder(tmp / "tifs", grey16, ".tif"), grey16, np.dtype(np.uint16), timed)
    if name == "tiff-8":
        tifffile.imwrite(tmp / "s.tif", grey8)
        return Case(name, tmp / "s.tif", grey8, np.dtype(np.uint8), timed)
    if name == "tiff-16":
        tifffile.imwrite(tmp / "s.tiff", grey16)
        return Case(name, tmp / "s.tiff", grey16, np.dtype(np.uint16), timed)
    if name == "tiff-16-zlib":
        tifffile.imwrite(tmp / "s.tif", grey16, compression="zlib")
        return Case(name, tmp / "s.tif", grey16, np.dtype(np.uint16), timed)
    if name == "tiff-rgb-red":
        _, red = red_laser_bgr()
        rgb = np.stack([red, np.full_like(red, 35), np.full_like(red, 20)], axis=-1)
        tifffile.imwrite(tmp / "s.tif", rgb, photometric="rgb")
        return Case(name, tmp / "s.tif", red, np.dtype(np.uint8), timed, channel="red")
    if name == "npy-16":
        np.save(tmp / "s.npy", grey16)
        return Case(name, tmp / "s.npy", grey16, np.dtype(np.uint16), timed)
    raise AssertionError(name)


CASES = ["avi-mjpg", "avi-ffv1", "mkv-ffv1", "mp4-mp4v", "mov-mp4v", "avi-ffv1-red", "png-folder-8",
         "png-folder-16", "png-folder-red", "tif-folder-16", "tiff-8", "tiff-16", "tiff-16-zlib",
         "tiff-rgb-red", "npy-16"]


@pytest.fixture(params=CASES)
def case(request, tmp_path) -> Case:
    return _build(request.param, tmp_path)


def assert_same_image(got: np.ndarray, want: np.ndarray, tolerance) -> None:
    assert got.shape == want.shape
    if tolerance is None:
        np.testing.assert_array_equal(got, want)
    else:
        error = np.abs(got.astype(np.float64) - want.astype(np.float64))
        assert error.max() <= tolerance[0] and error.mean() <= tolerance[1], (error.max(), error.mean())


# -- the contract, for every reader ------------------------------------------------------

def test_contract_shape_type_timing(case):
    with open_frames(case.path, **case.open_kwargs) as clip:
        assert isinstance(clip, FrameSource)
        assert len(clip) == N_FRAMES
        assert clip.frame_shape == (ROWS, COLS)
        assert clip.dtype == case.dtype
        assert clip.fps == FPS
        np.testing.assert_array_equal(clip.indices, np.arange(N_FRAMES))
        np.testing.assert_allclose(clip.times_s, np.arange(N_FRAMES) / FPS, rtol=0, atol=1e-12)
        assert clip.path == case.path
        meta = clip.metadata
        assert meta["n_frames_in_file"] == N_FRAMES
        assert meta["channel"] == case.channel and meta["channel"] in CHANNELS
        assert meta["truncated"] is False and meta["unreadable"] == []
        assert meta["bit_depth"] == 8 * case.dtype.itemsize
        assert {"format", "codec", "fps_source"} <= set(meta)


def test_contract_content_first_last_and_iteration(case):
    with open_frames(case.path, **case.open_kwargs) as clip:
        first, last = clip.get_frame(0), clip.get_frame(len(clip) - 1)
        assert first.ndim == 2 and first.dtype == case.dtype
        assert_same_image(first, case.expected[0], case.tolerance)
        assert_same_image(last, case.expected[-1], case.tolerance)
        frames = list(clip)
        assert [f.index for f in frames] == list(range(N_FRAMES))
        for f in frames:
            assert isinstance(f, Frame)
            assert f.time_s == pytest.approx(f.index / FPS, abs=1e-12)
            assert f.image.shape == (ROWS, COLS) and f.image.dtype == case.dtype
            assert_same_image(f.image, case.expected[f.index], case.tolerance)
        # Random access decodes exactly what the sequential pass decoded, in any order.
        for k in np.random.default_rng(1234).permutation(N_FRAMES):
            np.testing.assert_array_equal(clip.get_frame(int(k)), frames[k].image)
        np.testing.assert_array_equal(clip[-1], frames[-1].image)
        # A returned frame is the caller's: writing to it does not change the source.
        first[...] = 0
        assert_same_image(clip.get_frame(0), case.expected[0], case.tolerance)


def test_contract_range_and_stride(case):
    with open_frames(case.path, first_frame=2, last_frame=9, step=3, **case.open_kwargs) as clip:
        np.testing.assert_array_equal(clip.indices, [2, 5, 8])
        np.testing.assert_allclose(clip.times_s, np.array([2, 5, 8]) / FPS, rtol=0, atol=1e-12)
        assert len(clip) == 3
        frames = list(clip)
        assert [f.index for f in frames] == [2, 5, 8]
        for f in frames:
            assert_same_image(f.image, case.expected[f.index], case.tolerance)
        assert_same_image(clip.get_frame(1), case.expected[5], case.tolerance)
        with pytest.raises(IndexError):
            clip.get_frame(3)
    with open_frames(case.path, first_frame=N_FRAMES - 1, **case.open_kwargs) as clip:
        assert clip.indices.tolist() == [N_FRAMES - 1]


@pytest.mark.parametrize("first, last", [(N_FRAMES, None), (0, N_FRAMES), (5, 400)])
def test_contract_range_beyond_clip_names_length(case, first, last):
    with pytest.raises(SettingsError, match=f"has {N_FRAMES} frames"):
        open_frames(case.path, first_frame=first, last_frame=last, **case.open_kwargs)


def test_contract_context_manager_closes(case):
    with open_frames(case.path, **case.open_kwargs) as clip:
        clip.get_frame(0)
    with pytest.raises(ValueError, match="closed"):
        clip.get_frame(0)
    with pytest.raises(ValueError, match="closed"):
        next(iter(clip))
    clip.close()   # closing twice is harmless


def test_contract_stopping_iteration_early_and_restarting(case):
    with open_frames(case.path, **case.open_kwargs) as clip:
        for f in clip:
            if f.index == 3:
                break
        assert [f.index for f in clip] == list(range(N_FRAMES))


# -- range and argument checks -----------------------------------------------------------

@pytest.mark.parametrize("kwargs, match", [
    (dict(step=0), "step >= 1"),
    (dict(first_frame=-1), "first >= 0"),
    (dict(first_frame=5, last_frame=4), "comes before"),
    (dict(first_frame=1.5), "whole number"),
    (dict(step=True), "whole number"),
    (dict(channel="infrared"), "channel must be one of"),
])
def test_bad_range_or_channel_is_settings_error(tmp_path, kwargs, match):
    np.save(tmp_path / "s.npy", grey_stack())
    with pytest.raises(SettingsError, match=match):
        open_frames(tmp_path / "s.npy", fps=FPS, **kwargs)


@pytest.mark.parametrize("fps", [0, -5, float("nan"), float("inf"), 2e6, "fast", True])
def test_absurd_fps_is_settings_error(tmp_path, fps):
    path = write_video(tmp_path / "c.avi", grey_stack(3), "MJPG")
    with pytest.raises(SettingsError, match="fps"):
        open_frames(path, fps=fps)


def test_missing_path_is_clip_error(tmp_path):
    with pytest.raises(ClipError, match=r"^no such file: .*nothere\.avi; check the path$"):
        open_frames(tmp_path / "nothere.avi")


@pytest.mark.parametrize("name, content, match", [
    ("notes.txt", b"hello", "unknown file type '.txt'"),
    ("noext", b"hello", "unknown file type '\\(no extension\\)'"),
    ("clip.avi", b"", "is empty"),
    ("clip.mp4", b"", "is empty"),
    ("stack.tif", b"", "is empty"),
    ("clip.avi", b"not a video at all" * 40, "not in AVI format"),
    ("clip.mkv", b"\x00" * 500, "not in Matroska format"),
    ("stack.tif", b"GIF89a" + b"\x00" * 200, "not in TIFF format"),
    ("stack.tif", b"II*\x00\xff\xff\xff\x7f" + b"\x00" * 50, "cannot read TIFF"),
    ("clip.avi", b"RIFF\x00\x10\x00\x00AVI LIST" + b"\x00" * 600, "cannot open clip.avi as a video"),
    ("array.npy", b"\x93NUMPY\x01\x00" + b"\x00" * 40, "cannot read array.npy"),
])
def test_bad_files_are_one_line_clip_errors(tmp_path, name, content, match):
    (tmp_path / name).write_bytes(content)
    with pytest.raises(ClipError, match=match) as info:
        open_frames(tmp_path / name, fps=FPS)
    assert "\n" not in str(info.value)


def test_unsupported_array_layouts_and_types(tmp_path):
    np.save(tmp_path / "five.npy", np.zeros((2, 2, 3, 4, 5), np.uint8))
    with pytest.raises(ClipError, match="shape"):
        open_frames(tmp_path / "five.npy", fps=FPS)
    np.save(tmp_path / "int32.npy", np.zeros((2, 4, 5), np.int32))
    with pytest.raises(ClipError, match="int32 samples"):
        open_frames(tmp_path / "int32.npy", fps=FPS)
    tifffile.imwrite(tmp_path / "tzyx.tif", np.zeros((2, 3, 4, 5), np.uint8), imagej=True,
                     metadata={"axes": "TZYX"})
    with pytest.raises(ClipError, match="stack of 2-D frames"):
        open_frames(tmp_path / "tzyx.tif", fps=FPS)


# -- channels ------------------------------------------------------------------------------

def test_auto_channel_picks_red_for_red_laser_lossy_video(tmp_path):
    bgr, red = red_laser_bgr()
    path = write_video(tmp_path / "red.avi", bgr, "MJPG")
    with open_frames(path) as clip:
        assert clip.metadata["channel"] == "red"
        scores = clip.metadata["channel_scores"]
        assert scores["red"] > 3 * max(scores["green"], scores["blue"])
        # JPEG subsamples chroma 2:1 (4:2:0), so a red-only pattern is rougher than grey: the
        # correlation with what was written is the check here, not a pixel bound.
        got = clip.get_frame(4).astype(float).ravel()
        assert np.corrcoef(got, red[4].astype(float).ravel())[0, 1] > 0.98


def test_auto_channel_prefers_gray_when_all_channels_carry_fringes(tmp_path):
    path = write_video(tmp_path / "grey.avi", grey_stack(), "FFV1")
    with open_frames(path) as clip:
        assert clip.metadata["channel"] == "gray"


def test_auto_channel_skips_a_saturated_channel(tmp_path):
    # Red is clipped at 255 over more than half the frame (invented overexposed laser);
    # its changes are larger than green's, yet green carries usable fringes.
    red = grey_stack(mean=300.0, amplitude=300.0)
    green = grey_stack(mean=128.0, amplitude=60.0)
    assert np.mean(red == 255) > 0.5
    rgb = np.stack([red, green, np.zeros_like(red)], axis=-1)
    np.save(tmp_path / "rgb.npy", rgb)
    with open_frames(tmp_path / "rgb.npy", fps=FPS) as clip:
        assert clip.metadata["channel_scores"]["red"] > clip.metadata["channel_scores"]["green"]
        assert clip.metadata["channel"] == "green"
        np.testing.assert_array_equal(clip.get_frame(3), green[3])


def test_explicit_channels_and_bt601_luma(tmp_path):
    rng = np.random.default_rng(1234)
    bgr = rng.integers(0, 256, size=(3, ROWS, COLS, 3), dtype=np.uint8)
    path = write_video(tmp_path / "noise.avi", bgr, "FFV1")
    for name, plane in (("blue", 0), ("green", 1), ("red", 2)):
        with open_frames(path, channel=name) as clip:
            assert clip.metadata["channel"] == name
            np.testing.assert_array_equal(clip.get_frame(1), bgr[1, :, :, plane])
    with open_frames(path, channel="gray") as clip:
        # ITU-R BT.601 luma weights; OpenCV computes them in fixed point, within 1 count.
        b, g, r = (bgr[2, :, :, i].astype(float) for i in range(3))
        luma = 0.299 * r + 0.587 * g + 0.114 * b
        assert np.abs(clip.get_frame(2).astype(float) - luma).max() <= 1.0


def test_single_channel_data_pass_through_any_channel(tmp_path):
    np.save(tmp_path / "s.npy", grey_stack())
    with open_frames(tmp_path / "s.npy", fps=FPS, channel="red") as clip:
        assert clip.metadata["channel"] == "gray" and clip.metadata["colour"] is False
        np.testing.assert_array_equal(clip.get_frame(2), grey_stack()[2])


# -- videos --------------------------------------------------------------------------------

def test_truncated_video_reads_the_decodable_frames(tmp_path, caplog):
    n = 30
    frames = grey_stack(n)
    whole = write_video(tmp_path / "whole.avi", frames, "MJPG").read_bytes()
    cut = tmp_path / "cut.avi"
    cut.write_bytes(whole[: int(len(whole) * 0.6)])
    with caplog.at_level(logging.WARNING, logger="fringecount.frames"):
        clip = open_frames(cut)
    with clip:
        assert clip.metadata["truncated"] is True
        assert clip.metadata["n_frames_reported"] == n
        assert 0 < len(clip) < n
        assert any("truncated" in r.getMessage() for r in caplog.records)
        decoded = list(clip)
        assert [f.index for f in decoded] == list(range(len(clip)))
        for f in decoded:
            assert_same_image(f.image, frames[f.index], LOSSY_TOLERANCE["MJPG"])
        with pytest.raises(SettingsError, match=f"has {len(clip)} frames"):
            open_frames(cut, last_frame=n - 1)


def test_video_fps_override_and_container_rate(tmp_path):
    path = write_video(tmp_path / "c.avi", grey_stack(5), "FFV1", fps=12.5)
    with open_frames(path) as clip:
        assert clip.fps == 12.5 and clip.metadata["fps_source"] == "container"
        list(clip)
        # Container timestamps of a constant-rate file agree with index / fps.
        assert clip.metadata["timestamp_deviation_s"] == pytest.approx(0.0, abs=1e-3)
    with open_frames(path, fps=1000) as clip:
        assert clip.fps == 1000.0 and clip.metadata["fps_source"] == "override"
        np.testing.assert_allclose(clip.times_s, np.arange(5) / 1000.0)


def test_video_range_far_into_the_clip_seeks_once_and_stays_exact(tmp_path):
    n = 100
    frames = np.stack([np.full((ROWS, COLS), k * 2, np.uint8) for k in range(n)])
    frames[:, :4, :4] = 255 - frames[:, :4, :4]
    path = write_video(tmp_path / "long.avi", frames, "FFV1")
    with open_frames(path, first_frame=80, step=7) as clip:
        assert clip.indices.tolist() == [80, 87, 94]
        for f in clip:
            np.testing.assert_array_equal(f.image, frames[f.index])
        np.testing.assert_array_equal(clip.get_frame(0), frames[80])


# -- image folders ---------------------------------------------------------------------------

def test_folder_natural_order_and_other_files_ignored(tmp_path):
    frames = np.stack([np.full((ROWS, COLS), 10 * k, np.uint8) for k in range(12)])
    folder = write_folder(tmp_path / "f", frames, stem="shot_")
    (folder / "notes.txt").write_text("not a frame")
    (folder / ".hidden.png").write_bytes(b"junk")
    (folder / "sub.png").mkdir()
    with open_frames(folder, fps=FPS) as clip:
        assert len(clip) == 12
        assert [int(f.image[0, 0]) for f in clip] == [10 * k for k in range(12)]   # shot_2 before shot_10
        assert clip.metadata["first_file"] == "shot_0.png" and clip.metadata["last_file"] == "shot_11.png"


def test_folder_skips_a_bad_image_and_records_it(tmp_path, caplog):
    frames = grey_stack(6)
    folder = write_folder(tmp_path / "f", frames)
    (folder / "img3.png").write_bytes(b"\x89PNG\r\n\x1a\n broken")
    assert cv2.imwrite(str(folder / "img4.png"), np.zeros((ROWS + 2, COLS), np.uint8))   # wrong size
    with open_frames(folder, fps=FPS) as clip:
        assert len(clip) == 6
        with caplog.at_level(logging.WARNING, logger="fringecount.frames"):
            got = list(clip)
        assert [f.index for f in got] == [0, 1, 2, 5]
        assert clip.metadata["unreadable"] == [3, 4]
        messages = " ".join(r.getMessage() for r in caplog.records)
        assert "img3.png" in messages and "shape" in messages
        with pytest.raises(ClipError, match="img3.png"):
            clip.get_frame(3)


def test_folder_needs_fps_images_and_a_readable_first_file(tmp_path):
    folder = write_folder(tmp_path / "f", grey_stack(3))
    with pytest.raises(ClipError, match="pass --fps"):
        open_frames(folder)
    (folder / "img0.png").write_bytes(b"garbage")
    with pytest.raises(ClipError, match="first frame.*img0.png"):
        open_frames(folder, fps=FPS)
    with open_frames(folder, fps=FPS, first_frame=1) as clip:
        assert len(clip) == 2
    empty = tmp_path / "empty"
    empty.mkdir()
    (empty / "readme.txt").write_text("no frames here")
    with pytest.raises(ClipError, match="holds no images"):
        open_frames(empty, fps=FPS)


def test_single_image_file_is_one_frame(tmp_path):
    image = grey_stack(1, dtype=np.uint16)[0]
    assert cv2.imwrite(str(tmp_path / "one.png"), image)
    with open_frames(tmp_path / "one.png", fps=FPS) as clip:
        assert len(clip) == 1 and clip.dtype == np.uint16
        np.testing.assert_array_equal(clip.get_frame(0), image)


# -- TIFF ------------------------------------------------------------------------------------

def test_tiff_single_page_float_and_imagej_interval(tmp_path):
    page = grey_stack(1, dtype=np.float64)[0]
    tifffile.imwrite(tmp_path / "one.tif", page)
    with open_frames(tmp_path / "one.tif", fps=FPS) as clip:
        assert len(clip) == 1 and clip.dtype == np.float32
        np.testing.assert_array_equal(clip.get_frame(0), page.astype(np.float32))
    with pytest.raises(ClipError, match="has no frame rate; pass --fps"):
        open_frames(tmp_path / "one.tif")
    tifffile.imwrite(tmp_path / "ij.tif", grey_stack(4), imagej=True, metadata={"axes": "TYX", "finterval": 0.04})
    with open_frames(tmp_path / "ij.tif") as clip:
        assert clip.fps == pytest.approx(25.0) and clip.metadata["fps_source"] == "ImageJ frame interval"


@pytest.mark.parametrize("make, bits, source", [
    # 12-bit camera data shifted into the top of 16-bit words (low 4 bits zero).
    (lambda: grey_stack(dtype=np.uint16, mean=2048, amplitude=1800) << 4, 12, "low bits always zero"),
    # 12-bit data in the low bits with saturated pixels at the 12-bit clip level 4095.
    (lambda: np.minimum(grey_stack(dtype=np.uint16, mean=3000, amplitude=1800), 4095), 12, "clip level"),
    # Full 16-bit data.
    (lambda: grey_stack(dtype=np.uint16), 16, "container"),
])
def test_tiff_bit_depth_from_data(tmp_path, make, bits, source):
    tifffile.imwrite(tmp_path / "s.tif", make())
    with open_frames(tmp_path / "s.tif", fps=FPS) as clip:
        assert (clip.metadata["bit_depth"], clip.metadata["bit_depth_source"]) == (bits, source)
        assert clip.dtype == np.uint16


def test_tiff_bit_depth_from_max_sample_value_tag(tmp_path):
    data = grey_stack(dtype=np.uint16, mean=500, amplitude=300)
    tifffile.imwrite(tmp_path / "s.tif", data, extratags=[(281, "H", 1, 1023, True)])
    with open_frames(tmp_path / "s.tif", fps=FPS) as clip:
        assert (clip.metadata["bit_depth"], clip.metadata["bit_depth_source"]) == (10, "file tag")


# -- memory stays flat -------------------------------------------------------------------------

@pytest.mark.parametrize("kind", ["npy", "tiff", "tiff-zlib"])
def test_iteration_memory_does_not_grow_with_clip_length(tmp_path, kind):
    n, side = 400, 64
    stack = np.stack([np.full((side, side), k, np.uint16) for k in range(n)])
    if kind == "npy":
        path = tmp_path / "big.npy"
        np.save(path, stack)
    else:
        path = tmp_path / "big.tif"
        tifffile.imwrite(path, stack, compression="zlib" if kind == "tiff-zlib" else None)
    clip_bytes = stack.nbytes
    del stack
    with open_frames(path, fps=FPS) as clip:
        tracemalloc.start()
        try:
            total = 0
            for f in clip:
                total += int(f.image[0, 0])
            _, peak = tracemalloc.get_traced_memory()
        finally:
            tracemalloc.stop()
    assert total == n * (n - 1) // 2
    # Whole clip: 3.3 MB. Streaming holds a few frames (8 kB each) plus per-page
    # bookkeeping; a fifth of the clip leaves room for that and fails any full read.
    assert peak < clip_bytes / 5, peak


# -- containers that lie about their length, files cut short ----------------------------------

def _avi_with_claimed_length(path: pathlib.Path, claim: int) -> pathlib.Path:
    """Rewrite the frame count in an AVI's main header (avih dwTotalFrames) and stream
    header (strh dwLength), as laid out in the AVI RIFF format (Microsoft, from memory)."""
    data = bytearray(path.read_bytes())
    avih, strh = data.find(b"avih"), data.find(b"strh")
    assert avih > 0 and strh > 0
    data[avih + 24: avih + 28] = claim.to_bytes(4, "little")
    data[strh + 40: strh + 44] = claim.to_bytes(4, "little")
    out = path.with_name(f"claims{claim}.avi")
    out.write_bytes(bytes(data))
    return out


@pytest.mark.parametrize("claim", [5, 30])
def test_video_header_frame_count_is_verified(tmp_path, claim, caplog):
    frames = grey_stack()
    path = _avi_with_claimed_length(write_video(tmp_path / "c.avi", frames, "FFV1"), claim)
    assert cv2.VideoCapture(str(path)).get(cv2.CAP_PROP_FRAME_COUNT) == claim   # OpenCV believes the header
    with caplog.at_level(logging.INFO, logger="fringecount.frames"):
        clip = open_frames(path)
    with clip:
        assert len(clip) == N_FRAMES and clip.metadata["n_frames_reported"] == claim
        assert clip.metadata["truncated"] is False          # complete file, only the header was wrong
        assert str(N_FRAMES) in " ".join(r.getMessage() for r in caplog.records)
        for f in clip:
            np.testing.assert_array_equal(f.image, frames[f.index])


def test_cut_files_are_recognised_by_their_size_fields(tmp_path):
    from fringecount._readers.video import file_is_cut
    for name, fourcc in (("c.avi", "MJPG"), ("c.mp4", "mp4v"), ("c.mkv", "MJPG"), ("c.mov", "mp4v")):
        whole = write_video(tmp_path / name, grey_stack(6), fourcc)
        assert file_is_cut(whole) is False, name
        cut = tmp_path / f"cut_{name}"
        cut.write_bytes(whole.read_bytes()[: whole.stat().st_size * 2 // 3])
        assert file_is_cut(cut) is True, name


@pytest.mark.parametrize("kind", ["tiff", "npy"])
def test_cut_stack_gives_its_complete_frames(tmp_path, kind, caplog):
    frames = grey_stack(dtype=np.uint16)
    path = tmp_path / ("s.tif" if kind == "tiff" else "s.npy")
    if kind == "tiff":
        tifffile.imwrite(path, frames)
    else:
        np.save(path, frames)
    frame_bytes = frames[0].nbytes
    whole = path.read_bytes()
    # Cut in the middle of frame 7 (frames are stored last, contiguously, in both files here).
    keep = len(whole) - (N_FRAMES - 7) * frame_bytes + frame_bytes // 2
    if kind == "tiff":
        with tifffile.TiffFile(path) as tif:
            keep = tif.series[0].dataoffset + 7 * frame_bytes + frame_bytes // 2
    path.write_bytes(whole[:keep])
    with caplog.at_level(logging.WARNING, logger="fringecount.frames"):
        clip = open_frames(path, fps=FPS)
    with clip:
        assert len(clip) == 7 and clip.metadata["truncated"] is True
        assert "truncated" in caplog.text
        for f in clip:
            np.testing.assert_array_equal(f.image, frames[f.index])


@pytest.mark.parametrize("fourcc, suffix", [("mp4v", ".mp4"), ("MJPG", ".avi")])
def test_late_range_matches_a_plain_sequential_decode(tmp_path, fourcc, suffix):
    n = 90
    frames = np.stack([fringe_pattern(k, phase_step=0.37) for k in range(n)])
    path = write_video(tmp_path / f"long{suffix}", frames, fourcc)
    capture = cv2.VideoCapture(str(path))           # reference: OpenCV read front to back, no seeking
    decoded = []
    while True:
        ok, image = capture.read()
        if not ok:
            break
        decoded.append(cv2.cvtColor(image, cv2.COLOR_BGR2GRAY))
    capture.release()
    assert len(decoded) == n
    with open_frames(path, first_frame=70, last_frame=88, step=6, channel="gray") as clip:
        got = list(clip)
        assert [f.index for f in got] == [70, 76, 82, 88]
        for f in got:
            np.testing.assert_array_equal(f.image, decoded[f.index])
        for k in (3, 0, 2, 1):                       # random access seeks; it must land on the same frames
            np.testing.assert_array_equal(clip.get_frame(k), decoded[int(clip.indices[k])])
