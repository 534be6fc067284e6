"""P-T diagrams of melting: curves, melt-fraction contours, adiabats, paths and lids.

Pressure increases downward (as depth does); a second axis gives depth in km. Colours
and line styles come from `forward.figure_style` (explained in docs/figures.md).
"""

from __future__ import annotations

import numpy as np

from . import figure_style as style
from .adiabat import depth_per_pressure, solid_adiabat
from .parameterizations import get_parameterization
from .quantities import quantity

__all__ = ["add_depth_axis", "draw_lid", "draw_melting_path", "draw_pt_diagram",
           "label_contours", "plain_log_axis", "visible_legend_entries"]


def _melt_fraction_grid(param, temps, pressures, water, shift):
    """Equilibrium F on a (P, T) grid, row by row from the monotone tau -> T map."""
    frac = np.empty((pressures.size, temps.size))
    taus = np.linspace(temps[0] - 50.0, temps[-1] + 400.0, 1500)
    for i, p in enumerate(pressures):
        f_row = param.dry_melt_fraction(taus - shift, p).fraction
        t_row = taus - param.water_depression(f_row, p, water)[0]
        frac[i] = np.interp(temps, t_row, f_row)
    return frac


def draw_pt_diagram(ax, parameterization=None, *, water=0.0, solidus_offset=0.0,
                    max_pressure=5.0, temperature_range=(1000.0, 1900.0),
                    contours=(0.1, 0.2, 0.3, 0.5)):
    """Melting curves and equilibrium melt-fraction contours on ``ax``.

    Temperatures in degC on x, pressure in GPa on y (downward). The curves are moved by
    ``solidus_offset`` (degC); with ``water`` (ppm) > 0 the wet solidus (F -> 0) is
    added. Call `label_contours` once everything else is drawn.
    """
    param = get_parameterization(parameterization)
    pressures = np.linspace(0.0, max_pressure, 241)
    temps = np.linspace(*temperature_range, 361)
    frac = _melt_fraction_grid(param, temps, pressures, water, solidus_offset)
    ax.contour(temps, pressures, frac, levels=list(contours), colors=style.CONTOUR,
               linewidths=0.8, zorder=1)
    ax.plot([], [], color=style.CONTOUR, lw=0.8,
            label="equilibrium melt fraction F (contours)")
    for name, temp in param.curves(pressures).items():
        label = "solidus, dry" if name == "solidus" and water > 0 else name
        ax.plot(temp + solidus_offset, pressures, label=label, zorder=2,
                **style.CURVES.get(name, {}))
    if water > 0 and param.supports_water:
        wet = param.wet_solidus(pressures, water) + solidus_offset
        ax.plot(wet, pressures, color=style.WET_SOLIDUS, lw=1.6, zorder=2,
                label=f"solidus, {water:g} ppm H$_2$O")
    ax.set_xlim(*temperature_range)
    ax.set_ylim(max_pressure, 0.0)
    ax.set_xlabel(quantity("temperature").axis_label())
    ax.set_ylabel(quantity("pressure").axis_label())
    ax.grid(alpha=0.2, lw=0.5, color="0.6")
    return ax


def add_depth_axis(ax, mantle_density=3300.0):
    """Right-hand depth axis (km) from P = rho g z."""
    km = float(depth_per_pressure(mantle_density))
    sec = ax.secondary_yaxis("right", functions=(lambda p: p * km, lambda z: z / km))
    sec.set_ylabel(f"Depth (km; {km:.2f} km/GPa)")
    return sec


