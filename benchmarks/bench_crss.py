"""CRSS time of the nodal line against the arc construction on the same random fields.

Run: ``NUMBA_NUM_THREADS=1 python benchmarks/bench_crss.py [--large] [--seeds 1]``.

Random fields of strong points (φc = 0: impenetrable), N = 10^3 and 10^4 obstacles (10^5 with
``--large``; ``--sizes``, ``--fractions`` choose) in a square box at mean spacing L_s, node spacing 0.05 L_s and 0.2 L_s.  For each:
the nodal CRSS (:func:`dlsim.solver.find_crss`, stress step 0.02, tolerance 1e-3 of 2Γ/(b L_s),
flow distance = box height, 8 bisections) and its CPU time, the arc construction's CRSS
(:func:`dlsim.arcs.find_crss_arcs`) and CPU time on the same field, their ratios, the node-steps/s
of the nodal run, and the exponent of the nodal time against N.  CRSS is given as
s = τ_c b L_s/(2Γ).  One table, one run (the ratios are taken on one machine state); the JIT is
warmed first.  Run it with PYTHONPATH on another checkout for a before/after comparison.  A
measurement, not a test.
"""
from __future__ import annotations

import argparse
import math
import os
import time

import numba
import numpy as np

from dlsim.arcs import find_crss_arcs
from dlsim.fields import random_field
from dlsim.solver import LineModel, Protocol, find_crss

GAMMA = 0.5                 # line tension (G b²): α = 1/2
SPACING = 100.0             # L_s (b)
TAU_REF = 2.0 * GAMMA / SPACING
NODE_FRACTIONS = (0.05, 0.2)


def _case(n_obs: int, seed: int, fraction: float):
    box = math.sqrt(n_obs) * SPACING
    field = random_field(box, box, SPACING ** -2, np.inf, np.random.default_rng(seed))
    model = LineModel(GAMMA, fraction * SPACING)
    protocol = Protocol(0.02 * TAU_REF, 1e-3 * TAU_REF, field.Ly, 8, 2_000_000, 5 * TAU_REF)
    return field, model, protocol


def _timed(fn, *args):
    """(result, seconds): the process's CPU time, which stays meaningful while other jobs share
    the machine (one numba thread: the same as wall time on a quiet machine)."""
    t0 = time.process_time()
    out = fn(*args)
    return out, time.process_time() - t0


def _node_steps(result) -> float:
    return float(sum(h.steps * h.nodes for h in result.history))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--large", action="store_true", help="also N = 10^5 (long)")
    ap.add_argument("--seeds", type=int, default=1, help="fields per size")
    ap.add_argument("--fractions", type=float, nargs="+", default=list(NODE_FRACTIONS),
                    help="node spacings / L_s (default 0.05 0.2)")
    ap.add_argument("--sizes", type=int, nargs="+", default=None,
                    help="obstacle counts (default 10^3 10^4, and 10^5 with --large)")
    args = ap.parse_args()
    sizes = args.sizes or [1_000, 10_000] + ([100_000] if args.large else [])
    print(f"numba threads {numba.get_num_threads()}, load average "
          + " ".join(f"{v:.2f}" for v in os.getloadavg()))
    find_crss(*_case(100, 99, 0.2))                  # warm the JIT
    find_crss_arcs(*_case(100, 99, 0.2))
    head = (f"{'h/L_s':>6} {'N':>7} {'seed':>4} {'s_nodal':>8} {'s_arcs':>8} {'diff%':>6} "
            f"{'t_nodal_s':>10} {'t_arcs_s':>9} {'ratio':>7} {'node-steps/s':>13}")
    print(head)
    for fraction in args.fractions:
        times = []
        for n_obs in sizes:
            t_sum = 0.0
            for seed in range(1, args.seeds + 1):
                case = _case(n_obs, seed, fraction)
                nodal, t_n = _timed(find_crss, *case)
                arcs, t_a = _timed(find_crss_arcs, *case)
                s_n, s_a = nodal.crss / TAU_REF, arcs.crss / TAU_REF
                rate = _node_steps(nodal) / t_n
                print(f"{fraction:6.2f} {n_obs:7d} {seed:4d} {s_n:8.4f} {s_a:8.4f} "
                      f"{100 * (s_n / s_a - 1):6.2f} {t_n:10.2f} {t_a:9.3f} {t_n / t_a:7.0f} "
                      f"{rate:13.3g}", flush=True)
                t_sum += t_n
            times.append(t_sum / args.seeds)
        if len(sizes) > 1:
            p = np.polyfit(np.log(sizes), np.log(times), 1)[0]
            print(f"{fraction:6.2f} nodal time ~ N^{p:.2f}")


if __name__ == "__main__":
    main()
