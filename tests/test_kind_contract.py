"""The contract every registered observation kind keeps (KINDS x PARAMETERIZATIONS).

A new kind registered in `inversion.observations.KINDS` is run through all of this
without a line added here: a block is built from the kind's own `column_rules` (a value
inside each rule's range) and `example_options`. What is checked is the interface the
sampler, the comparison, the figures and the survey rely on, not the science of a kind
(each kind's own tests check that against published values).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lidmelt import forward
from lidmelt.inversion import InputError
from lidmelt.inversion.observations import KINDS, ObservationSet, Panel
from lidmelt.inversion.observations.tables import (
    RENAMED_COLUMNS,
    ColumnRule,
    check_row,
    sigma_column,
)
from lidmelt.inversion.results import figures
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

PARAMETERIZATIONS = list(forward.PARAMETERIZATIONS)
ROWS = 3
# Tp (degC) and lid (km): two melting columns and one that makes no melt (lid below the
# onset), where every kind must still give a finite likelihood (the no-melt penalty).
TP = np.array([1350.0, 1450.0, 1300.0])
LID = np.array([20.0, 45.0, 150.0])


def _inside(rule: ColumnRule) -> float:
    """A value well inside the rule's range."""
    if rule.low is not None and rule.high is not None:
        return rule.low + 0.3 * (rule.high - rule.low)
    if rule.low is not None:
        return rule.low + 1.0
    return 0.5 if rule.high is None else rule.high - 1.0


def _outside(rule: ColumnRule) -> float | None:
    """A value that breaks the rule's range, or None for a rule without one."""
    if rule.high is not None:
        return rule.high + abs(rule.high) + 1.0
    return None if rule.low is None else rule.low - 1.0


def _frame(kind: type[ObservationSet]) -> pd.DataFrame:
    table = kind.example_table(ROWS)  # a kind whose columns must agree gives its own
    if table is not None:
        return table
    required, optional = kind.column_rules(**kind.example_options)
    rules = list(required) + [rule for group in optional for rule in group]
    return pd.DataFrame({rule.name: [_inside(rule) if rule.numeric else f"r{k}"
                                     for k in range(ROWS)] for rule in rules})


def _block(kind) -> ObservationSet:
    return kind.from_frame(_frame(kind), file="contract.csv", **kind.example_options)


def _column(parameterization: str, tp=TP, lid=LID):
    return forward.melt_column(tp, lid, parameterization=parameterization)


@pytest.fixture(scope="module", params=PARAMETERIZATIONS)
def parameterization(request):
    return request.param


@pytest.mark.parametrize("kind", list(KINDS.values()), ids=list(KINDS))
def test_kind_is_registered_under_its_own_name(kind):
    assert KINDS[kind.kind] is kind
    assert kind.sigma_column == sigma_column(kind.value_column)  # the one naming scheme
    assert not set(RENAMED_COLUMNS) & {r.name for r in kind.column_rules(
        **kind.example_options)[0]}


@pytest.mark.parametrize("kind", list(KINDS.values()), ids=list(KINDS))
def test_kind_likelihood_predictions_and_simulation(kind, parameterization):
    block = _block(kind)
    column = _column(parameterization)
    parameters = {"potential_temperature": TP, "lithosphere_thickness": LID}
    pointwise = block.pointwise_log_likelihood(column, parameters=parameters)
    assert pointwise.shape == (len(TP), ROWS)
    assert np.all(np.isfinite(pointwise))
    np.testing.assert_allclose(block.log_likelihood(column, parameters=parameters),
                               pointwise.sum(axis=-1), rtol=1e-12)
    predicted = block.predict(column)
    assert all(np.shape(v) == (len(TP), ROWS) for v in predicted.values())
    one = _column(parameterization, TP[:1], LID[:1])
    simulated = block.simulate(one, np.random.default_rng(3))
    assert type(simulated) is kind and len(simulated) == ROWS
    assert np.all(np.isfinite(simulated.values))
    assert not np.array_equal(simulated.values, block.values)  # values were drawn
    text = block.describe()
    assert text and "\n" not in text and "contract.csv" in text


