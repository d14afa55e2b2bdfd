"""CLI checks for ``fringecount derive ...`` and ``fringecount air`` (in-process, capsys).

Expected numbers come from REFERENCES §2.1 (NIST table), §3a-3f (worked examples); each
test names its row. JSON contract: {"model", "quantities": {NAME: {"value", "sigma", "unit"}},
"inputs", "notes"}.
"""

import json

import numpy as np
import pandas as pd
import pytest

from fringecount.cli import main
from fringecount.models import air_index_ciddor, get_material, plate_fringes


def run_json(capsys, *argv):
    assert main([*argv, "--json"]) == 0
    out = capsys.readouterr().out
    doc = json.loads(out)
    assert set(doc) >= {"model", "quantities", "inputs", "notes"}
    for q in doc["quantities"].values():
        assert set(q) >= {"value", "sigma", "unit"} and isinstance(q["unit"], str)
    return doc


def test_plate_rotation_worked_example(capsys):
    # Source: REFERENCES §3a, 10 deg row: N = 16.1413 -> n = 1.5 (count printed to 1e-4,
    # dn/dN = 0.0467, so |dn| < 2.4e-6)
    doc = run_json(capsys, "derive", "plate-rotation", "--fringes", "16.1413+/-0.05", "--thickness",
                   "1.000+/-0.002mm", "--wavelength", "632.8nm", "--angle", "10deg")
    n = doc["quantities"]["refractive_index"]
    assert doc["model"] == "plate-rotation"
    assert abs(n["value"] - 1.5) < 2.4e-6 and n["unit"] == ""
    # 0.0467 * 0.05 from the count plus the thickness term (sensitivity from REFERENCES §3a)
    assert n["sigma"] > 0.0467 * 0.05


def test_plate_rotation_table_has_budget(capsys):
    assert main(["derive", "plate-rotation", "--fringes", "16.1413+/-0.05", "--thickness", "1.000mm+/-0.002mm",
                 "--wavelength", "632.8nm", "--angle", "10+/-0.05deg"]) == 0
    out = capsys.readouterr().out
    assert "refractive_index" in out and "from fringes" in out and "% of variance" in out


def test_wavelength_scan_group_and_phase(capsys):
    # Source: REFERENCES §3b: 10 mm fused silica, 670.0 -> 670.5 nm, 10.52684 fringes,
    # n_g = 1.472902 (mid wavenumber); phase index from Malitson 1965 at 670.25 nm.
    doc = run_json(capsys, "derive", "wavelength-scan", "--fringes", "10.52684+/-0.01", "--thickness", "10mm",
                   "--start", "670.0nm", "--stop", "670.5nm", "--material", "Fused-Silica")
    q = doc["quantities"]
    assert abs(q["group_index"]["value"] - 1.472902) < 0.5e-6
    lam_bar = q["mid_wavelength"]["value"]
    # count rounded to 1e-5 fringe -> 1e-5/22.26 = 4.5e-7 in the index
    assert abs(q["phase_index"]["value"] - get_material("fused-silica").index(lam_bar)) < 5e-7
    assert any("GROUP index" in n for n in doc["notes"])


def test_wavelength_scan_without_material_reports_group_index_only(capsys):
    doc = run_json(capsys, "derive", "wavelength-scan", "--fringes", "10.52684", "--thickness", "10mm",
                   "--start", "670.0nm", "--stop", "670.5nm")
    assert "phase_index" not in doc["quantities"]
    assert abs(doc["quantities"]["group_index"]["value"] - 1.472902) < 0.5e-6


def test_wavelength_scan_solves_thickness_and_tuning(capsys):
    doc = run_json(capsys, "derive", "wavelength-scan", "--fringes", "10.526837", "--start", "670.0nm",
                   "--stop", "670.5nm", "--material", "fused-silica")
    assert doc["quantities"]["thickness"]["value"] == pytest.approx(10e-3, rel=1e-7)
    assert doc["quantities"]["thickness"]["unit"] == "m"
    doc = run_json(capsys, "derive", "wavelength-scan", "--fringes", "10.526837", "--thickness", "10mm",
                   "--start", "670.0nm", "--material", "fused-silica")
    assert doc["quantities"]["tuning"]["value"] == pytest.approx(0.5e-9, rel=1e-6)


