"""Physically modelled synthetic fringe recordings with ground truth.

Tests, the demo, the notebooks and the bundled sample clips all use this module.

Model
-----
Equal-inclination (Haidinger) rings seen by a camera focused at infinity: the pixel at
distance r from the optical axis sees the field angle theta = atan(r / focal_px), and

    OPD(theta, t) = 2 d(t) cos(theta) + 2 t_p (sqrt(n(lambda)^2 - sin^2 i) - cos i) + extra(t)

with d the air gap, t_p an optional glass plate in one arm (i the angle of incidence on
it, = theta unless the plate is tilted; REFERENCES section 3a) and ``extra`` an OPD that
is the same at every field angle (a gas cell, to first order). The irradiance is

    I = I0 E(x, y) (1 + V cos(2 pi OPD / lambda))

with E a Gaussian beam envelope. The on-axis order is m0(t) = OPD(0, t) / lambda(t) and
the true count is ``fringes(t) = m0(t) - m0(t_first)``: positive when the on-axis order
increases, i.e. when rings are born at the centre and expand.

Straight fringes (tilted mirror, ``Scene(geometry="straight")``):

    I = I0 E (1 + V cos(2 pi k.(x - c) + 2 pi m0(t)))

with carrier k in cycles/pixel. The count's sign follows m0 as for rings; a fringe of
constant phase sits at k.(x - c) = const - m0, so for a positive count the fringes move
against k (towards -x for k along +x). The field-angle dependence of the OPD is ignored
for straight fringes (collimated beams).

Approximations (stated once, used everywhere)
---------------------------------------------
* Wavelengths are vacuum wavelengths and the medium in the interferometer has index 1
  (the air index is neglected: d is the optical gap). Plate indices come from the
  Sellmeier formulas of Malitson (fused silica) and SCHOTT (N-BK7) evaluated at that
  wavelength and used as the index relative to the surrounding medium.
* A mode hop runs on two modes for its duration, the new one taking over linearly in
  power; the image is the power-weighted sum of the two patterns.
* Exposure blur averages the irradiance over ``Camera.n_subsamples`` instants within
  the exposure, which is centred on the frame's time stamp.
* Camera: Poisson shot noise in electrons, full-well clip, Gaussian read noise,
  conversion ``electrons_per_dn``, rounding, clip to the integer range.

Examples
--------
>>> from fringecount.synthetic import Camera, Scene, MirrorSweep, render_clip
>>> cam = Camera(width=64, height=48)
>>> frames, truth = render_clip(Scene(), cam, MirrorSweep(d0_m=0.3e-3, velocity_m_s=0.5e-6), 10, 30.0)
>>> frames.shape, frames.dtype.name
((10, 48, 64), 'uint8')
>>> round(float(truth["fringes"].iloc[-1]), 3)   # 9 frames x 1/30 s x 0.5 um/s x 2 / 632.99 nm
0.474
"""

from __future__ import annotations

import argparse
import sys

from ._synth._glass import SELLMEIER, plate_index
from ._synth._render import (TRUTH_COLUMNS, Camera, Scene, render_clip, render_frames,
                             render_frames_with_truth, ring_center_offset_px)
from ._synth._sweeps import (DiodeScan, GasFill, MirrorSweep, ModeHop, OpticalState, PlateTilt,
                             ThermalExpansion, on_axis_order, opd_m, piezo_hysteresis_drive,
                             sinusoidal_drive)
from ._synth._samples import SAMPLE_NAMES, ExponentialFill, make_sample_clips
from ._synth._writers import VIDEO_CODECS, write_image_folder, write_tiff_stack, write_video

__all__ = [
    "Camera", "Scene", "render_frames", "render_frames_with_truth", "render_clip", "TRUTH_COLUMNS",
    "OpticalState", "MirrorSweep", "DiodeScan", "ModeHop", "GasFill", "PlateTilt", "ThermalExpansion",
    "sinusoidal_drive", "piezo_hysteresis_drive", "opd_m", "on_axis_order", "ring_center_offset_px",
    "plate_index", "SELLMEIER",
    "write_video", "write_image_folder", "write_tiff_stack", "VIDEO_CODECS",
    "make_sample_clips", "SAMPLE_NAMES", "ExponentialFill", "main",
]


def main(argv=None) -> int:
    """``python -m fringecount.synthetic OUT_DIR``: (re)make the sample clips in OUT_DIR."""
    from .errors import FringecountError

    parser = argparse.ArgumentParser(
        prog="python -m fringecount.synthetic",
        description="Render the bundled sample clips (video, truth table, scenario JSON).")
    parser.add_argument("out_dir", help="folder to write the clips into, e.g. sample_clips/")
    parser.add_argument("--only", action="append", choices=SAMPLE_NAMES,
                        help="make only this clip (repeatable)")
    args = parser.parse_args(argv)
    try:
        paths = make_sample_clips(args.out_dir, names=args.only)
    except FringecountError as err:
        print(f"error: {err}", file=sys.stderr)
        return err.exit_code
    for p in paths:
        print(p, file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
