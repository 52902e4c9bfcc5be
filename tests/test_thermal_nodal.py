"""Thermally activated glide on the nodal line (dlsim.thermal, nodal path) against closed forms
and against the arc construction.

Sources: the one-pin array's stress τ(T) = (F_c/(bL)) [1 - ((kT/ΔF0) ln(ε̇0/ε̇))^(1/q)]^(1/p),
ε̇0 = ρ_m b L ν0 (Kocks, Argon & Ashby, *Thermodynamics and Kinetics of Slip*, 1975); the arc
construction as the exact quasi-static reference for point obstacles under a constant line
tension (Foreman & Makin, Phil. Mag. 14, 1966).  Coarse nodes (0.1-0.2 spacings: ARC_DRIVE
keeps circular arcs and the pin force exact at any spacing) and few events keep each test short;
the tolerances follow from the event counts, as said beside each check.
"""
import json
import math

import numpy as np
import pytest

from dlsim import api
from dlsim import contract as C
from dlsim.case import load_case
from dlsim.line import LineState
from dlsim.thermal import drop_loops_behind

from test_cli_errors import run_cli
from test_plots import POPULATION_CASE
from test_thermal import (fc_over_bl_mpa, kaa_activation_volume_b3, kaa_stress_over_fc,
                          one_pin_case)

#: Node spacing of the one-pin array in spacings (10 nodes a period).
ONE_PIN_NODES = 0.1


def nodal(c: dict, node_spacing: float) -> dict:
    c["solver"] = {"method": "nodal"}
    c["line"]["node_spacing"] = node_spacing
    return c


@pytest.mark.parametrize("temperature", [50.0, 150.0, 300.0])
def test_nodal_one_pin_array_stress_follows_kaa(temperature):
    # τ(T) = (F_c/(bL)) [1 - ((kT/ΔF0) ln(ε̇0/ε̇))^(1/q)]^(1/p) (Kocks, Argon & Ashby 1975),
    # within 2 % (the tolerance).  240 measured events give ln ε̇ to 1/sqrt(240) = 6.5 %,
    # the stress to 0.8 % at 300 K (dlnτ/dlnε̇ = kT/(V*τ) = 0.13 there), 0.3 % at 150 K, 0.1 %
    # at 50 K.
    c = nodal(one_pin_case(temperature, events=300, sequences=1), ONE_PIN_NODES)
    assert load_case(c).solver.solver == "nodal"
    res = api.run_case(c, out_dir=False)
    expect = fc_over_bl_mpa() * kaa_stress_over_fc(temperature)
    assert res.summary["crss_MPa"] == pytest.approx(expect, rel=0.02)
    assert res.summary["crss_MPa"] < res.summary["crss_athermal_MPa"]
    # V* = -∂ΔG/∂τ of the same formula, 5 % as on arcs (tests/test_thermal.py): with one pin
    # every event is the same release, so the central difference does not depend on the events
    assert res.summary["activation_volume_b3"] == pytest.approx(
        kaa_activation_volume_b3(temperature), rel=0.05)
    # the same seed gives the arcs the same event numbers and, with one pin, the same events:
    # the two differ only by the nodal line's pin force at equilibrium, within the project's
    # two-solver target of 0.5 % (tests/test_two_solvers.py; measured 0.06 % at 300 K)
    c["solver"] = {"method": "arcs"}
    arcs = api.run_case(c, out_dir=False).summary["crss_MPa"]
    assert res.summary["crss_MPa"] == pytest.approx(arcs, rel=0.005)


def test_nodal_one_pin_array_with_friction_adds_the_friction_stress():
    # lattice friction is a threshold on the driving stress (docs/physics.md, "Lattice friction"):
    # the one-pin stress becomes τ_f + the formula (Kocks, Argon & Ashby 1975); 2 % at 150 K,
    # where 120 measured events give the thermal part to 0.4 % (of the whole as well)
    c = nodal(one_pin_case(150.0, events=150, sequences=1), ONE_PIN_NODES)
    c["friction"] = {"stress_MPa": 5.0}
    res = api.run_case(c, out_dir=False)
    expect = 5.0 + fc_over_bl_mpa() * kaa_stress_over_fc(150.0)
    assert res.summary["crss_MPa"] == pytest.approx(expect, rel=0.02)