def test_gas_cell_worked_example(capsys):
    # Source: REFERENCES §3c: 42.94 fringes, 50 mm, 632.991 nm, 20 degC, dry -> n - 1 = 2.71800e-4
    # (N printed to 0.01 -> 6.3e-8 in n - 1)
    doc = run_json(capsys, "derive", "gas-cell", "--fringes", "42.94", "--length", "50mm", "--wavelength",
                   "632.991nm", "--temperature", "20degC", "--pressure", "101.325kPa", "--humidity", "0%",
                   "--co2", "450ppm")
    q = doc["quantities"]
    assert abs(q["refractivity"]["value"] - 2.71800e-4) < 6.3e-8
    assert abs(q["refractive_index"]["value"] - 1.000271800) < 6.3e-8
    assert abs(q["refractivity_ciddor"]["value"] - 2.71800e-4) < 1e-9


def test_displacement_worked_example(capsys):
    # Source: REFERENCES §3d: 1000 fringes, 632.991 nm, 20 degC, 101.325 kPa, dry -> 316.4095 um
    doc = run_json(capsys, "derive", "displacement", "--fringes", "1000", "--wavelength", "632.991nm",
                   "--temperature", "20degC", "--pressure", "101.325kPa", "--humidity", "0%", "--co2", "450ppm")
    d = doc["quantities"]["displacement"]
    assert d["unit"] == "m" and abs(d["value"] - 316.4095e-6) < 0.5e-10


def test_expansion_worked_example(capsys):
    # Source: REFERENCES §3f: aluminium, 50 mm, 10 K, 36.50 fringes -> 23.1e-6/K
    # (N printed to 0.01: 1.4e-4 relative)
    doc = run_json(capsys, "derive", "expansion", "--fringes", "36.50", "--length", "50mm", "--delta-t", "10K",
                   "--wavelength", "632.991nm", "--temperature", "20degC", "--humidity", "0%")
    a = doc["quantities"]["expansion_coefficient"]
    assert a["unit"] == "1/K" and a["value"] == pytest.approx(23.1e-6, rel=2e-4)
    assert any("assumed" in n for n in doc["notes"])  # pressure and CO2 were not stated
    # a delta given as degC is an interval, not 283.15 K
    doc2 = run_json(capsys, "derive", "expansion", "--fringes", "36.50", "--length", "50mm", "--delta-t", "10degC",
                    "--wavelength", "632.991nm", "--temperature", "20degC", "--humidity", "0%")
    assert doc2["quantities"]["expansion_coefficient"]["value"] == pytest.approx(a["value"], rel=1e-12)


@pytest.mark.parametrize("row", [(20, 0, "101.325kPa", 633, 1.000271800, 1.000271799),
                                 (40, 75, "120kPa", 633, 1.000299418, 1.000299406),
                                 (20, 100, "100kPa", 633, 1.000267394, 1.000267394)])
def test_air_command_against_nist(capsys, row):
    # Source: NIST Engineering Metrology Toolbox table (REFERENCES §2.1), tolerance 2e-9
    t, rh, p, lam, n_c, n_e = row
    doc = run_json(capsys, "air", "--wavelength", f"{lam}nm", "--temperature", f"{t}degC", "--pressure", p,
                   "--humidity", f"{rh}%", "--co2", "450ppm")
    q = doc["quantities"]
    assert abs(q["refractive_index"]["value"] - n_c) < 2e-9
    assert abs(q["refractivity"]["value"] - (n_c - 1)) < 2e-9
    assert abs(q["refractive_index_edlen"]["value"] - n_e) < 2e-9


