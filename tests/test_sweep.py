"""Sweeps: sweep-file validation, expansion and seeds, pool vs Dask, resume, summaries."""
from __future__ import annotations

import csv
import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from dlsim.errors import CaseError, DlsimError
from dlsim.sweep import derive_seeds, load_sweep, run_sweep

# A tiny random field (about 3 × 3 obstacles) so that a run takes about a second and its result
# depends on the seed; weak obstacles (φ_c = 120°) keep the line from wandering far.
TINY_CASE = """\
seed = 11
[material]
symbol = "Al"
[line]
length = 3
node_spacing = 0.1
[obstacles]
kind = "random"
spacing_nm = 30.0
critical_angle_deg = 120.0
[loading]
stress_step = 0.05
bisections = 4
"""
# Square array variant: deterministic, with an exact CRSS to check the swept values arrive.
SQUARE_CASE = TINY_CASE.replace('"random"', '"square"').replace("length = 3", "length = 2")
GRID_SWEEP = """\
base = "tiny.toml"
seeds = 2
[vary]
"obstacles.spacing_nm" = [30, 40]
"obstacles.critical_angle_deg" = {linear = [100, 140, 2]}
"""
PHYSICS_COLUMNS = ("crss_MPa", "crss_lo_MPa", "crss_hi_MPa", "orowan_MPa")


