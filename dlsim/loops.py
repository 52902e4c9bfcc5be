"""Orowan loops relaxed onto the obstacles they hold (numba kernels and their Python driver).

The line cuts a loop off the moment its two arms meet behind a particle (:mod:`dlsim.kernels`), so
the stored loop is a teardrop with the arms' tails.  Left alone it relaxes under its line tension
and the applied stress: the Peach–Koehler force ½ τ ẑ × (r_{i+1} − r_{i−1}) of a loop of the
line's sense points inward, like the line tension, so the loop shrinks until it wraps what it
holds (an impenetrable disc: a near-circle on the ring points; a cluster of points: their hull),
or shrinks away when it holds nothing.  This module relaxes each loop alone with the same nodal
forces as the line (docs/physics.md, "The line and its nodal forces"), under a constant line
tension Γ (the line's own with the constant model; a simplification with the other line models:
no self-stress and no loop–loop or loop–line interaction).

Every loop's work is bounded (a loop around a cluster of points once looped for minutes):

- at most ``max_steps`` passes of the loop (a pass moves the nodes, or only releases pins), no
  ``while`` loop anywhere;
- at most :data:`MAX_LOOP_NODES` nodes: a capture or a split that would exceed it ends the
  relaxation with status ``full`` (the loop is kept as it is then);
- obstacles are found through the periodic cell list of the field (the cells the area a segment
  sweeps covers), never by a scan of every obstacle;
- where the two sides of a loop meet, the part that holds nothing is cut off and dropped (the
  tails of a freshly cut loop, a free lobe); when both parts hold obstacles (the sides meet
  between two obstacles it holds) the relaxation ends with status ``pinched`` and the loop is
  kept as it is then: no splitting queue.  A cut removes at least LOOP_CONTACT_GAP - 1 nodes and
  takes one of the ``max_steps`` passes.

Statuses (:data:`LOOP_STATUS_NAMES`): ``relaxed`` (equilibrium within the tolerance),
``collapsed`` (shrank below three minimal segments: an empty loop is dropped, a loop round a point
obstacle of zero size is kept as the tiny polygon it became), ``unrelaxed`` (the step budget ran
out), ``full``, ``pinched``, ``expanding``: a stored loop of the opposite sense (clockwise for a
line along +x gliding +y under τ > 0; the stepper cuts off such loops, e.g. a forward bulge
pinched off between obstacles, not an Orowan loop) is pushed outward by the stress and would grow
without bound, so it is left as it was cut off.
"""
from __future__ import annotations

from collections import namedtuple
from dataclasses import dataclass

import numpy as np
from numba import njit

from dlsim.contract import M_NLOOPNODES, M_NLOOPS, OCC_ALL
from dlsim.jit import JIT
from dlsim.kernels import _capture_in_quad, _sort_captures
from dlsim.solver import field_tuple  # noqa: F401  (the kernels' field group; re-exported)

#: The parameters of a loop relaxation (reduced units): constant line tension Γ (G b²), applied
#: and friction stress (G), mobility, the remesher's segment bounds (b), the equilibrium
#: tolerance on the effective stress (G) and the step budget.  A namedtuple reads by name in the
#: kernels; a missing field is a TypeError when it is built.
LoopParameters = namedtuple("LoopParameters",
                            "gamma tau tau_f mobility l_min l_max tolerance max_steps")

#: Status codes of :func:`relax_loop`.
LOOP_RELAXED = 0
LOOP_COLLAPSED = 1
LOOP_UNRELAXED = 2
LOOP_FULL = 3
LOOP_PINCHED = 4
LOOP_EXPANDING = 5
LOOP_STATUS_NAMES = ("relaxed", "collapsed", "unrelaxed", "full", "pinched", "expanding")

#: Nodes of one loop at the most (captures or splits beyond it end the relaxation, status full).
MAX_LOOP_NODES = 2048
#: Time steps (passes) allowed to one loop.  A loop shrinking from radius R by curvature needs
#: about 1.5 (R/h)² steps of the point-implicit update (h the node spacing; measured: a loop of
#: 3 h round a disc settles in a few hundred), so this covers loops of tens of node spacings.
DEFAULT_LOOP_STEPS = 20_000
#: Captures listed in one step at the most (each node moves < l_min/4 per step: a handful).
MAX_LOOP_CAPTURES = 256
#: A loop is never thinned below this many nodes (a triangle).
MIN_LOOP_NODES = 3
#: A loop whose perimeter falls below this many shortest segments (l_min) has collapsed.
COLLAPSE_SEGMENTS = 3.0
#: Same time step as the line's point-implicit update (kernels.STEP_STIFFNESS, value copied:
#: k dt = 2 at a node whose arms are the target spacing), and the same cap on a node's move per
#: step as a fraction of l_min (kernels.MAX_MOVE_FRACTION), so captures stay exact.
LOOP_STEP_STIFFNESS = 2.0
LOOP_MOVE_FRACTION = 0.25
#: Two nodes of a loop at least LOOP_CONTACT_GAP places apart along it, closer than this fraction
#: of l_min and with tangents closer to antiparallel than LOOP_CONTACT_COS, are the loop's sides
#: meeting (status pinched).  The fraction is the cap on a step's move: sides that close in at
#: most 2 × l_min/4 per step are seen before they cross.
LOOP_CONTACT_FRACTION = 0.5
LOOP_CONTACT_GAP = 3
LOOP_CONTACT_COS = -0.5


