"""Kind ``rare_earths``: the log-normal likelihood against scipy.stats, the table rules,
and the fast route against the interval route."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lidmelt.forward import melt_column
from lidmelt.forward.trace import fast_trace_elements, pooled_trace_elements
from lidmelt.inversion import InputError
from lidmelt.inversion.observations import KINDS, RareEarthRatios
from scipy import stats


def _frame(**extra):
    data = {"sample": ["a", "b"], "la_yb_cn": [1.5, 2.5], "la_yb_sigma_cn": [0.15, 0.5]}
    return pd.DataFrame(data | extra)


def test_registered():
    assert KINDS["rare_earths"] is RareEarthRatios


def test_likelihood_is_log_normal_by_hand():
    block = RareEarthRatios.from_frame(_frame(sm_yb_cn=[1.2, 1.4], sm_yb_sigma_cn=[0.1, 0.2]),
                                       model_error=0.1)
    column = melt_column(np.array([1350.0, 1450.0]), np.array([10.0, 60.0]))
    pooled = pooled_trace_elements(column)  # independent of the fast route used inside
    got = block.pointwise_log_likelihood(column)
    fast = fast_trace_elements(column)
    expected = np.zeros((2, 2))
    for key, (num, den), obs, sd in (("la", ("La", "Yb"), [1.5, 2.5], [0.15, 0.5]),
                                     ("sm", ("Sm", "Yb"), [1.2, 1.4], [0.1, 0.2])):
        model = fast.ratio(num, den, normalised=True)[:, None]
        s = np.hypot(np.array(sd) / obs, 0.1)
        # scipy.stats.lognorm: ln X ~ N(ln scale, s^2)
        expected += stats.lognorm(s, scale=model).logpdf(obs)
    np.testing.assert_allclose(got, expected, rtol=1e-10)
    # the fast ratios are those of the interval route within its stated accuracy
    np.testing.assert_allclose(fast.ratio("La", "Yb", normalised=True),
                               pooled.ratio("La", "Yb", normalised=True), rtol=0.02)


@pytest.mark.parametrize("column, value, rule", [
    ("la_yb_cn", "0", "must be > 0 and <= 1000"),
    ("la_yb_sigma_cn", "-1", "must be > 0"),
    ("la_yb_cn", "2000", "must be > 0 and <= 1000"),
])
def test_table_rules(tmp_path, column, value, rule):
    path = tmp_path / "ree.csv"
    rows = {"sample": "a", "la_yb_cn": "1.5", "la_yb_sigma_cn": "0.1"} | {column: value}
    path.write_text(",".join(rows) + "\n" + ",".join(rows.values()) + "\n")
    with pytest.raises(InputError, match=rf"ree.csv, line 2, column '{column}': value .*{rule}"):
        RareEarthRatios.from_spec({"kind": "rare_earths", "file": "ree.csv"}, base_dir=tmp_path)


def test_options_are_checked(tmp_path):
    (tmp_path / "ree.csv").write_text("sample,la_yb_cn,la_yb_sigma_cn\na,1.5,0.1\n")
    spec = {"kind": "rare_earths", "file": "ree.csv"}
    with pytest.raises(InputError, match="source"):
        RareEarthRatios.from_spec(spec | {"source": "pyrolite"}, base_dir=tmp_path)
    with pytest.raises(InputError, match="transition"):
        RareEarthRatios.from_spec(spec | {"transition": [3.0, 2.5]}, base_dir=tmp_path)
    block = RareEarthRatios.from_spec(spec | {"transition": [2.4, 2.9]}, base_dir=tmp_path)
    assert block.transition == (2.4, 2.9)


TP = np.array([1250.0, 1350.0, 1450.0, 1550.0, 1650.0])[:, None, None]
LIDS = np.array([0.0, 30.0, 60.0, 75.0, 85.0, 100.0, 120.0])[None, :, None]
WATER = np.array([0.0, 300.0, 1000.0])[None, None, :]


@pytest.mark.parametrize("region, tolerance", [
    # column: within 1 % of the interval route at 256 intervals (largest found: 0.94 %,
    # wet sources whose melt refreezes near the top, where the fast route takes the
    # exact largest F and the intervals the nearest edge)
    ("column", 0.01),
    # triangle: the garnet range of hot mantle melting from the model base (onset near
    # 10 GPa) is the hardest for 6 Gauss nodes: up to 6 % in Lu at Tp 1650, lid 95-100
    # km; the 12-interval default route errs by up to 2 % there
    ("triangle", 0.065),
])
def test_fast_route_matches_the_interval_route(region, tolerance):
    res = melt_column(TP, LIDS, water=WATER, melting_region=region)
    fast = fast_trace_elements(res)
    fine = pooled_trace_elements(res, num=256)
    np.testing.assert_allclose(fast.melt, fine.melt, rtol=tolerance)
    m = fast.melt_mass[..., None]  # mass balance holds exactly in the fast route too
    np.testing.assert_allclose(m * fast.melt + (1 - m) * fast.residue, fast.source, rtol=1e-9)


def test_recovery_with_rare_earths_and_crust():
    # simulate crust + REE ratios from a known Tp and lid, fit, and the 95 % intervals
    # cover the truth (cheap sampler settings as in tests/test_recovery.py)
    from lidmelt import demo_data, inversion
    from lidmelt.inversion.observations import CrustalThickness

    study = inversion.Study.from_file(demo_data.study_path()).with_sampler(
        ess_target=400, tau_multiple=40, walkers=32, check_interval=100)
    crust = [b for b in study.observations if isinstance(b, CrustalThickness)]
    ree = RareEarthRatios.from_frame(pd.DataFrame({
        "sample": [f"s{k}" for k in range(6)], "la_yb_cn": np.full(6, 1.0),
        "la_yb_sigma_cn": np.full(6, 0.1), "sm_yb_cn": np.full(6, 1.0),
        "sm_yb_sigma_cn": np.full(6, 0.1)}), model_error=0.05)
    truth = (1400.0, 46.0, 0.0)
    base = study.with_observations([*crust, ree])
    column = inversion.LogPosterior(base).column(np.array([truth]))
    rng = np.random.default_rng(77)
    simulated = base.with_observations(b.simulate(column, rng) for b in base.observations)
    posterior = inversion.fit(simulated, seed=3, quiet=True)
    summary = posterior.summary().set_index("parameter")
    for name, value in zip(("potential_temperature", "lithosphere_thickness"), truth[:2],
                           strict=True):
        row = summary.loc[name]
        assert row["q2.5"] <= value <= row["q97.5"], (name, row.to_dict())


def test_fit_panels_draw_ratios_on_a_plain_log_axis_and_the_pattern_band():
    from lidmelt.inversion.results import figures
    from matplotlib.figure import Figure

    block = RareEarthRatios.from_frame(_frame(dy_yb_cn=[1.1, 1.3], dy_yb_sigma_cn=[0.1, 0.1]),
                                       model_error=0.1)
    rng = np.random.default_rng(5)
    column = melt_column(rng.uniform(1350.0, 1450.0, 40), rng.uniform(30.0, 70.0, 40))
    assert [p.key for p in block.panels()] == ["value", "dy_yb"]
    fig = Figure()
    for panel in block.panels():
        ax = fig.add_subplot()
        figures._draw_fit_panel(ax, **figures._fit_panel(block, panel, column, {}))
        assert ax.get_yscale() == "log"
        labels = [t.get_text() for t in ax.get_yticklabels(minor=True)
                  + ax.get_yticklabels()]
        assert labels and not any("10^" in t or "times" in t for t in labels)
        legend = [t.get_text() for t in ax.get_legend().get_texts()]
        assert any("model error 10 % (relative)" in t for t in legend)  # not "0.1 cn"
    (pattern,) = block.pattern_panels(column)
    assert pattern.items == ("La", "Ce", "Nd", "Sm", "Eu", "Gd", "Dy", "Er", "Yb", "Lu")
    # CI chondrite, Sun & McDonough 1989, Table 1 (ppm), as quoted by the reference
    # libraries pyrolite (Chondrite_SM89) and georefdatar
    ci = np.array([0.237, 0.612, 0.467, 0.153, 0.058, 0.2055, 0.254, 0.1655, 0.170, 0.0254])
    melt = fast_trace_elements(column).melt
    np.testing.assert_allclose(pattern.draws, melt / ci, rtol=1e-9)
    ax = fig.add_subplot()
    figures._draw_pattern_panel(ax, pattern, title="pattern")
    median = ax.get_lines()[0].get_ydata()
    np.testing.assert_allclose(median, np.median(melt / ci, axis=0), rtol=1e-12)
    assert ax.get_yscale() == "log"
    # Light REE depleted relative to heavy in melts of a depleted source (common practice)
    assert median[0] < median[-1]


@pytest.mark.parametrize("region", ["column", "triangle"])
def test_fast_route_blocks_subsets_and_shapes_agree_with_one_pass(region):
    # more points than one block (1024), in a 2-D shape: the blocks, an element subset
    # and the sigma-only table read give the numbers of the whole set, element by element
    from lidmelt.forward import _aligned
    from lidmelt.forward.trace import fast

    rng = np.random.default_rng(11)
    tp, lid = rng.uniform(1250.0, 1650.0, (3, 700)), rng.uniform(0.0, 150.0, (3, 700))
    res = melt_column(tp, lid, water=rng.choice([0.0, 400.0], (3, 700)),
                      melting_region=region)
    whole = fast_trace_elements(res)
    assert whole.melt.shape == (3, 700, 10) and whole.melt_mass.shape == (3, 700)
    # a few points on their own (one block) give the same as within the blocks (the
    # third row's lie in the second block)
    alone = fast_trace_elements(melt_column(tp[:, :5], lid[:, :5], water=res.water[:, :5],
                                            melting_region=region))
    np.testing.assert_allclose(alone.melt, whole.melt[:, :5], rtol=1e-12)
    np.testing.assert_allclose(alone.residue, whole.residue[:, :5], rtol=1e-9, atol=1e-15)
    some = fast_trace_elements(res, elements=("Yb", "La"))
    assert some.elements == ("La", "Yb")  # ELEMENTS order, whatever the order asked
    np.testing.assert_allclose(some.melt, whole.melt[..., [0, 8]], rtol=1e-12)
    np.testing.assert_allclose(some.ratio("La", "Yb", normalised=True),
                               whole.ratio("La", "Yb", normalised=True), rtol=1e-12)
    # the sigma-only read equals F from the full corner states
    points = fast._Points.of(res)
    pressure = np.linspace(points.top, np.maximum(points.onset, points.top), 5)
    c = _aligned.corner_states(points.param, points.table,
                               (points.flats[:, None], points.weights[:, None]),
                               points.onset, np.minimum(pressure, points.onset))
    full = np.einsum("k...,k...->...", c.weights,
                     points.param.dry_fraction(c.sigma, c.pressure)) * points.trust
    np.testing.assert_allclose(points.fractions(pressure), full, rtol=0, atol=1e-15)
    with pytest.raises(ValueError, match="elements"):
        fast_trace_elements(res, elements=("La", "Pr"))


def test_user_given_source_from_a_study_file(tmp_path):
    # a source given as a TOML table of the ten elements in ppm is the model's source:
    # each element melts on its own and linearly in C0, so the pooled La/Yb scales with
    # the source's La/Yb exactly (linearity of Shaw 1970 fractional melting)
    from lidmelt import inversion
    from lidmelt.forward.trace import ELEMENTS, source_composition

    dmm = {e: float(v) for e, v in zip(ELEMENTS, source_composition("workman_hart_2005"),
                                       strict=True)}
    given = dmm | {"La": 2.0 * dmm["La"]}
    (tmp_path / "crust.csv").write_text("site,thickness_km,thickness_sigma_km\nA,7.0,0.5\n")
    (tmp_path / "ree.csv").write_text("sample,la_yb_cn,la_yb_sigma_cn\na,1.5,0.1\n")
    table = ", ".join(f"{e} = {v!r}" for e, v in given.items())
    (tmp_path / "study.toml").write_text(
        '[study]\nname = "t"\n[parameters]\npotential_temperature = { value = 1400.0 }\n'
        'lithosphere_thickness = { prior = "uniform", min = 10.0, max = 100.0 }\n'
        '[[observations]]\nkind = "crustal_thickness"\nfile = "crust.csv"\n'
        f'[[observations]]\nkind = "rare_earths"\nfile = "ree.csv"\nsource = {{ {table} }}\n')
    study = inversion.Study.from_file(tmp_path / "study.toml")
    block = study.observations[1]
    assert block.source == given and "user-given source: La 0.384" in block.describe()
    reference = RareEarthRatios.from_frame(block.data, model_error=0.1)
    column = melt_column(np.array([1350.0, 1450.0]), np.array([10.0, 60.0]))
    np.testing.assert_allclose(block.predict(column)["value"],
                               2.0 * reference.predict(column)["value"], rtol=1e-12)


@pytest.mark.parametrize("source, message", [
    ({"La": 0.2}, "gives no value for Ce, Nd"),
    ({"La": 0.2, "Pr": 0.1}, "unknown element 'Pr'"),
    ("dmm", "unknown source 'dmm'"),
    (3.0, "must be a source name"),
])
def test_user_given_source_is_checked(source, message):
    from lidmelt.forward.trace import ELEMENTS

    with pytest.raises(InputError, match=message):
        RareEarthRatios.from_frame(_frame(), source=source)
    full = {e: 0.1 for e in ELEMENTS} | {"Yb": -1.0}
    with pytest.raises(InputError, match="Yb must be a concentration > 0"):
        RareEarthRatios.from_frame(_frame(), source=full)
