"""NumPy ``.npy`` files of frames, memory-mapped."""

from __future__ import annotations

import pathlib
from typing import Any

import numpy as np

from ..errors import ClipError
from ._base import FrameSource

__all__ = ["NpyArraySource"]


class NpyArraySource(FrameSource):
    """Frames of a ``.npy`` array: ``(n, rows, cols)``, ``(n, rows, cols, 3|4)`` or one ``(rows, cols)`` frame.

    The file is memory-mapped, so only the frames read reach memory. Colour
    samples are taken as RGB. There is no timing in the file: pass ``fps``.
    """

    _channel_order = "rgb"

    def __init__(self, path: pathlib.Path, *, fps: float | None, channel: str, first_frame: Any,
                 last_frame: Any, step: Any) -> None:
        super().__init__(path)
        try:
            array = np.load(path, mmap_mode="r", allow_pickle=False)
        except Exception as exc:  # numpy raises ValueError, OSError, EOFError... for damaged files
            text = " ".join(str(exc).split())[:160] or type(exc).__name__
            raise ClipError(f"cannot read {path.name} as a .npy array ({text}); check the file "
                            "or save it with numpy.save") from None
        if not isinstance(array, np.ndarray):
            raise ClipError(f"{path.name} is not a single .npy array; save the frames with numpy.save")
        shape = array.shape
        if array.ndim == 2:          # one frame; a 3-D array is always a stack of grey frames
            array = array[np.newaxis]
        if array.ndim not in (3, 4) or (array.ndim == 4 and array.shape[3] not in (1, 3, 4)) or array.shape[0] < 1:
            raise ClipError(f"{path.name} holds an array of shape {shape}; save frames as (n, rows, cols) "
                            "or (n, rows, cols, 3)")
        if fps is None:
            raise ClipError(f"{path.name} is a .npy array, which has no frame rate; pass --fps N")
        self._array = array
        self.metadata.update(format="npy", codec="raw", stored_shape=list(shape), memory_mapped=True)
        self._finish_open(n_frames_in_file=array.shape[0], fps=fps, fps_source="override",
                          first_frame=first_frame, last_frame=last_frame, step=step, channel=channel)

    def _read_raw(self, index: int) -> np.ndarray:
        self._check_open()
        return self._array[index]

    def _release(self) -> None:
        self._array = None
