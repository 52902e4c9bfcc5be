"""Parameter sweeps: many cases, several seeds each, on a process pool or a Dask cluster.

A sweep file (TOML) names a base case and the case keys to vary::

    base = "square.toml"                      # relative to this file; or an inline [base] table
    combine = "grid"                          # "grid" (every combination) or "zip" (side by side)
    seeds = 3                                 # realizations per point

    [vary]
    "obstacles.spacing_nm" = [30, 40, 50]
    "obstacles.critical_angle_deg" = {linear = [0, 90, 4]}    # or {log = [start, stop, count]}

    [output]
    folder = "sweeps/demo"                    # relative to this file; --out overrides

Every point × seed is one run with a stable id (``p003_s01``) and a folder ``runs/<id>/`` holding
exactly what :func:`dlsim.api.run_case` writes.  The main process writes each folder atomically
(a hidden temporary folder renamed into place), so a rerun resumes: finished runs are skipped and an
interruption loses at most the runs in flight.  ``sweep.json`` stores the expanded sweep; a resume
against a changed sweep file is refused.

Seeds: seed index 0 is the point's own case seed (so a sweep point reproduces ``dlsim run`` of the
same case); index k >= 1 is ``SeedSequence(seed, spawn_key=(k,)).generate_state(1)[0]``, the k-th
child that ``numpy.random.SeedSequence(seed).spawn`` would give.  Unless ``seed`` itself is varied,
every point uses the same seeds (common random numbers: differences between points are not blurred
by different realizations).
"""
from __future__ import annotations

import concurrent.futures as cf
import contextlib
import copy
import csv
import io
import itertools
import json
import math
import multiprocessing
import os
import re
import signal
import threading
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator

import numpy as np

from . import output, statistics
from .errors import CaseError, DlsimError, SimulationError

SWEEP_KEYS = ("title", "base", "vary", "combine", "seeds", "output")
OUTPUT_KEYS = ("folder",)
COMBINE_MODES = ("grid", "zip")
RANGE_KINDS = ("linear", "log")
# Generated range values are rounded to this many significant digits so that 0.1 + 0.2 style
# residues do not leak into case files, folder summaries and plot labels.
RANGE_DIGITS = 12
RUNS_FOLDER = "runs"
SWEEP_JSON = output.SWEEP
#: Runs of one sweep at the most (points × seeds); also bounds every range and grid before it is
#: expanded.  sweep.json stores each run's resolved case (a few kB), so 1e5 runs are ~0.3 GB.
MAX_RUNS = 100_000
#: Seeds per point at the most (as realizations of a case).
MAX_SEEDS = 10_000
#: Local worker processes per core at the most: more only multiplies memory, never speed.
MAX_WORKERS_PER_CORE = 4
SUMMARY_RUNS = "summary_runs.csv"
SUMMARY_POINTS = "summary_points.csv"
# How long to wait for an existing Dask scheduler before giving up.
DASK_CONNECT_TIMEOUT = "30s"
DASK_HINT = "Dask is not installed: pip install 'dlsim[cluster]'"


# --------------------------------------------------------------------------- sweep file


@dataclass(frozen=True)
class RunSpec:
    """One run of a sweep: a point of the parameter grid with one seed.

    Attributes
    ----------
    run_id : str
        Stable name, e.g. ``"p003_s01"``; also the folder ``runs/<run_id>``.
    point : int
        Index of the parameter point (0-based).
    seed_index : int
        Index of the realization at this point (0-based).
    seed : int
        The case seed of this run.
    params : dict
        Swept dotted key → value at this point.
    case : dict
        The complete resolved case (base with the overrides and the seed applied, every default
        filled in, paths absolute), as :meth:`dlsim.case.Case.to_dict` gives it.
    """

    run_id: str
    point: int
    seed_index: int
    seed: int
    params: dict
    case: dict


