"""What one case may ask for: size budgets before anything is allocated, and plausible ranges.

:func:`check_case` runs at the end of :func:`dlsim.case.load_case`, on the resolved case and
before any field, line or particle is built.  It

- estimates what the case would build (obstacle points, 3-D particles in the sampling slab, nodes
  of the starting line, relaxations of the stress ramp, memory) and refuses what exceeds the
  documented limits below, naming the key that drives the estimate;
- refuses values where the model breaks down (an error), and warns in one line where a value lies
  outside real materials but the model still holds (the run goes on; the warning is printed and
  stored in ``result.json``).

Hard limits on single keys (integer ranges, caps that keep arithmetic finite) live in the schema
(:data:`dlsim.case.SCHEMA`); the limits here join several keys.  The table of every limit and range
is :data:`RANGES` (the case-file reference lists it).
"""
from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import TYPE_CHECKING

from . import particles as P
from .errors import CaseError

if TYPE_CHECKING:  # the case layer imports this module
    from .case import Case

#: The stress ramp gives up (no CRSS) above τ_f + this many Orowan stresses 2Γ/(bL).
MAX_STRESS_IN_OROWAN = 5.0
#: Relaxations the ramp may need at most: stress steps below MAX_STRESS_IN_OROWAN / this are
#: refused (a step of 5e-4 of 2Γ/(bL) already resolves the CRSS far below its statistical spread).
MAX_RAMP_RELAXATIONS = 10_000
MIN_STRESS_STEP = MAX_STRESS_IN_OROWAN / MAX_RAMP_RELAXATIONS
#: Obstacle points of one field (particles' ring points included): about 130 B each in the field,
#: its cell list and the kernels' copies, so 2e7 points need about 2.6 GB.
MAX_OBSTACLES = 20_000_000
#: Nodes of the straight starting line (box width / node spacing).
MAX_INITIAL_NODES = 2_000_000
#: Spheres placed in the sampling slab of one realization (the particle module's own cap).
MAX_PARTICLES = 10_000_000
#: Fraction of the machine's physical memory one case may plan to use.
MEMORY_FRACTION = 0.5
#: Bytes per obstacle point (field arrays, cell list, kernel copies) and per node of line
#: capacity (state, buffers and the 14 + 3 work rows of the stepper), and how far a line's node
#: count may grow over its starting one as it bows and wraps (lines through random fields were
#: seen to grow 2-5 times; capacity doubles, so 16 covers growth with room).
BYTES_PER_OBSTACLE = 130
BYTES_PER_NODE = 8 * 26
NODE_GROWTH = 16
#: A line-tension model needs obstacles many Burgers vectors apart (the line between two pins is
#: a continuum curve): below MIN_SPACING_B it is refused, below PLAUSIBLE_SPACING_B a warning.
MIN_SPACING_B = 5.0
PLAUSIBLE_SPACING_B = 20.0
#: A node spacing below half a Burgers vector resolves nothing a line model holds.
MIN_NODE_SPACING_B = 0.5
#: Self-stress pair interactions per evaluation (N² (2K+1), N nodes, K images) above which a
#: case is refused (about a minute per time step at 2e8 pairs/s), and above which it is warned.
MAX_SELF_STRESS_PAIRS = 1e10
WARN_SELF_STRESS_PAIRS = 1e8
#: The ideal shear strength of a crystal is about G/(2π) (Frenkel's estimate; Hirth & Lothe,
#: Theory of Dislocations, ch. 1): a friction stress at or above it leaves no room for dislocation
#: glide.  Lattice friction of real metals stays below about 1e-2 G (common practice).
IDEAL_STRENGTH_OVER_G = 1.0 / (2.0 * math.pi)
PLAUSIBLE_FRICTION_OVER_G = 1e-2
#: Random fields with fewer expected obstacles than this have no statistics to speak of.
MIN_RANDOM_OBSTACLES = 4


@dataclass(frozen=True)
class Range:
    """A documented range of one quantity: an error outside ``valid``, a warning outside
    ``plausible`` (either may be None)."""

    quantity: str
    keys: str
    valid: str | None
    plausible: str | None
    why: str


