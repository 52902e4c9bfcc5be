"""The one-page report of a run or a sweep folder: the files, what the page shows, what it
leaves alone, and one-line errors for folders it cannot use."""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from dlsim import cli, output
from dlsim.output import read_table
from dlsim.errors import EXIT_BAD_INPUT
from dlsim.report import DPI, PAGE_IN, make_report, run_page, sweep_page
# Two populations (impenetrable discs that leave Orowan loops, shearable points), two
# realizations: Δσ with its interval and every estimate row of a population case.
from test_plots import POPULATION_CASE, assert_image, run_folder, small_sweep
from test_plots import disc_sweep  # noqa: F401 - the fixture: discs with friction, two radii
from test_sweep import TINY_CASE

PAGE_PX = (round(PAGE_IN[0] * DPI), round(PAGE_IN[1] * DPI))
#: Copies of a run folder leave out the reports other tests wrote into it.
NO_REPORT = shutil.ignore_patterns("report.*")


@pytest.fixture(scope="module")
def point_run(tmp_path_factory) -> Path:
    return run_folder(tmp_path_factory, TINY_CASE)


@pytest.fixture(scope="module")
def population_run(tmp_path_factory) -> Path:
    return run_folder(tmp_path_factory, POPULATION_CASE)


# Two spacings × two angles, two seeds, of the tiny random field: 8 runs of about a second.
POINT_SWEEP = """\
title = "Tiny random field: CRSS against spacing"
base = "tiny.toml"
seeds = 2
[vary]
"obstacles.spacing_nm" = [25, 50]
"obstacles.critical_angle_deg" = [100, 140]
"""


@pytest.fixture(scope="module")
def point_sweep(tmp_path_factory) -> Path:
    return small_sweep(tmp_path_factory, POINT_SWEEP)


def assert_page(path: Path) -> None:
    """A complete PNG of the page size that is not blank."""
    assert_image(path, size=PAGE_PX)


def page_texts(fig) -> list[str]:
    """Every text on the page: figure texts, axes texts, titles and legend entries."""
    texts = [t.get_text() for t in fig.texts]
    for ax in fig.axes:
        texts += [t.get_text() for t in ax.texts] + [ax.get_title()]
        if ax.get_legend() is not None:
            texts += [t.get_text() for t in ax.get_legend().get_texts()]
    return texts


def legend_of(fig, promised: str) -> list[str]:
    """The entries of the legend that holds an entry starting with ``promised``."""
    for ax in fig.axes:
        legend = ax.get_legend()
        if legend is not None:
            texts = [t.get_text() for t in legend.get_texts()]
            if any(t.startswith(promised) for t in texts):
                return texts
    raise AssertionError(f"no legend with {promised!r}")


@pytest.mark.parametrize("which", ["point_run", "population_run", "point_sweep", "disc_sweep"])
def test_report_writes_png_and_pdf_of_slide_size(which, request):
    paths = make_report(request.getfixturevalue(which))
    assert [p.name for p in paths] == ["report.png", "report.pdf"]
    assert_page(paths[0])
    assert paths[1].read_bytes()[:5] == b"%PDF-"


def test_run_page_shows_field_curve_table_and_case(point_run):
    fig = run_page(point_run)
    texts = page_texts(fig)
    assert any(t.startswith("pinned points") for t in legend_of(fig, "dislocation line"))
    curve = legend_of(fig, "realization 0 CRSS bracket")
    assert any(t.startswith("CRSS ") for t in curve) and "pinned" in curve
    for promised in ("CRSS beside the analytic estimates", "simulation", "Orowan, square array",
                     "the case", "material", "obstacles", "box", "solver", "seeds"):
        assert promised in texts, (promised, texts)
    res = json.loads((point_run / output.RESULT).read_text())
    lo, hi = res["crss_lo_MPa"], res["crss_hi_MPa"]
    assert any(f"[{lo:.4g}, {hi:.4g}] MPa" in t for t in texts), "the bracket in the table"


def test_run_page_of_population_case_shows_delta_sigma_and_loops(population_run):
    fig = run_page(population_run)
    texts = page_texts(fig)
    res = json.loads((population_run / output.RESULT).read_text())
    assert "Δσ (MPa)" in texts
    assert f"{res['delta_sigma_MPa']:.4g}" in texts
    assert "dispersoids" in texts and "loops" in texts
    assert any(t.startswith("Orowan loops") for t in legend_of(fig, "dislocation line"))
    assert any(t.startswith("mean of 2 realizations") for t in texts)
    # every estimate of the run has its row, under the name dlsim.analytic gives it
    from dlsim.analytic import ESTIMATES
    for key in res["estimates"]:
        assert ESTIMATES[key.removesuffix("_MPa")][0] in texts, key


def test_sweep_page_shows_curves_points_and_case(point_sweep):
    fig = sweep_page(point_sweep)
    texts = page_texts(fig)
    assert "Tiny random field: CRSS against spacing" in texts
    curves = legend_of(fig, "critical angle = 100°")
    assert "critical angle = 140°" in curves and "Friedel random array" in curves
    legend = next(ax.get_legend() for ax in fig.axes if ax.get_legend() is not None)
    assert legend.get_title().get_text().startswith("error bars: 95 %")
    assert "the points of the sweep" in texts and "swept" in texts and "material" in texts
    # one table row per point, with its mean CRSS and interval
    points = read_table(point_sweep / "summary_points.csv")
    for mean in points["crss_mean_MPa"]:
        assert any(t.startswith(f"{mean:.4g} [") for t in texts), mean