@dataclass(frozen=True)
class Sweep:
    """A validated, expanded sweep file.

    Attributes
    ----------
    source : str
        The sweep file (or ``"<dict>"``).
    vary : dict
        Swept dotted key → list of values (ranges already expanded), in file order.
    scales : dict
        Swept dotted key → ``"list"``, ``"linear"`` or ``"log"`` (how the values were given).
    combine : str
        ``"grid"`` or ``"zip"``.
    seeds : int
        Realizations per point.
    runs : list of RunSpec
        Every run, point-major then seed.
    out_dir : Path or None
        ``[output] folder`` resolved against the sweep file's folder.
    title : str
    """

    source: str
    vary: dict
    scales: dict
    combine: str
    seeds: int
    runs: list = field(repr=False)
    out_dir: Path | None = None
    title: str = ""

    @property
    def n_points(self) -> int:
        return len(self.runs) // self.seeds

    def to_json(self) -> dict:
        """The expanded sweep as written to ``sweep.json``."""
        return {
            "source": self.source,
            "title": self.title,
            "combine": self.combine,
            "n_seeds": self.seeds,
            "vary": self.vary,
            "scales": self.scales,
            "runs": [
                {"run_id": r.run_id, "point": r.point, "seed_index": r.seed_index, "seed": r.seed,
                 "params": r.params, "case": r.case}
                for r in self.runs
            ],
        }


def load_sweep(sweep: str | os.PathLike | dict) -> Sweep:
    """Read, validate and expand a sweep file.

    Parameters
    ----------
    sweep : path or dict
        A sweep TOML file or the same content as a dictionary (then ``base`` paths are relative
        to the working directory).

    Returns
    -------
    Sweep

    Raises
    ------
    CaseError
        One line naming the file and key: unknown sweep keys, a varied key that is not a case
        key, empty lists, bad ranges, zip lists of unequal length, a bad seed count, or a point
        whose case does not validate.
    """
    raw, source, folder = _read_toml(sweep)
    unknown = sorted(set(raw) - set(SWEEP_KEYS))
    if unknown:
        raise CaseError(source, unknown[0], f"unknown sweep key; allowed: {', '.join(SWEEP_KEYS)}")
    base, base_dir = _load_base(raw, source, folder)
    vary, scales = _parse_vary(raw.get("vary"), source)
    combine = raw.get("combine", "grid")
    if combine not in COMBINE_MODES:
        raise CaseError(source, "combine", f"got {combine!r}; allowed: 'grid', 'zip'")
    seeds = raw.get("seeds", 1)
    if isinstance(seeds, bool) or not isinstance(seeds, int) or not 1 <= seeds <= MAX_SEEDS:
        raise CaseError(source, "seeds", f"got {seeds!r}; must be an integer in [1, {MAX_SEEDS}]")
    title = raw.get("title", "")
    if not isinstance(title, str):
        raise CaseError(source, "title", f"got {title!r}; must be a string")
    _check_run_count(vary, combine, seeds, source)
    points = _combine(vary, combine, source)
    runs = _expand(base, base_dir, points, seeds, source)
    return Sweep(source=source, vary=vary, scales=scales, combine=combine, seeds=seeds,
                 runs=runs, out_dir=_output_folder(raw.get("output"), source, folder),
                 title=title)


def _check_run_count(vary: dict, combine: str, seeds: int, source: str) -> None:
    """Refuse a sweep of more than MAX_RUNS runs before anything is expanded."""
    sizes = [len(v) for v in vary.values()]
    points = max(sizes) if combine == "zip" else math.prod(sizes)
    if points * seeds > MAX_RUNS:
        detail = " × ".join(str(n) for n in sizes) if combine == "grid" else str(points)
        raise CaseError(source, "vary", f"{detail} points × {seeds} seed(s) = "
                                        f"{points * seeds:.3g} runs; at most {MAX_RUNS} allowed")


def _read_toml(sweep) -> tuple[dict, str, Path]:
    if isinstance(sweep, dict):
        return copy.deepcopy(sweep), "<dict>", Path.cwd()
    path = Path(sweep)
    if path.is_dir():
        raise CaseError(str(path), "", "is a folder, not a sweep file")
    try:
        text = path.read_bytes().decode("utf-8-sig")
        return tomllib.loads(text), str(path), path.resolve().parent
    except FileNotFoundError:
        raise CaseError(str(path), "", "sweep file not found") from None
    except OSError as err:
        raise CaseError(str(path), "", f"cannot read the file ({err.strerror})") from None
    except UnicodeDecodeError:
        raise CaseError(str(path), "", "not UTF-8 text; a sweep file is TOML") from None
    except tomllib.TOMLDecodeError as err:
        raise CaseError(str(path), "", f"not valid TOML: {err}") from None


