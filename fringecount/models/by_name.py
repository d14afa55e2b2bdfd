"""Run a model by name from text parameters, as ``fringecount derive`` and batch manifests give them.

Parameters are strings with units (``{"thickness": "1.000+/-0.002mm", "angle": "10deg"}``),
named like the ``derive`` options without the leading dashes (``delta_t`` or ``delta-t``).
:class:`ParamReader` parses them once, records every parsed input and every note for
the output, and converts wavelengths between air and vacuum when asked to.

Examples
--------
>>> out = derive_by_name("plate-rotation", {"total_fringes": 16.1413, "total_fringes_sigma": 0.05},
...                      thickness="1mm", wavelength="632.8nm", angle="10deg")
>>> round(out["refractive_index"].value, 4)
1.5
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

from ..errors import InputError
from ..units import Uncertain, parse_number, parse_quantity
from ._measurement import Measurement
from .air import AirConditions, air_conditions, air_index_ciddor
from .dispersion import get_material, parse_coefficients
from .displacement import derive_displacement
from .expansion import derive_expansion
from .gas import derive_gas_cell
from .plate import derive_plate_rotation
from .scan import derive_wavelength_scan

__all__ = ["MODEL_PARAMETERS", "ParamReader", "Derivation", "derive_from_params", "derive_by_name"]

_AIR = ("temperature", "pressure", "humidity", "co2")
#: Parameters each model accepts (besides ``fringes``), as option names without dashes.
MODEL_PARAMETERS: dict[str, tuple[str, ...]] = {
    "plate-rotation": ("thickness", "wavelength", "angle", "wavelength_in", *_AIR),
    "wavelength-scan": ("thickness", "start", "stop", "material", "sellmeier", "cauchy", "wavelength_in", *_AIR),
    "gas-cell": ("length", "wavelength", "reference_temperature", "reference_pressure", "wavelength_in", *_AIR),
    "displacement": ("wavelength", "passes", "wavelength_in", "air_equation", *_AIR),
    "expansion": ("length", "delta_t", "wavelength", "passes", "wavelength_in", "air_equation", *_AIR),
}
#: Wavelength convention native to each model (see docs/measurements.md).
NATIVE_WAVELENGTH = {"plate-rotation": "air", "wavelength-scan": "air", "gas-cell": "vacuum",
                     "displacement": "vacuum", "expansion": "vacuum"}
_EXAMPLES = {"length": "10mm", "wavelength": "632.8nm", "angle": "10deg", "temperature_difference": "10K",
             "temperature": "20degC", "pressure": "101.325kPa"}
_CANONICAL_UNIT = {"length": "m", "wavelength": "m", "angle": "rad", "temperature": "K",
                   "temperature_difference": "K", "pressure": "Pa", "humidity": "%", "co2": "umol/mol"}


@dataclass
class ParamReader:
    """Parse text parameters of one model, recording inputs and notes.

    Parameters
    ----------
    model : str
        One of :data:`MODEL_PARAMETERS`.
    params : mapping of str to str or None
        Parameter texts; ``None`` or ``""`` means "not given".
    prefix : str
        Shown before a parameter's name in messages (``"--"`` on the CLI).
    """

    model: str
    params: Mapping[str, object]
    prefix: str = "--"
    inputs: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)

    def __post_init__(self) -> None:
        if self.model not in MODEL_PARAMETERS:
            raise InputError(f"unknown model {self.model!r}; use one of {', '.join(MODEL_PARAMETERS)}")
        clean = {}
        for key, value in self.params.items():
            k = str(key).replace("-", "_")
            if value is None or value == "":
                continue
            clean[k] = value
        unknown = sorted(set(clean) - set(MODEL_PARAMETERS[self.model]) - {"fringes"})
        if unknown:
            raise InputError(f"model {self.model} has no parameter {', '.join(unknown)}; it takes "
                             f"{', '.join(MODEL_PARAMETERS[self.model])}")
        self.params = clean
        self._air: AirConditions | None = None

    def flag(self, name: str) -> str:
        return self.prefix + (name.replace("_", "-") if self.prefix == "--" else name)

    def text(self, name: str):
        return self.params.get(name)

    def _record(self, name: str, q: Uncertain, unit: str, text=None) -> Uncertain:
        self.inputs[name] = {"value": q.value, "sigma": q.sigma, "unit": unit}
        if text is not None:
            self.inputs[name]["text"] = str(text)
        return q

    def quantity(self, name: str, kind: str, *, required: bool = True) -> Uncertain | None:
        """Parse parameter ``name`` as a quantity of ``kind`` (canonical units)."""
        text = self.text(name)
        if text is None:
            if required:
                raise InputError(f"{self.flag(name)} is required for 'derive {self.model}'; e.g. "
                                 f"{self.flag(name)} {_EXAMPLES.get(kind, '1')}")
            return None
        return self._record(name, parse_quantity(str(text), kind, name=self.flag(name)), _CANONICAL_UNIT[kind], text)

    def number(self, name: str) -> Uncertain | None:
        text = self.text(name)
        if text is None:
            return None
        return self._record(name, parse_number(text, name=self.flag(name)), "", text)

    def integer(self, name: str, default: int) -> int:
        text = self.text(name)
        if text is None:
            return default
        try:
            value = int(str(text))
        except ValueError:
            raise InputError(f"{self.flag(name)} must be a whole number, got {text!r}") from None
        if value < 1:
            raise InputError(f"{self.flag(name)} must be at least 1, got {value}")
        self.inputs[name] = value
        return value

    def choice(self, name: str, choices: tuple[str, ...], default: str) -> str:
        value = str(self.text(name) or default).lower()
        if value not in choices:
            raise InputError(f"{self.flag(name)} must be one of {', '.join(choices)}, got {value!r}")
        return value

    def air(self) -> AirConditions:
        """Air conditions along the beam (missing ones assumed, with a note)."""
        if self._air is None:
            air = air_conditions(*(self.quantity(n, n, required=False) for n in _AIR))
            for key, q, unit in (("temperature", air.temperature_K, "K"), ("pressure", air.pressure_Pa, "Pa"),
                                 ("humidity", air.humidity_percent, "%"), ("co2", air.co2_ppm, "umol/mol")):
                self.inputs.setdefault(key, {"value": q.value, "sigma": q.sigma, "unit": unit, "assumed": True})
            if air.note():
                self.notes.append(air.note())
            self._air = air
        return self._air

    def set_air(self, air: AirConditions) -> None:
        self._air = air

    def wavelength(self, name: str, *, required: bool = True) -> Uncertain | None:
        """A wavelength in the model's native convention (air or vacuum), converted if needed."""
        q = self.quantity(name, "wavelength", required=required)
        if q is None:
            return None
        native = NATIVE_WAVELENGTH[self.model]
        given = self.choice("wavelength_in", ("air", "vacuum"), native)
        if given == native:
            return q
        air = self.air()
        lam_vac = q.value if given == "vacuum" else q.value * 1.00027
        n_air = air_index_ciddor(lam_vac, air.temperature_K.value - 273.15, air.pressure_Pa.value,
                                 air.humidity_percent.value, air.co2_ppm.value)
        factor = 1 / n_air if given == "vacuum" else n_air
        self.notes.append(f"{self.flag(name)} converted from {given} to {native} wavelength with "
                          f"n_air = {n_air:.9f} (Ciddor)")
        return Uncertain(q.value * factor, q.sigma * factor)

    def material(self):
        """Dispersion model from ``material``, ``sellmeier`` or ``cauchy`` (or None)."""
        given = [k for k in ("material", "sellmeier", "cauchy") if self.text(k) is not None]
        if len(given) > 1:
            raise InputError(f"give only one of {', '.join(self.flag(k) for k in given)}")
        if not given:
            return None
        k = given[0]
        m = get_material(str(self.text(k))) if k == "material" else parse_coefficients(str(self.text(k)), k)
        self.inputs["material"] = {"name": m.name, "source": m.source}
        return m


