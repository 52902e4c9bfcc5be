"""Nothing a user does loses work, hangs, or ends in a traceback.

By kind: destinations checked before any computation and written whole; size and time bombs
refused before anything is allocated; physically absurd values refused or warned about; a run
without a CRSS exits with its own code and says why; realizations reported without
contradiction; no temporary folders left behind.  Most checks run through the real CLI
(``dlsim.cli.main`` in-process, and a few as a subprocess); the schema itself is fuzzed with
hypothesis in ``test_fuzz_cases.py``.
"""
from __future__ import annotations

import json
import math
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from dlsim import api, bounds, cli, output, statistics
from dlsim.case import load_case
from dlsim.errors import CaseError, EXIT_BAD_INPUT, EXIT_NO_RESULT, EXIT_RESCUED, OutputError
from dlsim.sweep import run_one
from test_sweep import TINY_CASE, write_sweep

POPULATION_CASE = """\
seed = 5
[material]
symbol = "Al"
[line]
length = 4
node_spacing = 0.2
[[populations]]
name = "dispersoids"
volume_fraction = 0.02
distribution = "single"
radius_nm = 8.0
strength = "impenetrable"
"""


def write_case(folder: Path, text: str = TINY_CASE, name: str = "case.toml") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def cli_run(capsys, *argv: str) -> tuple[int, str, str]:
    code = cli.main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def assert_one_error_line(err: str, *fragments: str) -> None:
    lines = [line for line in err.strip().splitlines() if not line.startswith("dlsim: warning")]
    assert len(lines) == 1, err
    assert lines[0].startswith("dlsim: error: ") and "Traceback" not in err
    for fragment in fragments:
        assert fragment in lines[0], lines[0]


@pytest.fixture
def no_compute(monkeypatch):
    """Fail loudly if a simulation starts: destination errors must come first."""
    def refuse(*args, **kwargs):
        raise AssertionError("the simulation started before the destination was checked")
    monkeypatch.setattr(api, "_realization", refuse)


# --------------------------------------------------------------------------- 1. destinations


def _file_out(tmp):
    (tmp / "taken").write_text("x")
    return tmp / "taken", "is a file, not a folder"


def _under_file(tmp):
    (tmp / "taken").write_text("x")
    return tmp / "taken" / "run", "is a file, so nothing can be written under it"


def _foreign_folder(tmp):
    (tmp / "notes").mkdir()
    (tmp / "notes" / "thesis.tex").write_text("x")
    return tmp / "notes", "holds files dlsim did not write"


def _unwritable_place(tmp):
    return Path("/proc/self/dlsim-out"), "cannot be written"


DESTINATIONS = [_file_out, _under_file, _foreign_folder, _unwritable_place]


@pytest.mark.parametrize("make", DESTINATIONS, ids=[m.__name__ for m in DESTINATIONS])
def test_run_bad_destination_refused_before_computing(tmp_path, capsys, no_compute, make):
    case = write_case(tmp_path)
    out, fragment = make(tmp_path)
    code, _, err = cli_run(capsys, "run", str(case), "--out", str(out))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, str(out), fragment)


def test_run_destination_is_the_case_file_refused(tmp_path, capsys, no_compute):
    case = write_case(tmp_path)
    code, _, err = cli_run(capsys, "run", str(case), "--out", str(case))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, "is a file, not a folder")


def test_run_destination_holding_the_case_refused(tmp_path, capsys, no_compute):
    run = tmp_path / "run"
    run.mkdir()
    (run / output.RESULT).write_text("{}")          # looks like an earlier run ...
    case = write_case(run)                          # ... but holds this run's own input
    code, _, err = cli_run(capsys, "run", str(case), "--out", str(run))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, "an input of this run")


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes through permission bits")
def test_run_read_only_destination_refused(tmp_path, capsys, no_compute):
    parent = tmp_path / "ro"
    parent.mkdir()
    parent.chmod(0o500)
    try:
        code, _, err = cli_run(capsys, "run", str(write_case(tmp_path)), "--out",
                               str(parent / "run"))
    finally:
        parent.chmod(0o700)
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, "cannot be written")


