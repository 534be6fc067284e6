"""``lidmelt column``: tabulate melting columns over combinations of inputs."""

from __future__ import annotations

import argparse
import csv
import io
import itertools
import json
import sys
import textwrap
from pathlib import Path

import numpy as np

from ..forward.column import MELTING_REGIONS, melt_column
from ..forward.parameterizations import PARAMETERIZATIONS, get_parameterization
from ..forward.quantities import GROUPS, quantity
from ..inversion.errors import InputError
from ..inversion.study.keys import parse_number

# option name (= melt_column argument) -> default
_NUMERIC = {
    "potential_temperature": "1350",
    "lithosphere_thickness": "0",
    "water": "0",
    "active_upwelling": "1",
    "solidus_offset": "0",
}
#: Every input of a row, in table order (numeric options, choices, densities).
INPUT_KEYS = (*_NUMERIC, "parameterization", "melting_region", "crust_density",
              "mantle_density")
#: Outputs grouped by what a user asks: where melting happens, how much, what melt.
OUTPUT_KEYS = ("onset_depth", "top_depth", "melt_thickness", "crustal_thickness",
               "mean_melt_fraction", "max_melt_fraction", "top_melt_fraction",
               "mean_melting_pressure")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.description = (
        "Tabulate the melting column beneath a lithospheric lid for every combination of "
        "the given values. Numeric options take a value, a comma list (1300,1350) or an "
        "inclusive range start:stop:step (1300:1500:50); write a negative value with '=' "
        "(--solidus-offset=-20)."
    )
    for name, default in _NUMERIC.items():
        unit = quantity(name).unit_text or "dimensionless"
        parser.add_argument(f"--{name.replace('_', '-')}", default=default, metavar="VALUES",
                            help=f"{quantity(name).name} ({unit}; default {default})")
    parser.add_argument("--melting-region", default="column", metavar="NAMES",
                        help=f"melting region: {', '.join(MELTING_REGIONS)} (comma list "
                        "allowed)")
    parser.add_argument("--parameterization", default="katz2003", metavar="NAMES",
                        help=f"melting parameterization: {', '.join(PARAMETERIZATIONS)}")
    for name, default in (("crust_density", 2900.0), ("mantle_density", 3300.0)):
        parser.add_argument(f"--{name.replace('_', '-')}", type=float, default=default,
                            metavar="RHO", help=f"{quantity(name).name} "
                            f"({quantity(name).unit_text}; default {default:g})")
    parser.add_argument("--format", choices=("table", "csv", "json"), default="table",
                        help="output format: aligned table for people (default), or CSV / "
                        "JSON at full precision with the same keys")
    parser.add_argument("--plot", metavar="FILE",
                        help="also draw P-T diagrams (one panel per lid) to this file "
                        "(FILE.png; .pdf or .svg with --figure-format)")
    from .fit import add_figure_format

    add_figure_format(parser)


def parse_values(text: str, option: str) -> list[float]:
    """A value, a comma list or an inclusive ``start:stop:step`` range.

    Each number is a plain decimal, the rule of every table (`study.keys.parse_number`):
    ``1350`` and ``1.35e3``, not ``1_350``.
    """
    values: list[float] = []
    for part in text.split(","):
        part = part.strip()
        try:
            if ":" in part:
                start, stop, step = (parse_number(x) for x in part.split(":"))
                if step <= 0 or stop < start:
                    raise ValueError("empty range")
                values.extend(np.arange(start, stop + 0.5 * step, step).round(10).tolist())
            else:
                values.append(parse_number(part))
        except ValueError:
            raise InputError(f"--{option}: cannot read {part!r}; give a number, a comma list "
                             "or start:stop:step with step > 0 and stop >= start") from None
    if not np.all(np.isfinite(values)):
        raise InputError(f"--{option}: values must be finite numbers")
    return values


def _names(text: str, allowed, option: str) -> list[str]:
    names = [p.strip() for p in text.split(",") if p.strip()]
    for name in names:
        if name not in allowed:
            raise InputError(f"--{option}: unknown {name!r}; choose from {', '.join(allowed)}")
    return names


def tabulate(args) -> list[dict]:
    """One row per combination, in option order."""
    numeric = {k: parse_values(getattr(args, k), k.replace("_", "-")) for k in _NUMERIC}
    regions = _names(args.melting_region, MELTING_REGIONS, "melting-region")
    params = _names(args.parameterization, list(PARAMETERIZATIONS), "parameterization")
    for param in params:
        if not PARAMETERIZATIONS[param].supports_water and any(numeric["water"]):
            raise InputError(f"--water: {param} is a dry parameterization; give --water 0")
    rows = []
    for param, melting_region in itertools.product(params, regions):
        grid = np.array(list(itertools.product(*numeric.values())), float)
        inputs = dict(zip(_NUMERIC, grid.T, strict=True))
        res = melt_column(**inputs, parameterization=param, melting_region=melting_region,
                          crust_density=args.crust_density, mantle_density=args.mantle_density)
        for i in range(grid.shape[0]):
            row = {k: float(v[i]) for k, v in inputs.items()}
            row |= {"parameterization": param, "melting_region": melting_region,
                    "crust_density": args.crust_density,
                    "mantle_density": args.mantle_density}
            row |= {name: float(getattr(res, name)[i]) for name in OUTPUT_KEYS}
            rows.append(row)
    return rows


def _cell(key: str, value) -> str:
    return quantity(key).format(value) if isinstance(value, float) else str(value)