#: Every limit and range, for the case-file reference (docs/cases.md).
RANGES: tuple[Range, ...] = (
    Range("obstacle points of a field", "line.length, line.height, density, populations",
          f"<= {MAX_OBSTACLES:.0e}", None, "memory of the field and its cell list"),
    Range("spheres in the sampling slab", "populations, line.length, line.height",
          f"<= {MAX_PARTICLES:.0e}", None, "memory of the 3-D placement"),
    Range("nodes of the starting line", "line.length, line.node_spacing",
          f"<= {MAX_INITIAL_NODES:.0e}", None, "memory of the line"),
    Range("planned memory", "all sizes", f"<= {MEMORY_FRACTION:g} of physical memory", None,
          "the machine"),
    Range("obstacle spacing / b", "obstacles, populations, material.burgers_nm",
          f">= {MIN_SPACING_B:g}", f">= {PLAUSIBLE_SPACING_B:g}",
          "a line-tension model needs obstacles many b apart"),
    Range("node spacing / b", "line.node_spacing, line.node_spacing_nm",
          f">= {MIN_NODE_SPACING_B:g}", None, "nothing below the core is resolved"),
    Range("friction stress / G", "friction.stress_MPa", f"< 1/(2π)",
          f"<= {PLAUSIBLE_FRICTION_OVER_G:g}", "ideal shear strength G/(2π) (Frenkel)"),
    Range("stress step of the ramp", "loading.stress_step", f">= {MIN_STRESS_STEP:g}", None,
          f"at most {MAX_RAMP_RELAXATIONS} ramp relaxations"),
    Range("expected obstacles of a random field", "line.length, line.height, density",
          f">= {MIN_RANDOM_OBSTACLES}", ">= 30 L_s a side (warning)",
          "statistics of a random field; small boxes read high"),
    Range("self-stress pair interactions per evaluation", "elasticity.model, line",
          f"<= {MAX_SELF_STRESS_PAIRS:.0e}", f"<= {WARN_SELF_STRESS_PAIRS:.0e}",
          "O(N²) cost per time step"),
    Range("shear modulus", "material.shear_modulus_GPa", None, "1-600 GPa",
          "metals and ceramics"),
    Range("Poisson ratio", "material.poisson_ratio", None, "0-0.49", "metals"),
    Range("Burgers vector", "material.burgers_nm", None, "0.1-1 nm", "metals and intermetallics"),
    Range("line tension factor α", "line.tension_alpha", None, "0.1-2",
          "Γ = α G b², α ≈ 0.5 common practice"),
    Range("particle radius", "populations[i].radius_nm, mean_radius_nm", None, ">= b",
          "a particle smaller than b is a solute: use strength = \"point\""),
    Range("log-normal σ of ln r", "populations[i].sigma", "<= 3", "<= 1",
          "measured size distributions have σ of about 0.1-0.5 (common practice)"),
)