def test_run_immutable_destination_refused(tmp_path, capsys, no_compute):
    run = tmp_path / "run"
    run.mkdir()
    (run / output.RESULT).write_text("{}")
    if shutil.which("chattr") is None or subprocess.run(
            ["chattr", "+i", str(run)], capture_output=True).returncode != 0:
        pytest.skip("chattr +i is not available on this file system")
    try:
        code, _, err = cli_run(capsys, "run", str(write_case(tmp_path)), "--out", str(run))
    finally:
        subprocess.run(["chattr", "-i", str(run)], check=True)
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, "cannot be written")


def test_sweep_out_is_a_file_refused_before_running(tmp_path, capsys, no_compute):
    sweep = write_sweep(tmp_path)
    (tmp_path / "taken").write_text("x")
    code, _, err = cli_run(capsys, "sweep", str(sweep), "--out", str(tmp_path / "taken"))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, "sweep folder", "is a file, not a folder")


def test_rerun_replaces_the_earlier_run_whole(tmp_path):
    first = write_case(tmp_path, TINY_CASE + "[output]\nsnapshot_every = 2000\n", "a.toml")
    out = tmp_path / "run"
    api.run_case(first, out_dir=out)
    (out / "movie.gif").write_bytes(b"GIF89a")       # a figure made from the first run
    assert (out / output.SNAPSHOTS).is_file()
    second = write_case(tmp_path, TINY_CASE.replace("seed = 11", "seed = 12"), "b.toml")
    result = api.run_case(second, out_dir=out)
    names = sorted(p.name for p in out.iterdir())
    assert output.SNAPSHOTS not in names and "movie.gif" not in names
    assert json.loads((out / output.RESULT).read_text())["seed"] == 12
    assert result.out_dir == out
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_write_failure_rescues_the_result(tmp_path, capsys, monkeypatch):
    case = write_case(tmp_path)
    rescue_root = tmp_path / "rescue-root"
    rescue_root.mkdir()
    monkeypatch.setattr(output.tempfile, "gettempdir", lambda: str(rescue_root))

    def disk_full(folder, files):
        raise OSError(28, "No space left on device")
    monkeypatch.setattr(output, "_swap_in", disk_full)
    code, out, err = cli_run(capsys, "run", str(case), "--out", str(tmp_path / "run"), "--quiet")
    assert code == EXIT_RESCUED
    assert "CRSS" in out                                 # the summary is still printed
    assert_one_error_line(err, "No space left on device", "they were saved in")
    saved = [p for p in rescue_root.iterdir() if p.name.startswith(output.RESCUE_PREFIX)]
    assert len(saved) == 1 and (saved[0] / output.RESULT).is_file()
    assert json.loads((saved[0] / output.RESULT).read_text())["status"] == "ok"


@pytest.mark.parametrize("moment", ["filling", "renaming"])
def test_interrupted_write_leaves_the_earlier_run_and_no_hidden_folder(tmp_path, monkeypatch,
                                                                      moment):
    """Ctrl-C or SIGTERM in the middle of writing a run folder (a sweep's main process writes
    them): the earlier run stays whole and no hidden temporary folder is left behind."""
    folder = tmp_path / "run"
    output.write_folder(folder, {"result.json": b"old"})

    def interrupt(*args, **kwargs):
        raise KeyboardInterrupt
    if moment == "filling":
        monkeypatch.setattr(output, "_fill", interrupt)
    else:
        real_rename = os.rename
        monkeypatch.setattr(output.os, "rename", lambda a, b: (
            interrupt() if Path(a).name.startswith(output.TMP_TAG) else real_rename(a, b)))
    with pytest.raises(KeyboardInterrupt):
        output.write_folder(folder, {"result.json": b"new"})
    monkeypatch.undo()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]
    assert (folder / "result.json").read_bytes() == b"old"


