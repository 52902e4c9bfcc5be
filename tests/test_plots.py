"""Figures of sweep folders and run folders: files, pixel sizes, labels and line folding."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from dlsim import output
from dlsim.api import run_case
from dlsim.errors import DlsimError
from dlsim.plots import (DPI, FIG_SIZE_IN, _area_figure, _field_figure, _figure, _roles,
                         key_label, periodic_polyline, plot_dir, plot_run, plot_sweep, read_run,
                         read_sweep_points, sweep_figure, sweep_figures, sweep_title,
                         wrap_polyline)
from dlsim.sweep import run_sweep
from test_reliability import POPULATION_CASE as DISC_CASE
from test_sweep import write_sweep
from test_thermal import toml_case

PIXELS = (round(FIG_SIZE_IN[0] * DPI), round(FIG_SIZE_IN[1] * DPI))
# Three spacings × two angles × two seeds: curves with error bars.
PLOT_SWEEP = """\
base = "tiny.toml"
seeds = 2
[vary]
"obstacles.spacing_nm" = {log = [25, 50, 3]}
"obstacles.critical_angle_deg" = [100, 140]
"""


@pytest.fixture(scope="module")
def sweep_dir(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("plots")
    run_sweep(write_sweep(folder, PLOT_SWEEP), out_dir=folder / "out", workers=2, progress=False)
    return folder / "out"


@pytest.fixture(scope="module")
def run_dir(sweep_dir) -> Path:
    return sweep_dir / "runs" / "p000_s00"


def assert_image(path: Path, size=PIXELS) -> None:
    with Image.open(path) as im:
        im.verify()  # a complete, uncorrupted file
    with Image.open(path) as im:
        assert im.size == size
        pixels = np.asarray(im.convert("L"), dtype=float)
    assert pixels.std() > 5.0, "a blank image"


# Two populations (impenetrable discs that leave Orowan loops, shearable points), two
# realizations: every element the run figures promise.
POPULATION_CASE = DISC_CASE + """\
[[populations]]
name = "precipitates"
volume_fraction = 0.01
distribution = "single"
radius_nm = 2.0
strength = "point"
critical_angle_deg = 90.0
[statistics]
realizations = 2
[loading]
stress_step = 0.05
tolerance = 2e-3
bisections = 3
"""


def run_folder(tmp_path_factory, text: str) -> Path:
    """The run folder of the case ``text``, in a fresh temporary folder."""
    folder = tmp_path_factory.mktemp("run")
    (folder / "case.toml").write_text(text)
    run_case(folder / "case.toml", out_dir=folder / "run")
    return folder / "run"


@pytest.fixture(scope="module")
def population_run(tmp_path_factory) -> Path:
    return run_folder(tmp_path_factory, POPULATION_CASE)


def legend_texts(fig) -> list[str]:
    legend = fig.axes[0].get_legend()
    assert legend is not None, "the figure promises a legend"
    return [t.get_text() for t in legend.get_texts()]


def test_plot_sweep_writes_png_and_pdf_of_slide_size(sweep_dir):
    paths = plot_sweep(sweep_dir)
    assert [p.name for p in paths] == ["crss_vs_spacing_nm.png", "crss_vs_spacing_nm.pdf"]
    assert_image(paths[0])
    assert paths[1].read_bytes()[:5] == b"%PDF-"


def test_plot_sweep_second_key_on_x(sweep_dir):
    paths = plot_sweep(sweep_dir, x="obstacles.critical_angle_deg")
    assert paths[0].name == "crss_vs_critical_angle_deg.png"
    assert_image(paths[0])


def test_plot_sweep_unknown_x_raises(sweep_dir):
    with pytest.raises(DlsimError, match="not a swept key"):
        plot_sweep(sweep_dir, x="line.length")


def test_plot_sweep_delta_sigma_when_reported(sweep_dir):
    result = (sweep_dir / "runs" / "p000_s00" / "result.json").read_text()
    if '"delta_sigma_MPa"' in result:
        assert_image(plot_sweep(sweep_dir, quantity="delta_sigma")[0])
    else:
        with pytest.raises(DlsimError, match="no delta_sigma"):
            plot_sweep(sweep_dir, quantity="delta_sigma")


def test_plot_run_writes_field_and_stress_area(run_dir):
    paths = plot_run(run_dir)
    assert [p.name for p in paths] == ["field.png", "field.pdf", "stress_vs_area.png",
                                       "stress_vs_area.pdf"]
    for path in paths[::2]:
        assert_image(path)


@pytest.mark.parametrize("kind", ["sweep", "run"])
def test_plot_dir_dispatches_on_folder(sweep_dir, run_dir, kind):
    folder = sweep_dir if kind == "sweep" else run_dir
    names = {p.name for p in plot_dir(folder)}
    assert ("crss_vs_spacing_nm.png" in names) == (kind == "sweep")
    assert ("field.png" in names) == (kind == "run")


# A thermally activated sweep: the one-pin square array (aluminium) at three temperatures.
THERMAL_CASE = toml_case(temperature_K=100.0, events=100, sequences=2)
THERMAL_SWEEP = """\
base = "tiny.toml"
seeds = 1
[vary]
"thermal.temperature_K" = [50, 150, 300]
"""


def test_plot_dir_of_thermal_sweep_draws_crss_and_activation_volume(tmp_path):
    folder = tmp_path / "thermal"
    run_sweep(write_sweep(folder, THERMAL_SWEEP, THERMAL_CASE), out_dir=folder / "out",
              workers=1, progress=False)
    names = [p.name for p in plot_dir(folder / "out")]
    assert names == ["crss_vs_temperature_K.png", "crss_vs_temperature_K.pdf",
                     "activation_volume_vs_temperature_K.png",
                     "activation_volume_vs_temperature_K.pdf"]
    assert_image(folder / "out" / names[2])
    _, table = read_sweep_points(folder / "out", "activation_volume")
    vstar = table["activation_volume_mean_b3"][np.argsort(table["thermal.temperature_K"])]
    # V* = ΔF0 p q x^(p-1) (1 - x^p)^(q-1) bL/F_c grows as the stress x F_c/(bL) falls with T
    # (Kocks, Argon & Ashby 1975): 27, 54, 119 b³ here
    assert np.all(np.diff(vstar) > 0), vstar


def test_plot_dir_other_folder_raises(tmp_path):
    with pytest.raises(DlsimError, match="neither a sweep"):
        plot_dir(tmp_path)


def test_cli_plot_prints_files(run_dir):
    proc = subprocess.run([sys.executable, "-m", "dlsim.cli", "plot", str(run_dir)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert str(run_dir / "field.png") in proc.stdout.splitlines()


@pytest.mark.parametrize("key, label", [
    ("obstacles.spacing_nm", "spacing (nm)"),
    ("obstacles.critical_angle_deg", "critical angle (°)"),
    ("obstacles.density_per_um2", "density (µm$^{-2}$)"),
    ("friction.stress_MPa", "stress (MPa)"),
    ("loading.bisections", "bisections"),
    ("line.length", "box width (obstacle spacings)"),
    ("line.node_spacing", "node spacing (obstacle spacings)"),
])
def test_key_label_carries_unit(key, label):
    assert key_label(key) == label


def test_wrap_polyline_breaks_at_box_sides():
    x = np.array([80.0, 95.0, 105.0, 120.0])
    y = np.array([10.0, 10.0, 10.0, 215.0])
    xw, yw = wrap_polyline(x, y, (100.0, 100.0))
    # Breaks between 95 → 105 (crosses x = Lx) and 105 → 120 (y crosses two box heights).
    np.testing.assert_allclose(xw, [80, 95, np.nan, 5, np.nan, 20])
    np.testing.assert_allclose(yw, [10, 10, np.nan, 10, np.nan, 15])


def test_field_figure_legend_names_line_pins_loops_and_each_population(population_run):
    run = read_run(population_run)
    assert run["loops"] is not None, "the disc case should leave Orowan loops"
    texts = legend_texts(_field_figure(run, output.box_nm(run["result"])))
    for promised in ("dislocation line", "pinned points", "Orowan loops", "dispersoids",
                     "precipitates"):
        assert any(t.startswith(promised) for t in texts), (promised, texts)


def test_field_figure_populations_in_distinct_colours(population_run):
    from matplotlib.colors import to_rgb

    run = read_run(population_run)
    legend = _field_figure(run, output.box_nm(run["result"])).axes[0].get_legend()
    colours = {}
    for handle, text in zip(legend.legend_handles, legend.get_texts()):
        colour = (handle.get_facecolor() if hasattr(handle, "get_facecolor")
                  and not hasattr(handle, "get_markerfacecolor") else handle.get_color())
        colours[text.get_text().split(" (")[0]] = to_rgb(colour)
    assert colours["dispersoids"] != colours["precipitates"]


def test_run_figures_draw_on_given_axes(population_run):
    run = read_run(population_run)
    box = output.box_nm(run["result"])
    fig = _figure()
    left, right = fig.subplots(1, 2)
    assert _field_figure(run, box, ax=left) is fig
    assert _area_figure(run, box, ax=right) is fig
    assert left.get_legend() is not None and right.get_legend() is not None


def test_area_figure_shows_every_realization_mean_and_estimates(population_run):
    run = read_run(population_run)
    fig = _area_figure(run, output.box_nm(run["result"]))
    texts = legend_texts(fig)
    assert "realization 0" in texts and "other realizations" in texts
    assert any(t.startswith("mean CRSS of 2 realizations") for t in texts)
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.texts]
    assert any(t.startswith("Foreman–Makin") for t in labels), labels
    # every realization's pinned curve is drawn: one line per realization at least
    assert len([ln for ln in ax.get_lines() if ln.get_linestyle() == "-"]) >= 2
    assert ax.get_xlabel().startswith("mean glide")


def test_area_figure_flowing_markers_inside_the_axis(population_run):
    run = read_run(population_run)
    ax = _area_figure(run, output.box_nm(run["result"])).axes[0]
    flowing = [ln for ln in ax.get_lines() if ln.get_label().startswith("flowing")]
    assert flowing
    x_max = ax.get_xlim()[1]
    # the marker's centre sits inside by more than its half width (7 pt of a 8 in axis ≈ 0.5 %)
    assert np.all(flowing[0].get_xdata() <= x_max * (1 - 0.01))


def test_plot_run_images_of_population_case(population_run):
    for path in plot_run(population_run)[::2]:
        assert_image(path)


def test_periodic_polyline_runs_through_the_y_edge_unbroken():
    # a line crossing y = Ly between two nodes: each copy is continuous (no NaN inside it)
    x = np.array([10.0, 20.0, 30.0])
    y = np.array([90.0, 105.0, 95.0])
    xs, ys = periodic_polyline(x, y, (100.0, 100.0))
    copies = np.split(np.column_stack([xs, ys]), np.flatnonzero(np.isnan(xs)) + 1)
    copies = [c[~np.isnan(c[:, 0])] for c in copies if np.isfinite(c).any()]
    assert len(copies) == 2
    np.testing.assert_allclose(copies[0][:, 1], [90, 105, 95])
    np.testing.assert_allclose(copies[1][:, 1], [-10, 5, -5])   # the copy entering from below


def test_periodic_polyline_closes_loops():
    xs, ys = periodic_polyline(np.array([1.0, 2.0, 2.0]), np.array([1.0, 1.0, 2.0]),
                               (10.0, 10.0), closed=True)
    assert (xs[0], ys[0]) == (xs[3], ys[3])


# --------------------------------------------------------------------------- sweep figures
# A grid of three keys with a long title (one figure per critical angle, its title the sweep's
# and the angle), and a box-size sweep; one seed each, about a second a run.
THREE_KEY_SWEEP = """\
title = "A tiny random field of weak points: the CRSS against spacing, two friction stresses"
base = "tiny.toml"
[vary]
"obstacles.spacing_nm" = [25, 50]
"friction.stress_MPa" = [0, 20]
"obstacles.critical_angle_deg" = [100, 140]
"""
BOX_SWEEP = """\
base = "tiny.toml"
seeds = 2
[vary]
"line.length" = [2, 3]
"""
# Impenetrable discs with friction, two radii, two seeds: Δσ and its estimates.
DISC_SWEEP = """\
base = "tiny.toml"
seeds = 2
[vary]
"populations[1].radius_nm" = [6.0, 8.0]
"""
DISC_FRICTION_CASE = DISC_CASE + "[friction]\nstress_MPa = 5.0\n"


def small_sweep(tmp_path_factory, sweep: str, case: str | None = None) -> Path:
    folder = tmp_path_factory.mktemp("sweep")
    args = (folder, sweep) if case is None else (folder, sweep, case)
    run_sweep(write_sweep(*args), out_dir=folder / "out", workers=1, progress=False)
    return folder / "out"


@pytest.fixture(scope="module")
def three_key_sweep(tmp_path_factory) -> Path:
    return small_sweep(tmp_path_factory, THREE_KEY_SWEEP)


@pytest.fixture(scope="module")
def box_sweep(tmp_path_factory) -> Path:
    return small_sweep(tmp_path_factory, BOX_SWEEP)


@pytest.fixture(scope="module")
def disc_sweep(tmp_path_factory) -> Path:
    return small_sweep(tmp_path_factory, DISC_SWEEP, DISC_FRICTION_CASE)


def first_sweep_figure(folder: Path, quantity: str = "crss"):
    """The first figure ``plot_sweep`` writes, as a Figure, with the summary table."""
    meta, table = read_sweep_points(folder, quantity)
    x, curve, rest = _roles(meta, table, None)
    combo, rows = next(sweep_figures(table, rest))
    return sweep_figure(meta, table, rows, (x, curve), quantity,
                        sweep_title(meta, rest, combo)), table, rows


def estimate_lines(ax) -> dict[str, list]:
    """The estimate lines of a sweep axes by legend label (lines drawn without error bars)."""
    labels = {t.get_text() for t in ax.get_legend().get_texts()}
    lines = {}
    current = None
    for line in ax.get_lines():
        if line.get_linestyle() != "--":
            continue
        current = line.get_label() if line.get_label() in labels else current
        lines.setdefault(current, []).append(line)
    return lines


def test_sweep_estimates_each_in_its_own_colour_with_readable_labels(sweep_dir):
    from matplotlib.colors import to_hex

    fig, table, _ = first_sweep_figure(sweep_dir)
    ax = fig.axes[0]
    lines = estimate_lines(ax)
    assert set(lines) == {"Friedel random array", "Orowan, square array"}, set(lines)
    colours = {label: {to_hex(ln.get_color()) for ln in group} for label, group in lines.items()}
    assert all(len(c) == 1 for c in colours.values()), "one colour per estimate"
    estimate_colours = {c.pop() for c in colours.values()}
    assert len(estimate_colours) == len(lines)
    curve_colours = {to_hex(c.lines[0].get_color()) for c in ax.containers}
    assert len(curve_colours) == 2 and not curve_colours & estimate_colours


def test_sweep_estimate_shared_by_every_curve_is_drawn_once(sweep_dir):
    # Orowan 2Γ/(bL) does not depend on the critical angle (the curve key); Friedel does.
    lines = estimate_lines(first_sweep_figure(sweep_dir)[0].axes[0])
    assert len(lines["Orowan, square array"]) == 1
    assert len(lines["Friedel random array"]) == 2


def test_sweep_legend_says_what_the_error_bars_are(sweep_dir):
    legend = first_sweep_figure(sweep_dir)[0].axes[0].get_legend()
    title = legend.get_title().get_text()
    assert "error bars" in title and "95 %" in title and "2 seeds" in title


def drawn(fig):
    """The renderer of ``fig`` drawn once on an Agg canvas (the layout done)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    return canvas.get_renderer()


