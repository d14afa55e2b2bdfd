"""Analysis settings shared by the library, ``count``, ``roi`` and ``batch``.

Units: pixels and frames inside; seconds for times. Image coordinates are
``x`` = column and ``y`` = row, origin at the centre of pixel (0, 0).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any

from .errors import SettingsError

__all__ = ["CountSettings", "GEOMETRIES", "CHANNELS"]

GEOMETRIES = ("auto", "rings", "straight")
CHANNELS = ("auto", "red", "green", "blue", "gray")


@dataclass(frozen=True)
class CountSettings:
    """Everything that steers one analysis of one recording.

    Attributes
    ----------
    fps : float or None
        Frame rate in frames/s; overrides the container's. Required for image
        folders and TIFF stacks without timing.
    channel : str
        Colour channel that carries the fringes: ``auto`` (the channel with the
        most fringe contrast), ``red``, ``green``, ``blue`` or ``gray``.
    first_frame, last_frame, step : int, int or None, int
        Frame range (0-based, ``last_frame`` inclusive) and stride.
    center : (float, float) or None
        Ring centre ``(x, y)`` in pixels; ``None`` finds it from the data.
    inner_radius_px, outer_radius_px : float, float or None
        Annulus of the region of interest around the centre, in pixels.
    crop : (int, int, int, int) or None
        Rectangle ``(x0, y0, x1, y1)`` in pixels (x1, y1 exclusive) to analyse.
    saturation_level : float or None
        Pixel value at or above which a pixel counts as saturated and is masked;
        ``None`` uses the top of the sample type (255 for 8-bit, 65535 for 16-bit).
    geometry : str
        ``auto``, ``rings`` (equal-inclination rings) or ``straight`` (tilted mirror).
    track_center : bool
        Re-estimate the centre over time and follow a drift that stands clear of the
        estimate's own scatter.
    max_step_fringes : float
        A frame-to-frame phase step above this (in fringes) is too fast to follow
        safely; 0.5 is the aliasing limit (Itoh 1982).
    min_visibility : float or None
        Visibility below which a frame is not trusted; ``None`` chooses it from the clip.
    wavelength_log : str or None
        CSV with ``time_s`` and ``wavelength_nm`` used to bridge mode hops.
    log_offset_s : float
        Added to the log's times to put them on the clip's clock.
    log_air_wavelengths : bool
        The log's wavelengths are in air rather than vacuum.
    hop_range_fringes : float
        Without a wavelength log, the largest whole-fringe jump a mode hop is
        assumed to hide (sets the sigma of such a gap).
    """

    fps: float | None = None
    channel: str = "auto"
    first_frame: int = 0
    last_frame: int | None = None
    step: int = 1
    center: tuple[float, float] | None = None
    inner_radius_px: float = 0.0
    outer_radius_px: float | None = None
    crop: tuple[int, int, int, int] | None = None
    saturation_level: float | None = None
    geometry: str = "auto"
    track_center: bool = True
    max_step_fringes: float = 0.35
    min_visibility: float | None = None
    wavelength_log: str | None = None
    log_offset_s: float = 0.0
    log_air_wavelengths: bool = False
    hop_range_fringes: float = 6.0
    extra: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.fps is not None and not (math.isfinite(self.fps) and 0 < self.fps <= 1e6):
            raise SettingsError(f"fps must be a positive number of frames per second up to 1e6, got {self.fps}; "
                                "pass e.g. --fps 30")
        if self.channel not in CHANNELS:
            raise SettingsError(f"channel must be one of {', '.join(CHANNELS)}, got {self.channel!r}")
        if self.geometry not in GEOMETRIES:
            raise SettingsError(f"geometry must be one of {', '.join(GEOMETRIES)}, got {self.geometry!r}")
        if self.first_frame < 0 or self.step < 1:
            raise SettingsError("frame range must have first >= 0 and step >= 1; pass e.g. --frames 0:500:1")
        if self.last_frame is not None and self.last_frame < self.first_frame:
            raise SettingsError(f"last frame {self.last_frame} comes before first frame {self.first_frame}; "
                                "pass --frames FIRST:LAST with LAST >= FIRST")
        if self.center is not None and not all(math.isfinite(v) for v in self.center):
            raise SettingsError("center must be two finite numbers; pass --center X,Y in pixels")
        if not (math.isfinite(self.inner_radius_px) and self.inner_radius_px >= 0):
            raise SettingsError("inner radius must be >= 0 pixels; pass e.g. --inner 0")
        if self.outer_radius_px is not None and not (
                math.isfinite(self.outer_radius_px) and self.outer_radius_px > self.inner_radius_px):
            raise SettingsError(f"outer radius ({self.outer_radius_px}) must exceed inner radius "
                                f"({self.inner_radius_px}); fix --outer/--inner")
        if self.crop is not None:
            x0, y0, x1, y1 = self.crop
            if x0 < 0 or y0 < 0 or x1 <= x0 or y1 <= y0:
                raise SettingsError(f"crop {self.crop} is not a rectangle x0,y0,x1,y1 with x1>x0>=0 and y1>y0>=0; "
                                    "fix --crop")
        if not (0 < self.max_step_fringes <= 0.5):
            raise SettingsError("max step must be in (0, 0.5] fringe per frame (0.5 is the aliasing limit)")
        if self.min_visibility is not None and not (0 <= self.min_visibility < 1):
            raise SettingsError("min visibility must be in [0, 1)")
        if not (self.hop_range_fringes >= 0):
            raise SettingsError("hop range must be >= 0 fringes")

    def replace(self, **changes: Any) -> "CountSettings":
        """Return a copy with ``changes`` applied (validated again)."""
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON dict of every setting, for provenance."""
        d = dataclasses.asdict(self)
        for k in ("center", "crop"):
            if d[k] is not None:
                d[k] = list(d[k])
        return d