def test_interrupt_after_a_realization_keeps_it(tmp_path, monkeypatch):
    calls = []
    real = api._realization

    def second_is_interrupted(case, r, *args):
        calls.append(r)
        if r == 1:
            raise KeyboardInterrupt
        return real(case, r, *args)
    monkeypatch.setattr(api, "_realization", second_is_interrupted)
    case = write_case(tmp_path, TINY_CASE + "[statistics]\nrealizations = 3\n")
    with pytest.raises(KeyboardInterrupt, match="after 1 of 3 realizations"):
        api.run_case(case, out_dir=tmp_path / "run")
    res = json.loads((tmp_path / "run" / output.RESULT).read_text())
    assert res["status"] == "interrupted" and res["n_realizations"] == 1
    assert calls == [0, 1]


def test_sweep_worker_leaves_no_temporary_folder(tmp_path, monkeypatch):
    monkeypatch.setenv("TMPDIR", str(tmp_path))
    monkeypatch.setattr(output.tempfile, "tempdir", None)
    files = run_one(load_case(write_case(tmp_path / "in")).to_dict())
    assert output.RESULT in files and output.HISTORY in files
    assert not [p for p in tmp_path.iterdir() if p.name != "in"]


# --------------------------------------------------------------------------- 2. size and time bombs


def _with(text: str, section: str, line: str) -> str:
    """Add (or replace the section's) ``line`` in a case text."""
    head = f"[{section}]\n"
    if head in text:
        return text.replace(head, head + line + "\n")
    return text + head + line + "\n"


BOMBS = [
    # (description, case text, key, fragment)
    ("box of 1e6 spacings", _with(TINY_CASE, "line", "height = 1e6").replace(
        "length = 3", "length = 1e6"), "line.length", "obstacle points; at most"),
    ("node spacing 1e-9", TINY_CASE.replace("node_spacing = 0.1", "node_spacing = 1e-9"),
     "line.node_spacing", "at least 0.5 b"),
    ("fine line in a wide box", TINY_CASE.replace("node_spacing = 0.1", "node_spacing_nm = 0.2")
     .replace("length = 3", "length = 30000\nheight = 3"), "line.node_spacing_nm",
     "the starting line would have about 4.5e+06 nodes"),
    ("density 1e12 per µm²", TINY_CASE.replace("spacing_nm = 30.0", "density_per_um2 = 1e12"),
     "obstacles.density_per_um2", "[1e-06, 1e+08]"),
    ("density 1e7 per µm²", TINY_CASE.replace("spacing_nm = 30.0", "density_per_um2 = 1e7"),
     "obstacles.density_per_um2", "a line-tension model needs at least 5 b"),
    ("1e9 realizations", _with(TINY_CASE, "statistics", "realizations = 1000000000"),
     "statistics.realizations", "[1, 10000]"),
    ("1e9 images", _with(TINY_CASE, "elasticity", 'model = "self_stress"\nimages = 1000000000'),
     "elasticity.images", "[0, 256]"),
    ("images beyond int64", _with(TINY_CASE, "elasticity", "images = 9223372036854775808"),
     "elasticity.images", "[0, 256]"),
    ("1e6 bisections", TINY_CASE.replace("bisections = 4", "bisections = 1000000"),
     "loading.bisections", "[0, 40]"),
    ("stress step 1e-12", TINY_CASE.replace("stress_step = 0.05", "stress_step = 1e-12"),
     "loading.stress_step", "at most 10000 ramp relaxations"),
    ("max steps 1e12", _with(TINY_CASE, "loading", "max_steps = 1000000000000"),
     "loading.max_steps", "[1, 100000000]"),
    ("seed beyond int64", TINY_CASE.replace("seed = 11", "seed = 18446744073709551616"), "seed",
     "[0, 9223372036854775807]"),
    ("self-stress on a long line", _with(TINY_CASE.replace("length = 3", "length = 10000\n"
                                                           "height = 3"), "elasticity",
                                         'model = "self_stress"'),
     "elasticity.model", "pair interactions per evaluation"),
    ("tiny particles in a wide box", POPULATION_CASE.replace("radius_nm = 8.0", "radius_nm = 0.3")
     .replace("length = 4", "length = 4000"), "line.length",
     "obstacle points; at most"),
    ("a slab of 1.5e7 spheres", POPULATION_CASE.replace("radius_nm = 8.0", "radius_nm = 1.0")
     .replace('strength = "impenetrable"', 'strength = "point"\ncritical_angle_deg = 90.0')
     .replace("length = 4", "length = 3873"), "populations[1].volume_fraction",
     "the sampling slab would hold about 1.5e+07 particles"),
    ("log-normal σ of 1000", POPULATION_CASE.replace(
        'distribution = "single"\nradius_nm = 8.0',
        'distribution = "lognormal"\nmean_radius_nm = 8.0\nsigma = 1000.0'),
     "populations[1].sigma", "(0, 3]"),
]


