"""Wall time of the Orowan-loop relaxation (dlsim.loops), per loop and per run, on demo cases.

Runs each case once through ``dlsim.api.run_case`` (nothing written) with the relaxation timed
around :func:`dlsim.api.relax_left_loops`, and prints per case: the loops relaxed, their
statuses, the steps of the longest, the relaxation's time per loop and per run, and the run's
wall time beside it.  One numba thread, the JIT warmed first; the load average is printed (the
machine may be shared).

    python benchmarks/bench_loops.py [CASE.toml ...]

Default cases: the dispersoid–precipitate demo (cases/alloy_precipitates.toml) and the random
impenetrable points of tests/test_solver.py (1024 points, node spacing 0.2 L_s, seed 102, the
field whose loops once stalled an earlier relaxation).
"""
from __future__ import annotations

import argparse
import os
import time
from pathlib import Path

import numpy as np

import dlsim.api as api
from dlsim.loops import LOOP_STATUS_NAMES

ROOT = Path(__file__).resolve().parent.parent
POINTS_CASE = {
    "seed": 102, "material": {"symbol": "Al"},
    "line": {"length": 32.0, "node_spacing": 0.2},
    "obstacles": {"kind": "random", "spacing_nm": 50.0, "critical_angle_deg": 0.0},
    "loading": {"stress_step": 0.02, "tolerance": 1e-3, "bisections": 5},
    "solver": {"method": "nodal"},
}


def timed_run(case) -> dict:
    """Run ``case``; return the wall times of the run and of its loop relaxations."""
    calls = []
    relax = api.relax_left_loops

    def timed(*args, **kwargs):
        t0 = time.perf_counter()
        report = relax(*args, **kwargs)
        calls.append((time.perf_counter() - t0, report))
        return report

    api.relax_left_loops = timed
    try:
        t0 = time.perf_counter()
        api.run_case(case, out_dir=False)
        wall = time.perf_counter() - t0
    finally:
        api.relax_left_loops = relax
    status = np.concatenate([r.status for _, r in calls]) if calls else np.zeros(0, int)
    steps = np.concatenate([r.steps for _, r in calls]) if calls else np.zeros(0, int)
    return {"wall": wall, "relax": sum(t for t, _ in calls), "loops": status.size,
            "steps_max": int(steps.max(initial=0)),
            "status": {name: int(np.count_nonzero(status == k))
                       for k, name in enumerate(LOOP_STATUS_NAMES) if np.any(status == k)}}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("cases", nargs="*", help="case files (default: the demo and 1024 points)")
    args = ap.parse_args()
    import numba
    numba.set_num_threads(1)
    cases = args.cases or [str(ROOT / "cases" / "alloy_precipitates.toml"), POINTS_CASE]
    warm = dict(POINTS_CASE, line={"length": 6.0, "node_spacing": 0.2})
    timed_run(warm)                                   # compile or load the kernels first
    print(f"{'case':28s} {'loops':>6s} {'steps max':>9s} {'per loop (ms)':>13s} "
          f"{'per run (s)':>11s} {'run (s)':>8s}  statuses  [load average]")
    for case in cases:
        name = Path(case).stem if isinstance(case, str) else f"points seed {case['seed']}"
        r = timed_run(case)
        per_loop = 1e3 * r["relax"] / r["loops"] if r["loops"] else float("nan")
        print(f"{name:28s} {r['loops']:6d} {r['steps_max']:9d} {per_loop:13.3f} "
              f"{r['relax']:11.3f} {r['wall']:8.1f}  {r['status']}  "
              f"[{os.getloadavg()[0]:.2f}]", flush=True)


if __name__ == "__main__":
    main()
