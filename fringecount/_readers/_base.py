"""The frame-source contract shared by every reader: selection, channel, bit depth.

A reader subclasses :class:`FrameSource`, opens its container, then calls
:meth:`FrameSource._finish_open` with the number of frames in the file; the
base class selects the frame range, reads the first selected frame to learn the
shape and sample type, and chooses the colour channel.
"""

from __future__ import annotations

import abc
import contextlib
import logging
import math
import numbers
import operator
import pathlib
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import cv2
import numpy as np

from ..errors import ClipError, SettingsError
from ..settings import CHANNELS

__all__ = ["Frame", "FrameSource", "UnreadableFrame", "check_fps_override", "container_fps_ok",
           "MAX_CONTAINER_FPS", "MAX_OVERRIDE_FPS", "quiet_opencv"]

logger = logging.getLogger("fringecount.frames")

#: Highest frame rate a container may claim before it counts as nonsense (frames/s).
MAX_CONTAINER_FPS = 1e5
#: Highest frame rate a user may pass (frames/s); the same bound as ``CountSettings``.
MAX_OVERRIDE_FPS = 1e6
#: Frames looked at to choose the colour channel (spread over the selected range).
N_CHANNEL_SAMPLES = 6
#: A channel with more than this fraction of its pixels at the top of the sample
#: range is treated as saturated and not chosen by ``channel="auto"``.
SATURATED_FRACTION = 0.5
#: ``auto`` takes the luma (``gray``) when its fringe signal reaches this fraction
#: of the best single channel's: the fringes are in every channel, and luma
#: averages the channels' noise.
GRAY_PREFERENCE = 0.95

_SUPPORTED_DTYPES = (np.dtype(np.uint8), np.dtype(np.uint16), np.dtype(np.float32))


@dataclass(frozen=True)
class Frame:
    """One decoded frame.

    Attributes
    ----------
    index : int
        Original 0-based frame number in the file.
    time_s : float
        Time of the frame in seconds from the start of the recording.
    image : (M, N) ndarray
        The frame, one channel, in the source's native sample type.
    """

    index: int
    time_s: float
    image: np.ndarray


class UnreadableFrame(ClipError):
    """One frame of an otherwise readable source cannot be decoded."""


def container_fps_ok(fps: Any) -> bool:
    """True if a frame rate read from a file is usable (0 < fps <= 1e5 frames/s)."""
    try:
        value = float(fps)
    except (TypeError, ValueError):
        return False
    return math.isfinite(value) and 0 < value <= MAX_CONTAINER_FPS


def check_fps_override(fps: Any) -> float | None:
    """Validate the user's frame rate (frames/s); ``None`` passes through.

    Raises
    ------
    SettingsError
        If ``fps`` is not a finite number in (0, 1e6].
    """
    if fps is None:
        return None
    if isinstance(fps, bool) or not isinstance(fps, numbers.Real):
        raise SettingsError(f"fps must be a number of frames per second, got {fps!r}; pass e.g. --fps 30")
    value = float(fps)
    if not (math.isfinite(value) and 0 < value <= MAX_OVERRIDE_FPS):
        raise SettingsError(f"fps must be a positive number of frames per second up to {MAX_OVERRIDE_FPS:g}, "
                            f"got {fps!r}; pass e.g. --fps 30")
    return value


def _whole(value: Any, name: str) -> int:
    if isinstance(value, bool):
        raise SettingsError(f"{name} must be a whole number, got {value!r}; fix --frames")
    try:
        return operator.index(value)
    except TypeError:
        raise SettingsError(f"{name} must be a whole number, got {value!r}; fix --frames") from None


def select_indices(n_frames: int, first_frame: Any, last_frame: Any, step: Any, path: pathlib.Path) -> np.ndarray:
    """Original frame numbers picked by ``first_frame..last_frame`` (inclusive) every ``step``."""
    first = _whole(first_frame, "first frame")
    step_ = _whole(step, "step")
    last = None if last_frame is None else _whole(last_frame, "last frame")
    if first < 0 or step_ < 1:
        raise SettingsError(f"frame range needs first >= 0 and step >= 1, got first={first}, step={step_}; "
                            "pass e.g. --frames 0:500:1")
    if last is not None and last < first:
        raise SettingsError(f"last frame {last} comes before first frame {first}; "
                            "pass --frames FIRST:LAST with LAST >= FIRST")
    if first >= n_frames or (last is not None and last >= n_frames):
        asked = f"{first}..{last}" if last is not None else f"from {first}"
        raise SettingsError(f"frame range {asked} is beyond the clip {path.name}, which has {n_frames} frames "
                            f"(0..{n_frames - 1}); fix --frames")
    stop = n_frames if last is None else last + 1
    return np.arange(first, stop, step_, dtype=np.int64)


