"""Analytic constant-productivity limits, with a toy linear parameterization.

With no thermal expansion and no entropy of fusion the isentropic path is isothermal,
so a melt fraction linear in (T - T_sol) with a linear solidus makes F rise linearly
with decompression: F = c (P0 - P). Then (docs/model.md, "Melting regions"; Plank &
Langmuir 1992): column mean F = F_top, triangle mean F = F_top / 2, column mean P =
(P0 + Pf) / 2, and in the triangle, whose width grows as P - Pf from its apex at the top
of melting, mean P = int P (P - Pf) dP / int (P - Pf) dP = Pf + 2 (P0 - Pf) / 3;
melt = c (P0 - Pf)^2 / 2 in GPa, times km/GPa.
"""

from dataclasses import dataclass, field

import numpy as np
import pytest
from lidmelt.forward import MeltFraction, Parameterization, ThermoConstants, melt_column
from numpy.testing import assert_allclose

T0, SLOPE, WIDTH = 1000.0, 100.0, 500.0  # degC, degC/GPa, degC
PRODUCTIVITY = SLOPE / WIDTH  # 0.2 per GPa


@dataclass(frozen=True)
class LinearToy(Parameterization):
    thermo: ThermoConstants = field(default_factory=lambda: ThermoConstants(
        alpha_solid=0.0, alpha_melt=0.0, entropy_of_fusion=0.0))
    name = "linear-toy"
    title = "linear toy"

    def solidus(self, pressure):
        return T0 + SLOPE * np.asarray(pressure, float)

    def liquidus(self, pressure):
        return self.solidus(pressure) + WIDTH

    def dry_melt_fraction(self, tau, pressure):
        tau, p = np.broadcast_arrays(np.asarray(tau, float), np.asarray(pressure, float))
        x = (tau - self.solidus(p)) / WIDTH
        inside = (x > 0) & (x < 1)
        return MeltFraction(np.clip(x, 0, 1), np.where(inside, 1 / WIDTH, 0.0),
                            np.where(inside, -SLOPE / WIDTH, 0.0))


@pytest.fixture(scope="module")
def toy():
    return LinearToy()


@pytest.mark.parametrize("tp, lid_gpa", [(1300.0, 1.0), (1450.0, 0.0), (1250.0, 2.0)])
def test_constant_productivity_limits(toy, tp, lid_gpa):
    km = 1e6 / (3300.0 * 9.81)
    p0 = (tp - T0) / SLOPE
    column = melt_column(tp, lid_gpa * km, parameterization=toy)
    ridge = melt_column(tp, lid_gpa * km, parameterization=toy, melting_region="triangle")
    f_top = PRODUCTIVITY * (p0 - lid_gpa)
    assert float(column.onset_pressure) == pytest.approx(p0, abs=1e-9)
    assert float(column.max_melt_fraction) == pytest.approx(f_top, rel=1e-6)
    assert float(column.mean_melt_fraction) == pytest.approx(f_top, rel=1e-6)
    assert float(ridge.mean_melt_fraction) == pytest.approx(f_top / 2, rel=1e-4)
    assert float(column.mean_melting_pressure) == pytest.approx((p0 + lid_gpa) / 2, rel=1e-4)
    assert float(ridge.mean_melting_pressure) == pytest.approx(lid_gpa + 2 * (p0 - lid_gpa) / 3,
                                                               rel=1e-4)
    melt = PRODUCTIVITY * (p0 - lid_gpa) ** 2 / 2 * km
    assert_allclose([column.melt_thickness, ridge.melt_thickness], melt, rtol=1e-4)
