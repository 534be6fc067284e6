"""``lidmelt column``: tabulate melting columns over combinations of inputs."""

from __future__ import annotations

import argparse
import csv
import io
import itertools
import json
import math
import os
import sys
import textwrap
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TextIO

import numpy as np

from ..forward.column import MELTING_REGIONS, melt_column
from ..forward.parameterizations import PARAMETERIZATIONS, get_parameterization
from ..forward.quantities import GROUPS, quantity
from ..forward.trace import DEFAULT_TRANSITION, ELEMENTS, SOURCES
from ..inversion.errors import InputError, suggest
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
#: With --trace-elements: chondrite-normalised ratios of the pooled melt (key -> elements).
TRACE_KEYS = {"la_yb": ("La", "Yb"), "sm_yb": ("Sm", "Yb"), "dy_yb": ("Dy", "Yb")}
#: With --trace-elements all, also the pooled melt's concentrations (key -> element), ppm.
CONCENTRATION_KEYS = {e.lower(): e for e in ELEMENTS}
#: What --trace-elements adds: "ratios" (also the bare flag) or "all".
TRACE_CHOICES = ("ratios", "all")
_DEFAULT_SOURCE = "workman_hart_2005"  # that of forward.trace and of a rare_earths block


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
    parser.add_argument("--trace-elements", nargs="?", const="ratios", default=None,
                        metavar="WHAT",
                        help="also give the rare earths of the pooled melt (Shaw 1970 "
                        "fractional melting; empty where nothing melts): 'ratios' (also "
                        "the bare flag) adds the chondrite-normalised La/Yb, Sm/Yb and "
                        "Dy/Yb (Sun & McDonough 1989 CI chondrite); 'all' adds La, Ce, Nd, "
                        "Sm, Eu, Gd, Dy, Er, Yb and Lu in ppm too")
    parser.add_argument("--trace-source", metavar="NAME",
                        help="mantle source of the rare earths, with --trace-elements: "
                        f"{', '.join(SOURCES)} (default {_DEFAULT_SOURCE})")
    lo, hi = DEFAULT_TRANSITION
    parser.add_argument("--trace-transition", metavar="LO:HI",
                        help="spinel-garnet transition in GPa, with --trace-elements: "
                        f"garnet comes in linearly from LO to HI, 0 <= LO < HI <= 10 "
                        f"(default {lo}:{hi})")
    parser.add_argument("--format", choices=("table", "csv", "json"), default="table",
                        help="output format: aligned table for people (default), or CSV / "
                        "JSON at full precision with the same keys")
    parser.add_argument("--plot", metavar="FILE",
                        help="also draw P-T diagrams (one panel per lid) to this file "
                        "(FILE.png; .pdf or .svg with --figure-format; refused if it "
                        "exists, see --force)")
    parser.add_argument("--force", action="store_true",
                        help="replace the --plot file if lidmelt wrote it (never another "
                        "file)")
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


@dataclass(frozen=True)
class TraceSettings:
    """How ``lidmelt column`` computes its rare-earth columns.

    Attributes
    ----------
    what : {"ratios", "all"}
        The three chondrite-normalised ratios, or those and the ten concentrations.
    source : str
        A packaged source (`forward.trace.SOURCES`).
    transition : (float, float)
        The spinel-garnet transition, GPa.
    """

    what: str
    source: str
    transition: tuple[float, float]

    @property
    def keys(self) -> tuple[str, ...]:
        """Output keys of the rare-earth columns, in table order."""
        return (*TRACE_KEYS, *(CONCENTRATION_KEYS if self.what == "all" else ()))

    def sentence(self) -> str:
        """What the columns were computed with, for the line above the table."""
        lo, hi = self.transition
        return (f"Rare earths: fractional melting of source {self.source}, spinel–garnet "
                f"transition {lo:.2f}–{hi:.2f} GPa, ratios normalised to CI chondrite "
                "(Sun & McDonough 1989).")


