"""Monte Carlo cross-checks of every propagated 1-sigma (GUM Supplement 1 idea, JCGM 101:2008).

Each test draws the inputs from normal distributions with their stated sigmas
(np.random.default_rng(seed)), evaluates the model on the draws and compares the standard
deviation of the outputs with the first-order sigma of the ``derive_*`` function.

Tolerance: with n draws the relative standard error of a sample standard deviation is
1/sqrt(2(n - 1)); n = 40000 gives 0.35 %, so a 2 % bound is ~6 standard errors. The
input sigmas are small enough that the second-order (nonlinear) terms stay far below that.
"""

import numpy as np
import pytest

from fringecount.models import (
    air_conditions,
    air_index,
    derive_air_index,
    derive_displacement,
    derive_expansion,
    derive_gas_cell,
    derive_plate_rotation,
    derive_wavelength_scan,
    get_material,
    plate_index,
    reduce_refractivity,
    weighted_line_fit,
)
from fringecount.units import Uncertain

N_DRAWS = 40_000
REL_TOL = 0.02  # ~6 standard errors of the MC standard deviation at 40 000 draws


def draw(rng, q: Uncertain):
    return rng.normal(q.value, q.sigma, N_DRAWS) if q.sigma > 0 else np.full(N_DRAWS, q.value)


def test_plate_rotation_sigma():
    rng = np.random.default_rng(11)
    N, t, lam, th = (Uncertain(16.1413, 0.05), Uncertain(1e-3, 2e-6), Uncertain(632.8e-9, 0.01e-9),
                     Uncertain(np.radians(10), np.radians(0.02)))
    lin = derive_plate_rotation(N, t, lam, th)["refractive_index"].uncertainty
    mc = np.std(plate_index(draw(rng, N), draw(rng, t), draw(rng, lam), draw(rng, th)))
    assert mc == pytest.approx(lin, rel=REL_TOL)


def test_wavelength_scan_sigma_with_material():
    rng = np.random.default_rng(12)
    fs = get_material("fused-silica")
    N, t, l1, l2 = (Uncertain(10.52684, 0.02), Uncertain(10e-3, 5e-6), Uncertain(670.0e-9, 2e-13),
                    Uncertain(670.5e-9, 2e-13))
    res = derive_wavelength_scan(N, t, l1, l2, fs)
    n_, t_, a, b = draw(rng, N), draw(rng, t), draw(rng, l1), draw(rng, l2)
    # independent evaluation: exact Sellmeier difference written out here
    dsig = 1 / a - 1 / b
    n_model = 2 * t_ * ((fs.index(a) - 1) / a - (fs.index(b) - 1) / b)
    offset = (np.abs(n_) - n_model) / (2 * t_ * dsig)
    lb = 2 / (1 / a + 1 / b)
    assert np.std(fs.group_index(lb) + offset) == pytest.approx(res["group_index"].uncertainty, rel=REL_TOL)
    assert np.std(fs.index(lb) + offset) == pytest.approx(res["phase_index"].uncertainty, rel=REL_TOL)


def test_wavelength_scan_sigma_group_only():
    rng = np.random.default_rng(13)
    N, t, l1, l2 = Uncertain(10.5, 0.02), Uncertain(10e-3, 5e-6), Uncertain(670.0e-9), Uncertain(670.5e-9, 1e-13)
    lin = derive_wavelength_scan(N, t, l1, l2)["group_index"].uncertainty
    a, b = draw(rng, l1), draw(rng, l2)
    mc = np.std(1 + draw(rng, N) / (2 * draw(rng, t) * (1 / a - 1 / b)))
    assert mc == pytest.approx(lin, rel=REL_TOL)


AIR = air_conditions(Uncertain(293.15, 0.2), Uncertain(101325.0, 50.0), Uncertain(45.0, 5.0), Uncertain(450.0, 50.0))


def _n_air(rng, lam):
    return air_index(lam, draw(rng, AIR.temperature_K) - 273.15, draw(rng, AIR.pressure_Pa),
                     draw(rng, AIR.humidity_percent), draw(rng, AIR.co2_ppm))


def test_air_index_sigma():
    rng = np.random.default_rng(14)
    lin = derive_air_index(Uncertain(633e-9), AIR.temperature_K, AIR.pressure_Pa, AIR.humidity_percent,
                           AIR.co2_ppm).uncertainty
    assert np.std(_n_air(rng, 633e-9)) == pytest.approx(lin, rel=REL_TOL)


def test_displacement_sigma():
    rng = np.random.default_rng(15)
    N, lam = Uncertain(1000.0, 0.02), Uncertain(632.991e-9, 1e-15)
    lin = derive_displacement(N, lam, AIR)["displacement"].uncertainty
    lam_d = draw(rng, lam)
    mc = np.std(draw(rng, N) * lam_d / (2 * _n_air(rng, 632.991e-9)))
    assert mc == pytest.approx(lin, rel=REL_TOL)


def test_expansion_sigma():
    rng = np.random.default_rng(16)
    N, L0, dT, lam = Uncertain(36.5, 0.02), Uncertain(50e-3, 20e-6), Uncertain(10.0, 0.05), Uncertain(632.991e-9)
    lin = derive_expansion(N, L0, dT, lam, AIR)["expansion_coefficient"].uncertainty
    mc = np.std(draw(rng, N) * lam.value / (2 * _n_air(rng, lam.value) * draw(rng, L0) * draw(rng, dT)))
    assert mc == pytest.approx(lin, rel=REL_TOL)


def test_gas_cell_sigma():
    rng = np.random.default_rng(17)
    N, L, lam = Uncertain(42.94, 0.02), Uncertain(50e-3, 20e-6), Uncertain(632.991e-9)
    res = derive_gas_cell(N, L, lam, AIR)
    r = draw(rng, N) * lam.value / (2 * draw(rng, L))
    assert np.std(r) == pytest.approx(res["refractivity"].uncertainty, rel=REL_TOL)
    red = reduce_refractivity(r, draw(rng, AIR.temperature_K), draw(rng, AIR.pressure_Pa))
    assert np.std(red) == pytest.approx(res["refractivity_reference"].uncertainty, rel=REL_TOL)


def test_line_fit_slope_sigma():
    # 2000 simulated data sets of 50 points with sigma 0.05: relative SE of the std of the
    # slopes is 1.6 %. The reported sigma is scaled by sqrt(max(1, chi2_red)); with 48 dof
    # that inflates its mean by ~4 % (computed: E[sqrt(max(1, chi2/48))]). Bound 10 %.
    rng = np.random.default_rng(18)
    x = np.linspace(0, 10, 50)
    slopes, sigmas = [], []
    for _ in range(2000):
        y = 3.0 + 0.7 * x + rng.normal(0, 0.05, x.size)
        fit = weighted_line_fit(x, y, np.full(x.size, 0.05))
        slopes.append(fit.slope)
        sigmas.append(fit.slope_sigma)
    assert np.std(slopes) == pytest.approx(np.mean(sigmas), rel=0.10)
    assert np.mean(slopes) == pytest.approx(0.7, abs=4 * np.std(slopes) / np.sqrt(2000))
