"""``[solver] method``: auto runs the arc construction wherever a case qualifies; "arcs" where it
cannot is a one-line error naming the key; result.json records the solver that ran."""
from __future__ import annotations

import copy

import pytest

from dlsim import cli
from dlsim.api import run_case
from dlsim.case import load_case
from dlsim.errors import CaseError

POINTS = {
    "seed": 3, "material": {"symbol": "Al"}, "line": {"length": 6, "node_spacing": 0.2},
    "obstacles": {"kind": "random", "spacing_nm": 40.0, "critical_angle_deg": 60.0},
}
DISCS = {
    "seed": 3, "material": {"symbol": "Al"}, "line": {"length": 6, "node_spacing": 0.2},
    "populations": [{"name": "d", "volume_fraction": 0.02, "distribution": "single",
                     "radius_nm": 8.0, "strength": "impenetrable"}],
}
# F_c = 0.6 nN · ρ/nm reaches 2Γ ≈ 2.14 nN (aluminium) at ρ ≈ 3.6 nm
SHEARED = {**DISCS, "populations": [{**DISCS["populations"][0], "radius_nm": 3.0,
                                     "strength": "power_law", "prefactor_nN": 0.6,
                                     "exponent": 1.0}]}
BYPASSED = {**SHEARED, "populations": [{**SHEARED["populations"][0], "radius_nm": 6.0}]}


def with_method(case: dict, method: str | None, **sections) -> dict:
    d = copy.deepcopy(case)
    if method is not None:
        d["solver"] = {"method": method}
    d.update(sections)
    return d


@pytest.mark.parametrize("case, solver", [
    (POINTS, "arcs"), (SHEARED, "arcs"), (DISCS, "nodal"), (BYPASSED, "nodal"),
    (with_method(POINTS, None, elasticity={"model": "dewit_koehler"}), "nodal"),
    (with_method(POINTS, None, strength={"passes": 2}), "nodal"),
])
def test_auto_picks_arcs_where_the_case_qualifies(case, solver):
    assert load_case(case).solver.solver == solver
    assert load_case(with_method(case, "nodal")).solver.solver == "nodal"


@pytest.mark.parametrize("case, fragment", [
    (DISCS, "impenetrable discs of finite size"),
    (BYPASSED, "reach the bypass limit"),
    (with_method(POINTS, None, elasticity={"model": "self_stress"}), "constant line tension"),
    (with_method(POINTS, None, strength={"passes": 3}), "repeated passes"),
])
def test_arcs_where_it_cannot_run_is_one_line_naming_the_key(tmp_path, capsys, case, fragment):
    with pytest.raises(CaseError) as info:
        load_case(with_method(case, "arcs"))
    assert info.value.key == "solver.method" and fragment in info.value.problem
    path = tmp_path / "case.toml"
    path.write_text(_toml(with_method(case, "arcs")))
    assert cli.main(["run", str(path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "`solver.method`" in err[0] and fragment in err[0]


def test_result_records_the_solver():
    assert run_case(POINTS, out_dir=False).summary["solver"] == "arcs"
    assert run_case(with_method(POINTS, "nodal"), out_dir=False).summary["solver"] == "nodal"


def _toml(d: dict) -> str:
    import json

    lines = [f"{k} = {json.dumps(v)}" for k, v in d.items() if not isinstance(v, (dict, list))]
    for name, table in d.items():
        if isinstance(table, dict):
            lines += [f"[{name}]"] + [f"{k} = {json.dumps(v)}" for k, v in table.items()]
        elif isinstance(table, list):
            for element in table:
                lines += [f"[[{name}]]"] + [f"{k} = {json.dumps(v)}" for k, v in element.items()]
    return "\n".join(lines) + "\n"
