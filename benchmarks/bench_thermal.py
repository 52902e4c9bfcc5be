"""Wall time of a thermally activated CRSS (dlsim.thermal) on a random field of 10^3 points.

Runs the case through ``dlsim.api.run_case`` (nothing written) at a few temperatures after one
warm-up run (the JIT), and prints per temperature: the stress at the requested strain rate, its
spread over the event sequences, the athermal CRSS, V*, and the wall time (target: <= 60 s on
one core).  Beside it, the accuracy check of the same kernel: the one-pin square array against
the closed form of Kocks, Argon & Ashby (1975).  The load average is printed (the machine may be
shared).

    python benchmarks/bench_thermal.py
"""
from __future__ import annotations

import math
import os
import time

from dlsim import api, thermal

G_GPA, B_NM = 30.0, 0.25
THERMAL = {"strain_rate_per_s": 1e-3, "mobile_density_per_m2": 1e12,
           "attempt_frequency_Hz": 1e11, "activation_energy_eV": 1.0, "p": 0.5, "q": 1.5,
           "events": 400, "sequences": 4}


def case(temperature: float, length: float, kind: str) -> dict:
    return {"title": "bench", "seed": 11,
            "material": {"shear_modulus_GPa": G_GPA, "poisson_ratio": 0.33, "burgers_nm": B_NM},
            "line": {"length": length, "height": 20 if kind == "square" else length},
            "obstacles": {"kind": kind, "spacing_nm": 50.0, "critical_angle_deg": 90.0},
            "solver": {"method": "arcs"},
            "thermal": dict(THERMAL, temperature_K=temperature)}


def one_pin_formula_MPa(temperature: float) -> float:
    """τ(T) of the one-pin square array (Kocks, Argon & Ashby 1975), MPa."""
    t = THERMAL
    L = 50.0e-9
    rate0 = t["mobile_density_per_m2"] * B_NM * 1e-9 * L * t["attempt_frequency_Hz"]
    x = thermal.K_B_EV * temperature / t["activation_energy_eV"] * math.log(
        rate0 / t["strain_rate_per_s"])
    fc_over_bl = G_GPA * 1e3 * math.cos(math.radians(45.0)) * B_NM / 50.0
    return fc_over_bl * (1.0 - x ** (1.0 / t["q"])) ** (1.0 / t["p"])


def main() -> None:
    os.environ.setdefault("NUMBA_NUM_THREADS", "1")
    print(f"load average {os.getloadavg()[0]:.2f}")
    api.run_case(case(100.0, 1, "square"), out_dir=False)            # warm the JIT
    print("one-pin square array (accuracy)")
    print(f"{'T_K':>6} {'crss_MPa':>10} {'formula_MPa':>11} {'rel_err':>9} {'wall_s':>7}")
    for T in (50.0, 150.0, 300.0):
        t0 = time.perf_counter()
        s = api.run_case(case(T, 1, "square"), out_dir=False).summary
        f = one_pin_formula_MPa(T)
        print(f"{T:6.0f} {s['crss_MPa']:10.4f} {f:11.4f} {s['crss_MPa'] / f - 1:9.1e} "
              f"{time.perf_counter() - t0:7.2f}")
    print("random field, 32 x 32 L_s (1024 points), 4 sequences x 400 events")
    print(f"{'T_K':>6} {'crss_MPa':>10} {'seq_std_MPa':>11} {'athermal':>9} {'V*_b3':>8} "
          f"{'wall_s':>7}")
    for T in (20.0, 100.0, 300.0):
        t0 = time.perf_counter()
        s = api.run_case(case(T, 32, "random"), out_dir=False).summary
        print(f"{T:6.0f} {s['crss_MPa']:10.3f} {s['crss_sequence_std_MPa']:11.3f} "
              f"{s['crss_athermal_MPa']:9.3f} {s['activation_volume_b3']:8.1f} "
              f"{time.perf_counter() - t0:7.2f}")


if __name__ == "__main__":
    main()
