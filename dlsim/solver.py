"""The driver: relaxation of the line at one stress, and the CRSS protocol of docs/physics.md.

The time stepping itself runs in :func:`dlsim.kernels.relax_line`; this module owns the loop over
stresses.  Protocol (docs/physics.md, "The CRSS protocol"): raise τ in steps from the friction
stress, relax to equilibrium at each, call the line flowing once its mean position has moved more
than a set glide distance past its last pinned configuration, then refine the bracket to the
resolution of ``bisections`` halvings, every trial restarting from the last pinned
configuration.  Trials that only choose where to refine (the ramp, the coarser refinement levels)
are probes that stop after a short glide; both ends of the final bracket are relaxed in full.
All values are reduced (b, G, G b²).
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from . import contract as C
from . import kernels as K
from .fields import ObstacleField
from .line import LineState

#: Remeshing keeps segments within [LMIN_FRACTION, LMAX_FRACTION] × the target node spacing; a
#: ratio of 3 between the bounds lets a removal never force an insertion at the next step.
LMIN_FRACTION = 0.5
LMAX_FRACTION = 1.5
#: Parts of the line of opposite sense closer than this fraction of the node spacing reconnect.
ANNIHILATION_FRACTION = 0.5
#: The bracket is refined in levels of at most this many halvings (docs/physics.md, "The CRSS
#: protocol"): a level of 2^k cells is scanned upwards from its pinned end.
REFINE_LEVEL_HALVINGS = 4
#: Trials of the ramp and of the coarser refinement levels stop once the line has glided this many
#: mean obstacle spacings without pinning (:func:`probe_distance`); only the final bracket's upper
#: end is followed over the whole flow distance.
PROBE_SPACINGS = 2.0
#: Time steps per compiled call when nothing asks for snapshots (keeps Python out of the loop).
DEFAULT_CHUNK = 50_000


#: Line models and their codes in the kernels (``prm.model``).
MODELS = {name: code for code, name in enumerate(C.MODEL_NAMES)}


@dataclass(frozen=True)
class Elasticity:
    """The line's elastic model beyond a constant line tension (reduced units).

    Attributes
    ----------
    model : str
        "constant" (Γ of :class:`LineModel`), "dewit_koehler" (orientation-dependent line energy
        E(θ) = K (1 - ν cos²θ)/(1 - ν), K = ln(R_out/r_core)/(4π); de Wit & Koehler 1959) or
        "self_stress" (the non-singular elastic field of the whole line, its periodic images and
        its Orowan loops; Cai et al. 2006).
    burgers_angle : float
        Angle between the Burgers vector and the initial line direction +x (rad): 0 screw, π/2
        edge.  Each segment's character follows from its direction.
    poisson : float
        Poisson ratio ν.
    core_radius : float
        Inner cut-off r_core of de Wit–Koehler and core radius a of the non-singular field (b).
    outer_radius : float
        Outer cut-off R_out of de Wit–Koehler (b); with "self_stress" it only enters the force a
        pinned node exerts on its obstacle (:func:`dlsim.kernels.model_forces`).
    images : int
        Periods of the line on each side summed segment by segment ("self_stress").
    cutoff : float
        Self-stress cutoff along x (b), 0 for none (far-field correction: the straight average).
    refresh : int
        Time steps between evaluations of the non-local self-stress (the local part is evaluated
        at every step).
    """

    model: str = "constant"
    burgers_angle: float = 0.5 * np.pi
    poisson: float = 1.0 / 3.0
    core_radius: float = 1.0
    outer_radius: float = 1000.0
    images: int = 2
    cutoff: float = 0.0
    refresh: int = 1

    def __post_init__(self):
        if self.model not in MODELS:
            raise ValueError(f"unknown line model {self.model!r}; one of {', '.join(MODELS)}")

    @property
    def character_factor(self) -> float:
        """max over characters of (1 - 2ν + 3ν cos²θ): the stiffest character's E + E''/K(1-ν)."""
        return max(1.0 + self.poisson, 1.0 - 2.0 * self.poisson)

    def stiffness(self, tension: float, node_spacing: float) -> float:
        """Line stiffness Γ_s (G b²) that sets the time step and the point-implicit update.

        constant: Γ.  dewit_koehler: the largest E + E'' over characters, K (1+ν)/(1-ν) for
        ν > 0 (de Wit & Koehler 1959).  self_stress: the same factor with ln(R_out/r_core)
        replaced by 1 + ln(1 + 2h/a), an upper estimate of the local stiffness
        ``(1 - 2ν + 3ν c²) ln(2h/a)/(4π(1-ν))`` of the arc treatment (dlsim.elastic, "Local part")
        that stays positive for h <= a; the non-local part, smoother, is softer per node.
        """
        f = self.character_factor / (4.0 * np.pi * (1.0 - self.poisson))
        if self.model == "constant":
            return tension
        if self.model == "dewit_koehler":
            return f * np.log(self.outer_radius / self.core_radius)
        return f * (1.0 + np.log1p(2.0 * node_spacing / self.core_radius))