@pytest.mark.parametrize("what, text, key, fragment", BOMBS, ids=[b[0] for b in BOMBS])
def test_size_bomb_refused_with_key_estimate_and_limit(tmp_path, capsys, no_compute, what, text,
                                                       key, fragment):
    path = write_case(tmp_path, text)
    code, _, err = cli_run(capsys, "run", str(path))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, str(path), f"`{key}`", fragment)


def test_memory_estimate_refused_beyond_the_machine(tmp_path, monkeypatch):
    monkeypatch.setattr(bounds, "_memory_bytes", lambda: 2.0 ** 16)
    with pytest.raises(CaseError, match=r"GiB.*of this machine's memory") as info:
        load_case(write_case(tmp_path))
    assert info.value.key == "line.length"


@pytest.mark.parametrize("vary, key, fragment", [
    ('"obstacles.spacing_nm" = {linear = [30, 40, 1000000000]}', "vary.obstacles.spacing_nm.linear",
     "[1, 100000]"),
    ('"obstacles.spacing_nm" = {linear = [30, 40, 1000]}\n'
     '"obstacles.critical_angle_deg" = {linear = [90, 120, 1000]}\n'
     '"line.tension_alpha" = {linear = [0.4, 0.6, 1000]}', "vary", "runs; at most 100000"),
])
def test_sweep_size_bomb_refused_before_expanding(tmp_path, capsys, vary, key, fragment):
    sweep = write_sweep(tmp_path, f'base = "tiny.toml"\n[vary]\n{vary}\n')
    code, _, err = cli_run(capsys, "sweep", str(sweep), "--out", str(tmp_path / "out"))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, f"`{key}`", fragment)
    assert not (tmp_path / "out").exists()


def test_sweep_seed_bomb_refused(tmp_path, capsys):
    sweep = write_sweep(tmp_path, 'base = "tiny.toml"\nseeds = 1000000000\n[vary]\n'
                                  '"obstacles.spacing_nm" = [30]\n')
    code, _, err = cli_run(capsys, "sweep", str(sweep), "--out", str(tmp_path / "out"))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, "`seeds`", "[1, 10000]")


# --------------------------------------------------------------------------- 3. absurd values


