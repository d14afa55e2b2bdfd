"""``fringecount derive MODEL``: turn a fringe count into a physical result.

Models: ``plate-rotation``, ``wavelength-scan``, ``gas-cell``, ``displacement``,
``expansion``. Each takes either plain numbers (``--fringes 16.1413+/-0.05``) or a
count result folder (``--result DIR``, its total count) optionally with a drive
log (``--log FILE.csv --log-column NAME``) for a fit over all trusted frames.

Quantities carry units and an optional 1-sigma: ``--thickness 1.000+/-0.002mm``.

Examples
--------
::

    fringecount derive plate-rotation --fringes 16.1413+/-0.05 --thickness 1mm --wavelength 632.8nm --angle 10deg
    fringecount derive wavelength-scan --fringes 10.527 --thickness 10mm --start 670nm --stop 670.5nm --material fused-silica
    fringecount derive gas-cell --fringes 42.94 --length 50mm --wavelength 632.991nm --temperature 20degC --humidity 0%
    fringecount derive displacement --result run1 --log piezo.csv --log-column voltage --log-unit V --wavelength 632.991nm
    fringecount derive expansion --fringes 36.5 --length 50mm --delta-t 10K --wavelength 632.991nm --json
"""

from __future__ import annotations

import argparse
import json
import math
import re
import sys

import numpy as np

from ..errors import InputError
from ..models import (
    AirConditions,
    Measurement,
    air_conditions,
    air_index_ciddor,
    align_log,
    budget_table,
    derive_displacement,
    derive_expansion_slope,
    derive_gas_cell_slope,
    fit_drive,
    fit_plate_rotation,
    group_to_phase_index,
    propagate,
    read_count_result,
    read_drive_log,
    trusted_series,
    weighted_line_fit,
)
from ..models.by_name import MODEL_PARAMETERS, ParamReader, derive_from_params, gas_notes, gas_reference
from ..units import Uncertain, convert_value, parse_number, parse_quantity, unit_registry
from . import add_output_arguments

__all__ = ["register", "run", "emit", "add_air_arguments", "air_from_args"]

MODELS = ("plate-rotation", "wavelength-scan", "gas-cell", "displacement", "expansion")


# ---------------------------------------------------------------- shared options
def add_air_arguments(parser: argparse.ArgumentParser, *, required: bool = False) -> None:
    """``--temperature --pressure --humidity --co2`` (defaults: 20 degC, 101.325 kPa, 50 %, 450 ppm)."""
    g = parser.add_argument_group("air along the beam (defaults 20degC, 101.325kPa, 50%, 450ppm; stated in notes)")
    g.add_argument("--temperature", metavar="T", required=required, help="air temperature, e.g. 20.3+/-0.1degC")
    g.add_argument("--pressure", metavar="P", required=required, help="air pressure, e.g. 101.2+/-0.05kPa")
    g.add_argument("--humidity", metavar="RH", required=required, help="relative humidity, e.g. 45+/-5%%")
    g.add_argument("--co2", metavar="X", required=required, help="CO2 mole fraction, e.g. 450ppm or 450umol/mol")


def _opt(args, attr: str, kind: str, flag: str) -> Uncertain | None:
    text = getattr(args, attr, None)
    return None if text is None else parse_quantity(text, kind, name=flag)


def air_from_args(args: argparse.Namespace) -> AirConditions:
    """AirConditions from the parsed air options (missing ones take the defaults)."""
    return air_conditions(_opt(args, "temperature", "temperature", "--temperature"),
                          _opt(args, "pressure", "pressure", "--pressure"),
                          _opt(args, "humidity", "humidity", "--humidity"),
                          _opt(args, "co2", "co2", "--co2"))