@dataclass(frozen=True)
class Derivation:
    """Quantities derived by a model, the parsed inputs and the notes for the output."""

    quantities: dict[str, Measurement]
    inputs: dict
    notes: list[str]


def _plate(r: ParamReader, fringes: Uncertain) -> dict[str, Measurement]:
    thickness = r.quantity("thickness", "length")
    lam = r.wavelength("wavelength")
    angle = r.quantity("angle", "angle")
    r.notes.append("index relative to air; wavelength in air (glass-catalogue convention)")
    r.notes.append("exact closed-form inverse (not the small-angle formula); the angle sigma should include "
                   "the uncertainty of normal incidence")
    return derive_plate_rotation(fringes, thickness, lam, angle)


def _scan(r: ParamReader, fringes: Uncertain) -> dict[str, Measurement]:
    material = r.material()
    thickness = r.quantity("thickness", "length", required=material is None)
    start = r.wavelength("start")
    stop = r.wavelength("stop", required=material is None)
    if thickness is None and stop is None:
        raise InputError("wavelength scan: give --thickness or --stop (only one can be solved for)")
    r.notes.append("the count measures the GROUP index n_g = n - lambda dn/dlambda; the phase index changes "
                   "during the scan and needs a dispersion model")
    r.notes.append("wavelengths in air and indices relative to air (catalogue convention)")
    if material is not None and thickness is not None and stop is not None:
        r.notes.append(f"phase index by the exact Sellmeier difference: the sample is the {material.name} "
                       "curve plus a constant offset")
    return derive_wavelength_scan(fringes, thickness, start, stop, material)


