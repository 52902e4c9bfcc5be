"""Pair interactions per second of the non-singular self-stress kernel.

Run: ``python benchmarks/bench_selfstress.py [--repeats 3] [--sizes 1000 2000 4000]
[--save FILE] [--before FILE] [--crossover] [--no-steps] [--steps-only]``.

A wavy periodic line of N nodes (node spacing 10 b, three Fourier modes of amplitude up to 50 b,
mixed character) with ``n_images = 0`` and no cutoff: every target node sums exactly N segments
(one period centred on it), so one call is N² pair interactions.  For each N the table gives the
rate of

- ``serial``: :func:`dlsim.elastic.self_stress_serial` (compiled without ``parallel``);
- ``par-1``, ``par-2``: :func:`dlsim.elastic.self_stress` with ``numba.set_num_threads(1)`` and 2;
- ``numpy``: the NumPy twin in ``tests/naive_elastic.py`` (one call, vectorised over segments).

``--save FILE`` writes the rates as JSON; ``--before FILE`` prints a saved run beside this one
(run the script once with ``PYTHONPATH`` on the old tree and ``--save``, then on the new one with
``--before``).  The two-thread scaling is par-2 over par-1 on wall time: it means something only
on an otherwise idle machine, so the load average is printed before and after.  ``--crossover``
times the serial and the two-thread kernel on short lines with one image on each side (the
stepper's case) to place :data:`dlsim.contract.PARALLEL_MIN_PAIRS`.

A last table times the whole time step of :func:`dlsim.kernels.relax_line` with each line model
(constant Γ, de Wit–Koehler, self-stress with the non-local part every step and every 10 steps) on
lines of a few hundred to a thousand nodes bowing through a random field of impenetrable points:
node-steps per second, one thread.

Rates are the best of ``--repeats`` runs, on wall time and, for the one-thread runs, on the
process's CPU time (which stays meaningful when other jobs share the machine).  The JIT is warmed
first.  A measurement, not a test.
"""
from __future__ import annotations

import argparse
import json
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
VARIANTS = (("serial", 1), ("par-1", 1), ("par-2", 2), ("numpy", 1))


def test_line(n, seed=1):
    """A smooth random periodic line of n nodes (the shape does not change the cost)."""
    rng = np.random.default_rng(seed)
    Lx = n * NODE_SPACING
    x = (np.arange(n) + 0.5) * NODE_SPACING
    y = np.zeros(n)
    for m in range(1, 4):
        y += AMPLITUDE / m * np.sin(2 * np.pi * m * x / Lx + rng.uniform(0, 2 * np.pi))
    return x, y, Lx


def time_call(fn, repeats, min_seconds=MIN_SECONDS):
    """Best (wall, cpu) seconds per call over ``repeats`` timings of at least min_seconds."""
    best_wall = best_cpu = np.inf
    for _ in range(repeats):
        calls = 0
        w0, c0 = time.perf_counter(), time.process_time()
        while True:
            fn()
            calls += 1
            if time.perf_counter() - w0 >= min_seconds:
                break
        best_wall = min(best_wall, (time.perf_counter() - w0) / calls)
        best_cpu = min(best_cpu, (time.process_time() - c0) / calls)
    return best_wall, best_cpu


def kernel_call(name, n, n_images=0):
    """A no-argument call of one variant on the test line of n nodes."""
    x, y, Lx = test_line(n)
    out = np.zeros(n)
    if name == "numpy":
        return lambda: N.self_stress_np(x, y, n, Lx, THETA0, NU, A_CORE, n_images, 0.0)
    kernel = E.self_stress_serial if name == "serial" else E.self_stress
    return lambda: kernel(x, y, n, Lx, THETA0, NU, A_CORE, n_images, 0.0, out)


def set_threads(threads):
    numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))


def load():
    return f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs"