# --------------------------------------------------------------------------- kernels


@njit(**JIT)
def _loop_velocities(x, y, pin, n, prm, ofc, released_flag, work):
    """Velocities of the free nodes of a closed loop (friction included), the stiffness k_i of
    the point-implicit update, and the release of overloaded pins.

    Forces as in :func:`dlsim.kernels.node_pass`: line tension Γ (t_i − t_{i−1}) plus
    Peach–Koehler ½ τ ẑ × (r_{i+1} − r_{i−1}); at a free node the local stress F·n/l less the
    friction threshold drives the node along the chord normal; a pinned node whose force
    exceeds its obstacle's critical force is released (it stays flagged in ``released_flag``,
    so the loop never captures it again).

    Returns (largest effective stress on a free node, pins released, perimeter).
    """
    vx, vy, stiff = work[0], work[1], work[2]
    gamma, tau, tau_f, mob = prm.gamma, prm.tau, prm.tau_f, prm.mobility
    max_te, released, perimeter = 0.0, 0, 0.0
    for i in range(n):
        im, ip = (i - 1) % n, (i + 1) % n
        ax, ay = x[i] - x[im], y[i] - y[im]
        bx, by = x[ip] - x[i], y[ip] - y[i]
        a, b = np.sqrt(ax * ax + ay * ay), np.sqrt(bx * bx + by * by)
        perimeter += b
        a, b = max(a, 1e-12), max(b, 1e-12)
        fx, fy = gamma * (bx / b - ax / a), gamma * (by / b - ay / a)
        cx, cy = ax + bx, ay + by
        c = max(np.sqrt(cx * cx + cy * cy), 1e-12)
        vx[i], vy[i], stiff[i] = 0.0, 0.0, 2.0 * mob * gamma / (a * b)
        if pin[i] >= 0:
            t_pk = max(abs(tau) - tau_f, 0.0) * (1.0 if tau >= 0.0 else -1.0)
            px, py = fx - 0.5 * t_pk * cy, fy + 0.5 * t_pk * cx
            if np.sqrt(px * px + py * py) > ofc[pin[i]]:
                released_flag[pin[i]] = OCC_ALL
                pin[i] = -1
                released += 1
            continue
        tnx, tny = cx / c, cy / c
        t_loc = (fy * tnx - fx * tny + 0.5 * tau * c) / (0.5 * (a + b))
        t_eff = abs(t_loc) - tau_f
        if t_eff > 0.0:
            max_te = max(max_te, t_eff)
            speed = mob * t_eff if t_loc > 0.0 else -mob * t_eff
            vx[i], vy[i] = -speed * tny, speed * tnx
    return max_te, released, perimeter


@njit(**JIT)
def _move(x, y, pin, n, prm, field, work, caps):
    """Advance the free nodes by one point-implicit step (no node further than
    LOOP_MOVE_FRACTION l_min) and list the obstacles their segments sweep
    (:func:`dlsim.kernels._capture_in_quad`: the cell list, flagged obstacles skipped); return the
    count."""
    vx, vy, stiff, nx, ny = work[0], work[1], work[2], work[3], work[4]
    h = 0.5 * (prm.l_min + prm.l_max)
    dt = LOOP_STEP_STIFFNESS * h * h / (2.0 * prm.mobility * prm.gamma)
    cap2 = (LOOP_MOVE_FRACTION * prm.l_min) ** 2
    for i in range(n):
        f = dt / (1.0 + stiff[i] * dt)
        v2 = vx[i] * vx[i] + vy[i] * vy[i]
        if v2 * f * f > cap2:
            f = np.sqrt(cap2 / v2)
        nx[i], ny[i] = x[i] + vx[i] * f, y[i] + vy[i] * f
    ncap = 0
    for i in range(n):
        j = (i + 1) % n
        if nx[i] == x[i] and ny[i] == y[i] and nx[j] == x[j] and ny[j] == y[j]:
            continue
        ncap = _capture_in_quad(i, (x[i], y[i], x[j], y[j], nx[j], ny[j], nx[i], ny[i]),
                                pin[i], pin[j], field, ncap, caps)
    x[:n], y[:n] = nx[:n], ny[:n]
    return ncap