def _gas(r: ParamReader, fringes: Uncertain) -> dict[str, Measurement]:
    length = r.quantity("length", "length")
    lam = r.wavelength("wavelength")
    t_ref, p_ref = gas_reference(r)
    gas_notes(r)
    return derive_gas_cell(fringes, length, lam, r.air(), reference_temperature_K=t_ref,
                           reference_pressure_Pa=p_ref)


def gas_reference(r: ParamReader) -> tuple[float, float]:
    """Reference temperature (K) and pressure (Pa) of the gas-cell reduction (defaults 15 degC, 101.325 kPa)."""
    t_ref = r.quantity("reference_temperature", "temperature", required=False)
    p_ref = r.quantity("reference_pressure", "pressure", required=False)
    return (288.15 if t_ref is None else t_ref.value), (101325.0 if p_ref is None else p_ref.value)


def gas_notes(r: ParamReader) -> None:
    r.notes.append("refractivity at the cell conditions; the reduction to reference conditions uses the "
                   "ideal-gas density ratio (compressibility < 3e-4 relative below 1 atm)")
    r.notes.append("refractivity_ciddor / refractivity_edlen: predictions for AIR at the stated conditions")


def _displacement(r: ParamReader, fringes: Uncertain) -> dict[str, Measurement]:
    lam = r.wavelength("wavelength")
    passes = r.integer("passes", 2)
    eq = r.choice("air_equation", ("ciddor", "edlen"), "ciddor")
    r.notes.append(f"d = N lambda_vac/({passes} n_air), n_air by {eq}")
    return derive_displacement(fringes, lam, r.air(), passes=passes, equation=eq)


def _expansion(r: ParamReader, fringes: Uncertain) -> dict[str, Measurement]:
    length = r.quantity("length", "length")
    dt = r.quantity("delta_t", "temperature_difference")
    lam = r.wavelength("wavelength")
    passes = r.integer("passes", 2)
    eq = r.choice("air_equation", ("ciddor", "edlen"), "ciddor")
    r.notes.append("mean coefficient over the temperature change; mount and reference-arm expansion not corrected")
    return derive_expansion(fringes, length, dt, lam, r.air(), passes=passes, equation=eq)


_PLAIN = {"plate-rotation": _plate, "wavelength-scan": _scan, "gas-cell": _gas, "displacement": _displacement,
          "expansion": _expansion}


def derive_from_params(reader: ParamReader, fringes: Uncertain) -> Derivation:
    """Run ``reader.model`` on a count ``fringes`` with the reader's parameters."""
    quantities = _PLAIN[reader.model](reader, fringes)
    return Derivation(quantities, reader.inputs, reader.notes)


def derive_by_name(model: str, summary: Mapping | None = None, *, prefix: str = "params.",
                   **params) -> dict[str, Measurement]:
    """Derive ``model``'s quantities from a count summary and text parameters.

    Parameters
    ----------
    model : str
        ``plate-rotation``, ``wavelength-scan``, ``gas-cell``, ``displacement`` or ``expansion``.
    summary : mapping, optional
        A count's ``summary.json`` content; ``total_fringes`` and ``total_fringes_sigma``
        are the count. A ``fringes`` parameter (``"16.14+/-0.05"``) overrides it.
    **params : str
        The model's parameters as ``derive`` takes them (``thickness="1.000+/-0.002mm"``).

    Returns
    -------
    dict of str to Measurement

    Raises
    ------
    InputError
        Unknown model or parameter, missing parameter, bad unit, no count.
    """
    reader = ParamReader(model, params, prefix=prefix)
    fringes = reader.number("fringes")
    if fringes is None:
        if not summary or summary.get("total_fringes") is None:
            raise InputError(f"derive {model}: no count (summary has no total_fringes and no fringes parameter)")
        fringes = Uncertain(float(summary["total_fringes"]), float(summary.get("total_fringes_sigma") or 0.0))
    return derive_from_params(reader, fringes).quantities
