"""derive_by_name: models run from text parameters (batch manifests), checked on REFERENCES §3."""

import pytest

from fringecount.errors import InputError, UnitError
from fringecount.models import MODEL_PARAMETERS, derive_by_name


def test_plate_rotation_from_summary():
    # Source: REFERENCES §3a, 10 deg row: 16.1413 fringes -> n = 1.5 (count rounding -> < 2.4e-6)
    out = derive_by_name("plate-rotation", {"total_fringes": 16.1413, "total_fringes_sigma": 0.05},
                         thickness="1.000+/-0.002mm", wavelength="632.8nm", angle="10deg")
    n = out["refractive_index"]
    assert abs(n.value - 1.5) < 2.4e-6 and n.uncertainty > 0 and n.unit == ""


def test_fringes_parameter_overrides_summary_and_dashes_are_accepted():
    # Source: REFERENCES §3f aluminium example: 36.50 fringes -> 23.1e-6/K (1.4e-4 relative rounding)
    out = derive_by_name("expansion", {"total_fringes": 1.0}, fringes="36.50", length="50mm",
                         **{"delta-t": "10K"}, wavelength="632.991nm", temperature="20degC", humidity="0%")
    assert out["expansion_coefficient"].value == pytest.approx(23.1e-6, rel=2e-4)


def test_vacuum_wavelength_for_a_plate_model_is_converted():
    # Giving the vacuum HeNe wavelength 632.991 nm with wavelength_in=vacuum must give the same index
    # as the air wavelength at the same conditions (REFERENCES §5: 632.819 nm at 20 degC, to 1e-3 nm).
    common = dict(thickness="1mm", angle="10deg", temperature="20degC", pressure="101.325kPa", humidity="0%",
                  co2="450ppm")
    a = derive_by_name("plate-rotation", {"total_fringes": 16.1413}, wavelength="632.819nm", **common)
    v = derive_by_name("plate-rotation", {"total_fringes": 16.1413}, wavelength="632.991nm",
                       wavelength_in="vacuum", **common)
    # 1e-3 nm in lambda moves n by ~ (n-1)*1.6e-6 ~ 1e-6
    assert v["refractive_index"].value == pytest.approx(a["refractive_index"].value, abs=2e-6)


@pytest.mark.parametrize("model, params, exc, fragment", [
    ("plate-rotation", {"thickness": "1mm", "wavelength": "632.8nm", "angle": "10deg", "colour": "red"},
     InputError, "colour"),
    ("plate-rotation", {"thickness": "1", "wavelength": "632.8nm", "angle": "10deg"}, UnitError, "params.thickness"),
    ("teleportation", {}, InputError, "unknown model"),
    ("gas-cell", {"wavelength": "633nm"}, InputError, "params.length"),
])
def test_errors_name_the_parameter(model, params, exc, fragment):
    with pytest.raises(exc, match=fragment.replace(".", r"\.")):
        derive_by_name(model, {"total_fringes": 10.0}, **params)


def test_no_count():
    with pytest.raises(InputError, match="no count"):
        derive_by_name("displacement", {}, wavelength="633nm")


def test_every_model_is_listed():
    assert set(MODEL_PARAMETERS) == {"plate-rotation", "wavelength-scan", "gas-cell", "displacement", "expansion"}
