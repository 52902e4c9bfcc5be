"""Figures of sweep folders and run folders: files, pixel sizes, labels and line folding."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from dlsim.errors import DlsimError
from dlsim.plots import DPI, FIG_SIZE_IN, key_label, plot_dir, plot_run, plot_sweep, wrap_polyline
from dlsim.sweep import run_sweep
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
