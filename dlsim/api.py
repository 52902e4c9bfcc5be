"""Run one case: case → obstacle field → CRSS search → result object and files.

:func:`run_case` is what ``dlsim run`` calls; a notebook calls it the same way.  Reduced units stop
here: everything in :class:`RunResult` and in the files is in nm and MPa.
"""
from __future__ import annotations

import dataclasses
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import __version__, analytic, output
from .case import Case, load_case
from .fields import (ObstacleField, ParticleTable, enlarged_table, population_field,
                     populations_table, random_field, square_field)
from .line import LineState
from .solver import CrssResult, Elasticity, LineModel, Protocol, Relaxation, Relaxer, find_crss

#: The ramp gives up (no CRSS) above τ_f + this many Orowan stresses 2Γ/(bL).
MAX_STRESS_IN_OROWAN = 5.0
#: Random periodic boxes smaller than this many L_s on a side bias the CRSS upward (Nogaret &
#: Rodney, Phys. Rev. B 74, 2006); 30 is common practice, not a value from that paper.
MIN_BOX_IN_SPACINGS = 30.0
#: The line sent through the field after the CRSS search (:func:`sweep_through`) is driven at the
#: upper bracket stress; it flows there by construction, but a later particle arrangement can be a
#: little stronger than the first and pin it again: the stress then rises by this fraction, up to
#: SWEEP_TRIES times (a choice of dlsim).
SWEEP_MARGIN = 0.05
SWEEP_TRIES = 20
#: Two-sided confidence level of ``crss_MPa_ci95`` (Student t).
CONFIDENCE = 0.95


@dataclass
class RunResult:
    """A finished run: the case, the field, the raw CRSS search and the summary in file units.

    ``summary`` is exactly what ``result.json`` holds.
    """

    case: Case
    field: ObstacleField
    search: CrssResult
    summary: dict
    out_dir: Path | None

    @property
    def crss_MPa(self) -> float:
        return self.summary["crss_MPa"]

    @property
    def bracket_MPa(self) -> tuple[float, float]:
        lo, hi = self.summary["crss_bracket_MPa"]
        return lo, hi


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


def build_field(case: Case, realization: int = 0) -> ObstacleField:
    """The case's obstacle field in reduced units; random choices seeded by ``case.seed``.

    A case with ``[[populations]]`` draws realization ``realization`` (seeds derived by
    :func:`dlsim.fields.realization_rngs`); an ``[obstacles]`` case has one field.
    """
    if case.obstacles is None:
        return population_field(case, realization)
    u, o, line = case.units, case.obstacles, case.line
    spacing = u.length(o.spacing_nm)
    fc = obstacle_strength(case)
    if o.kind == "square":
        return square_field(spacing, int(round(line.length_spacings)),
                            int(round(line.height_spacings)), fc)
    rng = np.random.default_rng(case.seed)
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
        rec.update(images=e.images, cutoff_nm=e.cutoff_nm, refresh=e.refresh,
                   loops_interact=True)
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


def _progress_printer(u):
    def show(row: Relaxation) -> None:
        print(f"  {row.phase:6s} τ = {u.stress_MPa(row.stress):9.3f} MPa  {row.state:10s} "
              f"{row.steps:8d} steps  {row.nodes:6d} nodes", file=sys.stderr, flush=True)
    return show


