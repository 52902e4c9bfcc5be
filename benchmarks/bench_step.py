"""Throughput of the compiled time step and wall time of the CRSS protocol (one core).

Run: ``python benchmarks/bench_step.py [--repeats 3] [--quick]``.

1. Node-steps per second of the full time step (forces, friction, motion, capture, remeshing and the
   reconnection check, everything :func:`dlsim.kernels.relax_line` does): a line of 10^3 or 10^4
   nodes (node spacing 0.2 L_s) glides through a random field of impenetrable points at the
   square-array Orowan stress 2Γ/(b L_s), above the random-array CRSS, so it keeps moving and
   capturing.  The line is first run for a while so that it is bowed and pinned; each measurement
   restarts from that state.
2. The share of each kernel in the step, from a Python-driven copy of the loop (StepProfile).
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

from dlsim import contract as C
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
        return np.zeros((C.N_WORK_F, cap)), np.zeros((C.N_WORK_I, cap), np.int64)


class StepProfile:
    """Time each kernel of the step inside a Python-driven copy of :func:`relax_line`'s loop.

    Python calls the kernels one by one (the same calls, in the same order, as the compiled loop),
    timing each; the cost of a call with no nodes (argument unboxing) is subtracted.  Python runs
    between the calls and cools the caches, so the kernel times come out somewhat higher than in
    the compiled loop: read the shares, not the sum.  The move is the constant-Γ line's implicit
    step (kernels._advance): the backward-Euler displacements along the chains
    (implicit_displacements, solved again shorter when the fastest nodes would pass the cap), the
    capture test of the swept areas (move_and_capture), each chain stopped at its first contact
    (_first_contacts), the new pins, the remesh; its length follows the line as relax_line's does.
    """

    def __init__(self, rig: StepRig):
        self.rig = rig
        self.s = rig.state.copy()
        self.opin = rig.relaxer.occupancy(self.s)
        self.times: dict[str, float] = {}
        self.calls: dict[str, int] = {}
        self._arrays()

    def _arrays(self):
        self.work_f, self.work_i = self.rig._arrays(self.s)
        self.work_f[C.W_RAD, : self.s.n] = K.UNKNOWN
        self.field = self.rig.relaxer.field_arrays(self.opin)

    def _kernels(self, n):
        s, prm, f, wf, wi = self.s, self.rig.prm, self.field, self.work_f, self.work_i
        line, loops = s.line, s.loop_arrays
        return {
            "node_pass": lambda: K.node_pass(line, n, prm, wf),
            "first_bad": lambda: K._first_bad(line, n, prm),
            "remesh": lambda bad: K._remesh_line(line, n, prm, bad, f, wf, wi),
            "release": lambda: K._release(line, n, prm, f, wf, s.meta, loops, wi[C.I_KEEP]),
            "refresh_released": lambda count, passed: K._refresh_released(
                line, n, prm, wf, wi[C.I_KEEP], count, passed),
            "contacts and reconnections": lambda: K._reconnect_all(line, n, prm, s.meta, loops, f,
                                                                   wf, wi),
            "implicit_displacements": lambda dt: K.implicit_displacements(line, n, dt, prm, wf),
            "move_and_capture": lambda: self._move(line, n, prm, f, wf, wi),
            "first_contacts": lambda ncap: K._first_contacts(line, n, ncap, prm, wf, wi),
            "insert_pins": lambda ncap: K.insert_pins(line, n, ncap, f, wf, wi),
        }

    @staticmethod
    def _move(line, n, prm, f, wf, wi):
        """The implicit step's displacements as moves, then the capture test (as _advance)."""
        K._implicit_moves(line[2], n, wf)
        wf[C.W_BX, :n], wf[C.W_BY, :n] = line[0][:n], line[1][:n]
        return K.move_and_capture(line, n, 1.0, prm, f, wf, wi)

    def _call(self, name, *args):
        n = self.s.n if self._n is None else self._n
        t0 = time.perf_counter()
        out = self._kernels(n)[name](*args)
        self.times[name] = self.times.get(name, 0.0) + time.perf_counter() - t0
        self.calls[name] = self.calls.get(name, 0) + 1
        return out

    def overheads(self) -> dict[str, float]:
        """Seconds per call of each kernel on an empty line (n = 0 where the kernel allows)."""
        k = self._kernels(0)
        empty = {"node_pass": (), "release": ()}
        out = {}
        for name, args in empty.items():
            out[name] = _best(lambda: [k[name](*args) for _ in range(200)], 3) / 200
        # the rest take about as many arrays as node_pass, or twice as many
        for name in ("remesh", "contacts and reconnections", "move_and_capture", "first_contacts"):
            out[name] = 2.0 * out["node_pass"]
        for name in ("insert_pins", "refresh_released", "first_bad", "implicit_displacements"):
            out[name] = out["node_pass"]
        return out

    def run(self, steps: int) -> tuple[float, int]:
        """Run ``steps`` moves; return (wall seconds, node-steps)."""
        s, meta = self.s, self.s.meta
        self._n = None
        n, moved, node_steps = s.n, 0, 0
        searched, reconnections = False, meta[C.M_RECONNECT]
        prm = self.rig.prm
        dt0, cap_move, dt_low = K.implicit_step_bounds(prm)
        dt, seen = dt_low, meta[C.M_RELEASES]
        t0 = time.perf_counter()
        while moved < steps:
            if 2 * n + 2 * C.MAX_CAPTURES + 16 > s.capacity:
                meta[C.M_N] = n
                s.grow()
                self._arrays()
            self._n = n
            bad = self._call("first_bad") if searched else -1   # just reconnected
            if bad < 0:
                passed = self._call("node_pass")
                bad = passed[1]
            if bad >= 0:
                n = self._n = self._call("remesh", bad)
                passed = self._call("node_pass")
            released = self._call("release")
            if released > 0:
                meta[C.M_RELEASES] += released
                done, passed = self._call("refresh_released", released, passed)
                if not done:
                    continue
            area, bad, max_te, stiff, vmax, turned = passed
            if turned > 0 and not searched:
                n_new, full = self._call("contacts and reconnections")
                if full:
                    n = meta[C.M_N] = n_new
                    s.grow()
                    self._arrays()
                    continue
                if n_new != n or meta[C.M_RECONNECT] != reconnections:
                    n, reconnections, searched = n_new, meta[C.M_RECONNECT], True
                    continue
            searched = False
            if meta[C.M_RELEASES] != seen:
                dt, seen = min(dt, dt0), meta[C.M_RELEASES]
            big = self._call("implicit_displacements", dt)
            if big > cap_move and dt > dt_low:
                dt = max(dt * cap_move / big, dt_low)
                big = self._call("implicit_displacements", dt)
            if big < 0.0:       # no pin: the point-implicit step, as _advance takes it
                raise RuntimeError("the profile's line lost every pin")
            ncap, bad = self._call("move_and_capture")
            if ncap > 0:
                ncap, back = self._call("first_contacts", ncap)
                if back >= 0:
                    bad = back if bad < 0 else min(bad, back)
            if ncap > 0:
                n = self._n = self._call("insert_pins", ncap)
                first = self.work_i[C.I_CAPTURE, 0]
                bad = first if bad < 0 else min(bad, first)
            if bad >= 0:
                self._n = n
                n = self._call("remesh", bad)
            dt = K.next_implicit_step(dt, big, cap_move, dt0)
            moved += 1
            node_steps += n
        meta[C.M_N] = n
        return time.perf_counter() - t0, node_steps


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
        per = 1.0 / max(1, d[C.M_STEPS])
        print(f"{n:>8}{rig.n_obstacles:>11}{rate:>15.3e}{1e9 / rate:>14.1f}"
              f"{d[C.M_REMESH] * per:>13.3f}{d[C.M_CONTACT_CHECKS] * per:>14.3f}"
              f"{d[C.M_CAPTURES] * per:>15.4f}")
        rigs[nodes] = (rig, rate)
    print("\n2. share of each kernel in the step (Python-driven copy of the loop, see StepProfile;"
          " ns per node-step with the call cost removed)")
    for nodes, (rig, rate) in rigs.items():
        prof = StepProfile(rig)
        over = prof.overheads()
        wall, node_steps = prof.run(300 if nodes < 5000 else 60)
        net = {k: max(0.0, t - prof.calls[k] * over[k]) for k, t in prof.times.items()}
        total = sum(net.values())
        print(f"  {int(node_steps / (300 if nodes < 5000 else 60))} nodes (compiled step "
              f"{1e9 / rate:.1f} ns/node-step):")
        for name, t in sorted(net.items(), key=lambda kv: -kv[1]):
            calls = prof.calls[name] / (300 if nodes < 5000 else 60)
            print(f"    {name:<28}{calls:>6.2f} calls/step {1e9 * t / node_steps:>8.1f} ns"
                  f" {100 * t / total:>6.1f} %")


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
    StepProfile(rig).run(5)
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
