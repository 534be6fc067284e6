"""Names of the samples in a P-T panel, placed clear of each other and of other samples.

Each label is tried at spots next to its own point first, then at spots just outside its
own 1-sigma ellipse and farther out; it takes the first spot that covers no placed label,
no other sample's ellipse (the extent of its path on the screen) or marker, and stays
inside the axes. Where every spot covers something, it keeps the spot of least covered
area, so every sample stays named. A label moved off its point gets a thin leader line.
"""

from __future__ import annotations

import numpy as np

from ...forward import figure_style as style

__all__ = ["place_labels"]

#: Offsets (points) and alignments tried next to the point, nearest first.
_NEAR = [((4, 3), "left", "bottom"), ((4, -3), "left", "top"),
         ((-4, 3), "right", "bottom"), ((-4, -3), "right", "top"),
         ((0, 7), "center", "bottom"), ((0, -7), "center", "top"),
         ((10, 0), "left", "center"), ((-10, 0), "right", "center")]
#: Directions around the own ellipse: (x, y) sign and the alignment facing away from it.
_AROUND = [((0, 1), "center", "bottom"), ((0, -1), "center", "top"),
           ((1, 0), "left", "center"), ((-1, 0), "right", "center"),
           ((1, 1), "left", "bottom"), ((-1, 1), "right", "bottom"),
           ((1, -1), "left", "top"), ((-1, -1), "right", "top")]
_GAPS = (2.0, 10.0, 20.0, 32.0, 46.0)  # points beyond the own ellipse's extent
#: Weights of covered area: another label worst, then leaving the axes.
_LABEL_WEIGHT, _OUTSIDE_WEIGHT = 3.0, 4.0


def place_labels(ax, labels, outlines, markers, renderer) -> None:
    """Move each label (an Annotation at its sample's point) to its best spot.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    labels : list of matplotlib.text.Annotation, one per sample, ``xy`` at its point
    outlines : list of matplotlib.lines.Line2D, each sample's 1-sigma ellipse outline
    markers : matplotlib.lines.Line2D
        The sample markers, one point per sample in the order of `labels`.
    renderer
        The renderer of the drawn figure (the layout must be final).

    Labels are placed from the top of the axes down (greedy).
    """
    scale = renderer.points_to_pixels(1.0)
    ellipses = [line.get_window_extent(renderer) for line in outlines]
    half = 0.5 * markers.get_markersize() * scale
    points = ax.transData.transform(np.column_stack(markers.get_data()))
    obstacles = [[ellipse, _box(x - half, y - half, x + half, y + half)]
                 for ellipse, (x, y) in zip(ellipses, points, strict=True)]
    frame, placed = ax.get_window_extent(renderer), []
    for k in np.argsort(-points[:, 1], kind="stable"):
        others = [box for j, boxes in enumerate(obstacles) if j != k for box in boxes]
        spots = _NEAR + _spots_around(ellipses[k], points[k], scale)
        spot, box = _best_spot(labels[k], spots, renderer,
                               lambda b: _cost(b, placed, others, frame))
        _apply(labels[k], spot)
        placed.append(box)
        if spot not in _NEAR:
            _leader(ax, labels[k], box, points[k])


def _spots_around(ellipse, point, scale) -> list:
    """Spots just outside the own ellipse's extent, then farther out (offsets in points)."""
    x, y = point
    reach = {1: (ellipse.x1 - x) / scale, -1: (x - ellipse.x0) / scale}
    rise = {1: (ellipse.y1 - y) / scale, -1: (y - ellipse.y0) / scale}
    spots = []
    for gap in _GAPS:
        for (sx, sy), ha, va in _AROUND:
            dx = sx * (reach[sx] + gap) if sx else 0.0
            dy = sy * (rise[sy] + gap) if sy else 0.0
            spots.append(((dx, dy), ha, va))
    return spots


def _best_spot(label, spots, renderer, cost):
    """The first spot of no cost, else the one of least cost, with the label's box."""
    best, best_cost = None, np.inf
    for spot in spots:
        _apply(label, spot)
        box = label.get_window_extent(renderer).expanded(1.08, 1.15)
        value = cost(box)
        if value < best_cost:
            best, best_cost = (spot, box), value
        if value == 0:
            break
    return best


def _cost(box, placed, others, frame) -> float:
    """Area of `box` over placed labels, other samples' ellipses and markers, and outside
    the axes (display units squared, weighted)."""
    value = _LABEL_WEIGHT * sum(_overlap(box, other) for other in placed)
    value += sum(_overlap(box, other) for other in others)
    return value + _OUTSIDE_WEIGHT * (box.width * box.height - _overlap(box, frame))


def _apply(label, spot) -> None:
    offset, ha, va = spot
    label.set_position(offset)
    label.set_ha(ha)
    label.set_va(va)


def _leader(ax, label, box, point) -> None:
    """A thin line from the sample's point to the nearest point of its label's box."""
    end = (np.clip(point[0], box.x0, box.x1), np.clip(point[1], box.y0, box.y1))
    (x0, y0), (x1, y1) = ax.transData.inverted().transform([point, end])
    # no autoscaling: the layout the labels were placed in must not move
    ax.plot([x0, x1], [y0, y1], color=style.INK, lw=0.5, alpha=0.7, zorder=5.5,
            label="_leader", scalex=False, scaley=False)


def _box(x0, y0, x1, y1):
    from matplotlib.transforms import Bbox

    return Bbox([[x0, y0], [x1, y1]])


def _overlap(a, b) -> float:
    """Area (display units) shared by two bounding boxes."""
    w = min(a.x1, b.x1) - max(a.x0, b.x0)
    h = min(a.y1, b.y1) - max(a.y0, b.y0)
    return max(w, 0.0) * max(h, 0.0)
