"""Video files through OpenCV's FFmpeg backend: sequential decoding, verified length."""

from __future__ import annotations

import contextlib
import os
import pathlib
from collections import OrderedDict
from collections.abc import Iterator
from typing import Any

import cv2
import numpy as np

from ..errors import ClipError
from ._base import Frame, FrameSource, UnreadableFrame, container_fps_ok, logger, quiet_opencv

__all__ = ["VideoSource", "VIDEO_SUFFIXES", "looks_like"]

# FFmpeg writes its own complaints about damaged files straight to stderr; the
# library reports problems through its logger instead. A user who wants FFmpeg's
# messages sets OPENCV_FFMPEG_LOGLEVEL before fringecount opens the first video.
os.environ.setdefault("OPENCV_FFMPEG_LOGLEVEL", "-8")

#: Give up opening or reading a frame after this long (ms) instead of hanging.
_TIMEOUT_MS = 10_000
#: Ahead of the current position by at most this many frames, decode forward instead of
#: seeking. A seek costs about 15 decoded MJPG frames in OpenCV 5 (measured, 640x480), and
#: for codecs with key frames it also decodes from the previous key frame.
_FORWARD_LIMIT = {"intra": 16, "other": 64}
#: Frames kept by :meth:`VideoSource.get_frame`.
_CACHE_SIZE = 8
#: Codecs whose frames are all key frames: seeking to a frame number is exact for them.
_INTRA_ONLY = {"mjpg", "avrn", "ffv1", "hfyu", "ffvh", "mpng", "png", "dib", "raw", "rgb", "y800", "grey",
               "y8", "jpeg", "jpgl", "magy", "utvd", "ulrg", "ulra", "uly0", "uly2", "ulh0", "ulh2"}
#: A container claiming more frames than this is not believed and the frames are counted.
_MAX_PLAUSIBLE_FRAMES = 50_000_000


def _is_riff_avi(head: bytes) -> bool:
    return head[:4] == b"RIFF" and head[8:12] in (b"AVI ", b"AVIX")


def _is_iso_media(head: bytes) -> bool:
    return head[4:8] in (b"ftyp", b"moov", b"mdat", b"free", b"wide", b"skip", b"pnot", b"uuid")


def _is_ebml(head: bytes) -> bool:
    return head[:4] == b"\x1a\x45\xdf\xa3"


def _is_mpeg_ps(head: bytes) -> bool:
    return head[:4] in (b"\x00\x00\x01\xba", b"\x00\x00\x01\xb3")


def _is_mpeg_ts(head: bytes) -> bool:
    return len(head) > 188 and head[0] == 0x47 and head[188] == 0x47


#: Extension -> (container name, test of the file's first bytes).
VIDEO_SUFFIXES = {
    ".avi": ("AVI", _is_riff_avi),
    ".mp4": ("MP4", _is_iso_media),
    ".m4v": ("MP4", _is_iso_media),
    ".mov": ("QuickTime", _is_iso_media),
    ".3gp": ("3GP", _is_iso_media),
    ".mkv": ("Matroska", _is_ebml),
    ".webm": ("WebM", _is_ebml),
    ".mpg": ("MPEG program stream", _is_mpeg_ps),
    ".mpeg": ("MPEG program stream", _is_mpeg_ps),
    ".ts": ("MPEG transport stream", _is_mpeg_ts),
    ".wmv": ("ASF", lambda h: h[:8] == b"\x30\x26\xb2\x75\x8e\x66\xcf\x11"),
    ".flv": ("FLV", lambda h: h[:3] == b"FLV"),
    ".ogv": ("Ogg", lambda h: h[:4] == b"OggS"),
}


def looks_like(path: pathlib.Path, suffix: str) -> bool:
    """True if the file starts the way a ``suffix`` container does."""
    with open(path, "rb") as fh:
        head = fh.read(256)
    return VIDEO_SUFFIXES[suffix][1](head)


def _riff_cut(fh, size: int) -> bool | None:
    head = fh.read(12)
    declared = int.from_bytes(head[4:8], "little") + 8
    return size < declared


def _iso_cut(fh, size: int) -> bool | None:
    """Walk the top-level boxes: a box reaching past the end of the file means it was cut."""
    position = 0
    while position < size:
        fh.seek(position)
        head = fh.read(16)
        if len(head) < 8:
            return True
        box = int.from_bytes(head[:4], "big")
        if box == 1:
            if len(head) < 16:
                return True
            box = int.from_bytes(head[8:16], "big")
        elif box == 0:           # runs to the end of the file
            return False
        if box < 8:
            return None          # not a box structure we understand
        position += box
    return position > size


