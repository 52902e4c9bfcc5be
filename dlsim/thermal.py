"""Thermally activated glide through obstacles, on the arc construction or on the nodal line.

A pinned obstacle that the line presses with a force F below its critical force F_c is overcome
by thermal activation at the rate ν0 exp(-ΔG(F)/kT), ΔG = ΔF0 [1 - (F/F_c)^p]^q (Kocks, Argon &
Ashby, *Thermodynamics and Kinetics of Slip*, 1975).  At a fixed stress the next activation among
the line's pins is drawn by the residence-time algorithm (Bortz, Kalos & Lebowitz 1975; Gillespie
1976): total rate R = Σ r_i, pin i with probability r_i/R, clock advanced by -ln(u)/R; after the
release the line relaxes athermally (cascades included) at the same stress.  Two solvers share
that step (:func:`_residence_event`) and the event numbers of a seed (:func:`event_numbers`):
the arc construction (:mod:`dlsim.arcs`; point obstacles, constant line tension, events cheap;
:func:`kmc_events`) and, for every other case, the nodal line (:func:`dlsim.kernels.relax_line`
after each release; :func:`kmc_nodal_events`).  The mean glide over the clock gives the
velocity v and the strain rate ε̇ = ρ_m b v.  The stress that gives the requested strain rate is
found by bisection on ln ε̇, each event sequence on its own (common random numbers along one
sequence), and the spread over sequences is the statistical uncertainty (docs/physics.md,
"Thermal activation").

Rates are handled as logarithms relative to ν0 (ΔG/kT reaches hundreds at low temperature and
exp underflows); the clock is kept as its logarithm too.  Reduced units inside (length b, stress
G, force G b²); the barrier enters as ΔF0/kT, a pure number.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numba import njit

from dlsim import arcs as A
from dlsim import contract as C
from dlsim import kernels as K
from dlsim.fields import ObstacleField
from dlsim.jit import JIT
from dlsim.line import LineState
from dlsim.solver import LineModel, Protocol, Relaxer

#: Boltzmann constant in eV/K (CODATA 2018, exact).
K_B_EV = 8.617333262e-5
#: The elementary charge in C (CODATA 2018, exact): eV to J.
EV_J = 1.602176634e-19

#: Status codes of :func:`kmc_events` and :func:`kmc_nodal_events` (K_UNRESOLVED: a nodal
#: avalanche used every time step the protocol allows).
K_DONE, K_GROW, K_RUNAWAY, K_STUCK, K_FATAL, K_UNRESOLVED = range(6)
KMC_STATUS = ("done", "grow", "runaway", "stuck", "fatal", "unresolved")
#: Slots of the kMC state vector: events done, ln of the clock (units of 1/ν0), area of the line
#: when the measurement started (b²), ln clock then, events of the warm-up, an avalanche is due,
#: area of the line when the avalanche started (b², nodal line only).
Q_EVENTS, Q_LNT, Q_AREA0, Q_LNT0, Q_WARM, Q_PENDING, Q_AREA_AV = range(7)
N_Q = 7
#: Share of a sequence's events spent reaching the steady state before glide and clock are
#: measured (the first events start from the configuration of monotonic loading).
WARMUP_FRACTION = 0.2
#: Bisection steps of the stress search on ln ε̇ (2^-20 of the athermal CRSS), after which the
#: root is interpolated linearly in ln ε̇ between the bracket's ends: far below the statistical
#: uncertainty of any sequence.
SEARCH_BISECTIONS = 20
#: The same on the nodal line, whose events cost a relaxation each: 2^-12 of the athermal CRSS,
#: then the same interpolation, whose error is of second order in the bracket (on the one-pin
#: array at 50 and 300 K the stress moved by 2e-5 of itself from 20 bisections to 12, against a
#: statistical spread of 0.6 % from 300 events).
NODAL_SEARCH_BISECTIONS = 12
#: Relative stress step of the central difference that gives the activation volume.
VSTAR_STEP = 0.01


@njit(**JIT)
def log_rate(x, barrier, p, q):
    """ln(r/ν0) = -(ΔF0/kT) [1 - x^p]^q of an obstacle pressed at x = F/F_c (x >= 1: +0, the
    release is athermal; x <= 0: the whole barrier)."""
    if x >= 1.0:
        return 0.0
    if x <= 0.0:
        return -barrier
    return -barrier * (1.0 - x ** p) ** q


@njit(**JIT)
def pin_log_rates(W, s, law, scratch):
    """Fill slots[:n], lnr[:n] of ``scratch`` with the line's pins and their ln(r/ν0) at stress
    s; returns n.  ``law`` is (barrier, p, q) (:func:`kmc_events`).

    The force on a pin is 2Γ cos(φ/2) (φ its arm angle) and F_c = 2Γ cos(φ_c/2), so F/F_c is the
    ratio of the cosines.  An impenetrable obstacle (φ_c = 0) is never activated: -inf.
    """
    PI, SI, OB = W[A.W_IP], W[A.W_IS], W[A.W_OB]
    barrier, p, q = law
    slots, _, lnr = scratch
    i0 = SI[A.I_ANCHOR]
    if i0 < 0 or SI[A.I_NPINS] == 0:
        return 0
    i, n = i0, 0
    for _ in range(slots.shape[0]):
        k = PI[A.PK, i]
        phic = OB[2, k]
        slots[n] = i
        if phic <= 0.0:
            lnr[n] = -np.inf
        else:
            x = math.cos(0.5 * A._pin_phi(W, i, s)) / math.cos(0.5 * phic)
            lnr[n] = log_rate(x, barrier[k], p, q)
        n += 1
        i = PI[A.PNEXT, i]
        if i == i0:
            break
    return n


@njit(**JIT)
def _avalanche(W):
    """Relax athermally at the current stress (arcs.advance with its top stress at the current
    one): K_DONE when stable, K_GROW when the work arrays must grow, K_RUNAWAY when the line
    glided the flow distance in one avalanche, K_FATAL otherwise."""
    SI = W[A.W_IS]
    while True:
        st = A.advance(W)
        if st == A.S_GIVEUP:
            return K_DONE
        if st == A.S_HIST:
            SI[A.I_NHIST] = 0                  # the kMC keeps its own record
        elif st == A.S_MAXEV:
            SI[A.I_MAXEV] += SI[A.I_MAXEV]
        elif st == A.S_GROW:
            return K_GROW
        elif st == A.S_FLOW:
            return K_RUNAWAY
        elif st != A.S_SNAP:
            return K_FATAL


@njit(**JIT)
def _residence_event(lnr, keys, n, u, Q, waits):
    """Event k = Q[Q_EVENTS] of the residence-time algorithm among n pins of ln rates
    ``lnr[:n]`` holding the obstacles ``keys[:n]``: (K_DONE, the pin picked with probability
    r_i/R from u[2k]), or (K_RUNAWAY, -1) when the line holds no pin, (K_STUCK, -1) when none can
    be activated.  The pins are walked in the order of their obstacles' indices, so that a
    solver's own numbering of its pins does not enter: the two solvers, given the same
    configuration and the same number, pick the same pin.  The ln waiting time
    ln(-ln(u[2k+1])/R) goes to ``waits[k]`` and is added to the ln clock Q[Q_LNT] (a log-sum, so
    that clocks far beyond the float range stay exact)."""
    if n == 0:
        return K_RUNAWAY, -1
    m = lnr[:n].max()
    if m == -np.inf:
        return K_STUCK, -1
    k = int(Q[Q_EVENTS])
    u_pick, u_wait = u[2 * k], u[2 * k + 1]
    total = 0.0
    for j in range(n):
        total += math.exp(lnr[j] - m)
    order = np.argsort(keys[:n], kind="mergesort")
    pick, acc, target = order[n - 1], 0.0, u_pick * total
    for j in order:
        acc += math.exp(lnr[j] - m)
        if acc >= target:
            pick = j
            break
    lndt = math.log(-math.log(u_wait)) - m - math.log(total)
    waits[k] = lndt
    t = Q[Q_LNT]
    Q[Q_LNT] = lndt if t == -np.inf else max(t, lndt) + math.log1p(math.exp(-abs(t - lndt)))
    return K_DONE, pick


@njit(**JIT)
def kmc_events(W, s, law, events, scratch):
    """Run residence-time events at stress s until ``u`` is used up (two numbers per event).

    Parameters
    ----------
    W : tuple
        The arc construction's work arrays, stable at stress s (``arcs._Run.tuple``).
    s : float
        Stress τ/(2Γ) (b⁻¹), fixed.
    law : (barrier, p, q)
        The activation law: ``barrier`` (m,) float64 ΔF0/kT of every obstacle, ``p``, ``q``
        the exponents of ΔG (:func:`log_rate`).
    events : (u, Q, waits)
        ``u`` (2 n,) float64 uniform numbers in (0, 1]: event k picks its pin with u[2k] and its
        waiting time with u[2k+1]; ``Q`` (N_Q,) float64 the kMC state (``Q_*``), updated,
        resumable after K_GROW; ``waits`` (n,) float64 receives each event's ln waiting time
        (units of 1/ν0).
    scratch : (slots, keys, lnr)
        (C,) int64, int64, float64 for the pins, their obstacles and their log rates
        (C >= the pin capacity).

    Returns
    -------
    int
        K_DONE, K_GROW (grow the arrays and call again), K_RUNAWAY, K_STUCK (no pin can be
        activated) or K_FATAL.
    """
    SF, SI = W[A.W_FS], W[A.W_IS]
    u, Q, waits = events
    slots, keys, lnr = scratch
    n_ev = u.shape[0] // 2
    R = 0.5 / s
    while True:
        if Q[Q_PENDING] != 0.0:
            st = _avalanche(W)
            if st != K_DONE:
                return st
            Q[Q_PENDING] = 0.0
            if Q[Q_EVENTS] == Q[Q_WARM]:
                Q[Q_AREA0], Q[Q_LNT0] = A._line_area(W, s)[0], Q[Q_LNT]
        if Q[Q_EVENTS] >= n_ev:
            return K_DONE
        n = pin_log_rates(W, s, law, scratch)
        for j in range(n):
            keys[j] = W[A.W_IP][A.PK, slots[j]]
        st, pick = _residence_event(lnr, keys, n, u, Q, waits)
        if pick < 0:
            return st
        i = slots[pick]
        SI[A.I_EPOCH] += 1                     # a new avalanche: its glide counts from here
        SF[A.F_DA], SF[A.F_AGAP] = 0.0, 0.0
        A._hremove(W, 2 * i + 1)
        SF[A.F_BX0], SF[A.F_BY0], SF[A.F_BX1], SF[A.F_BY1] = np.inf, np.inf, -np.inf, -np.inf
        r = A._do_release(W, i, s, R)
        if r == A.ROLL_START or r == A.FREE_START:
            r = A._run_roll(W, s, R, r == A.FREE_START)
        SI[A.I_EVENTS] += 1
        Q[Q_EVENTS] += 1.0
        Q[Q_PENDING] = 1.0
        if r == A.ROLL_DONE:
            A._refresh_touched(W)
        elif r == A.S_FLOW:
            return K_RUNAWAY
        else:
            return K_FATAL


@njit(**JIT)
def nodal_pin_log_rates(line, n, prm, meta, loops, field, work_f, law, scratch):
    """Fill slots[:c], lnr[:c] of ``scratch`` with the pinned nodes of a relaxed nodal line and
    their ln(r/ν0) under ``law`` (:func:`kmc_events`); returns c.

    The force on each pin is the one the release rule compares with F_c
    (:func:`dlsim.kernels.node_pass`, row W_FPIN, after the line model's forces): so x = F/F_c
    reaches 1 exactly where the athermal release would take the pin.  An impenetrable obstacle
    (F_c infinite: a point, or a ring point of a disc) is never activated: -inf.
    """
    K.model_forces(line, n, prm, meta, loops, work_f, True)
    K.node_pass(line, n, prm, work_f)
    fpin, pin, ofc = work_f[C.W_FPIN], line[2], field[2]
    barrier, p, q = law
    slots, _, lnr = scratch
    c = 0
    for i in range(n):
        k = pin[i]
        if k < 0:
            continue
        slots[c] = i
        lnr[c] = -np.inf if ofc[k] == np.inf else log_rate(fpin[i] / ofc[k], barrier[k], p, q)
        c += 1
    return c


@njit(**JIT)
def drop_loops_behind(line, n, meta, loops, field):
    """Drop the Orowan loops lying wholly behind the line (every loop node below its lowest
    node), releasing the obstacles they hold; returns how many were dropped.

    The events run the line through the periodic box again and again, and a loop is stored
    against the obstacle's index, not its image: a loop left on one crossing would hide that
    obstacle (and a disc's ring) from the line when it meets the image one box height on, and
    the line would tunnel through it.  A loop behind the whole line no longer touches it (under
    a line tension; the self-stress model loses the far loops' stress, which falls off with the
    distance), so the field is met afresh on every crossing, as a longer box would be.
    """
    y = line[1]
    lx, ly, lpin, loff = loops
    ymin = y[:n].min()
    kept, used, dropped = 0, 0, 0
    for k in range(meta[C.M_NLOOPS]):
        a, b = loff[k], loff[k + 1]
        if ly[a:b].max() < ymin:
            for j in range(a, b):
                if lpin[j] >= 0:      # the hold on the image at the loop node's height
                    field[3][lpin[j]] -= K._occ_unit(field, lpin[j], ly[j])
            dropped += 1
            continue
        for j in range(a, b):
            lx[used], ly[used], lpin[used] = lx[j], ly[j], lpin[j]
            used += 1
        kept += 1
        loff[kept] = used
    meta[C.M_NLOOPS], meta[C.M_NLOOPNODES] = kept, used
    return dropped


@njit(**JIT)
def kmc_nodal_events(line, meta, prm, field, loops, work_f, work_i, max_steps, law, events,
                     scratch):
    """Residence-time events of the nodal line at a fixed stress until ``u`` is used up.

    Each event: the loops left behind the line are dropped (:func:`drop_loops_behind`), the
    forces on the pins of the relaxed line give their rates
    (:func:`nodal_pin_log_rates`), one pin is picked and the clock advanced
    (:func:`_residence_event`), the pin is released as the athermal release does (its node
    freed, the obstacle not re-captured by the arms that left it) and the line relaxes at the
    same stress (:func:`dlsim.kernels.relax_line`: the cascade of athermal releases, captures
    and reconnections it sets off).  ``prm.area_ref`` is set to the area at the start of each
    avalanche, so that one avalanche gliding the flow distance is a runaway (as on arcs).

    Parameters
    ----------
    line, meta, prm, field, loops, work_f, work_i
        As :func:`dlsim.kernels.relax_line` takes them (``prm.tau`` the fixed stress); the line
        relaxed at that stress, or an avalanche due (Q[Q_PENDING]).
    max_steps : int
        Time steps allowed to one avalanche.
    law, events
        As :func:`kmc_events`; ``events``' Q is resumable after K_GROW.
    scratch : (slots, keys, lnr)
        (>= line capacity,) int64, int64, float64.

    Returns
    -------
    int
        K_DONE, K_GROW (grow the line, new work arrays, call again), K_RUNAWAY, K_STUCK or
        K_UNRESOLVED.
    """
    x, y, pin, ign = line
    u, Q, waits = events
    slots, keys, lnr = scratch
    n_ev = u.shape[0] // 2
    while True:
        if Q[Q_PENDING] != 0.0:
            prm.area_ref = Q[Q_AREA_AV]
            st = K.relax_line(line, meta, prm, max_steps, field, loops, work_f, work_i)
            if st == C.CAPACITY:
                return K_GROW
            if st == C.FLOWING:
                return K_RUNAWAY
            if st == C.MAX_STEPS:
                return K_UNRESOLVED
            Q[Q_PENDING] = 0.0
            if Q[Q_EVENTS] == Q[Q_WARM]:
                Q[Q_AREA0], Q[Q_LNT0] = K.line_area(x, y, meta[C.M_N], prm.Lx), Q[Q_LNT]
        if Q[Q_EVENTS] >= n_ev:
            return K_DONE
        n = meta[C.M_N]
        drop_loops_behind(line, n, meta, loops, field)
        c = nodal_pin_log_rates(line, n, prm, meta, loops, field, work_f, law, scratch)
        for j in range(c):
            keys[j] = pin[slots[j]]
        st, pick = _residence_event(lnr, keys, c, u, Q, waits)
        if pick < 0:
            return st
        i = slots[pick]
        o = pin[i]
        K._unhold(o, y[i], n, prm, field, work_f)
        # only the arms that have just left an obstacle skip it: the line crosses the periodic
        # box again and again, and a node still marked with an obstacle it left events ago
        # would tunnel through that obstacle's image one box height on
        ign[:n] = -1
        pin[i], ign[i] = -1, o
        meta[C.M_RELEASES] += 1
        Q[Q_AREA_AV] = K.line_area(x, y, n, prm.Lx)
        Q[Q_EVENTS] += 1.0
        Q[Q_PENDING] = 1.0


@dataclass(frozen=True)
class ThermalModel:
    """Activation parameters in the units the kernels need.

    ``barrier`` is ΔF0/kT (a number for every obstacle, or an (m,) array of each obstacle's),
    ``p`` and ``q`` the exponents, ``ln_nu0`` ln(ν0/Hz), ``ln_rate_scale``
    ln(ρ_m b · b) (ε̇ = ρ_m b v with v in m/s and glide in b), ``kT`` in G b³ (for V*).
    """

    barrier: float | np.ndarray
    p: float
    q: float
    ln_nu0: float
    ln_rate_scale: float
    kT: float
    events: int
    sequences: int


def thermal_model(spec, shear_modulus_GPa: float, burgers_nm: float,
                  activation_energy_eV: np.ndarray | None = None) -> ThermalModel:
    """A :class:`ThermalModel` from a case's ``[thermal]`` spec and its material;
    ``activation_energy_eV`` (m,) gives each obstacle its own ΔF0 (default the spec's)."""
    kT_eV = K_B_EV * spec.temperature_K
    b_m = burgers_nm * 1e-9
    kT_reduced = kT_eV * EV_J / (shear_modulus_GPa * 1e9 * b_m ** 3)
    energy = spec.activation_energy_eV if activation_energy_eV is None else activation_energy_eV
    return ThermalModel(energy / kT_eV, spec.p, spec.q,
                        math.log(spec.attempt_frequency_Hz),
                        math.log(spec.mobile_density_per_m2 * b_m * b_m), kT_reduced,
                        spec.events, spec.sequences)


def _loaded(obstacles: ObstacleField, model: LineModel, protocol: Protocol, s: float):
    """The arc construction loaded monotonically to stress s and stable there; None when the
    line flows below s (s is above the athermal CRSS)."""
    capacity = max(A.MIN_PINS, A.PINS_PER_SPACING * int(math.ceil(obstacles.Lx /
                                                                  obstacles.spacing)))
    while True:
        run = A._Run(obstacles, model, protocol, 0.0, capacity, 0)
        W = run.W
        W[A.W_FS][A.FPR + A.R_SMAX] = s
        if A._init(run, 0.0) == 0:
            return None
        while True:
            st = A.advance(run.tuple())
            if st == A.S_HIST:
                W[A.W_IS][A.I_NHIST] = 0
            elif st == A.S_GROW:
                run.grow()
            elif st == A.S_MAXEV:
                W[A.W_IS][A.I_MAXEV] *= 2
            else:
                break
        if st == A.S_FLOW:
            return None
        if st == A.S_GIVEUP:
            SF, SI = run.W[A.W_FS], run.W[A.W_IS]
            SF[A.F_S] = s
            SI[A.I_EPOCH] += 1
            SF[A.F_DA], SF[A.F_AGAP] = 0.0, 0.0
            return run
        capacity *= 4


def log_velocity(obstacles: ObstacleField, model: LineModel, protocol: Protocol,
                 tm: ThermalModel, tau: float, u: np.ndarray, waits: np.ndarray | None = None
                 ) -> tuple[float, str]:
    """ln(v/(ν0 b)) of the line at stress ``tau`` (G) over the events of ``u``, and the status.

    +inf for a runaway (athermal flow at ``tau``), -inf when no pin can be activated.  The glide
    and the clock count from the end of the warm-up (``WARMUP_FRACTION`` of the events).
    ``waits`` (len(u)/2,), when given, receives each event's ln waiting time (units of 1/ν0).
    """
    s = (tau - model.friction) / (2.0 * model.tension)
    if s <= 0.0:
        return -np.inf, "stuck"
    run = _loaded(obstacles, model, protocol, s)
    if run is None:
        return np.inf, "runaway"
    Q, waits, barrier = _kmc_inputs(obstacles, tm, u, waits)
    while True:
        cap = run.capacity
        slots, keys = np.zeros(cap + 1, np.int64), np.zeros(cap + 1, np.int64)
        lnr = np.zeros(cap + 1)
        st = kmc_events(run.tuple(), s, (barrier, float(tm.p), float(tm.q)), (u, Q, waits),
                        (slots, keys, lnr))
        if st != K_GROW:
            break
        run.grow()
    return _measured(st, A._line_area(run.tuple(), s)[0], Q, obstacles.Lx)


def _kmc_inputs(obstacles: ObstacleField, tm: ThermalModel, u: np.ndarray,
                waits: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The kMC state of a fresh sequence (an avalanche due, the warm-up counted), the waits
    array and every obstacle's ΔF0/kT."""
    Q = np.zeros(N_Q)
    Q[Q_LNT], Q[Q_LNT0], Q[Q_PENDING] = -np.inf, -np.inf, 1.0
    Q[Q_WARM] = int(WARMUP_FRACTION * (u.shape[0] // 2))
    waits = np.full(u.shape[0] // 2, np.nan) if waits is None else waits
    barrier = np.ascontiguousarray(np.broadcast_to(np.asarray(tm.barrier, float),
                                                   (obstacles.n,)))
    return Q, waits, barrier


def _measured(status: int, area: float, Q: np.ndarray, Lx: float) -> tuple[float, str]:
    """ln(v/(ν0 b)) and the status name of a finished sequence: the glide since the warm-up
    (area now less Q[Q_AREA0], over Lx) over the clock since then."""
    if status in (K_RUNAWAY, K_UNRESOLVED):
        return np.inf, KMC_STATUS[status]
    if status == K_STUCK:
        return -np.inf, "stuck"
    if status == K_FATAL:
        return np.nan, "fatal"
    glide = (area - Q[Q_AREA0]) / float(Lx)
    if glide <= 0.0:
        return -np.inf, "stuck"
    return math.log(glide) - (Q[Q_LNT] if Q[Q_LNT0] == -np.inf else
                              Q[Q_LNT] + math.log(-math.expm1(Q[Q_LNT0] - Q[Q_LNT]))), "ok"


class NodalLoading:
    """The nodal line of one field loaded monotonically to any stress, as the CRSS protocol
    loads it (docs/physics.md, "Critical resolved shear stress"): the straight line relaxed at
    every ramp stress τ_f + k Δτ in turn, then at the stress asked for from the last ramp
    configuration below it.  The ramp's pinned configurations are kept, so that every stress
    of a search costs one relaxation past the ramp.
    """

    def __init__(self, obstacles: ObstacleField, model: LineModel, protocol: Protocol):
        self.relaxer = Relaxer(obstacles, model)
        self.protocol = protocol
        self.ramp = [(model.friction, LineState.straight(obstacles.Lx, 0.0, model.node_spacing))]
        self.flows_at = np.inf          # the first ramp stress at which the line flowed

    def _relaxed(self, state: LineState, tau: float) -> LineState | None:
        """A copy of ``state`` relaxed at ``tau``; None unless it is pinned there."""
        line = state.copy()
        name, _ = self.relaxer.relax(line, tau, line.area(), self.protocol)
        return line if name == "pinned" else None

    def at(self, tau: float) -> LineState | None:
        """The line loaded to ``tau`` (G) and pinned there; None when it flows on the way."""
        step = self.protocol.stress_step
        while self.ramp[-1][0] + step < min(tau, self.flows_at):
            t = self.ramp[-1][0] + step
            line = self._relaxed(self.ramp[-1][1], t)
            if line is None:
                self.flows_at = t
                break
            self.ramp.append((t, line))
        if tau >= self.flows_at:
            return None
        below = max(k for k, (t, _) in enumerate(self.ramp) if t < tau)   # ramp[0]: τ_f < τ
        return self._relaxed(self.ramp[below][1], tau)


def log_velocity_nodal(loading: NodalLoading, tm: ThermalModel, tau: float, u: np.ndarray,
                       waits: np.ndarray | None = None) -> tuple[float, str]:
    """:func:`log_velocity` on the nodal line: ln(v/(ν0 b)) at stress ``tau`` (G) over the events
    of ``u`` (:func:`kmc_nodal_events`), and the status ("unresolved" counts as a runaway, as an
    unresolved relaxation counts as not pinned in the athermal search)."""
    relaxer, protocol = loading.relaxer, loading.protocol
    if tau <= relaxer.model.friction:
        return -np.inf, "stuck"
    state = loading.at(tau)
    if state is None:
        return np.inf, "runaway"
    Q, waits, barrier = _kmc_inputs(relaxer.field, tm, u, waits)
    Q[Q_AREA_AV] = state.area()
    prm = relaxer.parameters(tau, Q[Q_AREA_AV], protocol)
    field = relaxer.field_arrays(relaxer.occupancy(state))
    while True:
        cap = state.capacity
        work_f, work_i = np.zeros((C.N_WORK_F, cap)), np.zeros((C.N_WORK_I, cap), np.int64)
        slots, keys, lnr = np.zeros(cap, np.int64), np.zeros(cap, np.int64), np.zeros(cap)
        law = (barrier, float(tm.p), float(tm.q))
        st = kmc_nodal_events(state.line, state.meta, prm, field, state.loop_arrays, work_f,
                              work_i, protocol.max_steps, law, (u, Q, waits), (slots, keys, lnr))
        if st != K_GROW:
            break
        state.grow()
    return _measured(st, state.area(), Q, relaxer.field.Lx)


def log_strain_rate(lnv: float, tm: ThermalModel) -> float:
    """ln(ε̇ s) from ln(v/(ν0 b)): ε̇ = ρ_m b v (Orowan's relation)."""
    return lnv + tm.ln_nu0 + tm.ln_rate_scale


def event_numbers(seed: int, sequence: int, events: int) -> np.ndarray:
    """The (2 events,) uniform numbers in (0, 1] of one event sequence, from the case seed."""
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(0x7E, sequence)))
    return 1.0 - rng.random(2 * events)


@dataclass
class ThermalSearch:
    """Outcome of :func:`find_thermal_stress` (reduced units; ε̇ in 1/s, V* in b³)."""

    stress: np.ndarray            # (sequences,) the stress at the requested strain rate (G)
    activation_volume: np.ndarray  # (sequences,) V* = kT ∂ln ε̇/∂τ (b³)
    athermal: float               # the athermal CRSS of the field (G)
    rows: list = field(default_factory=list)   # (sequence, stress G, ln ε̇, status)


def find_thermal_stress(obstacles: ObstacleField, model: LineModel, protocol: Protocol,
                        tm: ThermalModel, ln_rate_target: float, tau_athermal: float,
                        seed: int, solver: str = "arcs") -> ThermalSearch:
    """The stress at which the simulated strain rate equals the requested one, per sequence.

    ln ε̇ grows with the stress; along one event sequence (the same random numbers at every
    stress) it is a deterministic function, bisected on [friction, athermal CRSS] (the line
    runs away athermally above the CRSS).  V* comes from a central difference of ln ε̇ at
    ±``VSTAR_STEP`` of the stress found.  ``solver`` "arcs" runs the events on the arc
    construction (:func:`log_velocity`), "nodal" on the nodal line (:func:`log_velocity_nodal`,
    NODAL_SEARCH_BISECTIONS); the same seed gives both the same event numbers.
    """
    if solver == "nodal":
        loading = NodalLoading(obstacles, model, protocol)
        velocity = lambda tau, u: log_velocity_nodal(loading, tm, tau, u)  # noqa: E731
        bisections = NODAL_SEARCH_BISECTIONS
    else:
        velocity = lambda tau, u: log_velocity(obstacles, model, protocol, tm, tau, u)  # noqa
        bisections = SEARCH_BISECTIONS
    rows: list = []
    taus, vstar = [], []
    for k in range(tm.sequences):
        u = event_numbers(seed, k, tm.events)

        def lnrate(tau: float) -> float:
            lnv, status = velocity(tau, u)
            out = log_strain_rate(lnv, tm)
            rows.append((k, tau, out, status))
            return out

        lo, hi, flo, fhi = model.friction, tau_athermal, -np.inf, np.inf
        for _ in range(bisections):
            mid = 0.5 * (lo + hi)
            f = lnrate(mid)
            if f < ln_rate_target:
                lo, flo = mid, f
            else:
                hi, fhi = mid, f
        tau = 0.5 * (lo + hi)
        if np.isfinite(flo) and np.isfinite(fhi) and fhi > flo:
            tau = lo + (hi - lo) * (ln_rate_target - flo) / (fhi - flo)
        h = VSTAR_STEP * (tau - model.friction)
        slope = (lnrate(tau + h) - lnrate(tau - h)) / (2.0 * h)
        taus.append(tau)
        vstar.append(tm.kT * slope)
    return ThermalSearch(np.array(taus), np.array(vstar), tau_athermal, rows)
