"""Rare-earth melting model against Shaw's (1970) equations and derived pooled closed forms.

The paths here are synthetic (F linear in P, constant productivity) and the lithologies
are one- or two-mineral toys, so the published and derived equations apply exactly.
"""

from __future__ import annotations

import numpy as np
import pytest

from lidmelt.forward.trace import melt_along_path
from lidmelt.forward.trace.lithology import segments_for
from lidmelt.forward.trace.tables import ELEMENTS

E = len(ELEMENTS)


def _toy(mode, reaction, d_rows):
    """Both facies the same toy lithology; coefficients (5 minerals, E elements)."""
    seg = segments_for(np.array(mode, float), np.array(reaction, float))
    coefficients = np.repeat(np.asarray(d_rows, float)[:, None], E, axis=1)
    return {"spinel": seg, "garnet": seg}, coefficients


def _linear_path(f_max, n, p0=3.0, pf=1.0):
    """F = f_max (P0 - P) / (P0 - Pf) at edges from the top (Pf) to the onset (P0)."""
    pressure = np.linspace(pf, p0, n + 1)
    return pressure, f_max * (p0 - pressure) / (p0 - pf)


def _modal(d):
    # one mineral (olivine slot) carrying every element: modal melting, constant D
    return _toy([1, 0, 0, 0, 0], [1, 0, 0, 0, 0], [d, 1, 1, 1, 1])


@pytest.mark.parametrize("n", [1, 7, 50])
@pytest.mark.parametrize("d", [0.001, 0.05, 0.3, 2.0])
def test_modal_fractional_melting_is_exact_for_any_step(d, n):
    # Shaw 1970: accumulated fractional melt C/C0 = (1/F)[1 - (1 - F)^(1/D)],
    # residue C/C0 = (1 - F)^(1/D - 1); the per-interval step is exact for constant D
    segs, coeffs = _modal(d)
    f = 0.1
    p, frac = _linear_path(f, n)
    out = melt_along_path(p, frac, source=np.ones(E), segments=segs, coefficients=coeffs)
    np.testing.assert_allclose(out.melt, (1.0 - (1.0 - f) ** (1.0 / d)) / f, rtol=1e-9)
    np.testing.assert_allclose(out.residue, (1.0 - f) ** (1.0 / d - 1.0), rtol=1e-9)
    np.testing.assert_allclose(out.melt_mass, f, rtol=1e-12)


def test_non_modal_check_values():
    # Shaw 1970, non-modal fractional melting, D0 = 0.05, P = 0.12, F = 0.1:
    # accumulated (1/F)[1 - (1 - P F/D0)^(1/P)] = 8.984266 and instantaneous
    # (1/D0)(1 - P F/D0)^(1/P - 1) = 2.672984 (evaluated from the published equations).
    # Two minerals with mode (0.8, 0.2) and reaction (0.5, 0.5): D0 = 0.2 a + 0.8 b and
    # P = 0.5 (a + b) give a = 0.71/3, b = 0.01/3.
    a, b = 0.71 / 3.0, 0.01 / 3.0
    segs, coeffs = _toy([0.8, 0, 0.2, 0, 0], [0.5, 0, 0.5, 0, 0], [b, 1, a, 1, 1])
    d0, big_p, f = 0.05, 0.12, 0.1
    for n in (1, 13):
        p, frac = _linear_path(f, n)
        out = melt_along_path(p, frac, source=np.ones(E), segments=segs, coefficients=coeffs)
        np.testing.assert_allclose(out.melt, 8.984266, rtol=1e-6)
        # the last instantaneous melt: residue over the residue's bulk D(F)
        instantaneous = out.residue * (1.0 - f) / (d0 - big_p * f)
        np.testing.assert_allclose(instantaneous, 2.672984, rtol=1e-6)


