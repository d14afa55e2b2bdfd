"""NumPy ``.npy`` files of frames, memory-mapped."""

from __future__ import annotations

import pathlib
from typing import Any

import numpy as np

from ..errors import ClipError
from ._base import FrameSource, logger

__all__ = ["NpyArraySource"]


class NpyArraySource(FrameSource):
    """Frames of a ``.npy`` array: ``(n, rows, cols)``, ``(n, rows, cols, 3|4)`` or one ``(rows, cols)`` frame.

    The file is memory-mapped, so only the frames read reach memory. Colour
    samples are taken as RGB. There is no timing in the file: pass ``fps``. A
    file cut short gives its complete frames (``metadata["truncated"]``).
    """

    _channel_order = "rgb"

    def __init__(self, path: pathlib.Path, *, fps: float | None, channel: str, first_frame: Any,
                 last_frame: Any, step: Any) -> None:
        super().__init__(path)
        try:
            array = np.load(path, mmap_mode="r", allow_pickle=False)
        except Exception as exc:  # numpy raises ValueError, OSError, EOFError... for damaged files
            array = self._complete_frames_of_cut_file(path)
            if array is None:
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

    def _complete_frames_of_cut_file(self, path: pathlib.Path) -> np.ndarray | None:
        """Memory-map the whole frames of a .npy file cut short, or ``None`` if that is not the problem."""
        try:
            with open(path, "rb") as fh:
                version = np.lib.format.read_magic(fh)
                reader = np.lib.format.read_array_header_1_0 if version == (1, 0) else \
                    np.lib.format.read_array_header_2_0
                shape, fortran_order, dtype = reader(fh)
                offset = fh.tell()
            size = path.stat().st_size
        except Exception:  # not even a readable header
            return None
        if fortran_order or dtype.hasobject or len(shape) not in (3, 4) or dtype.itemsize == 0:
            return None
        frame_bytes = int(np.prod(shape[1:])) * dtype.itemsize
        complete = (size - offset) // frame_bytes if frame_bytes else 0
        if complete == 0 and shape[0] > 0 and size - offset < frame_bytes:
            raise ClipError(f"{path.name} is cut short before the end of its first frame; "
                            "check that the recording was saved completely")
        if not 0 < complete < shape[0]:
            return None
        logger.warning("%s is truncated: it describes %d frames but holds %d complete ones; reading those",
                       path.name, shape[0], complete)
        self.metadata["truncated"] = True
        return np.memmap(path, dtype=dtype, mode="r", offset=offset, shape=(complete,) + tuple(shape[1:]))

    def _read_raw(self, index: int) -> np.ndarray:
        self._check_open()
        return self._array[index]

    def _release(self) -> None:
        self._array = None
