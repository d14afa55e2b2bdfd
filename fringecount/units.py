"""Parsing quantities written with a unit and an optional 1-sigma uncertainty.

A quantity on the command line looks like ``632.8nm``, ``20degC``, ``101.325kPa``,
``45%``, ``10deg`` or ``10K``. Appending ``+/-SIGMA`` (or ``±SIGMA``) attaches a
1-sigma standard uncertainty; the unit may follow both numbers
(``1.000+/-0.002mm``), each number (``1.000mm+/-0.002mm``) or only the value
(``1.000mm+/-0.002``, the sigma then takes the value's unit).

Every parsed value is converted once, at the boundary, to the canonical unit of
its *kind* (see :data:`KINDS`): metres, radians, kelvin, pascals, percent,
µmol/mol. The models downstream work on plain floats with the unit in the name.

Temperatures need care because °C and °F are offset units. Kind ``temperature``
is an absolute temperature (``20degC`` becomes 293.15 K); kind
``temperature_difference`` is an interval (``10K``, ``10degC`` and
``10delta_degC`` all become 10 K). The sigma of any quantity is always an
interval, so ``20+/-0.1degC`` is 293.15 K ± 0.1 K.

Examples
--------
>>> parse_quantity("1.000+/-0.002mm", "length")
Uncertain(value=0.001, sigma=2e-06)
>>> parse_quantity("20degC", "temperature").value
293.15
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache

from .errors import UnitError

__all__ = ["Uncertain", "KINDS", "parse_quantity", "parse_number", "convert_value", "unit_registry"]


@dataclass(frozen=True)
class Uncertain:
    """A value with its 1-sigma standard uncertainty, both in the same unit.

    Parameters
    ----------
    value : float
        Best estimate.
    sigma : float
        1-sigma standard uncertainty (``>= 0``; 0 means "taken as exact").
    """

    value: float
    sigma: float = 0.0

    def __post_init__(self) -> None:
        if not math.isfinite(self.value):
            raise UnitError(f"value {self.value!r} is not a finite number; give a finite value")
        if not (math.isfinite(self.sigma) and self.sigma >= 0):
            raise UnitError(f"uncertainty {self.sigma!r} must be a finite number >= 0; e.g. 1.000+/-0.002mm")


#: kind -> (canonical unit for pint, label shown to users, example, allowed unit names or None)
#: ``None`` means "any unit of the canonical unit's dimensionality". For dimensionless
#: kinds pint cannot tell an angle from a percentage, so those list their units.
KINDS: dict[str, tuple[str, str, str, tuple[str, ...] | None]] = {
    "length": ("meter", "m", "10mm", None),
    "wavelength": ("meter", "m", "632.8nm", None),
    "angle": ("radian", "rad", "10deg", ("radian", "degree", "arcminute", "arcsecond")),
    "temperature": ("kelvin", "K", "20degC", None),
    "temperature_difference": ("kelvin", "K", "10K", None),
    "pressure": ("pascal", "Pa", "101.325kPa", None),
    "humidity": ("percent", "%", "45%", ("percent",)),
    "co2": ("ppm", "µmol/mol", "450ppm", ("ppm", "ppb", "percent", "mole", "dimensionless")),
    "voltage": ("volt", "V", "12.5V", None),
    "time": ("second", "s", "0.25s", None),
}

_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_SPLIT = re.compile(rf"^\s*(?P<num>{_NUMBER})\s*(?P<unit>.*?)\s*$")
_PM = re.compile(r"\+/-|\+-|±")
_PAREN = re.compile(r"^\s*\((?P<inner>[^()]*)\)\s*(?P<unit>.*?)\s*$")
_OFFSET_UNITS = {"degree_Celsius": "delta_degree_Celsius", "degree_Fahrenheit": "delta_degree_Fahrenheit",
                 "degree_Rankine": "degree_Rankine", "degree_Reaumur": "delta_degree_Reaumur"}


@lru_cache(maxsize=1)
def unit_registry():
    """The shared :class:`pint.UnitRegistry` (built once, on first use)."""
    import pint

    ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=False)
    return ureg


def _unit(text: str, name: str, kind: str, example: str):
    ureg = unit_registry()
    text = text.replace("°C", "degC").replace("°F", "degF").replace("µ", "u").replace("μ", "u")
    if text.strip() in ("°", "deg"):
        text = "degree"
    try:
        return ureg.Unit(text.strip())
    except Exception:
        raise UnitError(f"{name}: unknown unit {text.strip()!r}; write e.g. {example}") from None


def _check_unit(unit, kind: str, name: str):
    """Return the pint unit after checking it belongs to ``kind``."""
    ureg = unit_registry()
    canonical, label, example, allowed = KINDS[kind]
    target = ureg.Unit(canonical)
    if unit.dimensionality != target.dimensionality:
        raise UnitError(f"{name}: unit {unit:~} is not a unit of {kind.replace('_', ' ')}; write e.g. {example}")
    if allowed is not None:
        unit_names = [str(u) for u in unit._units] or ["dimensionless"]
        ok = all(any(un.endswith(a) for a in allowed) for un in unit_names)
        if kind != "angle" and any(un.endswith(a) for un in unit_names
                                   for a in KINDS["angle"][3]):  # an angle is not a ratio
            ok = False
        if not ok:
            raise UnitError(f"{name}: unit {unit:~} is not a unit of {kind.replace('_', ' ')}; write e.g. {example}")
    return unit


def _to_canonical(number: float, unit, kind: str, *, interval: bool) -> float:
    """Convert ``number unit`` to the canonical unit of ``kind``.

    ``interval=True`` treats the number as a difference (for sigmas and for
    ``temperature_difference``), so offset units (°C, °F) convert by their scale only.
    """
    ureg = unit_registry()
    canonical = KINDS[kind][0]
    names = [str(u) for u in unit._units]
    if interval and len(names) == 1 and names[0] in _OFFSET_UNITS:
        unit = ureg.Unit(_OFFSET_UNITS[names[0]])
    return float(ureg.Quantity(number, unit).to(canonical).magnitude)


def _split(part: str, name: str, example: str) -> tuple[float, str]:
    m = _SPLIT.match(part)
    if not m:
        raise UnitError(f"{name}: cannot read {part.strip()!r} as a number with a unit; write e.g. {example}")
    return float(m.group("num")), m.group("unit")


def parse_quantity(text: str | float | int, kind: str, *, name: str = "value") -> Uncertain:
    """Parse ``VALUE[UNIT][+/-SIGMA[UNIT]]`` into canonical units of ``kind``.

    Parameters
    ----------
    text : str
        The quantity as written, e.g. ``"1.000+/-0.002mm"`` or ``"20degC"``.
    kind : str
        One of :data:`KINDS` (``length``, ``wavelength``, ``angle``, ``temperature``,
        ``temperature_difference``, ``pressure``, ``humidity``, ``co2``, ``voltage``, ``time``).
    name : str
        Name shown in error messages, e.g. the option ``--thickness``.

    Returns
    -------
    Uncertain
        Value and 1-sigma in the canonical unit: m, m, rad, K, K, Pa, %, µmol/mol, V, s.

    Raises
    ------
    UnitError
        Unit missing, unknown or of the wrong kind; text not a number; negative sigma.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown quantity kind {kind!r}; choose one of {sorted(KINDS)}")
    canonical, label, example, _ = KINDS[kind]
    if not isinstance(text, str):
        raise UnitError(f"{name}: {text!r} has no unit; write e.g. {example}")
    raw = text.strip()
    paren = _PAREN.match(raw)
    common_unit = ""
    if paren and _PM.search(paren.group("inner")):
        raw, common_unit = paren.group("inner"), paren.group("unit")
    parts = _PM.split(raw)
    if len(parts) > 2:
        raise UnitError(f"{name}: more than one '+/-' in {text!r}; write e.g. 1.000+/-0.002mm")
    value_num, value_unit = _split(parts[0], name, example)
    sigma_num, sigma_unit = 0.0, ""
    if len(parts) == 2:
        sigma_num, sigma_unit = _split(parts[1], name, example)
        if sigma_num < 0:
            raise UnitError(f"{name}: the uncertainty in {text!r} is negative; give a 1-sigma >= 0")
    if common_unit and (value_unit or sigma_unit):
        raise UnitError(f"{name}: unit given twice in {text!r}; write e.g. (1.000+/-0.002)mm")
    if common_unit:
        value_unit = sigma_unit = common_unit
    elif not value_unit and sigma_unit:  # 1.000+/-0.002mm: the unit applies to both
        value_unit = sigma_unit
    elif value_unit and not sigma_unit:  # 1.000mm+/-0.002: the sigma takes the value's unit
        sigma_unit = value_unit
    if not value_unit and kind == "co2":
        # a CO2 content is quoted as a bare mole fraction in umol/mol (ppm) by common practice
        value_unit = sigma_unit = "ppm"
    if not value_unit:
        raise UnitError(f"{name}: {text.strip()!r} has no unit; write e.g. {example}")
    vu = _check_unit(_unit(value_unit, name, kind, example), kind, name)
    su = _check_unit(_unit(sigma_unit, name, kind, example), kind, name)
    interval = kind == "temperature_difference"
    value = _to_canonical(value_num, vu, kind, interval=interval)
    sigma = _to_canonical(sigma_num, su, kind, interval=True)
    if kind == "temperature" and value <= 0:
        raise UnitError(f"{name}: {text.strip()!r} is at or below absolute zero; check the unit (degC vs K)")
    return Uncertain(value, abs(sigma))