@pytest.mark.parametrize("kind", list(KINDS.values()), ids=list(KINDS))
def test_kind_panels_draw_on_a_figure(kind, parameterization):
    block = _block(kind)
    column = _column(parameterization, TP[:2], LID[:2])
    panels = block.panels()
    assert panels and all(isinstance(p, Panel) for p in panels)
    observed = block.observed()
    fig = Figure(figsize=(8, 3 * len(panels) + 3))
    for k, panel in enumerate(panels):
        assert observed[panel.key].shape == observed[panel.sigma_key].shape == (ROWS,)
        assert f"({forward.quantities.unit_text(panel.unit)})" in panel.label
        points, weights = block.panel_draws(column, panel.key)
        assert points.shape == weights.shape and points.shape[:2] == (2, ROWS)
        np.testing.assert_allclose(weights.sum(axis=-1), 1.0, rtol=1e-9)
        ax = fig.add_subplot(len(panels) + 1, 1, k + 1)
        figures._draw_fit_panel(ax, **figures._fit_panel(block, panel, column, {}))
        assert ax.yaxis_inverted() == panel.invert
    # the P-T parts, for kinds that observe P-T; None otherwise
    pt = block.pt_observed()
    joint = figures._joint_data(block, column, {})
    if pt is not None:
        assert pt["pressure"].shape == pt["pressure_sigma"].shape == (ROWS,)
        figures._draw_observed_pt(fig.add_subplot(len(panels) + 1, 2, 2 * len(panels) + 1),
                                  [block], [{}])
    if joint is not None:
        place = figures._draw_joint_panel(fig.add_subplot(len(panels) + 1, 2,
                                                          2 * len(panels) + 2), block, **joint)
        FigureCanvasAgg(fig).draw()
        place(fig.canvas.get_renderer())
    FigureCanvasAgg(fig).draw()


@pytest.mark.parametrize("kind", list(KINDS.values()), ids=list(KINDS))
def test_kind_comparison_panels_read_simulated_data(kind, parameterization):
    block = _block(kind)
    one = _column(parameterization, TP[:1], LID[:1])
    simulated = block.simulate(one, np.random.default_rng(5))
    for panel in block.panels():  # the comparison figure reads these keys of replicas
        assert simulated.observed()[panel.key].shape == (ROWS,)


@pytest.mark.parametrize("kind", list(KINDS.values()), ids=list(KINDS))
def test_kind_refuses_an_unknown_column(kind):
    first = next(rule.name for rule in kind.column_rules(**kind.example_options)[0]
                 if rule.numeric)
    frame = _frame(kind).assign(**{first + "x": 1.0})
    with pytest.raises(InputError, match=rf"contract.csv, column '{first}x': "
                       rf"unknown column .*did you mean '{first}'\?"):
        kind.from_frame(frame, file="contract.csv", **kind.example_options)
    kind.from_frame(_frame(kind).assign(note="a remark"), **kind.example_options)


def _site_row(groups, kind=None) -> dict[str, str]:
    table = None if kind is None else kind.example_table(1)
    if table is not None:
        return {rule.name: repr(float(table[rule.name].iloc[0])) if rule.name in table else ""
                for group in groups for rule in group}
    return {rule.name: repr(_inside(rule)) for group in groups for rule in group}


@pytest.mark.parametrize("kind", list(KINDS.values()), ids=list(KINDS))
def test_kind_site_rules(kind, tmp_path):
    groups = kind.site_columns()
    assert groups and groups[0], "the first group is the kind's main measurement"
    path = tmp_path / "sites.csv"
    values = check_row(_site_row(groups, kind), groups, file=path, line=7, required=True)
    block = kind.from_site("A", values, file=path, line=7, **kind.example_options)
    assert len(block) == 1 and block.lines == (7,)
    assert check_row({r.name: "" for g in groups for r in g}, groups, file=path,
                     line=7) == {}  # a site without this measurement
    ranged = [rule for group in groups for rule in group if _outside(rule) is not None]
    assert ranged, "every kind has at least one range rule (e.g. a sigma > 0)"
    base = _site_row(groups, kind)
    for rule in ranged:
        if any(not base.get(name) for name in rule.requires):
            continue  # a column allowed only beside another this row leaves empty
        row = base | {rule.name: repr(_outside(rule))}
        with pytest.raises(InputError) as info:
            check_row(row, groups, file=path, line=7, required=True)
        assert str(info.value).startswith(f"{path}, line 7, column '{rule.name}': value ")
    for group in groups[1:]:  # an extra without the main measurement is refused
        row = _site_row(groups) | {r.name: "" for r in groups[0]}
        with pytest.raises(InputError, match=rf"{path.name}, line 7, column '\w+': '\w+' "
                           rf"needs the measurement it goes with; give {groups[0][0].name}"):
            check_row(row, groups, file=path, line=7)
