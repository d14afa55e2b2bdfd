"""Multi-page TIFF stacks through tifffile: memory-mapped or page by page, never whole."""

from __future__ import annotations

import pathlib
from typing import Any

import numpy as np
import tifffile

from ..errors import ClipError
from ._base import FrameSource, UnreadableFrame, container_fps_ok, logger

__all__ = ["TiffStackSource"]

_FRAME_AXES = set("TZCQIPRHAEVLMJ")   # tifffile axis codes other than Y, X and S (samples)


def _fail(path: pathlib.Path, why: object) -> ClipError:
    text = " ".join(str(why).split()) or type(why).__name__
    return ClipError(f"cannot read TIFF {path.name} ({text[:160]}); check the file or save it again as a TIFF stack")


class TiffStackSource(FrameSource):
    """Frames of a TIFF file: a stack ``(n, rows, cols[, 3|4])`` or one 2-D page.

    Uncompressed contiguous stacks are memory-mapped; others are decoded one
    page at a time. A page that fails to decode is skipped during iteration
    (``metadata["unreadable"]``). The frame rate comes from ``fps``, else from an
    ImageJ frame interval in the file, else :class:`~fringecount.errors.ClipError`.

    Notes
    -----
    Colour samples are in RGB order. ``bit_depth`` comes from the
    ``MaxSampleValue`` tag where a writer set it below the container maximum,
    else from the data (see ``metadata["bit_depth_source"]``).
    """

    _channel_order = "rgb"

    def __init__(self, path: pathlib.Path, *, fps: float | None, channel: str, first_frame: Any,
                 last_frame: Any, step: Any) -> None:
        super().__init__(path)
        self._tif: tifffile.TiffFile | None = None
        self._memmap: np.ndarray | None = None
        try:
            self._tif = tifffile.TiffFile(path)
            series = self._tif.series[0]
            shape, axes = tuple(series.shape), series.axes
            page0 = series.pages[0] if len(series.pages) else None
            bits_tag = None
            if page0 is not None:
                tag = page0.tags.get("MaxSampleValue")
                bps = getattr(page0, "bitspersample", 0)
                if tag is not None and np.size(tag.value) >= 1:
                    top = int(np.max(tag.value))
                    if 0 < top < 2 ** bps - 1:
                        bits_tag = int(top).bit_length()
            interval = (self._tif.imagej_metadata or {}).get("finterval") if self._tif.is_imagej else None
            contiguous = series.dataoffset is not None and getattr(page0, "compression", 1) == 1
            n_pages = len(series.pages)
        except ClipError:
            self._release()
            raise
        except Exception as exc:  # tifffile raises many types for damaged files
            self._release()
            raise _fail(path, exc) from None
        # Drop axes of length 1, then demand [frames,] rows, cols[, samples].
        keep = [i for i, n in enumerate(shape) if n != 1 or axes[i] in "YX"]
        shape_k, axes_k = tuple(shape[i] for i in keep), "".join(axes[i] for i in keep)
        if "S" in axes_k and axes_k.index("S") != len(axes_k) - 1:
            self._sample_axis = axes_k.index("S")
        else:
            self._sample_axis = None
        planar = "".join(a for a in axes_k if a != "S")
        frame_axes = planar[:-2]
        if not planar.endswith("YX") or len(frame_axes) > 1 or (frame_axes and frame_axes not in _FRAME_AXES):
            self._release()
            raise ClipError(f"TIFF {path.name} has shape {shape} (axes {axes}); fringecount reads a stack of "
                            "2-D frames (n, rows, cols[, 3|4]): save it in that layout")
        self._squeezed_shape, self._keep = shape_k, keep
        self._full_shape = shape
        n_frames = shape_k[0] if frame_axes else 1
        self._has_frame_axis = bool(frame_axes)
        if contiguous:
            try:
                self._memmap = tifffile.memmap(path, series=0, mode="r")
            except Exception as exc:  # not mappable after all: fall back to pages
                logger.debug("%s: memory map failed (%s); reading page by page", path.name, exc)
                self._memmap = None
        if self._memmap is None and self._has_frame_axis and n_pages != n_frames:
            self._release()
            raise ClipError(f"TIFF {path.name} stores {n_frames} frames in {n_pages} compressed pages, which "
                            "cannot be read one frame at a time; save it uncompressed or one page per frame")
        if fps is not None:
            use_fps, source = fps, "override"
        elif interval is not None and container_fps_ok(1.0 / float(interval) if float(interval) > 0 else 0):
            use_fps, source = 1.0 / float(interval), "ImageJ frame interval"
        else:
            self._release()
            raise ClipError(f"TIFF {path.name} has no frame rate; pass --fps N")
        self.metadata.update(format="TIFF", codec=getattr(getattr(page0, "compression", None), "name", "unknown").lower(),
                             axes=axes, stored_shape=list(shape), memory_mapped=self._memmap is not None)
        try:
            self._finish_open(n_frames_in_file=n_frames, fps=use_fps, fps_source=source, first_frame=first_frame,
                              last_frame=last_frame, step=step, channel=channel, bit_depth_hint=bits_tag)
        except BaseException:
            self._release()
            raise

    def _arrange(self, block: np.ndarray) -> np.ndarray:
        """One frame's samples as rows x cols (x samples)."""
        if self._sample_axis is not None:
            block = np.moveaxis(block, self._sample_axis - (1 if self._has_frame_axis else 0), -1)
        return block

    def _read_raw(self, index: int) -> np.ndarray:
        self._check_open()
        try:
            if self._memmap is not None:
                whole = self._memmap.reshape(self._squeezed_shape)
                block = whole[index] if self._has_frame_axis else whole
            else:
                page = self._tif.series[0].pages[index]
                block = page.asarray().reshape(self._squeezed_shape[1:] if self._has_frame_axis
                                               else self._squeezed_shape)
        except Exception as exc:  # damaged page: data for this frame only
            raise UnreadableFrame(f"page {index}: {' '.join(str(exc).split())[:120] or type(exc).__name__}") from None
        return self._arrange(block)

    def _release(self) -> None:
        self._memmap = None
        if self._tif is not None:
            self._tif.close()
            self._tif = None