ABSURD = [
    ("radius 1e-12 nm", POPULATION_CASE.replace("radius_nm = 8.0", "radius_nm = 1e-12"),
     "populations[1].radius_nm", "in [0.001, 1e+08]"),
    ("radius 0.01 nm", POPULATION_CASE.replace("radius_nm = 8.0", "radius_nm = 0.01"),
     "populations[1].volume_fraction", "a line-tension model needs at least 5 b"),
    ("b of 1e12 nm", TINY_CASE.replace('symbol = "Al"', 'symbol = "Al"\nburgers_nm = 1e12'),
     "material.burgers_nm", "[0.01, 10]"),
    ("b of 9 nm", TINY_CASE.replace('symbol = "Al"', 'symbol = "Al"\nburgers_nm = 9.0'),
     "obstacles.spacing_nm", "3.33 b"),
    ("tolerance 1e12", _with(TINY_CASE, "loading", "tolerance = 1e12"), "loading.tolerance",
     "[1e-08, 0.01]"),
    ("friction beyond the ideal strength", _with(TINY_CASE, "friction", "stress_MPa = 5000.0"),
     "friction.stress_MPa", "ideal shear strength"),
    ("square field with realizations", _with(TINY_CASE.replace('"random"', '"square"'),
                                             "statistics", "realizations = 3"),
     "statistics.realizations", "nothing random"),
    ("number density filling space", POPULATION_CASE.replace(
        "volume_fraction = 0.02", "number_density_per_um3 = 1e9"),
     "populations[1].number_density_per_um3", "per µm³"),
]


@pytest.mark.parametrize("what, text, key, fragment", ABSURD, ids=[a[0] for a in ABSURD])
def test_absurd_value_refused_naming_the_key(tmp_path, capsys, no_compute, what, text, key,
                                             fragment):
    path = write_case(tmp_path, text)
    code, _, err = cli_run(capsys, "run", str(path))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, f"`{key}`", fragment)


@pytest.mark.parametrize("line, key", [
    ("shear_modulus_GPa = 2000.0", "material.shear_modulus_GPa"),
    ("poisson_ratio = -0.2", "material.poisson_ratio"),
])
def test_value_outside_real_materials_warns_and_runs_on(tmp_path, line, key):
    case = load_case(write_case(tmp_path, TINY_CASE.replace('symbol = "Al"',
                                                            f'symbol = "Al"\n{line}')))
    assert len(case.warnings) == 1 and f"`{key}`" in case.warnings[0]
    assert "the run goes on" in case.warnings[0]


def test_cli_prints_warnings_before_running(tmp_path, capsys):
    text = TINY_CASE.replace('symbol = "Al"', 'symbol = "Al"\nshear_modulus_GPa = 2000.0')
    code, out, err = cli_run(capsys, "run", str(write_case(tmp_path, text)), "--out",
                             str(tmp_path / "run"), "--quiet")
    assert code == 0
    first = err.strip().splitlines()[0]
    assert first.startswith("dlsim: warning: ") and "shear_modulus_GPa" in first


def test_no_crss_has_its_own_exit_code_and_status(tmp_path, capsys, monkeypatch):
    # Give up below the first flow: the ramp ends without a CRSS.
    monkeypatch.setattr(api, "MAX_STRESS_IN_OROWAN", 0.05)
    code, out, err = cli_run(capsys, "run", str(write_case(tmp_path)), "--out",
                             str(tmp_path / "run"), "--quiet")
    assert code == EXIT_NO_RESULT and code != EXIT_BAD_INPUT
    res = json.loads((tmp_path / "run" / output.RESULT).read_text())
    assert res["status"] == "no_crss" and res["crss_MPa"] is None
    assert "no CRSS" in res["message"] and "no flow up to" in res["message"]
    assert "status    no_crss" in out


# --------------------------------------------------------------------------- 4. other tracebacks


def test_estimate_of_an_obstacles_case(capsys):
    demo = Path(__file__).resolve().parents[1] / "cases" / "alloy_dispersoids.toml"
    code, out, _ = cli_run(capsys, "estimate", str(demo))
    assert code == 0
    assert "Foreman–Makin" in out and "assumes" in out
    code, out, _ = cli_run(capsys, "estimate", str(demo), "--json")
    est = json.loads(out)["estimates"]
    assert est["foreman_makin_MPa"] == pytest.approx(0.81 * est["orowan_square_MPa"], rel=1e-12)


@pytest.mark.parametrize("make, fragment", [
    (lambda p: p.write_bytes(b'base = "tiny.toml"\n# caf\xe9\n'), "not UTF-8"),
    (lambda p: p.mkdir(), "is a folder"),
])
def test_unusable_sweep_file_one_line(tmp_path, capsys, make, fragment):
    path = tmp_path / "sweep.toml"
    make(path)
    code, _, err = cli_run(capsys, "sweep", str(path), "--out", str(tmp_path / "out"))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, fragment)