def _load_base(raw: dict, source: str, folder: Path) -> tuple[dict, Path]:
    """The base case as a raw dictionary, validated once, and the folder its paths count from."""
    from .case import load_case

    base = raw.get("base")
    if base is None:
        raise CaseError(source, "base", "missing; give a case file path or an inline [base] table")
    if isinstance(base, str):
        path = folder / base
        if not path.is_file():
            raise CaseError(source, "base", f"case file {str(path)!r} not found")
        load_case(path)  # errors name the case file itself
        with open(path, "rb") as fh:
            return tomllib.load(fh), path.resolve().parent
    if isinstance(base, dict):
        _resolved_case(base, folder, source, "base")
        return copy.deepcopy(base), folder
    raise CaseError(source, "base", f"got {base!r}; must be a path or a table")


def _resolved_case(case: dict, base_dir: Path, source: str, where: str) -> dict:
    """Validate a raw case and return it resolved (every default filled in, paths absolute).

    Resolving here makes each run independent of the folder a worker runs in, and ``sweep.json``
    shows exactly what ran.  Errors are re-raised against the sweep file.
    """
    from .case import load_case

    try:
        return load_case(case, base_dir=base_dir).to_dict()
    except CaseError as err:
        raise CaseError(source, err.key, f"{err.problem} ({where})") from None


def _parse_vary(vary, source: str) -> tuple[dict, dict]:
    if not isinstance(vary, dict) or not vary:
        raise CaseError(source, "vary", "missing or empty; give at least one case key to vary")
    from .case import schema_has_key

    values, scales = {}, {}
    for key, spec in _flatten_vary(vary):
        where = f"vary.{key}"
        if not schema_has_key(key):
            raise CaseError(source, where, f"{key!r} is not a case key")
        values[key], scales[key] = _expand_values(spec, source, where)
    return values, scales


def _flatten_vary(vary: dict, prefix: str = "") -> Iterator[tuple[str, Any]]:
    """Dotted key → spec; unquoted dotted keys arrive as nested tables and are joined back."""
    for key, spec in vary.items():
        dotted = f"{prefix}{key}"
        if isinstance(spec, dict) and not (set(spec) & set(RANGE_KINDS)):
            yield from _flatten_vary(spec, dotted + ".")
        else:
            yield dotted, spec


def _expand_values(spec, source: str, where: str) -> tuple[list, str]:
    """A list of values, or a ``{linear|log = [start, stop, count]}`` table, as a list."""
    if isinstance(spec, list):
        if not spec:
            raise CaseError(source, where, "empty list; give at least one value")
        return spec, "list"
    if not isinstance(spec, dict):
        raise CaseError(source, where, f"got {spec!r}; give a list of values or "
                                       "{linear = [start, stop, count]} / {log = [...]}")
    if len(spec) != 1 or next(iter(spec)) not in RANGE_KINDS:
        raise CaseError(source, where, f"got table keys {sorted(spec)}; "
                                       "give exactly one of 'linear', 'log'")
    kind, args = next(iter(spec.items()))
    start, stop, count = _range_args(args, source, f"{where}.{kind}")
    if kind == "log":
        if start <= 0 or stop <= 0:
            raise CaseError(source, f"{where}.log", f"got [{start}, {stop}, {count}]; "
                                                   "a log range needs start > 0 and stop > 0")
        vals = np.geomspace(start, stop, count)
    else:
        vals = np.linspace(start, stop, count)
    return _tidy(vals, all(isinstance(a, int) for a in (start, stop))), kind


def _range_args(args, source: str, where: str) -> tuple[float, float, int]:
    ok = isinstance(args, list) and len(args) == 3
    if ok:
        start, stop, count = args
        ok = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (start, stop))
    if not ok:
        raise CaseError(source, where, f"got {args!r}; give [start, stop, count]")
    if isinstance(count, bool) or not isinstance(count, int) or not 1 <= count <= MAX_RUNS:
        raise CaseError(source, where, f"count {count!r}; must be an integer in [1, {MAX_RUNS}]")
    try:
        finite = math.isfinite(float(start)) and math.isfinite(float(stop))
    except OverflowError:
        finite = False
    if not finite:
        raise CaseError(source, where, f"got {args!r}; start and stop must be finite numbers")
    ints = isinstance(start, int) and isinstance(stop, int)
    return (start, stop, count) if ints and max(abs(start), abs(stop)) < 2**53 else (
        float(start), float(stop), count)