@dataclass(frozen=True)
class LineModel:
    """Physics of the line (reduced units).

    Attributes
    ----------
    tension : float
        Line tension Γ (G b²) of the constant model; with the other models it only converts
        critical angles of obstacles to forces.
    node_spacing : float
        Target segment length (b).
    friction : float
        Lattice friction threshold τ_f (G).
    mobility : float
        Mobility M (sets only the time unit of a quasi-static calculation).
    elasticity : Elasticity
        The line model (default: constant line tension).
    """

    tension: float
    node_spacing: float
    friction: float = 0.0
    mobility: float = 1.0
    elasticity: Elasticity = Elasticity()


@dataclass(frozen=True)
class Protocol:
    """Loading protocol of the CRSS search (reduced units).

    Attributes
    ----------
    stress_step : float
        Stress increment of the ramp (G).
    tolerance : float
        Equilibrium when the largest effective stress on a free node is below this (G).
    flow_distance : float
        Mean glide past the last pinned configuration that counts as flow (b).
    bisections : int
        Halvings of the last ramp step that the bracket is refined by (:func:`find_crss`): the
        resolution of as many bisection steps.
    max_steps : int
        Time steps allowed in one relaxation; a relaxation that uses them all is "unresolved" and
        counts as not pinned.
    max_stress : float
        The ramp gives up above this stress (G) and reports no CRSS.
    """

    stress_step: float
    tolerance: float
    flow_distance: float
    bisections: int
    max_steps: int
    max_stress: float


@dataclass(frozen=True)
class Relaxation:
    """One row of the history: a relaxation at one stress (reduced units)."""

    phase: str            # "ramp" or "refine"
    stress: float         # G
    state: str            # "pinned", "flowing", "moving" (a probe: find_crss) or "unresolved"
    mean_glide: float     # mean line position relative to the start (b)
    swept_area: float     # area swept during this relaxation (b²)
    pinned: int           # pinned nodes at the end
    steps: int
    nodes: int


@dataclass
class CrssResult:
    """Outcome of :func:`find_crss` (reduced units).

    ``lo`` is the highest stress at which a pinned equilibrium was found, ``hi`` the lowest at which
    the line flowed; the CRSS lies in [lo, hi] and ``crss`` is the midpoint.  ``line`` is the pinned
    configuration at ``lo``.
    """

    crss: float
    lo: float
    hi: float
    converged: bool
    message: str
    history: list[Relaxation]
    line: LineState
    counters: dict = field(default_factory=dict)


def field_tuple(obstacles: ObstacleField) -> tuple:
    """The kernels' ``field`` group (dlsim.contract) of ``obstacles``, occupancy zero."""
    cstart, citems, ncx, ncy = obstacles.cell_list()
    return (np.ascontiguousarray(obstacles.x, dtype=np.float64),
            np.ascontiguousarray(obstacles.y, dtype=np.float64),
            np.ascontiguousarray(obstacles.fc, dtype=np.float64),
            np.zeros(obstacles.n, np.int64), cstart, citems, int(ncx), int(ncy),
            float(obstacles.Lx), float(obstacles.Ly))


