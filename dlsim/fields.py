"""Obstacle fields in the glide plane: a periodic box of obstacles with radii and strengths.

All quantities are reduced (lengths in b, forces in G b²).  Point obstacles have radius 0.  The
strength of an obstacle is its critical force ``fc``: the force the line must exert on it to pass;
``np.inf`` marks an impenetrable obstacle, bypassed only by an Orowan loop.  Particle populations
(:mod:`dlsim.particles`) build the same type.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from . import particles as P

if TYPE_CHECKING:  # the case layer sits above this one: only its type is used here
    from .case import Case, PopulationSpec

#: Ring points on the perimeter of an impenetrable disc are at most this fraction of the node
#: spacing h apart.  The remesher keeps every segment at least h/2 long (solver.LMIN_FRACTION), so
#: a segment reaching the disc is at least twice as long as the gap between two ring points and
#: cannot slip between them without sweeping one: the kernel captures it and the disc holds.
RING_GAP_FRACTION = 0.25
#: Least number of points of a ring; a disc whose ring would need fewer is so small against the
#: node spacing that one impenetrable point at its centre stands for it.
MIN_RING_POINTS = 6


@dataclass(frozen=True)
class ParticleTable:
    """The particles behind a field, one row each (reduced units).

    Attributes
    ----------
    x, y, rho : (k,) float64
        Centre (b) and planar radius ρ (b; 0 for a point obstacle).
    fc : (k,) float64
        Critical force (G b²); ``inf`` for a particle that is bypassed, never sheared.
    population : (k,) int64
        Index into the field's ``population_names``.
    """

    x: np.ndarray
    y: np.ndarray
    rho: np.ndarray
    fc: np.ndarray
    population: np.ndarray

    @property
    def n(self) -> int:
        return int(self.x.shape[0])


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
    particle : (m,) int64 or None
        Row of ``particles`` each obstacle point belongs to (the ring points of a disc share
        one); None when every obstacle is its own particle.
    particles : ParticleTable or None
        The particles (one row each) of a field built from populations.
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
    particle: np.ndarray | None = None
    particles: "ParticleTable | None" = None

    @property
    def table(self) -> "ParticleTable":
        """One row per particle (for a plain point field: one per obstacle)."""
        if self.particles is not None:
            return self.particles
        return ParticleTable(self.x, self.y, self.radius, self.fc, self.population)

    @property
    def owner(self) -> np.ndarray:
        """(m,) int64: the particle each obstacle point belongs to."""
        return np.arange(self.n) if self.particle is None else self.particle

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


def ring_points(x: np.ndarray, y: np.ndarray, rho: np.ndarray, max_gap: float
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Impenetrable point obstacles on the perimeters of discs, at most ``max_gap`` apart.

    A line cannot enter a disc drawn this way: it wraps the ring, its arms meet behind the disc
    and reconnect, leaving an Orowan loop held by the ring points (docs/physics.md, finite
    particles).
    Discs too small for :data:`MIN_RING_POINTS` points become one point at their centre.

    Parameters
    ----------
    x, y, rho : (k,) float64
        Disc centres and planar radii (b).
    max_gap : float
        Largest distance between neighbouring ring points (b).

    Returns
    -------
    px, py : (m,) float64
        Ring points (b), not yet wrapped into the box.
    owner : (m,) int64
        Index of the disc each point belongs to.
    """
    count = np.ceil(2.0 * np.pi * rho / max_gap).astype(np.int64)
    count = np.where(count < MIN_RING_POINTS, 1, count)
    owner = np.repeat(np.arange(rho.shape[0]), count)
    start = np.cumsum(count) - count
    k = np.arange(owner.shape[0]) - start[owner]
    angle = 2.0 * np.pi * k / count[owner]
    r = np.where(count[owner] > 1, rho[owner], 0.0)
    return x[owner] + r * np.cos(angle), y[owner] + r * np.sin(angle), owner


def particle_field(table: ParticleTable, Lx: float, Ly: float, spacing: float,
                   node_spacing: float, names: tuple) -> ObstacleField:
    """The obstacle field of a set of particles (reduced units).

    A particle with ``fc = inf`` and ρ > 0 is an impenetrable disc, drawn as a ring of
    impenetrable points (:func:`ring_points`, gap RING_GAP_FRACTION × ``node_spacing``); every
    other particle is a point obstacle at its centre with its ``fc``.  Overlapping discs simply
    overlap.  ``radius`` of a ring point is its disc's ρ, so plots and files keep the sizes.
    """
    disc = np.isinf(table.fc) & (table.rho > 0.0)
    idx = np.flatnonzero(disc)
    px, py, own = ring_points(table.x[idx], table.y[idx], table.rho[idx],
                              RING_GAP_FRACTION * node_spacing)
    pts = np.flatnonzero(~disc)
    owner = np.concatenate([idx[own], pts]).astype(np.int64)
    x = np.mod(np.concatenate([px, table.x[pts]]), Lx)
    y = np.mod(np.concatenate([py, table.y[pts]]), Ly)
    # mod can round a tiny negative up to exactly the period: keep the half-open box
    x[x >= Lx], y[y >= Ly] = 0.0, 0.0
    return ObstacleField(x, y, table.rho[owner], table.fc[owner], table.population[owner],
                         float(Lx), float(Ly), float(spacing), "particles", tuple(names),
                         owner, table)


