"""Multi-page TIFF stacks through tifffile: memory-mapped or page by page, never whole."""

from __future__ import annotations

import contextlib
import logging
import pathlib
from collections.abc import Iterator
from typing import Any

import numpy as np
import tifffile

from ..errors import ClipError
from ._base import FrameSource, UnreadableFrame, container_fps_ok, logger

__all__ = ["TiffStackSource"]

_FRAME_AXES = set("TZCQIPRHAEVLMJ")   # tifffile axis codes other than Y, X and S (samples)


class _ToDebug(logging.Filter):
    """Pass tifffile's complaints about a damaged file on to our logger at DEBUG level."""

    def filter(self, record: logging.LogRecord) -> bool:
        logger.debug("tifffile: %s", record.getMessage())
        return False


@contextlib.contextmanager
def _tifffile_quiet() -> Iterator[None]:
    """tifffile logs damaged files at ERROR; we raise or warn ourselves instead."""
    tiff_logger = logging.getLogger("tifffile")
    quiet = _ToDebug()
    tiff_logger.addFilter(quiet)
    try:
        yield
    finally:
        tiff_logger.removeFilter(quiet)


def _fail(path: pathlib.Path, why: object) -> ClipError:
    text = " ".join(str(why).split())[:160] or type(why).__name__
    return ClipError(f"cannot read TIFF {path.name} ({text}); check the file or save it again as a TIFF stack")


def _layout(path: pathlib.Path, shape: tuple[int, ...], axes: str) -> tuple[tuple[int, ...], bool, int | None]:
    """Shape without length-1 axes, whether it has a frame axis, and where the samples axis is."""
    keep = [i for i, n in enumerate(shape) if n != 1 or axes[i] in "YX"]
    shape_k, axes_k = tuple(shape[i] for i in keep), "".join(axes[i] for i in keep)
    planar = axes_k.replace("S", "")
    frame_axes = planar[:-2]
    if not planar.endswith("YX") or len(frame_axes) > 1 or (frame_axes and frame_axes not in _FRAME_AXES) \
            or ("S" in axes_k and axes_k.index("S") < len(frame_axes)):
        raise ClipError(f"TIFF {path.name} has shape {shape} (axes {axes}); fringecount reads a stack of "
                        "2-D frames (n, rows, cols[, 3|4]): save it in that layout")
    sample_axis = axes_k.index("S") - len(frame_axes) if "S" in axes_k else None
    return shape_k, bool(frame_axes), sample_axis


