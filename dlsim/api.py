"""Run one case: case → obstacle fields → CRSS searches → result object and files.

:func:`run_case` is what ``dlsim run`` calls; a notebook calls it the same way.  Reduced units stop
here: everything in :class:`RunResult` and in the files is in nm and MPa.

A case may ask for several realizations (independent random fields, seeds derived from the case
seed).  ``crss_MPa`` of the result is then their mean with a Student-t interval; each realization
keeps its own CRSS and bracket (``realizations`` in ``result.json``), and the files that show one
configuration (``line.csv``, ``obstacles.csv``, ``loops.csv``, ``snapshots.npz``) are those of
realization 0, as ``result.json`` says.  ``history.csv`` holds every realization's relaxations.

Names in ``result.json`` and the CSV files follow one rule (docs/outputs.md): quantity, then
statistic, then unit (``crss_MPa``, ``crss_mean_MPa``, ``crss_ci95_lo_MPa``); an interval is two
keys ``..._lo_<unit>``, ``..._hi_<unit>``, never a JSON pair; counts are ``n_<things>``.
"""
from __future__ import annotations

import dataclasses
import math
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Callable

import numpy as np

from . import __version__, analytic, output, statistics
from .bounds import MAX_STRESS_IN_OROWAN
from .case import Case, load_case
from .errors import RescuedOutput
from .fields import (ObstacleField, ParticleTable, enlarged_table, population_field,
                     populations_table, random_field, square_field)
from .line import LineState

if TYPE_CHECKING:
    from .thermal import ThermalSearch
from .loops import (LOOP_STATUS_NAMES, LoopReport, field_tuple, loop_parameters, relax_loops,
                    relax_state_loops)
from .solver import (LMAX_FRACTION, LMIN_FRACTION, CrssResult, Elasticity, LineModel, Protocol,
                     Relaxation, Relaxer, find_crss)

#: Random periodic boxes smaller than this many L_s on a side bias the CRSS upward (Nogaret &
#: Rodney, Phys. Rev. B 74, 2006); 30 is common practice, not a value from that paper.
MIN_BOX_IN_SPACINGS = 30.0
#: The line sent through the field after the CRSS search (:func:`sweep_through`) is driven at the
#: upper bracket stress; it flows there by construction, but a later particle arrangement can be a
#: little stronger than the first and pin it again: the stress then rises by this fraction, up to
#: SWEEP_TRIES times (a choice of dlsim).
SWEEP_MARGIN = 0.05
SWEEP_TRIES = 20
#: Snapshots kept for a movie at the most: beyond this every other frame is dropped and the
#: interval doubled, so a long run cannot fill the memory with frames.
MAX_FRAMES = 2000
#: Status of a run (``result.json`` ``status``).
STATUS_OK = "ok"                      # every realization bracketed its CRSS
STATUS_UNCONVERGED = "unconverged"    # bracketed, but some relaxations used every allowed step
STATUS_NO_CRSS = "no_crss"            # some realization found no CRSS (see ``message``)
STATUS_INTERRUPTED = "interrupted"    # stopped by the user; the finished realizations are kept
#: The estimate the run summary prints as its Orowan reference (``estimates`` key).
OROWAN_ESTIMATE = "orowan_square_MPa"


@dataclass
class Realization:
    """One independent field of a case and its CRSS searches (one per dislocation pass).

    ``passes[k]`` is (field, search, line after crossing the field) of pass k; ``loops[k]``
    says how the Orowan loops of that line were relaxed (:func:`relax_left_loops`).
    """

    index: int
    seed: int
    passes: list[tuple[ObstacleField, CrssResult, LineState]]
    loops: list[LoopReport] = field(default_factory=list)
    #: The thermally activated search (:func:`thermal_search`) when ``[thermal]`` is active.
    thermal: ThermalSearch | None = None

    @property
    def field(self) -> ObstacleField:
        return self.passes[0][0]

    @property
    def search(self) -> CrssResult:
        return self.passes[0][1]

    @property
    def swept(self) -> LineState:
        return self.passes[0][2]


@dataclass
class RunResult:
    """A finished run: the case, its realizations and the summary in file units.

    ``summary`` is exactly what ``result.json`` holds.  ``out_dir`` is where the files went (a
    rescue folder when the requested one could not be written: ``write_error`` then says why).
    """

    case: Case
    realizations: list[Realization]
    summary: dict
    out_dir: Path | None
    write_error: str | None = None
    frames: list = field(default_factory=list, repr=False)

    @property
    def field(self) -> ObstacleField:
        return self.realizations[0].field

    @property
    def search(self) -> CrssResult:
        return self.realizations[0].search

    @property
    def crss_MPa(self) -> float | None:
        return self.summary["crss_MPa"]

    @property
    def status(self) -> str:
        return self.summary["status"]

    @property
    def bracket_MPa(self) -> tuple[float, float]:
        """The CRSS bracket of realization 0 (each realization has its own, see ``summary``)."""
        first = self.summary["realizations"][0]
        return first["crss_lo_MPa"], first["crss_hi_MPa"]


def line_tension(case: Case) -> float:
    """Γ = α G b² in reduced units (G b²)."""
    return case.line.tension_alpha


def obstacle_strength(case: Case) -> float:
    """Critical force of the case's obstacles (G b²); inf for impenetrable (F_c >= 2Γ)."""
    gamma, o = line_tension(case), case.obstacles
    if o.critical_angle_deg is not None:
        fc = analytic.critical_force(gamma, np.radians(o.critical_angle_deg))
        return np.inf if o.critical_angle_deg == 0.0 else float(fc)
    fc = case.units.force(o.critical_force_nN)
    return np.inf if fc >= 2.0 * gamma else float(fc)


def realization_seed(case: Case, realization: int) -> int:
    """The seed a realization's field is drawn from: the case seed for realization 0, else the
    first word of ``SeedSequence(seed, spawn_key=(r,))`` (as for sweeps)."""
    if realization == 0:
        return case.seed
    return int(np.random.SeedSequence(case.seed, spawn_key=(realization,)).generate_state(1)[0])


