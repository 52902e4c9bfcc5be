"""The user documentation in docs/ and README.md kept in step with the code.

- docs/cases.md is generated from the schema (dlsim.schema_doc.render) and must equal it;
- every case key, choice and documented limit appears in it, and a key added to the schema
  appears without touching the generator.
"""
from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from dlsim import bounds, case, schema_doc

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
CASES_MD = DOCS / "cases.md"


def _chunk(text: str, heading: str) -> str:
    """The part of a Markdown text from ``heading`` to the next heading of its level."""
    start = text.index(heading + "\n")
    end = text.find("\n## ", start + len(heading))
    return text[start:] if end < 0 else text[start:end]


def test_cases_md_equals_generated_reference():
    written = CASES_MD.read_text(encoding="utf-8")
    assert written == schema_doc.render(), (
        f"docs/cases.md is out of date with the schema; regenerate it: {schema_doc.REGENERATE}")


def _section_keys():
    for name, section in case.SCHEMA.items():
        yield ("## Top level" if name == "" else f"## `[{name}]`"), name, section
    for name, section in case.ARRAY_SCHEMA.items():
        yield f"## `[[{name}]]`", name, section


@pytest.mark.parametrize("heading, name, section", list(_section_keys()),
                         ids=[name or "top" for _, name, _ in _section_keys()])
def test_cases_md_lists_every_key_of_its_section(heading, name, section):
    chunk = _chunk(schema_doc.render(), heading)
    for key, spec in section.keys.items():
        row = next((line for line in chunk.splitlines() if line.startswith(f"| `{key}` |")), None)
        assert row is not None, f"{name}.{key} missing from docs/cases.md"
        assert schema_doc.allowed_of(spec).replace("|", "\\|") in row
        assert spec.doc.replace("|", "\\|") in row
    for group in section.exactly_one + section.at_most_one:
        assert schema_doc._names(group) in chunk


def test_cases_md_lists_what_each_choice_needs():
    text = schema_doc.render()
    for choice_key, choices in case._NEEDS.items():
        for value, keys in choices.items():
            row = next(line for line in text.splitlines()
                       if line.startswith(f'| `{choice_key} = "{value}"` |'))
            assert all(f"`{k}`" in row for k in keys)


def test_cases_md_lists_every_limit_and_range():
    chunk = _chunk(schema_doc.render(), "## Limits and plausible ranges")
    for r in bounds.RANGES:
        assert f"| {r.quantity} | {r.keys} |" in chunk


def test_cases_md_documents_every_sweep_key():
    from dlsim import sweep
    assert set(schema_doc.SWEEP_KEY_DOCS) == set(sweep.SWEEP_KEYS)


@pytest.mark.parametrize("name, unit", [("length_nm", "nm"), ("stress_MPa", "MPa"),
                                        ("density_per_um2", "µm⁻²"), ("character_deg", "degrees"),
                                        ("tension_alpha", "—")])
def test_unit_of_reads_the_key_name(name, unit):
    assert schema_doc.unit_of(name, case.Key(float, "a quantity")) == unit


def test_render_takes_a_section_added_to_the_schema(monkeypatch):
    # The schema grows while the docs stay generated: a new section, an unseen key type and a
    # choice with needs appear without any change to the generator.
    new = case.Section("thermal activation of pinned obstacles", {
        "temperature_K": case.Key(float, "the temperature in K", 0.0, case.at_least(0)),
        "enabled": case.Key(bool, "whether thermal activation runs", False),
        "law": case.Key(str, "the activation law", "kaa", case.one_of("kaa", "none")),
        "barrier_eV": case.Key(float, "ΔF_0 in eV", None, case.above(0)),
    })
    monkeypatch.setitem(case.SCHEMA, "thermal", new)
    monkeypatch.setitem(case._NEEDS, "law", {"kaa": ("barrier_eV",), "none": ()})
    text = schema_doc.render()
    chunk = _chunk(text, "## `[thermal]`")
    assert "| `temperature_K` | number | — | `0` | a number >= 0 | the temperature in K |" in chunk
    assert "| `enabled` | boolean | — | false | a boolean |" in chunk
    assert '| `law = "kaa"` | `barrier_eV` |' in chunk


def test_schema_doc_module_prints_the_reference():
    out = subprocess.run([sys.executable, "-m", "dlsim.schema_doc"], capture_output=True,
                         timeout=120, cwd=ROOT, env={"PYTHONIOENCODING": "ascii", "PATH": ""})
    assert out.returncode == 0, out.stderr
    assert out.stdout == schema_doc.render().encode("utf-8")


# ---------------------------------------------------------------------------------------------
# The tutorial: its case file, sweep file, commands and script are the real ones

TUTORIAL = DOCS / "tutorial.md"
TUTORIAL_CASE = ROOT / "cases" / "tutorial_halvanite.toml"
FENCE = re.compile(r"^```(\w*)\n(.*?)^```$", re.S | re.M)


def _blocks(path: Path, language: str) -> list[str]:
    return [body for lang, body in FENCE.findall(path.read_text(encoding="utf-8"))
            if lang == language]