class Relaxer:
    """Relaxes a line at fixed stress in one obstacle field (holds the field's kernel arrays)."""

    def __init__(self, obstacles: ObstacleField, model: LineModel):
        self.field = obstacles
        self.model = model
        self._arrays = field_tuple(obstacles)

    def field_arrays(self, opin: np.ndarray) -> tuple:
        """The kernels' ``field`` group (dlsim.contract) with the occupancy ``opin``."""
        f = self._arrays
        return f[:3] + (opin,) + f[4:]

    def parameters(self, tau: float, area_ref: float, protocol: Protocol) -> np.record:
        """The kernels' parameter record of a relaxation at stress ``tau`` (dlsim.contract)."""
        m, h, e = self.model, self.model.node_spacing, self.model.elasticity
        return C.pack_parameters(dict(
            # the other models' forces replace the constant line tension
            gamma=m.tension if e.model == "constant" else 0.0,
            tau=tau, tau_f=m.friction, mobility=m.mobility,
            l_min=LMIN_FRACTION * h, l_max=LMAX_FRACTION * h,
            tolerance=protocol.tolerance, flow=protocol.flow_distance,
            Lx=self.field.Lx, Ly=self.field.Ly, area_ref=area_ref,
            d_ann=ANNIHILATION_FRACTION * h,
            model=MODELS[e.model], theta=e.burgers_angle, nu=e.poisson, a_core=e.core_radius,
            r_out=e.outer_radius, images=e.images, cutoff=e.cutoff, refresh=e.refresh,
            stiffness=e.stiffness(m.tension, h)))

    def occupancy(self, state: LineState) -> np.ndarray:
        """How many line and loop nodes hold each obstacle, per y-image (derived from the state;
        :func:`dlsim.contract.occupancy`)."""
        used = state.meta[C.M_NLOOPNODES]
        held = np.concatenate([state.pin[: state.n], state.loop_pin[:used]])
        heights = np.concatenate([state.y[: state.n], state.loop_y[:used]])
        return C.occupancy(held, heights, self._arrays[1], self.field.Ly, self.field.n)

    def relax(self, state: LineState, tau: float, area_ref: float, protocol: Protocol,
              chunk: int = DEFAULT_CHUNK,
              on_chunk: Callable[[LineState, float, int], None] | None = None) -> tuple[str, int]:
        """Relax ``state`` in place at stress ``tau``; return (state name, time steps taken)."""
        prm = self.parameters(tau, area_ref, protocol)
        field = self.field_arrays(self.occupancy(state))
        taken = 0
        while True:
            cap = state.capacity
            work_f = np.zeros((C.N_WORK_F, cap))
            work_i = np.zeros((C.N_WORK_I, cap), dtype=np.int64)
            while True:
                before = int(state.meta[C.M_STEPS])
                status = K.relax_line(state.line, state.meta, prm,
                                      min(chunk, protocol.max_steps - taken), field,
                                      state.loop_arrays, work_f, work_i)
                taken += int(state.meta[C.M_STEPS]) - before
                if on_chunk is not None:
                    on_chunk(state, tau, taken)
                if status == C.CAPACITY:
                    state.grow()
                    break
                if status == C.MAX_STEPS and taken < protocol.max_steps:
                    continue
                return C.STATUS_NAMES[status], taken


