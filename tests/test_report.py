"""Tests of the report page (fringecount.report) and ``fringecount report DIR``.

The page is checked as a file a person would open: a well-formed PNG (PNG
specification, W3C/ISO/IEC 15948), read back by an independent decoder (Pillow),
with the expected panels, each gap shaded in its reason's colour where it lies on
the time axis, and frames taken from the gaps of a synthetic recording whose beam
is blocked there (fringecount.synthetic ground truth).
"""

from __future__ import annotations

import base64
import colorsys
import io
import itertools
import json
import re
import struct

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from fringecount import report
from fringecount.errors import InputError, ResultExistsError
from fringecount.synthetic import Camera, MirrorSweep, Scene, render_clip

FPS = 30.0
DARK_S = (0.7, 0.9)  # beam blocked: frames 21..27 are (partly) dark in the ground truth
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2 (ISO/IEC 15948:2004)


def _runs(flags: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) index of each run of True."""
    edges = np.flatnonzero(np.diff(np.r_[0, flags.astype(int), 0]))
    return [(int(a), int(b) - 1) for a, b in zip(edges[::2], edges[1::2])]


class StandInResult:
    """A CountResult-shaped object built from synthetic ground truth (frames, gaps, summary)."""

    def __init__(self, truth: pd.DataFrame, clip: str | None = None):
        dark = truth["dark"].to_numpy(bool)
        n = len(truth)
        self.frames = pd.DataFrame({
            "frame": truth["frame"], "time_s": truth["time_s"], "fringes": truth["fringes"],
            "fringes_sigma": np.linspace(0.01, 0.05, n), "visibility": truth["visibility"],
            "trusted": ~dark, "brightness": truth["brightness"], "center_x": truth["center_x"],
            "center_y": truth["center_y"], "residual": np.full(n, 0.05),
            "reason": np.where(dark, "dark", ""),
        })
        rows = []
        for a, b in _runs(dark):
            rows.append({"first_frame": a, "last_frame": b, "start_s": truth["time_s"][a],
                         "stop_s": truth["time_s"][b], "reason": "dark",
                         "fringes_across": truth["fringes"][b] - truth["fringes"][a],
                         "fringes_across_sigma": 0.2, "method": "rate", "ambiguous": False})
        self.gaps = pd.DataFrame(rows)
        self.summary = {"total_fringes": float(truth["fringes"].iloc[-1]), "total_fringes_sigma": 0.21,
                        "frames": n, "fps": FPS, "gaps": rows, "center": [48.0, 36.0], "geometry": "rings",
                        "ambiguous": False, "version": "test", "clip": clip}
        self.settings = None


@pytest.fixture(scope="module")
def clip(tmp_path_factory):
    camera = Camera(width=96, height=72, focal_px=300.0)
    frames, truth = render_clip(Scene(dark_intervals_s=[DARK_S]), camera,
                                MirrorSweep(d0_m=0.3e-3, velocity_m_s=1e-6), 60, FPS, rng=1234)
    path = tmp_path_factory.mktemp("clip") / "dark_gap.npy"
    np.save(path, frames)
    return path, frames, truth


@pytest.fixture(scope="module")
def drawn(clip):
    path, _, truth = clip
    result = StandInResult(truth, clip=str(path))
    return result, report.render_report(result, clip=path)


def _png_size(data: bytes) -> tuple[int, int]:
    """Width and height from the IHDR chunk (PNG specification 11.2.2)."""
    assert data[:8] == PNG_SIGNATURE
    length, kind = struct.unpack(">I4s", data[8:16])
    assert kind == b"IHDR" and length == 13
    return struct.unpack(">II", data[16:24])


def test_report_files_are_well_formed(clip, tmp_path, capsys):
    path, _, truth = clip
    written = report.write_report(StandInResult(truth, clip=str(path)), tmp_path, clip=path)
    assert [p.name for p in written] == ["report.png", "report.html"]
    png = written[0].read_bytes()
    width, height = _png_size(png)
    # A4 portrait (8.27 x 11.69 in, ISO 216) at 150 dpi; +-1 px for rounding to whole pixels
    assert abs(width - 8.27 * 150) <= 1 and abs(height - 11.69 * 150) <= 1
    with Image.open(io.BytesIO(png)) as im:  # an independent decoder reads it whole
        im.load()
        assert im.size == (width, height) and im.mode in ("RGB", "RGBA")
    page = written[1].read_text(encoding="utf-8")
    embedded = re.search(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)
    assert embedded and base64.b64decode(embedded.group(1)) == png
    assert "<td>dark</td>" in page
    # the library never prints (progress and logs are the CLI's)
    assert capsys.readouterr() == ("", "")
    assert not list(tmp_path.glob(".*.part"))  # no staging leftovers from the atomic writes


def test_report_refuses_to_overwrite_without_force(clip, tmp_path):
    _, _, truth = clip
    result = StandInResult(truth)
    png = tmp_path / "page.png"
    report.write_report(result, png)
    before = png.read_bytes()
    with pytest.raises(ResultExistsError, match="--force"):
        report.write_report(result, png)
    assert png.read_bytes() == before
    result.frames["fringes"] *= -1
    report.write_report(result, png, force=True)
    assert png.read_bytes() != before
    with pytest.raises(InputError, match="png"):
        report.write_report(result, tmp_path / "page.pdf")


def test_panels_and_gap_thumbnails(clip, drawn):
    _, frames, truth = clip
    result, page = drawn
    assert page.panels == (report.PANEL_SUMMARY, report.PANEL_COUNT, report.PANEL_VISIBILITY,
                           report.PANEL_RESIDUAL, report.PANEL_DRIFT, report.PANEL_THUMBNAILS)
    titles = [ax.get_title(loc="left") for ax in page.figure.axes]
    for panel in page.panels:
        assert any(t.startswith(panel) for t in titles), panel
    # one gap (the blocked beam): the frame before it, its middle frame and the frame after it
    (first, last), = _runs(truth["dark"].to_numpy(bool))
    assert page.gap_labels == ("G1",)
    assert page.thumbnail_frames == (first - 1, (first + last) // 2, last + 1)
    # the thumbnail shows the blocked beam: its mean is below a tenth of the trusted frames' mean
    # (ground truth: only background and noise while the beam is blocked)
    thumbs = {ax.get_title().split("\n")[0]: np.asarray(ax.images[0].get_array(), dtype=float)
              for ax in page.figure.axes if ax.get_title().startswith("G1")}
    assert sorted(thumbs) == ["G1 after", "G1 before", "G1 middle"]
    lit = frames[~truth["dark"].to_numpy(bool)].mean()
    assert thumbs["G1 middle"].mean() < 0.1 * lit
    # the frames either side are lit: same beam, so within a factor 2 of the mean lit frame
    assert thumbs["G1 before"].mean() > 0.5 * lit and thumbs["G1 after"].mean() > 0.5 * lit


def test_gap_shading_has_the_reason_colour_at_the_gap_time(drawn):
    result, page = drawn
    fig = page.figure
    png = report._png_bytes(fig)
    with Image.open(io.BytesIO(png)) as im:
        rgb = np.asarray(im.convert("RGB"), dtype=float) / 255
    height = rgb.shape[0]
    ax = next(a for a in fig.axes if a.get_title(loc="left") == report.PANEL_COUNT)
    colour, _ = report.reason_styles(["dark"])["dark"]
    target_hue, target_sat, _ = colorsys.rgb_to_hsv(*[int(colour[i:i + 2], 16) / 255 for i in (1, 3, 5)])
    # a tint of opacity a over white has an HSV saturation of about a * S of the colour (exactly for
    # colours with max channel 1); hatch lines of the full colour add to it
    tint_sat = report.GAP_TINT * target_sat
    gap = result.gaps.iloc[0]
    y0, y1 = ax.get_ylim()
    for t_s, inside in ((0.5 * (gap["start_s"] + gap["stop_s"]), True), (0.3, False), (1.6, False)):
        x_px, _ = ax.transData.transform((t_s, y0))
        _, top = ax.transData.transform((t_s, y1))
        _, bottom = ax.transData.transform((t_s, y0))
        rows = np.arange(int(height - top + 0.3 * (top - bottom)), int(height - bottom - 0.1 * (top - bottom)))
        strip = rgb[rows, int(round(x_px)) - 3:int(round(x_px)) + 4].reshape(-1, 3)
        h, s, v = colorsys.rgb_to_hsv(*np.median(strip, axis=0))
        if inside:
            # hue within 10 degrees of the reason's colour (pale tint + hatch of the same colour)
            assert s > 0.5 * tint_sat and min(abs(h - target_hue), 1 - abs(h - target_hue)) * 360 < 10
        else:
            assert s < 0.05  # white background with grey grid lines: no tint outside the gap


def test_okabe_ito_palette_values():
    # Okabe & Ito (2008), "Color Universal Design", sRGB 0-255 triples (from memory)
    expected = {"black": (0, 0, 0), "orange": (230, 159, 0), "sky blue": (86, 180, 233),
                "bluish green": (0, 158, 115), "yellow": (240, 228, 66), "blue": (0, 114, 178),
                "vermillion": (213, 94, 0), "reddish purple": (204, 121, 167)}
    got = {k: tuple(int(v[i:i + 2], 16) for i in (1, 3, 5)) for k, v in report.OKABE_ITO.items()}
    assert got == expected


# Colour-vision-deficiency simulation matrices for severity 1.0, applied to linear sRGB:
# Machado, Oliveira & Fernandes, IEEE TVCG 15(6), 1291-1298 (2009) (values from memory).
_CVD = {
    "protanopia": [[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216],
                   [-0.003882, -0.048116, 1.051998]],
    "deuteranopia": [[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413],
                     [-0.011820, 0.042940, 0.968881]],
    "tritanopia": [[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602],
                   [0.004733, 0.691367, 0.303900]],
}


@pytest.mark.parametrize("deficiency", sorted(_CVD))
def test_gap_colours_stay_apart_for_colour_blind_readers(deficiency):
    from skimage.color import deltaE_ciede2000, rgb2lab

    def to_linear(c):  # sRGB transfer function, IEC 61966-2-1
        return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)

    def to_srgb(c):
        c = np.clip(c, 0, 1)
        return np.where(c <= 0.0031308, 12.92 * c, 1.055 * c ** (1 / 2.4) - 0.055)

    styles = report.reason_styles([f"reason {i}" for i in range(6)])
    colours = {h for h, _ in styles.values()}
    assert len(colours) == 6
    lab = {}
    for h in colours:
        srgb = np.array([int(h[i:i + 2], 16) for i in (1, 3, 5)]) / 255
        seen = to_srgb(np.asarray(_CVD[deficiency]) @ to_linear(srgb))
        lab[h] = rgb2lab(seen[None, None, :])[0, 0]
    # CIEDE2000 >= 10 between every pair: ten times the ~1 unit just-noticeable difference
    # (common practice), so the reasons read as different colours, not shades
    worst = min(deltaE_ciede2000(lab[a], lab[b]) for a, b in itertools.combinations(colours, 2))
    assert worst >= 10


@pytest.mark.parametrize("value, sigma, text", [
    # JCGM 100:2008 (GUM) 7.2.2 example: m_s = 100.021 47 g with u_c = 0.35 mg
    (100.02147, 0.00035, "+100.02147 ± 0.00035"),
    # GUM 7.2.6: at most two significant digits in the uncertainty, value rounded to match
    (16.14131, 0.04671, "+16.141 ± 0.047"),
    (-3.2, 1.26, "-3.2 ± 1.3"),
    (250.0, 12.0, "+250 ± 12"),
])
def test_value_sigma_rounding(value, sigma, text):
    assert report.format_value_sigma(value, sigma) == text


def test_report_without_clip_or_gaps_still_draws(clip):
    _, _, truth = clip
    result = StandInResult(truth.assign(dark=False))
    page = report.render_report(result)
    assert page.thumbnail_frames == () and page.gap_labels == ()
    assert report.PANEL_THUMBNAILS in page.panels
    bad = StandInResult(truth)
    bad.frames = bad.frames.drop(columns=["fringes"])
    with pytest.raises(InputError, match="fringes"):
        report.render_report(bad)


def test_report_command_redraws_from_a_saved_result(clip, tmp_path, capsys):
    """``fringecount report DIR`` after ``count``: refuses to overwrite, then redraws with --force."""
    results = pytest.importorskip("fringecount.results", reason="results (write/read) not landed yet")
    pipeline = pytest.importorskip("fringecount.pipeline", reason="pipeline not landed yet")
    from fringecount.cli import main
    from fringecount.settings import CountSettings

    path, _, _ = clip
    result = pipeline.count(path, CountSettings(fps=FPS))
    out = tmp_path / "run"
    results.write_result(result, out)
    assert main(["report", str(out), "--json"]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert printed["written"] == [str(out / "report.png"), str(out / "report.html")]
    first = (out / "report.png").read_bytes()
    assert abs(_png_size(first)[0] - 8.27 * 150) <= 1  # A4 width at 150 dpi (ISO 216), as above
    # a second run refuses, with one line on stderr and exit status 3 (ResultExistsError)
    assert main(["report", str(out)]) == 3
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--force" in err
    assert (out / "report.png").read_bytes() == first
    assert main(["report", str(out), "--force", "--quiet", "--no-thumbnails"]) == 0
    assert capsys.readouterr() == ("", "")
    # a folder without a result is one line, not a traceback
    assert main(["report", str(tmp_path / "nothing")]) != 0
    assert capsys.readouterr().err.count("\n") == 1


def test_reason_styles_are_fixed_for_the_gap_reasons():
    gaps = pytest.importorskip("fringecount.gaps")
    forward = report.reason_styles(gaps.REASONS)
    backward = report.reason_styles(reversed(gaps.REASONS))
    assert forward == backward  # the same reason looks the same in every report
    assert len({c for c, _ in forward.values()}) == len(gaps.REASONS)
    assert len({h for _, h in forward.values()}) == len(gaps.REASONS)
    # saturated pixels are vermillion in the ROI picture; saturated gaps match
    assert forward["saturated"][0] == report.OKABE_ITO["vermillion"]
    # an unknown reason next to known ones takes a colour none of them uses
    mixed = report.reason_styles(["saturated", "cosmic ray"])
    assert mixed["cosmic ray"][0] not in {forward["saturated"][0]}


def test_unknown_reasons_leave_the_known_styles_alone():
    gaps = pytest.importorskip("fringecount.gaps")
    fixed = report.reason_styles(gaps.REASONS)
    mixed = report.reason_styles(["cosmic ray", *gaps.REASONS, "operator"])
    for reason in gaps.REASONS:
        assert mixed[reason] == fixed[reason]
    assert mixed["cosmic ray"] != mixed["operator"]
    assert mixed["cosmic ray"][0] not in {c for c, _ in fixed.values()}


def test_report_command_without_the_recording_warns_and_draws(clip, tmp_path, capsys):
    results = pytest.importorskip("fringecount.results", reason="results (write/read) not landed yet")
    pipeline = pytest.importorskip("fringecount.pipeline", reason="pipeline not landed yet")
    from fringecount.cli import main
    from fringecount.settings import CountSettings

    path, _, _ = clip
    moved = tmp_path / "gone.npy"
    moved.write_bytes(path.read_bytes())
    results.write_result(pipeline.count(moved, CountSettings(fps=FPS)), tmp_path / "run")
    moved.unlink()
    assert main(["report", str(tmp_path / "run")]) == 0
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "not found" in err and "--clip" in err
    assert (tmp_path / "run" / "report.png").exists()
    # an explicit --clip that does not exist is an error, and nothing is drawn
    (tmp_path / "run" / "report.png").unlink()
    assert main(["report", str(tmp_path / "run"), "--clip", str(moved)]) == 2
    assert "--no-thumbnails" in capsys.readouterr().err
    assert not (tmp_path / "run" / "report.png").exists()
