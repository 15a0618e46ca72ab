"""Every figure pondsim writes, drawn on the demo and on a real weather file (pvlib's
TMY3 file 723170TYA.CSV, Greensboro NC), checked with matplotlib's renderer:

- no two pieces of text overlap (the title and the caution mark above all), and no text
  (tick labels, axis labels, legends) is clipped by the canvas;
- no legend covers a data point of a line or a bar;
- every axis that shows numbers has a label with its unit in brackets; amount axes
  start at zero;
- each policy has the same colour in every figure, and the colours are those of the
  Okabe & Ito (2008) palette (Color Universal Design, https://jfly.uni-koeln.de/color/);
- the scenario's site name is in every title and the weather station's name only in the
  footer as the weather source.
"""

from __future__ import annotations

import re
from pathlib import Path

import matplotlib
import numpy as np
import pandas as pd
import pytest

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
from matplotlib.colors import to_rgb  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.patches import Rectangle  # noqa: E402
from matplotlib.text import Text  # noqa: E402

from pondsim.results import figstyle as fs  # noqa: E402
from pondsim.scenario import load_scenario, relocate_text  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"
#: Okabe & Ito (2008), Color Universal Design, the eight colours as published.
OKABE_ITO = {"#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7",
             "#000000"}
ALL_FIGURES = {"weather.png", "density.png", "monthly_productivity.png", "forcing.png",
               "trajectories.png", "seasonal_yield.png", "risk_calendar.png",
               "exceedance.png", "monthly_bands.png", "sensitivity.png",
               "monthly_drivers.png"}


def _real_scenario(folder: Path) -> Path:
    """The demo scenario moved onto pvlib's Greensboro TMY3 file, with its own names."""
    import pvlib

    tmy3 = Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"
    scenario = load_scenario(DEMO)
    text = relocate_text(DEMO.read_text(encoding="utf-8"), scenario, folder)
    text = re.sub(r'path = "[^"]+"', f'path = "{tmy3.as_posix()}"', text, count=1)
    text = text.replace('name = "Kestrel Flats (invented)"', 'name = "Piedmont test plot"')
    for key, value in (("latitude", "36.1"), ("longitude", "-79.9"), ("elevation_m", "270"),
                       ("utc_offset_h", "-5")):
        text = re.sub(rf"^{key} = .*$", f"{key} = {value}", text, count=1, flags=re.M)
    path = folder / "real.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _draw_all(scenario_path: Path, out: Path, monkeypatch) -> dict:
    """Write every figure of weather/run/compare/outlook/report for one scenario with
    ``plt.close`` disabled; ``{file name: Figure}``."""
    from pondsim.operations.crash import CrashModel
    from pondsim.operations.simulate import crash_model_of, load_forcing
    from pondsim.pond import light, thermal
    from pondsim.report.assemble import _single_k_view, monthly_drivers
    from pondsim.results import figures
    from pondsim.results.figstyle import context_line
    from pondsim.results.tables import monthly_forcing_table
    from pondsim.studies.compare import season_table
    from pondsim.studies.outlook import monthly_bands, run_outlook

    monkeypatch.setattr(plt, "close", lambda *a, **k: None)
    monkeypatch.setitem(matplotlib.rcParams, "figure.max_open_warning", 0)
    before = set(plt.get_fignums())
    scenario = load_scenario(scenario_path)
    forcing, meta = load_forcing(scenario)
    par = light.par_at_surface(forcing, refractive_index=scenario.pond.refractive_index)
    water = thermal.water_temperature(forcing, scenario.pond,
                                      upper_limit_c=scenario.strain.t_max_c)
    table = monthly_forcing_table(forcing, par, water, scenario.pond)
    context = context_line(scenario.site.name, scenario.study_name, scenario.strain.name)
    figures.weather_figure(table, water, forcing, context, out / "weather.png", par=par,
                           source=f"{scenario.weather.path.name} ({meta.get('name')})")
    ds, _ = run_outlook(scenario, n_years=2, n_draws=2, members=1, seed=3, progress=False)
    crash = crash_model_of(scenario) or CrashModel()
    view = _single_k_view(ds)
    figures.run_figures(ds, out)
    figures.compare_figures(view, season_table(ds), crash, out)
    # A Sobol table with the scenario's uncertain parameters (values only for layout).
    names = [u.parameter for u in scenario.uncertainty.parameters]
    sens = pd.DataFrame({"first_order": 0.3, "first_order_low": 0.1, "first_order_high": 0.5,
                         "total": 0.4, "total_low": 0.2, "total_high": 0.6},
                        index=pd.Index(names, name="parameter"))
    figures.outlook_figures(ds, monthly_bands(ds), sens, out, policy="daily 15 %")
    figures.drivers_figure(monthly_drivers(ds), scenario.strain, out / "monthly_drivers.png",
                           context=fs.context_of(ds), source=fs.source_of(ds))
    drawn = {plt.figure(n).get_label(): plt.figure(n) for n in set(plt.get_fignums()) - before}
    return {"figures": drawn, "ds": ds, "scenario": scenario, "meta": meta}