def test_truncated_sweep_record_one_line(tmp_path, capsys):
    sweep = write_sweep(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    (out / output.SWEEP).write_text('{"runs": [{"id": "p000')
    code, _, err = cli_run(capsys, "sweep", str(sweep), "--out", str(out))
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, "not valid JSON", "truncated or damaged")


def test_cli_subprocess_bad_destination_no_traceback(tmp_path):
    case = write_case(tmp_path)
    proc = subprocess.run([sys.executable, "-m", "dlsim.cli", "run", str(case), "--out",
                           str(case)], capture_output=True, text=True, timeout=120)
    assert proc.returncode == EXIT_BAD_INPUT and "Traceback" not in proc.stderr
    assert proc.stderr.count("\n") == 1


def test_compile_notice_with_an_empty_cache(tmp_path):
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path / "cache"))
    proc = subprocess.run([sys.executable, "-c", "from dlsim.api import kernels_need_compiling;"
                           "print(kernels_need_compiling())"], capture_output=True, text=True,
                          env=env, timeout=120)
    assert proc.stdout.strip() == "True", proc.stderr


# --------------------------------------------------------------------------- 6. consistency


def test_realizations_summary_agrees_with_itself(tmp_path):
    case = write_case(tmp_path, TINY_CASE + "[statistics]\nrealizations = 3\n")
    result = api.run_case(case, out_dir=tmp_path / "run")
    s = result.summary
    values = [r["crss_MPa"] for r in s["realizations"]]
    assert s["crss_MPa"] == pytest.approx(np.mean(values), rel=1e-12)
    assert "crss_lo_MPa" not in s                       # no single bracket for a mean
    for r in s["realizations"]:
        lo, hi = r["crss_lo_MPa"], r["crss_hi_MPa"]
        assert lo <= r["crss_MPa"] <= hi
    text = api.format_summary(result)
    assert "mean of 3 realizations" in text and text.count("realization ") >= 3
    hist = output.read_table(tmp_path / "run" / output.HISTORY)
    assert set(hist["realization"]) == {0.0, 1.0, 2.0}
    # one rule for every random field: small [obstacles] boxes are warned about too
    assert any("Nogaret" in w for w in s["warnings"])


def test_interval_of_two_realizations_warns():
    iv = statistics.mean_interval([60.0, 90.0])
    assert iv.lo < 0 < iv.mean                          # t(0.975, 1) = 12.7
    text = " ".join(statistics.interval_warnings(iv))
    assert "rests on 2 realizations" in text and "below zero" in text
    assert "realizations would give" in text


def test_realizations_needed_reaches_the_half_width():
    # with s = 10 and a half-width of 2, the normal estimate (1.96·10/2)² = 96 is a lower bound
    n = statistics.realizations_needed(10.0, 2.0)
    assert n >= 96
    assert statistics.t_quantile(n) * 10.0 / math.sqrt(n) <= 2.0


def test_destination_check_is_pure(tmp_path):
    # The probe leaves nothing behind and an earlier run is left as it was.
    run = tmp_path / "run"
    run.mkdir()
    (run / output.RESULT).write_text("{}")
    assert output.check_destination(run) == run
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]
    assert sorted(p.name for p in run.iterdir()) == [output.RESULT]
    with pytest.raises(OutputError):
        output.check_destination(run / output.RESULT)


def test_sweep_worker_count_bounded(tmp_path, capsys):
    sweep = write_sweep(tmp_path)
    code, _, err = cli_run(capsys, "sweep", str(sweep), "--out", str(tmp_path / "out"),
                           "--workers", "100000")
    assert code == EXIT_BAD_INPUT
    assert_one_error_line(err, "--workers must be an integer in [1, ")