def test_nodal_one_pin_array_with_dewit_koehler_line_follows_kaa():
    # the de Wit-Koehler line needs the nodal solver.  On one pin per period the force balance of
    # a period (the applied τ b Lx against the pin's reaction; the line energy's own forces sum
    # to zero over a period) makes the pin force τbL for any line energy, so the one-pin formula
    # (Kocks, Argon & Ashby 1975) holds as for a constant tension: within 2 % at 150 K, where
    # 120 measured events give the stress to 0.4 % (dlnτ/dlnε̇ = 0.045)
    c = one_pin_case(150.0, events=150, sequences=1)
    c["line"]["node_spacing"] = ONE_PIN_NODES
    c["elasticity"] = {"model": "dewit_koehler"}
    c["solver"] = {"method": "auto"}
    assert load_case(c).solver.solver == "nodal"
    res = api.run_case(c, out_dir=False)
    expect = fc_over_bl_mpa() * kaa_stress_over_fc(150.0)
    assert res.summary["crss_MPa"] == pytest.approx(expect, rel=0.02)


def random_case(temperature: float, method: str, events: int, sequences: int, side: int = 6
                ) -> dict:
    """A random field ``side`` L_s a side (φc = 90°, seed 1), nodes 0.2 L_s apart."""
    c = one_pin_case(temperature, events=events, sequences=sequences)
    c["seed"] = 1
    c["line"] = {"length": side, "node_spacing": 0.2}
    c["obstacles"] = {"kind": "random", "spacing_nm": 50.0, "critical_angle_deg": 90.0}
    c["solver"] = {"method": method}
    return c


def test_nodal_and_arcs_agree_on_the_same_random_field():
    # The arc construction is exact for point obstacles under a constant line tension (Foreman &
    # Makin 1966), so on the same field (64 points, 150 K) with the same event numbers (same
    # seed) the nodal line must give the same stress.  The pick walks the pins in obstacle order
    # on both, so the sequences stay paired until an avalanche ends differently (measured: equal
    # to 1e-4 on this field, 0.03-0.3 % on four 8 L_s fields of 6 x 200 events).  Bounds: 3 σ of the difference of two independent
    # means (each σ from its own spread over the sequences; paired sequences differ less), and
    # the project's two-solver target of 0.5 % (tests/test_two_solvers.py).  The athermal CRSS
    # of this field differs by 1.1 % (an avalanche path, as on the known fields there); the
    # thermal stress, 20 % of it, is set by activations far below it.
    runs = {m: np.array(api.run_case(random_case(150.0, m, 150, 3, side=8), out_dir=False)
                        .summary["crss_sequences_MPa"]) for m in ("arcs", "nodal")}
    a, n = runs["arcs"], runs["nodal"]
    sigma = math.sqrt(a.var(ddof=1) / a.size + n.var(ddof=1) / n.size)
    assert abs(n.mean() - a.mean()) < 3.0 * sigma
    assert n.mean() == pytest.approx(a.mean(), rel=0.005)


def test_nodal_random_field_stress_falls_with_temperature_to_the_athermal_crss():
    # thermal activation only lowers the stress, more the hotter (Kocks, Argon & Ashby 1975),
    # and the gap to the athermal CRSS closes as T^(1/q) at T -> 0: bounded at 2 K by three
    # times the one-pin formula's gap (4.6 %), as on arcs (tests/test_thermal.py)
    temps = [2.0, 20.0, 150.0]
    runs = [api.run_case(random_case(t, "nodal", 60, 1), out_dir=False).summary for t in temps]
    crss = [r["crss_MPa"] for r in runs]
    athermal = runs[0]["crss_athermal_MPa"]
    assert all(a > b for a, b in zip(crss, crss[1:])), crss
    assert crss[0] < athermal
    assert 1.0 - crss[0] / athermal < 3 * (1.0 - kaa_stress_over_fc(2.0))