def test_air_command_propagates_sigmas(capsys):
    doc = run_json(capsys, "air", "--wavelength", "633nm", "--temperature", "20+/-0.1degC", "--pressure",
                   "101.325+/-0.01kPa", "--humidity", "50+/-5%", "--co2", "450+/-50ppm")
    n = doc["quantities"]["refractive_index"]
    # dominated by temperature: ~0.93e-6/K * 0.1 K (NIST rule of thumb, from memory) -> 1e-7 scale
    assert 5e-8 < n["sigma"] < 2e-7
    assert set(n["budget"]) == {"temperature_K", "pressure_Pa", "humidity_percent", "co2_ppm"}


@pytest.mark.parametrize("argv, fragment", [
    (["derive", "plate-rotation", "--fringes", "16", "--thickness", "1", "--wavelength", "632.8nm",
      "--angle", "10deg"], "--thickness"),
    (["derive", "displacement", "--fringes", "10", "--wavelength", "632.8kg"], "--wavelength"),
    (["derive", "expansion", "--fringes", "10", "--length", "50mm", "--delta-t", "10", "--wavelength",
      "632.8nm"], "--delta-t"),
    (["air", "--wavelength", "633nm", "--humidity", "45ppm"], "--humidity"),
    (["derive", "displacement", "--wavelength", "633nm"], "--fringes"),
    (["derive", "wavelength-scan", "--fringes", "10", "--thickness", "10mm", "--start", "670nm", "--stop",
      "671nm", "--material", "unobtainium"], "unobtainium"),
    (["derive", "gas-cell", "--result", "/nonexistent/folder", "--length", "50mm", "--wavelength", "633nm"],
     "not found"),
])
def test_bad_input_is_one_line_and_nonzero(capsys, argv, fragment):
    assert main(argv) != 0
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and fragment in err and "Traceback" not in err


# --- count folder + drive log ---------------------------------------------------------------

def _folder(tmp_path, t, fringes, sigma=0.005, trusted=None, gaps=()):
    folder = tmp_path / "run"
    folder.mkdir()
    trusted = np.ones(t.size, bool) if trusted is None else trusted
    pd.DataFrame({"frame": np.arange(t.size), "time_s": t, "fringes": fringes,
                  "fringes_sigma": np.full(t.size, sigma), "visibility": 0.7,
                  "trusted": trusted}).to_csv(folder / "frames.csv", index=False)
    (folder / "summary.json").write_text(json.dumps({
        "total_fringes": float(fringes[-1]), "total_fringes_sigma": sigma, "frames": int(t.size),
        "fps": 25.0, "gaps": list(gaps)}))
    return folder


def test_result_folder_total_count(capsys, tmp_path):
    t = np.arange(100) / 25.0
    folder = _folder(tmp_path, t, np.linspace(0, 1000, 100))
    doc = run_json(capsys, "derive", "displacement", "--result", str(folder), "--wavelength", "632.991nm",
                   "--temperature", "20degC", "--pressure", "101.325kPa", "--humidity", "0%", "--co2", "450ppm")
    # REFERENCES §3d: 1000 fringes -> 316.4095 um
    assert abs(doc["quantities"]["displacement"]["value"] - 316.4095e-6) < 0.5e-10


