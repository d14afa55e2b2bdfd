"""``fringecount air``: refractive index of air (Ciddor 1996, or the modified Edlén equation).

Examples
--------
::

    fringecount air --wavelength 632.991nm --temperature 20degC --pressure 101.325kPa --humidity 50% --co2 450ppm
    fringecount air --wavelength 633nm --temperature 20+/-0.1degC --pressure 101.3+/-0.05kPa --humidity 40+/-5% --co2 450ppm --json
"""

from __future__ import annotations

import argparse

from ..models import derive_air_index
from ..units import parse_quantity
from . import add_output_arguments
from .derive import add_air_arguments, air_from_args, emit

__all__ = ["register", "run"]


def register(subparsers) -> None:
    """Add the ``air`` subcommand."""
    p = subparsers.add_parser(
        "air", help="refractive index of air (Ciddor 1996; modified Edlen as the alternative)",
        description="Refractive index of air at the VACUUM wavelength and the given conditions, with the "
                    "uncertainty propagated from the +/- of each condition. Missing conditions take "
                    "20degC, 101.325kPa, 50%%, 450ppm and are listed in the notes.")
    p.add_argument("--wavelength", metavar="L", required=True, help="vacuum wavelength, e.g. 632.991nm")
    add_air_arguments(p)
    p.add_argument("--equation", choices=("ciddor", "edlen"), default="ciddor",
                   help="equation for refractive_index/refractivity (default ciddor); the other one is "
                        "reported as refractive_index_<name>")
    p.add_argument("--saturation", choices=("nist", "davis"), default="nist",
                   help="saturation vapour pressure form (default nist, over ice below 0 degC)")
    add_output_arguments(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Compute and print the air index."""
    lam = parse_quantity(args.wavelength, "wavelength", name="--wavelength")
    air = air_from_args(args)
    inputs = {"wavelength": {"value": lam.value, "sigma": lam.sigma, "unit": "m", "text": args.wavelength},
              "temperature": {"value": air.temperature_K.value, "sigma": air.temperature_K.sigma, "unit": "K"},
              "pressure": {"value": air.pressure_Pa.value, "sigma": air.pressure_Pa.sigma, "unit": "Pa"},
              "humidity": {"value": air.humidity_percent.value, "sigma": air.humidity_percent.sigma, "unit": "%"},
              "co2": {"value": air.co2_ppm.value, "sigma": air.co2_ppm.sigma, "unit": "umol/mol"},
              "equation": args.equation, "saturation": args.saturation}
    notes = ["vacuum wavelength; relative humidity over water (over ice below 0 degC with --saturation nist)",
             "the uncertainty of the equation itself (a few 1e-8) is not included"]
    if air.note():
        notes.append(air.note())
    other = "edlen" if args.equation == "ciddor" else "ciddor"
    notes.append("the modified Edlen equation is written for 450 umol/mol CO2; --co2 only enters Ciddor")
    q = {}
    for eq, suffix in ((args.equation, ""), (other, f"_{other}")):
        n = derive_air_index(lam, air.temperature_K, air.pressure_Pa, air.humidity_percent, air.co2_ppm,
                             equation=eq, saturation=args.saturation)
        q[f"refractive_index{suffix}"] = n
        q[f"refractivity{suffix}"] = type(n)(n.value - 1, n.uncertainty, "", n.budget, n.note)
    emit(args, "air", q, inputs, notes)
    return 0
