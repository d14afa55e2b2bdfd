"""Wavelength-scan model against the worked example of REFERENCES §3b.

Source: REFERENCES §3b (standard dispersion argument, computed with Malitson 1965 fused
silica): t = 10.00 mm, 670.0 -> 670.5 nm (air), exact count 10.52684 fringes (printed to
1e-5), n_g(mid) = 1.4729023, n_g(670.0) = 1.4729174, phase-index count 10.15085.
"""

import pytest

from fringecount.errors import InputError
from fringecount.models import (
    derive_wavelength_scan,
    get_material,
    group_to_phase_index,
    mid_wavelength,
    scan_fringes,
    scan_group_index,
    scan_stop_wavelength,
    scan_thickness,
)
from fringecount.units import Uncertain

FS = get_material("fused-silica")
T, L1, L2 = 10.00e-3, 670.0e-9, 670.5e-9


def test_exact_count_of_worked_example():
    # Source: REFERENCES §3b, 10.52684 fringes (rounding 0.5e-5)
    assert abs(scan_fringes(FS, T, L1, L2) - 10.52684) < 0.5e-5


def test_group_not_phase_index():
    # Source: REFERENCES §3b: wrongly using the phase index gives 10.15085 (3.6 % low)
    dsig = 1 / L1 - 1 / L2
    wrong = 2 * T * (FS.index(L1) - 1) * dsig
    assert abs(wrong - 10.15085) < 0.5e-5
    assert abs(scan_fringes(FS, T, L1, L2) - wrong) > 0.3


def test_mid_wavenumber_inverse():
    # Source: REFERENCES §3b: inverse n_g = 1 + N/(2t dsigma) = 1.472902; the mid-wavenumber
    # form differs from the exact count by 3e-8 fringe, i.e. ~1.5e-9 in n_g.
    ng = scan_group_index(10.52684, T, L1, L2)
    assert abs(ng - 1.472902) < 0.5e-6
    exact = scan_group_index(scan_fringes(FS, T, L1, L2), T, L1, L2)
    assert abs(exact - FS.group_index(mid_wavelength(L1, L2))) < 1e-8
    # n_g at the start wavelength instead of the mid wavenumber would be 1.4729174 (REFERENCES)
    assert abs(FS.group_index(L1) - 1.4729174) < 0.5e-7


def test_sign_of_count_does_not_matter():
    assert scan_group_index(-10.52684, T, L1, L2) == scan_group_index(10.52684, T, L2, L1)


def test_derive_with_material_recovers_catalogue_indices():
    # Exact Sellmeier difference: with the exact model count the offset is zero, so n_g and n at
    # lambda_bar equal the catalogue values to rounding (1e-12 from the 1e-15 level arithmetic).
    n_exact = scan_fringes(FS, T, L1, L2)
    res = derive_wavelength_scan(Uncertain(n_exact, 0.01), Uncertain(T, 1e-6), Uncertain(L1), Uncertain(L2), FS)
    lb = res["mid_wavelength"].value
    assert res["group_index"].value == pytest.approx(FS.group_index(lb), abs=1e-12)
    assert res["phase_index"].value == pytest.approx(FS.index(lb), abs=1e-12)
    # n = n_g + lambda dn/dlambda (the mid-wavenumber relation) holds for the result
    assert group_to_phase_index(res["group_index"].value, lb, FS) == pytest.approx(res["phase_index"].value, abs=1e-12)
    # 0.01 fringe over 2 t dsigma = 22.26 fringes per unit index -> 4.49e-4 (algebra)
    assert dict(res["group_index"].budget)["fringes"] == pytest.approx(0.01 / (2 * T * (1 / L1 - 1 / L2)), rel=1e-4)


def test_inverse_uses_thickness_and_tuning():
    n_exact = scan_fringes(FS, T, L1, L2)
    assert scan_thickness(n_exact, FS, L1, L2) == pytest.approx(T, rel=1e-12)
    assert scan_stop_wavelength(n_exact, T, L1, FS) == pytest.approx(L2, rel=1e-12)
    assert scan_stop_wavelength(-n_exact, T, L2, FS, direction=-1) == pytest.approx(L1, rel=1e-12)
    res = derive_wavelength_scan(Uncertain(n_exact, 0.01), None, Uncertain(L1), Uncertain(L2), FS)
    assert res["thickness"].value == pytest.approx(T, rel=1e-12)
    res = derive_wavelength_scan(Uncertain(n_exact, 0.01), Uncertain(T), Uncertain(L1), None, FS)
    assert res["tuning"].value == pytest.approx(0.5e-9, rel=1e-9)


def test_bad_inputs():
    with pytest.raises(InputError):
        derive_wavelength_scan(Uncertain(10.0), Uncertain(T), Uncertain(L1), Uncertain(L1))
    with pytest.raises(InputError):  # outside the N-BK7 formula's range
        derive_wavelength_scan(Uncertain(10.0), Uncertain(T), Uncertain(3.0e-6), Uncertain(3.01e-6),
                               get_material("N-BK7"))
    with pytest.raises(InputError):
        derive_wavelength_scan(Uncertain(10.0), None, Uncertain(L1), Uncertain(L2), None)