def draw_melting_path(ax, column, index=(), *, color=None, label=None, max_pressure=5.0,
                      adiabat=True, adiabat_label=True):
    """Solid adiabat (thin, dotted) and melting path (thick) of one point of a column.

    The onset of melting is marked with a ring; `index` picks the point of an array
    ``MeltColumn``. With a `label`, the adiabat gets a legend entry of its own unless
    ``adiabat_label`` is False (a figure that explains all adiabats in one entry).
    """
    color = style.MAP if color is None else color
    pressures = np.linspace(0.0, max_pressure, 400)
    temp, _ = column.profile(pressures)
    temp = np.asarray(temp)[index]
    q = column._query
    tp = float(np.asarray(q.potential_temperature)[index])
    if adiabat:
        ax.plot(solid_adiabat(tp, pressures, q.param.thermo), pressures, color=color,
                lw=0.9, ls=(0, (1, 2)), zorder=3,
                label=(f"solid adiabat (no melting), Tp {tp:.0f} °C"
                       if label is not None and adiabat_label else None))
    top = float(np.asarray(column.top_pressure)[index])
    onset = float(np.asarray(column.onset_pressure)[index])
    melting = (pressures >= top) & (pressures <= onset)
    ax.plot(np.where(melting, temp, np.nan), pressures, color=color, lw=2.6, label=label,
            zorder=4, solid_capstyle="round")
    if column.produces_melt[index]:
        ax.plot(float(np.interp(onset, pressures, temp)), onset, "o", mfc="white",
                mec=color, mew=1.8, ms=6, zorder=5)
    return ax


def draw_lid(ax, pressure, *, label=None, text=None):
    """Pale band over the lid and a thick dotted line at its base (pressure in GPa).

    `text` is written on the line at the right (e.g. ``"lid base 40 km"``).
    """
    ax.axhspan(0.0, pressure, color=style.LID_FILL, lw=0, zorder=0)
    ax.axhline(pressure, label=label, zorder=2, **style.LID_LINE)
    if text:  # at the left, inside the lid band: clear of the depth axis on the right
        ax.annotate(text, xy=(0.01, pressure), xycoords=("axes fraction", "data"),
                    xytext=(2, 3), textcoords="offset points", ha="left", va="bottom",
                    fontsize=8, color=style.LID, zorder=6,
                    bbox={"boxstyle": "square,pad=0.1", "fc": style.LID_FILL, "lw": 0})
    return ax


def label_contours(ax, *, fontsize=7.5, margin=0.07):
    """Label each melt-fraction contour once, away from other lines and the frame.

    Call after everything else is drawn: for each level, the point of the contour inside
    the axes (less `margin`, as a fraction of the axes) that is farthest from every other
    line and from labels already placed gets the label, written inline (the contour is
    cut there), so labels are neither clipped by the frame nor drawn over other lines.
    """
    from matplotlib.contour import ContourSet
    from matplotlib.lines import Line2D

    sets = [a for a in ax.get_children() if isinstance(a, ContourSet)]
    if not sets:
        return
    ax.figure.draw_without_rendering()  # fixes the transforms (layout moves the axes)
    box = ax.get_window_extent()
    dx, dy = margin * box.width, margin * box.height
    obstacles = [_display_points(line) for line in ax.get_lines()
                 if isinstance(line, Line2D) and len(line.get_xdata())]
    obstacles += [_box_points(text.get_window_extent()) for text in ax.texts
                  if text.get_visible() and text.get_text()]
    obstacles = np.concatenate(obstacles) if obstacles else np.empty((0, 2))
    for cs in sets:
        placed = []
        for level, path in zip(cs.levels, cs.get_paths(), strict=False):
            xy = ax.transData.transform(path.vertices) if len(path.vertices) else None
            if xy is None:
                continue
            inside = ((xy[:, 0] > box.x0 + dx) & (xy[:, 0] < box.x1 - dx)
                      & (xy[:, 1] > box.y0 + dy) & (xy[:, 1] < box.y1 - dy))
            if not np.any(inside):
                continue
            cand = xy[inside]
            others = np.concatenate([obstacles, np.array(placed).reshape(-1, 2)])
            score = _nearest(cand, others) if len(others) else np.ones(len(cand))
            best = cand[int(np.argmax(score))]
            placed.append(best)
            ax.clabel(cs, levels=[level], manual=[tuple(ax.transData.inverted()
                                                        .transform(best))],
                      inline=True, inline_spacing=3, fontsize=fontsize,
                      fmt=lambda f: f"F = {f:g}")


