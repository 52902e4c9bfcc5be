"""Line models beyond a constant line tension, through the time stepper and the CRSS search.

Sources beside each check: de Wit & Koehler, Phys. Rev. 116 (1959) 1113 (line energy
E(θ) = K (1 - ν cos²θ)/(1 - ν), stiffness E + E''); Hirth & Lothe, *Theory of Dislocations*
(1982), ch. 6-7 (bow-out radius R = Γ/(τb) with the stiffness as Γ); Bacon, Kocks & Scattergood,
Phil. Mag. 28 (1973) 1241 (Orowan stress with the line's self-interaction).
"""
from __future__ import annotations

import copy
import json

import numba
import numpy as np
import pytest

from dlsim.api import run_case
from dlsim.fields import ParticleTable, particle_field, random_field, square_field
from dlsim.line import LineState
from dlsim.solver import Elasticity, LineModel, Protocol, Relaxer, find_crss

NU = 1.0 / 3.0
A_CORE = 1.0        # b


def dwk_K(r_out, r_core=A_CORE):
    """K = ln(R_out/r_core)/(4π) (G b²), de Wit & Koehler 1959."""
    return np.log(r_out / r_core) / (4.0 * np.pi)


def dwk_energy(theta, K, nu=NU):
    """E(θ) = K (1 - ν cos²θ)/(1 - ν), θ between line and Burgers vector (de Wit & Koehler)."""
    return K * (1.0 - nu * np.cos(theta) ** 2) / (1.0 - nu)


def dwk_stiffness(theta, K, nu=NU):
    """Γ(θ) = E + E'' = K (1 - 2ν + 3ν cos²θ)/(1 - ν) (de Wit & Koehler)."""
    return K * (1.0 - 2.0 * nu + 3.0 * nu * np.cos(theta) ** 2) / (1.0 - nu)


# ---------------------------------------------------------------------------------------------
# de Wit–Koehler line tension


def pinned_bow(model, character_deg, tau, L=400.0, h=10.0, **kw):
    """Equilibrium nodes (x, y, pin) of a line pinned once per period L, bowed by ``tau``."""
    e = Elasticity(model=model, burgers_angle=np.radians(character_deg), poisson=NU,
                   core_radius=A_CORE, outer_radius=L, **kw)
    relaxer = Relaxer(square_field(L, 1, 1, np.inf), LineModel(0.5, h, elasticity=e))
    state = LineState.straight(L, 0.0, h)
    name, _ = relaxer.relax(state, tau, state.area(),
                            Protocol(tau, 1e-4 * tau, 10 * L, 0, 2_000_000, 1.0))
    assert name == "pinned"
    return state.nodes()


def bow_out_radius(model, character_deg, tau, L=400.0, h=10.0, **kw):
    """Radius of the arc a segment pinned at both ends (one obstacle per period L) bows to."""
    x, y, pin = pinned_bow(model, character_deg, tau, L, h, **kw)
    free = pin < 0
    x = np.where(x < x[pin >= 0][0], x + L, x)  # one arc, from the pin to its periodic image
    A = np.column_stack([x[free], y[free], np.ones(free.sum())])
    D, E, F = np.linalg.lstsq(A, -(x[free] ** 2 + y[free] ** 2), rcond=None)[0]
    return np.sqrt(D * D / 4 + E * E / 4 - F)


def test_dewit_koehler_bow_out_screw_vs_edge_follows_stiffness():
    # de Wit & Koehler: a pinned segment bows with the stiffness Γ(θ) = E + E'' as its line
    # tension, R = Γ(θ)/(τ b) (Hirth & Lothe).  Screw and edge at the same stress: the radii stand
    # in the ratio (1 + ν)/(1 - 2ν) = 4 at ν = 1/3.  Small bow-out (sagitta ≈ L/100), where the
    # character along the arc stays within a degree of the straight line's and Γ(θ) is
    # stationary there (θ = 0 and 90°), so 2 % is a real check (measured 0.1-0.4 %).
    L = 400.0
    K = dwk_K(L)
    tau = 0.08 * dwk_stiffness(np.pi / 2, K) / L     # R_edge = 12.5 L, R_screw = 50 L
    r_screw = bow_out_radius("dewit_koehler", 0.0, tau, L)
    r_edge = bow_out_radius("dewit_koehler", 90.0, tau, L)
    assert r_screw * tau == pytest.approx(dwk_stiffness(0.0, K), rel=0.02)
    assert r_edge * tau == pytest.approx(dwk_stiffness(np.pi / 2, K), rel=0.02)
    assert r_screw / r_edge == pytest.approx((1 + NU) / (1 - 2 * NU), rel=0.02)


