"""Obstacle fields in the glide plane: a periodic box of obstacles with radii and strengths.

All quantities are reduced (lengths in b, forces in G b²).  Point obstacles have radius 0.  The
strength of an obstacle is its critical force ``fc``: the force the line must exert on it to pass;
``np.inf`` marks an impenetrable obstacle, bypassed only by an Orowan loop.  Particle populations
(:mod:`dlsim.particles`) build the same type.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class ObstacleField:
    """Obstacles in a periodic Lx × Ly box of the glide plane (reduced units).

    Attributes
    ----------
    x, y, radius : (m,) float64
        Centres (b) in [0, Lx) × [0, Ly) and planar radii (b; 0 for points).
    fc : (m,) float64
        Critical force of each obstacle (G b²); ``inf`` for impenetrable.
    population : (m,) int64
        Index into ``population_names``.
    Lx, Ly : float
        Box (b), periodic in both directions.
    spacing : float
        Reference spacing (b): L for the square array, L_s = N_A^(-1/2) for random fields.
    kind : str
        "square", "random" or "particles".
    population_names : tuple of str
    """

    x: np.ndarray
    y: np.ndarray
    radius: np.ndarray
    fc: np.ndarray
    population: np.ndarray
    Lx: float
    Ly: float
    spacing: float
    kind: str
    population_names: tuple = field(default=("obstacles",))

    @property
    def n(self) -> int:
        return int(self.x.shape[0])

    @property
    def density(self) -> float:
        """Obstacles per unit area (b⁻²)."""
        return self.n / (self.Lx * self.Ly)

    def cell_list(self, cell_size: float | None = None):
        """Periodic CSR cell list: (cstart, citems, ncx, ncy), cells about ``cell_size`` wide.

        The default cell is the mean spacing, so a cell holds about one obstacle.
        """
        size = self.spacing if cell_size is None else cell_size
        ncx = max(1, int(self.Lx / size))
        ncy = max(1, int(self.Ly / size))
        ix = np.minimum((self.x / (self.Lx / ncx)).astype(np.int64), ncx - 1)
        iy = np.minimum((self.y / (self.Ly / ncy)).astype(np.int64), ncy - 1)
        cell = ix + ncx * iy
        order = np.argsort(cell, kind="stable").astype(np.int64)
        counts = np.bincount(cell, minlength=ncx * ncy)
        cstart = np.zeros(ncx * ncy + 1, np.int64)
        np.cumsum(counts, out=cstart[1:])
        return cstart, order, ncx, ncy


def _uniform(m: int, value: float) -> np.ndarray:
    return np.full(m, float(value))


def square_field(spacing: float, nx: int, ny: int, fc: float) -> ObstacleField:
    """Regular square array of point obstacles, rows parallel to x.

    Obstacles sit at ((i + ½) L, (j + ½) L), so a line along y = 0 starts midway between rows.
    """
    gx, gy = np.meshgrid((np.arange(nx) + 0.5) * spacing, (np.arange(ny) + 0.5) * spacing)
    m = nx * ny
    return ObstacleField(gx.ravel().copy(), gy.ravel().copy(), np.zeros(m), _uniform(m, fc),
                         np.zeros(m, np.int64), nx * spacing, ny * spacing, spacing, "square")


def random_field(Lx: float, Ly: float, density: float, fc: float,
                 rng: np.random.Generator) -> ObstacleField:
    """Uniform random (Poisson) points: round(density·Lx·Ly) obstacles placed independently.

    The count is fixed rather than Poisson-distributed so that the mean square spacing
    L_s = N_A^(-1/2) of the field is the requested one.
    """
    m = int(round(density * Lx * Ly))
    x = rng.uniform(0.0, Lx, m)
    y = rng.uniform(0.0, Ly, m)
    return ObstacleField(x, y, np.zeros(m), _uniform(m, fc), np.zeros(m, np.int64), Lx, Ly,
                         float(density) ** -0.5, "random")