def _tidy(vals: np.ndarray, integers: bool) -> list:
    """Plain Python numbers, ints where integer ends give integral values."""
    out = [float(f"{v:.{RANGE_DIGITS}g}") for v in vals]
    if integers and all(v.is_integer() for v in out):
        return [int(v) for v in out]
    return out


def _combine(vary: dict, combine: str, source: str) -> list[dict]:
    keys = list(vary)
    if combine == "zip":
        lengths = {k: len(v) for k, v in vary.items()}
        if len(set(lengths.values())) > 1:
            detail = ", ".join(f"{k}: {n}" for k, n in lengths.items())
            raise CaseError(source, "combine", f"'zip' needs lists of equal length; got {detail}")
        rows = zip(*vary.values())
    else:
        rows = itertools.product(*vary.values())
    return [dict(zip(keys, row)) for row in rows]


def _expand(base: dict, base_dir: Path, points: list[dict], seeds: int, source: str
            ) -> list[RunSpec]:
    from .case import apply_overrides

    width = max(3, len(str(len(points) - 1)))
    swidth = max(2, len(str(seeds - 1)))
    runs = []
    for p, params in enumerate(points):
        case = _resolved_case(apply_overrides(base, params, source=source), base_dir, source,
                              f"sweep point {p}: {_describe(params)}")
        # A run's folder is runs/<id>; the resolved default (an absolute path on this machine)
        # would only tie sweep.json to where the sweep was first started.
        case.get("output", {}).pop("folder", None)
        for k, seed in enumerate(derive_seeds(case["seed"], seeds)):
            run_case = copy.deepcopy(case)
            run_case["seed"] = seed
            runs.append(RunSpec(f"p{p:0{width}d}_s{k:0{swidth}d}", p, k, seed, params, run_case))
    return runs


def _describe(params: dict) -> str:
    return ", ".join(f"{k} = {v!r}" for k, v in params.items())


def derive_seeds(seed: int, count: int) -> list[int]:
    """Seeds of ``count`` realizations derived from a case seed.

    Index 0 is ``seed`` itself; index k >= 1 is the first 32-bit word of the k-th spawned child,
    ``numpy.random.SeedSequence(seed, spawn_key=(k,))`` (what ``SeedSequence(seed).spawn`` yields).
    """
    return [int(seed)] + [
        int(np.random.SeedSequence(int(seed), spawn_key=(k,)).generate_state(1)[0])
        for k in range(1, count)
    ]


def _output_folder(output, source: str, folder: Path) -> Path | None:
    if output is None:
        return None
    if not isinstance(output, dict):
        raise CaseError(source, "output", "must be a table with `folder`")
    unknown = sorted(set(output) - set(OUTPUT_KEYS))
    if unknown:
        raise CaseError(source, f"output.{unknown[0]}", "unknown key; allowed: folder")
    value = output.get("folder")
    if value is None:
        return None
    if not isinstance(value, str) or not value:
        raise CaseError(source, "output.folder", f"got {value!r}; must be a folder path")
    return Path(os.path.normpath(folder / value))


# --------------------------------------------------------------------------- running


@dataclass
class SweepOutcome:
    """What :func:`run_sweep` did.

    Attributes
    ----------
    out_dir : Path
    ran, skipped : list of str
        Run ids computed now, and those already finished before.
    failed : dict
        Run id → one-line error message.
    """

    out_dir: Path
    ran: list
    skipped: list
    failed: dict