def _ebml_size(data: bytes, at: int) -> tuple[int | None, int]:
    """An EBML variable-length size at ``data[at:]``: (value or None if unknown, bytes used)."""
    first = data[at]
    length = 9 - first.bit_length() if first else 9
    if length > 8 or at + length > len(data):
        raise ValueError("bad EBML size")
    value = first & (0xFF >> length)
    for byte in data[at + 1: at + length]:
        value = (value << 8) | byte
    return (None if value == (1 << (7 * length)) - 1 else value), length


def _matroska_cut(fh, size: int) -> bool | None:
    data = fh.read(4096)
    try:
        header, used = _ebml_size(data, 4)
        at = 4 + used + (header or 0)
        if data[at:at + 4] != b"\x18\x53\x80\x67":    # Segment
            return None
        segment, used = _ebml_size(data, at + 4)
    except (ValueError, IndexError):
        return None
    return None if segment is None else size < at + 4 + used + segment


_CUT_CHECKS = {"AVI": _riff_cut, "MP4": _iso_cut, "QuickTime": _iso_cut, "3GP": _iso_cut,
               "Matroska": _matroska_cut, "WebM": _matroska_cut}


def file_is_cut(path: pathlib.Path) -> bool | None:
    """True if the container's own size fields reach past the end of the file, False if
    they fit it exactly, None where the container gives no such check."""
    check = _CUT_CHECKS.get(VIDEO_SUFFIXES.get(path.suffix.lower(), ("",))[0])
    if check is None:
        return None
    size = path.stat().st_size
    with open(path, "rb") as fh:
        return check(fh, size)


def _capture(path: pathlib.Path) -> cv2.VideoCapture:
    params = [cv2.CAP_PROP_OPEN_TIMEOUT_MSEC, _TIMEOUT_MS, cv2.CAP_PROP_READ_TIMEOUT_MSEC, _TIMEOUT_MS]
    try:
        with quiet_opencv():
            cap = cv2.VideoCapture(str(path), cv2.CAP_FFMPEG, params)
    except cv2.error:
        cap = None
    if cap is None or not cap.isOpened():
        if cap is not None:
            cap.release()
        raise ClipError(f"cannot open {path.name} as a video (damaged, incomplete or an unknown codec); "
                        "check the file, or convert it to MP4 or AVI")
    return cap


def _grab(cap: cv2.VideoCapture) -> bool:
    try:
        return bool(cap.grab())
    except cv2.error:
        return False


def _read(cap: cv2.VideoCapture) -> tuple[bool, np.ndarray | None]:
    try:
        return cap.read()
    except cv2.error:
        return False, None


def _fourcc(cap: cv2.VideoCapture) -> str:
    code = int(cap.get(cv2.CAP_PROP_FOURCC)) & 0xFFFFFFFF
    text = "".join(chr((code >> (8 * i)) & 0xFF) for i in range(4))
    return text.strip("\x00 ") if text.isprintable() else f"0x{code:08x}"


def _decodable(cap: cv2.VideoCapture, index: int) -> bool:
    """True if frame ``index`` can be decoded (seeks the capture)."""
    try:
        return bool(cap.set(cv2.CAP_PROP_POS_FRAMES, index)) and bool(cap.grab())
    except cv2.error:
        return False


def _count_forward(cap: cv2.VideoCapture, start: int) -> int:
    """Number of frames, counting by decoding on from frame ``start`` (already positioned)."""
    n = start
    try:
        while cap.grab():
            n += 1
    except cv2.error:
        pass
    return n