def trace_settings(args) -> TraceSettings | None:
    """The rare-earth options of `args`, checked; None without ``--trace-elements``.

    ``trace_elements`` may also be True (the bare flag, from Python). Each mistake is
    an `InputError` naming the option and its rule.
    """
    what = getattr(args, "trace_elements", None)
    source = getattr(args, "trace_source", None)
    transition = getattr(args, "trace_transition", None)
    if what is None or what is False:
        for option, value in (("trace-source", source), ("trace-transition", transition)):
            if value is not None:
                raise InputError(f"--{option}: give it with --trace-elements (it sets how "
                                 "the rare-earth columns are computed)")
        return None
    what = "ratios" if what is True else what
    if what not in TRACE_CHOICES:
        raise InputError(f"--trace-elements: unknown {what!r}; choose ratios or all (the "
                         "bare flag gives the ratios)")
    if source is None:
        source = _DEFAULT_SOURCE
    elif source not in SOURCES:
        raise InputError(f"--trace-source: unknown source {source!r}"
                         + suggest(source, SOURCES))
    return TraceSettings(what, source, DEFAULT_TRANSITION if transition is None
                         else _transition(transition))


def _transition(text: str) -> tuple[float, float]:
    """``LO:HI`` in GPa under the rule of a rare_earths study block (`parse_transition`)."""
    from ..inversion.observations.rare_earths import parse_transition

    rule = "must be LO:HI in GPa with 0 <= LO < HI <= 10 (the spinel-garnet transition)"
    try:
        return parse_transition([parse_number(x) for x in text.split(":")], "transition")
    except (InputError, ValueError):
        raise InputError(f"--trace-transition: {rule}, not {text!r}") from None


#: Rows computed and written at a time: memory stays bounded whatever the row count.
CHUNK_ROWS = 20_000


class Combinations:
    """Every combination of the command's inputs, in option order, read in chunks.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed options of ``lidmelt column``.
    """

    def __init__(self, args) -> None:
        self.numeric = {k: parse_values(getattr(args, k), k.replace("_", "-"))
                        for k in _NUMERIC}
        self.regions = _names(args.melting_region, MELTING_REGIONS, "melting-region")
        self.params = _names(args.parameterization, list(PARAMETERIZATIONS),
                             "parameterization")
        for param in self.params:
            if not PARAMETERIZATIONS[param].supports_water and any(self.numeric["water"]):
                raise InputError(f"--water: {param} is a dry parameterization; give --water 0")
        self.densities = {"crust_density": args.crust_density,
                          "mantle_density": args.mantle_density}
        self.shape = tuple(len(v) for v in self.numeric.values())
        #: The rare-earth columns' settings, None without them.
        self.trace = trace_settings(args)
        #: Output keys of every row, in table order.
        self.outputs = (*OUTPUT_KEYS, *(self.trace.keys if self.trace else ()))

    def __len__(self) -> int:
        return len(self.params) * len(self.regions) * math.prod(self.shape)

    @property
    def varying(self) -> list[str]:
        """Input keys with more than one value, in input order."""
        counts = {k: len(set(v)) for k, v in self.numeric.items()}
        counts |= {"parameterization": len(set(self.params)),
                   "melting_region": len(set(self.regions))}
        return [k for k in INPUT_KEYS if counts.get(k, 1) > 1]

    def panel_count(self) -> int:
        """Panels of the P-T figure: one per parameterization, water, offset and lid."""
        return len(set(self.params)) * math.prod(
            len(set(self.numeric[k])) for k in ("water", "solidus_offset",
                                                "lithosphere_thickness"))

    def corners(self) -> list[dict]:
        """Rows at every combination of each numeric option's smallest and largest value:
        where the outputs' extremes lie (they are monotonic in each input or nearly), so
        the table for people can size its columns before the rows stream past."""
        ends = {k: sorted({min(v), max(v)}) for k, v in self.numeric.items()}
        probe = argparse.Namespace(**{k: ",".join(repr(x) for x in v) for k, v in ends.items()},
                                   melting_region=",".join(self.regions),
                                   parameterization=",".join(self.params),
                                   **self.densities)
        combos = Combinations(probe)
        combos.trace, combos.outputs = self.trace, self.outputs  # already checked
        return [row for chunk in combos.chunks() for row in chunk]

    def chunks(self, size: int | None = None) -> Iterator[list[dict]]:
        """Lists of at most `size` rows (default `CHUNK_ROWS`), each row a dict of
        `INPUT_KEYS` and `outputs`."""
        size = CHUNK_ROWS if size is None else size
        n = math.prod(self.shape)
        values = [np.asarray(v, float) for v in self.numeric.values()]
        for param, region in itertools.product(self.params, self.regions):
            for start in range(0, n, size):
                index = np.unravel_index(np.arange(start, min(n, start + size)), self.shape)
                inputs = {k: v[i] for k, v, i in zip(self.numeric, values, index, strict=True)}
                res = melt_column(**inputs, parameterization=param, melting_region=region,
                                  **self.densities)
                columns = {k: v.tolist() for k, v in inputs.items()}
                columns |= {k: np.broadcast_to(getattr(res, k), index[0].shape).tolist()
                            for k in OUTPUT_KEYS}
                if self.trace is not None:
                    columns |= _trace_columns(res, self.trace)
                fixed = {"parameterization": param, "melting_region": region,
                         **self.densities}
                yield [{**{k: columns[k][i] for k in _NUMERIC}, **fixed,
                        **{k: columns[k][i] for k in self.outputs}}
                       for i in range(index[0].size)]