def assert_inside_figure(fig, artist) -> None:
    box, page = artist.get_window_extent(drawn(fig)), fig.bbox
    assert (box.x0 >= page.x0 - 0.5 and box.x1 <= page.x1 + 0.5 and box.y0 >= page.y0 - 0.5
            and box.y1 <= page.y1 + 0.5), (box, page)


def test_grid_sweep_title_is_not_clipped(three_key_sweep):
    fig = first_sweep_figure(three_key_sweep)[0]
    title = fig.axes[0].title
    assert "critical angle = 100°" in title.get_text()
    assert_inside_figure(fig, title)


def test_box_size_sweep_x_label_has_its_unit_and_legend_off_the_data(box_sweep):
    fig = first_sweep_figure(box_sweep)[0]
    ax = fig.axes[0]
    assert ax.get_xlabel() == "box width (obstacle spacings)"
    assert_inside_figure(fig, ax.get_legend())
    legend = ax.get_legend().get_window_extent(drawn(fig))
    assert legend.y1 < ax.get_window_extent().y0, "the legend lies below the axes"


def test_sweep_crss_estimates_include_each_points_friction(three_key_sweep):
    meta, table = read_sweep_points(three_key_sweep, "crss")
    fig, _, rows = first_sweep_figure(three_key_sweep)
    ax = fig.axes[0]
    friedel = estimate_lines(ax)["Friedel random array"]
    plotted = np.sort(np.concatenate([ln.get_ydata() for ln in friedel]))
    expected = np.sort(table["estimate_friedel_mean_MPa"][rows] + table["friction.stress_MPa"][rows])
    np.testing.assert_allclose(plotted, expected)


def test_delta_sigma_plot_draws_the_estimates_times_the_taylor_factor(disc_sweep):
    from dlsim.analytic import TAYLOR_FCC

    fig, table, rows = first_sweep_figure(disc_sweep, "delta_sigma")
    lines = estimate_lines(fig.axes[0])
    assert "Foreman–Makin random array" in lines
    ys = lines["Foreman–Makin random array"][0].get_ydata()
    # the case keeps the default Taylor factor of a random FCC polycrystal
    np.testing.assert_allclose(np.sort(ys),
                               np.sort(TAYLOR_FCC * table["estimate_foreman_makin_mean_MPa"]))
    assert_image(plot_sweep(disc_sweep, quantity="delta_sigma")[0])
