"""Measurement models: turn a fringe count into a physical result with an uncertainty.

Each model has a forward function (quantity -> count), an inverse (count ->
quantity) and a ``derive_*`` function that propagates the 1-sigma of every input
to first order and returns :class:`Measurement` objects with an uncertainty
budget. Inputs are plain SI floats, or :class:`~fringecount.units.Uncertain`
values, named with their unit (``thickness_m``, ``temperature_K``).

Wavelength convention: the plate models (``plate``, ``scan``) use the wavelength
**in air** and the index relative to air, like glass catalogues; the air, gas
cell, displacement and expansion models use the **vacuum** wavelength. See
docs/measurements.md.
"""

from ._measurement import Measurement, Reference, budget_table, propagate
from .air import (
    STANDARD_CONDITIONS,
    AirConditions,
    air_conditions,
    air_index,
    air_index_ciddor,
    air_index_edlen,
    air_to_vacuum_wavelength,
    derive_air_index,
    saturation_vapour_pressure,
    vacuum_to_air_wavelength,
)
from .by_name import MODEL_PARAMETERS, Derivation, ParamReader, derive_by_name, derive_from_params
from .dispersion import CATALOGUE, Cauchy, Sellmeier, get_material, material_names, parse_coefficients
from .displacement import DriveFit, derive_displacement, displacement_from_fringes, fit_drive
from .expansion import derive_expansion, derive_expansion_slope, expansion_coefficient
from .fit_log import (
    CountRecord,
    LineFit,
    align_log,
    read_count_result,
    read_drive_log,
    trusted_series,
    weighted_line_fit,
)
from .gas import derive_gas_cell, derive_gas_cell_slope, gas_fringes, gas_refractivity, reduce_refractivity
from .plate import PlateFit, derive_plate_rotation, fit_plate_rotation, plate_fringes, plate_index, plate_thickness
from .scan import (
    derive_wavelength_scan,
    group_to_phase_index,
    mid_wavelength,
    scan_fringes,
    scan_group_index,
    scan_stop_wavelength,
    scan_thickness,
)

__all__ = [
    "Measurement", "Reference", "budget_table", "propagate",
    "STANDARD_CONDITIONS", "AirConditions", "air_conditions", "air_index", "air_index_ciddor", "air_index_edlen",
    "air_to_vacuum_wavelength", "derive_air_index", "saturation_vapour_pressure", "vacuum_to_air_wavelength",
    "MODEL_PARAMETERS", "Derivation", "ParamReader", "derive_by_name", "derive_from_params",
    "CATALOGUE", "Cauchy", "Sellmeier", "get_material", "material_names", "parse_coefficients",
    "DriveFit", "derive_displacement", "displacement_from_fringes", "fit_drive",
    "derive_expansion", "derive_expansion_slope", "expansion_coefficient",
    "CountRecord", "LineFit", "align_log", "read_count_result", "read_drive_log", "trusted_series",
    "weighted_line_fit",
    "derive_gas_cell", "derive_gas_cell_slope", "gas_fringes", "gas_refractivity", "reduce_refractivity",
    "PlateFit", "derive_plate_rotation", "fit_plate_rotation", "plate_fringes", "plate_index", "plate_thickness",
    "derive_wavelength_scan", "group_to_phase_index", "mid_wavelength", "scan_fringes", "scan_group_index",
    "scan_stop_wavelength", "scan_thickness",
]
