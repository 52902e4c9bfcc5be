"""Particle populations: case keys, fields of discs, realizations, and the CRSS against theory."""
from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

from dlsim import analytic
from dlsim.api import estimate_case, loops_per_particle, run_case, sweep_through
from dlsim.fields import ParticleTable, particle_field, random_field
from dlsim.solver import LineModel, Protocol, find_crss

GAMMA = 0.5
L = 100.0  # square-array period (b)


def base(**populations_changes):
    pop = {"name": "p", "volume_fraction": 0.02, "distribution": "single", "radius_nm": 5.0,
           "strength": "impenetrable"}
    pop.update(populations_changes)
    return {"seed": 11, "material": {"symbol": "Al"},
            "line": {"length": 6, "node_spacing": 0.2},
            "populations": [pop], "loading": {"stress_step": 0.05, "tolerance": 2e-3,
                                              "bisections": 3}}


def protocol(tau_ref, flow, tol=1e-3, step=0.02, bisections=6):
    return Protocol(step * tau_ref, tol * tau_ref, flow, bisections, 2_000_000, 5 * tau_ref)


# ---------------------------------------------------------------------------------------------
# Regular square array of impenetrable discs


def square_discs(ratio, n=2, h=0.05 * L):
    g = np.meshgrid((np.arange(n) + 0.5) * L, (np.arange(n) + 0.5) * L)
    k = n * n
    t = ParticleTable(g[0].ravel(), g[1].ravel(), np.full(k, ratio * L), np.full(k, np.inf),
                      np.zeros(k, np.int64))
    return particle_field(t, n * L, n * L, L, h, ("discs",))


@pytest.mark.parametrize("ratio", [0.1, 0.2])
def test_disc_square_array_crss_matches_finite_orowan(ratio):
    field = square_discs(ratio)
    tau_ref = analytic.orowan(GAMMA, L)
    res = find_crss(field, LineModel(GAMMA, 0.05 * L), protocol(tau_ref, field.Ly))
    expected = analytic.orowan_finite(GAMMA, L, ratio * L)
    # Hull & Bacon; docs/physics.md: τ_c = 2Γ/(b(L − 2ρ)) for the square array; 2% covers the
    # node spacing 0.05 L and the tolerance 1e-3.
    assert res.converged
    assert res.lo / expected == pytest.approx(1.0, abs=0.02)
    # A line that crossed the field once has left one Orowan loop round every disc (docs/physics.md)
    swept = sweep_through(field, LineModel(GAMMA, 0.05 * L), protocol(tau_ref, field.Ly), res)
    counts = loops_per_particle(field, swept)
    assert counts.tolist() == [1] * field.table.n


def test_ring_gap_is_a_quarter_node_spacing():
    field = square_discs(0.2, n=1, h=4.0)
    d = np.hypot(np.diff(field.x), np.diff(field.y))
    assert d.max() <= 1.0 + 1e-12 and np.all(field.owner == 0)


# ---------------------------------------------------------------------------------------------
# Random fields of points


def random_crss(seed, n_obstacles, fc, h_frac, tol, bisections):
    side = 100.0 * np.sqrt(n_obstacles)  # L_s = 100 b
    field = random_field(side, side, n_obstacles / side ** 2, fc, np.random.default_rng(seed))
    tau_ref = analytic.orowan(GAMMA, field.spacing)
    res = find_crss(field, LineModel(GAMMA, h_frac * field.spacing),
                    protocol(tau_ref, side, tol=tol, bisections=bisections))
    return res.crss / tau_ref


@pytest.mark.slow
def test_random_impenetrable_points_mean_near_foreman_makin():
    ratios = [random_crss(seed, 2025, np.inf, 0.2, 1e-3, 4) for seed in range(8)]
    # Foreman & Makin, Phil. Mag. 14 (1966): ≈ 0.81 · 2Γ/(b L_s) (from memory); a 45 L_s box
    ratios = np.array(ratios)
    assert abs(ratios.mean() - analytic.FOREMAN_MAKIN_FACTOR) < 0.06, ratios


def test_random_weak_points_near_friedel():
    phi = np.radians(150.0)
    fc = analytic.critical_force(GAMMA, phi)
    ratios = [random_crss(seed, 1225, fc, 0.1, 1e-3, 6) for seed in (1, 2, 3)]
    friedel = np.cos(0.5 * phi) ** 1.5
    # Friedel (1964), docs/physics.md: τ_c = (2Γ/(b L_s)) cos(φ_c/2)^(3/2); 12% for 3 seeds of 1225
    assert np.mean(ratios) / friedel == pytest.approx(1.0, abs=0.12), ratios


# ---------------------------------------------------------------------------------------------
# Shearable to bypass: the aging curve