def run_case(case, out_dir=None, progress: bool = False, snapshot_every: int | None = None
             ) -> RunResult:
    """Simulate one case and (when ``out_dir`` or the case's output folder is used) write files.

    Parameters
    ----------
    case : str, path-like, dict or Case
        A case file, its content as a dict, or a loaded case.
    out_dir : str or path-like, optional
        Folder for the result files; default the case's ``[output] folder``.  Pass ``False`` to
        write nothing.
    progress : bool
        Print one line per relaxation to stderr.
    snapshot_every : int, optional
        Record the line every so many time steps for animations (default: the case's value).

    Returns
    -------
    RunResult
        For a case with ``[[populations]]``: the field and search of realization 0, first pass,
        and a summary with the statistics over realizations and passes
        (:func:`population_summary`).
    """
    case = load_case(case)
    t0 = time.perf_counter()
    u = case.units
    every = case.output.snapshot_every if snapshot_every is None else snapshot_every
    frames = []

    def snap(state, tau, steps):
        x, y, pin = state.nodes()
        frames.append((u.length_nm(x), u.length_nm(y), pin >= 0, u.stress_MPa(tau), steps))

    show = _progress_printer(u) if progress else None
    if case.obstacles is None:
        runs = [_passes(case, populations_table(case, r)[0], show,
                        every if r == 0 else 0, snap if (r == 0 and every > 0) else None)
                for r in range(case.statistics.realizations)]
        obstacles, search, swept = runs[0][0]
        tau_ref = model_and_protocol(case, obstacles.spacing)[2]
        summary = _summary(case, obstacles, search, tau_ref, 0.0)
        summary.update(population_summary(case, runs))
    else:
        obstacles = build_field(case)
        search = _search(case, obstacles, show, every, snap if every > 0 else None)
        tau_ref = model_and_protocol(case, obstacles.spacing)[2]
        summary = _summary(case, obstacles, search, tau_ref, 0.0)
        swept = search.line
    summary["wall_time_s"] = time.perf_counter() - t0
    folder = None
    if out_dir is not False:
        folder = Path(out_dir if out_dir is not None else case.output.folder)
        write_run(folder, case, obstacles, search, summary, frames if every > 0 else None,
                  swept)
    return RunResult(case, obstacles, search, summary, folder)


def _search(case: Case, obstacles: ObstacleField, show=None, every: int = 0, snap=None
            ) -> CrssResult:
    model, protocol, _ = model_and_protocol(case, obstacles.spacing)
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
            ) -> list[tuple[ObstacleField, CrssResult, LineState]]:
    """The CRSS searches of successive dislocations through one realization.

    Model of repeated passes (a choice of dlsim, see :func:`dlsim.fields.enlarged_table`): after
    each pass every particle held by Orowan loops becomes an impenetrable disc enlarged by
    ``strength.loop_spacing_nm`` per loop accumulated so far; the next dislocation starts straight
    at y = 0 in that field.  Loop-loop interactions beyond this contact radius are left out.
    """
    spacing = case.units.length(case.strength.loop_spacing_nm)
    loops = np.zeros(table.n, np.int64)
    out = []
    for k in range(case.strength.passes):
        current = table if k == 0 else enlarged_table(table, loops, spacing)
        obstacles = population_field(case, table=current)
        search = _search(case, obstacles, show, every if k == 0 else 0, snap if k == 0 else None)
        model, protocol, _ = model_and_protocol(case, obstacles.spacing)
        swept = sweep_through(obstacles, model, protocol, search)
        out.append((obstacles, search, swept))
        loops = loops + loops_per_particle(obstacles, swept)
    return out


def _t_interval(values: np.ndarray) -> list[float]:
    """Two-sided Student-t interval of the mean (scipy.stats.t), ddof = 1."""
    from scipy import stats

    n = values.size
    half = stats.t.ppf(0.5 + 0.5 * CONFIDENCE, n - 1) * values.std(ddof=1) / np.sqrt(n)
    return [float(values.mean() - half), float(values.mean() + half)]


def box_warnings(box_in_spacings) -> list[str]:
    """A warning when a random periodic box is smaller than MIN_BOX_IN_SPACINGS L_s a side."""
    small = min(box_in_spacings)
    if small >= MIN_BOX_IN_SPACINGS:
        return []
    return [f"the box is {small:.3g} L_s on its shorter side, below about "
            f"{MIN_BOX_IN_SPACINGS:g} L_s (common practice): small periodic boxes bias the CRSS "
            "upward (Nogaret & Rodney, Phys. Rev. B 74, 2006)"]


