"""The compiled core and numba's on-disk cache across processes (dlsim.jit).

A fresh install starts from an empty cache that several worker processes fill at once; these tests
run that situation in subprocesses (``NUMBA_CACHE_DIR`` only takes effect in a new interpreter).
The two numba defects the package works round are named in ``dlsim/jit.py``: cache entries keyed
without the ``parallel`` option (numba 0.68, ``numba/core/caching.py``, ``_index_key``) and a
cached caller of a parallel kernel that does not restart the threading layer (numba issue #8578).
"""
from __future__ import annotations

import importlib
import json
import os
import pkgutil
import subprocess
import sys
import textwrap

import pytest
from numba.core.registry import CPUDispatcher

import dlsim

# A line with self-stress and one Orowan loop stored, stepped 200 times, both large enough that
# relax_line runs the parallel self-stress and loop-stress kernels (3 n² and 3 n m pairs, one image
# on each side, at least PARALLEL_MIN_PAIRS), so that the threads start inside the cached stepper.
# Prints the cache hits of relax_line.
STEP_WITH_LOOP = """
import numpy as np
from dlsim import contract as C
from dlsim import kernels as K
from dlsim.fields import square_field
from dlsim.line import LineState
from dlsim.solver import Elasticity, LineModel, Protocol, Relaxer
L = 6000.0
e = Elasticity(model="self_stress", burgers_angle=0.0, core_radius=1.0, outer_radius=L,
               images=1, refresh=10)
relaxer = Relaxer(square_field(L, 1, 1, np.inf), LineModel(0.5, 10.0, elasticity=e))
s = LineState.straight(L, 0.0, 10.0)
m = 600
t = np.linspace(0.0, 2.0 * np.pi, m, endpoint=False)
s.loop_x[:m], s.loop_y[:m] = 3000.0 + 950.0 * np.cos(t), 1600.0 + 950.0 * np.sin(t)
s.loop_off[1], s.meta[C.M_NLOOPS], s.meta[C.M_NLOOPNODES] = m, 1, m
assert 3 * min(s.n, m) * s.n >= C.PARALLEL_MIN_PAIRS
name, steps = relaxer.relax(s, 0.2 / L, s.area(), Protocol(0.1 / L, 1e-4 / L, L, 0, 200, 1.0))
assert steps == 200, (name, steps)
print(sum(K.relax_line.stats.cache_hits.values()))
"""
# The parallel kernels alone, so that the next process compiling relax_line loads them from the
# cache (the case where numba records no reloader of the threading layer in relax_line's entry).
PARALLEL_KERNELS = """
import numpy as np
from dlsim import elastic as E
n = 64
x = np.linspace(0.0, 100.0, n, endpoint=False) + 0.3
y = np.sin(x / 10.0)
t = np.linspace(0.0, 2.0 * np.pi, 20, endpoint=False)
out = np.zeros(n)
E.loop_stress(x, y, n, 50 + 5 * np.cos(t), 30 + 5 * np.sin(t), np.array([0, 20]), 1, 100.0,
              0.0, 1 / 3, 1.0, 1, out)
E.self_stress(x, y, n, 100.0, 0.0, 1 / 3, 1.0, 1, 0.0, out)
"""


def run_fresh(code: str, cache_dir, cwd=None) -> subprocess.CompletedProcess:
    """Run ``code`` in a new interpreter whose numba cache is ``cache_dir``."""
    env = dict(os.environ, NUMBA_CACHE_DIR=str(cache_dir))
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], env=env, cwd=cwd,
                          capture_output=True, text=True, timeout=600)


def test_dispatchers_have_their_own_python_function():
    # One cache entry per Python function, whatever the jit options (dlsim.jit): two dispatchers
    # of one function would share compiled code across processes.
    seen: dict = {}
    for info in pkgutil.iter_modules(dlsim.__path__):
        module = importlib.import_module(f"dlsim.{info.name}")
        for name, obj in vars(module).items():
            if isinstance(obj, CPUDispatcher) and obj.py_func.__module__ == module.__name__:
                owner = seen.setdefault(obj.py_func, f"{module.__name__}.{name}")
                assert owner == f"{module.__name__}.{name}", (
                    f"{module.__name__}.{name} and {owner} compile one Python function")
    assert len(seen) > 50


@pytest.mark.slow
def test_cached_stepper_calling_parallel_kernels_runs_in_a_new_process(tmp_path):
    # numba #8578: relax_line compiled while its parallel callees came from the cache, then loaded
    # from the cache by a third process, ran parallel code on a threading layer nobody had started
    # (segmentation fault, exit -11) before dlsim.kernels started it on import.
    cache = tmp_path / "numba"
    first = run_fresh(PARALLEL_KERNELS, cache)
    assert first.returncode == 0, first.stderr
    compiled = run_fresh(STEP_WITH_LOOP, cache)
    assert compiled.returncode == 0, compiled.stderr
    loaded = run_fresh(STEP_WITH_LOOP, cache)
    assert loaded.returncode == 0, loaded.stderr
    assert int(loaded.stdout.split()[-1]) >= 1      # relax_line did come from the cache


# Small cases (about a second each once compiled), one sweep over every line model so that the
# workers compile each model's kernels into the same empty cache; the self-stress runs leave
# Orowan loops, so the loop-stress kernel runs too.
MODELS = ["constant", "dewit_koehler", "self_stress"]

SWEEP_SCRIPT = """
import json, sys
from pathlib import Path
from dlsim.sweep import run_sweep
models = json.loads(sys.argv[1])
base = {"seed": 3, "material": {"symbol": "Al"},
        "line": {"length": 4, "node_spacing": 0.1},
        "obstacles": {"kind": "random", "spacing_nm": 20.0, "critical_angle_deg": 0.0},
        "loading": {"stress_step": 0.1, "bisections": 2},
        "elasticity": {"images": 1, "refresh": 10},
        "solver": {"method": "nodal"}}       # the nodal stepper's kernels are under test
counts = []
# two sweeps, each on a new pool: the first compiles in both workers at once into the empty
# cache, the second's workers load what the first ones wrote
for k, angles in enumerate(([0.0], [30.0])):
    sweep = {"base": base, "seeds": 2, "combine": "grid",
             "vary": {"elasticity.model": models, "obstacles.critical_angle_deg": angles}}
    out = Path(sys.argv[2]) / f"sweep{k}"
    run_sweep(sweep, out_dir=out, workers=2, progress=False)
    counts.append(sum(1 for p in (out / "runs").iterdir() if (p / "result.json").is_file()))
print(json.dumps(counts))
"""


@pytest.mark.slow
def test_sweep_from_an_empty_cache_loses_no_run(tmp_path):
    # Issue of fresh installs: pool workers compiling into, then loading from, an empty numba
    # cache must not crash (BrokenProcessPool) and every run, of every line model, must be
    # written.
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path / "numba"))
    done = subprocess.run([sys.executable, "-c", SWEEP_SCRIPT, json.dumps(MODELS),
                           str(tmp_path)], env=env, capture_output=True, text=True, timeout=900)
    assert done.returncode == 0, done.stderr[-2000:]
    assert json.loads(done.stdout.strip().splitlines()[-1]) == [6, 6]