def _trace_columns(res, trace: TraceSettings) -> dict[str, list]:
    """The rare-earth columns (`trace.keys`) of the pooled melt of `res`, None where
    nothing melts.

    From `forward.trace.fast_trace_elements` with the chosen source and transition
    (docs/model.md, "Rare-earth elements along the melting path"): ratios of
    chondrite-normalised concentrations (Sun & McDonough 1989) and, with ``all``, the
    concentrations in ppm. The ratios alone need four elements, so only those are computed.
    """
    from ..forward.trace import fast_trace_elements

    elements = None if trace.what == "all" else ("La", "Sm", "Dy", "Yb")
    pooled = fast_trace_elements(res, source=trace.source, transition=trace.transition,
                                 elements=elements)
    melts = np.ravel(np.asarray(res.melt_thickness) > 0.0)
    values = {key: pooled.ratio(*pair, normalised=True) for key, pair in TRACE_KEYS.items()}
    if trace.what == "all":
        values |= {key: pooled.melt[..., pooled.elements.index(element)]
                   for key, element in CONCENTRATION_KEYS.items()}
    return {key: [float(v) if m else None for v, m in zip(np.ravel(v), melts, strict=True)]
            for key, v in values.items()}


def tabulate(args) -> list[dict]:
    """Every row at once, in option order (`Combinations` reads them in chunks)."""
    return [row for chunk in Combinations(args).chunks() for row in chunk]


def _cell(key: str, value) -> str:
    if value is None or isinstance(value, float):  # None: no value (nothing melts)
        return quantity(key).format(value)
    return str(value)


def _constant_line(first: dict, varying: list[str],
                   trace: TraceSettings | None = None) -> str:
    """The inputs shared by every row, said once above the table, and what the
    rare-earth columns were computed with (`trace`)."""
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
    text = "Same on every row: " + ", ".join(words) + "."
    if trace is not None:
        text += " " + trace.sentence()
    return textwrap.fill(text, width=96)


def _legend(keys: list[str], width: int = 96) -> str:
    """``label = prose name`` for each column, wrapped between entries; the rare-earth
    concentrations share one entry."""
    entries = [f"{quantity(k).short} = {quantity(k).name}" for k in keys
               if k not in CONCENTRATION_KEYS]
    shown = [quantity(k).short for k in keys if k in CONCENTRATION_KEYS]
    if shown:
        entries.append(f"{shown[0]}–{shown[-1]} = concentrations in the pooled melt")
    lines = [entries[0]]
    for entry in entries[1:]:
        if len(lines[-1]) + 2 + len(entry) > width:
            lines[-1] += ";"
            lines.append(entry)
        else:
            lines[-1] += "; " + entry
    return "\n".join(lines) + "."