def population_summary(case: Case, runs: list[list[tuple[ObstacleField, CrssResult]]]) -> dict:
    """Statistics over realizations (first pass) and passes, loops, strength, estimates.

    ``crss_MPa`` is the mean over realizations; ``crss_MPa_ci95`` the Student-t 95% interval of
    the mean, or for one realization the bracket of its CRSS search (no spread to estimate).
    ``crss_MPa_passes`` is, per pass, the mean over realizations.  ``delta_sigma_MPa`` =
    M (τ_c − τ_f), M the Taylor factor (analytic.TAYLOR_FCC by default).
    """
    u = case.units
    mpa = lambda tau: float(u.stress_MPa(tau))  # noqa: E731
    first = np.array([mpa(run[0][1].crss) for run in runs])
    passes = [float(np.mean([mpa(run[k][1].crss) for run in runs]))
              for k in range(case.strength.passes)]
    mean = float(first.mean())
    if first.size > 1:
        std, ci, note = float(first.std(ddof=1)), _t_interval(first), "Student t, 95%"
    else:
        lo, hi = runs[0][0][1].lo, runs[0][0][1].hi
        std, ci, note = float("nan"), [mpa(lo), mpa(hi)], "one realization: its CRSS bracket"
    obstacles, search, swept = runs[0][0]
    held = loop_particles(obstacles, swept)
    counts = loops_per_particle(obstacles, swept)
    box = [obstacles.Lx / obstacles.spacing, obstacles.Ly / obstacles.spacing]
    est = estimate_case(case)
    return {
        "crss_MPa": mean, "crss_MPa_realizations": first.tolist(), "crss_MPa_mean": mean,
        "crss_MPa_std": std, "crss_MPa_ci95": ci, "crss_MPa_ci95_method": note,
        "crss_MPa_passes": passes,
        "crss_over_orowan": float(u.stress(mean) / analytic.orowan(line_tension(case),
                                                                   obstacles.spacing)),
        "converged": bool(all(s.converged for run in runs for _, s, _ in run)),
        "delta_sigma_MPa": analytic.strength_increment(mean - case.friction.stress_MPa,
                                                       case.strength.taylor_factor),
        "taylor_factor": case.strength.taylor_factor,
        "n_particles": obstacles.table.n,
        "loops": {"count": len(held), "particles_looped": int(np.count_nonzero(counts)),
                  "max_per_particle": int(counts.max(initial=0))},
        "passes_model": "each looped particle becomes an impenetrable disc enlarged by "
                        f"loop_spacing_nm = {case.strength.loop_spacing_nm:g} nm per loop",
        "box_in_spacings": box, "warnings": box_warnings(box),
        **{k: est[k] for k in ("estimates_MPa", "N_A_per_um2", "L_s_nm", "populations",
                               "statistics_source")},
    }


def _summary(case: Case, obstacles: ObstacleField, search: CrssResult, tau_ref: float,
             wall: float) -> dict:
    u = case.units
    mpa = lambda tau: float(u.stress_MPa(tau))  # noqa: E731
    Lx, Ly, L = obstacles.Lx, obstacles.Ly, obstacles.spacing
    return {
        "crss_MPa": mpa(search.crss),
        "crss_bracket_MPa": [mpa(search.lo), mpa(search.hi)],
        "orowan_MPa": mpa(tau_ref),
        "crss_over_orowan": float(search.crss / tau_ref),
        "friction_MPa": case.friction.stress_MPa,
        "n_obstacles": obstacles.n,
        "box_nm": [float(u.length_nm(Lx)), float(u.length_nm(Ly))],
        "box_in_spacings": [Lx / L, Ly / L],
        "spacing_nm": float(u.length_nm(L)),
        "line_tension_nN": float(u.force_nN(line_tension(case))),
        "seed": case.seed,
        "converged": bool(search.converged),
        "message": search.message,
        "relaxations": len(search.history),
        "time_steps": int(sum(r.steps for r in search.history)),
        "events": search.counters,
        "model": model_record(case),
        "wall_time_s": wall,
        "dlsim_version": __version__,
        "case": case.to_dict(),
    }


def _population_estimate(gamma: float, spacing: float, fc: np.ndarray, rho: np.ndarray
                         ) -> float:
    """One population's own estimate (reduced): mostly bypassed → :func:`analytic.random_bypass`
    on its free span; mostly sheared → Friedel with the mean F_c (bypassed ones at 2Γ)."""
    if np.count_nonzero(np.isinf(fc)) * 2 >= fc.size:
        return analytic.random_bypass(gamma, spacing, float(rho.mean()))
    mean_fc = float(np.minimum(fc, 2.0 * gamma).mean())
    return float(analytic.friedel(gamma, spacing, analytic.critical_angle(gamma, mean_fc)))