def build_field(case: Case, realization: int = 0) -> ObstacleField:
    """The case's obstacle field in reduced units; random choices seeded by ``case.seed``.

    A case with ``[[populations]]`` draws realization ``realization`` (seeds derived by
    :func:`dlsim.fields.realization_rngs`); a random ``[obstacles]`` field of realization r is
    drawn from :func:`realization_seed`; a square array is the same in every realization.
    """
    if case.obstacles is None:
        return population_field(case, realization)
    u, o, line = case.units, case.obstacles, case.line
    spacing = u.length(o.spacing_nm)
    fc = obstacle_strength(case)
    if o.kind == "square":
        return square_field(spacing, int(round(line.length_spacings)),
                            int(round(line.height_spacings)), fc)
    rng = np.random.default_rng(realization_seed(case, realization))
    return random_field(u.length(line.length_nm), u.length(line.height_nm), spacing ** -2, fc, rng)


def elasticity(case: Case) -> Elasticity:
    """The case's line model in reduced units (:class:`dlsim.solver.Elasticity`)."""
    e, u = case.elasticity, case.units
    return Elasticity(model=e.model, burgers_angle=float(np.radians(e.character_deg)),
                      poisson=case.material.poisson_ratio,
                      core_radius=u.length(e.core_radius_nm),
                      outer_radius=u.length(e.outer_radius_nm), images=e.images,
                      cutoff=u.length(e.cutoff_nm), refresh=e.refresh)


def model_record(case: Case) -> dict:
    """Which line model ran, with its parameters (result.json ``model``)."""
    e = case.elasticity
    rec = {"line_model": e.model, "character_deg": e.character_deg,
           "poisson_ratio": case.material.poisson_ratio}
    if e.model == "constant":
        rec["line_tension_nN"] = float(case.units.force_nN(line_tension(case)))
    else:
        rec.update(core_radius_nm=e.core_radius_nm, outer_radius_nm=e.outer_radius_nm)
    if e.model == "self_stress":
        rec.update(n_image_periods=e.images, cutoff_nm=e.cutoff_nm,
                   n_refresh_steps=e.refresh, loops_interact=True)
    return rec


def model_and_protocol(case: Case, spacing: float) -> tuple[LineModel, Protocol, float]:
    """Line model, loading protocol and the reference stress 2Γ/(bL) (reduced units)."""
    u, gamma = case.units, line_tension(case)
    tau_ref = analytic.orowan(gamma, spacing)
    friction = u.stress(case.friction.stress_MPa)
    model = LineModel(gamma, u.length(case.line.node_spacing_nm), friction,
                      elasticity=elasticity(case))
    ld = case.loading
    protocol = Protocol(ld.stress_step * tau_ref, ld.tolerance * tau_ref,
                        ld.flow_distance * spacing, ld.bisections, ld.max_steps,
                        friction + MAX_STRESS_IN_OROWAN * tau_ref)
    return model, protocol, tau_ref


def case_inputs(case: Case) -> list[str]:
    """Files the run reads (the case file, particle files): never inside its output folder."""
    files = [] if case.source.startswith("<") else [case.source]
    return files + [p.file for p in case.populations if p.file]


def kernels_need_compiling() -> bool:
    """Whether the stepper's compiled kernels are missing from numba's on-disk cache (a first
    run then spends tens of seconds compiling).  False when it cannot tell."""
    try:
        from . import kernels
        return not Path(kernels.relax_line._cache._cache_file._index_path).is_file()
    except Exception:  # noqa: BLE001 - numba internals: only a courtesy message depends on it
        return False


class FrameRecorder:
    """Line snapshots for a movie, at most :data:`MAX_FRAMES` (thinned evenly when full), each
    with the Orowan loops of that moment relaxed onto their obstacles (:mod:`dlsim.loops`; each
    distinct loop is relaxed once, at the stress of the first frame that shows it)."""

    def __init__(self, units):
        self.units, self.frames, self.stride, self.seen = units, [], 1, 0
        self.relax, self.relaxed = None, {}

    def bind(self, case: Case, obstacles: ObstacleField) -> None:
        """Relax the frames' loops in ``obstacles`` with ``case``'s line (called per search)."""
        field_arrays = field_tuple(obstacles)

        def relax(loop, tau):
            prm = loop_relaxation_parameters(case, obstacles.spacing, tau)
            return relax_loops([loop], field_arrays, prm)[0]
        self.relax, self.relaxed = relax, {}

    def _loops(self, state: LineState, tau: float) -> list:
        u, out = self.units, []
        for loop in state.loops():
            key = loop[0].tobytes() + loop[1].tobytes()
            if key not in self.relaxed:
                kept = self.relax(loop, tau) if self.relax is not None else [loop]
                self.relaxed[key] = [(u.length_nm(x), u.length_nm(y)) for x, y, _ in kept]
            out += self.relaxed[key]
        return out

    def __call__(self, state: LineState, tau: float, steps: int) -> None:
        self.seen += 1
        if (self.seen - 1) % self.stride:
            return
        u = self.units
        x, y, pin = state.nodes()
        self.frames.append((u.length_nm(x), u.length_nm(y), pin >= 0, u.stress_MPa(tau), steps,
                            self._loops(state, tau)))
        if len(self.frames) >= MAX_FRAMES:
            self.frames = self.frames[::2]
            self.stride *= 2


def _progress_printer(u, realization: int, count: int):
    tag = f"[{realization + 1}/{count}] " if count > 1 else ""

    def show(row: Relaxation) -> None:
        print(f"  {tag}{row.phase:6s} τ = {u.stress_MPa(row.stress):9.3f} MPa  {row.state:10s} "
              f"{row.steps:8d} steps  {row.nodes:6d} nodes", file=sys.stderr, flush=True)
    return show


