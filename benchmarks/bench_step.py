"""Throughput of the compiled time step and wall time of the CRSS protocol (one core).

Run: ``python benchmarks/bench_step.py [--repeats 3] [--quick]``.

1. Node-steps per second of the full time step (forces, friction, motion, capture, remeshing and the
   reconnection check, everything :func:`dlsim.kernels.relax_line` does): a line of 10^3 or 10^4
   nodes (node spacing 0.2 L_s) glides through a random field of impenetrable points at the
   square-array Orowan stress 2Γ/(b L_s), above the random-array CRSS, so it keeps moving and
   capturing.  The line is first run for a while so that it is bowed and pinned; each measurement
   restarts from that state.
2. The cost of each kernel of the step, timed alone on that state, as a share of the step.
3. The wall time of :func:`dlsim.solver.find_crss` on regular and random fields of 10^3 and 10^4
   impenetrable points (node spacing 0.2 L_s, stress step 0.02, tolerance 1e-3 of 2Γ/(b L_s), flow
   distance = box height, 8 bisections), the part of it spent outside compiled code, and how it
   scales with the obstacle count at fixed L_s.

Timings are the best of ``--repeats`` runs (the machine is shared; the load is printed).  The JIT is
warmed first and numba runs on one thread.  A measurement, not a test.
"""
from __future__ import annotations

import argparse
import math
import os
import time

import numba
import numpy as np

from dlsim import kernels as K
from dlsim import solver
from dlsim.fields import random_field, square_field
from dlsim.line import LineState
from dlsim.solver import LineModel, Protocol, Relaxer, find_crss

GAMMA = 0.5                 # line tension (G b²): α = 1/2
SPACING = 100.0             # L or L_s (b)
NODE_FRACTION = 0.2         # node spacing / L_s
DRIVE = 1.0                 # stress of the throughput runs / (2Γ/(b L_s)): above the random CRSS
STEP_HEIGHT = 40.0          # box height of the throughput runs (L_s): far more than they glide
WARM_STEPS = 1500           # steps run before measuring, so the line is bowed and pinned
TIMED_STEPS = {1_000: 4000, 10_000: 400}
TAU_REF = 2.0 * GAMMA / SPACING


def _load() -> str:
    return "load average %.2f %.2f %.2f" % os.getloadavg()


def _best(fn, repeats: int) -> float:
    best = math.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


class StepRig:
    """A line gliding through a random field, with every array relax_line needs."""

    def __init__(self, nodes: int, seed: int = 7):
        h = NODE_FRACTION * SPACING
        Lx, Ly = nodes * h, STEP_HEIGHT * SPACING
        field = random_field(Lx, Ly, SPACING ** -2, np.inf, np.random.default_rng(seed))
        self.relaxer = Relaxer(field, LineModel(GAMMA, h))
        self.n_obstacles = field.n
        self.tau = DRIVE * TAU_REF
        self.state = LineState.straight(Lx, 0.5 * h, h)
        self.run(self.state, WARM_STEPS)
        self.prm = self.relaxer.parameters(self.tau, 0.0, self._protocol(1))

    def _protocol(self, steps: int) -> Protocol:
        # tolerance 0 and a flow distance of ten box heights: the run always takes every step
        return Protocol(0.02 * TAU_REF, 0.0, 10.0 * STEP_HEIGHT * SPACING, 0, steps, 5 * TAU_REF)

    def run(self, state: LineState, steps: int) -> None:
        name, taken = self.relaxer.relax(state, self.tau, 0.0, self._protocol(steps), chunk=steps)
        if taken != steps:
            raise RuntimeError(f"throughput run stopped early: {name} after {taken} steps")

    def node_steps_per_second(self, repeats: int) -> tuple[float, int]:
        steps = TIMED_STEPS[1_000] if self.state.n < 5_000 else TIMED_STEPS[10_000]
        best, nodes = math.inf, 0.0
        for _ in range(repeats):
            s = self.state.copy()
            n0 = s.n
            t0 = time.perf_counter()
            self.run(s, steps)
            dt = time.perf_counter() - t0
            if dt < best:
                best, nodes = dt, 0.5 * (n0 + s.n)
        return steps * nodes / best, int(nodes)

    def _arrays(self, state):
        cap = state.capacity
        return (np.empty(cap), np.empty(cap), np.empty(cap, np.int64), np.empty(cap, np.int64),
                np.zeros(cap), np.zeros((K.N_WORK_F, cap)), np.zeros((K.N_WORK_I, cap), np.int64))

    def kernel_shares(self, repeats: int, calls: int) -> dict[str, float]:
        """Seconds per call of each kernel of the step on the warmed state."""
        s = self.state.copy()
        opin = self.relaxer.occupancy(s)
        n = s.n
        bx, by, bpin, bign, tau_int, work_f, work_i = self._arrays(s)
        r, prm = self.relaxer, self.prm
        w = _Work(work_f, work_i)
        out = {}
        out["node_pass"] = _best(lambda: _repeat_node(calls, s, n, prm, tau_int, w), repeats) / calls
        _, _, _, stiff, vmax, _ = K.node_pass(s.x, s.y, n, s.pin, prm, tau_int, w.vx, w.vy,
                                              w.fpin, w.ntx, w.nty)
        dt = K.time_step(prm, stiff, vmax)

        def capture():
            c = s.copy()
            _repeat_capture(calls, c, n, dt, r, opin, prm, w)

        out["move_and_capture"] = _best(capture, repeats) / calls
        out["find_contact"] = _best(lambda: _repeat_contact(calls, s, n, prm, w), repeats) / calls
        out["remesh (when called)"] = _best(
            lambda: _repeat_remesh(calls, s, n, prm, bx, by, bpin, bign, r, opin), repeats) / calls
        return out