def _add_count_arguments(p: argparse.ArgumentParser, log_kind: str, default_log_unit: str) -> None:
    g = p.add_argument_group("the count (give --fringes, or --result [with --log])")
    g.add_argument("--fringes", metavar="N", help="fringe count, optionally with 1-sigma: 16.1413+/-0.05")
    g.add_argument("--result", metavar="DIR", help="count result folder from 'fringecount count --out'")
    g.add_argument("--log", metavar="FILE.csv",
                   help=f"drive log ({log_kind}) to fit against all trusted frames of --result")
    g.add_argument("--log-column", metavar="NAME", help="log column with the driven quantity (default: first non-time)")
    g.add_argument("--log-time-column", metavar="NAME", help="log column with the time in s (default: time_s/time/t)")
    g.add_argument("--log-unit", metavar="UNIT", default=default_log_unit,
                   help=f"unit of the log column (default {default_log_unit})")
    g.add_argument("--log-offset", metavar="DT", default="0s",
                   help="add this to the log times to match the frame times, e.g. 0.35s")


def _add_wavelength_convention(p: argparse.ArgumentParser, default: str) -> None:
    p.add_argument("--wavelength-in", choices=("air", "vacuum"), default=default,
                   help=f"whether the wavelengths given are in air or in vacuum (default {default}; converted "
                        "with the Ciddor equation at the air conditions if they differ from the model's)")


def _add_common(p: argparse.ArgumentParser, *, air_equation: bool = True) -> None:
    if not air_equation:
        add_output_arguments(p)
        return
    p.add_argument("--air-equation", choices=("ciddor", "edlen"), default="ciddor",
                   help="equation for the index of air (default ciddor)")
    add_output_arguments(p)