def run_case(case, out_dir=None, progress: bool = False, snapshot_every: int | None = None
             ) -> RunResult:
    """Simulate one case and (unless ``out_dir`` is False) write its run folder.

    The destination is checked before anything is computed (:func:`dlsim.output.check_destination`)
    and written whole at the end (:func:`dlsim.output.write_folder`); if that fails the files go to
    a rescue folder, named in ``RunResult.write_error``.

    Parameters
    ----------
    case : str, path-like, dict or Case
        A case file, its content as a dict, or a loaded case.
    out_dir : str or path-like, optional
        Folder for the result files; default the case's ``[output] folder``.  Pass ``False`` to
        write nothing.
    progress : bool
        Print one line per relaxation to stderr, labelled by realization.
    snapshot_every : int, optional
        Record the line every so many time steps for animations (default: the case's value).

    Returns
    -------
    RunResult
        With ``status`` "ok", "unconverged", "no_crss" or "interrupted" (a KeyboardInterrupt after
        at least one finished realization writes what is finished, then propagates).
    """
    case = load_case(case)
    folder = None
    if out_dir is not False:
        folder = output.check_destination(out_dir if out_dir is not None else case.output.folder,
                                          inputs=case_inputs(case))
    t0 = time.perf_counter()
    every = case.output.snapshot_every if snapshot_every is None else snapshot_every
    frames = FrameRecorder(case.units)
    count = case.statistics.realizations
    done: list[Realization] = []
    interrupted = False
    try:
        for r in range(count):
            show = _progress_printer(case.units, r, count) if progress else None
            done.append(_realization(case, r, show, every if r == 0 else 0,
                                     frames if (r == 0 and every > 0) else None))
    except KeyboardInterrupt:
        if not done:
            raise
        interrupted = True
    summary = summarize(case, done, time.perf_counter() - t0, interrupted)
    result = RunResult(case, done, summary, None, frames=frames.frames if every > 0 else [])
    if folder is not None:
        try:
            result.out_dir = output.write_folder(folder, run_files(result))
        except RescuedOutput as err:
            result.out_dir, result.write_error = err.rescue, str(err)
    if interrupted:
        raise KeyboardInterrupt(f"interrupted after {len(done)} of {count} realizations"
                                + (f"; they were written to {result.out_dir}"
                                   if result.out_dir else ""))
    return result


def _realization(case: Case, r: int, show=None, every: int = 0, snap=None) -> Realization:
    """The CRSS search(es) of realization ``r``: one for an ``[obstacles]`` case, one per pass
    through the particles of a ``[[populations]]`` case."""
    if case.obstacles is not None:
        obstacles = build_field(case, r)
        search = _search(case, obstacles, show, every, snap)
        report = relax_left_loops(case, obstacles, search.line, search.lo)
        real = Realization(r, realization_seed(case, r), [(obstacles, search, search.line)],
                           [report])
    else:
        table = populations_table(case, r)[0]
        passes, reports = _passes(case, table, show, every, snap)
        real = Realization(r, case.seed, passes, reports)
    if case.thermal.active:
        return thermal_realization(case, real)
    return real


def thermal_search(case: Case, obstacles: ObstacleField, athermal: CrssResult, seed: int
                   ) -> ThermalSearch:
    """The stress of the case's strain rate at its temperature on one field: residence-time
    events below the athermal CRSS (:func:`dlsim.thermal.find_thermal_stress`) on the case's
    solver, the arc construction wherever the case qualifies, the nodal line otherwise (finite
    discs, elastic line models, ``[solver] method = "nodal"``)."""
    from .thermal import find_thermal_stress, thermal_model

    model, protocol, _ = model_and_protocol(case, obstacles.spacing)
    m = case.material
    energy = None
    if case.populations:                 # each population its ΔF0, else the [thermal] one
        per_pop = np.array([case.thermal.activation_energy_eV if p.activation_energy_eV is None
                            else p.activation_energy_eV for p in case.populations])
        energy = per_pop[np.asarray(obstacles.population, np.int64)]
    tm = thermal_model(case.thermal, m.shear_modulus_GPa, m.burgers_nm, energy)
    return find_thermal_stress(obstacles, model, protocol, tm,
                               math.log(case.thermal.strain_rate_per_s), athermal.hi, seed,
                               solver=case.solver.solver)


def thermal_realization(case: Case, real: Realization) -> Realization:
    """``real`` with its thermally activated stress: the search's ``crss`` becomes the mean over
    the event sequences and its bracket their range; the athermal search stays in ``thermal``."""
    search = real.search
    if not np.isfinite(search.crss):
        return real
    th = thermal_search(case, real.field, search, real.seed)
    msg = (f"thermally activated at {case.thermal.temperature_K:g} K and "
           f"{case.thermal.strain_rate_per_s:g}/s over {th.stress.size} event sequences "
           f"(athermal: {search.message})")
    done = dataclasses.replace(search, crss=float(th.stress.mean()), lo=float(th.stress.min()),
                               hi=float(th.stress.max()), message=msg)
    return dataclasses.replace(real, passes=[(real.field, done, real.swept)] + real.passes[1:],
                               thermal=th)


def thermal_record(case: Case, runs: list[Realization]) -> dict:
    """result.json keys of a thermally activated run (stresses in MPa, V* in b³)."""
    mpa = lambda tau: float(case.units.stress_MPa(tau))  # noqa: E731
    th = [r.thermal for r in runs if r.thermal is not None]
    if not th:
        return {}
    stress = np.concatenate([t.stress for t in th])
    vstar = np.concatenate([t.activation_volume for t in th])
    iv = statistics.mean_interval([mpa(x) for x in stress])
    t = case.thermal
    return {"temperature_K": t.temperature_K, "strain_rate_per_s": t.strain_rate_per_s,
            "crss_athermal_MPa": float(np.mean([mpa(x.athermal) for x in th])),
            "crss_sequences_MPa": [mpa(x) for x in stress], "crss_sequence_std_MPa": iv.std,
            "crss_sequence_ci95_lo_MPa": iv.lo, "crss_sequence_ci95_hi_MPa": iv.hi,
            "activation_volume_b3": float(vstar.mean()),
            "activation_volume_std_b3": float(vstar.std(ddof=1)) if vstar.size > 1 else None,
            "n_sequences": int(stress.size), "n_events_per_sequence": t.events}


def loop_relaxation_parameters(case: Case, spacing: float, tau: float):
    """The parameters of the loop relaxation (:mod:`dlsim.loops`) at stress ``tau`` (G): the
    case's line tension, friction, segment bounds and equilibrium tolerance."""
    model, protocol, _ = model_and_protocol(case, spacing)
    h = model.node_spacing
    return loop_parameters(model.tension, tau, model.friction, LMIN_FRACTION * h,
                           LMAX_FRACTION * h, protocol.tolerance)


def relax_left_loops(case: Case, obstacles: ObstacleField, state: LineState, tau: float
                     ) -> LoopReport:
    """Relax the Orowan loops ``state`` holds onto their obstacles at stress ``tau`` (G), in
    place (:func:`dlsim.loops.relax_state_loops`): a loop is frozen at the moment it is cut off
    and relaxes under its line tension and the applied stress; one that holds nothing vanishes."""
    return relax_state_loops(state, obstacles,
                             loop_relaxation_parameters(case, obstacles.spacing, tau))