def test_plate_rotation_from_angle_log(capsys, tmp_path):
    # Rotation stage logged at 2 Hz (deg), camera 25 fps; 0.4 deg zero offset; frames 100-119
    # untrusted and filled with a wrong count that must be excluded. Noise 0.01 fringe.
    rng = np.random.default_rng(7)
    t = np.arange(500) / 25.0
    log_t = np.arange(0, 20.5, 0.5)
    log_deg = -6 + 1.0 * log_t  # -6 .. 14.5 deg
    angle = np.interp(t, log_t, log_deg)
    counts = plate_fringes(1.5168, 2e-3, 632.8e-9, np.radians(angle - 0.4))
    counts = counts - counts[0] + rng.normal(0, 0.01, t.size)
    trusted = np.ones(t.size, bool)
    trusted[100:120] = False
    counts[100:120] += 7.0
    folder = _folder(tmp_path, t, counts, sigma=0.01, trusted=trusted,
                     gaps=[{"first_frame": 100, "last_frame": 119, "reason": "low visibility",
                            "fringes_across": 0.0, "fringes_across_sigma": 0.02}])
    log = tmp_path / "stage.csv"
    pd.DataFrame({"t": log_t, "angle": log_deg}).to_csv(log, index=False)
    doc = run_json(capsys, "derive", "plate-rotation", "--result", str(folder), "--log", str(log),
                   "--log-column", "angle", "--log-unit", "deg", "--thickness", "2mm", "--wavelength", "632.8nm")
    q = doc["quantities"]
    n = q["refractive_index"]
    assert abs(n["value"] - 1.5168) < 4 * n["sigma"]
    assert abs(np.degrees(q["zero_angle"]["value"]) - 0.4) < 4 * np.degrees(q["zero_angle"]["sigma"])
    assert doc["fit"]["excluded_frames"] == 20 and len(doc["fit"]["residuals"]) == 480
    assert doc["fit"]["rms_residual"] == pytest.approx(0.01, rel=0.15)
    assert any("untrusted interval" in s for s in doc["notes"])


def test_expansion_from_temperature_log(capsys, tmp_path):
    # Aluminium-like specimen (23.1e-6/K, REFERENCES §4), 50 mm, 20 -> 30 degC over 60 s.
    rng = np.random.default_rng(8)
    t = np.arange(600) / 10.0
    temp_c = 20 + t / 6.0
    n_air = air_index_ciddor(632.991e-9, 20.0, 101325.0, 0.0, 450.0)
    counts = 2 * n_air * 23.1e-6 * 50e-3 * (temp_c - 20) / 632.991e-9 + rng.normal(0, 0.005, t.size)
    folder = _folder(tmp_path, t, counts)
    log = tmp_path / "thermo.csv"
    pd.DataFrame({"time_s": t[::10], "T_specimen": temp_c[::10]}).to_csv(log, index=False)
    doc = run_json(capsys, "derive", "expansion", "--result", str(folder), "--log", str(log), "--length", "50mm",
                   "--wavelength", "632.991nm", "--log-unit", "degC", "--temperature", "20degC",
                   "--pressure", "101.325kPa", "--humidity", "0%", "--co2", "450ppm")
    a = doc["quantities"]["expansion_coefficient"]
    assert abs(a["value"] - 23.1e-6) < 4 * a["sigma"]


def test_wavelength_scan_from_wavelength_log(capsys, tmp_path):
    # 10 mm fused silica scanned 670.0 -> 670.5 nm (REFERENCES §3b); the fit of the count against
    # wavenumber gives n_g at the mean wavenumber; the scan's curvature is second order (~1e-8).
    fs = get_material("fused-silica")
    t = np.arange(400) / 20.0
    lam = np.linspace(670.0e-9, 670.5e-9, t.size)
    order = 2 * 10e-3 * (fs.index(lam) - 1) / lam
    folder = _folder(tmp_path, t, order[0] - order, sigma=0.001)
    log = tmp_path / "laser.csv"
    pd.DataFrame({"time_s": t, "wavelength_nm": lam * 1e9}).to_csv(log, index=False)
    doc = run_json(capsys, "derive", "wavelength-scan", "--result", str(folder), "--log", str(log),
                   "--thickness", "10mm", "--material", "fused-silica")
    q = doc["quantities"]
    lam_bar = q["mid_wavelength"]["value"]
    assert abs(q["group_index"]["value"] - fs.group_index(lam_bar)) < 1e-6
    assert abs(q["phase_index"]["value"] - fs.index(lam_bar)) < 1e-6


def test_log_not_overlapping_is_rejected(capsys, tmp_path):
    t = np.arange(50) / 25.0
    folder = _folder(tmp_path, t, np.linspace(0, 10, 50))
    log = tmp_path / "drive.csv"
    pd.DataFrame({"time_s": [100.0, 101.0], "volts": [0.0, 10.0]}).to_csv(log, index=False)
    assert main(["derive", "displacement", "--result", str(folder), "--log", str(log), "--wavelength",
                 "632.991nm"]) != 0
    err = capsys.readouterr().err
    assert "no overlap" in err and len(err.strip().splitlines()) == 1