def register(subparsers) -> None:
    """Add ``derive`` and its model subcommands."""
    parser = subparsers.add_parser(
        "derive", help="turn a fringe count into an index, refractivity, displacement or expansion coefficient",
        description="Turn a fringe count into a physical result with a 1-sigma uncertainty budget. "
                    "Quantities take units and an optional 1-sigma: 1.000+/-0.002mm.")
    models = parser.add_subparsers(dest="model", metavar="MODEL")
    parser.set_defaults(func=_no_model, derive_parser=parser)

    p = models.add_parser("plate-rotation", help="index of a plate tilted from normal incidence (fixed wavelength)",
                          description="Index of a plate from the fringes counted while tilting it from normal "
                                      "incidence. Exact closed-form inverse; with a log of angles, a fit of the "
                                      "index and the zero-angle offset.")
    _add_count_arguments(p, "angle", "deg")
    p.add_argument("--thickness", metavar="T", required=True, help="plate thickness, e.g. 1.000+/-0.002mm")
    p.add_argument("--wavelength", metavar="L", required=True, help="laser wavelength, e.g. 632.8nm")
    p.add_argument("--angle", metavar="A", help="tilt from normal incidence, e.g. 10+/-0.05deg (not with --log)")
    _add_wavelength_convention(p, "air")
    add_air_arguments(p)
    _add_common(p, air_equation=False)
    p.set_defaults(func=run, model="plate-rotation")

    p = models.add_parser("wavelength-scan", help="group (and phase) index of a plate from a tunable-laser scan",
                          description="The count of a wavelength scan measures the GROUP index of the plate. "
                                      "With --material (or --sellmeier/--cauchy) the phase index follows; leave "
                                      "out --thickness or --stop to solve for it on a known material.")
    _add_count_arguments(p, "wavelength", "nm")
    p.add_argument("--thickness", metavar="T", help="plate thickness, e.g. 10.000+/-0.005mm")
    p.add_argument("--start", metavar="L1", help="wavelength at the start of the scan, e.g. 670.0nm")
    p.add_argument("--stop", metavar="L2", help="wavelength at the end of the scan, e.g. 670.5+/-0.001nm")
    m = p.add_mutually_exclusive_group()
    m.add_argument("--material", metavar="NAME",
                   help="built-in dispersion model: fused-silica, N-BK7, CaF2, sapphire-o (case-insensitive)")
    m.add_argument("--sellmeier", metavar="B1,C1,...", help="user Sellmeier coefficients, C in um^2")
    m.add_argument("--cauchy", metavar="A,B,...", help="user Cauchy coefficients, lambda in um")
    _add_wavelength_convention(p, "air")
    add_air_arguments(p)
    _add_common(p, air_equation=False)
    p.set_defaults(func=run, model="wavelength-scan")

    p = models.add_parser("gas-cell", help="refractivity of a gas filled into a cell of length L",
                          description="Refractivity n-1 = N lambda/(2L) of the gas in a cell filled from vacuum, "
                                      "reduced to reference conditions and compared with Ciddor and Edlen for air.")
    _add_count_arguments(p, "pressure", "Pa")
    p.add_argument("--length", metavar="L", required=True, help="inner cell length, e.g. 50.00+/-0.02mm")
    p.add_argument("--wavelength", metavar="L", required=True, help="vacuum wavelength, e.g. 632.991nm")
    p.add_argument("--reference-temperature", metavar="T", default="15degC",
                   help="temperature the refractivity is reduced to (default 15degC)")
    p.add_argument("--reference-pressure", metavar="P", default="101.325kPa",
                   help="pressure the refractivity is reduced to (default 101.325kPa)")
    _add_wavelength_convention(p, "vacuum")
    add_air_arguments(p)
    _add_common(p)
    p.set_defaults(func=run, model="gas-cell")

    p = models.add_parser("displacement", help="mirror displacement, and a drive's sensitivity and hysteresis",
                          description="Mirror displacement d = N lambda_vac/(2 n_air); with a drive log (e.g. "
                                      "piezo voltage), the sensitivity and the up/down hysteresis.")
    _add_count_arguments(p, "drive, e.g. piezo voltage", "V")
    p.add_argument("--wavelength", metavar="L", required=True, help="vacuum wavelength, e.g. 632.991nm")
    p.add_argument("--passes", type=int, default=2, help="beam passes over the displacement (default 2, Michelson)")
    _add_wavelength_convention(p, "vacuum")
    add_air_arguments(p)
    _add_common(p)
    p.set_defaults(func=run, model="displacement")

    p = models.add_parser("expansion", help="thermal expansion coefficient of a heated specimen",
                          description="alpha = dL/(L0 dT) with dL = N lambda_vac/(2 n_air); with a temperature "
                                      "log, the slope over all trusted frames.")
    _add_count_arguments(p, "specimen temperature", "degC")
    p.add_argument("--length", metavar="L0", required=True, help="specimen length at the start, e.g. 50.00mm")
    p.add_argument("--delta-t", metavar="DT", help="temperature change (a difference), e.g. 10+/-0.05K")
    p.add_argument("--wavelength", metavar="L", required=True, help="vacuum wavelength, e.g. 632.991nm")
    p.add_argument("--passes", type=int, default=2, help="beam passes over the length change (default 2)")
    _add_wavelength_convention(p, "vacuum")
    add_air_arguments(p)
    _add_common(p)
    p.set_defaults(func=run, model="expansion")


def _no_model(args) -> int:
    args.derive_parser.print_help(sys.stderr)
    return 2


# ---------------------------------------------------------------- inputs
def _params(args: argparse.Namespace) -> dict:
    """The model's parameters from the parsed options (text, as a manifest would give them)."""
    return {name: getattr(args, name) for name in MODEL_PARAMETERS[args.model] if hasattr(args, name)}


def _count(args, reader: ParamReader):
    """(fringes Uncertain or None, CountRecord or None). Exactly one of --fringes/--result."""
    notes = reader.notes
    if (args.fringes is None) == (args.result is None):
        raise InputError("give either --fringes N or --result DIR (a count result folder), not both or neither")
    if args.log and args.result is None:
        raise InputError("--log needs --result DIR (the count result folder the log belongs to)")
    if args.fringes is not None:
        q = parse_number(args.fringes, name="--fringes")
        reader.inputs["fringes"] = {"value": q.value, "sigma": q.sigma, "unit": "", "text": args.fringes}
        return q, None
    record = read_count_result(args.result)
    s = record.summary
    gaps = s.get("gaps") or []
    if gaps:
        reasons = sorted({str(g.get("reason", "?")) for g in gaps})
        notes.append(f"the count has {len(gaps)} untrusted interval(s) ({', '.join(reasons)}); "
                     "bridged counts carry their own sigma")
    if args.log:
        return None, record
    if s.get("total_fringes") is not None:
        q = Uncertain(float(s["total_fringes"]), float(s.get("total_fringes_sigma") or 0.0))
    else:
        f = record.frames["fringes"].dropna()
        if f.empty:
            raise InputError(f"{args.result}: no count in frames.csv; rerun 'fringecount count --out'")
        last = record.frames.loc[f.index[-1]]
        sig = float(last["fringes_sigma"]) if np.isfinite(last["fringes_sigma"]) else 0.0
        q = Uncertain(float(last["fringes"]), sig)
    notes.append(f"fringes taken from {args.result} (total count of the recording)")
    reader.inputs["fringes"] = {"value": q.value, "sigma": q.sigma, "unit": ""}
    return q, record