DWK_CASE = {
    "seed": 1,
    "material": {"shear_modulus_GPa": 26.0, "poisson_ratio": NU, "burgers_nm": 0.25},
    "line": {"length": 1, "height": 1, "node_spacing": 0.025},
    "obstacles": {"kind": "square", "spacing_nm": 50.0, "critical_angle_deg": 0.0},
    "elasticity": {"model": "dewit_koehler", "core_radius_nm": 0.25, "outer_radius_nm": 50.0},
    "loading": {"stress_step": 0.02, "tolerance": 1e-4, "bisections": 7},
}


@pytest.mark.parametrize("character_deg", [0.0, 90.0])
def test_dewit_koehler_orowan_stress_set_by_the_arms_character(tmp_path, character_deg):
    # Line-tension theory of the Orowan stress (de Wit & Koehler energy; e.g. Hirth & Lothe
    # ch. 20, from memory): at the critical configuration the arms at each impenetrable pin are
    # parallel, along the glide direction, so each pulls with its energy E(θ_arm):
    # τ_c = 2 E(θ_arm)/(b L).  A screw line's arms are edge (E = K/(1-ν)), an edge line's are
    # screw (E = K).  Through the case file, so the [elasticity] keys and result.json are
    # exercised; 1 % covers the node spacing L/40 and the bisection (measured 0.3 %).
    case = copy.deepcopy(DWK_CASE)
    case["elasticity"]["character_deg"] = character_deg
    result = run_case(case, out_dir=tmp_path)
    L = 50.0 / 0.25
    K = dwk_K(L)
    arm = np.pi / 2 - np.radians(character_deg)     # arms along y
    expected_MPa = 2.0 * dwk_energy(arm, K) / L * 26.0e3
    assert result.summary["converged"]
    assert result.crss_MPa == pytest.approx(expected_MPa, rel=0.01)
    model = json.loads((tmp_path / "result.json").read_text())["model"]
    assert model == {"line_model": "dewit_koehler", "character_deg": character_deg,
                     "poisson_ratio": NU, "core_radius_nm": 0.25, "outer_radius_nm": 50.0}


# ---------------------------------------------------------------------------------------------
# Self-stress in the time stepper


def test_self_stress_equilibrium_is_an_equilibrium_of_the_full_field():
    # The stepper assembles the self-stress from a local part evaluated every step and a
    # non-local part evaluated every `refresh` steps (kernels.model_forces).  At the equilibrium
    # it reports, the whole field recomputed from scratch (elastic.self_stress) must balance the
    # applied stress at every free node to the stepper's tolerance (1e-4 τ), with refresh 1 and
    # 10; and the two equilibria agree (the refresh changes the path, not the end).
    from dlsim import elastic
    L, tau = 400.0, 0.02 / 400.0
    shapes = []
    for refresh in (1, 10):
        x, y, pin = pinned_bow("self_stress", 0.0, tau, L, 10.0, images=1, refresh=refresh)
        field = np.zeros(len(x))
        elastic.self_stress(x, y, len(x), L, 0.0, NU, A_CORE, 1, 0.0, field)
        assert np.abs(field[pin < 0] + tau).max() < 1.01e-4 * tau
        shapes.append(y.max() - y.min())
    assert shapes[1] == pytest.approx(shapes[0], rel=1e-3)


# ---------------------------------------------------------------------------------------------
# Orowan bypass with the line's self-interaction (Bacon, Kocks & Scattergood 1973)


def disc_row_crss(character_deg, ratio, L=200.0, h=4.0):
    """CRSS of a line bypassing a periodic row of impenetrable discs, diameter D = ratio·L, one
    per period L (centre to centre), with the full self-stress (reduced units)."""
    D = ratio * L
    table = ParticleTable(np.array([0.5 * L]), np.array([0.5 * L]), np.array([0.5 * D]),
                          np.array([np.inf]), np.zeros(1, np.int64))
    field = particle_field(table, L, L, L, h, ("discs",))
    e = Elasticity(model="self_stress", burgers_angle=np.radians(character_deg), poisson=NU,
                   core_radius=A_CORE, outer_radius=L, images=1, refresh=10)
    tau_ref = 1.0 / L
    # the line starts just below the disc, so that half a period of glide past the last pinned
    # state means it has left the disc behind
    res = find_crss(field, LineModel(0.5, h, elasticity=e),
                    Protocol(0.05 * tau_ref, 1e-3 * tau_ref, 0.5 * L, 7, 2_000_000, 5 * tau_ref),
                    y0=0.5 * L - 0.5 * D - 4 * h)
    assert res.converged
    return res.crss


