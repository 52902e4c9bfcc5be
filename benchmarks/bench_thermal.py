"""Wall time and accuracy of a thermally activated CRSS (dlsim.thermal) on both solvers.

Runs cases through ``dlsim.api.run_case`` (nothing written) after one warm-up run of each solver
(the JIT) and prints, part by part (``--parts``, default all):

- ``one-pin``: the one-pin square array on arcs against the closed form of Kocks, Argon & Ashby
  (1975), and the wall time;
- ``random``: a random field of 10^3 points on arcs at a few temperatures: the stress at the
  requested strain rate, its spread over the event sequences, the athermal CRSS, V*, the wall
  time (target: <= 60 s on one core);
- ``nodal``: the nodal line beside the arcs on the same small random fields (same seed, same
  event numbers): both stresses, their spreads, both wall times and their ratio, and the nodal
  cost per event (wall time over events simulated);
- ``nodal-1000``: the 10^3-point field of ``random`` on the nodal line (nodes 0.2 L_s apart) at
  150 K with the default 4 sequences x 400 events, beside the arcs;
- ``wide``: square arrays 1-4 spacings wide on arcs against the one-pin formula, with the mean
  glide per event in spacings (1 on the one-pin array; a cascade makes one activation advance
  several pins' worth of line).

The load average is printed (the machine may be shared).

    NUMBA_NUM_THREADS=1 python benchmarks/bench_thermal.py [--parts one-pin random nodal ...]
"""
from __future__ import annotations

import argparse
import math
import os
import time

import numpy as np

from dlsim import api, thermal
from dlsim.case import load_case

G_GPA, B_NM, SPACING_NM = 30.0, 0.25, 50.0
THERMAL = {"strain_rate_per_s": 1e-3, "mobile_density_per_m2": 1e12,
           "attempt_frequency_Hz": 1e11, "activation_energy_eV": 1.0, "p": 0.5, "q": 1.5,
           "events": 400, "sequences": 4}
#: The nodal part: node spacing (L_s), events and sequences (fewer: every event is a relaxation).
NODAL_NODES, NODAL_EVENTS, NODAL_SEQUENCES = 0.2, 200, 2


def case(temperature: float, length: float, kind: str, method: str = "arcs", **thermal_keys
         ) -> dict:
    return {"title": "bench", "seed": 11,
            "material": {"shear_modulus_GPa": G_GPA, "poisson_ratio": 0.33, "burgers_nm": B_NM},
            "line": {"length": length, "height": 20 if kind == "square" else length},
            "obstacles": {"kind": kind, "spacing_nm": SPACING_NM, "critical_angle_deg": 90.0},
            "solver": {"method": method},
            "thermal": dict(THERMAL, temperature_K=temperature, **thermal_keys)}


def one_pin_formula_MPa(temperature: float, prefactor: float = 1.0) -> float:
    """τ(T) of the one-pin square array (Kocks, Argon & Ashby 1975), MPa; ``prefactor``
    multiplies ε̇0 (W pins per period activated in parallel: W)."""
    t = THERMAL
    L = SPACING_NM * 1e-9
    rate0 = prefactor * t["mobile_density_per_m2"] * B_NM * 1e-9 * L * t["attempt_frequency_Hz"]
    x = thermal.K_B_EV * temperature / t["activation_energy_eV"] * math.log(
        rate0 / t["strain_rate_per_s"])
    fc_over_bl = G_GPA * 1e3 * math.cos(math.radians(45.0)) * B_NM / SPACING_NM
    return fc_over_bl * (1.0 - x ** (1.0 / t["q"])) ** (1.0 / t["p"])


def timed(c: dict) -> tuple[dict, float]:
    t0 = time.perf_counter()
    summary = api.run_case(c, out_dir=False).summary
    return summary, time.perf_counter() - t0


def one_pin() -> None:
    print("one-pin square array on arcs (accuracy)")
    print(f"{'T_K':>6} {'crss_MPa':>10} {'formula_MPa':>11} {'rel_err':>9} {'wall_s':>7}")
    for T in (50.0, 150.0, 300.0):
        s, wall = timed(case(T, 1, "square"))
        f = one_pin_formula_MPa(T)
        print(f"{T:6.0f} {s['crss_MPa']:10.4f} {f:11.4f} {s['crss_MPa'] / f - 1:9.1e} "
              f"{wall:7.2f}")


def random_arcs() -> None:
    print("random field on arcs, 32 x 32 L_s (1024 points), 4 sequences x 400 events")
    print(f"{'T_K':>6} {'crss_MPa':>10} {'seq_std_MPa':>11} {'athermal':>9} {'V*_b3':>8} "
          f"{'wall_s':>7}")
    for T in (20.0, 100.0, 300.0):
        s, wall = timed(case(T, 32, "random"))
        print(f"{T:6.0f} {s['crss_MPa']:10.3f} {s['crss_sequence_std_MPa']:11.3f} "
              f"{s['crss_athermal_MPa']:9.3f} {s['activation_volume_b3']:8.1f} {wall:7.2f}")