class _Layout:
    """Column widths and group headings of the table for people, fixed by its first rows
    (later rows keep those widths; a wider cell only widens its own line)."""

    def __init__(self, rows: list[dict], keys: list[str]) -> None:
        self.keys = keys
        self.groups_of = [GROUPS["input"] if k in INPUT_KEYS else GROUPS[quantity(k).group]
                          for k in keys]
        self.labels = [quantity(k).short for k in keys]
        self.units = [quantity(k).unit_text or ("–" if quantity(k).unit else "")
                      for k in keys]  # "–": a dimensionless number
        self.widths = [max(len(label), len(unit), *(len(_cell(k, r[k])) for r in rows))
                       for k, label, unit in zip(keys, self.labels, self.units, strict=True)]
        self.groups = list(dict.fromkeys(self.groups_of))
        for group in self.groups:  # a heading wider than its columns widens them evenly
            idx = self._members(group)
            missing = max(0, len(group) - (sum(self.widths[i] for i in idx)
                                           + 2 * (len(idx) - 1)))
            for n, i in enumerate(idx):
                self.widths[i] += missing // len(idx) + (n < missing % len(idx))

    def _members(self, group: str) -> list[int]:
        return [i for i, g in enumerate(self.groups_of) if g == group]

    def line(self, cells: list[str]) -> str:
        return " | ".join("  ".join(cells[i].rjust(self.widths[i]) for i in self._members(g))
                          for g in self.groups).rstrip()

    def header(self) -> list[str]:
        spans = [sum(self.widths[i] for i in self._members(g)) + 2 * (len(self._members(g)) - 1)
                 for g in self.groups]
        heading = " | ".join(g.ljust(w) for g, w in zip(self.groups, spans, strict=True))
        return [heading.rstrip(), self.line(self.labels), self.line(self.units)]

    def body(self, rows: list[dict]) -> list[str]:
        return [self.line([_cell(k, r[k]) for k in self.keys]) for r in rows]


def _csv_cell(value):
    return repr(value) if isinstance(value, float) else value


def write_rows(chunks: Iterable[list[dict]], fmt: str, out: TextIO, *,
               varying: list[str], extremes: list[dict] = (),
               outputs: tuple[str, ...] = OUTPUT_KEYS,
               trace: TraceSettings | None = None) -> None:
    """Write the rows chunk by chunk: an aligned table for people, or CSV / JSON at full
    precision (floats written by ``repr``, which reads back to the same number).

    All three keep the grouped order (inputs, where melting happens, how much melt, what
    melt). CSV columns are named ``<key>_<unit>`` (`Quantity.column`, the rule of the
    observation tables); JSON is one object ``{"units", "groups", "columns", "rows"}``
    whose ``rows`` array is written one row per line, keyed by the bare keys (the
    ``melt_column`` names), with ``units`` giving each key's unit and ``columns`` its CSV
    name. The table prints the inputs shared by every row once, above it, with units in
    a header line and a legend below; `varying` are the inputs that differ between rows.
    Its column widths come from the first chunk and the `extremes` rows (not written).
    `outputs` are the output keys of the rows (`Combinations.outputs`); a missing value
    (None) is an empty CSV cell, JSON null and the table's missing mark. `trace` (the
    rare-earth settings) is said above the table.
    """
    keys = [*INPUT_KEYS, *outputs]
    if fmt == "csv":
        writer = csv.writer(out, lineterminator="\n")
        writer.writerow([quantity(k).column for k in keys])
        for rows in chunks:
            writer.writerows([_csv_cell(r[k]) for k in keys] for r in rows)
        return
    if fmt == "json":
        groups = {GROUPS["input"]: list(INPUT_KEYS)}
        for key in outputs:
            groups.setdefault(GROUPS[quantity(key).group], []).append(key)
        head = {"units": {k: quantity(k).unit for k in keys if quantity(k).unit},
                "groups": groups, "columns": {k: quantity(k).column for k in keys}}
        out.write(json.dumps(head, indent=2)[:-2] + ',\n  "rows": [')
        separator = "\n    "
        for rows in chunks:
            for row in rows:
                out.write(separator + json.dumps({k: row[k] for k in keys}))
                separator = ",\n    "
        out.write("\n  ]\n}\n")
        return
    shown = [*varying, *outputs]
    layout = None
    for rows in chunks:
        if layout is None:
            layout = _Layout([*rows, *extremes], shown)
            out.write("\n".join([_constant_line(rows[0], varying, trace), "",
                                 *layout.header()]))
        out.write("\n" + "\n".join(layout.body(rows)))
    legend = _legend([k for k in shown if k not in ("parameterization", "melting_region")])
    out.write("\n\n" + legend + "\n")


