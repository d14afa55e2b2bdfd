"""Tests of ``fringecount roi``: shared options with ``count``, paste-ready suggestions, output forms.

The end-to-end checks run the real :func:`fringecount.pipeline.inspect_roi` on a
synthetic ring recording whose centre and ring radii are known from the
equal-inclination law r_p^2 ~ (f^2 lambda / d)(p - 1 + eps) (REFERENCES 3e; Born &
Wolf, Hecht, from memory).
"""

from __future__ import annotations

import argparse
import json
import shlex
import struct

import numpy as np
import pytest

from fringecount.cli import build_parser, main
from fringecount.cli import roi as roi_cli
from fringecount.cli._options import add_clip_arguments, add_roi_arguments, settings_from_args
from fringecount.synthetic import Camera, MirrorSweep, Scene, render_clip

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2 (ISO/IEC 15948:2004)
WAVELENGTH_M = 632.991e-9  # He-Ne, vacuum (REFERENCES 5, CIPM 2007)
FOCAL_PX = 400.0
GAP_M = 0.1e-3  # rings about 5 px apart at the frame edge: well above 2 px (Nyquist)
CENTER_XY = (83.3, 61.7)


def _subparser(name: str) -> argparse.ArgumentParser | None:
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return sub.choices.get(name)


def _group_options(parser: argparse.ArgumentParser, title: str) -> dict[str, tuple]:
    group = next(g for g in parser._action_groups if g.title == title)
    return {a.dest: (tuple(a.option_strings), a.default, a.type, a.choices, a.nargs, a.const)
            for a in group._group_actions}


@pytest.mark.parametrize("title", ["recording", "region of interest"])
def test_roi_takes_exactly_the_shared_options(title):
    reference = argparse.ArgumentParser()
    add_clip_arguments(reference)
    add_roi_arguments(reference)
    roi = _subparser("roi")
    assert _group_options(roi, title) == _group_options(reference, title)
    count = _subparser("count")
    if count is not None:  # the lead's command; the same groups, option for option
        assert _group_options(count, title) == _group_options(roi, title)


def test_suggested_options_round_trip_into_settings():
    roi = _subparser("roi")
    args = roi.parse_args(["clip.avi", "--channel", "green", "--saturation", "250", "--geometry", "rings",
                           "--fixed-center", "--inner", "3", "--frames", "10:500:2"])
    suggested = {"inner": 7.26, "outer": 143.04, "crop": (10, 4, 300, 230)}
    options = roi_cli.count_options(args, suggested)
    # paste the printed options into a parser with count's options (the same ones, see above)
    line = shlex.join(options)
    again = roi.parse_args(["clip.avi", *shlex.split(line)])
    settings = settings_from_args(again)
    assert settings.inner_radius_px == pytest.approx(7.3)  # printed to 0.1 px
    assert settings.outer_radius_px == pytest.approx(143.0)
    assert settings.crop == (10, 4, 300, 230)
    assert settings.channel == "green" and settings.saturation_level == 250
    assert settings.geometry == "rings" and settings.track_center is False
    assert (settings.first_frame, settings.last_frame, settings.step) == (10, 500, 2)
    # a suggestion without a crop drops the crop; nothing suggested keeps what was given
    args = roi.parse_args(["clip.avi", "--crop", "1,2,30,40", "--outer", "50"])
    assert "--crop" not in roi_cli.count_options(args, {"crop": None})
    assert roi_cli.count_options(args, {}) == ["--outer", "50", "--crop", "1,2,30,40"]


@pytest.fixture(scope="module")
def ring_clip(tmp_path_factory):
    camera = Camera(width=160, height=120, focal_px=FOCAL_PX)
    frames, truth = render_clip(Scene(center_xy=CENTER_XY), camera,
                                MirrorSweep(d0_m=GAP_M, velocity_m_s=0.5e-6, wavelength_m=WAVELENGTH_M),
                                12, 30.0, rng=1234)
    path = tmp_path_factory.mktemp("roi") / "rings.npy"
    np.save(path, frames)
    return path, truth


@pytest.fixture()
def pipeline():
    return pytest.importorskip("fringecount.pipeline", reason="pipeline (inspect_roi) not landed yet")


def test_roi_json_finds_the_known_centre_and_ring_spacing(ring_clip, pipeline, capsys):
    path, truth = ring_clip
    assert main(["roi", str(path), "--fps", "30", "--frame", "3", "--json"]) == 0
    out, err = capsys.readouterr()
    found = json.loads(out)  # stdout holds the JSON and nothing else
    assert set(found) >= {"center", "center_sigma", "geometry", "radius_range_px", "ring_spacing_px",
                          "visibility", "saturated_fraction", "suggested", "frame", "count_options"}
    assert found["frame"] == 3 and found["geometry"] == "rings"
    # noise-free-ish synthetic rings: 0.3 px is a generous bound for a sub-pixel centre
    assert found["center"] == pytest.approx([truth["center_x"][3], truth["center_y"][3]], abs=0.3)
    # ring spacing near radius r from the bright-ring condition 2 d cos(theta) = m lambda with
    # r = f tan(theta) (REFERENCES 3e, exact form): dr = lambda (f^2 + r^2)^(3/2) / (2 d f r).
    # (The small-angle form f^2 lambda / (2 d r) is 10 % short here, at r/f = 0.26.)
    r_out = found["radius_range_px"][1]
    f, d = FOCAL_PX, truth["gap_m"][3]
    expected = WAVELENGTH_M * (f ** 2 + r_out ** 2) ** 1.5 / (2 * d * f * r_out)
    # 6 %: the spacing changes by about spacing / r (5 %) across the last ring, and "near the outer
    # edge" is not one exact radius
    assert found["ring_spacing_px"] == pytest.approx(expected, rel=0.06)
    assert 0 < found["visibility"] <= 1 and 0 <= found["saturated_fraction"] <= 1