def _log_series(args, record, kind: str | None, reader: ParamReader):
    """Trusted (x in canonical units, fringes, sigma) from the aligned log; fit info dict."""
    log = read_drive_log(args.log, time_column=args.log_time_column, value_column=args.log_column)
    offset = parse_quantity(args.log_offset, "time", name="--log-offset").value
    aligned = align_log(record.frames, log, offset_s=offset)
    x, y, s, excluded = trusted_series(aligned)
    if kind is not None:
        a = convert_value(0.0, args.log_unit, kind, name="--log-unit")
        b = convert_value(1.0, args.log_unit, kind, name="--log-unit") - a
        x = a + b * x
    reader.inputs["log"] = {"file": str(args.log), "column": log.attrs.get("value_column"), "unit": args.log_unit,
                            "offset_s": offset}
    reader.notes.append(f"fit over {len(x)} trusted frames inside the log; {excluded} frame(s) excluded "
                        "(untrusted or outside the log)")
    return x, y, s, {"n_points": int(len(x)), "excluded_frames": excluded}


def _fit_info(info: dict, residuals, chi2_reduced: float, residual_unit: str = "fringes") -> dict:
    res = np.asarray(residuals, dtype=float)
    info.update({"chi2_reduced": float(chi2_reduced), "rms_residual": float(np.sqrt(np.mean(res**2))),
                 "max_abs_residual": float(np.max(np.abs(res))), "residual_unit": residual_unit,
                 "residuals": [float(r) for r in res]})
    return info


# ---------------------------------------------------------------- models fed by a drive log
def _plate_rotation_log(args, reader, record):
    thickness = reader.quantity("thickness", "length")
    lam = reader.wavelength("wavelength")
    reader.notes.append("index relative to air; wavelength in air (glass-catalogue convention)")
    if reader.text("angle") is not None:
        reader.notes.append("--angle ignored: the angles come from the log")
    x, y, s, info = _log_series(args, record, "angle", reader)
    fit = fit_plate_rotation(x, y, s, thickness, lam)
    reader.notes.append("fit of the exact model with a free zero-angle offset and count offset")
    q = {"refractive_index": fit.refractive_index, "zero_angle": fit.zero_angle_rad}
    return q, _fit_info(info, fit.residuals, fit.chi2_reduced)


def _wavelength_scan_log(args, reader, record):
    material = reader.material()
    thickness = reader.quantity("thickness", "length")
    reader.notes.append("the count measures the GROUP index n_g = n - lambda dn/dlambda; the phase index changes "
                        "during the scan and needs a dispersion model")
    reader.notes.append("wavelengths in air and indices relative to air (catalogue convention)")
    x, y, s, info = _log_series(args, record, "wavelength", reader)
    if reader.choice("wavelength_in", ("air", "vacuum"), "air") == "vacuum":
        air = reader.air()
        x = x / air_index_ciddor(x, air.temperature_K.value - 273.15, air.pressure_Pa.value,
                                 air.humidity_percent.value, air.co2_ppm.value)
        reader.notes.append("logged wavelengths converted from vacuum to air (Ciddor)")
    fit = weighted_line_fit(1.0 / x, y, s)
    lam_bar = 1.0 / fit.x_mean
    ng = propagate(lambda slope, thickness_m: 1 + abs(slope) / (2 * thickness_m),
                   {"slope": Uncertain(fit.slope, fit.slope_sigma), "thickness_m": thickness}, "",
                   note="slope of count against wavenumber, n_g = 1 + |dN/dsigma|/(2t)")
    ng = Measurement(ng.value, ng.uncertainty, "", tuple(("fit" if k == "slope" else k, v) for k, v in ng.budget),
                     ng.note)
    q = {"group_index": ng, "mid_wavelength": Measurement(lam_bar, 0.0, "m")}
    if material is not None:
        q["phase_index"] = Measurement(group_to_phase_index(ng.value, lam_bar, material), ng.uncertainty, "",
                                       ng.budget, f"n = n_g + lambda dn/dlambda ({material.name})")
    return q, _fit_info(info, fit.residuals, fit.chi2_reduced)


