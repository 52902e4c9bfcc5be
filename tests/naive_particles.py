"""Slow NumPy twins of the kernels of :mod:`dlsim.particles`, for the tests.

They use the same random numbers in the same order as the compiled code, so a twin and its kernel
must agree exactly, not only statistically.
"""
from __future__ import annotations

import math

import numpy as np

from dlsim.particles import RSA_MIN_BATCH


def min_image(d: np.ndarray, period: np.ndarray) -> np.ndarray:
    """Periodic minimum image of separations ``d`` (..., 3) in a box of ``period`` (3,)."""
    return d - period * np.floor(d / period + 0.5)


def naive_rsa_positions(radii, box, rng, max_attempts):
    """Twin of :func:`dlsim.particles.rsa_positions`: brute-force overlap test against all spheres."""
    rad = np.asarray(radii, dtype=np.float64)
    box = np.asarray(box, dtype=np.float64)
    n = rad.size
    pos = np.zeros((n, 3))
    i = a = 0
    while i < n and a < max_attempts:
        trials = rng.random((max(2 * (n - i), RSA_MIN_BATCH), 3))
        for t in trials:
            if i == n or a == max_attempts:
                break
            a += 1
            c = np.array([t[0] * box[0], t[1] * box[1], (t[2] - 0.5) * box[2]])
            d = min_image(c - pos[:i], box)
            if np.all(np.sum(d * d, axis=1) >= (rad[i] + rad[:i]) ** 2):
                pos[i] = c
                i += 1
                a = 0
    return pos, i


def overlapping_pairs(pos: np.ndarray, radii: np.ndarray, box: np.ndarray, chunk: int = 256) -> int:
    """Count pairs of spheres closer than the sum of their radii (periodic minimum image).

    Every pair (i, j > i) is tested, ``chunk`` rows of i at a time.
    """
    n, count = len(radii), 0
    for start in range(0, n, chunk):
        stop = min(start + chunk, n)
        d2 = np.zeros((stop - start, n - start))
        for k in range(3):
            d = min_image(pos[start:stop, None, k] - pos[None, start:, k], box[k])
            d2 += d * d
        close = d2 < (radii[start:stop, None] + radii[None, start:]) ** 2
        rows, cols = np.nonzero(close)
        count += int(np.sum(cols > rows))  # j > i only: each pair once, no self-pair
    return count


def naive_saltykov_unfold(counts, delta):
    """Twin of :func:`dlsim.particles.unfold_sections` for k equal classes of width ``delta`` from 0.

    The Schwartz-Saltykov recurrence written out as in the textbook (Underwood, *Quantitative
    Stereology*, 1970), in radii: spheres of class j (1-based) have radius j delta; one of them per
    unit volume gives 2 delta (sqrt(j^2 - (i-1)^2) - sqrt(j^2 - i^2)) sections per unit area in
    section class i <= j.  Solved from the largest class down, one class at a time, with explicit
    loops and no matrix; negative results are returned as they come (no correction).
    """
    k = len(counts)
    n_v = [0.0] * k
    for j in range(k, 0, -1):
        from_larger = 0.0
        for m in range(j + 1, k + 1):
            from_larger += n_v[m - 1] * 2.0 * delta * (math.sqrt(m * m - (j - 1) ** 2) - math.sqrt(m * m - j * j))
        n_v[j - 1] = (counts[j - 1] - from_larger) / (2.0 * delta * math.sqrt(j * j - (j - 1) ** 2))
    return np.array(n_v)
