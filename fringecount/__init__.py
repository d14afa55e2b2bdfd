"""fringecount: count interferometer fringes in camera recordings.

The library reads a recording, finds the ring centre, turns each frame into a
radial profile, tracks the fringe phase through time, marks the intervals it
cannot follow (with the reason) and bridges them where physics allows. The
measurement models in :mod:`fringecount.models` turn a count into a physical
result with an uncertainty.

Examples
--------
>>> from fringecount import count, CountSettings          # doctest: +SKIP
>>> result = count("clip.avi", CountSettings(outer_radius_px=120))   # doctest: +SKIP
>>> result.total_fringes, result.total_fringes_sigma      # doctest: +SKIP
"""

from __future__ import annotations

import logging

__version__ = "0.1.0"

logging.getLogger(__name__).addHandler(logging.NullHandler())

from .errors import FringecountError, InputError  # noqa: E402
from .frames import open_frames  # noqa: E402
from .pipeline import CountResult, RoiInspection, count, inspect_roi  # noqa: E402
from .results import read_result, write_result  # noqa: E402
from .settings import CountSettings  # noqa: E402

__all__ = ["count", "inspect_roi", "CountResult", "RoiInspection", "CountSettings", "open_frames",
           "write_result", "read_result", "FringecountError", "InputError", "__version__"]