def write_sweep(folder: Path, sweep: str = GRID_SWEEP, case: str = TINY_CASE) -> Path:
    """A sweep file and its base case ``tiny.toml`` in ``folder``; returns the sweep file."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "tiny.toml").write_text(case)
    path = folder / "sweep.toml"
    path.write_text(sweep)
    return path


def read_csv(path: Path) -> tuple[list[str], list[dict]]:
    with open(path, newline="") as fh:
        reader = csv.DictReader(fh)
        return list(reader.fieldnames), list(reader)


def physics_files(run_dir: Path) -> dict:
    """What must agree between two executions of a run: every output but the wall time."""
    result = json.loads((run_dir / "result.json").read_text())
    result.pop("wall_time_s")
    files = {p.name: p.read_bytes() for p in run_dir.iterdir() if p.suffix == ".csv"}
    return {"result": result, **files}


@pytest.fixture(scope="module")
def pool_sweep(tmp_path_factory) -> Path:
    """The 2 × 2 grid × 2 seeds sweep run on the local process pool (two workers)."""
    folder = tmp_path_factory.mktemp("pool")
    run_sweep(write_sweep(folder), out_dir=folder / "out", workers=2, progress=False)
    return folder / "out"


# --------------------------------------------------------------------------- sweep files


def test_load_sweep_grid_expands_points_times_seeds(tmp_path):
    sw = load_sweep(write_sweep(tmp_path))
    assert [r.run_id for r in sw.runs] == [f"p{p:03d}_s{s:02d}" for p in range(4) for s in range(2)]
    assert [tuple(r.params.values()) for r in sw.runs[::2]] == [
        (30, 100), (30, 140), (40, 100), (40, 140)]
    first = sw.runs[2]
    assert first.case["obstacles"]["spacing_nm"] == 30
    assert first.case["obstacles"]["critical_angle_deg"] == 140


def test_derive_seeds_match_spawned_children():
    # numpy documents spawn() as children with spawn_key (k,): check against it directly.
    children = np.random.SeedSequence(11).spawn(4)
    expected = [11] + [int(c.generate_state(1)[0]) for c in children[1:]]
    assert derive_seeds(11, 4) == expected
    assert len(set(expected)) == 4


def test_load_sweep_seeds_shared_across_points(tmp_path):
    sw = load_sweep(write_sweep(tmp_path))
    seeds = {(r.point, r.seed_index): r.seed for r in sw.runs}
    assert all(seeds[(p, s)] == seeds[(0, s)] for p in range(4) for s in range(2))
    assert [seeds[(0, s)] for s in range(2)] == derive_seeds(11, 2)


@pytest.mark.parametrize("spec, expected", [
    ("{linear = [10, 50, 5]}", [10, 20, 30, 40, 50]),
    ("{linear = [10.1, 10.3, 3]}", [10.1, 10.2, 10.3]),
    ("{log = [10, 1000, 3]}", [10, 100, 1000]),
    ("{linear = [25, 25, 1]}", [25]),
    ("[35.5, 20]", [35.5, 20]),
])
def test_load_sweep_range_values(tmp_path, spec, expected):
    sw = load_sweep(write_sweep(tmp_path, f'base = "tiny.toml"\n[vary]\n'
                                          f'"obstacles.spacing_nm" = {spec}\n'))
    assert sw.vary["obstacles.spacing_nm"] == pytest.approx(expected, rel=1e-12)
    assert sw.n_points == len(expected)


def test_load_sweep_zip_pairs_values(tmp_path):
    sweep = ('base = "tiny.toml"\ncombine = "zip"\n[vary]\n"obstacles.spacing_nm" = [30, 40, 50]\n'
             '"obstacles.critical_angle_deg" = [100, 110, 120]\n')
    sw = load_sweep(write_sweep(tmp_path, sweep))
    assert [tuple(r.params.values()) for r in sw.runs] == [(30, 100), (40, 110), (50, 120)]


def test_load_sweep_inline_base_and_unquoted_keys(tmp_path):
    case = TINY_CASE.replace("[", "[base.").replace("seed = 11", "[base]\nseed = 11")
    sweep = f"{case}\n[vary]\nobstacles.spacing_nm = [30, 40]\n"
    sw = load_sweep(write_sweep(tmp_path, sweep))
    assert sw.vary == {"obstacles.spacing_nm": [30, 40]}
    assert sw.runs[1].case["obstacles"]["kind"] == "random"


# (id, extra top-level lines, [vary] body, key named by the error)
BAD_SWEEPS = [
    ("unknown_key", "", '"obstacles.spacing" = [30]', "vary.obstacles.spacing"),
    ("empty_list", "", '"obstacles.spacing_nm" = []', "vary.obstacles.spacing_nm"),
    ("empty_range", "", '"obstacles.spacing_nm" = {linear = [10, 20, 0]}',
     "vary.obstacles.spacing_nm.linear"),
    ("log_through_zero", "", '"obstacles.spacing_nm" = {log = [-10, 10, 3]}',
     "vary.obstacles.spacing_nm.log"),
    ("log_at_zero", "", '"obstacles.spacing_nm" = {log = [0, 10, 3]}',
     "vary.obstacles.spacing_nm.log"),
    ("bad_value", "", '"obstacles.spacing_nm" = [30, -5]', "obstacles.spacing_nm"),
    ("seed_count_zero", "seeds = 0", '"obstacles.spacing_nm" = [30]', "seeds"),
    ("seed_count_float", "seeds = 2.5", '"obstacles.spacing_nm" = [30]', "seeds"),
    ("zip_unequal", 'combine = "zip"', '"obstacles.spacing_nm" = [30, 40]\n"line.length" = [3]',
     "combine"),
    ("unknown_sweep_key", "repeat = 3", '"obstacles.spacing_nm" = [30]', "repeat"),
]
CLI_BAD = ("unknown_key", "empty_range", "log_through_zero", "seed_count_float")


def _bad_sweep(extra: str, vary: str) -> str:
    return f'base = "tiny.toml"\n{extra}\n[vary]\n{vary}\n'


@pytest.mark.parametrize("extra, vary, key", [b[1:] for b in BAD_SWEEPS],
                         ids=[b[0] for b in BAD_SWEEPS])
def test_load_sweep_malformed_raises_naming_key(tmp_path, extra, vary, key):
    path = write_sweep(tmp_path, _bad_sweep(extra, vary))
    with pytest.raises(CaseError) as err:
        load_sweep(path)
    assert err.value.key == key
    assert str(path) in str(err.value)


@pytest.mark.parametrize("extra, vary, key", [b[1:] for b in BAD_SWEEPS if b[0] in CLI_BAD],
                         ids=CLI_BAD)
def test_cli_malformed_sweep_exits_2_with_one_line(tmp_path, extra, vary, key):
    path = write_sweep(tmp_path, _bad_sweep(extra, vary))
    proc = subprocess.run([sys.executable, "-m", "dlsim.cli", "sweep", str(path), "--out",
                           str(tmp_path / "out")], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in proc.stderr
    assert f"`{key}`" in lines[0] and str(path) in lines[0]
    assert not (tmp_path / "out" / "runs").exists()


# --------------------------------------------------------------------------- running


def test_run_sweep_summary_tables_match_sweep(pool_sweep):
    cols, rows = read_csv(pool_sweep / "summary_runs.csv")
    keys = ["obstacles_spacing_nm", "obstacles_critical_angle_deg"]   # sweep.column_name
    assert cols[:11] == ["run_id", "point", "seed_index", "seed", *keys, "crss_MPa",
                         "crss_lo_MPa", "crss_hi_MPa", "orowan_MPa", "status"]
    assert [r["run_id"] for r in rows] == [f"p{p:03d}_s{s:02d}" for p in range(4) for s in range(2)]
    pcols, points = read_csv(pool_sweep / "summary_points.csv")
    assert pcols[:9] == ["point", *keys, "n_runs", "crss_mean_MPa", "crss_std_MPa",
                         "crss_sem_MPa", "crss_ci95_lo_MPa", "crss_ci95_hi_MPa"]
    assert len(points) == 4 and all(p["n_runs"] == "2" for p in points)


def test_run_sweep_point_statistics_student_t(pool_sweep):
    _, rows = read_csv(pool_sweep / "summary_runs.csv")
    _, points = read_csv(pool_sweep / "summary_points.csv")
    for point in points:
        crss = np.array([float(r["crss_MPa"]) for r in rows if r["point"] == point["point"]])
        # Student t interval of the mean (any statistics text, e.g. scipy.stats.t.interval).
        lo, hi = stats.t.interval(0.95, crss.size - 1, loc=crss.mean(), scale=stats.sem(crss))
        assert float(point["crss_mean_MPa"]) == pytest.approx(crss.mean(), rel=1e-12)
        assert float(point["crss_ci95_lo_MPa"]) == pytest.approx(lo, rel=1e-9)
        assert float(point["crss_ci95_hi_MPa"]) == pytest.approx(hi, rel=1e-9)


def test_run_sweep_seeds_give_different_fields(pool_sweep):
    a, b = (pool_sweep / "runs" / f"p000_s0{s}" / "obstacles.csv" for s in (0, 1))
    assert a.read_bytes() != b.read_bytes()


def test_run_sweep_dask_local_matches_pool(pool_sweep, tmp_path):
    pytest.importorskip("distributed")
    run_sweep(write_sweep(tmp_path), out_dir=tmp_path / "out", workers=2, scheduler="local",
              progress=False)
    ids = sorted(p.name for p in (pool_sweep / "runs").iterdir())
    assert sorted(p.name for p in (tmp_path / "out" / "runs").iterdir()) == ids
    for run_id in ids:
        assert physics_files(tmp_path / "out" / "runs" / run_id) == \
            physics_files(pool_sweep / "runs" / run_id), run_id


def test_run_sweep_rerun_skips_finished(pool_sweep):
    before = {p: p.stat().st_mtime_ns for p in (pool_sweep / "runs").glob("*/result.json")}
    outcome = run_sweep(pool_sweep.parent / "sweep.toml", out_dir=pool_sweep, progress=False)
    assert outcome.ran == [] and len(outcome.skipped) == 8
    assert {p: p.stat().st_mtime_ns for p in (pool_sweep / "runs").glob("*/result.json")} == before


def test_run_sweep_changed_file_refused(pool_sweep, tmp_path):
    changed = GRID_SWEEP.replace("[30, 40]", "[30, 45]")
    with pytest.raises(CaseError, match="differs from the sweep"):
        run_sweep(write_sweep(tmp_path, changed), out_dir=pool_sweep, progress=False)


def test_run_sweep_square_array_values_arrive(tmp_path):
    """The swept spacing and angle reach each run: CRSS against the exact square-array value."""
    sweep = ('base = "tiny.toml"\n[vary]\n"obstacles.spacing_nm" = [30, 60]\n'
             '"obstacles.critical_angle_deg" = [90]\n')
    out = tmp_path / "out"
    run_sweep(write_sweep(tmp_path, sweep, SQUARE_CASE), out_dir=out, workers=2, progress=False)
    _, rows = read_csv(out / "summary_runs.csv")
    for row in rows:
        # docs/physics.md, square array: τ_c = (2Γ/(bL)) cos(φ_c/2) exactly (Hirth & Lothe); the
        # bracket width is stress_step / 2^bisections = 0.05/16 of 2Γ/(bL), so 1 % is ample.
        exact = float(row["orowan_MPa"]) * math.cos(math.radians(90) / 2)
        assert float(row["crss_MPa"]) == pytest.approx(exact, rel=0.01)
    assert float(rows[0]["orowan_MPa"]) == pytest.approx(2 * float(rows[1]["orowan_MPa"]), rel=1e-9)


@pytest.mark.parametrize("how", ["sigkill_group", "sigterm"])
def test_run_sweep_resume_after_kill(tmp_path, how):
    sweep = GRID_SWEEP.replace("seeds = 2", "seeds = 3")  # 12 runs, one at a time
    path = write_sweep(tmp_path, sweep)
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-m", "dlsim.cli", "sweep", str(path), "--out",
                             str(out), "--workers", "1", "--quiet"], start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    finished = _wait_for_finished_run(out, proc)
    if how == "sigkill_group":
        os.killpg(proc.pid, signal.SIGKILL)  # the hardest interruption: no clean-up at all
        proc.wait(timeout=30)
    else:  # `kill` or a batch system's time limit: stop in-flight runs and exit like Ctrl-C
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=30) == 130
        # the last line (a cold cache may print the one-line compile notice before it)
        assert proc.stderr.read().decode().strip().splitlines()[-1] == "dlsim: interrupted"
    done = _finished_runs(out)
    if how == "sigterm":  # a clean stop removes the hidden folder of a write it interrupted
        assert not [p.name for p in (out / "runs").iterdir() if p.name.startswith(".")]
    assert finished <= done and 0 < len(done) < 12, "the kill must land part-way"
    before = {d: {f.name: f.read_bytes() for f in (out / "runs" / d).iterdir()} for d in done}
    outcome = run_sweep(path, out_dir=out, workers=2, progress=False)
    assert sorted(outcome.skipped) == sorted(done) and len(outcome.ran) == 12 - len(done)
    names = sorted(p.name for p in (out / "runs").iterdir())
    assert names == [f"p{p:03d}_s{s:02d}" for p in range(4) for s in range(3)]
    for d, files in before.items():
        assert {f.name: f.read_bytes() for f in (out / "runs" / d).iterdir()} == files
    assert len(read_csv(out / "summary_runs.csv")[1]) == 12


def _finished_runs(out: Path) -> set:
    """Names of the run folders that hold a result (hidden folders are writes in progress)."""
    return {p.parent.name for p in (out / "runs").glob("*/result.json")
            if not p.parent.name.startswith(".")}


def _wait_for_finished_run(out: Path, proc: subprocess.Popen, timeout: float = 90) -> set:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        done = _finished_runs(out)
        if done:
            return done
        if proc.poll() is not None:
            pytest.fail(f"sweep exited early: {proc.stderr.read().decode()}")
        time.sleep(0.02)
    proc.kill()
    pytest.fail("no run finished in time")


def test_run_sweep_dask_missing_gives_install_hint(tmp_path, monkeypatch):
    import builtins

    real_import = builtins.__import__

    def no_dask(name, *args, **kwargs):
        if name.split(".")[0] in ("dask", "distributed"):
            raise ImportError(name)
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_dask)
    with pytest.raises(DlsimError, match=r"pip install 'dlsim\[cluster\]'"):
        run_sweep(write_sweep(tmp_path), out_dir=tmp_path / "out", scheduler="local",
                  progress=False)


def test_load_sweep_base_paths_resolved_against_case_file(tmp_path):
    """A particle file named relative to the base case still resolves from another folder."""
    cases, sweeps = tmp_path / "cases", tmp_path / "sweeps"
    cases.mkdir()
    sweeps.mkdir()
    (cases / "parts.csv").write_text("x_nm,y_nm,radius_nm\n10,10,2\n50,60,3\n")
    (cases / "base.toml").write_text(
        'seed = 3\n[material]\nsymbol = "Al"\n[line]\nlength_nm = 100\n[[populations]]\n'
        'name = "p"\narrangement = "file"\nfile = "parts.csv"\nfile_kind = "sections"\n'
        'strength = "impenetrable"\n')
    (sweeps / "s.toml").write_text('base = "../cases/base.toml"\n[vary]\n'
                                   '"line.tension_alpha" = [0.4, 0.5]\n')
    sw = load_sweep(sweeps / "s.toml")
    assert [Path(r.case["populations"][0]["file"]) for r in sw.runs] == [
        (cases / "parts.csv").resolve()] * 2