def _search(case: Case, obstacles: ObstacleField, show=None, every: int = 0, snap=None
            ) -> CrssResult:
    """The CRSS search of one field with the case's solver (``case.solver.solver``): the nodal
    line (:func:`dlsim.solver.find_crss`) or the arc construction
    (:func:`dlsim.arcs.find_crss_arcs`, snapshots every ``every`` events)."""
    model, protocol, _ = model_and_protocol(case, obstacles.spacing)
    if isinstance(snap, FrameRecorder):
        snap.bind(case, obstacles)
    if case.solver.solver == "arcs":
        from .arcs import find_crss_arcs

        return find_crss_arcs(obstacles, model, protocol, y0=0.0, snapshot_every=every,
                              on_snapshot=snap, on_relaxation=show)
    return find_crss(obstacles, model, protocol, y0=0.0, snapshot_every=every,
                     on_snapshot=snap, on_relaxation=show)


def sweep_through(obstacles: ObstacleField, model: LineModel, protocol: Protocol,
                  search: CrssResult) -> LineState:
    """The line after it crossed the field once, at (or SWEEP_MARGIN steps above) the upper end
    of the CRSS bracket.

    Starts from the last pinned configuration (which may already have left loops) and relaxes at
    ``search.hi``, one spacing of glide at a time, until every node of the line lies beyond the
    box height Ly: every particle of the box has been met, and the Orowan loops are the ones a
    dislocation leaves behind (the pinned line at the CRSS holds only the first ones).  Loops the
    line left around periodic images beyond Ly are told apart by :func:`loop_particles`.
    """
    state = search.line.copy()
    if not np.isfinite(search.hi):
        return state
    relaxer, tau = Relaxer(obstacles, model), search.hi
    step = dataclasses.replace(protocol, flow_distance=obstacles.spacing)
    budget = SWEEP_TRIES + int(4 * obstacles.Ly / obstacles.spacing)
    for _ in range(budget):
        if state.y[: state.n].min() >= obstacles.Ly:
            break
        if relaxer.relax(state, tau, state.area(), step)[0] != "flowing":
            tau *= 1.0 + SWEEP_MARGIN
    return state


def loop_particles(obstacles: ObstacleField, state: LineState, first_crossing: bool = True
                   ) -> list[np.ndarray]:
    """The particles each Orowan loop of ``state`` holds (row indices of the field's table).

    With ``first_crossing`` only loops whose centre lies inside the box (mean y < Ly) count: the
    line's y is unwrapped, so loops around periodic images met a second time are left out.
    """
    owner = obstacles.owner
    return [np.unique(owner[pin[pin >= 0]]) for _, ly, pin in state.loops()
            if not first_crossing or ly.mean() < obstacles.Ly]


def loops_per_particle(obstacles: ObstacleField, state: LineState) -> np.ndarray:
    """(k,) int64: how many loops of ``state`` hold each particle of the field."""
    counts = np.zeros(obstacles.table.n, np.int64)
    for held in loop_particles(obstacles, state):
        counts[held] += 1
    return counts


def _passes(case: Case, table: ParticleTable, show=None, every: int = 0, snap=None
            ) -> tuple[list[tuple[ObstacleField, CrssResult, LineState]], list[LoopReport]]:
    """The CRSS searches of successive dislocations through one realization, and how each
    pass's loops were relaxed.

    Model of repeated passes (a choice of dlsim, see :func:`dlsim.fields.enlarged_table`): after
    each pass every particle held by Orowan loops becomes an impenetrable disc enlarged by
    ``strength.loop_spacing_nm`` per loop accumulated so far; the next dislocation starts straight
    at y = 0 in that field.  Loop-loop interactions beyond this contact radius are left out.
    """
    spacing = case.units.length(case.strength.loop_spacing_nm)
    loops = np.zeros(table.n, np.int64)
    out, reports = [], []
    for k in range(case.strength.passes):
        current = table if k == 0 else enlarged_table(table, loops, spacing)
        obstacles = population_field(case, table=current)
        search = _search(case, obstacles, show, every if k == 0 else 0, snap if k == 0 else None)
        model, protocol, _ = model_and_protocol(case, obstacles.spacing)
        # point obstacles leave no Orowan loops around discs: the arcs' line at the CRSS suffices
        swept = (search.line if case.solver.solver == "arcs"
                 else sweep_through(obstacles, model, protocol, search))
        # the swept line flowed at (or a little above) the upper end of the bracket
        reports.append(relax_left_loops(case, obstacles, swept, search.hi))
        out.append((obstacles, search, swept))
        loops = loops + loops_per_particle(obstacles, swept)
    return out, reports


# --------------------------------------------------------------------------- the summary


def box_warnings(box_in_spacings) -> list[str]:
    """A warning when a random periodic box is smaller than MIN_BOX_IN_SPACINGS L_s a side."""
    small = min(box_in_spacings)
    if small >= MIN_BOX_IN_SPACINGS:
        return []
    return [f"the box is {small:.3g} L_s on its shorter side, below about "
            f"{MIN_BOX_IN_SPACINGS:g} L_s (common practice): small periodic boxes bias the CRSS "
            "upward (Nogaret & Rodney, Phys. Rev. B 74, 2006)"]


def _search_status(search: CrssResult) -> str:
    if not np.isfinite(search.crss):
        return STATUS_NO_CRSS
    return STATUS_OK if search.converged else STATUS_UNCONVERGED


def _realization_record(case: Case, real: Realization) -> dict:
    """One realization of ``result.json`` ``realizations``."""
    mpa = lambda tau: float(case.units.stress_MPa(tau))  # noqa: E731
    s = real.search
    # populations draw realization r from SeedSequence(seed, spawn_key=(r, population))
    stream = {} if case.obstacles is not None else {"spawn_key": [real.index]}
    return {"realization": real.index, "seed": real.seed, **stream, "status": _search_status(s),
            "message": s.message, "crss_MPa": mpa(s.crss), "crss_lo_MPa": mpa(s.lo),
            "crss_hi_MPa": mpa(s.hi), "crss_per_pass_MPa": [mpa(p[1].crss) for p in real.passes],
            "n_obstacle_points": real.field.n, "n_relaxations": len(s.history),
            "n_time_steps": int(sum(h.steps for h in s.history)), "events": _events(s)}