def test_roi_text_and_picture(ring_clip, pipeline, tmp_path, capsys):
    path, _ = ring_clip
    picture = tmp_path / "roi.png"
    assert main(["roi", str(path), "--fps", "30", "--image", str(picture), "--inner", "4"]) == 0
    out, _ = capsys.readouterr()
    for label in ("centre", "usable radius", "ring spacing", "visibility", "saturated", "suggested ROI",
                  "count with:"):
        assert label in out
    command = next(line for line in out.splitlines() if line.startswith("count with:"))
    words = shlex.split(command.split(":", 1)[1])
    assert words[:3] == ["fringecount", "count", str(path)]
    parsed = _subparser("roi").parse_args(["roi-clip", *words[3:]])  # the options parse as count's
    settings_from_args(parsed)
    data = picture.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    width, height = struct.unpack(">II", data[16:24])
    assert width > 600 and height > 400
    # iterating on the picture replaces it (it is a working view, not a result)
    assert main(["roi", str(path), "--fps", "30", "--image", str(picture), "--inner", "6", "-q"]) == 0


def test_roi_bad_input_is_one_line(ring_clip, tmp_path, capsys):
    path, _ = ring_clip
    assert main(["roi", str(tmp_path / "missing.avi")]) != 0
    _, err = capsys.readouterr()
    assert err.count("\n") == 1 and "error" in err
    assert main(["roi", str(path), "--fps", "30", "--inner", "50", "--outer", "10"]) != 0
    _, err = capsys.readouterr()
    assert err.count("\n") == 1 and "outer radius" in err


def test_roi_picture_marks_saturated_and_unused_pixels(tmp_path):
    """The picture itself, drawn from an inspection-shaped record of a saturating synthetic frame."""
    import dataclasses
    import io

    from PIL import Image

    from fringecount import report

    camera = Camera(width=160, height=120, focal_px=FOCAL_PX)
    frames, truth = render_clip(Scene(center_xy=CENTER_XY, peak_fraction=0.8), camera,
                                MirrorSweep(d0_m=GAP_M, wavelength_m=WAVELENGTH_M), 1, 30.0, rng=7)
    image = frames[0]
    saturated = image >= camera.full_scale_dn  # the camera clips at full scale (synthetic model)
    assert saturated.any()
    cx, cy = truth["center_x"][0], truth["center_y"][0]
    rows, cols = np.indices(image.shape)
    radius = np.hypot(cols - cx, rows - cy)
    mask = (radius >= 5) & (radius <= 50) & ~saturated

    @dataclasses.dataclass(frozen=True)
    class Inspection:  # the fields of RoiInspection that the picture reads
        image: np.ndarray
        mask: np.ndarray
        saturated: np.ndarray
        center: tuple
        roi: tuple
        suggested: dict
        radius_range_px: tuple
        profile_r_px: np.ndarray
        profile_values: np.ndarray
        frame_index: int = 0
        geometry: str = "rings"

    r_px = np.arange(0.5, 60.0)
    values = np.array([image[(radius >= r - 0.5) & (radius < r + 0.5)].mean() for r in r_px])
    inspection = Inspection(image, mask, saturated, (cx, cy), (5.0, 50.0, None),
                            {"inner": 6.0, "outer": 55.0, "crop": (2, 2, 150, 110)}, (6.0, 55.0), r_px, values)
    drawn = report.render_roi(inspection)
    assert drawn.panels == (report.PANEL_ROI_FRAME, report.PANEL_ROI_PROFILE)
    assert any(e.startswith("saturated") for e in drawn.legend)
    assert "suggested annulus" in drawn.legend and "suggested crop" in drawn.legend
    with Image.open(io.BytesIO(report._png_bytes(drawn.figure))) as im:
        rgb = np.asarray(im.convert("RGB"), dtype=float)
    ax = drawn.figure.axes[0]
    height = rgb.shape[0]

    def pixel(col, row):
        x, y = ax.transData.transform((col, row))
        return rgb[int(round(height - y)), int(round(x))]

    # a saturated pixel away from every drawn line is painted vermillion (#D55E00, Okabe & Ito 2008)
    # at 90 % opacity over white: within 0.1 x 255 of the vermillion channels
    far = saturated & (np.abs(radius - 5) > 3) & (np.abs(radius - 50) > 3) & (np.abs(radius - 6) > 3) \
        & (np.abs(radius - 55) > 3) & (radius > 4)
    far[:4] = far[-12:] = False
    far[:, :4] = far[:, -12:] = False
    r0, c0 = np.argwhere(far)[0]
    assert np.abs(pixel(c0, r0) - [0xD5, 0x5E, 0x00]).max() < 0.1 * 255 + 1
    # a lit pixel outside the annulus is dimmed: 45 % of its grey value at most (55 % black overlay)
    outside = (radius > 58) & (image > 150) & ~saturated
    outside[:4] = outside[-12:] = False
    outside[:, :4] = outside[:, -12:] = False
    r1, c1 = np.argwhere(outside)[0]
    assert pixel(c1, r1).max() <= 0.45 * image[r1, c1] + 3  # +3: PNG rounding and resampling
    path = report.write_roi_image(inspection, tmp_path / "view.png")
    assert path.read_bytes()[:8] == PNG_SIGNATURE
