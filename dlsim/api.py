"""Run one case: case → obstacle field → CRSS search → result object and files.

:func:`run_case` is what ``dlsim run`` calls; a notebook calls it the same way.  Reduced units stop
here: everything in :class:`RunResult` and in the files is in nm and MPa.
"""
from __future__ import annotations

import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import __version__, analytic, output
from .case import Case, load_case
from .fields import ObstacleField, random_field, square_field
from .solver import CrssResult, LineModel, Protocol, Relaxation, find_crss

#: The ramp gives up (no CRSS) above τ_f + this many Orowan stresses 2Γ/(bL).
MAX_STRESS_IN_OROWAN = 5.0


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


def build_field(case: Case) -> ObstacleField:
    """The case's obstacle field in reduced units; random choices seeded by ``case.seed``."""
    u, o, line = case.units, case.obstacles, case.line
    spacing = u.length(o.spacing_nm)
    fc = obstacle_strength(case)
    if o.kind == "square":
        return square_field(spacing, int(round(line.length_spacings)),
                            int(round(line.height_spacings)), fc)
    rng = np.random.default_rng(case.seed)
    return random_field(u.length(line.length_nm), u.length(line.height_nm), spacing ** -2, fc, rng)


def model_and_protocol(case: Case, spacing: float) -> tuple[LineModel, Protocol, float]:
    """Line model, loading protocol and the reference stress 2Γ/(bL) (reduced units)."""
    u, gamma = case.units, line_tension(case)
    tau_ref = analytic.orowan(gamma, spacing)
    friction = u.stress(case.friction.stress_MPa)
    model = LineModel(gamma, u.length(case.line.node_spacing_nm), friction)
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
    """
    case = load_case(case)
    t0 = time.perf_counter()
    u = case.units
    obstacles = build_field(case)
    model, protocol, tau_ref = model_and_protocol(case, obstacles.spacing)
    every = case.output.snapshot_every if snapshot_every is None else snapshot_every
    frames = []

    def snap(state, tau, steps):
        x, y, pin = state.nodes()
        frames.append((u.length_nm(x), u.length_nm(y), pin >= 0, u.stress_MPa(tau), steps))

    search = find_crss(obstacles, model, protocol, y0=0.0, snapshot_every=every,
                       on_snapshot=snap if every > 0 else None,
                       on_relaxation=_progress_printer(u) if progress else None)
    wall = time.perf_counter() - t0
    summary = _summary(case, obstacles, search, tau_ref, wall)
    folder = None
    if out_dir is not False:
        folder = Path(out_dir if out_dir is not None else case.output.folder)
        write_run(folder, case, obstacles, search, summary, frames if every > 0 else None)
    return RunResult(case, obstacles, search, summary, folder)


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
        "model": {"line_tension": "constant", "self_stress": False},
        "wall_time_s": wall,
        "dlsim_version": __version__,
        "case": case.to_dict(),
    }


def write_run(folder: Path, case: Case, obstacles: ObstacleField, search: CrssResult,
              summary: dict, frames) -> None:
    """Write result.json, obstacles.csv, line.csv, history.csv (and loops.csv, snapshots.npz)."""
    u = case.units
    folder.mkdir(parents=True, exist_ok=True)
    gamma = line_tension(case)
    angle = np.degrees(analytic.critical_angle(gamma, obstacles.fc))
    output.write_columns(folder / output.OBSTACLES, {
        "x_nm": u.length_nm(obstacles.x), "y_nm": u.length_nm(obstacles.y),
        "radius_nm": u.length_nm(obstacles.radius), "critical_angle_deg": angle})
    x, y, pin = search.line.nodes()
    output.write_columns(folder / output.LINE, {
        "x_nm": u.length_nm(x), "y_nm": u.length_nm(y), "pinned": (pin >= 0).astype(int)})
    cell = obstacles.Lx * obstacles.Ly * obstacles.Ly
    output.write_table(folder / output.HISTORY, output.HISTORY_COLUMNS, (
        (k, r.phase, float(u.stress_MPa(r.stress)), r.state, float(u.length_nm(r.mean_glide)),
         float(r.swept_area * case.material.burgers_nm ** 2), r.pinned, r.swept_area / cell,
         r.steps, r.nodes) for k, r in enumerate(search.history)))
    loops = search.line.loops()
    if loops:
        output.write_table(folder / output.LOOPS, ("loop", "x_nm", "y_nm"), (
            (k, float(u.length_nm(xx)), float(u.length_nm(yy)))
            for k, (lx, ly, _) in enumerate(loops) for xx, yy in zip(lx, ly)))
    if frames is not None:
        output.write_snapshots(folder / output.SNAPSHOTS, frames)
    output.write_json(folder / output.RESULT, summary)


def format_summary(result: RunResult) -> str:
    """A few readable lines for the terminal."""
    s = result.summary
    lo, hi = s["crss_bracket_MPa"]
    lines = [
        f"case      {result.case.source}" + (f"  ({result.case.title})" if result.case.title else ""),
        f"field     {s['n_obstacles']} obstacles ({result.case.obstacles.kind}), box "
        f"{s['box_nm'][0]:.0f} x {s['box_nm'][1]:.0f} nm = {s['box_in_spacings'][0]:.1f} x "
        f"{s['box_in_spacings'][1]:.1f} spacings of {s['spacing_nm']:.1f} nm",
        f"CRSS      {s['crss_MPa']:.2f} MPa  bracket [{lo:.2f}, {hi:.2f}] MPa  "
        f"= {s['crss_over_orowan']:.3f} x Orowan 2Γ/(bL) = {s['orowan_MPa']:.2f} MPa",
        f"status    {'converged' if s['converged'] else 'NOT converged'}: {s['message']}; "
        f"{s['relaxations']} relaxations, {s['time_steps']} time steps, {s['wall_time_s']:.1f} s",
    ]
    if result.out_dir is not None:
        lines.append(f"written   {result.out_dir}")
    return "\n".join(lines)