def _events(search: CrssResult) -> dict:
    """Counters of the CRSS search, named for what they count (``n_loops_cut``: the Orowan loops
    the line had cut off when pinned at the lower end of its bracket)."""
    c = search.counters
    return {"n_captures": c.get("captures", 0), "n_releases": c.get("releases", 0),
            "n_reconnections": c.get("reconnections", 0), "n_loops_cut": c.get("loops", 0)}


def summarize(case: Case, runs: list[Realization], wall: float, interrupted: bool = False
              ) -> dict:
    """``result.json``: status, the CRSS (mean over realizations with its interval), each
    realization's CRSS and bracket, the reference values, warnings and the resolved case."""
    u = case.units
    mpa = lambda tau: float(u.stress_MPa(tau))  # noqa: E731
    first = runs[0]
    L = first.field.spacing
    tau_ref = analytic.orowan(line_tension(case), L)
    records = [_realization_record(case, r) for r in runs]
    statuses = {rec["status"] for rec in records}
    status = (STATUS_INTERRUPTED if interrupted else STATUS_NO_CRSS if STATUS_NO_CRSS in statuses
              else STATUS_UNCONVERGED if STATUS_UNCONVERGED in statuses else STATUS_OK)
    values = [rec["crss_MPa"] for rec in records]
    iv = statistics.mean_interval(values if status != STATUS_NO_CRSS else [])
    crss = iv.mean if status != STATUS_NO_CRSS else None
    Lx, Ly = first.field.Lx, first.field.Ly
    box = [Lx / L, Ly / L]
    random = first.field.kind != "square"
    warnings = list(case.warnings) + (box_warnings(box) if random else [])
    warnings += statistics.interval_warnings(
        iv, relative_target=case.statistics.target_half_width) if status != STATUS_NO_CRSS else []
    summary = {
        "status": status, "message": _message(status, records, len(runs), case),
        "solver": case.solver.solver,
        "crss_MPa": crss,
        "crss_over_orowan": None if crss is None else float(u.stress(crss) / tau_ref),
        "n_realizations": len(runs),
    }
    if len(runs) == 1:
        summary.update(crss_lo_MPa=records[0]["crss_lo_MPa"],
                       crss_hi_MPa=records[0]["crss_hi_MPa"])
    else:
        summary.update(crss_mean_MPa=crss, crss_std_MPa=iv.std,
                       crss_sem_MPa=iv.sem, crss_ci95_lo_MPa=iv.lo,
                       crss_ci95_hi_MPa=iv.hi, crss_ci95_method=iv.method)
    summary.update({
        "realizations": records,
        "orowan_MPa": mpa(tau_ref),
        "friction_MPa": case.friction.stress_MPa,
        "n_obstacle_points": first.field.n,
        "box_length_nm": float(u.length_nm(Lx)), "box_height_nm": float(u.length_nm(Ly)),
        "box_length_spacings": box[0], "box_height_spacings": box[1],
        "spacing_nm": float(u.length_nm(L)),
        "line_tension_nN": float(u.force_nN(line_tension(case))),
        "seed": case.seed,
        "converged": status == STATUS_OK,
        "events": records[0]["events"],
        "loop_relaxation": loop_relaxation_record(case, first),
        "model": model_record(case),
        "files_show_realization": 0,
    })
    summary.update(thermal_record(case, runs))
    est = estimate_case(case)
    if case.obstacles is None:
        summary.update(population_summary(case, runs, iv, status, est))
    summary["estimates"] = est["estimates"]
    summary.update(warnings=warnings, wall_time_s=wall, dlsim_version=__version__,
                   case=case.to_dict())
    return summary


def loop_relaxation_record(case: Case, real: Realization) -> dict:
    """How the Orowan loops of realization 0's first pass were relaxed (result.json
    ``loop_relaxation``): the stress, a count per status (dlsim.loops) and the largest number
    of steps one loop took."""
    if not real.loops:
        return {}
    rep = real.loops[0]
    return {"stress_MPa": float(case.units.stress_MPa(rep.tau)), **rep.counts(),
            "n_steps_max": int(rep.steps.max(initial=0))}


def _message(status: str, records: list[dict], count: int, case: Case) -> str:
    if status == STATUS_INTERRUPTED:
        return (f"interrupted after {len(records)} of {case.statistics.realizations} "
                "realizations; the statistics cover the finished ones")
    bad = [rec for rec in records if rec["status"] != STATUS_OK]
    if not bad:
        return records[0]["message"] if count == 1 else f"all {count} realizations bracketed"
    rec = bad[0]
    prefix = "" if count == 1 else f"realization {rec['realization']}: "
    if rec["status"] == STATUS_NO_CRSS:
        return (prefix + f"no CRSS: {rec['message']} (the line stayed pinned up to τ_f + "
                f"{MAX_STRESS_IN_OROWAN:g} × 2Γ/(bL); check the obstacle strength and the "
                "loading keys)")
    return prefix + rec["message"]


def population_summary(case: Case, runs: list[Realization], iv: statistics.Interval,
                       status: str, est: dict) -> dict:
    """Strength increment, loops and particle statistics of a ``[[populations]]`` case.

    ``delta_sigma_MPa`` = M (τ_c − τ_f), M the Taylor factor; its interval is M times the CRSS
    interval.  ``crss_per_pass_MPa`` is, per pass, the mean over realizations.
    """
    u = case.units
    M = case.strength.taylor_factor
    ok = status != STATUS_NO_CRSS
    passes = [float(np.mean([u.stress_MPa(r.passes[k][1].crss) for r in runs]))
              for k in range(case.strength.passes)] if ok else []
    first = runs[0]
    held = loop_particles(first.field, first.swept)
    counts = loops_per_particle(first.field, first.swept)
    tau_f = case.friction.stress_MPa
    out = {
        "delta_sigma_MPa": analytic.strength_increment(iv.mean - tau_f, M) if ok else None,
        "taylor_factor": M,
        "crss_per_pass_MPa": passes,
        "n_particles": first.field.table.n,
        "loops": {"n_loops_left": len(held), "n_loops_stored": len(first.swept.loops()),
                  "n_particles_looped": int(np.count_nonzero(counts)),
                  "n_loops_per_particle_max": int(counts.max(initial=0))},
        "passes_model": "each looped particle becomes an impenetrable disc enlarged by "
                        f"loop_spacing_nm = {case.strength.loop_spacing_nm:g} nm per loop",
    }
    if len(runs) > 1 and ok:
        out["delta_sigma_ci95_lo_MPa"] = M * (iv.lo - tau_f)
        out["delta_sigma_ci95_hi_MPa"] = M * (iv.hi - tau_f)
    out.update({k: est[k] for k in ("N_A_per_um2", "L_s_nm", "populations", "statistics_source")})
    return out


