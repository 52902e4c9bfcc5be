"""Wall time of sampling glide-plane fields of about 10^4 sections (Poisson and hard spheres).

Run: ``python benchmarks/bench_particles.py``.  The JIT is warmed first; each row is the best of
three runs.  The box is square, sized so that the expected count 2<r> N_V Lx Ly is 10^4.
"""
from __future__ import annotations

import math
import time

import numpy as np

from dlsim.particles import LSW, LogNormal, SingleSize, expected_section_stats, sample_sections

TARGET_SECTIONS = 10_000
REPEATS = 3


def _time(dist, f, arrangement, rng):
    e = expected_section_stats(dist, volume_fraction=f)
    L = math.sqrt(TARGET_SECTIONS / e["areal_density_per_nm2"])
    best, n = math.inf, 0
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        s = sample_sections(dist, volume_fraction=f, arrangement=arrangement, Lx_nm=L, Ly_nm=L, rng=rng)
        best, n = min(best, time.perf_counter() - t0), len(s)
    return L, n, best


def main():
    rng = np.random.default_rng(1)
    sample_sections(SingleSize(5.0), volume_fraction=0.05, arrangement="hard_spheres",
                    Lx_nm=200.0, Ly_nm=200.0, rng=rng)  # warm the JIT
    print(f"{'distribution':<22}{'f':>6}{'arrangement':>14}{'box nm':>10}{'sections':>10}{'time s':>9}")
    for dist in (SingleSize(5.0), LogNormal(5.0, 0.3), LSW(5.0)):
        for f in (0.05, 0.2, 0.3):
            for arrangement in ("poisson", "hard_spheres"):
                L, n, t = _time(dist, f, arrangement, rng)
                print(f"{repr(dist):<22}{f:>6}{arrangement:>14}{L:>10.0f}{n:>10}{t:>9.4f}")


if __name__ == "__main__":
    main()