def estimate_case(case) -> dict:
    """Closed-form strength estimates of a ``[[populations]]`` case, without simulating.

    Planar statistics come from the sections of realization 0 as sampled for the run (the same
    field ``dlsim run`` builds first; ``statistics_source`` says so); the expected values of
    :func:`dlsim.particles.expected_section_stats` are listed beside them per population.

    Returns
    -------
    dict
        ``estimates_MPa``: ``orowan_square`` 2Γ/(b L_s), ``orowan_finite`` 2Γ/(b(L_s − 2⟨ρ⟩)),
        ``foreman_makin`` 0.81·2Γ/(b L_s) (from memory), ``friedel`` (with the mean F_c, when some
        particles are sheared), and for several populations ``superposition_linear`` and
        ``superposition_pythagorean`` of the per-population estimates (each with its own L_s);
        ``delta_sigma_MPa`` (M × each estimate); ``N_A_per_um2``, ``L_s_nm``, ``populations``.
    """
    from . import particles as P

    case = load_case(case)
    u, gamma = case.units, line_tension(case)
    table, sections = populations_table(case, 0)
    area_nm2 = case.line.length_nm * case.line.height_nm
    L_s = u.length(case.spacing_nm) if table.n == 0 else (
        u.length(P.mean_square_spacing(table.n / area_nm2)))
    mpa = lambda tau: float(u.stress_MPa(tau))  # noqa: E731
    est = {"orowan_square": mpa(analytic.orowan(gamma, L_s)),
           "orowan_finite": mpa(analytic.orowan_finite(gamma, L_s, float(table.rho.mean()))),
           "foreman_makin": mpa(analytic.foreman_makin(gamma, L_s))}
    if np.isfinite(table.fc).any():
        mean_fc = float(np.minimum(table.fc, 2.0 * gamma).mean())
        est["friedel"] = mpa(analytic.friedel(gamma, L_s, analytic.critical_angle(gamma, mean_fc)))
    pops, own = {}, []
    for i, (pop, sec) in enumerate(zip(case.populations, sections)):
        sel = table.population == i
        stats = P.section_stats(sec, case.line.length_nm, case.line.height_nm)
        fc, rho = table.fc[sel], table.rho[sel]
        ls_i = u.length(stats["mean_square_spacing_nm"])
        tau_i = mpa(_population_estimate(gamma, ls_i, fc, rho)) if fc.size else 0.0
        own.append(tau_i)
        pops[pop.name] = {
            "count": int(stats["count"]), "N_A_per_um2": stats["areal_density_per_um2"],
            "L_s_nm": stats["mean_square_spacing_nm"], "rho_mean_nm": stats["rho_mean_nm"],
            "rho_std_nm": stats["rho_std_nm"], "rho2_mean_nm2": stats["rho2_mean_nm2"],
            "fraction_sheared": float(np.mean(np.isfinite(fc))) if fc.size else float("nan"),
            "fraction_bypassed": float(np.mean(np.isinf(fc))) if fc.size else float("nan"),
            "estimate_MPa": tau_i,
            "expected": None if pop.arrangement == "file" else P.expected_section_stats(
                pop.size_distribution(), pop.volume_fraction, pop.number_density_per_nm3)}
    if len(own) > 1:
        est["superposition_linear"] = analytic.superpose(own, 1.0)
        est["superposition_pythagorean"] = analytic.superpose(own, 2.0)
    M = case.strength.taylor_factor
    return {"estimates_MPa": est,
            "delta_sigma_MPa": {k: analytic.strength_increment(v, M) for k, v in est.items()},
            "N_A_per_um2": float(table.n / area_nm2 * 1e6), "L_s_nm": float(u.length_nm(L_s)),
            "populations": pops,
            "statistics_source": "sections of realization 0 (sampled, as in the run)"}