def _memory_bytes() -> float:
    """Physical memory of the machine (bytes); infinite where it cannot be read."""
    try:
        return float(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return math.inf


def _given(case: "Case", section: str, *names: str) -> str:
    """The dotted key the user gave among ``names`` of ``section`` (the first by default)."""
    table = case.raw.get(section, {}) if isinstance(case.raw.get(section), dict) else {}
    for name in names:
        if name in table:
            return f"{section}.{name}"
    return f"{section}.{names[0]}"


def _spacing_key(case: "Case") -> str:
    """The key that sets the obstacle spacing: the obstacles' spacing or density, or the densest
    population's density key."""
    if case.obstacles is not None:
        return _given(case, "obstacles", "spacing_nm", "density_per_um2")
    densest = max(range(len(case.populations)),
                  key=lambda i: case.populations[i].areal_density_per_nm2)
    pop = case.populations[densest]
    name = "number_density_per_um3" if pop.number_density_per_um3 is not None else (
        "volume_fraction" if pop.volume_fraction is not None else "file")
    return f"populations[{densest + 1}].{name}"


def check_case(case: "Case") -> tuple[str, ...]:
    """Refuse what a case may not ask for and return its one-line warnings.

    Raises
    ------
    CaseError
        Naming the key, the estimate and the limit.
    """
    warnings: list[str] = []
    _check_realizations(case)
    _check_spacings(case, warnings)
    counts = _check_sizes(case)
    _check_cost(case, counts, warnings)
    _check_ranges(case, warnings)
    return tuple(warnings)


def _check_realizations(case: "Case") -> None:
    """Several realizations need something random to draw."""
    fixed = (case.obstacles is not None and case.obstacles.kind == "square") or (
        case.obstacles is None and all(p.arrangement == "file" for p in case.populations))
    if fixed and case.statistics.realizations > 1:
        raise CaseError(case.source, "statistics.realizations",
                        f"got {case.statistics.realizations}; this field has nothing random (a "
                        "square array, or particles read from files): use 1")


def _warn(case: "Case", key: str, text: str) -> str:
    return f"{case.source}: `{key}`: {text}"


def _check_spacings(case: "Case", warnings: list[str]) -> None:
    b = case.material.burgers_nm
    spacing_b = case.spacing_nm / b
    key = _spacing_key(case)
    if not spacing_b >= MIN_SPACING_B:
        raise CaseError(case.source, key,
                        f"gives an obstacle spacing of {case.spacing_nm:.3g} nm = {spacing_b:.3g} b "
                        f"(b = {b:g} nm); a line-tension model needs at least {MIN_SPACING_B:g} b")
    if spacing_b < PLAUSIBLE_SPACING_B:
        warnings.append(_warn(case, key, f"the obstacle spacing is only {spacing_b:.3g} b; the "
                                         "line-tension picture is rough below about "
                                         f"{PLAUSIBLE_SPACING_B:g} b"))
    node_b = case.line.node_spacing_nm / b
    if node_b < MIN_NODE_SPACING_B:
        raise CaseError(case.source, _given(case, "line", "node_spacing", "node_spacing_nm"),
                        f"gives a node spacing of {case.line.node_spacing_nm:.3g} nm = "
                        f"{node_b:.3g} b; at least {MIN_NODE_SPACING_B:g} b")


@dataclass(frozen=True)
class Counts:
    """What a case would build (estimates): obstacle points, spheres, starting nodes."""

    obstacles: float
    particles: float
    nodes: float


def estimate_counts(case: "Case") -> Counts:
    """Expected obstacle points (ring points of discs included, an upper estimate), spheres in
    the sampling slab and nodes of the straight starting line, from the resolved case."""
    line = case.line
    area = line.length_nm * line.height_nm
    nodes = line.length_nm / line.node_spacing_nm
    if case.obstacles is not None:
        return Counts(area / case.obstacles.spacing_nm ** 2, 0.0, nodes)
    points = particles = 0.0
    gap = 0.25 * line.node_spacing_nm            # fields.RING_GAP_FRACTION of the node spacing
    for pop in case.populations:
        sections = pop.areal_density_per_nm2 * area
        dist = pop.size_distribution()
        planar = isinstance(dist, P.PlanarSizes)       # measured sections placed in the plane
        if dist is None or pop.strength == "point":
            points += sections
        else:
            # mean section radius: (π/4)⟨r²⟩/⟨r⟩ of spheres (Underwood 1970), or the measured
            # sections' own; every section taken as a disc
            rho = dist.moment(1) if planar else math.pi / 4.0 * dist.moment(2) / dist.moment(1)
            points += sections * max(1.0, 2.0 * math.pi * rho / gap)
        if dist is not None and not planar:
            half = dist.r_max * (3.0 if pop.arrangement == "hard_spheres" else 1.0)
            n_v = pop.areal_density_per_nm2 / (2.0 * dist.moment(1))
            particles += n_v * area * 2.0 * half
    return Counts(points, particles, nodes)


def _check_sizes(case: "Case") -> Counts:
    counts = estimate_counts(case)
    box = _given(case, "line", "length", "length_nm")
    if not counts.obstacles <= MAX_OBSTACLES:
        key = box if case.line.length_spacings * case.line.height_spacings > 1e4 else (
            _spacing_key(case))
        raise CaseError(case.source, key,
                        f"the field would hold about {counts.obstacles:.3g} obstacle points; at "
                        f"most {MAX_OBSTACLES:.3g} allowed (docs/cases.md, limits)")
    if not counts.particles <= MAX_PARTICLES:
        raise CaseError(case.source, _spacing_key(case),
                        f"the sampling slab would hold about {counts.particles:.3g} particles; at "
                        f"most {MAX_PARTICLES:.3g} allowed (docs/cases.md, limits)")
    if not counts.nodes <= MAX_INITIAL_NODES:
        raise CaseError(case.source, _given(case, "line", "node_spacing", "node_spacing_nm"),
                        f"the starting line would have about {counts.nodes:.3g} nodes (box width "
                        f"/ node spacing); at most {MAX_INITIAL_NODES:.3g} allowed")
    planned = (BYTES_PER_OBSTACLE * (counts.obstacles + counts.particles)
               + BYTES_PER_NODE * 4 * NODE_GROWTH * counts.nodes)
    limit = MEMORY_FRACTION * _memory_bytes()
    if not planned <= limit:
        raise CaseError(case.source, box,
                        f"the case would need about {planned / 2**30:.3g} GiB; at most "
                        f"{limit / 2**30:.3g} GiB ({MEMORY_FRACTION:g} of this machine's memory)")
    if case.obstacles is None or case.obstacles.kind == "random":
        if counts.obstacles < MIN_RANDOM_OBSTACLES and not any(
                p.arrangement == "file" for p in case.populations):
            raise CaseError(case.source, box,
                            f"the random field would hold about {counts.obstacles:.3g} obstacles; "
                            f"at least {MIN_RANDOM_OBSTACLES} are needed (a larger box)")
    return counts


def _check_cost(case: "Case", counts: Counts, warnings: list[str]) -> None:
    e = case.elasticity
    if e is None or e.model != "self_stress":
        return
    pairs = counts.nodes ** 2 * (2 * e.images + 1)
    if pairs > MAX_SELF_STRESS_PAIRS:
        raise CaseError(case.source, "elasticity.model",
                        f"self_stress on {counts.nodes:.3g} nodes with {e.images} image(s) each "
                        f"side costs about {pairs:.3g} pair interactions per evaluation; at most "
                        f"{MAX_SELF_STRESS_PAIRS:.0e} (a smaller box or a coarser line)")
    if pairs > WARN_SELF_STRESS_PAIRS:
        warnings.append(_warn(case, "elasticity.model",
                              f"self_stress costs about {pairs:.3g} pair interactions per "
                              "evaluation: expect a long run"))


def _outside(case, warnings, key, value, lo, hi, unit, why) -> None:
    if value is not None and not lo <= value <= hi:
        warnings.append(_warn(case, key, f"{value:g}{unit} lies outside {lo:g}-{hi:g}{unit} "
                                         f"({why}); the run goes on"))


def _check_ranges(case: "Case", warnings: list[str]) -> None:
    m, u = case.material, case.units
    _outside(case, warnings, "material.shear_modulus_GPa", m.shear_modulus_GPa, 1.0, 600.0,
             " GPa", "real metals and ceramics")
    _outside(case, warnings, "material.poisson_ratio", m.poisson_ratio, 0.0, 0.49, "",
             "real metals")
    _outside(case, warnings, "material.burgers_nm", m.burgers_nm, 0.1, 1.0, " nm",
             "metals and intermetallics")
    _outside(case, warnings, "line.tension_alpha", case.line.tension_alpha, 0.1, 2.0, "",
             "Γ = α G b² with α about 0.5, common practice")
    friction = u.stress(case.friction.stress_MPa)
    if friction >= IDEAL_STRENGTH_OVER_G:
        raise CaseError(case.source, "friction.stress_MPa",
                        f"got {case.friction.stress_MPa:g} MPa = {friction:.3g} G, at or above the "
                        f"ideal shear strength G/(2π) = {u.stress_MPa(IDEAL_STRENGTH_OVER_G):.4g} MPa")
    if friction > PLAUSIBLE_FRICTION_OVER_G:
        warnings.append(_warn(case, "friction.stress_MPa",
                              f"{friction:.3g} G is above the lattice friction of real metals "
                              f"(about {PLAUSIBLE_FRICTION_OVER_G:g} G); the run goes on"))
    for i, pop in enumerate(case.populations, start=1):
        for name in ("radius_nm", "mean_radius_nm"):
            r = getattr(pop, name)
            if r is not None and r < m.burgers_nm and pop.strength != "point":
                warnings.append(_warn(case, f"populations[{i}].{name}",
                                      f"{r:g} nm is smaller than b = {m.burgers_nm:g} nm: a "
                                      "solute, not a particle (strength = \"point\" models one)"))
        if pop.sigma is not None and pop.sigma > 1.0:
            warnings.append(_warn(case, f"populations[{i}].sigma",
                                  f"{pop.sigma:g} is far wider than measured size distributions "
                                  "(σ about 0.1-0.5, common practice); the run goes on"))