def section_strength(pop: "PopulationSpec", rho_nm: np.ndarray, units, gamma: float
                     ) -> np.ndarray:
    """Critical force (G b²) of each section of a population; ``inf`` where it is bypassed.

    Model: a shearable particle acts as a point obstacle of strength F_c(ρ) at its centre (a
    standard simplification of precipitation hardening, cf. Ardell 1985).  F_c(ρ) is ``constant``
    or ``power_law`` A (ρ / 1 nm)^m with ρ the planar radius in nm and A in nN.  Where F_c(ρ) ≥ 2Γ
    the line cannot shear the particle and bypasses it by the Orowan process: the section becomes
    an impenetrable disc.  ``point`` obstacles have F_c = 2Γ cos(φ_c/2) whatever their size.
    """
    if pop.strength == "impenetrable":
        return np.full(rho_nm.shape, np.inf)
    if pop.strength == "point":
        fc = 2.0 * gamma * math.cos(0.5 * math.radians(pop.critical_angle_deg))
        return np.full(rho_nm.shape, np.inf if pop.critical_angle_deg == 0.0 else fc)
    if pop.strength == "constant":
        fc = np.full(rho_nm.shape, units.force(pop.critical_force_nN))
    else:
        fc = units.force(pop.prefactor_nN) * rho_nm ** pop.exponent
    return np.where(fc >= 2.0 * gamma, np.inf, fc)


def population_sections(pop: "PopulationSpec", Lx_nm: float, Ly_nm: float,
                        rng: np.random.Generator) -> P.Sections:
    """The glide-plane sections of one population (nm): sampled in 3D, or read from its file."""
    if pop.arrangement == "file":
        read = P.read_particles_csv if pop.file_kind == "particles" else P.read_sections_csv
        return read(pop.file, f"{pop.key}.file", Lx_nm, Ly_nm)
    return P.sample_sections(pop.size_distribution(), volume_fraction=pop.volume_fraction,
                             number_density=pop.number_density_per_nm3,
                             arrangement=pop.arrangement, Lx_nm=Lx_nm, Ly_nm=Ly_nm, rng=rng,
                             source=pop.source, key=pop.key)


def realization_rngs(seed: int, realization: int, count: int) -> list[np.random.Generator]:
    """One generator per population of a realization: SeedSequence(seed, spawn_key=(r, i)).

    The same as the i-th child of the r-th child of ``SeedSequence(seed)``, so a realization does
    not depend on how many others are drawn.
    """
    return [np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(realization, i)))
            for i in range(count)]


def populations_table(case: "Case", realization: int = 0
                      ) -> tuple[ParticleTable, list[P.Sections]]:
    """Every population's sections of one realization, as particles in reduced units.

    Returns the table and, per population, its sections (nm) for statistics.
    """
    u, line = case.units, case.line
    gamma = case.line.tension_alpha
    rngs = realization_rngs(case.seed, realization, len(case.populations))
    parts, sections = [], []
    for i, (pop, rng) in enumerate(zip(case.populations, rngs)):
        sec = population_sections(pop, line.length_nm, line.height_nm, rng)
        sections.append(sec)
        fc = section_strength(pop, sec.rho_nm, u, gamma)
        rho = np.zeros_like(sec.rho_nm) if pop.strength == "point" else u.length(sec.rho_nm)
        parts.append((u.length(sec.x_nm), u.length(sec.y_nm), rho, fc,
                      np.full(len(sec), i, np.int64)))
    cat = [np.concatenate([p[k] for p in parts]) for k in range(5)]
    return ParticleTable(*cat[:4], cat[4].astype(np.int64)), sections


def population_field(case: "Case", realization: int = 0, table: ParticleTable | None = None
                     ) -> ObstacleField:
    """The field of a case with ``[[populations]]`` (reduced units), or of a given ``table``."""
    u = case.units
    if table is None:
        table, _ = populations_table(case, realization)
    return particle_field(table, u.length(case.line.length_nm), u.length(case.line.height_nm),
                          u.length(case.spacing_nm), u.length(case.line.node_spacing_nm),
                          tuple(p.name for p in case.populations))


def enlarged_table(table: ParticleTable, loops_per_particle: np.ndarray, loop_spacing: float
                   ) -> ParticleTable:
    """The particles seen by the next dislocation after Orowan loops were left.

    Model (a choice of dlsim): each loop around a particle makes it an impenetrable disc whose
    radius grows by ``loop_spacing`` (b) per loop, standing for the repulsion of the loops
    stacked around it (docs/physics.md: the loop makes the particle a larger obstacle).  Untouched
    particles keep their strength.
    """
    looped = loops_per_particle > 0
    rho = table.rho + loop_spacing * loops_per_particle
    fc = np.where(looped, np.inf, table.fc)
    return ParticleTable(table.x, table.y, np.where(looped, rho, table.rho), fc,
                         table.population)