def run_sweep(sweep: str | os.PathLike | dict | Sweep, out_dir=None, workers: int | None = None,
              scheduler: str | None = None, progress: bool = True,
              notify: Callable[[str], None] | None = None) -> SweepOutcome:
    """Run (or resume) every run of a sweep and write the summaries.

    Parameters
    ----------
    sweep : path, dict or Sweep
    out_dir : path, optional
        Sweep folder; default ``[output] folder`` of the sweep file.
    workers : int, optional
        Parallel runs; default every core this process may use.  With ``scheduler`` an address
        of an existing cluster it is ignored (the cluster has its own workers).
    scheduler : str, optional
        ``None``: a local process pool.  ``"local"``: a Dask ``LocalCluster``.  A name ending in
        ``.json``: the scheduler file of a running Dask scheduler.  Anything else: its address,
        e.g. ``"tcp://node17:8786"``.
    progress : bool
        A tqdm bar over runs on stderr.
    notify : callable, optional
        Receives one-line notes before the runs start: the warnings of the sweep's cases (each
        once) and a note when the kernels still have to be compiled.

    Returns
    -------
    SweepOutcome

    Raises
    ------
    CaseError
        Bad sweep file, no output folder, or a folder holding a different sweep.
    SimulationError
        Some runs failed (the others are written, and so are the summaries); rerun to retry them.
    """
    most = MAX_WORKERS_PER_CORE * default_workers()
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or not 1 <= workers <= most):
        raise DlsimError(f"--workers must be an integer in [1, {most}] ({MAX_WORKERS_PER_CORE} "
                         f"per core of this machine), got {workers!r}")
    sw = sweep if isinstance(sweep, Sweep) else load_sweep(sweep)
    out = _resolve_out(sw, out_dir)
    _prepare_folder(sw, out)
    if notify is not None:
        _notify(sw, notify)
    done = {r.run_id for r in sw.runs if is_finished(out, r.run_id)}
    todo = [r for r in sw.runs if r.run_id not in done]
    failed: dict = {}
    bar = _progress_bar(len(sw.runs), len(done), progress)
    try:
        with _terminate_as_interrupt(), contextlib.closing(_execute(todo, workers, scheduler)) as results:
            for spec, outcome in results:
                if isinstance(outcome, BaseException):
                    failed[spec.run_id] = f"{type(outcome).__name__}: {outcome}"
                    bar.write(f"dlsim: run {spec.run_id} failed: {failed[spec.run_id]}")
                else:
                    _write_run(out, spec.run_id, outcome, bar)
                bar.update(1)
    finally:
        bar.close()
    summarize_sweep(out)
    if failed:
        first = next(iter(failed))
        raise SimulationError(f"{len(failed)} of {len(todo)} runs failed (first: {first}: "
                              f"{failed[first]}); rerun the same command to retry them")
    return SweepOutcome(out, [r.run_id for r in todo], sorted(done), failed)


def _notify(sw: Sweep, notify: Callable[[str], None]) -> None:
    from .api import kernels_need_compiling
    from .case import load_case

    seen = []
    for run in sw.runs[:: sw.seeds]:
        for warning in load_case(run.case).warnings:
            if warning not in seen:
                seen.append(warning)
                notify(f"warning: {warning}")
    if kernels_need_compiling():
        notify("compiling the kernels in each worker (first run only, about half a minute)")


def _write_run(out: Path, run_id: str, files: dict[str, bytes], bar) -> None:
    """Write one finished run; a run that cannot be written where it belongs is rescued."""
    from .errors import RescuedOutput

    try:
        write_run_folder(out, run_id, files)
    except RescuedOutput as err:
        bar.write(f"dlsim: run {run_id}: {err}")


def _resolve_out(sw: Sweep, out_dir) -> Path:
    if out_dir is not None:
        return Path(out_dir)
    if sw.out_dir is None:
        raise CaseError(sw.source, "output.folder", "missing; set it in the sweep file or pass --out")
    return sw.out_dir


def _prepare_folder(sw: Sweep, out: Path) -> None:
    """Check the folder before anything runs (:func:`dlsim.output.check_destination`), create it,
    or check that it holds this same sweep; clear half-written runs."""
    output.check_destination(out, marker=SWEEP_JSON, label="sweep folder")
    runs = out / RUNS_FOLDER
    try:
        runs.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise DlsimError(f"sweep folder {str(out)!r}: cannot create {RUNS_FOLDER}/ "
                         f"({err.strerror})") from None
    stored = out / SWEEP_JSON
    expanded = sw.to_json()
    if stored.exists():
        _check_same_sweep(upgrade_sweep_record(output.read_json(stored, "sweep record")),
                          expanded, sw.source, out)
    else:
        output.write_file_atomic(stored, json.dumps(expanded, indent=1, sort_keys=False).encode())
    output.clear_leftovers(runs)


def _check_same_sweep(old: dict, new: dict, source: str, out: Path) -> None:
    # Compare through JSON so that tuples/lists and int/float spellings agree with the stored file.
    old_runs = json.loads(json.dumps(old.get("runs", [])))
    new_runs = json.loads(json.dumps(new["runs"]))
    if old_runs == new_runs and old.get("vary") == json.loads(json.dumps(new["vary"])):
        return
    if len(old_runs) != len(new_runs):
        detail = f"{len(old_runs)} runs there, {len(new_runs)} now"
    else:
        first = next((n["run_id"] for o, n in zip(old_runs, new_runs) if o != n), "vary")
        detail = f"first difference at {first}"
    raise CaseError(source, "", f"differs from the sweep already in {str(out)!r} ({SWEEP_JSON}: "
                                f"{detail}); use a new --out folder or delete that one")


