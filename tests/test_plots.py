"""Figures of sweep folders and run folders: files, pixel sizes, labels and line folding."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from dlsim.api import run_case
from dlsim.errors import DlsimError
from dlsim.plots import (DPI, FIG_SIZE_IN, _area_figure, _field_figure, _figure, key_label,
                         periodic_polyline, plot_dir, plot_run, plot_sweep, read_run,
                         wrap_polyline)
from dlsim.sweep import run_sweep
from test_reliability import POPULATION_CASE as DISC_CASE
from test_sweep import write_sweep

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
    texts = legend_texts(_field_figure(run, tuple(run["result"]["box_nm"])))
    for promised in ("dislocation line", "pinned points", "Orowan loops", "dispersoids",
                     "precipitates"):
        assert any(t.startswith(promised) for t in texts), (promised, texts)


def test_field_figure_populations_in_distinct_colours(population_run):
    from matplotlib.colors import to_rgb

    run = read_run(population_run)
    legend = _field_figure(run, tuple(run["result"]["box_nm"])).axes[0].get_legend()
    colours = {}
    for handle, text in zip(legend.legend_handles, legend.get_texts()):
        colour = (handle.get_facecolor() if hasattr(handle, "get_facecolor")
                  and not hasattr(handle, "get_markerfacecolor") else handle.get_color())
        colours[text.get_text().split(" (")[0]] = to_rgb(colour)
    assert colours["dispersoids"] != colours["precipitates"]


def test_run_figures_draw_on_given_axes(population_run):
    run = read_run(population_run)
    box = tuple(run["result"]["box_nm"])
    fig = _figure()
    left, right = fig.subplots(1, 2)
    assert _field_figure(run, box, ax=left) is fig
    assert _area_figure(run, box, ax=right) is fig
    assert left.get_legend() is not None and right.get_legend() is not None


def test_area_figure_shows_every_realization_mean_and_estimates(population_run):
    run = read_run(population_run)
    fig = _area_figure(run, tuple(run["result"]["box_nm"]))
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
    ax = _area_figure(run, tuple(run["result"]["box_nm"])).axes[0]
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
