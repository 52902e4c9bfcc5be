"""Malformed case files: one line on stderr naming file, key and problem; exit code 2.

Each file is also checked with :func:`dlsim.case.load_case` directly, so the messages are tested
even where the command line cannot run.
"""
from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import pytest

from dlsim.case import load_case
from dlsim.errors import CaseError

GOOD = {
    "top": 'title = "Cu, square array"\nseed = 42',
    "material": 'symbol = "Cu"',
    "line": "length = 10\nnode_spacing = 0.05",
    "obstacles": 'kind = "square"\nspacing_nm = 50.0\ncritical_angle_deg = 60.0',
    "loading": "stress_step = 0.02",
}


def case_text(**bodies: str) -> str:
    """A case file: the GOOD sections with some bodies replaced (extra sections are appended)."""
    parts = {**GOOD, **bodies}
    text = parts.pop("top") + "\n"
    return text + "".join(f"\n[{name}]\n{body}\n" for name, body in parts.items())


BAD_CASES = [
    # (file stem, content, key, fragment of the problem)
    ("unknown_section", case_text(materail='symbol = "Cu"'), "materail",
     "unknown section; did you mean `material`?"),
    ("misspelt_key", case_text(line="lenght = 10"), "line.lenght",
     "unknown key; did you mean `line.length`?"),
    ("seed_string", case_text(top='seed = "42"'), "seed", 'got "42"; must be an integer in [0, 9223372036854775807]'),
    ("seed_missing", case_text(top='title = "no seed"'), "seed", "missing"),
    ("alpha_bool", case_text(line="length = 10\ntension_alpha = true"), "line.tension_alpha",
     "got true; must be a number in (0, 100]"),
    ("poisson_too_big", case_text(material='symbol = "Cu"\npoisson_ratio = 0.6'),
     "material.poisson_ratio", "got 0.6; must be a number in (-1, 0.5)"),
    ("unknown_symbol", case_text(material='symbol = "Cuu"'), "material.symbol",
     'got "Cuu"; did you mean "Cu"?'),
    ("numbers_incomplete", case_text(material="shear_modulus_GPa = 40.0\npoisson_ratio = 0.3"),
     "material.burgers_nm", "missing; give `material.symbol`"),
    ("length_twice", case_text(line="length = 10\nlength_nm = 500.0"), "line.length_nm",
     "give only one of"),
    ("no_strength", case_text(obstacles='kind = "square"\nspacing_nm = 50.0'),
     "obstacles.critical_angle_deg", "missing; give one of"),
    ("angle_out_of_range",
     case_text(obstacles='kind = "square"\nspacing_nm = 50.0\ncritical_angle_deg = 200'),
     "obstacles.critical_angle_deg", "got 200.0; must be a number in [0, 180]"),
    ("unknown_kind",
     case_text(obstacles='kind = "hexagonal"\nspacing_nm = 50.0\ncritical_angle_deg = 0.0'),
     "obstacles.kind", 'must be one of "square", "random"'),
    ("spacing_infinite",
     case_text(obstacles='kind = "random"\nspacing_nm = inf\ncritical_angle_deg = 0.0'),
     "obstacles.spacing_nm", "got inf; must be a finite number in [0.001, 1e+08]"),
    ("box_not_whole", case_text(line="length = 10.5"), "line.length",
     "a square array needs a whole number of spacings"),
    ("nodes_coarser_than_box", case_text(line="length = 10\nnode_spacing_nm = 400.0"),
     "line.node_spacing_nm", "must be at most 125 nm"),
    ("friction_negative", case_text(friction="stress_MPa = -5.0"), "friction.stress_MPa",
     "got -5.0; must be a number >= 0"),
    ("temperature_negative", case_text(thermal="temperature_K = -1.0"),
     "thermal.temperature_K", "got -1.0; must be a number in [0, 5000]"),
    ("p_zero", case_text(thermal="temperature_K = 300.0\np = 0.0"), "thermal.p",
     "got 0.0; must be a number in (0, 1]"),
    ("q_above_two", case_text(thermal="temperature_K = 300.0\nq = 2.5"), "thermal.q",
     "got 2.5; must be a number in [1, 2]"),
    ("strain_rate_zero", case_text(thermal="strain_rate_per_s = 0.0"),
     "thermal.strain_rate_per_s", "got 0.0; must be a number in [1e-12, 1e+06]"),
    ("step_too_big", case_text(loading="stress_step = 1.5"), "loading.stress_step",
     "got 1.5; must be a number in [0.0005, 1)"),
    ("snapshots_negative", case_text(output="snapshot_every = -1"), "output.snapshot_every",
     "got -1; must be an integer in [0, 2147483647]"),
    ("unknown_line_model", case_text(elasticity='model = "dewitt"'), "elasticity.model",
     'got "dewitt"; must be one of "constant", "dewit_koehler", "self_stress"'),
    ("character_out_of_range", case_text(elasticity="character_deg = -10"),
     "elasticity.character_deg", "got -10.0; must be a number in [0, 180]"),
    ("outer_inside_core",
     case_text(elasticity='model = "dewit_koehler"\ncore_radius_nm = 2.0\nouter_radius_nm = 1.0'),
     "elasticity.outer_radius_nm", "is not larger than the core radius 2 nm"),
    ("refresh_zero", case_text(elasticity='model = "self_stress"\nrefresh = 0'),
     "elasticity.refresh", "got 0; must be an integer in [1, 1000000]"),
]