def is_finished(out: Path, run_id: str) -> bool:
    """A run folder exists only once complete (it is swapped into place whole)."""
    return output.is_run_folder(Path(out) / RUNS_FOLDER / run_id)


def write_run_folder(out: Path, run_id: str, files: dict[str, bytes]) -> Path:
    """Write a run's files as ``runs/<run_id>`` (:func:`dlsim.output.write_folder`)."""
    return output.write_folder(Path(out) / RUNS_FOLDER / run_id, files)


def run_one(case: dict) -> dict[str, bytes]:
    """Run one case and return its files (name → bytes), rendered in memory.

    This is what a pool process or Dask worker executes; returning the bytes lets the main
    process do all the writing (atomic, and no shared file system needed on a cluster), and a
    killed worker leaves nothing behind on disk.
    """
    from .api import run_case, run_files

    return run_files(run_case(case, out_dir=False, progress=False))


def default_workers() -> int:
    """Cores this process may use (respects CPU affinity, e.g. inside a batch job)."""
    if hasattr(os, "sched_getaffinity"):
        return max(1, len(os.sched_getaffinity(0)))
    return max(1, os.cpu_count() or 1)


def _init_worker() -> None:
    # One run per core: keep any numba thread pool from oversubscribing the cores.
    try:
        import numba
        numba.set_num_threads(1)
    except Exception:  # noqa: BLE001 - numba without a threading layer just runs serially
        pass


def _execute(todo: list[RunSpec], workers, scheduler) -> Iterator[tuple[RunSpec, object]]:
    """Yield (spec, files or exception) as runs finish, on a pool or a Dask cluster."""
    if not todo:
        return
    if scheduler is None:
        yield from _execute_pool(todo, workers or default_workers())
    else:
        yield from _execute_dask(todo, workers, scheduler)


def _execute_pool(todo: list[RunSpec], workers: int):
    # "spawn": fresh interpreters, safe whatever threads the parent holds (tqdm, numba).
    ctx = multiprocessing.get_context("spawn")
    pool = cf.ProcessPoolExecutor(max_workers=min(workers, len(todo)), mp_context=ctx,
                                  initializer=_init_worker)
    try:
        futures = {pool.submit(run_one, spec.case): spec for spec in todo}
        for fut in cf.as_completed(futures):
            yield futures[fut], _outcome(fut)
    except BaseException:
        _kill_pool(pool)
        raise
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _outcome(fut):
    # Any failure of one run (including a crashed worker) is reported and the sweep goes on.
    try:
        return fut.result()
    except Exception as err:  # noqa: BLE001
        return err


def _kill_pool(pool: cf.ProcessPoolExecutor) -> None:
    """Stop runs in flight at once (Python 3.11 has no public call for this)."""
    procs = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in procs:
        with contextlib.suppress(Exception):
            proc.terminate()


def _execute_dask(todo: list[RunSpec], workers, scheduler: str):
    try:
        from dask.distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise DlsimError(DASK_HINT) from None
    cluster = None
    if scheduler == "local":
        cluster = LocalCluster(n_workers=workers or default_workers(), threads_per_worker=1,
                               processes=True, dashboard_address=None)
        client = Client(cluster)
    else:
        # A scheduler file (``dask scheduler --scheduler-file F``) is the usual hand-over in a batch job.
        where = ({"scheduler_file": scheduler} if scheduler.endswith(".json")
                 else {"address": scheduler})
        try:
            client = Client(**where, timeout=DASK_CONNECT_TIMEOUT)
        except (OSError, TimeoutError, ValueError) as err:
            raise DlsimError(f"cannot reach the Dask scheduler at {scheduler!r}: {err}") from None
    try:
        client.run(_init_worker)
        futures = {client.submit(run_one, spec.case, pure=False): spec for spec in todo}
        try:
            for fut in as_completed(futures):
                yield futures[fut], _outcome(fut)
        except BaseException:
            client.cancel(list(futures))
            raise
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


