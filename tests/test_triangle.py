"""The ridge melting triangle as an explicit 2-D sum of streamlines, against the fast route.

Passive flow beneath a spreading ridge (Plank & Langmuir 1992; Langmuir et al. 1992):
mantle streamlines cross the onset of melting at P0 and turn into the horizontal at
pressures Pt spread uniformly between the top of melting Pf (the apex, beneath the axis)
and P0. Each streamline melts like the 1-D column from P0 up to its own Pt and delivers
the melt it holds there, F(Pt); every increase of F along it is melt made at that
pressure. Pooling all streamlines gives the triangle's mean melt fraction and the
melt-weighted mean melting pressure. Here that double sum is done explicitly on a fine
grid with numpy (cumulative sums over each streamline, the trapezoid rule across
streamlines), written without the package's closed forms (docs/model.md, "Melting
regions"). F(P) comes from the slow reference route (adaptive solve_ivp of the published
Katz et al. 2003 equations), not from the tables of the fast route.
"""

import numpy as np
import pytest
from lidmelt.forward import melt_column
from lidmelt.forward.reference import reference_column, reference_path

CASES = [(1350.0, 0.0, 0.0), (1450.0, 30.0, 0.0), (1350.0, 0.0, 300.0), (1400.0, 10.0, 300.0)]


def explicit_triangle(path, nodes=3001):
    """Mean F and mean melting pressure (GPa) of the pooled melt of all streamlines."""
    p0, pf = path.onset_pressure, path.top_pressure
    # fine near the surface, where wet melt refreezes in a thin water-saturated layer
    grid = np.linspace(np.sqrt(p0), np.sqrt(pf), nodes) ** 2  # from the onset upward
    frac = path.melt_fraction(grid)
    rise = np.maximum(np.diff(frac, prepend=0.0), 0.0)  # made between a node and the last
    where = 0.5 * (grid + np.concatenate([grid[:1], grid[:-1]]))  # at the interval midpoint
    made = np.cumsum(rise)  # made so far by a streamline that turns at that node
    moment = np.cumsum(rise * where)
    turning = grid[::-1]  # ascending Pt for the quadrature across streamlines
    mean_f = np.trapezoid(frac[::-1], turning) / (p0 - pf)
    mean_p = np.trapezoid(moment[::-1], turning) / np.trapezoid(made[::-1], turning)
    return mean_f, mean_p


@pytest.fixture(scope="module", params=CASES,
                ids=lambda c: f"Tp{c[0]:g}-lid{c[1]:g}-w{c[2]:g}")
def case(request):
    tp, lid, water = request.param
    return request.param, explicit_triangle(reference_path(tp, lid, water=water, rtol=1e-9))


def test_fast_route_matches_the_explicit_triangle(case):
    (tp, lid, water), (mean_f, mean_p) = case
    fast = melt_column(tp, lid, water=water, melting_region="triangle")
    # The fast route's accuracy targets (tests/test_accuracy.py): 0.002 in F, 0.01 GPa in
    # pressure (measured: < 3e-5 and < 3e-4). The explicit sum itself is good to ~1e-6
    # (3001 nodes, second order). The old weighting by P0 - P was off by 0.8 GPa.
    assert float(fast.mean_melt_fraction) == pytest.approx(mean_f, abs=0.002)
    assert float(fast.mean_melting_pressure) == pytest.approx(mean_p, abs=0.01)


def test_reference_route_matches_the_explicit_triangle(case):
    (tp, lid, water), (mean_f, mean_p) = case
    ref = reference_column(tp, lid, water=water, melting_region="triangle", nodes=2001)
    # Same F(P), different sums (one weighted sum over the path vs streamline by
    # streamline): they agree to their discretisation error (measured < 3e-7).
    assert ref.mean_melt_fraction == pytest.approx(mean_f, abs=1e-5)
    assert ref.mean_melting_pressure == pytest.approx(mean_p, abs=1e-5)


def test_triangle_pools_deeper_and_less_melted_than_the_column(case):
    # Plank & Langmuir (1992): the wide, deep, little-melted base of the triangle
    # dominates its pooled melt, so its mean F is below the column's (about half:
    # exactly half at constant productivity) and its mean pressure deeper (at constant
    # productivity by (P0 - Pf)/6: 2/3 against 1/2 of the way down the interval).
    (tp, lid, water), (mean_f, mean_p) = case
    column = melt_column(tp, lid, water=water)
    interval = float(column.onset_pressure - column.top_pressure)
    assert 0.3 < mean_f / float(column.mean_melt_fraction) < 0.55
    assert 0.12 * interval < mean_p - float(column.mean_melting_pressure) < 0.22 * interval