def parse_number(text: str | float | int, *, name: str = "value") -> Uncertain:
    """Parse a dimensionless ``VALUE[+/-SIGMA]`` such as a fringe count ``16.1413+/-0.05``.

    Raises
    ------
    UnitError
        If the text is not a number or carries a unit.
    """
    if isinstance(text, (int, float)):
        return Uncertain(float(text))
    parts = _PM.split(str(text).strip())
    try:
        if len(parts) == 1:
            return Uncertain(float(parts[0]))
        if len(parts) == 2:
            sigma = float(parts[1])
            if sigma < 0:
                raise ValueError
            return Uncertain(float(parts[0]), sigma)
    except ValueError:
        pass
    raise UnitError(f"{name}: {text!r} is not a plain number; write e.g. 16.1413 or 16.1413+/-0.05 (no unit)")


def convert_value(value: float, unit_text: str, kind: str, *, name: str = "value",
                  interval: bool | None = None) -> float:
    """Convert a number given in ``unit_text`` to the canonical unit of ``kind``.

    Used for log columns whose unit is stated once (``--log-unit kPa``).
    ``interval`` defaults to True only for ``temperature_difference``.
    """
    _, _, example, _ = KINDS[kind]
    unit = _check_unit(_unit(unit_text, name, kind, example), kind, name)
    if interval is None:
        interval = kind == "temperature_difference"
    return _to_canonical(value, unit, kind, interval=interval)