def native_dtype(dtype: np.dtype, where: str) -> np.dtype:
    """The sample type frames are returned in; other integer types are refused."""
    dtype = np.dtype(dtype)
    if dtype.kind == "f":
        return np.dtype(np.float32)
    if dtype.kind == "b":
        return np.dtype(np.uint8)
    native = dtype.newbyteorder("=")
    if native in _SUPPORTED_DTYPES:
        return native
    raise ClipError(f"{where} holds {dtype} samples, which fringecount does not read; "
                    "save the frames as 8-bit or 16-bit unsigned integers (or float)")


def detect_bit_depth(planes: list[np.ndarray], dtype: np.dtype) -> tuple[int, str]:
    """Significant bits of integer samples and how that was found.

    Returns ``(bits, source)``. For 16-bit words: if every sample's lowest ``s``
    bits are zero (with at least 64 distinct values seen), the data are
    ``16 - s``-bit left-aligned (``"low bits always zero"``); else if the largest
    sample is exactly 1023, 4095 or 16383 (a 10-, 12- or 14-bit sensor's clip
    level reached by saturated pixels), that depth (``"clip level"``); else the
    container depth (``"container"``): a dim 12-bit image is not recognised.
    """
    if dtype.kind == "f":
        return 32, "container"
    container_bits = dtype.itemsize * 8
    if container_bits != 16 or not planes:
        return container_bits, "container"
    values = np.unique(np.concatenate([np.asarray(p, dtype=np.uint16).ravel() for p in planes]))
    nonzero = values[values > 0]
    if nonzero.size >= 64:
        combined = int(np.bitwise_or.reduce(nonzero))
        shift = (combined & -combined).bit_length() - 1
        if 2 <= shift <= 8:
            return 16 - shift, "low bits always zero"
    top = int(values.max()) if values.size else 0
    for bits in (10, 12, 14):
        if top == 2 ** bits - 1:
            return bits, "clip level"
    return 16, "container"


def _subsample(image: np.ndarray, max_side: int = 256) -> np.ndarray:
    stride = max(1, int(math.ceil(max(image.shape[0], image.shape[1]) / max_side)))
    return image[::stride, ::stride]


_CHANNEL_POS = {"bgr": {"blue": 0, "green": 1, "red": 2}, "rgb": {"red": 0, "green": 1, "blue": 2}}
_GRAY_CODES = {("bgr", 3): cv2.COLOR_BGR2GRAY, ("bgr", 4): cv2.COLOR_BGRA2GRAY,
               ("rgb", 3): cv2.COLOR_RGB2GRAY, ("rgb", 4): cv2.COLOR_RGBA2GRAY}


def to_plane(raw: np.ndarray, channel: str | None, order: str) -> np.ndarray:
    """One 2-D plane from a raw frame: a colour channel, or luma for ``gray``.

    Luma uses the ITU-R BT.601 weights 0.299 R + 0.587 G + 0.114 B (as OpenCV's
    ``COLOR_BGR2GRAY``). Single-channel frames pass through.
    """
    if raw.ndim == 2:
        return raw
    if raw.shape[2] == 1:
        return raw[:, :, 0]
    if channel == "gray":
        return cv2.cvtColor(np.ascontiguousarray(raw), _GRAY_CODES[order, raw.shape[2]])
    return np.ascontiguousarray(raw[:, :, _CHANNEL_POS[order][channel]])


def choose_channel(samples: list[np.ndarray], order: str, top: float | None) -> tuple[str, dict[str, float]]:
    """Pick the channel that carries the fringes from a few colour frames.

    The score of a channel is the mean spatial standard deviation of the change
    between consecutive sampled frames (moving fringes change a lot, a steady
    background not at all); for a single sample, or if nothing changes, the
    spatial standard deviation of the frames themselves. Channels more than
    half saturated are skipped (and then luma, which mixes them in, too). Luma
    wins when it carries nearly as much signal as the best channel (grey
    content), see ``GRAY_PREFERENCE``.
    """
    small = [_subsample(s).astype(np.float32) for s in samples]
    names = ("red", "green", "blue")
    planes = {name: [to_plane(s, name, order) for s in small] for name in names}
    planes["gray"] = [to_plane(s, "gray", order) for s in small]

    def change_score(stack: list[np.ndarray]) -> float:
        if len(stack) < 2:
            return 0.0
        return float(np.mean([np.std(b - a) for a, b in zip(stack[:-1], stack[1:])]))

    scores = {name: change_score(p) for name, p in planes.items()}
    if max(scores.values()) <= 1e-6:
        scores = {name: float(np.mean([np.std(x) for x in p])) for name, p in planes.items()}
    usable = list(names)
    if top is not None:
        unsaturated = [n for n in names if np.mean([np.mean(x >= top) for x in planes[n]]) <= SATURATED_FRACTION]
        usable = unsaturated or usable
    best = max(usable, key=lambda n: scores[n])
    if len(usable) == len(names) and scores["gray"] >= GRAY_PREFERENCE * scores[best]:
        best = "gray"
    return best, scores