class TiffStackSource(FrameSource):
    """Frames of a TIFF file: a stack ``(n, rows, cols[, 3|4])`` or one 2-D page.

    Uncompressed contiguous stacks are memory-mapped; others are decoded one
    page at a time. A truncated file gives the complete frames it still holds
    (``metadata["truncated"]``, with a logged warning). A page that fails to
    decode is skipped during iteration (``metadata["unreadable"]``). The frame
    rate comes from ``fps``, else from an ImageJ frame interval in the file,
    else :class:`~fringecount.errors.ClipError`.

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
        self._pages: Any = None
        try:
            with _tifffile_quiet():
                n_frames, use_fps, source, bits_tag = self._open(path, fps)
            self._finish_open(n_frames_in_file=n_frames, fps=use_fps, fps_source=source, first_frame=first_frame,
                              last_frame=last_frame, step=step, channel=channel, bit_depth_hint=bits_tag)
        except BaseException:
            self._release()
            raise

    def _open(self, path: pathlib.Path, fps: float | None) -> tuple[int, float, str, int | None]:
        try:
            tif = self._tif = tifffile.TiffFile(path)
            series = tif.series[0]
            shape, axes = tuple(series.shape), series.axes
            page0 = tif.pages[0]
            n_pages = len(tif.pages)
            claimed = None
            if tif.is_shaped and tif.shaped_metadata and "shape" in tif.shaped_metadata[0]:
                claimed = tuple(tif.shaped_metadata[0]["shape"])
            bits_tag = None
            tag = page0.tags.get("MaxSampleValue")
            if tag is not None and np.size(tag.value) >= 1:
                top = int(np.max(tag.value))
                if 0 < top < 2 ** page0.bitspersample - 1:
                    bits_tag = top.bit_length()
            interval = (tif.imagej_metadata or {}).get("finterval") if tif.is_imagej else None
            contiguous = series.dataoffset is not None and page0.compression == 1
            data_offset, byteorder = series.dataoffset, tif.byteorder
            series_pages = len(series.pages)
            dtype = series.dtype
            file_size = path.stat().st_size
            codec = getattr(page0.compression, "name", str(page0.compression)).lower()
        except ClipError:
            raise
        except Exception as exc:  # tifffile raises many types for damaged files
            raise _fail(path, exc) from None

        if claimed is not None and len(claimed) == len(page0.shape) + 1 and shape == page0.shape \
                and n_pages > 1 and tuple(claimed[1:]) == page0.shape:
            # A stack whose page chain is cut short: tifffile gives up on the series but
            # the pages still there are frames.
            shape, axes = (n_pages,) + tuple(page0.shape), "Q" + page0.axes
            contiguous = False
            self._pages = tif.pages
        squeezed, has_frame_axis, sample_axis = _layout(path, shape, axes)
        self._squeezed, self._has_frame_axis, self._sample_axis = squeezed, has_frame_axis, sample_axis
        n_frames = squeezed[0] if has_frame_axis else 1
        claimed_frames = claimed[0] if claimed is not None and has_frame_axis and len(claimed) > 2 else n_frames
        frame_shape = squeezed[1:] if has_frame_axis else squeezed
        if contiguous:
            frame_bytes = int(np.prod(frame_shape)) * dtype.itemsize
            complete = max(0, (file_size - data_offset) // frame_bytes) if frame_bytes else 0
            if complete == 0:
                raise ClipError(f"TIFF {path.name} is cut short before the end of its first frame; "
                                "check that the recording was saved completely")
            n_frames = min(n_frames, complete)
            self._memmap = np.memmap(path, dtype=dtype.newbyteorder(byteorder), mode="r", offset=data_offset,
                                     shape=(n_frames,) + tuple(frame_shape))
        elif self._pages is None:
            if has_frame_axis and series_pages != n_frames:
                raise ClipError(f"TIFF {path.name} stores {n_frames} frames in {series_pages} pages, which "
                                "cannot be read one frame at a time; save it uncompressed or one page per frame")
            self._pages = series.pages
        if claimed_frames > n_frames:
            self.metadata["truncated"] = True
            logger.warning("%s is truncated: it describes %d frames but holds %d complete ones; reading those",
                           path.name, claimed_frames, n_frames)
        if fps is not None:
            use_fps, source = fps, "override"
        elif interval is not None and float(interval) > 0 and container_fps_ok(1.0 / float(interval)):
            use_fps, source = 1.0 / float(interval), "ImageJ frame interval"
        else:
            raise ClipError(f"TIFF {path.name} has no frame rate; pass --fps N")
        self.metadata.update(format="TIFF", codec=codec, axes=axes, stored_shape=list(shape),
                             memory_mapped=self._memmap is not None, n_frames_described=int(claimed_frames))
        return n_frames, use_fps, source, bits_tag

    def _read_raw(self, index: int) -> np.ndarray:
        self._check_open()
        try:
            if self._memmap is not None:
                block = self._memmap[index]
            else:
                with _tifffile_quiet():
                    block = self._pages[index].asarray()
                block = block.reshape(self._squeezed[1:] if self._has_frame_axis else self._squeezed)
        except Exception as exc:  # damaged page: data for this frame only
            text = " ".join(str(exc).split())[:120] or type(exc).__name__
            raise UnreadableFrame(f"page {index}: {text}") from None
        if self._sample_axis is not None:
            block = np.moveaxis(block, self._sample_axis, -1)
        return block

    def _release(self) -> None:
        self._memmap = None
        self._pages = None
        if self._tif is not None:
            self._tif.close()
            self._tif = None