class VideoSource(FrameSource):
    """Frames of a video file decoded by OpenCV (FFmpeg backend).

    The frame count from the container is checked at open time: the last frame
    claimed must decode, otherwise the last decodable frame is found by
    bisection and a warning is logged. If the container's own size fields show
    the file was cut (AVI RIFF size, MP4/MOV boxes, Matroska segment size;
    ``metadata["file_cut"]``), or cannot tell, ``metadata["truncated"]`` is set
    and that last frame is left out too, as it may be incomplete (a cut MJPG
    frame in AVI decodes with garbage in its lower part). If the file is
    complete, the header merely over-counted and every decodable frame is kept. A
    container that claims no frames is counted by decoding it once.

    Notes
    -----
    :meth:`get_frame` seeks (``CAP_PROP_POS_FRAMES``) when the frame lies behind or
    far ahead of the last one read, else decodes forward; the last few frames are
    cached. Seeking is exact for intra-only codecs (MJPG, FFV1) and usually for others.
    OpenCV hands frames over as 8-bit BGR, so video frames are uint8. Times are
    ``index / fps``: variable-frame-rate files are not timed per frame, but
    iteration compares the container's timestamps (from the first one read)
    with that rule, records the largest difference in
    ``metadata["timestamp_deviation_s"]`` and warns above half a frame period.
    """

    def __init__(self, path: pathlib.Path, *, fps: float | None, channel: str, first_frame: Any,
                 last_frame: Any, step: Any) -> None:
        super().__init__(path)
        self._cap: cv2.VideoCapture | None = None
        self._position = 0
        self._intra_only = False
        self._forward_limit = _FORWARD_LIMIT["other"]
        self._cache: OrderedDict[int, np.ndarray] = OrderedDict()
        self._live_iter_caps: list[cv2.VideoCapture] = []
        cap = _capture(path)
        self._cap = cap
        try:
            ok, first = _read(cap)
            if not ok or first is None:
                raise ClipError(f"{path.name} opens as a video but not even its first frame decodes; "
                                "check the file (it may be damaged or empty)")
            self._position = 1
            container_fps = cap.get(cv2.CAP_PROP_FPS)
            if fps is not None:
                use_fps, fps_source = fps, "override"
            elif container_fps_ok(container_fps):
                use_fps, fps_source = float(container_fps), "container"
            else:
                raise ClipError(f"{path.name} has no frame rate (container says {container_fps:g}); "
                                "pass --fps N")
            self._intra_only = _fourcc(cap).lower() in _INTRA_ONLY
            self._forward_limit = _FORWARD_LIMIT["intra" if self._intra_only else "other"]
            reported = cap.get(cv2.CAP_PROP_FRAME_COUNT)
            n_frames = self._verified_length(reported)
            self.metadata.update(format=VIDEO_SUFFIXES.get(path.suffix.lower(), (path.suffix,))[0],
                                 codec=_fourcc(cap), backend=cap.getBackendName(),
                                 container_fps=float(container_fps),
                                 n_frames_reported=int(reported) if np.isfinite(reported) else None,
                                 timestamp_deviation_s=None)
            self._finish_open(n_frames_in_file=n_frames, fps=use_fps, fps_source=fps_source,
                              first_frame=first_frame, last_frame=last_frame, step=step, channel=channel)
        except BaseException:
            self._release()
            raise

    def _verified_length(self, reported: float) -> int:
        """Frames that really decode; logs and flags a container that promised more."""
        cap = self._cap
        claimed = int(reported) if np.isfinite(reported) and 0 < reported <= _MAX_PLAUSIBLE_FRAMES else 0
        self._position = -1          # every branch below moves the capture
        if claimed <= 0:
            logger.info("%s does not state its frame count; counting the frames", self.path.name)
            cap.set(cv2.CAP_PROP_POS_FRAMES, 0)
            return _count_forward(cap, 0)
        if _decodable(cap, claimed - 1):
            if _grab(cap):           # the container under-reports: count the rest
                n = _count_forward(cap, claimed + 1)
                logger.info("%s holds %d frames although its header says %d", self.path.name, n, claimed)
                return n
            return claimed
        good, bad = 0, claimed - 1   # frame 0 decoded at open; bisect for the last good frame
        while bad - good > 1:
            mid = (good + bad) // 2
            if _decodable(cap, mid):
                good = mid
            else:
                bad = mid
        cut = file_is_cut(self.path)
        self.metadata["file_cut"] = cut
        if cut is False:
            logger.warning("%s: its header promises %d frames but %d decode, and the file is complete; "
                           "reading %d", self.path.name, claimed, good + 1, good + 1)
            return good + 1
        # In a cut file the last frame that decodes may be incomplete: MJPG in AVI, for one,
        # decodes a frame whose tail is missing with garbage. Drop it unless it is frame 0.
        n = max(good, 1)
        logger.warning("%s is truncated: its header promises %d frames but only %d decode; reading %d "
                       "(the last one may be incomplete)", self.path.name, claimed, good + 1, n)
        self.metadata["truncated"] = True
        return n

    # -- random access -------------------------------------------------------------
    def _read_raw(self, index: int) -> np.ndarray:
        self._check_open()
        cached = self._cache.get(index)
        if cached is not None:
            self._cache.move_to_end(index)
            return cached
        try:
            return self._decode(index)
        except cv2.error as exc:
            self._position = -1
            raise UnreadableFrame(f"frame {index}: OpenCV error {exc.code}") from None

    def _decode(self, index: int) -> np.ndarray:
        cap = self._cap
        ahead = index - self._position
        if self._position < 0 or not 0 <= ahead <= self._forward_limit:
            if not cap.set(cv2.CAP_PROP_POS_FRAMES, index):
                raise UnreadableFrame(f"cannot seek to frame {index}")
            self._position = index
        else:
            for _ in range(ahead):
                if not _grab(cap):
                    failed, self._position = self._position, -1
                    raise UnreadableFrame(f"frame {failed} does not decode")
                self._position += 1
        ok, image = cap.read()
        if not ok or image is None:
            self._position = -1
            raise UnreadableFrame(f"frame {index} does not decode")
        self._position = index + 1
        image.flags.writeable = False
        self._cache[index] = image
        while len(self._cache) > _CACHE_SIZE:
            self._cache.popitem(last=False)
        return image

    # -- sequential decoding ------------------------------------------------------
    def __iter__(self) -> Iterator[Frame]:
        """Decode the selected frames in order with one pass over the file (no per-frame seek).

        Frames between selected ones are grabbed without colour conversion. For
        intra-only codecs (MJPG, FFV1...) a range starting late is reached with
        one seek; for others decoding starts at frame 0, so frame numbers stay exact.
        """
        self._check_open()
        if len(self.indices) == 0:
            return
        cap = _capture(self.path)
        self._live_iter_caps.append(cap)
        try:
            first = int(self.indices[0])
            position = 0
            # One seek to the start of the range, only where seeking is exact; other codecs
            # decode forward from frame 0 so the frame numbers cannot slip.
            if first > self._forward_limit and self._intra_only and cap.set(cv2.CAP_PROP_POS_FRAMES, first):
                position = first
            period = 1.0 / self.fps
            deviation = 0.0
            offset_s: float | None = None
            wanted = iter(zip(self.indices.tolist(), self.times_s.tolist()))
            index, time_s = next(wanted)
            while True:
                while position < index:
                    if not _grab(cap):
                        self._stopped_early(position)
                        return
                    position += 1
                ok, raw = _read(cap)
                if not ok or raw is None:
                    self._stopped_early(position)
                    return
                position += 1
                stamp_s = cap.get(cv2.CAP_PROP_POS_MSEC) / 1000.0
                if np.isfinite(stamp_s) and self.metadata["fps_source"] == "container":
                    if offset_s is None:      # the clock of a container need not start at 0
                        offset_s = stamp_s - time_s
                        self.metadata["first_timestamp_s"] = stamp_s
                    deviation = max(deviation, abs(stamp_s - offset_s - time_s))
                try:
                    image = self._plane(raw, index)
                except UnreadableFrame as exc:
                    self._note_unreadable(index, str(exc))
                else:
                    yield Frame(index, time_s, image)
                nxt = next(wanted, None)
                if nxt is None:
                    break
                index, time_s = nxt
            if self.metadata["fps_source"] == "container":
                self.metadata["timestamp_deviation_s"] = deviation
                if deviation > 0.5 * period:
                    logger.warning("%s: container timestamps differ from frame number / fps by up to %.3g s "
                                   "(variable frame rate?); times assume a constant rate", self.path.name,
                                   deviation)
        finally:
            cap.release()
            with contextlib.suppress(ValueError):
                self._live_iter_caps.remove(cap)

    def _stopped_early(self, position: int) -> None:
        self.metadata["truncated"] = True
        self.metadata["n_frames_decoded"] = position
        logger.warning("%s: decoding stopped at frame %d of %d (file damaged or truncated); "
                       "the frames after it are missing", self.path.name, position,
                       self.metadata["n_frames_in_file"])

    def _release(self) -> None:
        if self._cap is not None:
            self._cap.release()
            self._cap = None
        for cap in self._live_iter_caps:
            cap.release()
        self._live_iter_caps.clear()
        self._cache.clear()