@contextlib.contextmanager
def quiet_opencv() -> Iterator[None]:
    """Silence OpenCV's console messages while it probes or decodes a file (our logger reports instead)."""
    logging_api = getattr(getattr(cv2, "utils", None), "logging", None)
    if logging_api is None:
        yield
        return
    previous = logging_api.getLogLevel()
    logging_api.setLogLevel(logging_api.LOG_LEVEL_SILENT)
    try:
        yield
    finally:
        logging_api.setLogLevel(previous)



class FrameSource(abc.ABC):
    """A finite, lazily decoded sequence of 2-D frames from one recording.

    Attributes
    ----------
    path : pathlib.Path
        The file or folder read.
    frame_shape : (int, int)
        ``(rows, cols)`` of every returned frame.
    dtype : numpy.dtype
        Sample type of returned frames: uint8 or uint16 (the data's native
        depth), float32 only for float data.
    fps : float
        Frame rate in frames/s (the container's, or the override).
    indices : (n,) ndarray of int64
        Original 0-based frame numbers selected by the range and stride.
    times_s : (n,) ndarray of float64
        Time of each selected frame in seconds, ``index / fps``.
    metadata : dict
        ``format``, ``codec``, ``bit_depth``, ``bit_depth_source``, ``channel``
        (the one used), ``channel_scores``, ``n_frames_in_file``, ``fps_source``,
        ``truncated``, ``unreadable`` (original indices skipped), and more per reader.

    Notes
    -----
    Frames are read only when asked for; nothing holds the whole clip. Iterate
    for sequential decoding; :meth:`get_frame` gives random access.
    """

    path: pathlib.Path
    frame_shape: tuple[int, int]
    dtype: np.dtype
    fps: float
    indices: np.ndarray
    times_s: np.ndarray
    metadata: dict

    #: Order of colour samples in raw frames from this reader.
    _channel_order = "bgr"

    def __init__(self, path: pathlib.Path) -> None:
        self.path = path
        self.metadata = {"truncated": False, "unreadable": []}
        self._closed = False
        self._channel: str | None = None
        self._raw_shape: tuple[int, ...] = ()
        self._raw_dtype: np.dtype | None = None

    # -- what a reader supplies ------------------------------------------------
    @abc.abstractmethod
    def _read_raw(self, index: int) -> np.ndarray:
        """The frame with original number ``index`` as stored (2-D, or rows x cols x channels).

        Raises :class:`UnreadableFrame` if that frame cannot be decoded.
        """

    def _release(self) -> None:
        """Free the reader's handles (called once by :meth:`close`)."""

    # -- set-up shared by all readers -----------------------------------------
    def _finish_open(self, *, n_frames_in_file: int, fps: float, fps_source: str, first_frame: Any,
                     last_frame: Any, step: Any, channel: str, bit_depth_hint: int | None = None) -> None:
        if channel not in CHANNELS:
            raise SettingsError(f"channel must be one of {', '.join(CHANNELS)}, got {channel!r}; fix --channel")
        self.fps = float(fps)
        self.indices = select_indices(n_frames_in_file, first_frame, last_frame, step, self.path)
        self.times_s = self.indices / self.fps
        self.metadata.update(n_frames_in_file=int(n_frames_in_file), fps_source=fps_source)
        try:
            first = self._read_raw(int(self.indices[0]))
        except UnreadableFrame as exc:
            raise ClipError(f"cannot read the first frame of {self.path.name} ({exc}); "
                            "check the file or start later with --frames") from None
        if first.ndim not in (2, 3) or (first.ndim == 3 and first.shape[2] not in (1, 3, 4)) \
                or first.shape[0] < 1 or first.shape[1] < 1:
            raise ClipError(f"{self.path.name} holds frames of shape {first.shape}, not images; "
                            "use grey or RGB frames")
        self._raw_shape = first.shape
        self._raw_dtype = first.dtype
        self.dtype = native_dtype(first.dtype, self.path.name)
        self.frame_shape = (int(first.shape[0]), int(first.shape[1]))
        samples = [first] + self._channel_samples()
        is_colour = first.ndim == 3 and first.shape[2] in (3, 4)
        if bit_depth_hint is not None:
            bits, source = bit_depth_hint, "file tag"
        else:
            bits, source = detect_bit_depth(samples, self.dtype)
        top = None if self.dtype.kind == "f" else float(2 ** bits - 1)
        if not is_colour:
            self._channel, scores = "gray", {}
            if channel not in ("auto", "gray"):
                logger.info("%s has one channel; channel %r does not apply, using it as is",
                            self.path.name, channel)
        elif channel == "auto":
            self._channel, scores = choose_channel(samples, self._channel_order, top)
            logger.info("%s: fringes read from the %s channel (scores %s)", self.path.name, self._channel,
                        {k: round(v, 3) for k, v in scores.items()})
        else:
            self._channel, scores = channel, {}
        self.metadata.update(bit_depth=bits, bit_depth_source=source, channel=self._channel,
                             channel_requested=channel, colour=is_colour,
                             channel_scores={k: round(v, 4) for k, v in scores.items()})

    def _channel_samples(self) -> list[np.ndarray]:
        """A few more raw frames spread over the selection (unreadable ones left out)."""
        if len(self.indices) < 2:
            return []
        picks = np.unique(np.linspace(0, len(self.indices) - 1, N_CHANNEL_SAMPLES).round().astype(int))[1:]
        out = []
        for k in picks:
            try:
                raw = self._read_raw(int(self.indices[k]))
            except UnreadableFrame:
                continue
            if raw.shape == self._raw_shape:
                out.append(raw)
        return out

    def _plane(self, raw: np.ndarray, index: int) -> np.ndarray:
        """Check a raw frame against the first one and reduce it to the returned plane."""
        if raw.shape != self._raw_shape:
            raise UnreadableFrame(f"frame {index} has shape {raw.shape}, the clip {self._raw_shape}")
        plane = to_plane(raw, self._channel, self._channel_order)
        if plane.dtype != self.dtype:
            plane = plane.astype(self.dtype)
        elif not plane.flags.c_contiguous or not plane.flags.writeable or plane.base is not None:
            plane = np.array(plane, order="C")
        return plane

    # -- the public sequence ---------------------------------------------------
    def __len__(self) -> int:
        return len(self.indices)

    def _check_open(self) -> None:
        if self._closed:
            raise ValueError(f"frame source for {self.path.name} is closed")

    def get_frame(self, k: int) -> np.ndarray:
        """The ``k``-th selected frame, ``0 <= k < len(self)``, as an (M, N) array.

        Raises
        ------
        IndexError
            If ``k`` is out of range.
        ClipError
            If that frame cannot be decoded.
        """
        self._check_open()
        k = operator.index(k)
        if not 0 <= k < len(self.indices):
            raise IndexError(f"frame {k} out of range for {len(self.indices)} selected frames")
        index = int(self.indices[k])
        try:
            return self._plane(self._read_raw(index), index)
        except UnreadableFrame as exc:
            if index not in self.metadata["unreadable"]:
                self.metadata["unreadable"].append(index)
            raise UnreadableFrame(f"cannot decode frame {index} of {self.path.name} ({exc}); "
                                  "leave it out with --frames or repair the file") from None

    def __getitem__(self, k: int) -> np.ndarray:
        k = operator.index(k)
        return self.get_frame(k + len(self) if k < 0 else k)

    def __iter__(self) -> Iterator[Frame]:
        """Decode the selected frames in order; unreadable ones are skipped with a warning."""
        self._check_open()
        for k, index in enumerate(self.indices.tolist()):
            try:
                image = self._plane(self._read_raw(index), index)
            except UnreadableFrame as exc:
                self._note_unreadable(index, str(exc))
                continue
            yield Frame(index, float(self.times_s[k]), image)

    def _note_unreadable(self, index: int, why: str) -> None:
        if index not in self.metadata["unreadable"]:
            self.metadata["unreadable"].append(index)
        logger.warning("%s: skipping frame %d: %s", self.path.name, index, why)

    def close(self) -> None:
        """Release file handles; the source cannot be read afterwards."""
        if not self._closed:
            self._closed = True
            self._release()

    def __enter__(self) -> "FrameSource":
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def __repr__(self) -> str:
        shape = getattr(self, "frame_shape", None)
        return (f"<{type(self).__name__} {self.path.name!r}: {len(getattr(self, 'indices', ()))} frames "
                f"{shape} {getattr(self, 'dtype', None)} at {getattr(self, 'fps', None)} fps>")
