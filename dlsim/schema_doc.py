"""The case-file reference (docs/cases.md), generated from the schema.

Every table of the reference is read from the data that validates a case: the sections and keys of
:data:`dlsim.case.SCHEMA` and :data:`dlsim.case.ARRAY_SCHEMA` (type, default, allowed values,
one-line description, either/or groups), the keys each choice needs, the material table, the
formats and caps of the input files (:mod:`dlsim.particles`), the keys of a sweep file
(:mod:`dlsim.sweep`) and the limits and plausible ranges of :data:`dlsim.bounds.RANGES`.  A key
added to the schema appears here without further work; ``tests/test_docs.py`` keeps the file in
step with :func:`render`.

Regenerate the file with::

    python -m dlsim.schema_doc > docs/cases.md
"""
from __future__ import annotations

import sys
from typing import Any

from . import bounds, case, particles, sweep
from .materials import TABLE

REGENERATE = "python -m dlsim.schema_doc > docs/cases.md"

#: Units read from the end of a key's name (keys carry their unit in their name), longest first.
UNIT_SUFFIXES = (
    ("_per_um3", "µm⁻³"),
    ("_per_um2", "µm⁻²"),
    ("_GPa", "GPa"),
    ("_MPa", "MPa"),
    ("_nN", "nN"),
    ("_nm", "nm"),
    ("_deg", "degrees"),
)
#: A key without a unit suffix whose description says it counts obstacle spacings.
SPACINGS_PHRASES = ("in obstacle spacings", "in spacings")
SPACINGS_UNIT = "spacings (L or L_s)"
_TYPE_NAMES = {float: "number", int: "integer", str: "string", bool: "boolean"}

#: What each key of a sweep file means (the keys are :data:`dlsim.sweep.SWEEP_KEYS`).
SWEEP_KEY_DOCS = {
    "title": "free text describing the sweep",
    "base": "the base case: a case file relative to the sweep file, or an inline `[base]` table "
            "(with `[base.material]`, `[[base.populations]]`, ...)",
    "vary": "a table of case keys to vary, each a list of values or a range "
            "`{linear = [start, stop, count]}` / `{log = [start, stop, count]}`; keys are "
            "written `\"section.key\"` or `\"populations[i].key\"` (i counted from 1)",
    "combine": "how the varied lists combine: `\"grid\"` (every combination, the default) or "
               "`\"zip\"` (side by side, lists of equal length)",
    "seeds": "the runs per point (integer, default 1): seed index 0 is the point's own case "
             "seed, the others are derived from it",
    "output": "a table with `folder`, the sweep folder relative to the sweep file (`--out` "
              "overrides it)",
}

#: Keys a choice may also take (beyond those it needs), by (choice key, value).
OPTIONAL_WITH = {("distribution", "measured"): getattr(case, "_MEASURED_OPTIONS", ())}

INTRO = """\
# Case-file reference

<!-- Generated from dlsim/case.py, dlsim/bounds.py, dlsim/particles.py, dlsim/materials.py and
dlsim/sweep.py by `{regenerate}`; do not edit by hand (tests/test_docs.py compares the two). -->

A case file is TOML: a few top-level keys and one table per section below.  Every key is checked
when the case loads: an unknown key, a value of the wrong type or outside its range, or a missing
required key stops the run before anything is computed, with one line that names the file, the
key and what is allowed (`dlsim` exits with code 2).  `docs/tutorial.md` walks through a complete
case; `cases/` holds more examples.

How to read the tables:

- **unit**: keys carry their unit in their name (`_nm`, `_MPa`, `_GPa`, `_nN`, `_deg`,
  `_per_um2`, `_per_um3`).  Lengths without `_nm` count obstacle spacings: the period L of a
  square array, or the mean square spacing L_s = N_A^(-1/2) of a random field or of all particle
  populations together (N_A the obstacles per area of glide plane).
- **default**: the value used when the key is absent; **required** keys must be given; "—" marks
  an optional key whose absence the case resolves otherwise (its description says how).
- **allowed**: the check every value must pass.
- Either/or groups are listed under each table: of "exactly one" groups give one key, of "at most
  one" groups give one or none.

Rules that join sections:

- Give exactly one of the table `[obstacles]` (point obstacles) and the array of tables
  `[[populations]]` (particles placed in 3-D and cut by the glide plane).
- Give a material `symbol` of the built-in table, or all three of `shear_modulus_GPa`,
  `poisson_ratio` and `burgers_nm`; numbers given beside a symbol override its values.
- A square array's box sides must be whole multiples of its period L.
- A population read from a file (`arrangement = "file"`) takes its particles and sizes from the
  file and needs the box in nm (`line.length_nm`).
- After the keys, the case's sizes are estimated and checked against the limits at the end of
  this page; values where the model breaks down are refused, values outside real materials
  give a one-line warning (printed, and stored in `result.json`) while the run goes on.

Sweeps address a key as `section.key` (e.g. `obstacles.spacing_nm`), a top-level key by its
name (`seed`), and a key of the i-th population as `populations[i].key` (i counted from 1).
"""