@pytest.mark.parametrize(("d", "column", "triangle"), [
    # derived (docs/model.md, "Rare-earth elements along the melting path"): constant D
    # and productivity, F_m = 0.15, column / triangle; checked by hand before use
    (0.001, 6.6667, 13.2445),
    (0.3, 2.7884, 2.9637),
    (2.0, 0.5203, 0.5133),
])
def test_pooled_constant_productivity(d, column, triangle):
    segs, coeffs = _modal(d)
    f_m = 0.15
    a = 1.0 / d
    exact_col = (1.0 - (1.0 - f_m) ** a) / f_m
    exact_tri = 2.0 / f_m ** 2 * (a / (a + 1.0) * (1.0 - (1.0 - f_m) ** (a + 1.0))
                                  - (1.0 - f_m) * (1.0 - (1.0 - f_m) ** a))
    assert exact_col == pytest.approx(column, abs=6e-5)
    assert exact_tri == pytest.approx(triangle, abs=6e-5)
    p, frac = _linear_path(f_m, 4000)
    col = melt_along_path(p, frac, source=np.ones(E), segments=segs, coefficients=coeffs)
    tri = melt_along_path(p, frac, melting_region="triangle", source=np.ones(E),
                          segments=segs, coefficients=coeffs)
    np.testing.assert_allclose(col.melt, exact_col, rtol=1e-9)
    # the triangle's midpoint weights err by O(1/n^2): 4000 intervals give ~1e-7
    np.testing.assert_allclose(tri.melt, exact_tri, rtol=1e-6)
    # triangle melt mass: the Plank & Langmuir (1992) mean F of a linear path, F_m / 2
    assert tri.melt_mass == pytest.approx(f_m / 2.0, rel=1e-12)


def test_against_scipy_ode_through_the_transition():
    # d(R C_s)/dX = -C_s / D(X), R = 1 - X (fractional melting, Shaw 1970), with the
    # packaged mineralogy, phase exhaustion and the linear spinel-garnet mixing,
    # integrated by scipy's solve_ivp: the intervals converge to it
    from scipy.integrate import solve_ivp

    from lidmelt.forward.trace.lithology import facies_segments
    from lidmelt.forward.trace.tables import partition_coefficients

    segs, d = facies_segments(), partition_coefficients()
    p0, pf, f_m, lo, hi = 3.4, 1.0, 0.24, 2.5, 3.0

    def bulk(x):
        pressure = p0 - (p0 - pf) * x / f_m
        w = np.clip((pressure - lo) / (hi - lo), 0.0, 1.0)
        masses = (1 - w) * segs["spinel"].masses_at(x) + w * segs["garnet"].masses_at(x)
        return masses @ d / (1.0 - x)

    def rhs(x, m):  # m = R C_s per unit source mass
        return -(m / (1.0 - x)) / bulk(x)

    ode = solve_ivp(rhs, (0.0, f_m), np.ones(E), rtol=1e-11, atol=1e-14, method="DOP853",
                    max_step=1e-3)
    melt_ode = (1.0 - ode.y[:, -1]) / f_m
    p, frac = _linear_path(f_m, 3000, p0=p0, pf=pf)
    out = melt_along_path(p, frac, source=np.ones(E), transition=(lo, hi))
    # step-start mineralogy across the few steps holding a kink: O(1/n) there, ~1e-5
    np.testing.assert_allclose(out.melt, melt_ode, rtol=2e-5)
    # the residue of La is 1e-69 of the source: compare exponents (log), which the
    # per-step error (~1e-8 each) shifts by ~1e-5 at most
    np.testing.assert_allclose(np.log(out.residue * (1.0 - f_m)), np.log(ode.y[:, -1]),
                               rtol=1e-5, atol=1e-6)


def test_refreezing_makes_no_melt():
    # a path whose F falls near the top (refreezing): the fall makes no melt, as in the
    # melt_column weights (docs/model.md, "Melting regions"); the pooled melt equals
    # that of the path stopped at its largest F
    segs, coeffs = _modal(0.05)
    p = np.linspace(1.0, 3.0, 41)
    frac = np.clip(0.2 * (3.0 - p) / 1.5, 0.0, None)
    falling = np.minimum(frac, 0.2 - 0.5 * (1.5 - np.minimum(p, 1.5)))
    out = melt_along_path(p, falling, source=np.ones(E), segments=segs, coefficients=coeffs)
    stop = p >= 1.5
    ref = melt_along_path(p[stop], frac[stop], source=np.ones(E), segments=segs,
                          coefficients=coeffs)
    np.testing.assert_allclose(out.melt, ref.melt, rtol=1e-12)
    assert out.melt_mass == pytest.approx(0.2, rel=1e-12)