@pytest.fixture(scope="module")
def drawn(tmp_path_factory):
    mp = pytest.MonkeyPatch()
    try:
        folder = tmp_path_factory.mktemp("figures")
        demo = folder / "demo"
        real = folder / "real"
        demo.mkdir()
        real.mkdir()
        scenario = load_scenario(DEMO)
        demo_path = folder / "demo.toml"
        demo_path.write_text(relocate_text(DEMO.read_text(encoding="utf-8"), scenario,
                                           folder), encoding="utf-8")
        out = {"demo": _draw_all(demo_path, demo, mp),
               "real": _draw_all(_real_scenario(folder), real, mp)}
    finally:
        mp.undo()
    yield out
    plt.close("all")


def _tick_labels(fig):
    """Tick labels that are drawn (inside the view limits, visible)."""
    labels = []
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        for axis in (ax.xaxis, ax.yaxis):
            if not axis.get_visible():  # e.g. the shared x axis of a twin
                continue
            for tick in axis._update_ticks():  # the ticks matplotlib draws
                for lab in (tick.label1, tick.label2):
                    if lab.get_visible() and lab.get_text().strip():
                        labels.append(lab)
    return labels


def _texts(fig):
    """Every drawn piece of text of the figure: tick labels and all other Text artists."""
    ticks = _tick_labels(fig)
    every_tick = set()
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            for tick in axis.get_major_ticks() + axis.get_minor_ticks():
                every_tick |= {id(tick.label1), id(tick.label2)}
    others = []
    for t in fig.findobj(Text):
        if id(t) in every_tick or not t.get_visible() or not t.get_text().strip():
            continue
        if t.axes is not None and not t.axes.get_visible():
            continue
        others.append(t)
    return ticks + others


def _legends(fig):
    from matplotlib.legend import Legend

    return [lg for lg in fig.findobj(Legend) if lg.get_visible()]


def _by_gid(fig, gid):
    return [t for t in fig.findobj(Text) if t.get_gid() == gid and t.get_text().strip()]


def _overlap(a, b, tol=0.5) -> bool:
    return (min(a.x1, b.x1) - max(a.x0, b.x0) > tol) and (min(a.y1, b.y1) - max(a.y0, b.y0)
                                                          > tol)


def _numeric(text: str) -> bool:
    try:
        float(text.replace("\u2212", "-").replace(",", ""))
    except ValueError:
        return False
    return True


CASES = [(w, name) for w in ("demo", "real") for name in sorted(ALL_FIGURES)]


@pytest.mark.parametrize("weather", ["demo", "real"])
def test_every_figure_is_drawn(drawn, weather):
    assert set(drawn[weather]["figures"]) == ALL_FIGURES


@pytest.mark.parametrize(("weather", "name"), CASES)
def test_text_neither_overlaps_nor_leaves_the_canvas(drawn, weather, name):
    fig = drawn[weather]["figures"][name]
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    canvas = fig.bbox
    texts = _texts(fig)
    boxes = [(t, t.get_window_extent(renderer)) for t in texts]
    for t, box in boxes:  # nothing clipped: every text inside the canvas (1 px slack)
        assert (box.x0 >= -1 and box.y0 >= -1 and box.x1 <= canvas.x1 + 1
                and box.y1 <= canvas.y1 + 1), (name, t.get_text(), box, canvas)
    assert len(_by_gid(fig, "title")) == 1
    caution = [t for t in texts if t.get_gid() == "caution"]
    assert len(caution) == 1 and "not guarantees" in caution[0].get_text()
    # The caution mark sits in the bottom strip, below every axes and legend.
    cbox = caution[0].get_window_extent(renderer)
    for ax in fig.axes:
        if ax.get_visible():
            assert ax.get_tightbbox(renderer).y0 >= cbox.y1 - 0.5, (name, ax)
    for i, (a, abox) in enumerate(boxes):
        for b, bbox in boxes[i + 1:]:
            assert not _overlap(abox, bbox), (name, a.get_text(), b.get_text())


