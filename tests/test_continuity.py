"""Every output moves continuously with every input.

See docs/model.md, "How the fast route works".

A small step in the inputs may move melt thickness, onset, mean melt fraction and mean
melting pressure by at most a bounded slope times the step. A jump, such as a column
that stops "melting" when its top refreezes, shows up as a change far above that bound
once the step is small. The bounds, per quantity and per input:

- Tp and the solidus offset act through theta = Tp - offset + dT_water, and water
  through its depression of the solidus, dT = K (X_bulk / D)^0.75 = 1.36 K per unit of
  water^0.75 (ppm^0.75; Katz et al. 2003, Table 2: K = 43, D = 0.01). Water is
  therefore stepped in water^0.75: dT is not Lipschitz in water itself at 0 ppm.
- Onset: 0.25 GPa per K of theta. d P0 / d theta = 1 / (solidus slope - adiabat slope),
  and the Katz solidus, 132.9 - 10.2 P K/GPa, is still 4.5 K/GPa steeper than the
  adiabat (26.4 K/GPa) where they cross at 10 GPa (1 / 4.5 = 0.22).
- Mean pressure: the same 0.25 GPa/K (it lies inside the melting interval and moves
  with it), and 0.08 GPa per km of lid: about twice as fast as the top of melting moves
  (1 / 25.5 GPa/km in the densest mantle); measured at most 1.5 times.
- Melt thickness: active upwelling x (0.06 GPa per K of theta x km/GPa, 3 times the
  largest slope found in a 20 000-point scan of the domain, 0.023 GPa/K, hot wet mantle
  near cpx exhaustion; + 1 km per km of lid, F <= 1 being removed or added at the top)
  + the onset depth per unit of active upwelling (F <= 1 over the whole column).
- Mean melt fraction: 0.02 per K of theta (Katz: dF/dT <= 1.5 / (T_lherz - T_sol),
  below 0.009/K above 5 GPa; measured at most 0.007/K) and 0.3 per km of lid (where
  fully molten mantle entering at the 10 GPa base recrystallises on ascent F falls by up
  to ~4 per GPa; measured 0.13/km).
- The mantle density sets the depth scale: at fixed lid (km) it moves the top of
  melting like a lid step of lid x d rho / rho, and scales melt thickness by d rho / rho.

The crust and mantle densities and the active upwelling never move the onset pressure,
mean F or mean pressure.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lidmelt.forward import PARAMETER_DOMAIN, melt_column

WATER_Q_K = 43.0 * (1e-4 / 0.01) ** 0.75  # K per unit of water^0.75 (Katz et al. 2003)
INPUTS = ("potential_temperature", "lithosphere_thickness", "water", "active_upwelling",
          "solidus_offset", "crust_density", "mantle_density")
#: largest step per input (water: in water^0.75); small enough that a jump of 0.01 km of
#: melt, 0.001 in F or 0.005 GPa of mean pressure exceeds the bound below
STEP = {"potential_temperature": 0.02, "lithosphere_thickness": 0.01, "water": 0.02,
        "active_upwelling": 1e-4, "solidus_offset": 0.02, "crust_density": 0.5,
        "mantle_density": 0.5}
#: slope bounds per parameterization (module docstring)
BOUNDS = {
    "katz2003": dict(onset=0.25, pressure=0.25, pressure_lid=0.08, melt=0.06, melt_lid=1.0,
                     fraction=0.02, fraction_lid=0.3),
    # McKenzie & Bickle (1988): the solidus flattens above ~7.5 GPa and hot adiabats
    # cross it twice; where the deeper crossing appears (theta ~ 1614 degC) the exact
    # onset jumps from 6.3 to 10 GPa, which the tabulated route spreads over one 5 K
    # table cell (docs/model.md, "Known limits"): 0.8 GPa/K there; elsewhere as Katz.
    "mckenzie-bickle1988": dict(onset=1.0, pressure=1.5, pressure_lid=0.4, melt=0.06,
                                melt_lid=1.0, fraction=0.03, fraction_lid=0.3),
}
OUTPUTS = ("melt_thickness", "onset_pressure", "mean_melt_fraction", "mean_melting_pressure")
FLOOR = 1e-6  # float32 tables: values jitter by ~1e-7 relative between neighbouring points


def allowed_change(x, step, bounds, km_per_gpa):
    """Largest change of each output for the step ``step`` from point ``x``."""
    theta = (abs(step["potential_temperature"]) + abs(step["solidus_offset"])
             + WATER_Q_K * abs(step["water"]))
    relative_density = abs(step["mantle_density"]) / x["mantle_density"]
    lid = abs(step["lithosphere_thickness"]) + x["lithosphere_thickness"] * relative_density
    chi = x["active_upwelling"] + abs(step["active_upwelling"])
    melt = chi * (bounds["melt"] * km_per_gpa * theta + bounds["melt_lid"] * lid
                  + 2.0 * x["melt_per_upwelling"] * relative_density) \
        + abs(step["active_upwelling"]) * x["onset_depth"]
    return {"melt_thickness": melt,
            "onset_pressure": bounds["onset"] * theta,
            "mean_melt_fraction": bounds["fraction"] * theta + bounds["fraction_lid"] * lid,
            "mean_melting_pressure": bounds["pressure"] * theta + bounds["pressure_lid"] * lid}


def evaluate(points, parameterization, melting_region):
    """melt_column at each point (dict of arrays); one call, the table across water."""
    args = {k: np.append(np.asarray(v, float), v[0]) for k, v in points.items()}
    if parameterization == "katz2003":  # a different water value: the 4-D table
        args["water"][-1] = 1.0 if args["water"][0] != 1.0 else 2.0
    tp, lid = args.pop("potential_temperature"), args.pop("lithosphere_thickness")
    res = melt_column(tp, lid, parameterization=parameterization,
                      melting_region=melting_region, **args)
    return {name: np.asarray(getattr(res, name))[:-1] for name in OUTPUTS + ("onset_depth",)}


def check_step(x, step, parameterization, melting_region):
    lo_hi = {k: PARAMETER_DOMAIN[k] for k in INPUTS}
    y = {}
    for name in INPUTS:
        if name == "water":
            q = np.clip(x[name] ** 0.75 + step[name], 0.0, lo_hi[name][1] ** 0.75)
            y[name], step[name] = q ** (1 / 0.75), q - x[name] ** 0.75
        else:
            low = max(lo_hi[name][0], 1e-3) if name == "active_upwelling" else lo_hi[name][0]
            y[name] = float(np.clip(x[name] + step[name], low, lo_hi[name][1]))
            step[name] = y[name] - x[name]
    out = evaluate({k: [x[k], y[k]] for k in INPUTS}, parameterization, melting_region)
    km_per_gpa = 1e6 / (x["mantle_density"] * 9.81)
    facts = dict(x, onset_depth=float(out["onset_depth"][0]),
                 melt_per_upwelling=float(out["melt_thickness"][0]) / x["active_upwelling"])
    allowed = allowed_change(facts, step, BOUNDS[parameterization], km_per_gpa)
    for name in OUTPUTS:
        change = abs(float(out[name][1] - out[name][0]))
        assert change <= allowed[name] + FLOOR, (name, change, allowed[name], x, step)


def _point(parameterization):
    fields = {k: st.floats(*PARAMETER_DOMAIN[k]) for k in INPUTS}
    fields["active_upwelling"] = st.floats(1e-3, PARAMETER_DOMAIN["active_upwelling"][1])
    if parameterization != "katz2003":
        fields["water"] = st.just(0.0)  # a dry parameterization
    return st.fixed_dictionaries(fields)


def _step(parameterization):
    fields = {k: st.floats(-1.0, 1.0).map(lambda u, k=k: u * STEP[k]) for k in INPUTS}
    if parameterization != "katz2003":
        fields["water"] = st.just(0.0)
    return st.fixed_dictionaries(fields)


@settings(max_examples=300, deadline=None, derandomize=True)
@given(x=_point("katz2003"), step=_step("katz2003"),
       melting_region=st.sampled_from(["column", "triangle"]))
def test_small_steps_make_small_changes_katz(x, step, melting_region):
    check_step(x, step, "katz2003", melting_region)


@settings(max_examples=150, deadline=None, derandomize=True)
@given(x=_point("mckenzie-bickle1988"), step=_step("mckenzie-bickle1988"),
       melting_region=st.sampled_from(["column", "triangle"]))
def test_small_steps_make_small_changes_mckenzie_bickle(x, step, melting_region):
    check_step(x, step, "mckenzie-bickle1988", melting_region)


# ---- exhaustive fine scans of the cold, wet, thin-lid corner --------------------------

def _scan_changes(res, spacing, bounds, km_per_gpa, theta_step, lid_step):
    """Largest change between neighbours of a 1-D scan against its allowed change."""
    allowed = {"melt_thickness": bounds["melt"] * km_per_gpa * theta_step
               + bounds["melt_lid"] * lid_step,
               "onset_pressure": bounds["onset"] * theta_step,
               "mean_melt_fraction": bounds["fraction"] * theta_step
               + bounds["fraction_lid"] * lid_step,
               "mean_melting_pressure": bounds["pressure"] * theta_step
               + bounds["pressure_lid"] * lid_step}
    for name in OUTPUTS:
        jumps = np.abs(np.diff(np.asarray(getattr(res, name))))
        worst = int(np.argmax(jumps))
        assert jumps[worst] <= allowed[name] + FLOOR, (name, worst * spacing, jumps[worst])


@pytest.mark.parametrize("melting_region", ["column", "triangle"])
@pytest.mark.parametrize("water", [0.0, 50.0, 200.0, 300.0, 600.0, 1000.0])
def test_fine_scan_of_cold_wet_corner_in_temperature(water, melting_region):
    # every 0.02 K from the bottom of the domain to well above the surface solidus, for
    # lids from none to 10 km and the full range of solidus offsets
    tps = np.arange(1000.0, 1250.0, 0.02)
    for lid in (0.0, 0.5, 2.0, 5.0, 10.0):
        for offset in (-100.0, 0.0, 100.0):
            res = melt_column(tps, lid, water=water, solidus_offset=offset,
                              melting_region=melting_region)
            _scan_changes(res, 0.02, BOUNDS["katz2003"], 30.89, 0.02, 0.0)


@pytest.mark.parametrize("melting_region", ["column", "triangle"])
@pytest.mark.parametrize("water", [0.0, 300.0, 1000.0])
def test_fine_scan_of_cold_wet_corner_in_lid(water, melting_region):
    # every 5 m of lid from none to 30 km, where the lid base sweeps through the onset
    # and through the layer in which water-saturated melt refreezes
    lids = np.arange(0.0, 30.0, 0.005)
    for tp in (1000.0, 1050.0, 1080.0, 1090.0, 1120.0, 1200.0):
        res = melt_column(tp, lids, water=water, melting_region=melting_region)
        _scan_changes(res, 0.005, BOUNDS["katz2003"], 30.89, 0.0, 0.005)


def test_the_reported_jumps_are_gone():
    # Tp 1080 degC, 1000 ppm: a 5 km lid used to make 0.7 km of crust where no lid made
    # none (the column's top refroze, so it "did not melt"); now the thin lid only takes
    # away the melt of its top 5 km.
    no_lid, lid = (melt_column(1080.0, h, water=1000.0) for h in (0.0, 5.0))
    assert bool(no_lid.produces_melt)
    assert float(no_lid.crustal_thickness) > float(lid.crustal_thickness) > 0.5
    assert float(no_lid.max_melt_fraction) > float(no_lid.top_melt_fraction)
    # crust used to jump 0 -> 1.09 km between Tp 1086.0 and 1086.25 degC (1000 ppm)
    pair = melt_column(np.array([1086.0, 1086.25]), 0.0, water=1000.0)
    assert abs(float(np.diff(pair.crustal_thickness)[0])) < 0.01
    # the triangle's mean pressure used to jump 0 -> 2.72 GPa near Tp 1121 degC
    tps = np.arange(1119.0, 1123.0, 0.25)
    ridge = melt_column(tps, 0.0, water=1000.0, melting_region="triangle")
    assert np.max(np.abs(np.diff(ridge.mean_melting_pressure))) < 0.01