def _display_points(line, spacing: float = 4.0) -> np.ndarray:
    """Points of `line` in display pixels, at most `spacing` apart (a straight line of
    two vertices, such as a lid base, is filled in)."""
    xy = np.column_stack([np.asarray(line.get_xdata(), float),
                          np.asarray(line.get_ydata(), float)])
    xy = line.get_transform().transform(xy[np.all(np.isfinite(xy), axis=1)])
    if len(xy) < 2:
        return xy.reshape(-1, 2)
    pieces = [xy[:1]]
    for a, b in zip(xy[:-1], xy[1:], strict=True):
        n = int(min(np.hypot(*(b - a)) // spacing, 2000)) + 1
        pieces.append(a + (b - a) * np.linspace(0.0, 1.0, n + 1)[1:, None])
    return np.concatenate(pieces)


def _box_points(box, spacing: float = 4.0) -> np.ndarray:
    """A grid of display points `spacing` apart covering a text's box (labels keep off
    text as they keep off lines)."""
    xs = np.linspace(box.x0, box.x1, max(2, int(box.width // spacing) + 1))
    ys = np.linspace(box.y0, box.y1, max(2, int(box.height // spacing) + 1))
    return np.column_stack([g.ravel() for g in np.meshgrid(xs, ys)])


def _nearest(points: np.ndarray, others: np.ndarray) -> np.ndarray:
    """Distance (display pixels) from each of `points` to the nearest of `others`."""
    from scipy.spatial import cKDTree

    return cKDTree(others).query(points)[0]


def visible_legend_entries(ax):
    """Legend handles and labels, leaving out curves that lie wholly outside the axes."""
    (x0, x1), (y1, y0) = ax.get_xlim(), ax.get_ylim()
    y0, y1 = min(y0, y1), max(y0, y1)
    keep_h, keep_l = [], []
    for handle, label in zip(*ax.get_legend_handles_labels(), strict=True):
        # Only data-coordinate curves can fall outside (axhline spans the axes anyway).
        if (hasattr(handle, "get_xdata") and handle.get_transform() is ax.transData
                and len(handle.get_xdata())):
            x = np.asarray(handle.get_xdata(), float)
            y = np.asarray(handle.get_ydata(), float)
            if not np.any((x >= x0) & (x <= x1) & (y >= y0) & (y <= y1)):
                continue
        keep_h.append(handle)
        keep_l.append(label)
    return keep_h, keep_l


def plain_log_axis(ax) -> None:
    """Make the y-axis logarithmic with plain numbers (0.3, 1, 20), not powers of ten.

    Call it after drawing. When the axis spans less than a factor of 10, minor ticks at
    1.5, 2, 3, ... 9 times a power of ten are labelled too, and each limit is moved out
    to the next of them when that widens the axis by less than a factor of 1.25.
    """
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    ax.set_yscale("log")
    plain = FuncFormatter(lambda value, _: f"{value:g}")
    ax.yaxis.set_major_formatter(plain)
    low, high = sorted(ax.get_ylim())  # sorted: the axis may already be inverted
    if high / low >= 10.0:
        ax.yaxis.set_minor_formatter(NullFormatter())
        return
    subs = np.array([1.0, 1.5, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0])
    ax.yaxis.set_minor_locator(LogLocator(subs=subs[1:-1]))
    ax.yaxis.set_minor_formatter(plain)
    step_low, step_high = (10.0 ** np.floor(np.log10(v)) for v in (low, high))
    below = subs[subs <= low / step_low][-1] * step_low
    above = subs[subs >= high / step_high][0] * step_high
    limits = (below if low / below < 1.25 else low, above if above / high < 1.25 else high)
    ax.set_ylim(limits[::-1] if ax.yaxis_inverted() else limits)