def pair_rates(sizes, repeats):
    """{N: {variant: [pairs/s wall, pairs/s cpu or None]}} of the variants on the test lines."""
    rates = {}
    for n in sizes:
        rates[n] = {}
        for name, threads in VARIANTS:
            set_threads(threads)
            wall, cpu = time_call(kernel_call(name, n), 1 if name == "numpy" else repeats)
            rates[n][name] = [n * n / wall, n * n / cpu if threads == 1 else None]
    return rates


def fmt(value):
    return f"{value:10.3g}" if value else f"{'-':>10}"


def print_rates(rates, before=None):
    """The table of rates; with ``before`` (a saved run) its rates and the ratio after/before
    beside them (of CPU rates for one thread, of wall rates for two)."""
    head = f"{'N':>6} {'variant':>8} {'wall':>10} {'cpu':>10}"
    if before:
        head += f" | {'before wall':>11} {'before cpu':>10} {'ratio':>6}"
    print("pairs/s")
    print(head)
    for n, row in rates.items():
        for name, (wall, cpu) in row.items():
            line = f"{n:>6} {name:>8} {fmt(wall)} {fmt(cpu)}"
            old = (before or {}).get(str(n), {}).get(name)
            if old:
                ratio = cpu / old[1] if cpu and old[1] else wall / old[0]
                line += f" | {fmt(old[0]):>11} {fmt(old[1])} {ratio:6.2f}"
            print(line)
    print("two-thread scaling (par-2 / par-1, wall): "
          + ", ".join(f"N = {n}: {row['par-2'][0] / row['par-1'][0]:.2f}"
                      for n, row in rates.items()))
    if before:
        print("before:          " + ", ".join(
            f"N = {n}: {row['par-2'][0] / row['par-1'][0]:.2f}" for n, row in before.items()
            if "par-1" in row and "par-2" in row))


def crossover(repeats):
    """Serial against two threads on short lines with one image per side (the stepper's case)."""
    print(f"\ncrossover, n_images = 1 (3 N² pairs per call), {load()}")
    print(f"{'N':>6} {'pairs':>10} {'serial µs':>10} {'par-2 µs':>10} {'par-2/serial':>13}")
    for n in (64, 128, 256, 384, 512, 768, 1024):
        set_threads(1)
        serial = time_call(kernel_call("serial", n, 1), repeats, 0.2)[0]
        set_threads(2)
        par = time_call(kernel_call("par-2", n, 1), repeats, 0.2)[0]
        print(f"{n:>6} {3 * n * n:>10} {1e6 * serial:10.1f} {1e6 * par:10.1f} {par / serial:13.2f}")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--sizes", type=int, nargs="+", default=[1000, 2000, 4000])
    parser.add_argument("--save", help="write the pair rates to this JSON file")
    parser.add_argument("--before", help="a JSON file of --save to print beside this run")
    parser.add_argument("--crossover", action="store_true",
                        help="also time serial against two threads on short lines")
    parser.add_argument("--no-steps", action="store_true", help="skip the full-step table")
    parser.add_argument("--steps-only", action="store_true",
                        help="only the table of the full time step with each line model")
    args = parser.parse_args()
    if args.steps_only:
        step_table(args.repeats)
        return
    threads_before = numba.get_num_threads()
    for name, _ in VARIANTS[:3]:
        kernel_call(name, 64)()                                  # warm the JIT
    print(f"{load()} at the start; numba {numba.__version__}, "
          f"threading layer {numba.threading_layer()}")
    rates = pair_rates(args.sizes, args.repeats)
    before = None
    if args.before:
        with open(args.before) as f:
            before = json.load(f)["rates"]
    print_rates(rates, before)
    print(f"{load()} at the end")
    if args.save:
        with open(args.save, "w") as f:
            json.dump({"rates": rates, "load": os.getloadavg()[0]}, f, indent=1)
    if args.crossover:
        crossover(args.repeats)
    set_threads(threads_before)
    if not args.no_steps:
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