def _escape(text: str) -> str:
    """Text for a cell of a Markdown table."""
    return str(text).replace("|", "\\|").replace("\n", " ")


def _table(header: tuple[str, ...], rows: list[tuple[Any, ...]]) -> str:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(_escape(c) for c in row) + " |" for row in rows]
    return "\n".join(lines) + "\n"


def unit_of(name: str, key: case.Key) -> str:
    """The unit of a key, read from its name (or its description for lengths in spacings)."""
    for suffix, unit in UNIT_SUFFIXES:
        if name.endswith(suffix):
            return unit
    if key.type is float and any(p in key.doc for p in SPACINGS_PHRASES):
        return SPACINGS_UNIT
    return "—"


def type_of(key: case.Key) -> str:
    return _TYPE_NAMES.get(key.type, getattr(key.type, "__name__", str(key.type)))


def default_of(key: case.Key) -> str:
    """The default as it would be written in TOML; **required** or "—" when there is none."""
    value = key.default
    if value is case.REQUIRED:
        return "**required**"
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f'`"{value}"`' if value else '`""`'
    if isinstance(value, float):
        return f"`{value:g}`"
    return f"`{value}`"


def allowed_of(key: case.Key) -> str:
    """The key's check in words, e.g. "a number in (0, 1e+08]"."""
    try:
        return key.allowed
    except (KeyError, AttributeError, IndexError):
        noun = f"a {type_of(key)}"
        return key.check.allowed.format(noun=noun) if key.check else noun


def _names(group: tuple[str, ...]) -> str:
    return ", ".join(f"`{k}`" for k in group)


def _groups(section: case.Section) -> str:
    lines = [f"- Give exactly one of {_names(g)}." for g in section.exactly_one]
    lines += [f"- Give at most one of {_names(g)}." for g in section.at_most_one]
    return ("\n".join(lines) + "\n") if lines else ""


def _needs(section: case.Section) -> str:
    """What each choice of a key of this section needs (case._NEEDS), as a table."""
    needs = getattr(case, "_NEEDS", {})
    rows = []
    for choice_key, choices in needs.items():
        if choice_key not in section.keys:
            continue
        for value, keys in choices.items():
            also = OPTIONAL_WITH.get((choice_key, value), ())
            rows.append((f'`{choice_key} = "{value}"`', _names(keys) if keys else "nothing more",
                         _names(also) if also else "—"))
    if not rows:
        return ""
    return ("\nWhat each choice needs (a key that belongs to another choice is refused, since it "
            "would be silently ignored):\n\n"
            + _table(("choice", "needs", "may also give"), rows))


def _section(title: str, section: case.Section, doc: str | None = None) -> str:
    rows = [(f"`{name}`", type_of(key), unit_of(name, key), default_of(key), allowed_of(key),
             key.doc) for name, key in section.keys.items()]
    doc = doc or section.doc
    text = f"## {title}\n\n{doc[0].upper() + doc[1:]}.\n\n"
    text += _table(("key", "type", "unit", "default", "allowed", "meaning"), rows)
    groups = _groups(section)
    if groups:
        text += "\n" + groups
    return text + _needs(section)


#: The arrays of tables are listed right after this section (their alternative), or last.
ARRAYS_AFTER = "obstacles"


