"""fringecount: count interferometer fringes in camera recordings.

The library reads a recording, finds the ring centre, turns each frame into a
radial profile, tracks the fringe phase through time, marks the intervals it
cannot follow (with the reason) and bridges them where physics allows. The
measurement models in :mod:`fringecount.models` turn a count into a physical
result with an uncertainty.
"""

from __future__ import annotations

import logging

__version__ = "0.1.0"

logging.getLogger(__name__).addHandler(logging.NullHandler())