@njit(**JIT)
def _insert_captures(x, y, pin, n, ncap, caps):
    """Insert a pinned node at every capture (each obstacle listed once), after its segment's
    start and in order along it (the arrays hold n + ncap nodes); return the new count."""
    _sort_captures(ncap, caps)
    cseg, _, cobs, cx, cy = caps
    dst, c = n + ncap - 1, ncap - 1
    for i in range(n - 1, -1, -1):
        while c >= 0 and cseg[c] == i:
            x[dst], y[dst], pin[dst] = cx[c], cy[c], cobs[c]
            dst -= 1
            c -= 1
        x[dst], y[dst], pin[dst] = x[i], y[i], pin[i]
        dst -= 1
    return n + ncap


@njit(**JIT)
def _remesh_loop(x, y, pin, n, prm, buf):
    """Keep the loop's segments within [l_min, l_max]: drop a free node whose arm behind it is
    shorter than l_min (never below MIN_LOOP_NODES), split a segment longer than l_max at its
    midpoint; return the new count (-1 if a split would pass the capacity)."""
    bx, by, bp = buf
    cap = x.shape[0]
    lmin2, lmax2 = prm.l_min * prm.l_min, prm.l_max * prm.l_max
    m = 0
    for i in range(n):
        if m > 0 and pin[i] < 0 and m + n - i - 1 >= MIN_LOOP_NODES:
            dx, dy = x[i] - bx[m - 1], y[i] - by[m - 1]
            if dx * dx + dy * dy < lmin2:
                continue
        bx[m], by[m], bp[m] = x[i], y[i], pin[i]
        m += 1
    if m > MIN_LOOP_NODES and bp[m - 1] < 0:      # the closing segment
        dx, dy = bx[0] - bx[m - 1], by[0] - by[m - 1]
        if dx * dx + dy * dy < lmin2:
            m -= 1
    k = 0
    for i in range(m):
        j = (i + 1) % m
        x[k], y[k], pin[k] = bx[i], by[i], bp[i]
        k += 1
        dx, dy = bx[j] - bx[i], by[j] - by[i]
        if dx * dx + dy * dy > lmax2:
            if k + (m - i) > cap:
                return -1
            x[k], y[k], pin[k] = bx[i] + 0.5 * dx, by[i] + 0.5 * dy, -1
            k += 1
    return k


@njit(**JIT)
def _sides_meet(x, y, pin, n, dist, order):
    """Two nodes at least LOOP_CONTACT_GAP places apart along the loop, one free, closer than
    ``dist`` with near-antiparallel chord tangents: the loop's sides meeting.  A sweep over the
    nodes sorted by x (O(n log n) plus the close pairs).  Returns (i, j), i < j, or (-1, -1)."""
    order[:n] = np.argsort(x[:n])
    d2 = dist * dist
    for a in range(n):
        i = order[a]
        for b in range(a + 1, n):
            j = order[b]
            if x[j] - x[i] > dist:
                break
            gap = abs(i - j)
            if min(gap, n - gap) < LOOP_CONTACT_GAP or (pin[i] >= 0 and pin[j] >= 0):
                continue
            dx, dy = x[j] - x[i], y[j] - y[i]
            if dx * dx + dy * dy >= d2:
                continue
            tix, tiy = x[(i + 1) % n] - x[(i - 1) % n], y[(i + 1) % n] - y[(i - 1) % n]
            tjx, tjy = x[(j + 1) % n] - x[(j - 1) % n], y[(j + 1) % n] - y[(j - 1) % n]
            norm = np.sqrt((tix * tix + tiy * tiy) * (tjx * tjx + tjy * tjy))
            if norm > 0.0 and tix * tjx + tiy * tjy < LOOP_CONTACT_COS * norm:
                return min(i, j), max(i, j)
    return -1, -1