# --------------------------------------------------------------------------- estimates


def _population_estimate(gamma: float, spacing: float, fc: np.ndarray, rho: np.ndarray
                         ) -> float:
    """One population's own estimate (reduced): mostly bypassed → :func:`analytic.random_bypass`
    on its free span; mostly sheared → Friedel with the mean F_c (bypassed ones at 2Γ)."""
    if np.count_nonzero(np.isinf(fc)) * 2 >= fc.size:
        return analytic.random_bypass(gamma, spacing, float(rho.mean()))
    mean_fc = float(np.minimum(fc, 2.0 * gamma).mean())
    return float(analytic.friedel(gamma, spacing, analytic.critical_angle(gamma, mean_fc)))


def _obstacle_estimates(case: Case) -> dict:
    """Estimates of an ``[obstacles]`` case: the square array's exact CRSS, or for random points
    Foreman–Makin (impenetrable) and Friedel (shearable)."""
    u, gamma, o = case.units, line_tension(case), case.obstacles
    L = u.length(o.spacing_nm)
    fc = obstacle_strength(case)
    phi = float(analytic.critical_angle(gamma, fc)) if np.isfinite(fc) else 0.0
    mpa = lambda tau: float(u.stress_MPa(tau))  # noqa: E731
    est = {"orowan_square": mpa(analytic.orowan(gamma, L))}
    if o.kind == "square":
        est["square_array"] = mpa(analytic.square_array(gamma, L, phi))
    elif phi == 0.0:
        est["foreman_makin"] = mpa(analytic.foreman_makin(gamma, L))
    else:
        est["friedel"] = mpa(analytic.friedel(gamma, L, phi))
    return est


def _in_MPa(estimates: dict) -> dict:
    """Estimates keyed by model as output keys: ``{"foreman_makin_MPa": value}``."""
    return {f"{k}_MPa": v for k, v in estimates.items()}


def estimate_model(key: str) -> str:
    """The model of an estimate key: ``"foreman_makin_MPa"`` → ``"foreman_makin"``."""
    return key.removesuffix("_MPa")


def estimate_case(case) -> dict:
    """Closed-form strength estimates of a case, without simulating.

    Keys of ``estimates`` (and ``delta_sigma_estimates``) are ``<model>_MPa``.  For
    ``[obstacles]``: ``orowan_square`` 2Γ/(bL) and either ``square_array`` (the exact CRSS of
    the square array), ``foreman_makin`` (random impenetrable points, 0.81 · 2Γ/(bL_s), from
    memory) or ``friedel`` (random shearable points).  Every estimate is of the obstacles' own
    contribution: compare it with ``crss_MPa − friction_MPa``.

    For ``[[populations]]``, planar statistics come from the sections of realization 0 as sampled
    for the run (``statistics_source`` says so) and the spacing is the case's expected L_s (so the
    estimates and the summary's Orowan stress agree); the expected values of
    :func:`dlsim.particles.expected_section_stats` are listed beside them per population:
    ``orowan_square`` 2Γ/(b L_s), ``orowan_finite`` 2Γ/(b(L_s − 2⟨ρ⟩)), ``foreman_makin``,
    ``friedel`` (with the mean F_c, when some particles are sheared), and for several populations
    ``superposition_linear`` and ``superposition_pythagorean`` of the per-population estimates
    (each with its own L_s); ``delta_sigma_estimates`` (M × each estimate); ``N_A_per_um2``,
    ``L_s_nm``, ``populations``.
    """
    from . import particles as P

    case = load_case(case)
    if case.obstacles is not None:
        return {"estimates": _in_MPa(_obstacle_estimates(case))}
    u, gamma = case.units, line_tension(case)
    table, sections = populations_table(case, 0)
    area_nm2 = case.line.length_nm * case.line.height_nm
    L_s = u.length(case.spacing_nm)
    mpa = lambda tau: float(u.stress_MPa(tau))  # noqa: E731
    rho_mean = float(table.rho.mean()) if table.n else 0.0
    est = {"orowan_square": mpa(analytic.orowan(gamma, L_s)),
           "orowan_finite": mpa(analytic.orowan_finite(gamma, L_s, rho_mean)),
           "foreman_makin": mpa(analytic.foreman_makin(gamma, L_s))}
    if np.isfinite(table.fc).any():
        mean_fc = float(np.minimum(table.fc, 2.0 * gamma).mean())
        est["friedel"] = mpa(analytic.friedel(gamma, L_s, analytic.critical_angle(gamma, mean_fc)))
    pops, own = {}, []
    for i, (pop, sec) in enumerate(zip(case.populations, sections)):
        sel = table.population == i
        stats = P.section_stats(sec, case.line.length_nm, case.line.height_nm)
        fc, rho = table.fc[sel], table.rho[sel]
        ls_i = u.length(P.mean_square_spacing(pop.areal_density_per_nm2))
        tau_i = mpa(_population_estimate(gamma, ls_i, fc, rho)) if fc.size else 0.0
        own.append(tau_i)
        pops[pop.name] = {
            "n_sections": int(stats["count"]), "N_A_per_um2": stats["areal_density_per_um2"],
            "L_s_nm": stats["mean_square_spacing_nm"], "rho_mean_nm": stats["rho_mean_nm"],
            "rho_std_nm": stats["rho_std_nm"], "rho2_mean_nm2": stats["rho2_mean_nm2"],
            "sheared_fraction": float(np.mean(np.isfinite(fc))) if fc.size else float("nan"),
            "bypassed_fraction": float(np.mean(np.isinf(fc))) if fc.size else float("nan"),
            "estimate_MPa": tau_i,
            "expected": None if pop.arrangement == "file" else P.expected_section_stats(
                pop.size_distribution(), pop.volume_fraction, pop.number_density_per_nm3)}
    if len(own) > 1:
        est["superposition_linear"] = analytic.superpose(own, 1.0)
        est["superposition_pythagorean"] = analytic.superpose(own, 2.0)
    M = case.strength.taylor_factor
    return {"estimates": _in_MPa(est),
            "delta_sigma_estimates": _in_MPa({k: analytic.strength_increment(v, M)
                                              for k, v in est.items()}),
            "N_A_per_um2": float(table.n / area_nm2 * 1e6), "L_s_nm": float(u.length_nm(L_s)),
            "populations": pops,
            "statistics_source": "sections of realization 0 (sampled, as in the run); spacing: "
                                 "the case's expected L_s"}


