"""Pair interactions per second of the non-singular self-stress kernel.

Run: ``python benchmarks/bench_selfstress.py [--repeats 3] [--sizes 1000 2000 4000] [--steps-only]``.

A wavy periodic line of N nodes (node spacing 10 b, three Fourier modes of amplitude up to 50 b,
mixed character) with ``n_images = 0`` and no cutoff: every target node sums exactly N segments
(one period centred on it), so one call is N² pair interactions.  For each N the table gives the
rate of

- ``serial``: :func:`dlsim.elastic.self_stress_serial` (compiled without ``parallel``);
- ``par-1``, ``par-2``: :func:`dlsim.elastic.self_stress` with ``numba.set_num_threads(1)`` and 2;
- ``numpy``: the NumPy twin in ``tests/naive_elastic.py`` (one call, vectorised over segments).

A second table times the whole time step of :func:`dlsim.kernels.relax_line` with each line model
(constant Γ, de Wit–Koehler, self-stress with the non-local part every step and every 10 steps) on
lines of a few hundred to a thousand nodes bowing through a random field of impenetrable points:
node-steps per second, one thread.

Rates are the best of ``--repeats`` runs, on wall time and, for the one-thread runs, on the
process's CPU time (which stays meaningful when other jobs share the machine; the load average
is printed).  The JIT is warmed first.  A measurement, not a test.
"""
from __future__ import annotations

import argparse
import os
import sys
import time

import numba
import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "tests"))

from dlsim import elastic as E  # noqa: E402
import naive_elastic as N  # noqa: E402

NODE_SPACING = 10.0   # b
AMPLITUDE = 50.0      # b, largest Fourier amplitude of the test line
THETA0 = 0.7          # rad, mixed character
NU = 0.3
A_CORE = 1.0          # b
MIN_SECONDS = 0.5     # each timing repeats calls until it lasts at least this long


def test_line(n, seed=1):
    """A smooth random periodic line of n nodes (the shape does not change the cost)."""
    rng = np.random.default_rng(seed)
    Lx = n * NODE_SPACING
    x = (np.arange(n) + 0.5) * NODE_SPACING
    y = np.zeros(n)
    for m in range(1, 4):
        y += AMPLITUDE / m * np.sin(2 * np.pi * m * x / Lx + rng.uniform(0, 2 * np.pi))
    return x, y, Lx


def time_call(fn, repeats):
    """Best (wall, cpu) seconds per call over ``repeats`` timings of at least MIN_SECONDS."""
    best_wall = best_cpu = np.inf
    for _ in range(repeats):
        calls = 0
        w0, c0 = time.perf_counter(), time.process_time()
        while True:
            fn()
            calls += 1
            if time.perf_counter() - w0 >= MIN_SECONDS:
                break
        best_wall = min(best_wall, (time.perf_counter() - w0) / calls)
        best_cpu = min(best_cpu, (time.process_time() - c0) / calls)
    return best_wall, best_cpu


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--sizes", type=int, nargs="+", default=[1000, 2000, 4000])
    parser.add_argument("--steps-only", action="store_true",
                        help="only the table of the full time step with each line model")
    args = parser.parse_args()
    if args.steps_only:
        step_table(args.repeats)
        return
    threads_before = numba.get_num_threads()
    x, y, Lx = test_line(64)
    out = np.zeros(64)
    E.self_stress_serial(x, y, 64, Lx, THETA0, NU, A_CORE, 0, 0.0, out)   # warm the JIT
    E.self_stress(x, y, 64, Lx, THETA0, NU, A_CORE, 0, 0.0, out)
    print(f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs; "
          f"numba {numba.__version__}, threading layer {numba.threading_layer()}")
    print(f"{'N':>6} {'variant':>8} {'pairs/s (wall)':>15} {'pairs/s (cpu)':>15} {'speed-up':>9}")
    for n in args.sizes:
        x, y, Lx = test_line(n)
        out = np.zeros(n)
        pairs = float(n) * n
        runs = [("serial", 1, lambda: E.self_stress_serial(x, y, n, Lx, THETA0, NU, A_CORE, 0,
                                                           0.0, out)),
                ("par-1", 1, lambda: E.self_stress(x, y, n, Lx, THETA0, NU, A_CORE, 0, 0.0, out)),
                ("par-2", 2, lambda: E.self_stress(x, y, n, Lx, THETA0, NU, A_CORE, 0, 0.0, out)),
                ("numpy", 1, lambda: N.self_stress_np(x, y, n, Lx, THETA0, NU, A_CORE, 0, 0.0))]
        serial_wall = None
        for name, threads, fn in runs:
            numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
            wall, cpu = time_call(fn, 1 if name == "numpy" else args.repeats)
            serial_wall = serial_wall or wall
            cpu_rate = f"{pairs / cpu:15.3g}" if threads == 1 else f"{'-':>15}"
            print(f"{n:>6} {name:>8} {pairs / wall:15.3g} {cpu_rate} {serial_wall / wall:9.2f}")
    numba.set_num_threads(threads_before)
    step_table(args.repeats)


def step_table(repeats: int, steps: int = 400) -> None:
    """Node-steps/s of the full time step with each line model (module docstring)."""
    from dlsim.fields import random_field
    from dlsim.line import LineState
    from dlsim.solver import Elasticity, LineModel, Protocol, Relaxer
    numba.set_num_threads(1)
    models = [("constant", Elasticity()),
              ("dewit_koehler", Elasticity("dewit_koehler", outer_radius=100.0)),
              ("self_stress r=1", Elasticity("self_stress", images=1, refresh=1)),
              ("self_stress r=10", Elasticity("self_stress", images=1, refresh=10))]
    print(f"\nfull time step, one thread, {steps} steps of a line at 0.5 x 2Γ/(b L_s) in a "
          "random field of impenetrable points (L_s = 100 b, node spacing 10 b)")
    print(f"{'nodes':>6} {'model':>17} {'node-steps/s':>13} {'ms/step':>9}")
    for width in (25, 50, 100):       # box width in L_s: 250, 500, 1000 nodes
        side = width * 100.0
        field = random_field(side, 1000.0, 1e-4, np.inf, np.random.default_rng(3))
        for name, e in models:
            relaxer = Relaxer(field, LineModel(0.5, 10.0, elasticity=e))
            protocol = Protocol(0.0, 1e-12, 1e9, 0, steps, 1.0)
            relaxer.relax(LineState.straight(side, 0.0, 10.0), 0.005, 0.0,
                          Protocol(0.0, 1e-12, 1e9, 0, 5, 1.0))   # warm the JIT
            best, nodes = np.inf, 0
            for _ in range(repeats):
                state = LineState.straight(side, 0.0, 10.0)
                t0 = time.process_time()
                _, taken = relaxer.relax(state, 0.005, state.area(), protocol)
                dt = (time.process_time() - t0) / max(taken, 1)
                if dt < best:
                    best, nodes = dt, 0.5 * (side / 10.0 + state.n)
            print(f"{int(nodes):>6} {name:>17} {nodes / best:13.3g} {1e3 * best:9.3f}")


if __name__ == "__main__":
    main()
