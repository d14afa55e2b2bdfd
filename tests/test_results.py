"""Result folders: written atomically, never silently overwritten, read back unchanged."""

from __future__ import annotations

import json
import os
import stat

import numpy as np
import pandas as pd
import pytest

import fringecount.synthetic as S
from fringecount.errors import InputError, ResultExistsError
from fringecount.pipeline import count
from fringecount.results import read_result, write_result
from fringecount.settings import CountSettings


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    d = tmp_path_factory.mktemp("clip")
    frames, _ = S.render_clip(S.Scene(center_xy=(60.0, 45.0)), S.Camera(width=128, height=96, focal_px=250.0),
                              S.MirrorSweep(d0_m=0.3e-3, velocity_m_s=0.5e-6), 30, 25.0,
                              rng=np.random.default_rng(11))
    np.save(d / "c.npy", frames)
    return count(d / "c.npy", CountSettings(fps=25.0))


def test_round_trip_keeps_the_contract(result, tmp_path):
    paths = write_result(result, tmp_path / "r")
    names = {p.name for p in paths}
    assert {"frames.csv", "gaps.csv", "summary.json"} <= names
    back = read_result(tmp_path / "r")
    assert back.total_fringes == pytest.approx(result.total_fringes, abs=0)
    assert back.frames["trusted"].dtype == bool
    pd.testing.assert_series_equal(back.frames["fringes"], result.frames["fringes"], check_exact=False, rtol=1e-12)
    assert back.settings == result.settings


def test_existing_result_is_never_replaced_without_force(result, tmp_path):
    out = tmp_path / "r"
    write_result(result, out)
    before = (out / "summary.json").stat().st_mtime_ns
    with pytest.raises(ResultExistsError):
        write_result(result, out)
    assert (out / "summary.json").stat().st_mtime_ns == before
    write_result(result, out, force=True)
    assert json.loads((out / "summary.json").read_text())["total_fringes"] == result.total_fringes
    # no staging folders are left behind
    assert [p.name for p in tmp_path.iterdir()] == ["r"]


def test_files_get_the_usual_permissions(result, tmp_path):
    # Results land in shared lab folders: files follow the umask like any other file (common practice).
    mask = os.umask(0)
    os.umask(mask)
    write_result(result, tmp_path / "r")
    for p in (tmp_path / "r").iterdir():
        assert stat.S_IMODE(p.stat().st_mode) == 0o666 & ~mask
    assert stat.S_IMODE((tmp_path / "r").stat().st_mode) == 0o777 & ~mask


def test_a_folder_without_a_result_is_a_clear_error(tmp_path):
    with pytest.raises(InputError, match="summary.json"):
        read_result(tmp_path)