class _Work:
    """Named views of relax_line's work arrays (the layout of :func:`dlsim.kernels.relax_line`)."""

    def __init__(self, work_f, work_i):
        mc = K.MAX_CAPTURES
        self.vx, self.vy, self.fpin, self.ntx, self.nty = (work_f[0], work_f[1], work_f[2],
                                                            work_f[6], work_f[7])
        self.cap_s, self.cap_x = work_f[8, :mc], work_f[8, mc:2 * mc]
        self.cap_y = work_f[8, 2 * mc:3 * mc]
        self.cap_seg, self.cap_obs = work_i[0, :mc], work_i[0, mc:2 * mc]
        self.head, self.nxt = work_i[1], work_i[2]


@numba.njit(**K.JIT)
def _repeat_node_impl(calls, x, y, n, pin, prm, tau_int, vx, vy, fpin, ntx, nty):
    acc = 0.0
    for _ in range(calls):
        acc += K.node_pass(x, y, n, pin, prm, tau_int, vx, vy, fpin, ntx, nty)[0]
    return acc


def _repeat_node(calls, s, n, prm, tau_int, w):
    _repeat_node_impl(calls, s.x, s.y, n, s.pin, prm, tau_int, w.vx, w.vy, w.fpin, w.ntx, w.nty)


@numba.njit(**K.JIT)
def _repeat_capture_impl(calls, x, y, n, ign, vx, vy, dt, ox, oy, opin, cstart, citems,
                         ncx, ncy, prm, cap_seg, cap_s, cap_obs, cap_x, cap_y):
    acc = 0
    for _ in range(calls):   # the line moves on by v dt at each call, as in the step
        acc += K.move_and_capture(x, y, n, ign, vx, vy, dt, ox, oy, opin, cstart, citems,
                                  ncx, ncy, prm, cap_seg, cap_s, cap_obs, cap_x, cap_y)
    return acc


def _repeat_capture(calls, s, n, dt, r, opin, prm, w):
    _repeat_capture_impl(calls, s.x, s.y, n, s.ign, w.vx, w.vy, dt, r.ox, r.oy, opin,
                         r.cstart, r.citems, r.ncx, r.ncy, prm, w.cap_seg, w.cap_s, w.cap_obs,
                         w.cap_x, w.cap_y)


@numba.njit(**K.JIT)
def _repeat_contact_impl(calls, x, y, n, pin, ntx, nty, prm, head, nxt):
    acc = 0
    for _ in range(calls):
        i, j = K.find_contact(x, y, n, pin, ntx, nty, prm, head, nxt)
        acc += i
    return acc


def _repeat_contact(calls, s, n, prm, w):
    _repeat_contact_impl(calls, s.x, s.y, n, s.pin, w.ntx, w.nty, prm, w.head, w.nxt)


@numba.njit(**K.JIT)
def _repeat_remesh_impl(calls, x, y, pin, ign, n, prm, bx, by, bpin, bign, ox, oy, opin,
                        cstart, citems, ncx, ncy):
    acc = 0
    for _ in range(calls):
        acc += K.remesh(x, y, pin, ign, n, prm, bx, by, bpin, bign, ox, oy, opin, cstart, citems,
                        ncx, ncy)
    return acc


def _repeat_remesh(calls, s, n, prm, bx, by, bpin, bign, r, opin):
    _repeat_remesh_impl(calls, s.x, s.y, s.pin, s.ign, n, prm, bx, by, bpin, bign, r.ox, r.oy,
                        opin, r.cstart, r.citems, r.ncx, r.ncy)