@pytest.mark.parametrize(("weather", "name"), CASES)
def test_legends_cover_no_data_and_axes_carry_units(drawn, weather, name):
    fig = drawn[weather]["figures"][name]
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    legends = [lg.get_window_extent(renderer) for lg in _legends(fig)]
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        for line in ax.get_lines():
            if not line.get_visible():
                continue
            xy = line.get_transform().transform(np.asarray(line.get_xydata(), dtype=float))
            xy = xy[np.isfinite(xy).all(axis=1)]
            for box in legends:
                inside = ((xy[:, 0] > box.x0) & (xy[:, 0] < box.x1) & (xy[:, 1] > box.y0)
                          & (xy[:, 1] < box.y1))
                assert not inside.any(), (name, line.get_label())
        for patch in ax.patches:
            if isinstance(patch, Rectangle) and patch.get_height() != 0:
                pbox = patch.get_window_extent(renderer)
                for box in legends:
                    assert not _overlap(pbox, box, tol=1.0), (name, "legend covers a bar")
        # Units: an axis that shows numbers says what they are and in which unit.
        for axis, label in ((ax.xaxis, ax.get_xlabel()), (ax.yaxis, ax.get_ylabel())):
            shown = [lab.get_text() for t in axis._update_ticks() if axis.get_visible()
                     for lab in (t.label1, t.label2)
                     if lab.get_visible() and lab.get_text()]
            if shown and all(_numeric(s) for s in shown):
                assert re.search(r"\[[^\]]+\]", label), (name, label, shown[:3])
        if ax.get_gid() == "amount":
            assert ax.get_ylim()[0] == 0.0, (name, ax.get_ylabel())


def _colour(artist):
    if isinstance(artist, Line2D):
        return to_rgb(artist.get_color())
    if hasattr(artist, "get_facecolor"):
        fc = np.asarray(artist.get_facecolor(), dtype=float).reshape(-1, 4)
        return tuple(fc[0, :3])
    raise AssertionError(artist)


def test_same_policy_same_colour_in_every_figure(drawn):
    for weather in ("demo", "real"):
        pols = [str(p) for p in drawn[weather]["ds"]["policy"].values]
        seen: dict[str, set] = {}
        figs_with: dict[str, set] = {}
        for name, fig in drawn[weather]["figures"].items():
            for artist in fig.findobj(lambda a: str(a.get_gid() or "").startswith("policy:")):
                policy = artist.get_gid().split(":", 1)[1]
                seen.setdefault(policy, set()).add(tuple(np.round(_colour(artist), 3)))
                figs_with.setdefault(policy, set()).add(name)
        assert set(seen) == set(pols)
        for i, p in enumerate(pols):
            assert seen[p] == {tuple(np.round(to_rgb(fs.policy_style(i)["color"]), 3))}, p
            # every figure that sets policies side by side draws each of them
            assert figs_with[p] == {"density.png", "monthly_productivity.png",
                                    "trajectories.png", "seasonal_yield.png",
                                    "exceedance.png", "monthly_bands.png"}, p
        colours = {fs.policy_style(i)["color"].upper() for i in range(len(pols))}
        assert colours <= OKABE_ITO  # Okabe & Ito (2008)
        assert len(colours) == len(pols)


@pytest.mark.parametrize("weather", ["demo", "real"])
def test_titles_name_the_scenario_and_the_weather_only_as_source(drawn, weather):
    scenario = drawn[weather]["scenario"]
    station = str(drawn[weather]["meta"].get("name") or "")
    for name, fig in drawn[weather]["figures"].items():
        title = _by_gid(fig, "title")[0].get_text()
        assert scenario.site.name in title and scenario.study_name in title, (name, title)
        if station and station not in scenario.site.name:
            assert station not in title, (name, title)
            footer = _by_gid(fig, "caution")[0].get_text()
            assert station in footer, (name, footer)


def test_exceedance_marks_p50_and_p90(drawn):
    """P90 is the yield reached or exceeded with probability 0.9: the 10th percentile of
    the members (the exceedance convention of project finance, common practice)."""
    from pondsim.results.figures_outlook import annual_yield_t_ha, exceedance_value

    assert exceedance_value([1, 2, 3, 4, 5, 6, 7, 8, 9, 10], 90) == pytest.approx(1.9)
    assert exceedance_value(np.arange(1.0, 12.0), 50) == 6.0
    fig = drawn["demo"]["figures"]["exceedance.png"]
    ax = fig.axes[0]
    marks = [t.get_text() for t in ax.texts]
    assert "P50" in marks and "P90" in marks
    annual = annual_yield_t_ha(drawn["demo"]["ds"])
    legend = [t.get_text() for t in _legends(fig)[0].get_texts()]
    p = str(drawn["demo"]["ds"]["policy"].values[0])
    p90 = float(np.percentile(annual.sel(policy=p).values, 10))
    assert any(t.startswith(p) and f"P90 {p90:,.1f}" in t for t in legend), legend
