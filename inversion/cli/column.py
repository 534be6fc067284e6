"""``lidmelt column``: tabulate melting columns over combinations of inputs."""

from __future__ import annotations

import argparse
import itertools
import json
import sys

import numpy as np

from ...forward._validation import PARAMETER_UNITS
from ...forward.column import MELTING_REGIONS, melt_column
from ...forward.parameterizations import PARAMETERIZATIONS

# option name (= melt_column argument) -> default
_NUMERIC = {
    "potential_temperature": "1350",
    "lithosphere_thickness": "0",
    "water": "0",
    "active_upwelling": "1",
    "solidus_offset": "0",
}
_OUTPUTS = [
    ("crustal_thickness", "km"),
    ("melt_thickness", "km"),
    ("onset_depth", "km"),
    ("top_depth", "km"),
    ("max_melt_fraction", ""),
    ("top_melt_fraction", ""),
    ("mean_melt_fraction", ""),
    ("mean_melting_pressure", "GPa"),
]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.description = (
        "Tabulate the melting column beneath a lithospheric lid for every combination of "
        "the given values. Numeric options take a value, a comma list (1300,1350) or an "
        "inclusive range start:stop:step (1300:1500:50)."
    )
    for name, default in _NUMERIC.items():
        unit = PARAMETER_UNITS[name].replace("-", "dimensionless")
        parser.add_argument(f"--{name.replace('_', '-')}", default=default, metavar="VALUES",
                            help=f"{name.replace('_', ' ')} ({unit}; default {default})")
    parser.add_argument("--melting-region", default="column", metavar="NAMES",
                        help=f"melting region: {', '.join(MELTING_REGIONS)} (comma list allowed)")
    parser.add_argument("--parameterization", default="katz2003", metavar="NAMES",
                        help=f"melting parameterization: {', '.join(PARAMETERIZATIONS)}")
    parser.add_argument("--crust-density", type=float, default=2900.0, help="kg/m^3 (default 2900)")
    parser.add_argument("--mantle-density", type=float, default=3300.0, help="kg/m^3 (default 3300)")
    parser.add_argument("--format", choices=("table", "csv", "json"), default="table",
                        help="output format (default: aligned table)")
    parser.add_argument("--plot", metavar="FILE.png", help="also draw a P-T diagram to this PNG")


def parse_values(text: str, option: str) -> list[float]:
    """A value, a comma list or an inclusive ``start:stop:step`` range."""
    values: list[float] = []
    for part in text.split(","):
        part = part.strip()
        try:
            if ":" in part:
                start, stop, step = (float(x) for x in part.split(":"))
                if step <= 0 or stop < start:
                    raise ValueError
                values.extend(np.arange(start, stop + 0.5 * step, step).round(10).tolist())
            else:
                values.append(float(part))
        except ValueError:
            raise ValueError(f"--{option}: cannot read {part!r}; give a number, a comma list "
                             "or start:stop:step with step > 0 and stop >= start") from None
    if not np.all(np.isfinite(values)):
        raise ValueError(f"--{option}: values must be finite numbers")
    return values


def _names(text: str, allowed, option: str) -> list[str]:
    names = [p.strip() for p in text.split(",") if p.strip()]
    for name in names:
        if name not in allowed:
            raise ValueError(f"--{option}: unknown {name!r}; choose from {', '.join(allowed)}")
    return names


def tabulate(args) -> list[dict]:
    """One row per combination, in option order."""
    numeric = {k: parse_values(getattr(args, k), k.replace("_", "-")) for k in _NUMERIC}
    regions = _names(args.melting_region, MELTING_REGIONS, "melting-region")
    params = _names(args.parameterization, list(PARAMETERIZATIONS), "parameterization")
    rows = []
    for param, melting_region in itertools.product(params, regions):
        grid = np.array(list(itertools.product(*numeric.values())), float)
        inputs = dict(zip(_NUMERIC, grid.T, strict=True))
        res = melt_column(**inputs, parameterization=param, melting_region=melting_region,
                          crust_density=args.crust_density, mantle_density=args.mantle_density)
        for i in range(grid.shape[0]):
            row = {k: float(v[i]) for k, v in inputs.items()}
            row |= {"parameterization": param, "melting_region": melting_region}
            row |= {name: float(getattr(res, name)[i]) for name, _ in _OUTPUTS}
            rows.append(row)
    return rows


def _header(name: str) -> str:
    unit = dict(_OUTPUTS).get(name) or PARAMETER_UNITS.get(name, "").strip("-")
    return f"{name}_{unit.lower().replace('degc', 'c')}" if unit else name


def format_rows(rows: list[dict], fmt: str) -> str:
    if fmt == "json":
        return json.dumps(rows, indent=2)
    keys = list(rows[0])
    headers = [_header(k) for k in keys]
    cells = [[f"{r[k]:.4g}" if isinstance(r[k], float) else str(r[k]) for k in keys] for r in rows]
    if fmt == "csv":
        return "\n".join(",".join(line) for line in [headers, *cells])
    widths = [max(len(h), *(len(c[i]) for c in cells)) for i, h in enumerate(headers)]
    lines = ["  ".join(h.rjust(w) for h, w in zip(headers, widths, strict=True))]
    lines += ["  ".join(c.rjust(w) for c, w in zip(row, widths, strict=True)) for row in cells]
    return "\n".join(lines)


def run(args) -> int:
    rows = tabulate(args)
    if args.plot:
        if not args.plot.lower().endswith(".png"):
            raise ValueError(f"--plot: {args.plot!r} must end in .png")
        from ...forward._pt_figure import write_column_figure

        write_column_figure(args.plot, rows, crust_density=args.crust_density,
                            mantle_density=args.mantle_density)
    sys.stdout.write(format_rows(rows, args.format) + "\n")
    if args.plot:
        print(f"P-T diagram written to {args.plot}", file=sys.stderr)
    return 0


__all__ = ["add_arguments", "format_rows", "parse_values", "run", "tabulate"]