def _sections() -> list[str]:
    arrays = []
    for name, section in case.ARRAY_SCHEMA.items():
        text = _section(f"`[[{name}]]`", section)
        arrays.append(text + f"\nEach `[[{name}]]` table is one element; repeat the table for "
                             f"more.  Errors name an element as `{name}[i].key` (i counted "
                             "from 1).\n")
    out = []
    for name, section in case.SCHEMA.items():
        if name == "":
            out.append(_section("Top level", section, "keys outside any table"))
        else:
            out.append(_section(f"`[{name}]`", section))
        if name == ARRAYS_AFTER:
            out += arrays
            arrays = []
    return out + arrays


def _materials() -> str:
    rows = [(f"`{m.symbol}`", f"{m.shear_modulus_GPa:g}", f"{m.poisson_ratio:g}",
             f"{m.burgers_nm:g}") for m in TABLE.values()]
    return ("## Built-in materials (`material.symbol`)\n\nIsotropic room-temperature constants "
            "(Hill averages of single-crystal constants; b of the usual slip system):\n\n"
            + _table(("symbol", "G (GPa)", "ν", "b (nm)"), rows))


def _files() -> str:
    cols = lambda names: ",".join(names)  # noqa: E731
    lo, hi = particles.MEASURED_SIZE_RANGE_NM
    rows = [
        ('`arrangement = "file"`, `file_kind = "particles"`', f"`{cols(particles.CSV_PARTICLES)}`",
         "spheres in nm, cut by the glide plane z = 0"),
        ('`arrangement = "file"`, `file_kind = "sections"`', f"`{cols(particles.CSV_SECTIONS)}`",
         "planar sections in nm"),
        ('`distribution = "measured"`, one size per row',
         "a column ending in `_nm` (default `radius_nm` or `diameter_nm`)",
         "other columns are ignored"),
        ('`distribution = "measured"`, binned', f"`{cols(particles.CSV_BINS)}`",
         "increasing, not overlapping, whole counts; a gap between bins means no particle there"),
    ]
    return ("## Input files\n\nCSV files (UTF-8) relative to the case file; lines starting with "
            "`#` and blank lines are skipped, columns are found by their header.\n\n"
            + _table(("used by", "columns", "notes"), rows)
            + f"\nCaps: at most {particles.MAX_MEASURED_SIZES:,} measured rows or counted "
              f"particles, sizes in [{lo:g}, {hi:g}] nm, lines of at most "
              f"{particles.MAX_CSV_LINE_CHARS:,} characters, at most "
              f"{particles.MAX_UNFOLD_CLASSES} unfolding classes.  Every bad file is one error "
              "naming the file, the key and the line.\n")


def _sweeps() -> str:
    rows = [(f"`{k}`", SWEEP_KEY_DOCS.get(k, "")) for k in sweep.SWEEP_KEYS]
    return ("## Sweep files\n\nA sweep file (`dlsim sweep SWEEP.toml`) varies the keys of a base "
            "case.  Its top-level keys:\n\n" + _table(("key", "meaning"), rows)
            + f"\nCaps: at most {sweep.MAX_RUNS:,} runs (points × seeds) and {sweep.MAX_SEEDS:,} "
              "seeds per point, checked before a range or a grid is expanded.\n")


def _limits() -> str:
    rows = [(r.quantity, r.keys, r.valid or "—", r.plausible or "—", r.why)
            for r in bounds.RANGES]
    return ("## Limits and plausible ranges\n\nChecked after the keys, on the resolved case and "
            "before anything is allocated.  Outside **refused** the case stops with one line "
            "naming the key, the estimate and the limit; outside **plausible** a one-line warning "
            "is printed and stored in `result.json`, and the run goes on.\n\n"
            + _table(("quantity", "keys", "refused outside", "plausible", "why"), rows))


def render() -> str:
    """The whole reference (Markdown), as docs/cases.md holds it."""
    parts = [INTRO.format(regenerate=REGENERATE), *_sections(), _materials(), _files(), _sweeps(),
             _limits()]
    return "\n".join(parts)


def main() -> int:
    sys.stdout.buffer.write(render().encode("utf-8"))
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