def find_crss(obstacles: ObstacleField, model: LineModel, protocol: Protocol,
              y0: float = 0.0, snapshot_every: int = 0,
              on_snapshot: Callable[[LineState, float, int], None] | None = None,
              on_relaxation: Callable[[Relaxation], None] | None = None) -> CrssResult:
    """Bracket the CRSS of a line that starts straight along y = ``y0`` and refine the bracket.

    The ramp raises τ by ``protocol.stress_step`` until the line no longer pins.  The bracket
    [lo, hi] is then refined to (hi − lo)/2^bisections, the resolution of a bisection with as
    many steps, in levels (:func:`refinement_levels`): each level cuts the bracket into 2^k equal
    cells and tries their inner ends upwards from lo, each trial relaxing from the last pinned
    configuration, until one does not pin (the new hi) or the cells run out.  A flowing trial
    glides a whole flow distance and costs tens of times a pinned one near the CRSS, so a level
    pays for at most one, where bisection pays for about half its steps; the stresses tried lie
    on the same grid, and loading stays monotonic between pinned trials (closer to quasi-static).

    Only the upper end of the final bracket needs a flow followed over the whole flow distance:
    the ramp and the coarser levels only choose where to refine, so their trials stop once the
    line has glided :func:`probe_distance` without pinning (state "moving").  The final level's
    trials run to the whole distance; if the top of the bracket rests on a probe and every cell
    below it pins, the top itself is relaxed to the whole distance, and where it pins after all,
    the ramp goes on from there.  Pinned ends are always relaxed to equilibrium, so the final
    bracket holds a proven pinned and a proven flowing stress.

    Parameters
    ----------
    obstacles : ObstacleField
    model : LineModel
    protocol : Protocol
    y0 : float
        Start height of the straight line (b).
    snapshot_every : int
        Call ``on_snapshot(state, tau, steps)`` every so many time steps, ``steps`` counted from
        the start of the search (0: at the end of each
        relaxation only).
    on_relaxation : callable
        Receives each history row as it is made (progress reporting).
    """
    relaxer = Relaxer(obstacles, model)
    chunk = snapshot_every if snapshot_every > 0 else DEFAULT_CHUNK
    state = LineState.straight(obstacles.Lx, y0, model.node_spacing)
    start_area = state.area()
    history: list[Relaxation] = []
    probe = dataclasses.replace(protocol, flow_distance=probe_distance(obstacles, protocol))
    probing = probe.flow_distance < protocol.flow_distance
    levels = refinement_levels(protocol.bisections)

    done = 0  # time steps so far: snapshots count them from the start of the search

    def snap(line: LineState, tau: float, steps: int) -> None:
        on_snapshot(line, tau, done + steps)

    def trial(line: LineState, tau: float, phase: str, final: bool) -> str:
        """Relax ``line`` in place at ``tau``: "pinned", "flowing" (followed over the whole flow
        distance: ``final``), "moving" (a probe that glided the probe distance) or
        "unresolved"."""
        nonlocal done
        final = final or not probing
        ref = line.area()
        name, steps = relaxer.relax(line, tau, ref, protocol if final else probe, chunk,
                                    snap if on_snapshot is not None and snapshot_every > 0 else None)
        if name == "flowing" and not final:
            name = "moving"
        if on_snapshot is not None and snapshot_every <= 0:
            snap(line, tau, steps)
        done += steps
        row = Relaxation(phase, tau, name, (line.area() - start_area) / obstacles.Lx,
                         line.area() - ref, int(np.count_nonzero(line.pin[: line.n] >= 0)),
                         steps, line.n)
        history.append(row)
        if on_relaxation is not None:
            on_relaxation(row)
        return name

    pinned, lo, hi, top_name = state.copy(), model.friction, None, ""
    tau = model.friction
    while hi is None:
        while True:                                    # the ramp, from the last pinned stress
            tau += protocol.stress_step
            if tau > protocol.max_stress:
                return CrssResult(np.nan, lo, np.nan, False,
                                  f"no flow up to {protocol.max_stress:.4g} G", history, pinned,
                                  _counters(state))
            top_name = trial(state, tau, "ramp", not levels)
            if top_name != "pinned":
                top = tau
                break
            pinned, lo = state.copy(), tau
        for depth, cells in enumerate(levels):
            final = depth == len(levels) - 1
            base, width = lo, (top - lo) / cells
            for k in range(1, cells):      # the top cell's upper end is known not to pin
                tau = base + k * width
                line = pinned.copy()
                name = trial(line, tau, "refine", final)
                if name != "pinned":
                    top, top_name = tau, name
                    break
                pinned, lo = line, tau
        if top_name != "moving":
            hi = top
            break
        state = pinned.copy()          # every cell below a probe pinned: follow the probe's stress
        top_name = trial(state, top, "refine", True)
        if top_name != "pinned":
            hi = top
        else:
            pinned, lo, tau = state.copy(), top, top
    unresolved = top_name == "unresolved"
    message = "bracketed" if not unresolved else (
        "bracketed; the relaxation at the upper end used every allowed step and was counted as "
        "not pinned")
    return CrssResult(0.5 * (lo + hi), lo, hi, not unresolved, message, history, pinned,
                      _counters(pinned))


def probe_distance(obstacles: ObstacleField, protocol: Protocol) -> float:
    """Glide (b) after which a trial of the ramp or of a coarse refinement level that has not
    pinned is taken as not pinning: PROBE_SPACINGS mean obstacle spacings, at most the flow
    distance (docs/physics.md, "The CRSS protocol")."""
    return min(protocol.flow_distance, PROBE_SPACINGS * obstacles.spacing)


def refinement_levels(halvings: int) -> list[int]:
    """Cells per level of the bracket's refinement: ``halvings`` halvings of the last ramp step,
    dealt out as evenly as possible into levels of at most REFINE_LEVEL_HALVINGS each (6: 8 and 8
    cells; 8: 16 and 16; 5: 8 and 4).  The product is 2^halvings, the resolution of a bisection
    with as many steps."""
    levels = -(-halvings // REFINE_LEVEL_HALVINGS) if halvings > 0 else 0
    out = []
    for k in range(levels):
        bits = halvings // levels + (1 if k < halvings % levels else 0)
        out.append(2 ** bits)
    return out


def _counters(state: LineState) -> dict:
    m = state.meta
    return {"captures": int(m[C.M_CAPTURES]), "releases": int(m[C.M_RELEASES]),
            "reconnections": int(m[C.M_RECONNECT]), "loops": int(m[C.M_NLOOPS])}
