"""Gas cell, displacement and expansion models against REFERENCES §3c, §3d, §3f and §4.

Sources:
- §3c gas cell (computed from Ciddor, dry air, 450 ppm, 632.991 nm, L = 50 mm): N = 42.94 at
  20 degC (n - 1 = 2.71800e-4) and 43.69 at 15 degC; slope 0.4238 fringe/kPa at 20 degC.
- §3d displacement: N = 1000, 632.991 nm, 20 degC, 101.325 kPa, dry: d = 316.4095 um;
  ignoring air gives 316.4955 um.
- §3f expansion: aluminium L0 = 50 mm, dT = 10 K, 23.1e-6/K -> dL = 11.55 um, N = 36.50.
- §4 handbook expansion coefficients (CRC via Wikipedia data page; SCHOTT data sheet),
  plausibility at +/-5 % as REFERENCES suggests.
"""

import numpy as np
import pytest

from fringecount.errors import InputError
from fringecount.models import (
    air_conditions,
    derive_displacement,
    derive_expansion,
    derive_gas_cell,
    expansion_coefficient,
    gas_fringes,
    gas_refractivity,
    reduce_refractivity,
)
from fringecount.units import Uncertain

LAM = 632.991e-9
DRY20 = air_conditions(Uncertain(293.15), Uncertain(101325.0), Uncertain(0.0), Uncertain(450.0))
DRY15 = air_conditions(Uncertain(288.15), Uncertain(101325.0), Uncertain(0.0), Uncertain(450.0))


def test_gas_cell_worked_example_20C():
    # Source: REFERENCES §3c: 42.94 fringes at 20 degC (printed to 0.01)
    assert abs(gas_fringes(2.71800e-4, 50e-3, LAM) - 42.94) < 0.005
    res = derive_gas_cell(Uncertain(42.94, 0.005), Uncertain(50e-3), Uncertain(LAM), DRY20)
    # rounding of N (0.005 fringe) -> 0.005 * lambda / 2L = 3.2e-8 in n - 1
    assert abs(res["refractivity"].value - 2.71800e-4) < 3.2e-8
    assert abs(res["refractivity_ciddor"].value - 2.71800e-4) < 1e-9
    # Source: NIST table row 1: modified Edlén 1.000271799 at 633 nm (vs 632.991 nm: < 1e-10 apart)
    assert abs(res["refractivity_edlen"].value - 2.71799e-4) < 2e-9


def test_gas_cell_worked_example_15C_and_reduction():
    # Source: REFERENCES §3c: 43.69 fringes at 15 degC (n - 1 = 2.76530e-4)
    assert abs(gas_fringes(2.76530e-4, 50e-3, LAM) - 43.69) < 0.005
    # Reducing the 20 degC value to 15 degC by the ideal-gas ratio 293.15/288.15 gives the 15 degC
    # Ciddor value to within the compressibility departure (< 3e-4 relative, REFERENCES §2.5).
    red = reduce_refractivity(2.71800e-4, 293.15, 101325.0, 288.15, 101325.0)
    assert red == pytest.approx(2.76530e-4, rel=3e-4)


def test_gas_cell_slope_worked_example():
    # Source: REFERENCES §3c: dN/dp = 2L(n0 - 1)/(lambda p0) = 0.4238 fringe/kPa at 20 degC
    slope = gas_fringes(2.71800e-4, 50e-3, LAM) / 101.325
    assert abs(slope - 0.4238) < 0.5e-4
    assert gas_refractivity(slope * 101.325, 50e-3, LAM) == pytest.approx(2.71800e-4, rel=1e-12)


def test_gas_cell_rejects_bad_geometry():
    with pytest.raises(InputError):
        derive_gas_cell(Uncertain(42.94), Uncertain(0.0), Uncertain(LAM), DRY20)


def test_displacement_worked_example():
    # Source: REFERENCES §3d: d = 316.4095 um (printed to 1e-4 um)
    d = derive_displacement(Uncertain(1000.0, 0.01), Uncertain(LAM), DRY20)["displacement"]
    assert abs(d.value * 1e6 - 316.4095) < 0.5e-4
    # ignoring the air index gives 316.4955 um (86 nm too long)
    assert abs(1000 * LAM / 2 * 1e6 - 316.4955) < 0.5e-4
    assert d.uncertainty == pytest.approx(0.01 * LAM / (2 * 1.0002718), rel=1e-6)


def test_displacement_passes_and_sign():
    d2 = derive_displacement(Uncertain(-100.0), Uncertain(LAM), DRY20)["displacement"].value
    d4 = derive_displacement(Uncertain(-100.0), Uncertain(LAM), DRY20, passes=4)["displacement"].value
    assert d2 < 0 and d4 == pytest.approx(d2 / 2)


def test_expansion_worked_example_aluminium():
    # Source: REFERENCES §3f: N = 36.50 (to 0.01) for aluminium, alpha = 23.1e-6/K, dL = 11.55 um
    res = derive_expansion(Uncertain(36.50), Uncertain(50e-3), Uncertain(10.0), Uncertain(LAM), DRY20)
    assert abs(res["displacement"].value * 1e6 - 11.55) < 0.005
    # N rounded to 0.005 fringe -> 0.005/36.5 = 1.4e-4 relative
    assert res["expansion_coefficient"].value == pytest.approx(23.1e-6, rel=2e-4)


@pytest.mark.parametrize("material, alpha_handbook, length_m, dt_K", [
    ("aluminium", 23.1e-6, 50e-3, 10.0),   # CRC handbook (REFERENCES §4)
    ("copper", 16.5e-6, 80e-3, 15.0),      # CRC handbook
    ("iron", 11.8e-6, 100e-3, 20.0),       # CRC handbook
    ("N-BK7", 7.1e-6, 25e-3, 30.0),        # SCHOTT data sheet, -30..+70 degC
])
def test_expansion_coefficients_plausible_against_handbook(material, alpha_handbook, length_m, dt_K):
    # A count simulated from the handbook length change (rounded to 0.01 fringe, a typical
    # sub-fringe resolution) must return the handbook value within +/-5 % (REFERENCES §4).
    n_air = 1.0002718  # REFERENCES §3d (20 degC, dry)
    count = round(2 * n_air * alpha_handbook * length_m * dt_K / LAM, 2)
    a = expansion_coefficient(count, LAM, n_air, length_m, dt_K)
    assert a == pytest.approx(alpha_handbook, rel=0.05)


def test_fused_silica_needs_sub_fringe_resolution():
    # Source: REFERENCES §3f: fused silica (0.55e-6/K), 50 mm, 10 K -> 275 nm, N = 0.87 fringe
    res = derive_expansion(Uncertain(0.87, 0.005), Uncertain(50e-3), Uncertain(10.0), Uncertain(LAM), DRY20)
    assert res["expansion_coefficient"].value == pytest.approx(0.55e-6, rel=0.05)
    assert abs(res["displacement"].value * 1e9 - 275) < 2


def test_expansion_errors():
    with pytest.raises(InputError):
        derive_expansion(Uncertain(1.0), Uncertain(50e-3), Uncertain(0.0), Uncertain(LAM), DRY20)
    with pytest.raises(InputError):
        derive_expansion(Uncertain(1.0), Uncertain(-1.0), Uncertain(10.0), Uncertain(LAM), DRY20)
    assert np.isfinite(derive_expansion(Uncertain(-3.0), Uncertain(50e-3), Uncertain(-10.0), Uncertain(LAM),
                                        DRY15)["expansion_coefficient"].value)