def _gas_cell_log(args, reader, record):
    length = reader.quantity("length", "length")
    lam = reader.wavelength("wavelength")
    t_ref, p_ref = gas_reference(reader)
    gas_notes(reader)
    x, y, s, info = _log_series(args, record, "pressure", reader)
    pressure_given = reader.text("pressure") is not None
    air = reader.air()
    if not pressure_given:
        air = AirConditions(air.temperature_K, Uncertain(float(np.max(x))), air.humidity_percent, air.co2_ppm,
                            tuple(a for a in air.assumed if "kPa" not in a))
        reader.inputs["pressure"] = {"value": float(np.max(x)), "sigma": 0.0, "unit": "Pa"}
        reader.notes.append(f"pressure for the comparison: the highest logged pressure, {np.max(x) / 1e3:.3f} kPa")
    fit = weighted_line_fit(x, y, s)
    q = derive_gas_cell_slope(fit, length, lam, air, reference_temperature_K=t_ref, reference_pressure_Pa=p_ref)
    return q, _fit_info(info, fit.residuals, fit.chi2_reduced)


def _displacement_log(args, reader, record):
    lam = reader.wavelength("wavelength")
    passes = reader.integer("passes", 2)
    eq = reader.choice("air_equation", ("ciddor", "edlen"), "ciddor")
    air = reader.air()
    reader.notes.append(f"d = N lambda_vac/({passes} n_air), n_air by {eq}")
    try:
        unit_registry().Unit(args.log_unit)
    except Exception:
        raise InputError(f"--log-unit: unknown unit {args.log_unit!r}; write e.g. V") from None
    x, y, s, info = _log_series(args, record, None, reader)
    drive_fit = fit_drive(x, y, s, lam, air, passes=passes, equation=eq, drive_unit=args.log_unit)
    q = {"sensitivity": drive_fit.sensitivity, "hysteresis": drive_fit.hysteresis}
    total = record.summary
    if total.get("total_fringes") is not None:
        count = Uncertain(float(total["total_fringes"]), float(total.get("total_fringes_sigma") or 0.0))
        q["displacement"] = derive_displacement(count, lam, air, passes=passes, equation=eq)["displacement"]
    info["hysteresis_fraction"] = drive_fit.hysteresis_fraction
    info["frames_up"], info["frames_down"] = drive_fit.n_up, drive_fit.n_down
    if not math.isfinite(drive_fit.hysteresis.value):
        reader.notes.append("hysteresis not computed: the log does not have both an up and a down stroke")
    fi = _fit_info(info, drive_fit.fit.residuals, drive_fit.fit.chi2_reduced)
    fi["residuals_m"] = [float(r) for r in drive_fit.residuals_m]
    return q, fi


def _expansion_log(args, reader, record):
    length = reader.quantity("length", "length")
    lam = reader.wavelength("wavelength")
    passes = reader.integer("passes", 2)
    eq = reader.choice("air_equation", ("ciddor", "edlen"), "ciddor")
    air = reader.air()
    if reader.text("delta_t") is not None:
        reader.notes.append("--delta-t ignored: the temperatures come from the log")
    reader.notes.append("mean coefficient over the logged temperature range; mount and reference-arm expansion "
                        "not corrected")
    x, y, s, info = _log_series(args, record, "temperature", reader)
    fit = weighted_line_fit(x, y, s)
    q = derive_expansion_slope(fit, length, lam, air, passes=passes, equation=eq)
    return q, _fit_info(info, fit.residuals, fit.chi2_reduced)


