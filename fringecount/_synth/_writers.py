"""Writing synthetic frames to video files, image folders and TIFF stacks (atomically)."""

from __future__ import annotations

import itertools
import os
import shutil
import tempfile
from pathlib import Path
from typing import Iterable

import numpy as np

from ..errors import InputError

__all__ = ["write_video", "write_image_folder", "write_tiff_stack", "VIDEO_CODECS"]

#: fourcc -> (allowed extensions, lossless?). Checked against this project's OpenCV
#: build (opencv-python-headless 5.0 with FFmpeg): all of these open, write and read back.
VIDEO_CODECS = {
    "MJPG": ((".avi",), False),          # Motion JPEG; readable everywhere
    "mp4v": ((".mp4",), False),          # MPEG-4 part 2
    "FFV1": ((".mkv", ".avi"), True),    # FFmpeg lossless codec
    "HFYU": ((".avi",), True),           # HuffYUV lossless
}


def _peek(frames: Iterable[np.ndarray]) -> tuple[np.ndarray, Iterable[np.ndarray]]:
    it = iter(frames)
    try:
        first = next(it)
    except StopIteration:
        raise InputError("no frames to write; pass at least one frame") from None
    return first, itertools.chain([first], it)


def _check_frame(frame: np.ndarray, shape: tuple, dtypes: tuple) -> np.ndarray:
    frame = np.asarray(frame)
    if frame.shape != shape:
        raise InputError(f"frame of shape {frame.shape} differs from the first frame's {shape}; "
                         "all frames must have one size")
    if frame.dtype not in dtypes:
        raise InputError(f"frame dtype {frame.dtype} is not supported here; "
                         f"pass {' or '.join(str(np.dtype(d)) for d in dtypes)} frames")
    if frame.ndim not in (2, 3) or (frame.ndim == 3 and frame.shape[2] != 3):
        raise InputError(f"frame of shape {frame.shape} is neither (H, W) nor (H, W, 3) RGB")
    return frame


def _bgr(frame: np.ndarray) -> np.ndarray:
    """(H, W) grey or (H, W, 3) RGB -> (H, W, 3) BGR for OpenCV."""
    if frame.ndim == 2:
        return np.repeat(frame[:, :, None], 3, axis=2)
    return np.ascontiguousarray(frame[:, :, ::-1])


def _temp_sibling(path: Path, suffix: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=".part" + suffix, dir=path.parent)
    os.close(fd)
    return Path(tmp)


def _publish(tmp: Path, path: Path) -> None:
    """Give ``tmp`` the usual permissions (0666 minus umask) and rename it onto ``path``."""
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    os.replace(tmp, path)


