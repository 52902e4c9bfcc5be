"""Property-based fuzzing of case and sweep files (hypothesis).

Whatever a user writes, loading a case ends in one of two ways: a valid case whose size budget
lies within the documented limits (:mod:`dlsim.bounds`), or a :class:`dlsim.errors.CaseError`
naming the key.  No other exception, no NaN or infinite derived size, no allocation beyond the
limits.  Keys are fuzzed one at a time over a base case (as a user varies one), then the TOML
text itself is mutated byte by byte, then sweep files.
"""
from __future__ import annotations

import math
import os
import string

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from dlsim import bounds
from dlsim.case import ARRAY_SCHEMA, SCHEMA, load_case
from dlsim.errors import CaseError, DlsimError
from dlsim.sweep import load_sweep

BASE = {
    "seed": 3,
    "material": {"symbol": "Al"},
    "line": {"length": 8, "node_spacing": 0.2},
    "obstacles": {"kind": "random", "spacing_nm": 40.0, "critical_angle_deg": 60.0},
}
POPULATIONS = {
    "seed": 3,
    "material": {"symbol": "Al"},
    "line": {"length": 6, "node_spacing": 0.2},
    "populations": [{"name": "p", "volume_fraction": 0.02, "distribution": "lognormal",
                     "mean_radius_nm": 4.0, "sigma": 0.3, "strength": "power_law",
                     "prefactor_nN": 0.3, "exponent": 1.0}],
}
#: Examples per property; DLSIM_FUZZ_EXAMPLES=5000 for a long hunt before a release.
FUZZ = settings(max_examples=int(os.environ.get("DLSIM_FUZZ_EXAMPLES", "60")), deadline=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])

#: Values a user might type for a number: every float (NaN, infinities, subnormals, huge), ints
#: far beyond int64, and the wrong types.
NUMBERS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=-1e3, max_value=1e3),
    st.integers(min_value=-2**70, max_value=2**70),
    st.sampled_from([0, 1, -1, 1e-300, 1e300, 2**63, 2**64, 0.5, 1e9]),
    st.booleans(), st.text(max_size=5), st.lists(st.integers(), max_size=2),
)

NUMERIC_KEYS = [(sec, name) for sec, section in SCHEMA.items() for name, key in
                section.keys.items() if key.type in (int, float) and sec not in ("", "obstacles")]
POPULATION_KEYS = [name for name, key in ARRAY_SCHEMA["populations"].keys.items()
                   if key.type in (int, float)]


def assert_within_budget(case) -> None:
    """A loaded case plans sizes inside the documented limits, all finite."""
    counts = bounds.estimate_counts(case)
    for value in (counts.obstacles, counts.particles, counts.nodes):
        assert math.isfinite(value) and value >= 0
    assert counts.obstacles <= bounds.MAX_OBSTACLES
    assert counts.particles <= bounds.MAX_PARTICLES
    assert counts.nodes <= bounds.MAX_INITIAL_NODES
    assert case.spacing_nm / case.material.burgers_nm >= bounds.MIN_SPACING_B
    for v in (case.line.length_nm, case.line.height_nm, case.line.node_spacing_nm):
        assert math.isfinite(v) and v > 0


def load_or_refuse(raw) -> None:
    try:
        case = load_case(raw)
    except CaseError as err:
        assert "\n" not in str(err) and err.key is not None
        return
    assert_within_budget(case)


@pytest.mark.parametrize("section, name", NUMERIC_KEYS,
                         ids=[f"{s}.{n}" if s else n for s, n in NUMERIC_KEYS])
@FUZZ
@given(value=NUMBERS)
def test_fuzz_one_key_valid_case_or_case_error(section, name, value):
    raw = {k: (dict(v) if isinstance(v, dict) else v) for k, v in BASE.items()}
    raw.setdefault(section, {}) if section else None
    (raw[section] if section else raw)[name] = value
    load_or_refuse(raw)


@pytest.mark.parametrize("name", ["spacing_nm", "density_per_um2", "critical_angle_deg",
                                  "critical_force_nN"])
@FUZZ
@given(value=NUMBERS)
def test_fuzz_obstacle_key_valid_case_or_case_error(name, value):
    obstacles = {"kind": "random", "critical_angle_deg": 60.0, "spacing_nm": 40.0}
    if name == "density_per_um2":
        obstacles.pop("spacing_nm")
    if name == "critical_force_nN":
        obstacles.pop("critical_angle_deg")
    obstacles[name] = value
    load_or_refuse({**BASE, "obstacles": obstacles})


@pytest.mark.parametrize("name", POPULATION_KEYS)
@FUZZ
@given(value=NUMBERS)
def test_fuzz_population_key_valid_case_or_case_error(name, value):
    pop = dict(POPULATIONS["populations"][0])
    if name == "number_density_per_um3":
        pop.pop("volume_fraction")
    pop[name] = value
    load_or_refuse({**POPULATIONS, "populations": [pop]})


@FUZZ
@given(length=NUMBERS, height=NUMBERS, node=NUMBERS, spacing=NUMBERS)
def test_fuzz_box_and_spacings_together(length, height, node, spacing):
    raw = {**BASE, "line": {"length": length, "height": height, "node_spacing": node},
           "obstacles": {"kind": "random", "spacing_nm": spacing, "critical_angle_deg": 0.0}}
    load_or_refuse(raw)


TOML_BASE = """\
seed = 3
[material]
symbol = "Al"
[line]
length = 8
node_spacing = 0.2
[obstacles]
kind = "random"
spacing_nm = 40.0
critical_angle_deg = 60.0
"""


@FUZZ
@given(data=st.data())
def test_fuzz_toml_text_mutations(tmp_path_factory, data):
    raw = bytearray(TOML_BASE.encode())
    for _ in range(data.draw(st.integers(1, 4))):
        pos = data.draw(st.integers(0, len(raw) - 1))
        action = data.draw(st.sampled_from(["replace", "insert", "delete"]))
        byte = data.draw(st.sampled_from(list(b"0123456789.e-+=[]\"'x \n\xff\x00")))
        if action == "replace":
            raw[pos] = byte
        elif action == "insert":
            raw.insert(pos, byte)
        else:
            del raw[pos]
    path = tmp_path_factory.mktemp("fuzz") / "case.toml"
    path.write_bytes(bytes(raw))
    try:
        case = load_case(path)
    except CaseError as err:
        assert "\n" not in str(err)
        return
    assert_within_budget(case)


SPECS = st.one_of(
    st.lists(NUMBERS, min_size=0, max_size=3),
    st.fixed_dictionaries({"linear": st.lists(NUMBERS, min_size=0, max_size=4)}),
    st.fixed_dictionaries({"log": st.lists(NUMBERS, min_size=3, max_size=3)}),
    st.dictionaries(st.text(string.ascii_lowercase, max_size=6), NUMBERS, max_size=2),
    NUMBERS,
)


@FUZZ
@given(spec=SPECS, seeds=NUMBERS, combine=st.sampled_from(["grid", "zip", "other", 3]))
def test_fuzz_sweep_file_valid_or_case_error(spec, seeds, combine):
    sweep = {"base": BASE, "vary": {"obstacles.spacing_nm": spec,
                                    "obstacles.critical_angle_deg": [0, 60]},
             "seeds": seeds, "combine": combine}
    try:
        sw = load_sweep(sweep)
    except DlsimError as err:
        assert "\n" not in str(err)
        return
    assert 1 <= len(sw.runs) <= 100_000