def format_rows(rows: list[dict], fmt: str, *, trace: TraceSettings | None = None) -> str:
    """The rows as one string, in the format of `write_rows` (`trace`: the rare-earth
    settings the rows were computed with, said above the table)."""
    buffer = io.StringIO()
    varying = [k for k in INPUT_KEYS if len({r[k] for r in rows}) > 1]
    outputs = (*OUTPUT_KEYS, *(k for k in (*TRACE_KEYS, *CONCENTRATION_KEYS)
                               if rows and k in rows[0]))
    write_rows([rows], fmt, buffer, varying=varying, outputs=outputs, trace=trace)
    return buffer.getvalue().rstrip("\n")


class _PlotRows:
    """The rows the P-T figure draws, kept while the others stream past: those of its
    first panels and picked potential temperatures (`_pt_figure.MAX_PANELS`, `pick_temperatures`)."""

    def __init__(self, combos: Combinations) -> None:
        from ..forward._pt_figure import MAX_PANELS, pick_temperatures

        self.tps = set(pick_temperatures(sorted(set(combos.numeric["potential_temperature"]))))
        self.max_panels = MAX_PANELS
        self.panels: dict[tuple, list[dict]] = {}
        self.rows: list[dict] = []

    def keep(self, rows: list[dict]) -> list[dict]:
        for row in rows:
            key = (row["parameterization"], row["water"], row["solidus_offset"],
                   row["lithosphere_thickness"])
            if key not in self.panels and len(self.panels) >= self.max_panels:
                continue
            self.panels.setdefault(key, [])
            if row["potential_temperature"] in self.tps:
                self.rows.append(row)
        return rows


def _check_plot(plot: str, *, force: bool, figure_format: str = "png") -> None:
    """The --plot file: a new one, or with --force one lidmelt wrote (checked before work)."""
    from ..inversion.errors import OutputConflict
    from ..inversion.outputs.folder import check_output_file

    if not plot.lower().endswith(f".{figure_format}"):
        raise InputError(f"--plot: {plot!r} must end in .{figure_format} (the figure "
                         "format)")
    try:
        check_output_file(plot, force=force, what="--plot file")
    except OutputConflict as err:
        raise InputError(f"{err.problem}; pass --force to replace it (only a figure "
                         "lidmelt wrote) or choose another name", file=err.file) from None


def run(args) -> int:
    if args.plot:
        _check_plot(args.plot, force=args.force, figure_format=args.figure_format)
    from ..inversion.fitting.progress import table_progress

    combos = Combinations(args)
    plot = _PlotRows(combos) if args.plot else None
    chunks = combos.chunks()
    if plot is not None:
        chunks = (plot.keep(rows) for rows in chunks)
    with table_progress(quiet=False):  # stdout carries the rows; progress goes to stderr
        try:
            extremes = combos.corners() if len(combos) > CHUNK_ROWS else []
            write_rows(chunks, args.format, sys.stdout, varying=combos.varying,
                       extremes=extremes if args.format == "table" else [],
                       outputs=combos.outputs, trace=combos.trace)
            sys.stdout.flush()
        except BrokenPipeError:  # the reader has seen enough (`| head`): stop quietly
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
            return 0
        if plot is not None:
            from ..forward._pt_figure import write_column_figure

            write_column_figure(args.plot, plot.rows, crust_density=args.crust_density,
                                mantle_density=args.mantle_density,
                                panels=combos.panel_count(),
                                figure_format=args.figure_format)
            print(f"P-T diagram written to {args.plot}", file=sys.stderr)
    return 0


__all__ = ["CHUNK_ROWS", "CONCENTRATION_KEYS", "INPUT_KEYS", "OUTPUT_KEYS", "TRACE_CHOICES",
           "TRACE_KEYS", "Combinations", "TraceSettings", "add_arguments", "format_rows",
           "parse_values", "run", "tabulate", "trace_settings", "write_rows"]