def _varying(rows: list[dict]) -> list[str]:
    """Input keys whose value differs between rows, in input order."""
    return [k for k in INPUT_KEYS if len({r[k] for r in rows}) > 1]


def _constant_line(rows: list[dict], varying: list[str]) -> str:
    """The inputs shared by every row, said once above the table."""
    first = rows[0]
    words = []
    for key in INPUT_KEYS:
        if key in varying:
            continue
        value = first[key]
        if key == "parameterization":
            words.append(get_parameterization(value).title)
        elif key == "melting_region":
            words.append(f"{value} melting region")
        else:
            words.append(f"{quantity(key).name} {quantity(key).with_value(value)}")
    return textwrap.fill("Same on every row: " + ", ".join(words) + ".", width=96)


def _legend(keys: list[str], width: int = 96) -> str:
    """``label = prose name`` for each column, wrapped between entries."""
    entries = [f"{quantity(k).short} = {quantity(k).name}" for k in keys]
    lines = [entries[0]]
    for entry in entries[1:]:
        if len(lines[-1]) + 2 + len(entry) > width:
            lines[-1] += ";"
            lines.append(entry)
        else:
            lines[-1] += "; " + entry
    return "\n".join(lines) + "."


def _grouped_block(rows: list[dict], keys: list[str]) -> list[str]:
    """Group heading, column label and unit lines, then one line per row."""
    columns = []  # (group, label, unit, cells)
    for key in keys:
        q = quantity(key)
        cells = [_cell(key, r[key]) for r in rows]
        group = GROUPS[q.group] if key not in INPUT_KEYS else GROUPS["input"]
        unit = q.unit_text or ("–" if q.unit else "")  # "–": dimensionless number
        columns.append([group, q.short, unit, cells])
    widths = [max(len(c[1]), len(c[2]), *(len(x) for x in c[3])) for c in columns]
    groups = list(dict.fromkeys(c[0] for c in columns))
    for group in groups:  # a heading wider than its columns widens them evenly
        idx = [i for i, c in enumerate(columns) if c[0] == group]
        missing = len(group) - (sum(widths[i] for i in idx) + 2 * (len(idx) - 1))
        for n, i in enumerate(idx):
            widths[i] += max(0, missing) // len(idx) + (n < max(0, missing) % len(idx))
    gap = "  "
    sep = " | "

    def line(cells):
        out = []
        for group in groups:
            idx = [i for i, c in enumerate(columns) if c[0] == group]
            out.append(gap.join(cells[i].rjust(widths[i]) for i in idx))
        return sep.join(out).rstrip()

    spans = [sum(widths[i] for i, c in enumerate(columns) if c[0] == g)
             + 2 * (sum(c[0] == g for c in columns) - 1) for g in groups]
    heading = sep.join(g.ljust(w) for g, w in zip(groups, spans, strict=True)).rstrip()
    lines = [heading, line([c[1] for c in columns]), line([c[2] for c in columns])]
    lines += [line([c[3][r] for c in columns]) for r in range(len(rows))]
    return lines


def format_rows(rows: list[dict], fmt: str) -> str:
    """The rows as an aligned table for people, or CSV / JSON at full precision.

    All three use the same keys in the same grouped order (inputs, where melting happens,
    how much melt, what melt). The table prints the inputs shared by every row once,
    above it, with units in a header line and a legend below.
    """
    keys = [*INPUT_KEYS, *OUTPUT_KEYS]
    if fmt == "json":
        groups = {GROUPS["input"]: list(INPUT_KEYS)}
        for key in OUTPUT_KEYS:
            groups.setdefault(GROUPS[quantity(key).group], []).append(key)
        units = {k: quantity(k).unit for k in keys if quantity(k).unit}
        return json.dumps({"units": units, "groups": groups,
                           "rows": [{k: r[k] for k in keys} for r in rows]}, indent=2)
    if fmt == "csv":
        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\n")
        writer.writerow(keys)
        writer.writerows([repr(r[k]) if isinstance(r[k], float) else r[k] for k in keys]
                         for r in rows)
        return buffer.getvalue().rstrip("\n")
    varying = _varying(rows)
    shown = [*varying, *OUTPUT_KEYS]
    lines = [_constant_line(rows, varying), "", *_grouped_block(rows, shown), "",
             _legend([k for k in shown if k not in ("parameterization", "melting_region")])]
    return "\n".join(lines)


def run(args) -> int:
    if args.plot:
        if not args.plot.lower().endswith(f".{args.figure_format}"):
            raise InputError(f"--plot: {args.plot!r} must end in .{args.figure_format} "
                             "(the figure format)")
        if not Path(args.plot).absolute().parent.is_dir():
            raise InputError("--plot: the folder for the figure does not exist; create it "
                             "first", file=Path(args.plot).absolute().parent)
    rows = tabulate(args)
    if args.plot:
        from ..forward._pt_figure import write_column_figure

        write_column_figure(args.plot, rows, crust_density=args.crust_density,
                            mantle_density=args.mantle_density,
                            figure_format=args.figure_format)
    sys.stdout.write(format_rows(rows, args.format) + "\n")
    if args.plot:
        print(f"P-T diagram written to {args.plot}", file=sys.stderr)
    return 0


__all__ = ["INPUT_KEYS", "OUTPUT_KEYS", "add_arguments", "format_rows", "parse_values", "run",
           "tabulate"]