def write_video(path, frames_iterable: Iterable[np.ndarray], fps: float, *, codec: str = "MJPG") -> Path:
    """Write 8-bit frames to a video file through ``cv2.VideoWriter``.

    Parameters
    ----------
    path : str or Path
        ``.avi`` for ``MJPG`` (default) or ``HFYU``, ``.mp4`` for ``mp4v``, ``.mkv`` or
        ``.avi`` for ``FFV1``.
    frames_iterable : iterable of (H, W) or (H, W, 3) uint8 ndarray
        Grey frames are stored as three equal channels; colour frames are RGB.
    fps : float
        Frame rate stored in the container.
    codec : {"MJPG", "mp4v", "FFV1", "HFYU"}
        ``MJPG`` and ``mp4v`` are lossy (JPEG/MPEG-4 artefacts of a few DN); ``FFV1``
        and ``HFYU`` are lossless in this OpenCV build.

    Returns
    -------
    Path
        The file written (atomically: a temporary file renamed on success).

    Notes
    -----
    Video codecs take 8-bit frames only; write 16-bit data with
    :func:`write_tiff_stack` or :func:`write_image_folder` (PNG/TIFF).
    """
    import cv2

    path = Path(path)
    if codec not in VIDEO_CODECS:
        raise InputError(f"codec {codec!r} is not offered; use one of {', '.join(VIDEO_CODECS)}")
    exts, _ = VIDEO_CODECS[codec]
    if path.suffix.lower() not in exts:
        raise InputError(f"codec {codec} needs a file ending in {' or '.join(exts)}, got {path.name!r}")
    if not (np.isfinite(fps) and fps > 0):
        raise InputError(f"fps must be a positive number of frames per second, got {fps!r}")
    first, frames = _peek(frames_iterable)
    if np.asarray(first).dtype != np.uint8:
        raise InputError(f"video files take 8-bit frames, got {np.asarray(first).dtype}; "
                         "write 16-bit frames with write_tiff_stack or write_image_folder")
    shape = np.asarray(first).shape
    tmp = _temp_sibling(path, path.suffix)
    writer = cv2.VideoWriter(str(tmp), cv2.VideoWriter_fourcc(*codec), float(fps),
                             (shape[1], shape[0]), True)
    try:
        if not writer.isOpened():
            raise InputError(f"OpenCV cannot open a {codec} writer for {path.name}; "
                             "try codec='MJPG' with a .avi file")
        for frame in frames:
            writer.write(_bgr(_check_frame(frame, shape, (np.uint8,))))
        writer.release()
        _publish(tmp, path)
    except BaseException:
        writer.release()
        tmp.unlink(missing_ok=True)
        raise
    return path


def write_image_folder(path, frames_iterable: Iterable[np.ndarray], *, ext: str = ".png") -> Path:
    """Write each frame as ``frame_00000.png`` (or ``.tif``) into a new folder.

    8- and 16-bit frames are kept as they are (PNG and TIFF both hold 16 bit). The
    folder must not exist or be empty; it appears complete or not at all.
    """
    import cv2

    path = Path(path)
    ext = ext if ext.startswith(".") else "." + ext
    if ext.lower() not in (".png", ".tif", ".tiff"):
        raise InputError(f"image extension {ext!r} is not lossless; use .png or .tif")
    if path.exists() and (not path.is_dir() or any(path.iterdir())):
        raise InputError(f"{path} already exists and is not an empty folder; choose a new folder")
    first, frames = _peek(frames_iterable)
    shape, dtype = np.asarray(first).shape, np.asarray(first).dtype
    path.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent))
    try:
        for k, frame in enumerate(frames):
            frame = _check_frame(frame, shape, (np.uint8, np.uint16))
            if frame.dtype != dtype:
                raise InputError("frames mix 8- and 16-bit data; pass frames of one dtype")
            out = frame if frame.ndim == 2 else frame[:, :, ::-1]
            if not cv2.imwrite(str(stage / f"frame_{k:05d}{ext}"), out):
                raise InputError(f"OpenCV could not write {ext} images to {stage}; check disk space")
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(stage, 0o777 & ~umask)
        if path.exists():
            path.rmdir()
        os.replace(stage, path)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    return path


def write_tiff_stack(path, frames_iterable: Iterable[np.ndarray]) -> Path:
    """Write frames page by page into one multi-page TIFF (8 or 16 bit, grey or RGB)."""
    import tifffile

    path = Path(path)
    if path.suffix.lower() not in (".tif", ".tiff"):
        raise InputError(f"a TIFF stack needs a .tif or .tiff name, got {path.name!r}")
    first, frames = _peek(frames_iterable)
    shape, dtype = np.asarray(first).shape, np.asarray(first).dtype
    tmp = _temp_sibling(path, path.suffix)
    try:
        with tifffile.TiffWriter(tmp) as tif:
            for frame in frames:
                frame = _check_frame(frame, shape, (np.uint8, np.uint16))
                if frame.dtype != dtype:
                    raise InputError("frames mix 8- and 16-bit data; pass frames of one dtype")
                tif.write(frame, photometric="rgb" if frame.ndim == 3 else "minisblack",
                          contiguous=True)
        _publish(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path