@njit(**JIT)
def _cut_free_part(x, y, pin, n, i, j):
    """Where the sides meet at nodes i < j, cut the loop in two at the contact (joined at the
    midpoint of i and j) and drop the part that holds no obstacle: it is a free loop, which
    shrinks away (when neither holds one, the shorter is dropped).  Returns the new count, or -1
    when both parts hold obstacles (nothing done)."""
    inner = False
    for q in range(i + 1, j):
        inner |= pin[q] >= 0
    outer = False
    for q in range(j + 1, n + i):
        outer |= pin[q % n] >= 0
    if inner and outer:
        return -1
    mx, my = 0.5 * (x[i] + x[j]), 0.5 * (y[i] + y[j])
    # the part holding obstacles stays; when neither does, the longer (it may still meet some)
    if inner or (not outer and j - i - 1 > n - (j - i) - 1):    # keep i+1 .. j-1, the joint
        m = 0
        for q in range(i + 1, j):
            x[m], y[m], pin[m] = x[q], y[q], pin[q]
            m += 1
    else:              # keep j+1 .. n-1, 0 .. i-1 and the joint
        m = 0
        for q in range(i):
            x[m], y[m], pin[m] = x[q], y[q], pin[q]
            m += 1
        for q in range(j + 1, n):
            x[m], y[m], pin[m] = x[q], y[q], pin[q]
            m += 1
    x[m], y[m], pin[m] = mx, my, -1
    return m + 1


@njit(**JIT)
def relax_loop(loop, n, field, prm):
    """Relax one closed loop at fixed stress, in place, within a fixed budget.

    Parameters
    ----------
    loop : (x, y, pin)
        Node positions (b, unwrapped) and the obstacle each node holds (-1 free), capacity
        ``cap`` >= n (at most MAX_LOOP_NODES are used); the first ``n`` entries hold the loop,
        in the line's sense (then the applied stress pushes it inward).
    n : int
        Nodes of the loop (>= MIN_LOOP_NODES).
    field : obstacle field tuple (dlsim.contract)
        Its occupancy row ``field[3]`` is this loop's own: zero where an obstacle may hold the
        loop; set here to OCC_ALL (every image held, dlsim.contract) where the loop holds or has
        released one (never captured again);
        the caller zeroes it before the next loop.
    prm : LoopParameters

    Returns
    -------
    status : int
        LOOP_RELAXED, LOOP_COLLAPSED, LOOP_UNRELAXED, LOOP_FULL, LOOP_PINCHED or LOOP_EXPANDING
        (a loop of the opposite sense, clockwise under τ > 0, which the stress would expand
        without bound: left as it was cut off).
    n : int
        Nodes of the relaxed loop.
    steps : int
        Passes taken (<= prm.max_steps).
    releases : int
        Pins released (then ``field[3]`` holds flags to clear).
    """
    x, y, pin = loop
    cap = min(x.shape[0], MAX_LOOP_NODES)
    work = np.zeros((5, cap))
    buf = (np.zeros(cap), np.zeros(cap), np.zeros(cap, np.int64))
    caps = (np.zeros(MAX_LOOP_CAPTURES, np.int64), np.zeros(MAX_LOOP_CAPTURES),
            np.zeros(MAX_LOOP_CAPTURES, np.int64), np.zeros(MAX_LOOP_CAPTURES),
            np.zeros(MAX_LOOP_CAPTURES))
    order = np.zeros(cap, np.int64)
    contact = LOOP_CONTACT_FRACTION * prm.l_min
    if n > cap:
        return LOOP_FULL, n, 0, 0
    area = 0.0
    for i in range(n):
        j = (i + 1) % n
        area += x[i] * y[j] - x[j] * y[i]
    if prm.tau * area < 0.0:     # the stress pushes it outward: not a loop round its obstacles
        return LOOP_EXPANDING, n, 0, 0
    flags = field[3]
    for i in range(n):        # what the loop holds is never captured a second time
        if pin[i] >= 0:
            flags[pin[i]] = OCC_ALL
    releases = 0
    for step in range(prm.max_steps):
        max_te, released, perimeter = _loop_velocities(x, y, pin, n, prm, field[2], field[3],
                                                       work)
        releases += released
        if perimeter < COLLAPSE_SEGMENTS * prm.l_min:
            return LOOP_COLLAPSED, n, step, releases
        if released > 0:       # forces again before the freed nodes move
            continue
        if max_te < prm.tolerance:
            return LOOP_RELAXED, n, step, releases
        ncap = _move(x, y, pin, n, prm, field, work, caps)
        if n + ncap > cap:
            return LOOP_FULL, n, step + 1, releases
        n = _insert_captures(x, y, pin, n, ncap, caps)
        for c in range(ncap):
            flags[caps[2][c]] = OCC_ALL
        n_new = _remesh_loop(x, y, pin, n, prm, buf)
        if n_new < 0:
            return LOOP_FULL, n, step + 1, releases
        n = n_new
        i, j = _sides_meet(x, y, pin, n, contact, order)       # every step
        if i >= 0:
            n_cut = _cut_free_part(x, y, pin, n, i, j)
            if n_cut < 0:
                return LOOP_PINCHED, n, step + 1, releases
            n = n_cut
    return LOOP_UNRELAXED, n, prm.max_steps, releases


