"""The P-T figure of ``lidmelt column --plot``: one panel per lid and melting-curve set."""

from __future__ import annotations

import textwrap

import numpy as np

from . import figure_style as style
from .adiabat import depth_per_pressure
from .column import melt_column
from .figure_output import DOUBLE_COLUMN, save_figure
from .parameterizations import get_parameterization
from .plotting import (
    add_depth_axis,
    draw_lid,
    draw_melting_path,
    draw_pt_diagram,
    label_contours,
    visible_legend_entries,
)
from .quantities import quantity

__all__ = ["MAX_PANELS", "MAX_PATHS", "pick_temperatures", "save_figure_atomically",
           "write_column_figure"]

MAX_PANELS = 6  # panels drawn; the note says how many there were
MAX_PATHS = 8  # potential temperatures drawn per panel, spread over those given
# A journal page wide (docs/figures.md): two panels a row, each wide enough for its
# pressure and depth axes; one panel alone takes the whole width.
_COLUMNS = 2
_PANEL_HEIGHT = {1: 4.6, 2: 3.9}  # inches, by panels a row
_TITLE_CHARS = {1: 95, 2: 50}  # characters of 8.5 pt text over a panel (measured)
_LEGEND_COLUMNS = 3  # legend columns across the page at 7.5 pt
_NOTE_CHARS = 120  # characters of 7 pt text across the page (measured)
_NOTE = ("Thick line: melting path, from the ring where melting starts up to the lid base; "
         "dotted thin line: solid adiabat of the same Tp. Each panel has its own lid (dotted "
         "violet line, pale band above).\nScientific estimate: depends on the melting "
         "parameterization. Colours and line styles: docs/figures.md.")


def _panels(rows):
    """Rows grouped by melting curves and lid: each path is drawn against its own lid."""
    groups: dict[tuple, list[dict]] = {}
    for row in rows:
        key = (row["parameterization"], row["water"], row["solidus_offset"],
               row["lithosphere_thickness"])
        groups.setdefault(key, []).append(row)
    return list(groups.items())


def pick_temperatures(values):
    """The potential temperatures a panel draws: at most `MAX_PATHS`, evenly spread
    over the sorted `values`, ends included."""
    return _pick(list(values), MAX_PATHS)


def _pick(values, limit):
    if len(values) <= limit:
        return list(values)
    keep = np.unique(np.linspace(0, len(values) - 1, limit).round().astype(int))
    return [values[i] for i in keep]


def _variant(row, group) -> str:
    """What tells rows of one Tp apart in a panel (melting region, active upwelling)."""
    words = []
    if len({r["melting_region"] for r in group}) > 1:
        words.append(row["melting_region"])
    if len({r["active_upwelling"] for r in group}) > 1:
        words.append(f"upwelling {row['active_upwelling']:g}")
    return f" ({', '.join(words)})" if words else ""


def _draw_panel(ax, key, rows, colors, frame):
    """Melting curves, the lid of this panel and one path per potential temperature."""
    param_name, water, shift, lid = key
    param = get_parameterization(param_name)
    km_per_gpa = float(depth_per_pressure(frame["mantle_density"]))
    draw_pt_diagram(ax, param, water=water, solidus_offset=shift,
                    max_pressure=frame["max_pressure"],
                    temperature_range=frame["temperature_range"])
    if lid > 0:
        draw_lid(ax, lid / km_per_gpa, text=f"lid base {lid:g} km")
    by_tp: dict[float, list[dict]] = {}
    for row in rows:
        by_tp.setdefault(row["potential_temperature"], []).append(row)
    crust_lines = []
    for tp in _pick(sorted(by_tp), MAX_PATHS):
        group = by_tp[tp]
        crust_lines.append(f"{quantity('potential_temperature').with_value(tp)}: " + ", ".join(
            f"{r['crustal_thickness']:.1f} km{_variant(r, group)}" for r in group))
        first = group[0]
        col = melt_column(tp, lid, water=water, parameterization=param,
                          melting_region=first["melting_region"],
                          active_upwelling=first["active_upwelling"], solidus_offset=shift,
                          crust_density=frame["crust_density"],
                          mantle_density=frame["mantle_density"])
        draw_melting_path(ax, col, color=colors[tp], max_pressure=frame["max_pressure"],
                          label=f"Tp {quantity('potential_temperature').with_value(tp)}",
                          adiabat_label=False)
    depth = add_depth_axis(ax, frame["mantle_density"])
    if not frame.get("last_in_row", True):
        depth.set_ylabel("")
    title = f"lid {lid:g} km" if lid > 0 else "no lid"
    ax.set_title(textwrap.fill(f"{title} · {param.title}, {water:g} ppm H$_2$O, solidus "
                               f"offset {shift:+g} °C", width=frame["title_chars"])
                 .replace("-", "\N{MINUS SIGN}"), fontsize=8.5)
    # Crust made in this panel (it depends on the lid), in the corner below the solidus
    # and left of the adiabats, which melting never reaches.
    ax.text(0.02, 0.02, "Igneous crust\n" + "\n".join(crust_lines), transform=ax.transAxes,
            ha="left", va="bottom", fontsize=7.5, linespacing=1.3, zorder=7,
            bbox={"boxstyle": "round,pad=0.35", "fc": "white", "ec": "0.75", "alpha": 0.92})
    label_contours(ax)