AGING_RADII = (1.5, 3.0, 6.0, 12.0)


def aging_case(radius):
    # F_c = A ρ, A chosen so that F_c reaches 2Γ (Γ ≈ 1.07 nN in Al) near ρ ≈ 3.6 nm
    return base(radius_nm=radius, volume_fraction=0.01, strength="power_law",
                prefactor_nN=0.6, exponent=1.0)


def test_aging_curve_rises_then_falls():
    crss = [run_case(aging_case(r), out_dir=False).crss_MPa for r in AGING_RADII]
    # Ardell, Metall. Trans. A 16 (1985): CRSS rises while particles are sheared and falls once
    # they are bypassed (Orowan, ∝ 1/L_s ∝ 1/r at fixed f).
    peak = int(np.argmax(crss))
    assert 0 < peak < len(crss) - 1, crss
    assert crss[0] < crss[peak] > crss[-1]


# ---------------------------------------------------------------------------------------------
# Realizations and estimates


def test_realizations_reproducible_with_ci_around_mean():
    case = base()
    case["statistics"] = {"realizations": 3}
    a = run_case(case, out_dir=False).summary
    b = run_case(case, out_dir=False).summary
    values = [r["crss_MPa"] for r in a["realizations"]]
    assert values == [r["crss_MPa"] for r in b["realizations"]]
    assert len(values) == 3   # values lie on the grid of ramp steps and bisections: may repeat
    lo, hi = a["crss_ci95_lo_MPa"], a["crss_ci95_hi_MPa"]
    assert lo < a["crss_mean_MPa"] < hi and a["crss_MPa"] == a["crss_mean_MPa"]
    assert a["crss_mean_MPa"] == pytest.approx(np.mean(values), rel=1e-12)
    # each realization lies inside its own bracket
    assert all(r["crss_lo_MPa"] <= r["crss_MPa"] <= r["crss_hi_MPa"]
               for r in a["realizations"])
    assert any("Nogaret" in w for w in a["warnings"])
    assert any("rests on 3 realizations" in w for w in a["warnings"])


def test_estimates_of_mixture_superpose():
    case = base()
    case["populations"].append({"name": "weak", "number_density_per_um3": 2000.0,
                                "distribution": "lsw", "mean_radius_nm": 2.0,
                                "strength": "point", "critical_angle_deg": 120.0})
    e = estimate_case(case)["estimates"]
    assert {"orowan_square_MPa", "orowan_finite_MPa", "friedel_MPa", "foreman_makin_MPa",
            "superposition_linear_MPa", "superposition_pythagorean_MPa"} <= set(e)
    assert e["superposition_pythagorean_MPa"] <= e["superposition_linear_MPa"]
    assert e["foreman_makin_MPa"] == pytest.approx(0.81 * e["orowan_square_MPa"])


# ---------------------------------------------------------------------------------------------
# Bad input through the CLI


BAD = {
    "fraction_zero": ('volume_fraction = 0.0', "populations[1].volume_fraction"),
    "fraction_one": ('volume_fraction = 1.0', "populations[1].volume_fraction"),
    "negative_radius": ('volume_fraction = 0.02\nradius_nm = -1.0', "populations[1].radius_nm"),
    "unknown_distribution": ('volume_fraction = 0.02\ndistribution = "gauss"',
                             "populations[1].distribution"),
    "missing_file": ('arrangement = "file"\nfile = "nope.csv"', "populations[1].file"),
    "bad_file": ('arrangement = "file"\nfile = "bad.csv"', "populations[1].file"),
}


@pytest.mark.parametrize("name", sorted(BAD))
def test_bad_population_exits_2_with_one_line(name, tmp_path):
    extra, key = BAD[name]
    (tmp_path / "bad.csv").write_text("x_nm,y_nm,z_nm,radius_nm\n1,2,3,oops\n")
    lines = dict(l.split(" = ", 1) for l in extra.splitlines())
    pop = {"name": '"p"', "distribution": '"single"', "radius_nm": "5.0",
           "strength": '"impenetrable"', **lines}
    if "file" in lines:
        pop.pop("distribution"), pop.pop("radius_nm")
    line = 'length_nm = 500.0' if "file" in lines else "length = 6"
    text = (f"seed = 1\n[material]\nsymbol = \"Al\"\n[line]\n{line}\n[[populations]]\n"
            + "\n".join(f"{k} = {v}" for k, v in pop.items()) + "\n")
    path = tmp_path / "case.toml"
    path.write_text(text)
    out = subprocess.run([sys.executable, "-m", "dlsim.cli", "run", str(path), "--quiet"],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 2, out.stderr
    err = out.stderr.strip()
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    assert f"`{key}`" in err
