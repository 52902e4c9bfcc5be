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