def test_tutorial_case_block_is_the_case_file():
    # The tutorial shows the whole case file, exactly as it is in cases/.
    assert _blocks(TUTORIAL, "toml")[0] == TUTORIAL_CASE.read_text(encoding="utf-8")


def test_tutorial_toml_blocks_load(tmp_path):
    import shutil
    from dlsim.sweep import load_sweep

    case_block, *sweeps = _blocks(TUTORIAL, "toml")
    loaded = case.load_case(TUTORIAL_CASE)
    assert loaded.statistics.realizations > 1 and len(loaded.populations) == 2
    assert sweeps, "the tutorial shows a sweep file"
    (tmp_path / "cases").mkdir()
    shutil.copy(TUTORIAL_CASE, tmp_path / "cases" / TUTORIAL_CASE.name)
    for k, text in enumerate(sweeps):
        path = tmp_path / f"sweep_{k}.toml"      # saved in the repository root, as the text says
        path.write_text(text, encoding="utf-8")
        sw = load_sweep(path)
        assert len(sw.runs) > 1


def _commands(path: Path) -> list[list[str]]:
    import shlex
    return [shlex.split(line[2:]) for body in _blocks(path, "console")
            for line in body.splitlines() if line.startswith("$ dlsim ")]


@pytest.mark.parametrize("argv", _commands(TUTORIAL), ids=" ".join)
def test_tutorial_command_is_a_real_command(argv):
    # argparse exits on an unknown sub-command or option
    from dlsim.cli import build_parser
    args = build_parser().parse_args(argv[1:])
    assert callable(args.func)


def test_tutorial_script_runs_on_a_result(tmp_path, monkeypatch, capsys):
    # The script of the tutorial, run on a smaller version of the tutorial case (a box of 6 L_s,
    # two realizations): every name it reads is in result.json.
    import tomllib
    from dlsim.api import run_case

    raw = tomllib.loads(TUTORIAL_CASE.read_text(encoding="utf-8"))
    raw["line"]["length"] = 6
    raw["statistics"]["realizations"] = 2
    run_case(raw, out_dir=tmp_path / "runs" / "tutorial_halvanite")
    monkeypatch.chdir(tmp_path)
    (script,) = _blocks(TUTORIAL, "python")
    exec(compile(script, str(TUTORIAL), "exec"), {})
    out = capsys.readouterr().out
    assert out.startswith("CRSS ") and "Δσ" in out and "L_s" in out


# ---------------------------------------------------------------------------------------------
# The physics notes: every test of the validation table exists


PHYSICS = DOCS / "physics.md"
TEST_REF = re.compile(r"`(tests/test_\w+\.py)::(test_\w+)`")


def test_physics_validation_table_names_existing_tests():
    text = PHYSICS.read_text(encoding="utf-8")
    refs = TEST_REF.findall(_chunk(text, "## Validation table"))
    assert len(refs) > 30
    for path, name in refs:
        source = (ROOT / path).read_text(encoding="utf-8")
        assert re.search(rf"^def {name}\(", source, re.M), f"{path}::{name} not found"


def test_physics_notes_say_when_the_model_is_athermal():
    text = PHYSICS.read_text(encoding="utf-8")
    assert "## Status: athermal unless `[thermal]` is given" in text
    assert "## Thermal activation" in text and "## The arc solver" in text


# ---------------------------------------------------------------------------------------------
# README: set-up commands kept, every output file, extra and document named


README = ROOT / "README.md"


def test_readme_keeps_the_setup_commands():
    text = README.read_text(encoding="utf-8")
    # the CI runs the second command verbatim
    assert "    pip install . && dlsim run cases/alloy_dispersoids.toml\n" in text
    assert '    pip install ".[test]" && python -m pytest -q\n' in text


def test_readme_names_every_output_file():
    from dlsim import output
    chunk = _chunk(README.read_text(encoding="utf-8"), "## Output files")
    for name in (output.RESULT, output.OBSTACLES, output.LINE, output.HISTORY, output.LOOPS,
                 output.SNAPSHOTS, output.SWEEP, "summary_runs.csv", "summary_points.csv"):
        assert f"`{name}`" in chunk, name


def test_readme_names_every_optional_extra():
    import tomllib
    extras = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"][
        "optional-dependencies"]
    chunk = _chunk(README.read_text(encoding="utf-8"), "## Optional extras")
    for name in extras:
        assert f'pip install ".[{name}]"' in chunk, name


@pytest.mark.parametrize("doc", ["docs/cases.md", "docs/physics.md", "docs/tutorial.md"])
def test_readme_points_to_the_docs(doc):
    assert f"`{doc}`" in README.read_text(encoding="utf-8") and (ROOT / doc).is_file()


@pytest.mark.parametrize("path", [README, *sorted(DOCS.glob("*.md"))], ids=lambda p: p.name)
def test_docs_cite_nothing_outside_the_repository(path):
    text = path.read_text(encoding="utf-8")
    assert "/work/" not in text and "shared/" not in text
    assert re.search(r"(?<!docs/)physics\.md", text) is None