# --------------------------------------------------------------------------- files


def run_files(result: RunResult) -> dict[str, bytes]:
    """The files of a run folder (name → bytes), formats in docs/outputs.md.

    obstacles.csv, line.csv, loops.csv and snapshots.npz show realization 0 (obstacles.csv has
    one row per particle: a disc's ring points are not listed; loops.csv lists the nodes of the
    Orowan loops left after the line crossed the field, with the particle each loop holds, the
    first when it holds several); history.csv has every realization's relaxations.
    """
    case, first = result.case, result.realizations[0]
    u = case.units
    gamma = line_tension(case)
    obstacles, search = first.field, first.search
    t = obstacles.table
    columns = {"x_nm": u.length_nm(t.x), "y_nm": u.length_nm(t.y), "radius_nm": u.length_nm(t.rho),
               "critical_angle_deg": np.degrees(analytic.critical_angle(gamma, t.fc))}
    if case.obstacles is None:
        columns["population"] = np.asarray(obstacles.population_names, dtype=object)[t.population]
    files = {output.OBSTACLES: output.columns_bytes(columns)}
    x, y, pin = search.line.nodes()
    files[output.LINE] = output.columns_bytes({
        "x_nm": u.length_nm(x), "y_nm": u.length_nm(y), "pinned": (pin >= 0).astype(int)})
    cell = obstacles.Lx * obstacles.Ly * obstacles.Ly
    b2 = case.material.burgers_nm ** 2
    rows = [(real.index, k, r.phase, float(u.stress_MPa(r.stress)), r.state,
             float(u.length_nm(r.mean_glide)), float(r.swept_area * b2), r.pinned,
             r.swept_area / cell, r.steps, r.nodes)
            for real in result.realizations for k, r in enumerate(real.search.history)]
    columns = output.HISTORY_COLUMNS
    if case.thermal.active:
        columns, rows = thermal_history(case, result.realizations, rows)
    files[output.HISTORY] = output.table_bytes(columns, rows)
    loops = first.swept.loops()
    if loops:
        held = loop_particles(obstacles, first.swept, first_crossing=False)
        rep = first.loops[0] if first.loops else None
        status = ([LOOP_STATUS_NAMES[c] for c in rep.status[rep.kept]] if rep is not None
                  and rep.kept.sum() == len(loops) else ["frozen"] * len(loops))
        files[output.LOOPS] = output.table_bytes(output.LOOPS_COLUMNS, (
            (k, int(held[k][0]) if held[k].size else -1, status[k], float(u.length_nm(xx)),
             float(u.length_nm(yy)))
            for k, (lx, ly, _) in enumerate(loops) for xx, yy in zip(lx, ly)))
    if result.frames:
        files[output.SNAPSHOTS] = output.snapshots_bytes(result.frames)
    files[output.RESULT] = output.json_bytes(result.summary)
    return files


def thermal_history(case: Case, runs: list[Realization], rows: list) -> tuple[tuple, list]:
    """history.csv of a thermal run: the athermal rows, then one row per strain-rate estimate
    (phase "thermal", state its kMC status) with ``velocity_m_per_s``, ``strain_rate_per_s``
    and the event ``sequence`` in three more columns."""
    columns = output.HISTORY_COLUMNS + output.THERMAL_HISTORY_COLUMNS
    scale = 1.0 / (case.thermal.mobile_density_per_m2 * case.material.burgers_nm * 1e-9)
    out = [row + ("", "", "") for row in rows]
    for real in runs:
        if real.thermal is None:
            continue
        for k, (seq, tau, lnrate, status) in enumerate(real.thermal.rows):
            rate = math.exp(lnrate) if lnrate < 700.0 else math.inf
            out.append((real.index, k, "thermal", float(case.units.stress_MPa(tau)), status,
                        "", "", "", "", "", "", rate * scale, rate, seq))
    return columns, out


def write_run(folder, result: RunResult) -> Path:
    """Write ``result`` as the run folder ``folder`` (checked, then swapped in whole)."""
    folder = output.check_destination(folder, inputs=case_inputs(result.case))
    return output.write_folder(folder, run_files(result))


# --------------------------------------------------------------------------- the terminal


def _describe_model(m: dict) -> str:
    """One line naming the line model of result.json ``model``."""
    if m["line_model"] == "constant":
        return f"constant line tension {m['line_tension_nN']:.3g} nN"
    text = (f"{m['line_model'].replace('_', '-')}, character {m['character_deg']:g}° "
            f"(0 screw, 90 edge), ν = {m['poisson_ratio']:g}, core {m['core_radius_nm']:g} nm")
    if m["line_model"] == "dewit_koehler":
        return text + f", outer cut-off {m['outer_radius_nm']:g} nm"
    return text + f", {m['n_image_periods']} image period(s) each side" + (
        f", cutoff {m['cutoff_nm']:g} nm" if m["cutoff_nm"] > 0 else "")


def estimate_name(key: str) -> str:
    """The readable name of an estimate key (``"foreman_makin_MPa"`` → ``"Foreman–Makin"``),
    the same in the estimates table and the run summary."""
    model = estimate_model(key)
    return analytic.ESTIMATES.get(model, (model.replace("_", " "), ""))[0]