def _frame(rows, crust_density, mantle_density) -> dict:
    """Axes limits shared by every panel, so panels compare at a glance."""
    km_per_gpa = float(depth_per_pressure(mantle_density))
    deepest = max(r["onset_depth"] for r in rows) * 1.12 / km_per_gpa
    tps = [r["potential_temperature"] for r in rows]
    low = np.floor((min(tps) - 250.0) / 50.0) * 50.0
    high = np.ceil((max(tps) + 300.0) / 50.0) * 50.0
    return {"max_pressure": float(np.clip(np.ceil(deepest * 2) / 2, 2.0, 10.0)),
            "temperature_range": (low, high), "crust_density": crust_density,
            "mantle_density": mantle_density}


def write_column_figure(path, rows, *, crust_density=2900.0, mantle_density=3300.0,
                        panels=None, figure_format="png"):
    """Draw one P-T panel per lid and melting-curve set; write it atomically as a PNG,
    PDF or SVG (`figure_format`).

    ``rows`` are ``lidmelt column`` rows; ``panels`` is how many panels the whole table
    has when ``rows`` hold only those drawn (default: counted from ``rows``).
    """
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    shown = _panels(rows)[:MAX_PANELS]
    total = len(_panels(rows)) if panels is None else panels
    colors = style.temperature_colors(r["potential_temperature"] for r in rows)
    frame = _frame([r for _, group in shown for r in group], crust_density, mantle_density)
    ncols, nrows, below = _layout(shown)
    height = _PANEL_HEIGHT[ncols] * nrows + below
    fig = Figure(figsize=(DOUBLE_COLUMN, height), layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=False, sharey=True).ravel()
    for i, (ax, (key, group)) in enumerate(zip(axes, shown, strict=False)):
        last = i % ncols == ncols - 1 or i == len(shown) - 1
        _draw_panel(ax, key, group, colors, frame | {"last_in_row": last,
                                                     "title_chars": _TITLE_CHARS[ncols]})
        if i % ncols:
            ax.set_ylabel("")
    for ax in axes[len(shown):]:
        ax.axis("off")  # kept in the layout: the legend goes into the first such cell
    note = _NOTE if total <= MAX_PANELS else (
        f"First {MAX_PANELS} of {total} panels shown. " + _NOTE)
    bottom = below / height
    fig.get_layout_engine().set(rect=(0, bottom, 1, 1 - bottom))
    _figure_legend(fig, axes[: len(shown)], spare=axes[len(shown):], top=bottom)
    fig.text(0.01, 0.005, textwrap.fill(note.replace("\n", " "), width=_NOTE_CHARS),
             fontsize=7, color="0.3", va="bottom")
    save_figure_atomically(fig, path, figure_format=figure_format)


def _layout(shown) -> tuple[int, int, float]:
    """Panels a row, rows, and the inches kept under the panels (the note, and the
    legend unless a grid cell is left over for it)."""
    ncols = min(len(shown), _COLUMNS)
    nrows = -(-len(shown) // ncols)
    below = 0.5  # the note
    if nrows * ncols == len(shown):
        entries = len(_legend_entries_guess(shown)) + 3
        below += 0.17 * -(-entries // _LEGEND_COLUMNS) + 0.15
    return ncols, nrows, below


def _legend_entries_guess(shown) -> list:
    """Legend entries before drawing, for the room under the panels: F contours, solidus,
    lherzolite-out, liquidus, a wet solidus per water content, a path per Tp."""
    waters = {key[1] for key, _ in shown if key[1] > 0}
    tps = {r["potential_temperature"] for _, group in shown for r in group}
    return [None] * (4 + len(waters) + min(len(tps), MAX_PATHS * len(shown)))


def _figure_legend(fig, axes, *, spare, top) -> None:
    """One legend, in the first `spare` (empty) grid cell or else under the panels (below
    `top`, a figure fraction): every curve, path and symbol drawn in any panel, once (the
    solid adiabats and the onset ring as one entry each, in grey)."""
    from matplotlib.lines import Line2D

    entries: dict[str, object] = {}
    for ax in axes:
        for handle, label in zip(*visible_legend_entries(ax), strict=True):
            entries.setdefault(label, handle)
    entries["solid adiabat of each Tp (no melting)"] = Line2D(
        [], [], color="0.35", lw=0.9, ls=(0, (1, 2)))
    entries["onset of melting"] = Line2D([], [], ls="none", marker="o", mfc="white",
                                         mec="0.35", mew=1.8, ms=6)
    entries["lid base (lid shaded)"] = Line2D([], [], **style.LID_LINE)
    options = dict(fontsize=7.5, frameon=False, borderaxespad=0.2, columnspacing=1.2,
                   handlelength=2.5)
    if len(spare):  # the empty cell of the grid holds it, one column (two if long)
        spare[0].legend(list(entries.values()), list(entries), loc="center",
                        ncols=1 if len(entries) <= 16 else 2, **options)
        return
    fig.legend(list(entries.values()), list(entries), loc="upper center",
               bbox_to_anchor=(0.5, top), ncols=_LEGEND_COLUMNS, **options)


def save_figure_atomically(fig, path, dpi=150, *, figure_format="png"):
    """Write the figure to ``path`` atomically (`figure_output.save_figure`)."""
    save_figure(fig, path, figure_format, dpi=dpi)
