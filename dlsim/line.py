"""The state of the dislocation line: plain arrays with a fixed capacity, plus its loops.

The line is a closed chain of nodes periodic in x: node ``n`` is node 0 shifted by ``(Lx, 0)``.
Coordinates are reduced (lengths in b) and unwrapped (x runs over one period from node 0, y keeps
growing as the line glides).  Kernels write into these arrays in place and report when the
capacity runs out; :meth:`LineState.grow` then doubles it.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import contract as C
from . import kernels as K
from .contract import MIN_CAPACITY

#: Rows of segment pairs tested at once by :meth:`LineState.self_crossings` (bounds its memory).
CROSSING_CHUNK = 512


@dataclass
class LineState:
    """Nodes, pins and Orowan loops of one line (reduced units).

    Attributes
    ----------
    x, y : (cap,) float64
        Node positions (b); the first ``n`` entries are used.
    pin : (cap,) int64
        Obstacle index holding each node, -1 for a free node.
    ign : (cap,) int64
        Obstacle each node has just left (not re-captured by its own arms), -1 otherwise.
    meta : (N_META,) int64
        Node count, loop counts, step and event counters (``contract.M_*`` slots).
    loop_x, loop_y, loop_pin : (loop_cap,) arrays
        Loop nodes, CSR with ``loop_off`` (loops closed: the last node joins the first).
    loop_off : (max_loops + 1,) int64
        Offsets of each loop in the loop arrays.
    Lx : float
        Period of the line (b).
    """

    x: np.ndarray
    y: np.ndarray
    pin: np.ndarray
    ign: np.ndarray
    meta: np.ndarray
    loop_x: np.ndarray
    loop_y: np.ndarray
    loop_pin: np.ndarray
    loop_off: np.ndarray
    Lx: float

    @classmethod
    def straight(cls, Lx: float, y0: float, spacing: float) -> "LineState":
        """A straight line along x at height ``y0`` with nodes about ``spacing`` apart."""
        n = max(C.MIN_NODES, int(np.ceil(Lx / spacing)))
        cap = max(MIN_CAPACITY, 4 * n)
        x = np.zeros(cap)
        x[:n] = (np.arange(n) + 0.5) * (Lx / n)
        y = np.full(cap, float(y0))
        meta = np.zeros(C.N_META, dtype=np.int64)
        meta[C.M_N] = n
        loop_cap = MIN_CAPACITY
        return cls(x, y, np.full(cap, -1, np.int64), np.full(cap, -1, np.int64), meta,
                   np.zeros(loop_cap), np.zeros(loop_cap), np.full(loop_cap, -1, np.int64),
                   np.zeros(loop_cap + 1, np.int64), float(Lx))

    @property
    def n(self) -> int:
        return int(self.meta[C.M_N])

    @property
    def capacity(self) -> int:
        return self.x.shape[0]

    @property
    def n_loops(self) -> int:
        return int(self.meta[C.M_NLOOPS])

    @property
    def line(self) -> tuple:
        """The kernels' ``line`` group (x, y, pin, ign), dlsim.contract."""
        return self.x, self.y, self.pin, self.ign

    @property
    def loop_arrays(self) -> tuple:
        """The kernels' ``loops`` group (loop_x, loop_y, loop_pin, loop_off), dlsim.contract."""
        return self.loop_x, self.loop_y, self.loop_pin, self.loop_off

    def copy(self) -> "LineState":
        return LineState(self.x.copy(), self.y.copy(), self.pin.copy(), self.ign.copy(),
                         self.meta.copy(), self.loop_x.copy(), self.loop_y.copy(),
                         self.loop_pin.copy(), self.loop_off.copy(), self.Lx)

    def grow(self) -> None:
        """Double the node and loop capacities, keeping the contents."""
        def bigger(a, fill):
            out = np.full(2 * a.shape[0], fill, dtype=a.dtype)
            out[: a.shape[0]] = a
            return out

        self.x, self.y = bigger(self.x, 0.0), bigger(self.y, 0.0)
        self.pin, self.ign = bigger(self.pin, -1), bigger(self.ign, -1)
        self.loop_x, self.loop_y = bigger(self.loop_x, 0.0), bigger(self.loop_y, 0.0)
        self.loop_pin = bigger(self.loop_pin, -1)
        off = np.zeros(2 * self.loop_off.shape[0] - 1, np.int64)
        off[: self.loop_off.shape[0]] = self.loop_off
        self.loop_off = off

    def nodes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Copies of the used x, y (b) and pin arrays."""
        n = self.n
        return self.x[:n].copy(), self.y[:n].copy(), self.pin[:n].copy()

    def area(self) -> float:
        """Area between the line and y = 0 over one period (b²)."""
        return float(K.line_area(self.x, self.y, self.n, self.Lx))

    def mean_glide(self) -> float:
        """Mean position of the line in the glide direction (b)."""
        return self.area() / self.Lx

    def self_crossings(self) -> int:
        """Pairs of non-adjacent segments of one period that cross, images in x included.

        A diagnostic of the final lines (a line that crosses itself holds a loop it should have
        cut off); O(n²) in chunks, so meant for results and tests, not for a time step.
        """
        n = self.n
        x = np.append(self.x[:n], self.x[0] + self.Lx)
        y = np.append(self.y[:n], self.y[0])
        ax, ay, bx, by = x[:-1], y[:-1], x[1:], y[1:]
        count = 0
        for shift in (0.0, self.Lx):
            for lo in range(0, n, CROSSING_CHUNK):
                i = np.arange(lo, min(n, lo + CROSSING_CHUNK))[:, None]
                j = np.arange(n)[None, :]
                hit = _segments_cross(ax[i], ay[i], bx[i], by[i],
                                      ax[j] + shift, ay[j], bx[j] + shift, by[j])
                gap = (j - i) % n
                if shift == 0.0:
                    hit &= (j > i) & (gap != 1) & (gap != n - 1)
                else:   # segment j one period to the right: adjacent only across node n = node 0
                    hit &= ~((i == n - 1) & (j == 0))
                count += int(np.count_nonzero(hit))
        return count

    def loops(self) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
        """Each recorded loop as (x, y, pin) arrays (b)."""
        off = self.loop_off
        return [(self.loop_x[off[k]:off[k + 1]].copy(), self.loop_y[off[k]:off[k + 1]].copy(),
                 self.loop_pin[off[k]:off[k + 1]].copy()) for k in range(self.n_loops)]


def _segments_cross(ax, ay, bx, by, cx, cy, dx, dy) -> np.ndarray:
    """Whether segments AB and CD cross at a point interior to both (strict orientation test)."""
    def orient(px, py, qx, qy, rx, ry):
        return np.sign((qx - px) * (ry - py) - (qy - py) * (rx - px))

    return ((orient(ax, ay, bx, by, cx, cy) * orient(ax, ay, bx, by, dx, dy) < 0)
            & (orient(cx, cy, dx, dy, ax, ay) * orient(cx, cy, dx, dy, bx, by) < 0))
