"""Lazy, constant-memory frame sources for recordings of fringes.

One opener, :func:`open_frames`, picks a reader by the path: a video file
(through OpenCV), a multi-page TIFF stack (tifffile), a folder of numbered
images, a single image, or a ``.npy`` array. Every reader is a
:class:`FrameSource`: a finite sequence of 2-D frames with ``frame_shape``,
``dtype``, ``fps``, ``indices``, ``times_s`` and ``metadata``, read one frame
at a time.

Examples
--------
>>> import numpy as np, tempfile, pathlib
>>> folder = pathlib.Path(tempfile.mkdtemp())
>>> np.save(folder / "clip.npy", np.zeros((10, 4, 5), np.uint16))
>>> with open_frames(folder / "clip.npy", fps=50, step=3) as clip:
...     print(len(clip), clip.frame_shape, clip.dtype, clip.times_s)
4 (4, 5) uint16 [0.   0.06 0.12 0.18]
"""

from __future__ import annotations

import logging
import os
import pathlib
from typing import Any

from ._readers._base import Frame, FrameSource, UnreadableFrame, check_fps_override
from ._readers.array import NpyArraySource
from ._readers.images import IMAGE_SUFFIXES, ImageFolderSource
from ._readers.tiff import TiffStackSource
from ._readers.video import VIDEO_SUFFIXES, VideoSource, looks_like
from .errors import ClipError, SettingsError
from .settings import CHANNELS

__all__ = ["open_frames", "FrameSource", "Frame", "UnreadableFrame", "VIDEO_SUFFIXES", "IMAGE_SUFFIXES"]

logger = logging.getLogger(__name__)

_TIFF_SUFFIXES = (".tif", ".tiff")
_TIFF_MAGIC = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")


def _known_types() -> str:
    return "a video (" + ", ".join(sorted(VIDEO_SUFFIXES)) + "), a TIFF stack, a .npy array, an image or a folder of images"


def open_frames(path: str | os.PathLike, *, fps: float | None = None, channel: str = "auto",
                first_frame: int = 0, last_frame: int | None = None, step: int = 1) -> FrameSource:
    """Open a recording as a lazy sequence of 2-D frames.

    Parameters
    ----------
    path : str or path-like
        A video file (AVI, MP4, MOV, MKV and the other types in
        ``VIDEO_SUFFIXES``), a TIFF file (multi-page stack or one page), a
        ``.npy`` array ``(n, rows, cols[, 3|4])``, one image file, or a folder
        of numbered images (PNG, TIFF, BMP, JPEG; natural order, so ``img2``
        comes before ``img10``).
    fps : float, optional
        Frame rate in frames/s, overriding the file's. Required for image
        folders, images, ``.npy`` arrays and TIFF stacks without an ImageJ
        frame interval.
    channel : {'auto', 'red', 'green', 'blue', 'gray'}
        Colour channel returned for colour recordings. ``gray`` is the luma
        0.299 R + 0.587 G + 0.114 B (ITU-R BT.601). ``auto`` picks, once at
        open time from a few frames spread over the selection, the unsaturated
        channel whose frame-to-frame change has the largest spatial standard
        deviation (the fringes), or luma if all channels carry them alike.
        Single-channel recordings pass through.
    first_frame, last_frame : int, int or None
        Range of original frame numbers, 0-based, ``last_frame`` inclusive
        (``None``: to the end).
    step : int
        Take every ``step``-th frame of the range (``>= 1``).

    Returns
    -------
    FrameSource
        Finite sequence and context manager; ``len`` is the number of selected
        frames, iteration yields :class:`Frame` objects, ``get_frame(k)`` the
        ``k``-th selected frame. Iteration skips a frame that does not decode
        (logged, listed in ``metadata["unreadable"]``), so use ``Frame.index``
        rather than counting; ``get_frame`` raises :class:`UnreadableFrame` (a
        :class:`~fringecount.errors.ClipError`) for it.

    Raises
    ------
    ClipError
        Missing path, unknown or empty file, a file that is not what its
        extension says, a recording whose first frame does not decode, an
        image folder without images, a missing frame rate.
    SettingsError
        A frame rate outside (0, 1e6] frames/s, a frame range beyond the clip
        (the message gives the clip's length), an unknown channel.

    Notes
    -----
    Nothing reads the whole recording into memory. Times are
    ``times_s = indices / fps`` seconds from the first frame of the file.
    A video whose header promises more frames than decode is read up to the
    last good frame, with a logged warning; if the file was cut short
    (``metadata["truncated"] = True``) that last frame is dropped too, as it may
    be incomplete. TIFF and ``.npy`` stacks cut short give their complete frames.
    Log messages go to the ``fringecount.frames`` logger.
    """
    if not isinstance(path, (str, os.PathLike)):
        raise TypeError(f"path must be a str or path-like, got {type(path).__name__}")
    path = pathlib.Path(path).expanduser()
    fps = check_fps_override(fps)
    if channel not in CHANNELS:
        raise SettingsError(f"channel must be one of {', '.join(CHANNELS)}, got {channel!r}; fix --channel")
    options: dict[str, Any] = dict(fps=fps, channel=channel, first_frame=first_frame, last_frame=last_frame,
                                   step=step)
    try:
        is_dir = path.is_dir()
        exists = is_dir or path.is_file()
        size = 0 if is_dir or not exists else path.stat().st_size
    except OSError as exc:
        raise ClipError(f"cannot access {path}: {exc.strerror or exc}; check the path and its permissions") from None
    if not exists:
        raise ClipError(f"no such file: {path}; check the path")
    try:
        source = _open_reader(path, is_dir, size, options)
    except (PermissionError, IsADirectoryError, NotADirectoryError) as exc:
        raise ClipError(f"cannot read {path}: {exc.strerror or exc}; check the path and its permissions") from None
    logger.info("opened %s: %d frames %s %s at %g fps, channel %s", path.name, len(source), source.frame_shape,
                source.dtype, source.fps, source.metadata.get("channel"))
    return source


def _open_reader(path: pathlib.Path, is_dir: bool, size: int, options: dict[str, Any]) -> FrameSource:
    """The reader for ``path``, chosen by what it is and its extension."""
    if is_dir:
        return ImageFolderSource(path, **options)
    suffix = path.suffix.lower()
    if suffix not in VIDEO_SUFFIXES and suffix not in _TIFF_SUFFIXES and suffix not in IMAGE_SUFFIXES \
            and suffix != ".npy":
        raise ClipError(f"unknown file type {suffix or '(no extension)'!r} for {path.name}; give {_known_types()}")
    if size == 0:
        raise ClipError(f"{path.name} is empty (0 bytes); check that the recording was saved completely")
    if suffix in VIDEO_SUFFIXES:
        if not looks_like(path, suffix):
            raise ClipError(f"{path.name} is not in {VIDEO_SUFFIXES[suffix][0]} format (its first bytes "
                            "do not match); check the file or its extension")
        return VideoSource(path, **options)
    if suffix in _TIFF_SUFFIXES:
        with open(path, "rb") as fh:
            if fh.read(4) not in _TIFF_MAGIC:
                raise ClipError(f"{path.name} is not in TIFF format (its first bytes do not match); "
                                "check the file or its extension")
        return TiffStackSource(path, **options)
    if suffix == ".npy":
        return NpyArraySource(path, **options)
    return ImageFolderSource(path, **options)
