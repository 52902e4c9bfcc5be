"""Time of the arc solver to the CRSS of random point fields, 10^3 to 10^6 obstacles.

One numba thread, the JIT warmed first, best of ``--repeat`` runs per size (process CPU time: on
one thread it is the wall time of a quiet machine, and it stays meaningful while other jobs share
the machine), the CRSS (in units of
2Γ/(b L_s)) beside every time, and the fitted exponent of t ∝ N^a between the sizes (N log N
would give a ≈ 1.05-1.1 over this range).  Targets (project brief): 10^4 points in ≤ 0.2 s and
10^6 in ≤ 60 s on one core.

    python benchmarks/bench_arcs.py [--sizes 1e3 1e4 1e5 1e6] [--repeat 3] [--angles 0 120]
"""
from __future__ import annotations

import argparse
import math
import os
import time

import numpy as np

from dlsim.arcs import find_crss_arcs
from dlsim.fields import random_field
from dlsim.solver import LineModel, Protocol

GAMMA = 0.5          # Γ = G b²/2 (reduced)
SPACING = 100.0      # L_s in b


def field_and_protocol(n: float, phi_deg: float, seed: int):
    side = math.sqrt(n) * SPACING
    fc = np.inf if phi_deg == 0 else 2 * GAMMA * math.cos(math.radians(phi_deg) / 2)
    field = random_field(side, side, SPACING ** -2, fc, np.random.default_rng(seed))
    tau_ref = 2 * GAMMA / SPACING
    protocol = Protocol(0.02 * tau_ref, 1e-4 * tau_ref, side, 6, 10 ** 6, 5 * tau_ref)
    return field, LineModel(GAMMA, 0.2 * SPACING), protocol, tau_ref


def time_one(n: float, phi_deg: float, seed: int) -> tuple[float, float]:
    field, model, protocol, tau_ref = field_and_protocol(n, phi_deg, seed)
    t0 = time.process_time()
    result = find_crss_arcs(field, model, protocol)
    return time.process_time() - t0, result.crss / tau_ref


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=float, nargs="+", default=[1e3, 1e4, 1e5, 1e6])
    ap.add_argument("--angles", type=float, nargs="+", default=[0.0, 120.0])
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    import numba
    numba.set_num_threads(1)
    time_one(1e3, 0.0, 99)                         # compile or load the kernels first
    print(f"load average {os.getloadavg()[0]:.2f}; one numba thread; best of {args.repeat}")
    print(f"{'φc':>5s} {'N':>9s} {'CPU (s)':>10s} {'CRSS/(2Γ/bL_s)':>15s} {'exponent':>9s}")
    for phi in args.angles:
        prev = None
        for n in args.sizes:
            runs = [time_one(n, phi, seed) for seed in range(args.repeat)]
            best = min(t for t, _ in runs)
            crss = np.mean([c for _, c in runs])
            slope = "" if prev is None else f"{math.log(best / prev[1]) / math.log(n / prev[0]):9.2f}"
            print(f"{phi:5.0f} {n:9.0f} {best:10.3f} {crss:15.4f} {slope}")
            prev = (n, best)


if __name__ == "__main__":
    main()
