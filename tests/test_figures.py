"""What the figures show: labels inside, priors, MAP, bands, lids, units in legends."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from lidmelt import demo_data, inversion
from lidmelt.forward import figure_style as style
from lidmelt.forward import melt_column
from lidmelt.forward._pt_figure import write_column_figure
from lidmelt.inversion.results import figures
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.text import Text
from scipy import stats

DATA = Path(__file__).parent / "data"
_UNITS = ("°C", "km", "GPa", "ppm")


@pytest.fixture(scope="module")
def two():
    """Two free parameters (Tp, lid), pressures without temperatures."""
    study = inversion.Study.from_file(DATA / "pressure_only" / "study.toml")
    return inversion.fit(study, quiet=True)


@pytest.fixture(scope="module")
def demo():
    """Three free parameters, P-T data equilibrated along the melting path."""
    study = inversion.Study.from_file(demo_data.study_path())
    return inversion.fit(study.with_sampler(walkers=16, ess_target=300, tau_multiple=20,
                                            check_interval=50), quiet=True)


def _inside(fig: Figure, artist) -> bool:
    box = artist.get_window_extent()
    frame = fig.bbox
    return (box.x0 >= frame.x0 - 0.5 and box.y0 >= frame.y0 - 0.5
            and box.x1 <= frame.x1 + 0.5 and box.y1 <= frame.y1 + 0.5)


def test_corner_of_two_parameters_keeps_every_axis_label_inside(two):
    fig = figures.corner_figure(two)
    FigureCanvasAgg(fig).draw()
    labels = [ax.xaxis.label for ax in fig.axes] + [ax.yaxis.label for ax in fig.axes]
    labels = [t for t in labels if t.get_text()]
    assert {t.get_text() for t in labels} == {"$T_p$ (°C)", "lid (km)"}
    assert all(_inside(fig, t) for t in labels)


def test_corner_draws_each_prior_and_keeps_the_median_line_visible(two):
    fig = figures.corner_figure(two)
    axes = np.array(fig.axes).reshape(2, 2)
    summary = two.summary().set_index("parameter")
    for j, (name, low, high) in enumerate([("potential_temperature", 1200.0, 1700.0),
                                           ("lithosphere_thickness", 0.0, 100.0)]):
        ax = axes[j, j]
        prior, = [ln for ln in ax.get_lines() if ln.get_color() == style.PRIOR]
        x = np.asarray(prior.get_xdata())
        # uniform prior density 1 / (max - min) (scipy.stats), on the histogram's scale
        expected = stats.uniform.pdf(x, loc=low, scale=high - low)
        np.testing.assert_allclose(prior.get_ydata(), expected, rtol=1e-12)
        median = [ln for ln in ax.get_lines() if ln.get_linestyle() == "-"
                  and ln.get_color() == style.INK and len(ln.get_xdata()) == 2]
        assert median and median[0].get_xdata()[0] == pytest.approx(summary.loc[name,
                                                                                "median"])
        # the MAP is a marker on the top edge, not a second full-height line
        map_marks = [ln for ln in ax.get_lines() if ln.get_color() == style.MAP]
        assert [ln.get_marker() for ln in map_marks] == ["v"]
        assert map_marks[0].get_linestyle() == "None"


def test_pressure_only_data_are_bands_not_points_at_a_made_up_temperature(two):
    fig = figures.pt_figure(two)
    ax = fig.axes[0]
    block = next(b for b in two.study.observations if b.kind == "melting_pressure")
    bands = [p for p in ax.patches
             if np.allclose(p.get_facecolor()[:3], _rgb(style.INK))]
    assert len(bands) == len(block)
    lows = sorted(p.get_y() for p in bands)
    np.testing.assert_allclose(lows, np.sort(block.values - block.sigma))
    assert not [c for c in ax.containers if hasattr(c, "has_xerr")]  # no error-bar points


def test_lid_base_and_lherzolite_out_look_different(demo):
    ax = figures.pt_figure(demo).axes[0]
    lines = {ln.get_label(): ln for ln in ax.get_lines()}
    lid = next(ln for label, ln in lines.items() if label.startswith("lid base"))
    lherz = lines["lherzolite-out"]
    assert lid.get_color() != lherz.get_color()
    assert lid.get_linewidth() > lherz.get_linewidth()
    assert len(set(lid.get_ydata())) == 1 and len(set(lherz.get_ydata())) > 1
    assert style.LID_LINE["ls"] != style.CURVES["lherzolite-out"]["ls"]  # dots vs dashes


def test_every_number_in_a_legend_has_its_unit(demo, two):
    for posterior in (demo, two):
        for make in (figures.pt_figure, figures.fit_figure):
            for ax in make(posterior).axes:
                legend = ax.get_legend()
                for text in [] if legend is None else legend.get_texts():
                    label = text.get_text()
                    plain = re.sub(r"\d+ %|H\$_2\$O|1σ|2-D", "", label)
                    if re.search(r"\d", plain):
                        assert any(u in label for u in _UNITS), label


def test_contour_labels_sit_inside_the_axes(demo):
    fig = figures.pt_figure(demo)
    FigureCanvasAgg(fig).draw()
    ax = fig.axes[0]
    labels = [t for t in ax.texts if isinstance(t, Text) and t.get_text().startswith("F =")]
    assert labels
    box = ax.get_window_extent()
    for t in labels:
        b = t.get_window_extent()
        assert box.x0 <= b.x0 and b.x1 <= box.x1 and box.y0 <= b.y0 and b.y1 <= box.y1


def test_title_offset_is_the_one_of_the_bold_path(demo):
    ax = figures.pt_figure(demo).axes[0]
    # \s: the title is wrapped to the axes' width, so a line may break anywhere here
    shown = float(re.search(r"solidus\soffset\s(−?[\d.]+)\s°C\s\(MAP\)", ax.get_title())
                  .group(1).replace("−", "-"))
    assert shown == pytest.approx(demo.map["solidus_offset"], abs=0.051)


def test_path_panel_shows_the_melt_weighted_spread_not_a_mean(demo):
    fig = figures.fit_figure(demo)
    block = next(b for b in demo.study.observations if b.kind == "melting_pressure")
    # each panel's title heads its legend (fit_figure)
    panel = next(ax for ax in fig.axes if ax.get_legend() is not None
                 and ax.get_legend().get_title().get_text().startswith(
                     f"{block.name}: melting pressure"))
    wide = max(panel.patches, key=lambda p: p.get_height())  # the 95 % band
    column = demo.logpost.column(demo.predictive_draws(200))
    path = column.path(num=block.path_points)
    weights = np.asarray(path.weight).ravel()
    pressures = np.asarray(path.pressure).ravel()
    # 95 % of the melt (over all draws) is made inside the band: numpy sum, not lidmelt
    inside = (pressures >= wide.get_y()) & (pressures <= wide.get_y() + wide.get_height())
    assert weights[inside].sum() / weights.sum() == pytest.approx(0.95, abs=0.03)
    assert "model error" in " ".join(t.get_text() for t in panel.get_legend().get_texts())


def test_weighted_quantiles_match_numpy_for_equal_weights():
    rng = np.random.default_rng(5)
    points = rng.normal(size=(400, 3, 5))
    got = figures._weighted_quantiles(points, np.ones_like(points), [0.1, 0.5, 0.9])
    want = np.quantile(np.moveaxis(points, 1, 0).reshape(3, -1), [0.1, 0.5, 0.9], axis=1)
    np.testing.assert_allclose(got, want, atol=0.02)


def test_column_plot_draws_each_path_against_its_own_lid(tmp_path, monkeypatch):
    seen = []
    monkeypatch.setattr("lidmelt.forward._pt_figure.save_figure_atomically",
                        lambda fig, path, **options: seen.append(fig))
    rows = []
    for lid in (0.0, 40.0, 70.0):
        col = melt_column(1450.0, lid)
        rows.append({"potential_temperature": 1450.0, "lithosphere_thickness": lid,
                     "water": 0.0, "active_upwelling": 1.0, "solidus_offset": 0.0,
                     "parameterization": "katz2003", "melting_region": "column",
                     "onset_depth": float(col.onset_depth),
                     "crustal_thickness": float(col.crustal_thickness)})
    write_column_figure(tmp_path / "pt.png", rows)
    panels = [ax for ax in seen[0].axes if ax.get_visible() and ax.get_lines()]
    assert len(panels) == 3
    for ax, lid in zip(panels, (0.0, 40.0, 70.0), strict=True):
        top = float(melt_column(1450.0, lid).top_pressure)
        thick = [ln for ln in ax.get_lines() if ln.get_linewidth() > 2.5]
        path, = [ln for ln in thick if ln.get_label().startswith("Tp")]
        x, y = (np.asarray(a, float) for a in path.get_data())
        assert y[np.isfinite(x)].min() == pytest.approx(top, abs=0.02)  # 400-point grid


def _column_figure(monkeypatch, lids, temperatures):
    seen = []
    monkeypatch.setattr("lidmelt.forward._pt_figure.save_figure_atomically",
                        lambda fig, path, **options: seen.append(fig))
    rows = []
    for lid in lids:
        for tp in temperatures:
            col = melt_column(tp, lid)
            rows.append({"potential_temperature": tp, "lithosphere_thickness": lid,
                         "water": 0.0, "active_upwelling": 1.0, "solidus_offset": 0.0,
                         "parameterization": "katz2003", "melting_region": "column",
                         "onset_depth": float(col.onset_depth),
                         "crustal_thickness": float(col.crustal_thickness)})
    write_column_figure(Path("pt.png"), rows)
    fig = seen[0]
    FigureCanvasAgg(fig).draw()
    return fig


@pytest.mark.parametrize("lids", [(30.0,), (0.0, 30.0, 60.0)])
def test_column_plot_is_page_wide_with_everything_inside(monkeypatch, lids):
    fig = _column_figure(monkeypatch, lids, (1300.0, 1400.0, 1500.0))
    assert fig.get_figwidth() == pytest.approx(178 / 25.4)  # docs/figures.md
    # one legend: under the panels, or in the grid's empty cell
    legend, = fig.legends + [ax.get_legend() for ax in fig.axes if ax.get_legend()]
    panels = [ax for ax in fig.axes if ax.get_visible() and ax.get_lines()]
    assert _inside(fig, legend)
    assert not any(legend.get_window_extent().overlaps(ax.get_tightbbox()) for ax in panels)
    for ax in panels:
        assert _inside(fig, ax.title) and _inside(fig, ax.xaxis.label)
        # the title fits over its own panel: it does not run into its neighbour's
        assert ax.title.get_window_extent().width <= ax.get_window_extent().width * 1.05


def _rgb(color: str):
    return tuple(int(color[i:i + 2], 16) / 255 for i in (1, 3, 5))


def test_corner_legend_names_each_thing_once(two):
    fig = figures.corner_figure(two)
    texts = [t.get_text() for legend in fig.legends for t in legend.get_texts()]
    # what each entry names, without its "(where it is drawn)" note
    things = [re.sub(r"\s*\(.*\)", "", t) for t in texts]
    assert len(things) == len(set(things)), texts
    assert sum(t.startswith("MAP") for t in texts) == 1


@pytest.mark.parametrize("case", ["two", "demo"])
def test_corner_legend_keeps_off_the_panels_and_their_titles(case, request):
    # the legend sits in the empty upper-right triangle, clear of every drawn panel and
    # of the summary line above each diagonal panel, and inside the figure
    fig = figures.corner_figure(request.getfixturevalue(case))
    FigureCanvasAgg(fig).draw()
    (legend,) = fig.legends
    box = legend.get_window_extent()
    assert _inside(fig, legend)
    assert not box.overlaps(fig._suptitle.get_window_extent())
    for ax in fig.axes:
        if not ax.get_visible() or not ax.axison or not ax.get_frame_on():
            continue  # corner's empty upper-right cells
        assert not box.overlaps(ax.get_window_extent()), ax.get_title()
        for text in (ax.title, *ax.texts):
            if text.get_text():
                assert not box.overlaps(text.get_window_extent()), text.get_text()


def _crowded_pt_panel(correlation: float, step: float):
    """Eight samples whose 1σ ellipses overlap their neighbours', on a diagonal with free
    room on both sides, as the joint P-T panel of fit.png draws them (invented data)."""
    from types import SimpleNamespace

    k = np.arange(8)
    observed = {"temperature": 1330.0 + 14.0 * k, "pressure": 1.75 + step * k,
                "temperature_sigma": np.full(8, 16.0), "pressure_sigma": np.full(8, 0.1),
                "correlation": np.full(8, correlation)}
    block = SimpleNamespace(name="crowded", ids=[f"SMP-{i:02d}" for i in k])
    fig = Figure(figsize=(figures.DOUBLE_COLUMN, 4.2), layout="constrained")
    ax = fig.subplots()
    # model dots spanning a wider box, so that there is room beside the diagonal
    t, p = np.meshgrid(np.linspace(1250.0, 1520.0, 12), np.linspace(0.9, 2.6, 12))
    place = figures._draw_joint_panel(ax, block, observed=observed, p=p.ravel(),
                                      t=t.ravel())
    FigureCanvasAgg(fig).draw()
    place(fig.canvas.get_renderer())
    fig.canvas.draw()
    return fig, ax


# step < 0: the samples climb to the right on the screen (pressure down), into the
# default spot of each label, up and to the right of its point
@pytest.mark.parametrize(("correlation", "step"), [(0.0, -0.09), (-0.6, -0.09), (0.6, 0.09)])
def test_sample_labels_keep_off_other_samples_ellipses(correlation, step):
    fig, ax = _crowded_pt_panel(correlation, step)
    renderer = fig.canvas.get_renderer()
    outlines = [ln for ln in ax.get_lines() if ln.get_linewidth() == pytest.approx(0.9)]
    labels = [t for t in ax.texts if t.get_text().startswith("SMP-")]
    assert len(outlines) == len(labels) == 8
    frame = ax.get_window_extent(renderer)
    boxes = [t.get_window_extent(renderer) for t in labels]
    for i, box in enumerate(boxes):
        # the room beside the diagonal holds every label: none need touch another
        # sample's ellipse (its path's extent on the screen), another label or the frame
        for j, outline in enumerate(outlines):
            if j != i:
                assert not box.overlaps(outline.get_window_extent(renderer)), (i, j)
        assert not any(box.overlaps(other) for other in boxes[i + 1:]), i
        assert frame.contains(box.x0, box.y0) and frame.contains(box.x1, box.y1), i