@contextlib.contextmanager
def _terminate_as_interrupt():
    """Treat SIGTERM (``kill``, a batch system's time limit) like Ctrl-C: stop runs, keep files."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


class _NoBar:
    def update(self, n: int) -> None:
        pass

    def write(self, text: str) -> None:
        print(text)

    def close(self) -> None:
        pass


def _progress_bar(total: int, done: int, enabled: bool):
    if not enabled:
        return _NoBar()
    from tqdm import tqdm

    return tqdm(total=total, initial=done, unit="run", desc="sweep", dynamic_ncols=True)


# --------------------------------------------------------------------------- summaries


def summarize_sweep(out_dir) -> tuple[Path, Path]:
    """Write ``summary_runs.csv`` and ``summary_points.csv`` from the finished runs.

    Parameters
    ----------
    out_dir : path
        A sweep folder (with ``sweep.json``).

    Returns
    -------
    (Path, Path)
        The two CSV files (docs/outputs.md).  Columns of the run table: ``run_id, point,
        seed_index, seed``, one per swept key (named by :func:`column_name`), ``crss_MPa,
        crss_lo_MPa, crss_hi_MPa, orowan_MPa, status, converged``, then ``delta_sigma_MPa``,
        ``activation_volume_b3`` and ``estimate_<model>_MPa`` when any run reports them.  The
        point table has the swept keys, ``n_runs`` and, per quantity (POINT_QUANTITIES),
        ``<q>_mean_<u>, <q>_std_<u>, <q>_sem_<u>, <q>_ci95_lo_<u>, <q>_ci95_hi_<u>`` (Student t,
        u its unit), then ``orowan_mean_MPa`` and ``estimate_<model>_mean_MPa``, the means over
        the point's runs.
    """
    out = Path(out_dir)
    meta = read_sweep_json(out)
    keys = list(meta["vary"])
    cols = [column_name(k) for k in keys]
    rows = [_run_row(out, r, keys) for r in meta["runs"] if is_finished(out, r["run_id"])]
    extra = _extra_columns(rows)
    run_cols = ["run_id", "point", "seed_index", "seed", *cols, "crss_MPa", "crss_lo_MPa",
                "crss_hi_MPa", "orowan_MPa", "status", "converged", *extra]
    runs_path = _write_csv(out / SUMMARY_RUNS, run_cols, rows)
    points = _point_rows(meta["runs"], rows, keys, extra)
    point_cols = ["point", *cols, "n_runs"]
    for q, unit in (POINT_QUANTITIES[c] for c in _quantity_columns(extra)):
        point_cols += [f"{q}_{stat}_{unit}" for stat in POINT_STATISTICS]
    point_cols += [_mean_column(c) for c in ["orowan_MPa", *extra] if c not in POINT_QUANTITIES]
    points_path = _write_csv(out / SUMMARY_POINTS, point_cols, points)
    return runs_path, points_path


#: Statistics of the point table, per quantity: ``<q>_<statistic>_<unit>``.
POINT_STATISTICS = ("mean", "std", "sem", "ci95_lo", "ci95_hi")
#: The run-table columns the point table gives statistics of: (quantity, unit).  The CRSS always;
#: Δσ for populations; the apparent activation volume V* for thermally activated runs.
POINT_QUANTITIES = {"crss_MPa": ("crss", "MPa"), "delta_sigma_MPa": ("delta_sigma", "MPa"),
                    "activation_volume_b3": ("activation_volume", "b3")}


def _quantity_columns(extra: list[str]) -> list[str]:
    """The POINT_QUANTITIES columns present: the CRSS and those among ``extra``."""
    return [c for c in POINT_QUANTITIES if c == "crss_MPa" or c in extra]


def column_name(key: str) -> str:
    """The summary-CSV column of a swept case key: ``populations[i].`` becomes ``pop<i>_``
    (i counted from 1, as in the sweep file and in error messages) and every other dot ``_``, so
    ``"populations[1].radius_nm"`` → ``"pop1_radius_nm"``, ``"obstacles.spacing_nm"`` →
    ``"obstacles_spacing_nm"``, ``"seed"`` → ``"seed"`` (the unit suffix stays last)."""
    return re.sub(r"populations\[(\d+)\]\.", r"pop\1_", key).replace(".", "_")


def _mean_column(name: str) -> str:
    """``"estimate_friedel_MPa"`` → ``"estimate_friedel_mean_MPa"`` (the point's mean)."""
    return name.removesuffix("_MPa") + "_mean_MPa"


def upgrade_sweep_record(data: dict) -> dict:
    """A ``sweep.json`` in the current names (``n_seeds``, runs' ``run_id``): one written before
    the naming rule (``seeds``, ``id``) is renamed, so a sweep resumes in its old folder."""
    if "seeds" in data and "n_seeds" not in data:
        data = {("n_seeds" if k == "seeds" else k): v for k, v in data.items()}
    runs = data.get("runs")
    if isinstance(runs, list) and runs and isinstance(runs[0], dict) and "id" in runs[0]:
        data["runs"] = [{("run_id" if k == "id" else k): v for k, v in r.items()}
                        if isinstance(r, dict) else r for r in runs]
    return data


def read_sweep_json(out_dir) -> dict:
    """The expanded sweep stored in a sweep folder."""
    path = Path(out_dir) / SWEEP_JSON
    if not path.is_file():
        raise DlsimError(f"{str(out_dir)!r} is not a sweep folder (no {SWEEP_JSON})")
    data = upgrade_sweep_record(output.read_json(path, "sweep record"))
    if not isinstance(data.get("runs"), list) or not isinstance(data.get("vary"), dict):
        raise DlsimError(f"{str(path)!r}: not a dlsim sweep record (no runs or vary)")
    return data


def _run_row(out: Path, run: dict, keys: list[str]) -> dict:
    res = output.read_result(out / RUNS_FOLDER / run["run_id"])
    row = {"run_id": run["run_id"], "point": run["point"], "seed_index": run["seed_index"],
           "seed": run["seed"], **{column_name(k): run["params"][k] for k in keys},
           "crss_MPa": res["crss_MPa"], "crss_lo_MPa": res.get("crss_lo_MPa", math.nan),
           "crss_hi_MPa": res.get("crss_hi_MPa", math.nan),
           "orowan_MPa": res.get("orowan_MPa"), "status": res.get("status"),
           "converged": res.get("converged")}
    for col in POINT_QUANTITIES:
        if col != "crss_MPa" and col in res:
            row[col] = res[col]
    for key, value in (res.get("estimates") or {}).items():
        row[f"estimate_{key}"] = value
    return row


def _extra_columns(rows: list[dict]) -> list[str]:
    seen = {c for r in rows for c in r}
    extra = [c for c in POINT_QUANTITIES if c != "crss_MPa" and c in seen]
    return extra + sorted(c for c in seen if c.startswith("estimate_"))


def _point_rows(runs: list[dict], rows: list[dict], keys: list[str], extra: list[str]) -> list[dict]:
    by_point: dict[int, list[dict]] = {}
    for row in rows:
        by_point.setdefault(row["point"], []).append(row)
    params = {r["point"]: r["params"] for r in runs}
    table = []
    for p in sorted(params):
        group = by_point.get(p, [])
        row = {"point": p, **{column_name(k): params[p][k] for k in keys}, "n_runs": len(group)}
        for col in _quantity_columns(extra):
            row.update(_stats(*POINT_QUANTITIES[col], [g.get(col) for g in group]))
        for col in ["orowan_MPa"] + [c for c in extra if c.startswith("estimate_")]:
            vals = [g[col] for g in group if g.get(col) is not None]
            row[_mean_column(col)] = float(np.mean(vals)) if vals else math.nan
        table.append(row)
    return table


def _stats(name: str, unit: str, values: list) -> dict:
    """Mean, sample std and the Student-t 95 % interval of the mean (NaN where undefined;
    :func:`dlsim.statistics.mean_interval`), as ``<name>_<statistic>_<unit>``."""
    iv = statistics.mean_interval([x for x in values if x is not None])
    return {f"{name}_{stat}_{unit}": value for stat, value in
            zip(POINT_STATISTICS, (iv.mean, iv.std, iv.sem, iv.lo, iv.hi))}


def _write_csv(path: Path, columns: list[str], rows: list[dict]) -> Path:
    buf = io.StringIO(newline="")
    writer = csv.DictWriter(buf, fieldnames=columns, extrasaction="ignore", restval="")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: _cell(v) for k, v in row.items()})
    output.write_file_atomic(path, buf.getvalue().encode("utf-8"))
    return path


def _cell(value):
    if isinstance(value, float):
        return "" if math.isnan(value) else repr(value)
    return value