def format_estimates(estimates: dict) -> str:
    """The estimates of :func:`estimate_case` as a table: name, value, Δσ, what it assumes."""
    est, dsig = estimates["estimates"], estimates.get("delta_sigma_estimates", {})
    rows = [(estimate_name(k), f"{v:9.2f}", f"{dsig[k]:9.1f}" if k in dsig else " " * 9,
             analytic.ESTIMATES.get(estimate_model(k), ("", ""))[1]) for k, v in est.items()]
    width = max(len(r[0]) for r in rows)
    head = f"{'estimate':{width}s}  τ_c (MPa)  Δσ (MPa)  assumes"
    lines = [head, "-" * len(head)] + [f"{a:{width}s}  {b}  {c}  {d}" for a, b, c, d in rows]
    lines.append("τ_c: the obstacles' contribution (without friction); Δσ = M τ_c")
    if "L_s_nm" in estimates:
        lines.append(f"L_s = {estimates['L_s_nm']:.2f} nm (expected), N_A = "
                     f"{estimates['N_A_per_um2']:.4g} per µm² (realization 0)")
    for name, pop in estimates.get("populations", {}).items():
        lines.append(_describe_population(name, pop))
    return "\n".join(lines)


def _describe_population(name: str, pop: dict) -> str:
    """One line per population: its sections in realization 0 and where its sizes came from."""
    text = (f"{name}: {pop['n_sections']} sections (realization 0), L_s {pop['L_s_nm']:.3g} nm, "
            f"⟨ρ⟩ {pop['rho_mean_nm']:.3g} nm, {100 * pop['sheared_fraction']:.0f}% sheared")
    measured = (pop.get("expected") or {}).get("measured")
    if measured:
        text += (f"; sizes: {measured['n_sizes']} measured {measured['sizes_are']} "
                 f"({measured['size_kind']}s) from {measured['file']}")
        unfolding = measured.get("unfolding")
        if unfolding:
            text += (f", unfolded by {measured['method']} in {unfolding['n_classes']} classes"
                     + (f", {unfolding['n_negative_classes']} negative classes fitted non-negative"
                        if unfolding["n_negative_classes"] else ""))
    return text


def _fmt(value, spec: str = ".2f") -> str:
    return "—" if value is None else format(value, spec)


def format_summary(result: RunResult) -> str:
    """A few readable lines for the terminal: the CRSS (mean and interval over realizations,
    then each realization's value and bracket), the field, the model, the status.

    Every figure says what it counts, under the name ``result.json`` and the estimates table
    give it: particles and obstacle points (a disc is a ring of points), the Orowan estimate
    (``estimates.orowan_square_MPa``, "Orowan, square array"), and each loop count.
    """
    s, case = result.summary, result.case
    n = s["n_realizations"]
    kind = "particles" if case.obstacles is None else case.obstacles.kind
    what = (f"{s['n_particles']} particles, {s['n_obstacle_points']} obstacle points (particle "
            "sections and the ring points of impenetrable discs)" if "n_particles" in s
            else f"{s['n_obstacle_points']} obstacle points")
    field_line = (f"field     {kind}: {what}; box {s['box_length_nm']:.0f} x "
                  f"{s['box_height_nm']:.0f} nm = {s['box_length_spacings']:.1f} x "
                  f"{s['box_height_spacings']:.1f} {'L' if kind == 'square' else 'L_s'} "
                  f"(spacing {s['spacing_nm']:.1f} nm)")
    lines = [f"case      {case.source}" + (f"  ({case.title})" if case.title else ""), field_line]
    if n == 1:
        lines.append(f"CRSS      {_fmt(s['crss_MPa'])} MPa, bracket [{_fmt(s['crss_lo_MPa'])}, "
                     f"{_fmt(s['crss_hi_MPa'])}] MPa")
    else:
        lines.append(f"CRSS      {_fmt(s['crss_MPa'])} MPa, mean of {n} realizations, 95% "
                     f"interval [{_fmt(s.get('crss_ci95_lo_MPa'))}, "
                     f"{_fmt(s.get('crss_ci95_hi_MPa'))}] MPa (Student t)")
        for rec in s["realizations"]:
            seed = (f"seed {rec['seed']}" if "spawn_key" not in rec else
                    f"seed {rec['seed']}, stream {rec['spawn_key'][0]}")
            lines.append(f"  realization {rec['realization']} ({seed}): "
                         f"{_fmt(rec['crss_MPa'])} MPa, bracket [{_fmt(rec['crss_lo_MPa'])}, "
                         f"{_fmt(rec['crss_hi_MPa'])}] MPa, {rec['status']}")
    orowan = s["estimates"].get(OROWAN_ESTIMATE, s["orowan_MPa"])
    lines.append(f"reference {estimate_name(OROWAN_ESTIMATE)} 2Γ/(bL) = {orowan:.2f} MPa "
                 f"(estimate {estimate_model(OROWAN_ESTIMATE)}); CRSS / Orowan = "
                 f"{_fmt(s['crss_over_orowan'], '.3f')}")
    if "delta_sigma_MPa" in s:
        lo, hi = s.get("delta_sigma_ci95_lo_MPa"), s.get("delta_sigma_ci95_hi_MPa")
        lines.append(f"strength  Δσ = M (τ_c − τ_f) = {_fmt(s['delta_sigma_MPa'], '.1f')} MPa "
                     f"(M = {s['taylor_factor']:g})"
                     + (f", 95% [{lo:.1f}, {hi:.1f}] MPa" if lo is not None else "")
                     + f"; per pass {', '.join(f'{v:.2f}' for v in s['crss_per_pass_MPa'])} MPa")
        lines.append(format_loops(s))
    lines.append(f"model     {_describe_model(s['model'])}")
    rel = sum(r["n_relaxations"] for r in s["realizations"])
    steps = sum(r["n_time_steps"] for r in s["realizations"])
    lines.append(f"status    {s['status']}: {s['message']}; {rel} relaxations, {steps} time "
                 f"steps, {s['wall_time_s']:.1f} s")
    lines += [f"warning   {w}" for w in s["warnings"]]
    if result.out_dir is not None:
        lines.append(f"written   {result.out_dir}")
    return "\n".join(lines)


def format_loops(s: dict) -> str:
    """The loop counts of a population run (realization 0), each named for what it counts."""
    loops = s["loops"]
    return (f"loops     realization 0: {s['events']['n_loops_cut']} cut off by the line pinned "
            f"at the CRSS; {loops['n_loops_left']} left after it crossed the field once, "
            f"{loops['n_loops_stored']} stored in loops.csv; {loops['n_particles_looped']} "
            f"particles enclosed by loops (at most {loops['n_loops_per_particle_max']} on one)")