_LOG_RUNNERS = {"plate-rotation": _plate_rotation_log, "wavelength-scan": _wavelength_scan_log,
                "gas-cell": _gas_cell_log, "displacement": _displacement_log, "expansion": _expansion_log}


def run(args: argparse.Namespace) -> int:
    """Run one ``derive`` model and print the result (table, or JSON with ``--json``)."""
    reader = ParamReader(args.model, _params(args), prefix="--")
    fringes, record = _count(args, reader)
    if record is not None and args.log:
        quantities, fit = _LOG_RUNNERS[args.model](args, reader, record)
    else:
        quantities, fit = derive_from_params(reader, fringes).quantities, None
    emit(args, args.model, quantities, reader.inputs, reader.notes, fit)
    return 0


# ---------------------------------------------------------------- output
_DISPLAY = {"m": [(1e-3, "mm", 1e3), (1e-6, "um", 1e6), (0.0, "nm", 1e9)],
            "1/K": [(0.0, "1e-6/K", 1e6)]}


def _display(value: float, unit: str) -> tuple[float, str]:
    if unit in _DISPLAY and math.isfinite(value):
        for lim, name, f in _DISPLAY[unit]:
            if abs(value) >= lim:
                return f, name
    if unit.startswith("m/"):
        return 1e9, "nm/" + unit[2:]
    return 1.0, unit


def _input_label(name: str) -> str:
    """Budget key as the user wrote it: ``thickness_m`` -> ``thickness``."""
    return re.sub(r"_(m|K|Pa|percent|ppm|rad)$", "", name).replace("_", "-")


def _fmt(value: float, sigma: float) -> tuple[str, str]:
    if not math.isfinite(value):
        return "nan", ""
    if sigma > 0 and math.isfinite(sigma):
        digits = max(0, 1 - int(math.floor(math.log10(sigma))))
        return f"{value:.{digits}f}", f"{sigma:.{digits}f}"
    return f"{value:.10g}", "0 (exact)"


def _finite(obj):
    """Replace NaN/inf by None so the output is strict JSON (null)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite(v) for v in obj]
    if isinstance(obj, np.generic):
        return _finite(obj.item())
    return obj


def emit(args, model: str, quantities: dict[str, Measurement], inputs: dict, notes: list[str],
         fit: dict | None = None) -> None:
    """Print the result: JSON on stdout with ``--json``, else a table with the uncertainty budget."""
    if getattr(args, "json", False):
        doc = {"model": model, "quantities": {k: m.as_dict() for k, m in quantities.items()},
               "inputs": inputs, "notes": notes}
        if fit is not None:
            doc["fit"] = fit
        print(json.dumps(_finite(doc), indent=2, allow_nan=False))
        return
    out = [f"{model}"]
    for name, m in quantities.items():
        f, unit = _display(m.value, m.unit)
        v, s = _fmt(m.value * f, m.uncertainty * f)
        out.append(f"  {name:<26} {v:>20} +/- {s:<14} {unit}")
        for k, c, share in budget_table(m):
            cv = _fmt(c * f, c * f)[1] if c > 0 else "0"
            out.append(f"      {'from ' + _input_label(k):<24} {'':>20}     {cv:<14} {unit:<8} {share * 100:5.1f} % of variance")
    if fit is not None:
        out.append(f"  fit: {fit.get('n_points')} frames, {fit.get('excluded_frames')} excluded, "
                   f"reduced chi2 {fit.get('chi2_reduced', float('nan')):.3g}, "
                   f"rms residual {fit.get('rms_residual', float('nan')):.3g} {fit.get('residual_unit', '')}")
    if not getattr(args, "quiet", False):
        for n in notes:
            out.append(f"  note: {n}")
    print("\n".join(out))