@pytest.mark.slow
@pytest.mark.parametrize("character_deg", [90.0, 0.0])
def test_orowan_with_self_stress_follows_bacon_kocks_scattergood(character_deg):
    # Bacon, Kocks & Scattergood, Phil. Mag. 28 (1973) 1241, for a periodic row of impenetrable
    # obstacles: τ_c = A (G b/(2π L)) [ln(D̄/r_0) + B], D̄ = (1/D + 1/L)^-1, with A = 1 for an
    # initially edge line (its arms at the obstacle are a screw dipole) and A = 1/(1 - ν) for an
    # initially screw line (edge dipole); L the free span between obstacles.  The constants are
    # from memory (B ≈ 0.7 for edge, ≈ 0.6 for screw; how r_0 maps to the core radius a of the
    # non-singular field is not established), so only the slope in ln D̄ is checked, against
    # its value A G b/(2π L): within 5 % as the issue asks.  Measured slope 0.976 (edge) and
    # 1.001 (screw) at h = 4 b, 1.013 and 1.014 at h = 2.5 b (D/L = 0.05, 0.1, 0.2); the
    # intercepts with r_0 = a are B ≈ +0.08 (edge) and −0.24 (screw).
    L = 200.0
    A = 1.0 if character_deg == 90.0 else 1.0 / (1.0 - NU)
    ratios = np.array([0.1, 0.15, 0.2])
    D = ratios * L
    free = L - D
    scaled = [2 * np.pi * f * disc_row_crss(character_deg, r, L) / A for r, f in zip(ratios, free)]
    ln_dbar = np.log(1.0 / (1.0 / D + 1.0 / free))
    slope = np.polyfit(ln_dbar, scaled, 1)[0]
    assert slope == pytest.approx(1.0, abs=0.05)


def random_discs_crss(args):
    """CRSS × L_s of a random field of impenetrable discs with self-stress (one worker's job)."""
    seed, character_deg = args
    Ls, side_in_spacings, rho, h = 100.0, 4, 8.0, 4.0
    side, m = side_in_spacings * Ls, side_in_spacings ** 2
    rng = np.random.default_rng(seed)
    table = ParticleTable(rng.uniform(0, side, m), rng.uniform(0, side, m), np.full(m, rho),
                          np.full(m, np.inf), np.zeros(m, np.int64))
    field = particle_field(table, side, side, Ls, h, ("discs",))
    e = Elasticity(model="self_stress", burgers_angle=np.radians(character_deg), poisson=NU,
                   core_radius=A_CORE, outer_radius=Ls, images=1, refresh=10)
    res = find_crss(field, LineModel(0.5, h, elasticity=e),
                    Protocol(0.05 / Ls, 1e-3 / Ls, side, 4, 2_000_000, 5.0 / Ls))
    assert res.converged
    return res.crss * Ls


@pytest.mark.slow
def test_random_discs_screw_lines_need_more_stress_than_edge_lines():
    # Bacon, Kocks & Scattergood 1973 (and the row result above): the arms of a screw line
    # bowing round obstacles are of edge character and attract more strongly, by 1/(1 - ν), than
    # the screw arms of an edge line, so screw lines need the higher CRSS in the same random
    # field of impenetrable obstacles.  Paired comparison on two fields of 16 discs
    # (ρ = 0.08 L_s, box 4 L_s: a small box, so no absolute value is checked).  Measured ratios
    # 1.17 (seed 1) and 1.17 (seed 2); the row of discs gives 1.3-1.35 at the same D̄.
    # two worker processes, which load the kernels from numba's on-disk cache (tests/test_jit.py),
    # one numba thread each like sweep workers (two threads each would oversubscribe the cores)
    import concurrent.futures as cf
    import multiprocessing as mp
    jobs = [(seed, c) for seed in (1, 2) for c in (0.0, 90.0)]
    with cf.ProcessPoolExecutor(2, mp_context=mp.get_context("spawn"),
                                initializer=numba.set_num_threads, initargs=(1,)) as pool:
        screw1, edge1, screw2, edge2 = pool.map(random_discs_crss, jobs)
    for screw, edge in ((screw1, edge1), (screw2, edge2)):
        assert screw / edge > 1.05


def test_elasticity_defaults_and_round_trip():
    # [elasticity] defaults (DEVELOPERS.md): core radius b, outer cut-off the obstacle spacing;
    # the resolved case loads back equal, so sweeps and result.json reproduce the model.
    from dlsim.case import load_case
    case = copy.deepcopy(DWK_CASE)
    del case["elasticity"]["core_radius_nm"], case["elasticity"]["outer_radius_nm"]
    loaded = load_case(case)
    assert loaded.elasticity.core_radius_nm == 0.25
    assert loaded.elasticity.outer_radius_nm == 50.0
    assert loaded.elasticity.character_deg == 90.0
    assert load_case(loaded.to_dict()) == loaded
