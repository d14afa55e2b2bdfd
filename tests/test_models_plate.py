"""Plate-rotation model against the worked examples of REFERENCES §3a.

Source: tilted-plate relation N lambda = 2t[sqrt(n^2 - sin^2 th) - cos th - n + 1]
(standard textbook result, e.g. Fowles, Pedrotti: from memory), worked examples computed
in REFERENCES §3a: counts printed to 1e-4 fringe, so the tolerance is 0.5e-4.
"""

import numpy as np
import pytest

from fringecount.errors import InputError
from fringecount.models import derive_plate_rotation, fit_plate_rotation, plate_fringes, plate_index, plate_thickness
from fringecount.units import Uncertain

EXAMPLES = [  # t (m), n, lambda (m), theta (deg), N exact, N small-angle, n from inverse without N^2 term
    (1.000e-3, 1.5, 632.8e-9, 5, 4.0174, 4.0115, 1.499681),
    (1.000e-3, 1.5, 632.8e-9, 10, 16.1413, 16.0460, 1.498707),
    (1.000e-3, 1.5, 632.8e-9, 20, 65.7217, 64.1840, 1.494528),
    (3.000e-3, 1.4570179, 632.8e-9, 15, 103.3701, 101.9202, 1.454453),
]


@pytest.mark.parametrize("t, n, lam, deg, n_exact, n_small, n_approx_inv", EXAMPLES)
def test_forward_matches_worked_examples(t, n, lam, deg, n_exact, n_small, n_approx_inv):
    # Source: REFERENCES §3a table (computed), printed to 1e-4 fringe
    assert abs(plate_fringes(n, t, lam, np.radians(deg)) - n_exact) < 0.5e-4


@pytest.mark.parametrize("t, n, lam, deg, n_exact, n_small, n_approx_inv", EXAMPLES)
def test_exact_inverse_recovers_index(t, n, lam, deg, n_exact, n_small, n_approx_inv):
    # Source: REFERENCES §3a: the exact inverse recovers n to 1e-10 from the exact count.
    th = np.radians(deg)
    assert abs(plate_index(plate_fringes(n, t, lam, th), t, lam, th) - n) < 1e-10
    # From the rounded published count (0.5e-4 fringe) n moves by at most dn/dN * 0.5e-4
    # (dn/dN = 0.0467 at 10 deg, REFERENCES §3a), i.e. < 1e-5 for every row.
    assert abs(plate_index(n_exact, t, lam, th) - n) < 1e-5
    # The often-printed approximate inverse (without N^2 lambda^2/4t) is measurably different,
    # so our inverse is not that one: it differs from ours by the amount REFERENCES tabulates.
    nl = n_exact * lam
    approx = (2 * t - nl) * (1 - np.cos(th)) / (2 * t * (1 - np.cos(th)) - nl)
    assert abs(approx - n_approx_inv) < 1e-5
    assert abs(approx - n) > 1e-4


def test_small_angle_form_is_not_used():
    # Source: REFERENCES §3a: small-angle count 16.0460 at 10 deg vs exact 16.1413.
    assert abs(plate_fringes(1.5, 1e-3, 632.8e-9, np.radians(10)) - 16.0460) > 0.09


def test_sensitivities_at_ten_degrees():
    # Source: REFERENCES §3a: dn/dN = 0.0467 per fringe, dN/dtheta = 3.25 fringes per degree
    # (printed to 3 significant digits).
    t, lam, th = 1e-3, 632.8e-9, np.radians(10)
    n0 = plate_index(16.1413, t, lam, th)
    assert (plate_index(16.1413 + 1e-4, t, lam, th) - n0) / 1e-4 == pytest.approx(0.0467, abs=0.0005)
    dn_dth = (plate_fringes(1.5, t, lam, th + np.radians(1e-4)) - plate_fringes(1.5, t, lam, th)) / 1e-4
    assert dn_dth == pytest.approx(3.25, abs=0.005)


def test_thickness_inverse():
    assert plate_thickness(16.141320528, 1.5, 632.8e-9, np.radians(10)) == pytest.approx(1e-3, rel=1e-9)


def test_derive_budget_and_errors():
    res = derive_plate_rotation(Uncertain(16.1413, 0.05), Uncertain(1e-3, 2e-6), Uncertain(632.8e-9),
                                Uncertain(np.radians(10), np.radians(0.05)))
    n = res["refractive_index"]
    assert n.value == pytest.approx(1.5, abs=1e-5)
    # dn/dN * sigma_N = 0.0467 * 0.05 (REFERENCES sensitivity)
    assert dict(n.budget)["fringes"] == pytest.approx(0.0467 * 0.05, rel=0.01)
    with pytest.raises(InputError):
        derive_plate_rotation(Uncertain(16.0), Uncertain(1e-3), Uncertain(632.8e-9), Uncertain(0.0))
    with pytest.raises(InputError):  # count impossible for such a small tilt
        derive_plate_rotation(Uncertain(500.0), Uncertain(1e-3), Uncertain(632.8e-9), Uncertain(np.radians(5)))


def test_fit_over_many_angles_recovers_index_and_zero_offset():
    # Synthetic data from the exact forward model with a 0.3 deg zero offset and a count that
    # starts at -8 deg (so the count offset is not zero); noise 0.01 fringe (seeded).
    rng = np.random.default_rng(1234)
    t, lam, n_true, th0 = Uncertain(2e-3, 1e-6), Uncertain(632.8e-9), 1.5168, np.radians(0.3)
    angles = np.radians(np.linspace(-8, 15, 200))
    counts = plate_fringes(n_true, t.value, lam.value, angles - th0)
    counts = counts - counts[0] + rng.normal(0, 0.01, angles.size)
    fit = fit_plate_rotation(angles, counts, np.full(angles.size, 0.01), t, lam)
    n = fit.refractive_index
    # fitted parameters within 4 of their own sigmas (statistics of a seeded draw)
    assert abs(n.value - n_true) < 4 * n.uncertainty
    assert abs(fit.zero_angle_rad.value - th0) < 4 * fit.zero_angle_rad.uncertainty
    assert fit.chi2_reduced == pytest.approx(1.0, abs=0.3)  # 197 dof: sd of chi2_red is 0.1
    assert np.std(fit.residuals) == pytest.approx(0.01, rel=0.15)
    assert "thickness_m" in dict(n.budget) and "fit" in dict(n.budget)