# --------------------------------------------------------------------------- driver


@dataclass
class LoopReport:
    """What :func:`relax_state_loops` did: one entry per loop it was given.

    ``status`` holds LOOP_STATUS_NAMES codes, ``steps`` the passes each took, ``kept`` whether
    the loop is still stored (it holds an obstacle), ``tau`` the stress (G).
    """

    status: np.ndarray
    steps: np.ndarray
    kept: np.ndarray
    tau: float

    def counts(self) -> dict:
        """``{"n_loops_<status>": count}`` for every status, and ``n_loops_kept``."""
        out = {f"n_loops_{name}": int(np.count_nonzero(self.status == code))
               for code, name in enumerate(LOOP_STATUS_NAMES)}
        out["n_loops_kept"] = int(np.count_nonzero(self.kept))
        return out


def loop_parameters(gamma: float, tau: float, tau_f: float, l_min: float, l_max: float,
                    tolerance: float, max_steps: int = DEFAULT_LOOP_STEPS, mobility: float = 1.0
                    ) -> LoopParameters:
    """The parameters of a loop relaxation (reduced units; segment bounds as the line's)."""
    return LoopParameters(float(gamma), float(tau), float(tau_f), float(mobility), float(l_min),
                          float(l_max), float(tolerance), int(max_steps))


def relax_loops(loops: list, field: tuple, prm: LoopParameters):
    """Relax each loop ``(x, y, pin)`` (b) alone in ``field`` (:func:`dlsim.solver.field_tuple`; its
    occupancy row is overwritten); return the relaxed loops (those still holding an obstacle)
    and a :class:`LoopReport`."""
    flags = field[3]
    status = np.zeros(len(loops), np.int64)
    steps = np.zeros(len(loops), np.int64)
    kept = np.zeros(len(loops), bool)
    out = []
    for k, (lx, ly, lp) in enumerate(loops):
        n = lx.shape[0]
        cap = max(min(MAX_LOOP_NODES, max(4 * n, 64)), n)
        x, y, pin = np.zeros(cap), np.zeros(cap), np.full(cap, -1, np.int64)
        x[:n], y[:n], pin[:n] = lx, ly, lp
        code, m, taken, releases = (relax_loop((x, y, pin), n, field, prm)
                                    if n >= MIN_LOOP_NODES else (LOOP_COLLAPSED, n, 0, 0))
        flags[lp[lp >= 0]] = 0        # what this loop held, holds or released
        flags[pin[:m][pin[:m] >= 0]] = 0
        if releases:
            flags[:] = 0
        status[k], steps[k] = code, taken
        kept[k] = bool((pin[:m] >= 0).any())
        if kept[k]:
            out.append((x[:m].copy(), y[:m].copy(), pin[:m].copy()))
    return out, LoopReport(status, steps, kept, float(prm.tau))


def relax_state_loops(state, obstacles, prm: LoopParameters, field: tuple | None = None
                      ) -> LoopReport:
    """Relax the Orowan loops of a :class:`dlsim.line.LineState` in place: its loop buffers
    then hold the relaxed loops that still hold an obstacle, in their order."""
    field = field_tuple(obstacles) if field is None else field
    relaxed, report = relax_loops(state.loops(), field, prm)
    store_loops(state, relaxed)
    return report


def store_loops(state, loops: list) -> None:
    """Replace the loop buffers of ``state`` by ``loops`` [(x, y, pin)], CSR (dlsim.contract),
    keeping at least the present capacities."""
    sizes = np.array([lp[0].shape[0] for lp in loops], np.int64)
    used = int(sizes.sum())
    cap = max(state.loop_x.shape[0], used)
    off = np.zeros(max(state.loop_off.shape[0], len(loops) + 1), np.int64)
    np.cumsum(sizes, out=off[1:len(loops) + 1])
    state.loop_x, state.loop_y = np.zeros(cap), np.zeros(cap)
    state.loop_pin = np.full(cap, -1, np.int64)
    for k, (x, y, pin) in enumerate(loops):
        sl = slice(off[k], off[k + 1])
        state.loop_x[sl], state.loop_y[sl], state.loop_pin[sl] = x, y, pin
    state.loop_off = off
    state.meta[M_NLOOPS], state.meta[M_NLOOPNODES] = len(loops), used