def test_sweep_page_of_populations_shows_delta_sigma_with_estimates(disc_sweep):
    fig = sweep_page(disc_sweep)
    ax = next(ax for ax in fig.axes if ax.get_legend() is not None)
    assert ax.get_ylabel().startswith("yield strength increment Δσ")
    assert "Foreman–Makin random array" in [t.get_text() for t in ax.get_legend().get_texts()]
    assert "Δσ (MPa) [95 %]" in page_texts(fig)


def test_report_leaves_the_run_files_alone_and_no_temporaries(tmp_path, point_run):
    folder = tmp_path / "copy"
    shutil.copytree(point_run, folder, ignore=NO_REPORT)
    before = {p.name: p.read_bytes() for p in folder.iterdir() if not p.name.startswith("report")}
    make_report(folder)
    make_report(folder)                        # a second report replaces the first
    after = {p.name: p.read_bytes() for p in folder.iterdir()}
    assert {k: after[k] for k in before} == before
    assert set(after) - set(before) == {"report.png", "report.pdf"}


def cli_report(capsys, folder) -> tuple[int, str]:
    code = cli.main(["report", str(folder)])
    _, err = capsys.readouterr()
    return code, err


def assert_one_error_line(err: str, *fragments: str) -> None:
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("dlsim: error: "), err
    for fragment in fragments:
        assert fragment in lines[0], lines[0]


def _missing(tmp, run):
    return tmp / "nowhere", "no such folder"


def _a_file(tmp, run):
    (tmp / "notes.txt").write_text("x")
    return tmp / "notes.txt", "is a file"


def _foreign(tmp, run):
    (tmp / "thesis").mkdir()
    (tmp / "thesis" / "chapter.tex").write_text("x")
    return tmp / "thesis", "neither a run"


def _truncated(tmp, run):
    folder = tmp / "run"
    shutil.copytree(run, folder, ignore=NO_REPORT)
    text = (folder / output.RESULT).read_text()
    (folder / output.RESULT).write_text(text[: len(text) // 2])
    return folder, "truncated"


def _emptied(tmp, run):
    folder = tmp / "run"
    shutil.copytree(run, folder, ignore=NO_REPORT)
    (folder / output.RESULT).write_text("{}")
    return folder, "no `status`"


def _report_is_a_folder(tmp, run):
    folder = tmp / "run"
    shutil.copytree(run, folder, ignore=NO_REPORT)
    (folder / "report.png").mkdir()
    return folder, "cannot be written"


def _sweep_without_runs(tmp, run):
    folder = tmp / "sweep"
    (folder / "runs").mkdir(parents=True)
    # a sweep record in the names before the naming rule (seeds, id): read all the same
    (folder / output.SWEEP).write_text(json.dumps({"title": "", "combine": "grid", "seeds": 1,
                                                   "vary": {"obstacles.spacing_nm": [30]},
                                                   "scales": {}, "runs": [
        {"id": "p000_s00", "point": 0, "seed_index": 0, "seed": 1,
         "params": {"obstacles.spacing_nm": 30}, "case": {}}]}))
    return folder, "no run of the sweep has finished"


def _truncated_sweep(tmp, run):
    folder = tmp / "sweep"
    folder.mkdir()
    (folder / output.SWEEP).write_text('{"title": "", "runs": [')
    return folder, "truncated"


BAD_FOLDERS = [_missing, _a_file, _foreign, _truncated, _emptied, _report_is_a_folder,
               _sweep_without_runs, _truncated_sweep]


@pytest.mark.parametrize("make", BAD_FOLDERS, ids=lambda f: f.__name__.strip("_"))
def test_cli_report_bad_folder_one_line_exit_2(tmp_path, point_run, capsys, make):
    folder, fragment = make(tmp_path, point_run)
    code, err = cli_report(capsys, folder)
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, str(folder), fragment)
    if folder.is_dir():
        assert not [p for p in folder.iterdir() if p.name.startswith(output.TMP_TAG)]


def test_cli_report_unwritable_folder_keeps_it_as_it_was(tmp_path, point_run, capsys):
    folder = tmp_path / "run"
    shutil.copytree(point_run, folder, ignore=NO_REPORT)
    before = sorted(p.name for p in folder.iterdir())
    if shutil.which("chattr") is None or subprocess.run(
            ["chattr", "+i", str(folder)], capture_output=True).returncode != 0:
        pytest.skip("chattr +i is not available on this file system")
    try:
        code, err = cli_report(capsys, folder)
    finally:
        subprocess.run(["chattr", "-i", str(folder)], check=True)
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, str(folder), "cannot be written")
    assert sorted(p.name for p in folder.iterdir()) == before


@pytest.mark.parametrize("make", [_truncated, _a_file], ids=["truncated", "file"])
def test_cli_report_subprocess_no_traceback(tmp_path, point_run, make):
    folder, fragment = make(tmp_path, point_run)
    proc = subprocess.run([sys.executable, "-m", "dlsim.cli", "report", str(folder)],
                          capture_output=True, text=True, timeout=120,
                          env={**os.environ, "MPLBACKEND": "Agg"})
    assert proc.returncode == EXIT_BAD_INPUT
    assert_one_error_line(proc.stderr, fragment)
    assert "Traceback" not in proc.stderr and proc.stdout == ""


def test_cli_report_prints_the_files(point_run, capsys):
    assert cli.main(["report", str(point_run)]) == 0
    out, _ = capsys.readouterr()
    assert out.splitlines() == [str(point_run / "report.png"), str(point_run / "report.pdf")]


def test_report_of_run_without_history_says_so(tmp_path, point_run):
    folder = tmp_path / "run"
    shutil.copytree(point_run, folder, ignore=NO_REPORT)
    (folder / output.HISTORY).unlink()
    assert f"no {output.HISTORY}" in page_texts(run_page(folder))
    assert_page(make_report(folder)[0])