# File-level problems: (file stem, how to make it, fragment of the problem)
FILE_PROBLEMS = [
    ("syntax_error", lambda p: p.write_text(case_text().replace("seed = 42", "seed = "),
                                            encoding="utf-8"),
     "TOML syntax error"),
    ("missing", lambda p: None, "no such file"),
    ("a_directory", lambda p: p.mkdir(), "is a directory"),
    ("latin1", lambda p: p.write_bytes('title = "Müller"\nseed = 1\n'.encode("latin-1")),
     "not UTF-8"),
]

NEEDS_API = pytest.mark.skipif(importlib.util.find_spec("dlsim.api") is None,
                               reason="dlsim.api (run_case) not written yet")


def write_bad(tmp_path: Path, stem: str, content: str) -> Path:
    path = tmp_path / f"{stem}.toml"
    path.write_text(content, encoding="utf-8")
    return path


def run_cli(path: Path, cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "dlsim.cli", "run", str(path)], cwd=cwd,
                          capture_output=True, text=True, timeout=120)


def assert_one_line_error(proc: subprocess.CompletedProcess, *fragments: str) -> None:
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert lines[0].startswith("dlsim: error: ")
    for fragment in fragments:
        assert fragment in lines[0]


def test_good_case_text_is_valid(tmp_path):
    case = load_case(write_bad(tmp_path, "good", case_text()))
    assert case.material.symbol == "Cu" and case.line.length_nm == 500.0
    assert case.obstacles.critical_angle_deg == 60.0


@pytest.mark.parametrize("stem, content, key, fragment", BAD_CASES,
                         ids=[case[0] for case in BAD_CASES])
def test_load_case_bad_file_names_file_key_and_problem(tmp_path, stem, content, key, fragment):
    path = write_bad(tmp_path, stem, content)
    with pytest.raises(CaseError) as info:
        load_case(path)
    assert str(info.value) == f"{path}: `{key}`: {info.value.problem}"
    assert info.value.key == key
    assert fragment in info.value.problem


@pytest.mark.parametrize("stem, make, fragment", FILE_PROBLEMS, ids=[p[0] for p in FILE_PROBLEMS])
def test_load_case_unusable_file_names_file_and_problem(tmp_path, stem, make, fragment):
    path = tmp_path / f"{stem}.toml"
    make(path)
    with pytest.raises(CaseError) as info:
        load_case(path)
    assert str(info.value).startswith(f"{path}: ")
    assert fragment in info.value.problem


def test_load_case_syntax_error_names_the_line(tmp_path):
    path = write_bad(tmp_path, "syntax", case_text().replace("seed = 42", "seed = "))
    with pytest.raises(CaseError, match=r"at line 2\b"):
        load_case(path)


@NEEDS_API
@pytest.mark.parametrize("stem, content, key, fragment", BAD_CASES,
                         ids=[case[0] for case in BAD_CASES])
def test_cli_run_bad_case_prints_one_line_and_exits_2(tmp_path, stem, content, key, fragment):
    path = write_bad(tmp_path, stem, content)
    assert_one_line_error(run_cli(path, tmp_path), str(path), f"`{key}`", fragment)


@NEEDS_API
@pytest.mark.parametrize("stem, make, fragment", FILE_PROBLEMS, ids=[p[0] for p in FILE_PROBLEMS])
def test_cli_run_unusable_file_prints_one_line_and_exits_2(tmp_path, stem, make, fragment):
    path = tmp_path / f"{stem}.toml"
    make(path)
    assert_one_line_error(run_cli(path, tmp_path), str(path), fragment)