def write_run(folder: Path, case: Case, obstacles: ObstacleField, search: CrssResult,
              summary: dict, frames, swept: LineState | None = None) -> None:
    """Write result.json, obstacles.csv, line.csv, history.csv (and loops.csv, snapshots.npz).

    obstacles.csv has one row per particle (a disc's ring points are not listed); loops.csv lists
    the nodes of the Orowan loops of ``swept`` (default: the pinned line) with the particle each
    loop holds (the first, when a loop holds several).
    """
    u = case.units
    folder.mkdir(parents=True, exist_ok=True)
    gamma = line_tension(case)
    t = obstacles.table
    columns = {"x_nm": u.length_nm(t.x), "y_nm": u.length_nm(t.y), "radius_nm": u.length_nm(t.rho),
               "critical_angle_deg": np.degrees(analytic.critical_angle(gamma, t.fc))}
    if case.obstacles is None:
        columns["population"] = np.asarray(obstacles.population_names, dtype=object)[t.population]
    output.write_columns(folder / output.OBSTACLES, columns)
    x, y, pin = search.line.nodes()
    output.write_columns(folder / output.LINE, {
        "x_nm": u.length_nm(x), "y_nm": u.length_nm(y), "pinned": (pin >= 0).astype(int)})
    cell = obstacles.Lx * obstacles.Ly * obstacles.Ly
    output.write_table(folder / output.HISTORY, output.HISTORY_COLUMNS, (
        (k, r.phase, float(u.stress_MPa(r.stress)), r.state, float(u.length_nm(r.mean_glide)),
         float(r.swept_area * case.material.burgers_nm ** 2), r.pinned, r.swept_area / cell,
         r.steps, r.nodes) for k, r in enumerate(search.history)))
    state = search.line if swept is None else swept
    loops = state.loops()
    if loops:
        held = loop_particles(obstacles, state, first_crossing=False)
        output.write_table(folder / output.LOOPS, ("loop", "particle", "x_nm", "y_nm"), (
            (k, int(held[k][0]) if held[k].size else -1, float(u.length_nm(xx)),
             float(u.length_nm(yy)))
            for k, (lx, ly, _) in enumerate(loops) for xx, yy in zip(lx, ly)))
    if frames is not None:
        output.write_snapshots(folder / output.SNAPSHOTS, frames)
    output.write_json(folder / output.RESULT, summary)


def _describe_model(m: dict) -> str:
    """One line naming the line model of result.json ``model``."""
    if m["line_model"] == "constant":
        return f"constant line tension {m['line_tension_nN']:.3g} nN"
    text = (f"{m['line_model'].replace('_', '-')}, character {m['character_deg']:g}° "
            f"(0 screw, 90 edge), ν = {m['poisson_ratio']:g}, core {m['core_radius_nm']:g} nm")
    if m["line_model"] == "dewit_koehler":
        return text + f", outer cut-off {m['outer_radius_nm']:g} nm"
    return text + f", {m['images']} image period(s) each side" + (
        f", cutoff {m['cutoff_nm']:g} nm" if m["cutoff_nm"] > 0 else "")


def format_summary(result: RunResult) -> str:
    """A few readable lines for the terminal."""
    s = result.summary
    lo, hi = s["crss_bracket_MPa"]
    lines = [
        f"case      {result.case.source}" + (f"  ({result.case.title})" if result.case.title else ""),
        f"field     {s['n_obstacles']} obstacles "
        f"({'particles' if result.case.obstacles is None else result.case.obstacles.kind}), box "
        f"{s['box_nm'][0]:.0f} x {s['box_nm'][1]:.0f} nm = {s['box_in_spacings'][0]:.1f} x "
        f"{s['box_in_spacings'][1]:.1f} spacings of {s['spacing_nm']:.1f} nm",
        f"CRSS      {s['crss_MPa']:.2f} MPa  bracket [{lo:.2f}, {hi:.2f}] MPa  "
        f"= {s['crss_over_orowan']:.3f} x Orowan 2Γ/(bL) = {s['orowan_MPa']:.2f} MPa",
        f"model     {_describe_model(s['model'])}",
        f"status    {'converged' if s['converged'] else 'NOT converged'}: {s['message']}; "
        f"{s['relaxations']} relaxations, {s['time_steps']} time steps, {s['wall_time_s']:.1f} s",
    ]
    if "crss_MPa_realizations" in s:
        lines.append(f"strength  {len(s['crss_MPa_realizations'])} realization(s), CRSS mean "
                     f"{s['crss_MPa_mean']:.2f} MPa, 95% [{s['crss_MPa_ci95'][0]:.2f}, "
                     f"{s['crss_MPa_ci95'][1]:.2f}] ({s['crss_MPa_ci95_method']}); passes "
                     f"{', '.join(f'{v:.2f}' for v in s['crss_MPa_passes'])} MPa; "
                     f"Δσ = {s['delta_sigma_MPa']:.1f} MPa; {s['loops']['count']} loops")
        lines += [f"warning   {w}" for w in s["warnings"]]
    if result.out_dir is not None:
        lines.append(f"written   {result.out_dir}")
    return "\n".join(lines)
