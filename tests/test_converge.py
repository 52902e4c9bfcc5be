"""The infinite-box CRSS of ``dlsim converge``: the fit, its interval, and the physics.

Finite periodic boxes bias a random field's CRSS (Nogaret & Rodney, Phys. Rev. B 74, 2006); the
extrapolation from boxes of 8-64 L_s is checked against boxes of 10^5 obstacles run directly,
for strong and weak point obstacles, with the arc solver (the exact quasi-static construction of
Foreman & Makin, Phil. Mag. 14, 1966).
"""
from __future__ import annotations

import copy
import json
import math

import numpy as np
import pytest

from dlsim import cli, converge as C, statistics
from dlsim.case import load_case
from dlsim.errors import CaseError

CASE = {
    "seed": 4,
    "material": {"symbol": "Al"},
    "line": {"length": 8, "node_spacing": 0.2},
    "obstacles": {"kind": "random", "spacing_nm": 40.0, "critical_angle_deg": 0.0},
    "statistics": {"budget_realizations": 400, "target_half_width": 0.005},
    "convergence": {"box_min": 8, "box_max": 64, "boxes": 4, "realizations_start": 16},
}
#: Box side of the direct runs: 317² ≈ 10^5 obstacles.
DIRECT_SIDE = 317.0
DIRECT_REALIZATIONS = 6


def case_with(phi_deg: float, **sections):
    d = copy.deepcopy(CASE)
    d["obstacles"]["critical_angle_deg"] = phi_deg
    for name, table in sections.items():
        d[name] = {**d.get(name, {}), **table}
    return load_case(d)


def synthetic(tau_inf, slope, form, sides, n, sd, seed):
    rng = np.random.default_rng(seed)
    x = C.FORMS[form](np.asarray(sides, float))
    return [C.SizeRuns(k, s, s * s, list(tau_inf + slope * xk + sd * rng.standard_normal(n)))
            for k, (s, xk) in enumerate(zip(sides, x))]


@pytest.mark.parametrize("form", ["L^-1", "L^-2"])
def test_fit_recovers_a_known_intercept(form):
    # Coverage of the 95 % interval on synthetic size means (the t/normal interval of a weighted
    # linear fit, e.g. Montgomery & Runger): about 95 of 100 independent data sets cover τ_∞.
    covered = 0
    for seed in range(100):
        sizes = synthetic(100.0, 80.0, form, [8, 16, 32, 64], 30, 4.0, seed)
        fit = C.fit_form(sizes, form)
        covered += fit.lo <= 100.0 <= fit.hi
    assert 88 <= covered <= 100   # binomial(100, 0.95): 88 lies 3.2 sd below the mean


def test_fit_tells_forms_apart_when_the_data_can():
    sizes = synthetic(100.0, 2000.0, "L^-2", [8, 16, 32, 64], 400, 1.0, 7)
    fit, fits = C.best_fit(sizes)
    assert fit.form == "L^-2"
    assert [f.form for f in fits if C.acceptable(f)] == ["L^-2"]
    assert fit.lo <= 100.0 <= fit.hi


def test_envelope_widens_when_forms_cannot_be_told_apart():
    sizes = synthetic(100.0, 0.0, "L^-1", [8, 16, 32, 64], 10, 5.0, 3)
    fit, fits = C.best_fit(sizes)
    kept = [f for f in fits if C.acceptable(f)]
    assert len(kept) > 1
    assert fit.lo == min(f.lo for f in kept) and fit.hi == max(f.hi for f in kept)


@pytest.mark.slow
@pytest.mark.parametrize("phi_deg", [0.0, 150.0])
def test_extrapolation_agrees_with_boxes_of_1e5_obstacles(phi_deg):
    case = case_with(phi_deg)
    result = C.converge_case(case, out_dir=False)
    assert result["solver"] == "arcs"
    lo, hi = result["crss_infinite_ci95_lo_MPa"], result["crss_infinite_ci95_hi_MPa"]
    big = C.size_case(case, DIRECT_SIDE)
    direct = statistics.mean_interval([C._one(big, 99, r) for r in range(DIRECT_REALIZATIONS)])
    # Two independent estimates of one value agree when their difference lies within the
    # combined 95 % half-widths.
    combined = math.hypot(0.5 * (hi - lo), direct.half_width)
    assert abs(result["crss_infinite_MPa"] - direct.mean) <= combined, (result, direct)
    if phi_deg == 150.0:
        # weak obstacles: the smallest box reads high (Nogaret & Rodney 2006) and the data pick
        # the form
        assert result["boxes"][0]["crss_mean_MPa"] > hi
        assert [f["form"] for f in result["forms"] if f["accepted"]] == ["L^-2"]


def test_converge_cli_writes_its_files(tmp_path, capsys):
    path = tmp_path / "case.toml"
    path.write_text("""\
seed = 2
[material]
symbol = "Al"
[line]
length = 8
node_spacing = 0.2
[obstacles]
kind = "random"
spacing_nm = 40.0
critical_angle_deg = 90.0
[statistics]
budget_realizations = 24
[convergence]
box_min = 4
box_max = 16
boxes = 3
realizations_start = 6
""")
    code = cli.main(["converge", str(path), "--out", str(tmp_path / "conv"), "--quiet"])
    out = capsys.readouterr().out
    assert code == 0 and "CRSS of the infinite box" in out
    res = json.loads((tmp_path / "conv" / C.CONVERGE_JSON).read_text())
    assert {"crss_infinite_MPa", "crss_infinite_ci95_lo_MPa", "boxes", "forms"} <= set(res)
    assert [b["box_length_spacings"] for b in res["boxes"]] == pytest.approx([4, 8, 16])
    assert sum(b["n_realizations"] for b in res["boxes"]) == res["n_realizations"] <= 24
    assert (tmp_path / "conv" / "converge.png").stat().st_size > 10_000
    again = C.converge_case(load_case(path), out_dir=False)       # same seed, same numbers
    assert again["crss_infinite_MPa"] == res["crss_infinite_MPa"]


def test_converge_refuses_a_square_array():
    case = load_case({**copy.deepcopy(CASE), "obstacles": {"kind": "square", "spacing_nm": 40.0,
                                                          "critical_angle_deg": 0.0}})
    with pytest.raises(CaseError, match="no finite-size bias"):
        C.converge_case(case, out_dir=False)


def test_convergence_keys_checked():
    with pytest.raises(CaseError, match="convergence.box_max"):
        case_with(0.0, convergence={"box_min": 16, "box_max": 8})
