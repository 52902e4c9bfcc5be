"""Geometry of the periodic line shared by the kernel modules (a leaf: imports only numba).

The line runs along +x and is periodic in x with period Lx: node n is node 0 shifted by (Lx, 0).
"""
from __future__ import annotations

from numba import njit

from dlsim.jit import JIT


@njit(**JIT)
def neighbours(x, y, n, i, Lx):
    """Previous and next node of node i on the periodic line (the image across the seam)."""
    if i == 0:
        xm, ym = x[n - 1] - Lx, y[n - 1]
    else:
        xm, ym = x[i - 1], y[i - 1]
    if i == n - 1:
        xp, yp = x[0] + Lx, y[0]
    else:
        xp, yp = x[i + 1], y[i + 1]
    return xm, ym, xp, yp
