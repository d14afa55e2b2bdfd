"""Count result folder + drive log: reading, alignment and fits over all trusted frames.

The data are synthetic, generated from the exact forward models (whose check values come
from REFERENCES §2/§3, tested in the other test_models_* files), in the result-folder format
of DEVELOPERS.md. Tolerances are stated per test from the injected noise.
"""

import json

import numpy as np
import pandas as pd
import pytest

from fringecount.errors import InputError
from fringecount.models import (
    air_conditions,
    air_index_ciddor,
    align_log,
    derive_gas_cell_slope,
    fit_drive,
    read_count_result,
    read_drive_log,
    trusted_series,
    weighted_line_fit,
)
from fringecount.units import Uncertain

LAM = 632.991e-9
DRY20 = air_conditions(Uncertain(293.15), Uncertain(101325.0), Uncertain(0.0), Uncertain(450.0))


def write_count_folder(folder, time_s, fringes, sigma, trusted, gaps=()):
    """A count result folder in the DEVELOPERS.md contract (frames.csv + summary.json)."""
    folder.mkdir(parents=True, exist_ok=True)
    n = len(time_s)
    pd.DataFrame({"frame": np.arange(n), "time_s": time_s, "fringes": fringes, "fringes_sigma": sigma,
                  "visibility": np.where(trusted, 0.8, 0.05), "trusted": trusted}).to_csv(folder / "frames.csv",
                                                                                          index=False)
    summary = {"total_fringes": float(fringes[-1]), "total_fringes_sigma": float(sigma[-1]), "frames": n,
               "fps": float(1 / np.median(np.diff(time_s))), "gaps": list(gaps)}
    (folder / "summary.json").write_text(json.dumps(summary))
    return folder


def write_log(path, time_s, values, column="value"):
    pd.DataFrame({"time_s": time_s, column: values}).to_csv(path, index=False)
    return path


def test_read_and_align(tmp_path):
    t = np.arange(100) / 10.0
    trusted = np.ones(100, bool)
    trusted[40:45] = False
    folder = write_count_folder(tmp_path / "run", t, 2.0 * t, np.full(100, 0.01), trusted)
    rec = read_count_result(folder)
    assert rec.frames["trusted"].dtype == bool and rec.frames["trusted"].sum() == 95
    log = read_drive_log(write_log(tmp_path / "log.csv", [-1.0, 5.0, 20.0], [0.0, 6.0, 21.0], "volts"))
    al = align_log(rec.frames, log, offset_s=1.0)  # log time + 1 s = frame time
    # linear interpolation: log value = frame time - 1 + 1 ... i.e. v(t) = t (both segments slope 1)
    inside = np.isfinite(al["drive"])
    assert np.allclose(al.loc[inside, "drive"], al.loc[inside, "time_s"])
    x, y, s, excluded = trusted_series(al)
    assert excluded == 5 and len(x) == 95


def test_log_without_overlap_is_rejected(tmp_path):
    t = np.arange(50) / 10.0
    folder = write_count_folder(tmp_path / "run", t, t, np.full(50, 0.01), np.ones(50, bool))
    log = read_drive_log(write_log(tmp_path / "log.csv", [100.0, 200.0], [0.0, 1.0]))
    with pytest.raises(InputError, match="no overlap") as info:
        align_log(read_count_result(folder).frames, log)
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("content, match", [
    ("time_s\n1\n2\n", "only one column"),
    ("time_s,v\n1,1\n", "fewer than two"),
    ("time_s,v\n2,1\n1,2\n", "increase"),
])
def test_bad_logs(tmp_path, content, match):
    p = tmp_path / "log.csv"
    p.write_text(content)
    with pytest.raises(InputError, match=match):
        read_drive_log(p)


def test_bad_result_folders(tmp_path):
    with pytest.raises(InputError, match="not found"):
        read_count_result(tmp_path / "nope")
    (tmp_path / "x").mkdir()
    with pytest.raises(InputError, match="frames.csv"):
        read_count_result(tmp_path / "x")
    (tmp_path / "x" / "frames.csv").write_text("frame,time_s\n0,0\n")
    with pytest.raises(InputError, match="fringes"):
        read_count_result(tmp_path / "x")


def test_weighted_line_fit_exact_line():
    x = np.linspace(0, 1, 11)
    fit = weighted_line_fit(x, 2 + 3 * x, np.full(11, 0.1))
    assert fit.slope == pytest.approx(3) and fit.intercept == pytest.approx(2)
    assert np.allclose(fit.residuals, 0, atol=1e-12)
    with pytest.raises(InputError):
        weighted_line_fit(np.ones(5), np.arange(5.0))


def test_gas_cell_pressure_ramp_fit():
    # Count simulated with the full Ciddor equation (compressibility included), 0 -> 100 kPa,
    # 20 degC, dry; noise 0.005 fringe. The ideal-gas slope at 101.325 kPa matches Ciddor within
    # the compressibility departure (< 3e-4 relative, REFERENCES §2.5) plus noise.
    rng = np.random.default_rng(5)
    p = np.linspace(0, 100e3, 300)
    n = air_index_ciddor(LAM, 20.0, p, 0.0, 450.0)
    counts = 2 * 50e-3 * (n - 1) / LAM + rng.normal(0, 0.005, p.size)
    fit = weighted_line_fit(p, counts, np.full(p.size, 0.005))
    res = derive_gas_cell_slope(fit, Uncertain(50e-3), Uncertain(LAM), DRY20)
    assert res["refractivity"].value == pytest.approx(res["refractivity_ciddor"].value, rel=3e-4)
    assert res["refractivity_per_pressure"].unit == "1/Pa"


def test_piezo_sensitivity_and_hysteresis():
    # Synthetic piezo: 0 -> 100 V -> 0 triangle; up stroke N = cV + e q(V), down N = cV - e q(V),
    # q = V(100 - V)/2500 (peak 1 at 50 V), so the largest up/down gap is 2e fringes at 50 V.
    rng = np.random.default_rng(6)
    v = np.concatenate([np.linspace(0, 100, 201), np.linspace(100, 0, 201)[1:]])
    up = np.arange(v.size) <= 200
    c, e = 0.316, 0.5
    q = v * (100 - v) / 2500
    counts = c * v + np.where(up, e, -e) * q + rng.normal(0, 0.003, v.size)
    sig = np.full(v.size, 0.003)
    res = fit_drive(v, counts, sig, Uncertain(LAM), DRY20, drive_unit="V")
    per_fringe = LAM / (2 * air_index_ciddor(LAM, 20.0, 101325.0, 0.0, 450.0))
    # symmetric bow: the slope is c; the residual bow (e = 0.5) dominates its sigma
    assert res.sensitivity.value == pytest.approx(c * per_fringe, rel=0.01)
    assert res.sensitivity.unit == "m/V"
    # 200-point grid vs 1 V steps: the gap at the peak is found to < 1e-3 relative; noise 0.003
    # fringe on a 1-fringe gap adds < 1 %.
    assert res.hysteresis.value == pytest.approx(2 * e * per_fringe, rel=0.02)
    assert res.hysteresis_fraction == pytest.approx(2 * e / (c * 100), rel=0.02)
    assert res.n_up > 150 and res.n_down > 150