def test_help_exits_zero():
    with pytest.raises(SystemExit) as info:
        main(["derive", "gas-cell", "--help"])
    assert info.value.code == 0


def test_gas_cell_from_pressure_log(capsys, tmp_path):
    # Fill 0 -> 100 kPa at 20 degC (count from the full Ciddor equation, dry air): the slope
    # refractivity at 101.325 kPa matches Ciddor within the compressibility bend (< 3e-4
    # relative, REFERENCES §2.5).
    t = np.arange(300) / 10.0
    p_kpa = np.linspace(0, 100, t.size)
    counts = 2 * 50e-3 * (air_index_ciddor(632.991e-9, 20.0, p_kpa * 1e3, 0.0, 450.0) - 1) / 632.991e-9
    folder = _folder(tmp_path, t, counts)
    log = tmp_path / "gauge.csv"
    pd.DataFrame({"time_s": t, "p_kPa": p_kpa}).to_csv(log, index=False)
    doc = run_json(capsys, "derive", "gas-cell", "--result", str(folder), "--log", str(log), "--log-unit", "kPa",
                   "--length", "50mm", "--wavelength", "632.991nm", "--temperature", "20degC", "--pressure",
                   "101.325kPa", "--humidity", "0%", "--co2", "450ppm")
    q = doc["quantities"]
    assert q["refractivity"]["value"] == pytest.approx(q["refractivity_ciddor"]["value"], rel=3e-4)
    assert q["refractivity_per_pressure"]["unit"] == "1/Pa"


def test_displacement_from_piezo_log(capsys, tmp_path):
    # Linear piezo, 0.316 fringe/V, up then down with no hysteresis: sensitivity
    # 0.316 * lambda / (2 n_air) m/V; hysteresis consistent with zero (noise 0.003 fringe).
    rng = np.random.default_rng(9)
    t = np.arange(400) / 20.0
    volts = np.interp(t, [0, 10, 20], [0, 100, 0])
    counts = 0.316 * volts + rng.normal(0, 0.003, t.size)
    folder = _folder(tmp_path, t, counts, sigma=0.003)
    log = tmp_path / "piezo.csv"
    pd.DataFrame({"time_s": t, "voltage": volts}).to_csv(log, index=False)
    doc = run_json(capsys, "derive", "displacement", "--result", str(folder), "--log", str(log),
                   "--log-column", "voltage", "--wavelength", "632.991nm", "--temperature", "20degC",
                   "--pressure", "101.325kPa", "--humidity", "0%", "--co2", "450ppm")
    q = doc["quantities"]
    per_fringe = 632.991e-9 / (2 * air_index_ciddor(632.991e-9, 20.0, 101325.0, 0.0, 450.0))
    assert q["sensitivity"]["unit"] == "m/V"
    assert abs(q["sensitivity"]["value"] - 0.316 * per_fringe) < 4 * q["sensitivity"]["sigma"]
    # the largest gap of two noisy strokes: a few noise sigmas at most (0.003 fringe each)
    assert q["hysteresis"]["value"] < 6 * 0.003 * np.sqrt(2) * per_fringe


def test_one_way_drive_gives_null_hysteresis(capsys, tmp_path):
    # only an up stroke: hysteresis cannot be computed and is reported as JSON null, not NaN
    t = np.arange(100) / 10.0
    folder = _folder(tmp_path, t, 0.3 * t * 10)
    log = tmp_path / "piezo.csv"
    pd.DataFrame({"time_s": t, "voltage": t * 10}).to_csv(log, index=False)
    assert main(["derive", "displacement", "--result", str(folder), "--log", str(log), "--wavelength",
                 "632.991nm", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)  # strict JSON
    assert doc["quantities"]["hysteresis"]["value"] is None
    assert any("hysteresis not computed" in n for n in doc["notes"])