def nodal_beside_arcs() -> None:
    keys = dict(events=NODAL_EVENTS, sequences=NODAL_SEQUENCES)
    print(f"nodal line beside arcs on the same random fields, {NODAL_SEQUENCES} sequences x "
          f"{NODAL_EVENTS} events, nodes {NODAL_NODES} L_s apart")
    print(f"{'side_Ls':>7} {'T_K':>5} {'arcs_MPa':>9} {'std':>6} {'nodal_MPa':>9} {'std':>6} "
          f"{'athermal':>9} {'arcs_s':>7} {'nodal_s':>8} {'ratio':>6} {'ms/event':>8}")
    for side in (6, 8, 12):
        for T in (50.0, 150.0):
            a, ta = timed(case(T, side, "random", "arcs", **keys))
            c = case(T, side, "random", "nodal", **keys)
            c["line"]["node_spacing"] = NODAL_NODES
            n, tn = timed(c)
            events = NODAL_EVENTS * NODAL_SEQUENCES * (thermal.NODAL_SEARCH_BISECTIONS + 2)
            print(f"{side:7d} {T:5.0f} {a['crss_MPa']:9.3f} {a['crss_sequence_std_MPa']:6.3f} "
                  f"{n['crss_MPa']:9.3f} {n['crss_sequence_std_MPa']:6.3f} "
                  f"{n['crss_athermal_MPa']:9.3f} {ta:7.2f} {tn:8.2f} {tn / ta:6.1f} "
                  f"{1e3 * tn / events:8.2f}")


def nodal_1000() -> None:
    print(f"random field 32 x 32 L_s (1024 points), 150 K, 4 sequences x 400 events, nodal "
          f"nodes {NODAL_NODES} L_s apart")
    print(f"{'solver':>6} {'crss_MPa':>9} {'seq_std':>8} {'athermal':>9} {'wall_s':>7}")
    for method in ("arcs", "nodal"):
        c = case(150.0, 32, "random", method)
        c["line"]["node_spacing"] = NODAL_NODES
        s, wall = timed(c)
        print(f"{method:>6} {s['crss_MPa']:9.3f} {s['crss_sequence_std_MPa']:8.3f} "
              f"{s['crss_athermal_MPa']:9.3f} {wall:7.1f}")


def glide_per_event(c: dict, tau_MPa: float) -> float:
    """Mean glide per measured event (in spacings) of sequence 0 of case ``c`` at ``tau_MPa``:
    v × clock over the events after the warm-up."""
    loaded = load_case(c)
    field = api.build_field(loaded)
    model, protocol, _ = api.model_and_protocol(loaded, field.spacing)
    m = loaded.material
    tm = thermal.thermal_model(loaded.thermal, m.shear_modulus_GPa, m.burgers_nm)
    events = loaded.thermal.events
    u = thermal.event_numbers(loaded.seed, 0, events)
    waits = np.full(events, np.nan)
    tau = tau_MPa / (1e3 * m.shear_modulus_GPa)
    lnv, status = thermal.log_velocity(field, model, protocol, tm, tau, u, waits)
    warm = int(thermal.WARMUP_FRACTION * events)
    if status != "ok":
        return math.nan
    return math.exp(lnv) * np.exp(waits[warm:]).sum() / (events - warm) / field.spacing


def wide_arrays() -> None:
    print("square arrays W spacings wide on arcs (line along a row, W pins per period)")
    print(f"{'W':>3} {'T_K':>5} {'crss_MPa':>9} {'one_pin':>8} {'ratio':>6} {'W_rate0':>8} "
          f"{'ratio':>6} {'glide/ev_L':>10} {'wall_s':>7}")
    for width in (1, 2, 3, 4):
        for T in (50.0, 150.0, 300.0):
            c = case(T, width, "square")
            s, wall = timed(c)
            f1, fw = one_pin_formula_MPa(T), one_pin_formula_MPa(T, width)
            g = glide_per_event(c, s["crss_MPa"])
            print(f"{width:3d} {T:5.0f} {s['crss_MPa']:9.3f} {f1:8.3f} {s['crss_MPa'] / f1:6.3f} "
                  f"{fw:8.3f} {s['crss_MPa'] / fw:6.3f} {g:10.3f} {wall:7.2f}")


PARTS = {"one-pin": one_pin, "random": random_arcs, "nodal": nodal_beside_arcs,
         "nodal-1000": nodal_1000, "wide": wide_arrays}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", nargs="+", choices=list(PARTS), default=list(PARTS))
    args = parser.parse_args()
    os.environ.setdefault("NUMBA_NUM_THREADS", "1")
    print(f"load average {os.getloadavg()[0]:.2f}")
    api.run_case(case(100.0, 1, "square"), out_dir=False)            # warm the JIT of both
    api.run_case(case(100.0, 4, "random", "nodal", events=10, sequences=1), out_dir=False)
    for part in args.parts:
        PARTS[part]()


if __name__ == "__main__":
    main()
