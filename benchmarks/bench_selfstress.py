"""Pair interactions per second of the non-singular self-stress kernel.

Run: ``python benchmarks/bench_selfstress.py [--repeats 3] [--sizes 1000 2000 4000]``.

A wavy periodic line of N nodes (node spacing 10 b, three Fourier modes of amplitude up to 50 b,
mixed character) with ``n_images = 0`` and no cutoff: every target node sums exactly N segments
(one period centred on it), so one call is N² pair interactions.  For each N the table gives the
rate of

- ``serial``: :func:`dlsim.elastic.self_stress_serial` (compiled without ``parallel``);
- ``par-1``, ``par-2``: :func:`dlsim.elastic.self_stress` with ``numba.set_num_threads(1)`` and 2;
- ``numpy``: the NumPy twin in ``tests/naive_elastic.py`` (one call, vectorised over segments).

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
    args = parser.parse_args()
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


if __name__ == "__main__":
    main()
