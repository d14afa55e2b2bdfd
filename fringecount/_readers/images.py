"""A folder of numbered image files (or one image file), each decoded only when needed."""

from __future__ import annotations

import pathlib
import re
from typing import Any

import cv2
import numpy as np

from ..errors import ClipError
from ._base import FrameSource, UnreadableFrame, quiet_opencv

__all__ = ["ImageFolderSource", "IMAGE_SUFFIXES", "natural_key"]

#: File types read from a folder; everything else in it is ignored.
IMAGE_SUFFIXES = (".png", ".tif", ".tiff", ".bmp", ".jpg", ".jpeg")

_DIGITS = re.compile(r"(\d+)")


def natural_key(name: str) -> tuple:
    """Sort key that orders embedded numbers by value: ``img2`` before ``img10``."""
    parts = _DIGITS.split(name.lower())
    return tuple((0, int(p), p) if p.isdigit() else (1, 0, p) for p in parts)


def list_images(folder: pathlib.Path) -> list[pathlib.Path]:
    """Image files directly inside ``folder``, hidden files left out, naturally sorted."""
    files = [p for p in folder.iterdir()
             if p.suffix.lower() in IMAGE_SUFFIXES and not p.name.startswith(".") and p.is_file()]
    return sorted(files, key=lambda p: natural_key(p.name))


def read_image(path: pathlib.Path) -> np.ndarray:
    """Decode one image file as stored (any depth, colour as BGR); :class:`UnreadableFrame` if it fails."""
    try:
        data = np.fromfile(path, dtype=np.uint8)
    except OSError as exc:
        raise UnreadableFrame(f"cannot read {path.name}: {exc.strerror or exc}") from None
    try:
        with quiet_opencv():
            image = cv2.imdecode(data, cv2.IMREAD_UNCHANGED) if data.size else None
    except cv2.error:            # e.g. a header claiming more pixels than OpenCV allows
        image = None
    if image is None:
        raise UnreadableFrame(f"{path.name} is not a readable image")
    return image


class ImageFolderSource(FrameSource):
    """Frames stored one per image file (PNG, TIFF, BMP, JPEG) in one folder.

    Files are ordered by natural sort of their names; frame ``i`` is the ``i``-th
    file. Files are decoded only when their frame is asked for. A file that fails
    to decode (or has another size) is skipped during iteration with a warning
    and listed in ``metadata["unreadable"]``; :meth:`get_frame` raises
    :class:`~fringecount.errors.ClipError` for it. Image files carry no timing,
    so ``fps`` must be given.

    Notes
    -----
    Colour images are decoded as BGR (OpenCV); 16-bit PNG and TIFF keep 16 bits.
    A single image file is read as a one-frame folder.
    """

    def __init__(self, path: pathlib.Path, *, fps: float | None, channel: str, first_frame: Any,
                 last_frame: Any, step: Any) -> None:
        super().__init__(path)
        if path.is_dir():
            self._files = list_images(path)
            if not self._files:
                raise ClipError(f"folder {path} holds no images ({', '.join(IMAGE_SUFFIXES)}); "
                                "check the path or convert the frames to PNG")
            kind = "image folder"
        else:
            self._files = [path]
            kind = "image"
        if fps is None:
            raise ClipError(f"{path.name} is an {kind}, which has no frame rate; pass --fps N")
        self.metadata.update(format=kind, codec=path.suffix.lower().lstrip(".") if kind == "image" else
                             "+".join(sorted({p.suffix.lower().lstrip(".") for p in self._files})),
                             first_file=self._files[0].name, last_file=self._files[-1].name)
        self._finish_open(n_frames_in_file=len(self._files), fps=fps, fps_source="override",
                          first_frame=first_frame, last_frame=last_frame, step=step, channel=channel)

    def file_of(self, k: int) -> pathlib.Path:
        """Path of the file behind the ``k``-th selected frame."""
        return self._files[int(self.indices[k])]

    def _read_raw(self, index: int) -> np.ndarray:
        self._check_open()
        return read_image(self._files[index])