#: Impenetrable discs (they need the nodal line) beside shearable points, two realizations,
#: at 300 K.
DISC_THERMAL_CASE = POPULATION_CASE + """\
[thermal]
temperature_K = 300.0
events = 40
sequences = 1
"""


def test_cli_disc_field_runs_thermal_on_the_nodal_line(tmp_path):
    # the case needs the nodal line (finite impenetrable discs): the run succeeds and writes the
    # thermal keys (docs/outputs.md); the stress at 300 K lies below the athermal CRSS, since
    # the shearable clusters are overcome by thermal activation (Kocks, Argon & Ashby 1975)
    path = tmp_path / "discs.toml"
    path.write_text(DISC_THERMAL_CASE, encoding="utf-8")
    proc = run_cli(path, tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert load_case(path).solver.solver == "nodal"
    run = next(tmp_path.glob("**/result.json")).parent
    summary = json.loads((run / "result.json").read_text())
    for key in ("temperature_K", "strain_rate_per_s", "crss_athermal_MPa", "crss_sequences_MPa",
                "activation_volume_b3", "n_sequences", "n_events_per_sequence"):
        assert key in summary, key
    assert summary["temperature_K"] == 300.0
    assert 0.0 < summary["crss_MPa"] < summary["crss_athermal_MPa"]
    head = (run / "history.csv").read_text().splitlines()[0].split(",")
    assert head[-3:] == ["velocity_m_per_s", "strain_rate_per_s", "sequence"]
    assert math.isfinite(summary["activation_volume_b3"])


def naive_drop_loops_behind(y_line, loops, opin, oy, Ly):
    """NumPy twin of :func:`dlsim.thermal.drop_loops_behind` on a list of (y, pin) loops: those
    wholly below the line's lowest node go, with their holds on the obstacle images at their
    nodes' heights (dlsim.contract.occupancy)."""
    ymin = y_line.min()
    kept = [(ly, lp) for ly, lp in loops if ly.max() >= ymin]
    opin = opin.copy()
    for ly, lp in loops:
        if ly.max() < ymin:
            opin -= C.occupancy(lp, ly, oy, Ly, opin.size)
    return kept, opin


def test_drop_loops_behind_matches_its_twin():
    rng = np.random.default_rng(3)
    Ly = 40.0                                  # loops one box height apart hold different images
    state = LineState.straight(100.0, 50.0, 10.0)
    state.y[: state.n] += rng.uniform(-5.0, 5.0, state.n)
    loops = [(rng.uniform(lo, lo + 8.0, k), rng.integers(-1, 6, k))
             for lo, k in [(0.0, 5), (42.0, 4), (20.0, 6), (48.0, 3), (10.0, 1)]]
    oy = rng.uniform(0.0, Ly, 6)
    opin = np.zeros(6, np.int64)
    off = [0]
    for ly, lp in loops:
        a = off[-1]
        state.loop_y[a:a + ly.size], state.loop_pin[a:a + ly.size] = ly, lp
        state.loop_x[a:a + ly.size] = rng.uniform(0.0, 100.0, ly.size)
        opin += C.occupancy(lp, ly, oy, Ly, 6)
        off.append(a + ly.size)
    state.loop_off[: len(off)] = off
    state.meta[C.M_NLOOPS], state.meta[C.M_NLOOPNODES] = len(loops), off[-1]
    kept, want = naive_drop_loops_behind(state.y[: state.n], loops, opin, oy, Ly)
    got = opin.copy()
    z = np.zeros(6)
    field = (z, oy, z, got, np.zeros(2, np.int64), np.zeros(0, np.int64), 1, 1, 100.0, Ly)
    dropped = drop_loops_behind(state.line, state.n, state.meta, state.loop_arrays, field)
    assert dropped == len(loops) - len(kept) > 0 and len(kept) > 0
    assert np.array_equal(got, want)
    assert [(ly.tolist(), lp.tolist()) for ly, lp in kept] == [
        (ly.tolist(), lp.tolist()) for _, ly, lp in state.loops()]