def throughput(repeats: int, sizes) -> None:
    print(f"\n1. full time step, line gliding at {DRIVE} x 2Γ/(b L_s) through impenetrable points")
    print(f"{'nodes':>8}{'obstacles':>11}{'node-steps/s':>15}{'ns/node-step':>14}"
          f"{'remesh/step':>13}{'contact/step':>14}{'captures/step':>15}")
    rigs = {}
    for nodes in sizes:
        rig = StepRig(nodes)
        rate, n = rig.node_steps_per_second(repeats)
        s = rig.state.copy()
        before = s.meta.copy()
        rig.run(s, 1000)
        d = s.meta - before
        per = 1.0 / max(1, d[K.M_STEPS])
        print(f"{n:>8}{rig.n_obstacles:>11}{rate:>15.3e}{1e9 / rate:>14.1f}"
              f"{d[K.M_REMESH] * per:>13.3f}{d[K.M_CONTACT_CHECKS] * per:>14.3f}"
              f"{d[K.M_CAPTURES] * per:>15.4f}")
        rigs[nodes] = (rig, rate, n, d)
    print("\n2. kernels of the step, each timed alone on the gliding line (ns per node per call;"
          " share of the measured step, remesh weighted by how often it runs)")
    for nodes, (rig, rate, n, d) in rigs.items():
        per_call = rig.kernel_shares(repeats, calls=200 if nodes < 5000 else 40)
        step_s = 1.0 / rate * n
        steps = max(1, d[K.M_STEPS])
        weight = {"remesh (when called)": d[K.M_REMESH] / steps,
                  "find_contact": d[K.M_CONTACT_CHECKS] / steps}
        print(f"  {n} nodes: step {1e9 / rate:.1f} ns/node")
        total = 0.0
        for name, t in per_call.items():
            share = t * weight.get(name, 1.0) / step_s
            total += share
            print(f"    {name:<22}{1e9 * t / n:>8.1f} ns/node {100 * share:>7.1f} %")
        print(f"    {'rest (release, move, bookkeeping)':<36}{100 * (1 - total):>7.1f} %")


def _crss_case(kind: str, count: int, seed: int = 11):
    if kind == "regular":
        side = int(round(math.sqrt(count)))
        field = square_field(SPACING, side, side, np.inf)
    else:
        box = SPACING * math.sqrt(count)
        field = random_field(box, box, SPACING ** -2, np.inf, np.random.default_rng(seed))
    model = LineModel(GAMMA, NODE_FRACTION * SPACING)
    protocol = Protocol(0.02 * TAU_REF, 1e-3 * TAU_REF, field.Ly, 8, 2_000_000, 5 * TAU_REF)
    return field, model, protocol


def crss_times(repeats: int, counts) -> None:
    print("\n3. wall time to CRSS (find_crss), impenetrable points, node spacing 0.2 L_s")
    print(f"{'field':>9}{'obstacles':>11}{'nodes':>7}{'CRSS/(2Γ/bL)':>14}{'steps':>10}"
          f"{'wall s':>9}{'outside jit':>13}")
    inside = [0.0]
    original = K.relax_line

    def timed(*args):
        t0 = time.perf_counter()
        status = original(*args)
        inside[0] += time.perf_counter() - t0
        return status

    walls = {}
    solver.K.relax_line = timed
    try:
        for kind in ("regular", "random"):
            for count in counts:
                field, model, protocol = _crss_case(kind, count)
                best, res, py = math.inf, None, 0.0
                for _ in range(repeats):
                    inside[0] = 0.0
                    t0 = time.perf_counter()
                    r = find_crss(field, model, protocol)
                    wall = time.perf_counter() - t0
                    if wall < best:
                        best, res, py = wall, r, 1.0 - inside[0] / wall
                steps = sum(h.steps for h in res.history)
                walls[kind, count] = best
                print(f"{kind:>9}{field.n:>11}{res.line.n:>7}{res.crss / TAU_REF:>14.4f}"
                      f"{steps:>10}{best:>9.2f}{100 * py:>12.2f}%")
    finally:
        solver.K.relax_line = original
    if len(counts) == 2:
        a, b = counts
        print("\nscaling of the CRSS wall time with the obstacle count at fixed L_s "
              f"(exponent of t ∝ N^p, {a} -> {b}):")
        for kind in ("regular", "random"):
            p = math.log(walls[kind, b] / walls[kind, a]) / math.log(b / a)
            print(f"  {kind:>8}: x{walls[kind, b] / walls[kind, a]:.1f}, p = {p:.2f}")


def warm() -> None:
    rig = StepRig(200)
    rig.node_steps_per_second(1)
    rig.kernel_shares(1, 1)
    field, model, protocol = _crss_case("regular", 16)
    find_crss(field, model, protocol)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--quick", action="store_true", help="10^3 only, one repeat")
    ap.add_argument("--no-crss", action="store_true", help="skip the CRSS wall times")
    args = ap.parse_args()
    numba.set_num_threads(1)
    repeats = 1 if args.quick else args.repeats
    sizes = (1_000,) if args.quick else (1_000, 10_000)
    warm()
    print(f"dlsim time step benchmark, one numba thread, {os.cpu_count()} cores, {_load()}")
    throughput(repeats, sizes)
    if not args.no_crss:
        crss_times(repeats, sizes)
    print(f"\n{_load()} at the end")


if __name__ == "__main__":
    main()
