"""Case files: TOML in, frozen dataclasses out, every key checked.

The schema is data (:data:`SCHEMA`): a :class:`Section` per TOML table, each a mapping of key name
to :class:`Key` (type, default, check, one-line description) plus its either/or groups.  One generic
walker, :func:`validate_table`, checks any table against its section, so a later section
(``[[populations]]``, ``[elasticity]``) or a sweep file only adds entries.  The ``_resolve_*``
functions then apply the rules that join several keys (material symbol, spacings to nm, square-array
box sizes) and build the frozen specs.

Every problem raises :class:`dlsim.errors.CaseError` naming the file, the dotted key, the value
received and what is allowed.
"""
from __future__ import annotations

import copy
import dataclasses
import difflib
import json
import math
import os
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from . import bounds
from . import particles as P
from .errors import CaseError
from .contract import MODEL_NAMES
from .materials import TABLE, Material, Units

NM_PER_UM = 1000.0
# Box sides of a square array must be whole multiples of L; this absorbs the rounding of
# length_nm / spacing_nm in floating point.
MULTIPLE_RTOL = 1e-9
# A periodic line of fewer segments than this cannot bow between obstacles (common practice).
MIN_SEGMENTS = 4
DICT_SOURCE = "<dict>"


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


REQUIRED = _Required()
_NOUNS = {float: "a number", int: "an integer", str: "a string"}


@dataclass(frozen=True)
class Check:
    """A test on a value that already has the right type.

    Parameters
    ----------
    test : callable
        ``test(value) -> bool``, True when the value is allowed.
    allowed : str
        What is allowed; ``{noun}`` stands for the type ("a number", "an integer", "a string").
    choices : tuple of str
        The allowed strings, for "did you mean" hints.
    """

    test: Callable[[Any], bool]
    allowed: str
    choices: tuple[str, ...] = ()


def above(lo: float) -> Check:
    """Values strictly greater than ``lo``."""
    return Check(lambda v: v > lo, f"{{noun}} > {lo:g}")


def at_least(lo: float) -> Check:
    """Values greater than or equal to ``lo``."""
    return Check(lambda v: v >= lo, f"{{noun}} >= {lo:g}")


def between(lo: float, hi: float, closed: bool) -> Check:
    """Values in [lo, hi] (``closed``) or in (lo, hi)."""
    if closed:
        return Check(lambda v: lo <= v <= hi, f"{{noun}} in [{lo:g}, {hi:g}]")
    return Check(lambda v: lo < v < hi, f"{{noun}} in ({lo:g}, {hi:g})")


def one_of(*choices: str) -> Check:
    """One of a fixed set of strings."""
    return Check(lambda v: v in choices, "one of " + ", ".join(f'"{c}"' for c in choices), choices)


def up_to(hi: float) -> Check:
    """Values in (0, hi]: a positive quantity with a cap that keeps the arithmetic finite."""
    return Check(lambda v: 0 < v <= hi, f"{{noun}} in (0, {hi:g}]")


def length_nm() -> Check:
    """A length in nm between MIN_LENGTH_NM and MAX_LENGTH_NM (no physical length lies outside,
    and beyond them squares and cubes of lengths leave float64)."""
    return between(MIN_LENGTH_NM, MAX_LENGTH_NM, closed=True)


def int_range(lo: int, hi: int) -> Check:
    """Integers in [lo, hi]: every integer key is bounded (TOML integers can exceed int64)."""
    return Check(lambda v: lo <= v <= hi, f"{{noun}} in [{lo}, {hi}]")


#: Caps of the [thermal] table: no solid is hotter, and the event loop stays bounded.
MAX_TEMPERATURE_K = 5000.0
MAX_THERMAL_EVENTS = 1_000_000
MAX_THERMAL_SEQUENCES = 64
NON_EMPTY = Check(lambda v: v.strip() != "", "a non-empty path")
NON_EMPTY_NAME = Check(lambda v: v.strip() != "", "a non-empty name")
#: Caps of single keys: beyond them no case makes sense and the arithmetic would overflow.
MAX_LENGTH_NM = 1e8          # 10 cm
MIN_LENGTH_NM = 1e-3         # far below any interatomic distance
MAX_SPACINGS = 1e7           # box sides and distances in obstacle spacings
MAX_BURGERS_NM = 10.0        # a lattice translation is well below 10 nm
MAX_MODULUS_GPA = 1e4
MAX_FORCE_NN = 1e6
MAX_DENSITY_PER_UM2 = 1e8    # 0.1 nm apart
MAX_DENSITY_PER_UM3 = 1e12
MAX_SEED = 2**63 - 1
#: Bisections beyond this resolve nothing a float64 CRSS bracket can hold (2^-40 ≈ 1e-12).
MAX_BISECTIONS = 40
MAX_STEPS = 100_000_000
MAX_REALIZATIONS = 10_000
MAX_PASSES = 100
#: Periodic images of the self-stress: beyond a few tens the straight-line remainder is exact to
#: round-off (the remainder falls as K^-3).
MAX_IMAGES = 256
MAX_REFRESH = 1_000_000
MAX_SNAPSHOT_EVERY = 2**31 - 1
#: A log-normal σ above this puts the 1 - 1e-6 quantile of the radius at e^(4.75 σ) > 1e6
#: medians: the sampling slab and its sphere count lose all meaning.
MAX_LOGNORMAL_SIGMA = 3.0
#: Equilibrium thresholds outside this range are either no equilibrium at all (above) or below
#: what the float64 force balance of a long line can reach (below).
TOLERANCE_RANGE = (1e-8, 1e-2)


@dataclass(frozen=True)
class Key:
    """One key of a section.

    Parameters
    ----------
    type : type
        ``float`` (ints accepted and converted; finite only), ``int`` or ``str``.  Booleans are
        never numbers.
    doc : str
        One-line description, with the unit.
    default : object
        Value when the key is absent; :data:`REQUIRED` for a key that must be given; None for an
        optional key whose absence the resolution step interprets.
    check : Check or None
        Further condition on the value.
    """

    type: type
    doc: str
    default: Any = None
    check: Check | None = None

    @property
    def allowed(self) -> str:
        noun = _NOUNS[self.type]
        return self.check.allowed.format(noun=noun) if self.check else noun


@dataclass(frozen=True)
class Section:
    """One TOML table of the case file (the top level is the section named ``""``).

    Parameters
    ----------
    doc : str
        What the section describes.
    keys : dict of str to Key
        The keys the section accepts, in canonical order.
    exactly_one : tuple of tuple of str
        Groups of keys of which the user gives exactly one (e.g. a length in spacings or in nm).
    at_most_one : tuple of tuple of str
        Groups of keys of which the user gives at most one.
    """

    doc: str
    keys: dict[str, Key]
    exactly_one: tuple[tuple[str, ...], ...] = ()
    at_most_one: tuple[tuple[str, ...], ...] = ()


_POSITIVE = above(0)
#: ``[solver] method``: the two solvers and the automatic choice.
SOLVER_METHODS = ("nodal", "arcs", "auto")
#: The line models of ``[elasticity] model``, named once in the kernels.
LINE_MODELS = MODEL_NAMES
SCHEMA: dict[str, Section] = {
    "": Section("top level", {
        "title": Key(str, "free text describing the case", ""),
        "seed": Key(int, "the seed of every random choice", REQUIRED, int_range(0, MAX_SEED)),
    }),
    "material": Section("elastic constants: a `symbol` of the built-in table, numbers, or both", {
        "symbol": Key(str, "a material of the built-in table", None, one_of(*TABLE)),
        "shear_modulus_GPa": Key(float, "the shear modulus G in GPa", None, between(1e-3, MAX_MODULUS_GPA, closed=True)),
        "poisson_ratio": Key(float, "the Poisson ratio ν", None, between(-1, 0.5, closed=False)),
        "burgers_nm": Key(float, "the Burgers vector length b in nm", None, between(0.01, MAX_BURGERS_NM, closed=True)),
    }),
    "line": Section("the dislocation line and its periodic box", {
        "tension_alpha": Key(float, "α in the line tension Γ = α G b²", 0.5, up_to(100.0)),
        "length": Key(float, "the box width Lx in obstacle spacings", None, up_to(MAX_SPACINGS)),
        "length_nm": Key(float, "the box width Lx in nm", None, length_nm()),
        "height": Key(float, "the box height Ly in obstacle spacings (default: the width)", None,
                      up_to(MAX_SPACINGS)),
        "height_nm": Key(float, "the box height Ly in nm", None, length_nm()),
        "node_spacing": Key(float, "the target segment length in obstacle spacings", 0.05,
                            up_to(MAX_SPACINGS)),
        "node_spacing_nm": Key(float, "the target segment length in nm", None,
                               length_nm()),
    }, exactly_one=(("length", "length_nm"),),
        at_most_one=(("height", "height_nm"), ("node_spacing", "node_spacing_nm"))),
    "obstacles": Section("point obstacles in the glide plane", {
        "kind": Key(str, "the obstacle arrangement", REQUIRED, one_of("square", "random")),
        "spacing_nm": Key(float, "the square period L or the mean spacing L_s = N_A^-1/2 in nm",
                          None, length_nm()),
        "density_per_um2": Key(float, "the obstacles per µm² of glide plane (random only)", None,
                               between(1e-6, MAX_DENSITY_PER_UM2, closed=True)),
        "critical_angle_deg": Key(float, "the critical arm angle φ_c in degrees (0: impenetrable)",
                                  None, between(0, 180, closed=True)),
        "critical_force_nN": Key(float, "the critical force F_c = 2Γ cos(φ_c/2) in nN", None,
                                 up_to(MAX_FORCE_NN)),
    }, exactly_one=(("spacing_nm", "density_per_um2"),
                    ("critical_angle_deg", "critical_force_nN"))),
    "friction": Section("lattice friction", {
        "stress_MPa": Key(float, "the friction threshold τ_f in MPa", 0.0, at_least(0)),
    }),
    "loading": Section("the stress ramp and the refinement of its last step that find the CRSS", {
        "stress_step": Key(float, "the stress increment as a fraction of 2Γ/(bL)", 0.02,
                           Check(lambda v: bounds.MIN_STRESS_STEP <= v < 1,
                                 f"{{noun}} in [{bounds.MIN_STRESS_STEP:g}, 1) (at most "
                                 f"{bounds.MAX_RAMP_RELAXATIONS} ramp relaxations)")),
        "tolerance": Key(float, "the equilibrium threshold: max |τ_eff| < tolerance·2Γ/(bL)", 1e-4,
                         between(*TOLERANCE_RANGE, closed=True)),
        "flow_distance": Key(float, "the mean glide past the last pinned state that counts as "
                                    "flow, in spacings (default: the box height, so a flowing line "
                                    "has crossed the whole field)", None, up_to(1e4)),
        "bisections": Key(int, "the halvings of the last ramp step the bracket is refined by, as many as a bisection would take (6 narrow a 0.02 step to 3e-4 of 2Γ/(bL))", 6,
                          int_range(0, MAX_BISECTIONS)),
        "max_steps": Key(int, "the time steps allowed in one relaxation", 2_000_000,
                         int_range(1, MAX_STEPS)),
    }),
    "statistics": Section("independent random fields of one case", {
        "realizations": Key(int, "the number of fields drawn with derived seeds", 1,
                            int_range(1, MAX_REALIZATIONS)),
        "target_half_width": Key(float, "the wanted half-width of the 95% interval of the CRSS, "
                                        "as a fraction of the CRSS (`dlsim converge` stops there; "
                                        "runs say how many realizations would reach it)", 0.02,
                                 between(1e-4, 0.5, closed=True)),
        "budget_realizations": Key(int, "the most realizations `dlsim converge` may run over all "
                                        "box sizes", 400, int_range(4, MAX_REALIZATIONS)),
    }),
    "convergence": Section("the series of box sizes of `dlsim converge` (the infinite-box CRSS)", {
        "box_min": Key(float, "the smallest box side in obstacle spacings L_s", 8.0,
                       between(2.0, 1e4, closed=True)),
        "box_max": Key(float, "the largest box side in obstacle spacings L_s", 64.0,
                       between(2.0, 1e4, closed=True)),
        "boxes": Key(int, "the box sizes, spaced geometrically from box_min to box_max", 4,
                     int_range(3, 12)),
        "realizations_start": Key(int, "the realizations of every box size before the first fit; "
                                       "more go where they narrow the extrapolation most", 8,
                                  int_range(2, 1000)),
    }),
    "strength": Section("from CRSS to strength, and repeated dislocations", {
        "taylor_factor": Key(float, "the Taylor factor M in Δσ = M τ_c (3.06: random FCC)", 3.06,
                             up_to(10.0)),
        "passes": Key(int, "the dislocations sent one after another through the field", 1,
                      int_range(1, MAX_PASSES)),
        "loop_spacing_nm": Key(float, "the radial spacing of Orowan loops around a particle in nm "
                                      "(default: 2 b)", None, length_nm()),
    }),
    "elasticity": Section("the line's elastic model (beyond the constant line tension of [line])", {
        "model": Key(str, "constant (Γ of [line]), dewit_koehler (orientation-dependent line "
                          "energy) or self_stress (the line's whole non-singular elastic field)",
                     "constant", one_of(*LINE_MODELS)),
        "character_deg": Key(float, "the angle between the Burgers vector and the initial line in "
                                    "degrees (0: screw, 90: edge)", 90.0,
                             between(0, 180, closed=True)),
        "core_radius_nm": Key(float, "the core radius (inner cut-off) in nm (default: b)", None,
                              length_nm()),
        "outer_radius_nm": Key(float, "the outer cut-off of the de Wit–Koehler energy in nm "
                                      "(default: the obstacle spacing)", None,
                               length_nm()),
        "images": Key(int, "the periods of the line summed segment by segment on each side "
                           "(self_stress)", 2, int_range(0, MAX_IMAGES)),
        "cutoff_nm": Key(float, "the self-stress cutoff along the line in nm (0: none; beyond it "
                                "the line counts as its straight average)", 0.0,
                         between(0, MAX_LENGTH_NM, closed=True)),
        "refresh": Key(int, "the time steps between evaluations of the non-local self-stress "
                            "(self_stress; the local part is evaluated every step)", 1,
                       int_range(1, MAX_REFRESH)),
    }),
    "solver": Section("which solver finds the CRSS", {
        "method": Key(str, "nodal (the discretised line: every obstacle and line model), arcs "
                           "(the exact quasi-static arc construction of Foreman & Makin: point "
                           "obstacles, constant line tension) or auto (arcs wherever the case "
                           "qualifies, else nodal)", "auto", one_of(*SOLVER_METHODS)),
    }),
    "thermal": Section("thermally activated release of pinned obstacles (Kocks, Argon & Ashby "
                       "1975), on the case's solver; temperature_K = 0 is the athermal CRSS", {
        "temperature_K": Key(float, "the temperature T in K (0: athermal, the quasi-static CRSS)",
                             0.0, between(0.0, MAX_TEMPERATURE_K, closed=True)),
        "strain_rate_per_s": Key(float, "the imposed strain rate ε̇ in 1/s", 1e-3,
                                 between(1e-12, 1e6, closed=True)),
        "mobile_density_per_m2": Key(float, "the mobile dislocation density ρ_m in 1/m² "
                                            "(ε̇ = ρ_m b v)", 1e12,
                                     between(1e6, 1e18, closed=True)),
        "attempt_frequency_Hz": Key(float, "the attempt frequency ν0 in Hz", 1e11,
                                    between(1e6, 1e15, closed=True)),
        "activation_energy_eV": Key(float, "the activation energy ΔF0 at zero force in eV, of "
                                           "every obstacle (a population may give its own)", 1.0,
                                    between(1e-3, 100.0, closed=True)),
        "p": Key(float, "the exponent p of ΔG = ΔF0 [1 - (F/F_c)^p]^q, 0 < p <= 1", 0.5,
                 Check(lambda v: 0.0 < v <= 1.0, "{noun} in (0, 1]")),
        "q": Key(float, "the exponent q of ΔG, 1 <= q <= 2", 1.5,
                 between(1.0, 2.0, closed=True)),
        "events": Key(int, "the activation events of one estimate of the strain rate", 400,
                      int_range(10, MAX_THERMAL_EVENTS)),
        "sequences": Key(int, "the independent event sequences (their spread is the "
                              "statistical uncertainty of the stress)", 4,
                         int_range(1, MAX_THERMAL_SEQUENCES)),
    }),
    "output": Section("result files", {
        "folder": Key(str, "the output folder relative to the case file (default: runs/<stem>)",
                      None, NON_EMPTY),
        "snapshot_every": Key(int, "the time steps (nodal) or events (arcs) between line "
                                        "snapshots for movies (0: none)", 0,
                              int_range(0, MAX_SNAPSHOT_EVERY)),
    }),
}


#: Arrays of tables (``[[populations]]``): each element is checked against its section by
#: :func:`validate_table`, under the dotted name ``populations[i]`` (1-based, as a user counts).
#: Kept apart from :data:`SCHEMA`, whose sections are plain tables that every resolved case lists.
DISTRIBUTIONS = ("single", "lognormal", "lsw", "measured")
ARRANGEMENTS = ("poisson", "hard_spheres", "file")
STRENGTHS = ("impenetrable", "constant", "power_law", "point")
_NM_COLUMN = Check(lambda v: v.strip().endswith("_nm"), "a column name ending in _nm (sizes in nm)")
#: Keys of measured sizes other than the two every measured population needs (see _NEEDS).
_MEASURED_OPTIONS = ("size_kind", "sizes_column", "sections_as", "unfold_classes")
ARRAY_SCHEMA: dict[str, Section] = {
    "populations": Section("one particle population (an alternative to [obstacles])", {
        "name": Key(str, "a unique name of the population", REQUIRED, NON_EMPTY_NAME),
        "volume_fraction": Key(float, "the volume fraction f", None, between(0, 1, closed=False)),
        "number_density_per_um3": Key(float, "the particles per µm³", None,
                                      between(1e-6, MAX_DENSITY_PER_UM3, closed=True)),
        "distribution": Key(str, "the sphere radius distribution (measured: from a file of sizes)",
                            None, one_of(*DISTRIBUTIONS)),
        "radius_nm": Key(float, "the sphere radius in nm (single)", None, length_nm()),
        "mean_radius_nm": Key(float, "the mean sphere radius in nm (lognormal, lsw)", None,
                              length_nm()),
        "sigma": Key(float, "the standard deviation of ln r (lognormal)", None,
                     up_to(MAX_LOGNORMAL_SIGMA)),
        "sizes_file": Key(str, "the CSV of measured sizes in nm relative to the case file, one per "
                               "row or bins lower_nm,upper_nm,count (measured)", None, NON_EMPTY),
        "sizes_are": Key(str, "what the measured sizes are: particles (3D, e.g. atom probe, or "
                              "corrected) or sections (planar, e.g. a micrograph) (measured)", None,
                         one_of("particles", "sections")),
        "size_kind": Key(str, "whether the measured sizes in nm are radii or diameters (measured; "
                              "default radius)", None, one_of("radius", "diameter")),
        "sizes_column": Key(str, "the column of a per-row sizes file holding the sizes in nm "
                                 "(measured; default radius_nm or diameter_nm)", None, _NM_COLUMN),
        "sections_as": Key(str, "what measured sections become: unfolded (spheres, by "
                                "Scheil-Schwartz-Saltykov) or in_plane (the glide-plane sections "
                                "themselves) (sections; default unfolded)", None,
                           one_of("unfolded", "in_plane")),
        "unfold_classes": Key(int, "the equal classes on [0, largest section] a per-row file of "
                                   "sections is unfolded in (default round(2 n^(1/3)), n sections)",
                              None, between(1, P.MAX_UNFOLD_CLASSES, closed=True)),
        "arrangement": Key(str, "how the particles are placed", "poisson", one_of(*ARRANGEMENTS)),
        "file": Key(str, "the particle file relative to the case file (arrangement = \"file\")",
                    None, NON_EMPTY),
        "file_kind": Key(str, "particles: x_nm,y_nm,z_nm,radius_nm; sections: x_nm,y_nm,radius_nm",
                         "particles", one_of("particles", "sections")),
        "strength": Key(str, "the obstacle strength law", REQUIRED, one_of(*STRENGTHS)),
        "critical_force_nN": Key(float, "the critical force F_c in nN (constant)", None,
                                 up_to(MAX_FORCE_NN)),
        "prefactor_nN": Key(float, "A in F_c = A (ρ / 1 nm)^m, in nN (power_law)", None,
                            up_to(MAX_FORCE_NN)),
        "exponent": Key(float, "m in F_c = A (ρ / 1 nm)^m (power_law)", None,
                        between(0, 10, closed=True)),
        "critical_angle_deg": Key(float, "the critical angle φ_c in degrees (point)", None,
                                  between(0, 180, closed=True)),
        "activation_energy_eV": Key(float, "this population's activation energy ΔF0 in eV "
                                           "(default: `thermal.activation_energy_eV`)", None,
                                    between(1e-3, 100.0, closed=True)),
    }, at_most_one=(("volume_fraction", "number_density_per_um3"),)),
}
#: Keys each choice needs; a key of another choice is refused (it would be silently ignored).
_NEEDS = {
    "distribution": {"single": ("radius_nm",), "lognormal": ("mean_radius_nm", "sigma"),
                     "lsw": ("mean_radius_nm",), "measured": ("sizes_file", "sizes_are")},
    "strength": {"impenetrable": (), "constant": ("critical_force_nN",),
                 "power_law": ("prefactor_nN", "exponent"), "point": ("critical_angle_deg",)},
}


# ---------------------------------------------------------------------------------------------
# Resolved case


@dataclass(frozen=True)
class LineSpec:
    """The line and its periodic box, resolved to nm.

    ``length_spacings`` and ``height_spacings`` are the box sides in obstacle spacings (whole
    numbers for a square array); the ``_nm`` sides are derived from them.
    """

    tension_alpha: float
    length_nm: float
    height_nm: float
    node_spacing_nm: float
    length_spacings: float
    height_spacings: float
    #: The height was not given: it is the width, and follows it when a sweep changes the width
    #: (so the resolved case leaves it out).
    height_is_length: bool = False

    def to_dict(self) -> dict:
        d = {"tension_alpha": self.tension_alpha, "length": self.length_spacings,
             "height": self.height_spacings, "node_spacing_nm": self.node_spacing_nm}
        if self.height_is_length:
            d.pop("height")
        return d


@dataclass(frozen=True)
class ObstacleSpec:
    """Obstacle field: kind, spacing and density, and exactly one strength (the other is None)."""

    kind: str
    spacing_nm: float
    density_per_um2: float
    critical_angle_deg: float | None
    critical_force_nN: float | None

    def to_dict(self) -> dict:
        return _drop_none({"kind": self.kind, "spacing_nm": self.spacing_nm,
                           "critical_angle_deg": self.critical_angle_deg,
                           "critical_force_nN": self.critical_force_nN})


@dataclass(frozen=True)
class PopulationSpec:
    """One particle population, resolved (lengths in nm, ``file`` absolute).

    Exactly one of ``volume_fraction`` and ``number_density_per_um3`` is set, except for
    ``arrangement = "file"`` where both are None and the particles come from ``file``.  The
    strength parameters not used by ``strength`` are None.  ``areal_density_per_nm2`` is the
    expected N_A = 2⟨r⟩N_V (Underwood 1970; :func:`dlsim.particles.areal_density`), or the count of
    sections in the file over the box area.
    """

    name: str
    volume_fraction: float | None
    number_density_per_um3: float | None
    distribution: str | None
    radius_nm: float | None
    mean_radius_nm: float | None
    sigma: float | None
    sizes_file: str | None
    sizes_are: str | None
    size_kind: str | None
    sizes_column: str | None
    sections_as: str | None
    unfold_classes: int | None
    arrangement: str
    file: str | None
    file_kind: str
    strength: str
    critical_force_nN: float | None
    prefactor_nN: float | None
    exponent: float | None
    critical_angle_deg: float | None
    areal_density_per_nm2: float
    activation_energy_eV: float | None = None
    source: str = field(default=DICT_SOURCE, compare=False, repr=False)
    key: str = field(default="populations[1]", compare=False, repr=False)
    #: The sizes read from ``sizes_file`` (distribution = "measured"), read once when resolved.
    measured: "P.Measured | P.PlanarSizes | None" = field(default=None, compare=False, repr=False)

    def size_distribution(self) -> "P.SizeDistribution | P.PlanarSizes | None":
        """The sphere radius distribution (nm), None for particles read from a file; measured
        sections placed in the plane give their :class:`~dlsim.particles.PlanarSizes`."""
        if self.distribution == "measured":
            return self.measured
        where = dict(source=self.source, key=self.key)
        if self.distribution == "single":
            return P.SingleSize(self.radius_nm, **where)
        if self.distribution == "lognormal":
            return P.LogNormal(self.mean_radius_nm, self.sigma, **where)
        if self.distribution == "lsw":
            return P.LSW(self.mean_radius_nm, **where)
        return None

    @property
    def number_density_per_nm3(self) -> float | None:
        d = self.number_density_per_um3
        return None if d is None else d / NM_PER_UM ** 3

    def to_dict(self) -> dict:
        d = {k: getattr(self, k) for k in ARRAY_SCHEMA["populations"].keys}
        return _drop_none(d)


@dataclass(frozen=True)
class StatisticsSpec:
    """Independent random fields (realizations) of one case, the wanted precision (a fraction of
    the CRSS) and the budget of ``dlsim converge``."""

    realizations: int
    target_half_width: float = 0.02
    budget_realizations: int = 400


@dataclass(frozen=True)
class ConvergenceSpec:
    """Box sizes of ``dlsim converge`` (sides in obstacle spacings)."""

    box_min: float = 8.0
    box_max: float = 64.0
    boxes: int = 4
    realizations_start: int = 8

    def sizes(self) -> list[float]:
        """The box sides, geometric from box_min to box_max (spacings)."""
        ratio = (self.box_max / self.box_min) ** (1.0 / (self.boxes - 1))
        return [self.box_min * ratio ** k for k in range(self.boxes)]


@dataclass(frozen=True)
class StrengthSpec:
    """Taylor factor M (Δσ = M τ_c), dislocation passes, and the loop spacing (nm) around a
    particle that each Orowan loop adds to its radius for the next pass."""

    taylor_factor: float
    passes: int
    loop_spacing_nm: float


@dataclass(frozen=True)
class FrictionSpec:
    """Lattice friction threshold τ_f (MPa)."""

    stress_MPa: float


@dataclass(frozen=True)
class LoadingSpec:
    """CRSS protocol knobs, see :data:`SCHEMA` ``["loading"]`` for their meaning."""

    stress_step: float
    tolerance: float
    flow_distance: float
    bisections: int
    max_steps: int
    #: The flow distance was not given: it is the box height, and follows the box when a sweep or
    #: a convergence study changes it (so the resolved case leaves it out).
    flow_distance_is_height: bool = False

    def to_dict(self) -> dict:
        d = dataclasses.asdict(self)
        if d.pop("flow_distance_is_height"):
            d.pop("flow_distance")
        return d


@dataclass(frozen=True)
class ElasticitySpec:
    """The line model and its parameters (lengths in nm), see :data:`SCHEMA` ``["elasticity"]``."""

    model: str
    character_deg: float
    core_radius_nm: float
    outer_radius_nm: float
    images: int
    cutoff_nm: float
    refresh: int


@dataclass(frozen=True)
class SolverSpec:
    """``method`` as given, and the solver that runs (``solver``: "nodal" or "arcs")."""

    method: str
    solver: str

    def to_dict(self) -> dict:
        return {"method": self.method}


@dataclass(frozen=True)
class ThermalSpec:
    """Thermal activation (SI units and eV), see :data:`SCHEMA` ``["thermal"]``."""

    temperature_K: float = 0.0
    strain_rate_per_s: float = 1e-3
    mobile_density_per_m2: float = 1e12
    attempt_frequency_Hz: float = 1e11
    activation_energy_eV: float = 1.0
    p: float = 0.5
    q: float = 1.5
    events: int = 400
    sequences: int = 4

    @property
    def active(self) -> bool:
        """True when the case is thermally activated (T > 0)."""
        return self.temperature_K > 0.0


@dataclass(frozen=True)
class OutputSpec:
    """Output folder (absolute path) and snapshot interval (0: no snapshots)."""

    folder: str
    snapshot_every: int


@dataclass(frozen=True)
class Case:
    """A validated case.  ``source`` and ``raw`` (the dictionary as read) do not take part in
    comparisons, so a case and the case loaded from its :meth:`to_dict` compare equal."""

    source: str = field(compare=False)
    title: str
    seed: int
    material: Material
    line: LineSpec
    obstacles: ObstacleSpec
    friction: FrictionSpec
    loading: LoadingSpec
    output: OutputSpec
    raw: dict = field(compare=False, repr=False)
    populations: tuple[PopulationSpec, ...] = ()
    statistics: StatisticsSpec = StatisticsSpec(1)
    strength: StrengthSpec | None = None
    elasticity: ElasticitySpec | None = None
    solver: SolverSpec = SolverSpec("nodal", "nodal")
    convergence: ConvergenceSpec = ConvergenceSpec()
    thermal: ThermalSpec = ThermalSpec()
    #: One-line warnings about values outside real materials (:func:`dlsim.bounds.check_case`).
    warnings: tuple[str, ...] = field(default=(), compare=False)

    @property
    def spacing_nm(self) -> float:
        """The reference spacing (nm): L or L_s of ``[obstacles]``, or L_s of all populations."""
        if self.obstacles is not None:
            return self.obstacles.spacing_nm
        return P.mean_square_spacing(sum(p.areal_density_per_nm2 for p in self.populations))

    @property
    def units(self) -> Units:
        """Reduced units of the material (length b, stress G, force G b²)."""
        return self.material.units

    def to_dict(self) -> dict:
        """The fully resolved case: every default filled in, one canonical key per quantity.

        Plain str/int/float values in nested dicts, so it serialises as JSON or TOML, and
        ``load_case(case.to_dict()) == case``.
        """
        d = {
            "title": self.title, "seed": self.seed,
            "material": _drop_none(dataclasses.asdict(self.material)),
            "line": self.line.to_dict(),
            "friction": dataclasses.asdict(self.friction),
            "loading": self.loading.to_dict(),
            "statistics": dataclasses.asdict(self.statistics),
            "strength": dataclasses.asdict(self.strength),
            "elasticity": dataclasses.asdict(self.elasticity),
            "solver": self.solver.to_dict(),
            "convergence": dataclasses.asdict(self.convergence),
            "thermal": dataclasses.asdict(self.thermal),
            "output": dataclasses.asdict(self.output),
        }
        if self.obstacles is not None:
            d["obstacles"] = self.obstacles.to_dict()
        else:
            d["populations"] = [p.to_dict() for p in self.populations]
        if any(p.arrangement == "file" for p in self.populations):  # the box must stay in nm
            d["line"] = {"tension_alpha": self.line.tension_alpha,
                         "length_nm": self.line.length_nm, "height_nm": self.line.height_nm,
                         "node_spacing_nm": self.line.node_spacing_nm}
        return d


def _drop_none(d: dict) -> dict:
    return {k: v for k, v in d.items() if v is not None}


# ---------------------------------------------------------------------------------------------
# Generic validation


def _show(value: Any) -> str:
    """A value as the user wrote it in TOML, for error messages."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "an array"
    return repr(value) if isinstance(value, float) else str(value)


def _join(prefix: str, name: str) -> str:
    return f"{prefix}.{name}" if prefix else name


def _nearest(name: str, candidates) -> str | None:
    """The known name closest to ``name`` ignoring case, or None."""
    lower = {c.lower(): c for c in candidates}
    close = difflib.get_close_matches(name.lower(), list(lower), n=1, cutoff=0.6)
    return lower[close[0]] if close else None


def _hint(near: str | None, quote: str = "`") -> str:
    return f"did you mean {quote}{near}{quote}? " if near else ""


def _typed(source: str, dotted: str, value: Any, key: Key) -> Any:
    """Check the type and the condition of one value; ints become floats where floats are due."""
    numeric = isinstance(value, (int, float)) and not isinstance(value, bool)
    ok = {float: numeric, int: numeric and isinstance(value, int),
          str: isinstance(value, str)}[key.type]
    finite = not (ok and key.type is float) or math.isfinite(value)
    if ok and finite:
        value = float(value) if key.type is float else value
        if key.check is None or key.check.test(value):
            return value
    allowed = key.allowed if finite else key.allowed.replace("a number", "a finite number", 1)
    near = _nearest(value, key.check.choices) if key.check and isinstance(value, str) else None
    hint = _hint(near, quote='"')
    raise CaseError(source, dotted, f"got {_show(value)}; {hint}must be {allowed}")


def _unknown(source: str, prefix: str, name: str, section: Section) -> CaseError:
    """The error for a key a section does not know, with the nearest known key."""
    near = _nearest(name, section.keys)
    if near is None:  # perhaps a key of another section
        near = next((_join(sec, name) for sec, other in SCHEMA.items() if name in other.keys),
                    None)
    else:
        near = _join(prefix, near)
    where = f"[{prefix}] takes" if prefix else "the top level takes"
    return CaseError(source, _join(prefix, name),
                     f"unknown key; {_hint(near)}{where} {', '.join(section.keys)}")


def _check_groups(source: str, prefix: str, table: dict, section: Section) -> None:
    """Either/or keys: exactly one (or at most one) of each group."""
    for group in section.exactly_one + section.at_most_one:
        given = [k for k in group if k in table]
        names = " or ".join(f"`{_join(prefix, k)}` for {section.keys[k].doc}" for k in group)
        if len(given) > 1:
            raise CaseError(source, _join(prefix, given[1]),
                            f"got {_show(table[given[1]])} and `{_join(prefix, given[0])}` = "
                            f"{_show(table[given[0]])}; give only one of {names}")
        if not given and group in section.exactly_one:
            raise CaseError(source, _join(prefix, group[0]), f"missing; give one of {names}")


def validate_table(source: str, prefix: str, table: Any, section: Section) -> dict[str, Any]:
    """Check one TOML table against its section and fill in the defaults.

    Parameters
    ----------
    source : str
        File name for error messages.
    prefix : str
        Dotted name of the table (``""`` for the top level), for error messages.
    table : dict
        The table as read.
    section : Section
        What the table may hold.

    Returns
    -------
    dict
        Every key of the section in schema order: the value given (ints converted to float where a
        float is due), else the default (None for optional keys without one).

    Raises
    ------
    CaseError
        Not a table, an unknown key, a missing required key, a wrong type or value, or an
        either/or group given twice or not at all.
    """
    if not isinstance(table, dict):
        raise CaseError(source, prefix, f"got {_show(table)}; must be a table [{prefix}]")
    for name in table:
        if name not in section.keys:
            raise _unknown(source, prefix, name, section)
    out = {}
    for name, key in section.keys.items():
        dotted = _join(prefix, name)
        if name in table:
            out[name] = _typed(source, dotted, table[name], key)
        elif key.default is REQUIRED:
            raise CaseError(source, dotted, f"missing; {key.doc}, {key.allowed}, is required")
        else:
            out[name] = key.default
    _check_groups(source, prefix, table, section)
    return out


def _validate_top(source: str, raw: dict) -> dict[str, Any]:
    """The top-level keys; also rejects unknown sections."""
    top = SCHEMA[""]
    sections = [name for name in SCHEMA if name] + list(ARRAY_SCHEMA)
    for name, value in raw.items():
        if name not in top.keys and name not in sections:
            near = _nearest(name, sections + list(top.keys))
            kind = "section" if isinstance(value, dict) else "key"
            raise CaseError(source, name, f"unknown {kind}; {_hint(near)}the top level takes "
                                          f"{', '.join(top.keys)} and the sections "
                                          f"{', '.join(f'[{s}]' for s in sections)}")
    return validate_table(source, "", {k: v for k, v in raw.items() if k in top.keys}, top)


# ---------------------------------------------------------------------------------------------
# Rules that join several keys


def _resolve_material(source: str, m: dict) -> Material:
    """Table values for a symbol, overridden by explicit numbers; all three without a symbol."""
    base = TABLE.get(m["symbol"])
    values = {}
    for name in ("shear_modulus_GPa", "poisson_ratio", "burgers_nm"):
        values[name] = m[name] if m[name] is not None else getattr(base, name, None)
        if values[name] is None:
            raise CaseError(source, f"material.{name}",
                            "missing; give `material.symbol` (one of "
                            f"{', '.join(TABLE)}) or all of `shear_modulus_GPa`, "
                            "`poisson_ratio` and `burgers_nm`")
    return Material(m["symbol"], **values)


def _resolve_obstacles(source: str, o: dict) -> ObstacleSpec:
    """Spacing from the density N_A (L_s = N_A^-1/2) or the reverse; a square array has 1/L²."""
    density = o["density_per_um2"]
    if density is not None and o["kind"] == "square":
        raise CaseError(source, "obstacles.density_per_um2",
                        f"got {_show(density)}; a square array takes `obstacles.spacing_nm` "
                        "(its period L), not a density")
    spacing = o["spacing_nm"] if density is None else NM_PER_UM / math.sqrt(density)
    return ObstacleSpec(o["kind"], spacing, (NM_PER_UM / spacing) ** 2,
                        o["critical_angle_deg"], o["critical_force_nN"])


def _box_side(source: str, key: str, line: dict, spacing: float, square: bool) -> float:
    """One box side in spacings, from ``key`` (spacings) or ``key_nm``; whole for a square array."""
    given = key + "_nm" if line[key] is None else key
    n = line[given] / spacing if given != key else line[given]
    whole = round(n) if math.isfinite(n) else 0
    if square and (whole < 1 or abs(n - whole) > MULTIPLE_RTOL * n):
        raise CaseError(source, f"line.{given}",
                        f"got {_show(line[given])}; a square array needs a whole number of "
                        f"spacings L = {spacing:g} nm (this is {n:.6g} L)")
    return float(whole) if square else n


def _resolve_line(source: str, line: dict, s: float, square: bool) -> LineSpec:
    """Box and node spacing in nm from the spacing ``s`` (nm); the height defaults to the width."""
    width = _box_side(source, "length", line, s, square)
    has_height = line["height"] is not None or line["height_nm"] is not None
    height = _box_side(source, "height", line, s, square) if has_height else width
    in_nm = line["node_spacing_nm"] is not None
    node = line["node_spacing_nm"] if in_nm else line["node_spacing"] * s
    limit = width / MIN_SEGMENTS  # in spacings
    if node > limit * s:
        key, most = (("node_spacing_nm", f"{limit * s:g} nm") if in_nm
                     else ("node_spacing", f"{limit:g} spacings"))
        raise CaseError(source, f"line.{key}", f"got {_show(line[key])}; must be at most {most}, "
                                               f"1/{MIN_SEGMENTS} of the box width")
    return LineSpec(line["tension_alpha"], width * s, height * s, node, width, height,
                    not has_height)


def _refuse(source: str, key: str, value: Any, why: str) -> None:
    if value is not None:
        raise CaseError(source, key, f"got {_show(value)}; {why}")


def _check_choice(source: str, prefix: str, p: dict, choice: str) -> None:
    """The keys ``p[choice]`` needs are given; those of the other choices are not."""
    for option, keys in _NEEDS[choice].items():
        for k in keys:
            if option == p[choice] and p[k] is None:
                raise CaseError(source, _join(prefix, k),
                                f"missing; {choice} = \"{option}\" needs {', '.join(keys)}")
            if option != p[choice] and k not in _NEEDS[choice].get(p[choice], ()):
                _refuse(source, _join(prefix, k), p[k],
                        f"only for {choice} = \"{option}\", not \"{p[choice]}\"")


def _resolve_population(source: str, prefix: str, p: dict, base: Path,
                        box_nm: tuple[float, float] | None) -> PopulationSpec:
    """One ``[[populations]]`` table: choices checked, file path absolute, expected N_A (nm⁻²)."""
    _check_choice(source, prefix, p, "strength")
    measured = None
    if p["arrangement"] == "file":
        for k in ("volume_fraction", "number_density_per_um3", "distribution",
                  *_NEEDS["distribution"]["measured"], *_MEASURED_OPTIONS):
            _refuse(source, _join(prefix, k), p[k], "a population read from a file takes its "
                                                     "particles and sizes from the file")
        if p["file"] is None:
            raise CaseError(source, _join(prefix, "file"), 'missing; arrangement = "file" needs '
                                                           "`file` (a CSV path)")
        if box_nm is None:
            raise CaseError(source, "line.length_nm", "missing; a case with a particle file "
                                                      "needs the box in nm (`line.length_nm`)")
        p["file"] = os.path.normpath(base / os.path.expanduser(p["file"]))
        read = P.read_particles_csv if p["file_kind"] == "particles" else P.read_sections_csv
        count = len(read(p["file"], _join(prefix, "file"), *box_nm))
        n_a = count / (box_nm[0] * box_nm[1])
    else:
        _refuse(source, _join(prefix, "file"), p["file"], 'only for arrangement = "file"')
        if p["distribution"] is None:
            raise CaseError(source, _join(prefix, "distribution"),
                            f"missing; one of {', '.join(DISTRIBUTIONS)} is required")
        _check_choice(source, prefix, p, "distribution")
        if p["volume_fraction"] is None and p["number_density_per_um3"] is None:
            raise CaseError(source, _join(prefix, "volume_fraction"),
                            "missing; give `volume_fraction` or `number_density_per_um3`")
        measured = _resolve_measured(source, prefix, p, base)
        _check_number_density(source, prefix, p, measured)
        n_a = 0.0
    spec = PopulationSpec(**p, areal_density_per_nm2=n_a, source=source, key=prefix,
                          measured=measured)
    if p["arrangement"] != "file":
        stats = P.expected_section_stats(spec.size_distribution(), p["volume_fraction"],
                                         spec.number_density_per_nm3, source=source, key=prefix)
        spec = dataclasses.replace(spec, areal_density_per_nm2=stats["areal_density_per_nm2"])
    return spec


def _check_number_density(source: str, prefix: str, p: dict, measured) -> None:
    """A number density whose spheres would fill more than the whole volume is refused here,
    under the user's key and unit, before the particle module sees it."""
    n_v = p["number_density_per_um3"]
    if n_v is None or isinstance(measured, P.PlanarSizes):   # sections in the plane: no spheres
        return
    spec = PopulationSpec(**{**p, "file": None}, areal_density_per_nm2=0.0, source=source,
                          key=prefix, measured=measured)
    f = P.volume_fraction_from_density(spec.size_distribution(), n_v / NM_PER_UM ** 3)
    if not f < 1.0:
        raise CaseError(source, _join(prefix, "number_density_per_um3"),
                        f"got {_show(n_v)} per µm³: the spheres would take a volume fraction of "
                        f"{f:.3g}; it must stay below 1")


def _resolve_measured(source: str, prefix: str, p: dict, base: Path
                      ) -> "P.Measured | P.PlanarSizes | None":
    """The sizes of ``distribution = "measured"``, read from ``sizes_file`` (None otherwise).

    Fills the defaults of the measured keys into ``p`` (size_kind, sections_as, and the classes
    a per-row file of sections was unfolded in), so that the resolved case names them.
    """
    if p["distribution"] != "measured":
        for k in _MEASURED_OPTIONS:
            _refuse(source, _join(prefix, k), p[k], 'only for distribution = "measured"')
        return None
    sections = p["sizes_are"] == "sections"
    for k in ("sections_as", "unfold_classes"):
        if not sections:
            _refuse(source, _join(prefix, k), p[k], 'only for sizes_are = "sections"')
    p["size_kind"] = p["size_kind"] or "radius"
    p["sections_as"] = (p["sections_as"] or "unfolded") if sections else None
    if p["sections_as"] == "in_plane":
        _refuse(source, _join(prefix, "unfold_classes"), p["unfold_classes"],
                'only for sections_as = "unfolded"')
        if p["arrangement"] != "poisson":
            raise CaseError(source, _join(prefix, "arrangement"),
                            f'got {_show(p["arrangement"])}; sections placed in the glide plane '
                            'are Poisson discs, so only "poisson" is allowed')
    p["sizes_file"] = os.path.normpath(base / os.path.expanduser(p["sizes_file"]))
    sizes = P.read_measured_sizes(p["sizes_file"], _join(prefix, "sizes_file"),
                                  sizes_are=p["sizes_are"], size_kind=p["size_kind"],
                                  column=p["sizes_column"], sections_as=p["sections_as"] or "",
                                  classes=p["unfold_classes"])
    unfolding = sizes.notes.get("unfolding")
    if unfolding is not None and sizes.notes["format"] == "bins":
        _refuse(source, _join(prefix, "unfold_classes"), p["unfold_classes"],
                f"only for a per-row file; the bins of {p['sizes_file']} are the classes")
    elif unfolding is not None:
        p["unfold_classes"] = unfolding["n_classes"]
    return sizes


def _resolve_populations(source: str, raw: Any, base: Path, line: dict
                         ) -> tuple[PopulationSpec, ...]:
    """Every ``[[populations]]`` element, names unique."""
    if not isinstance(raw, list) or not raw:
        raise CaseError(source, "populations", f"got {_show(raw)}; must be an array of tables "
                                               "[[populations]] with at least one element")
    box = None
    if line.get("length_nm") is not None:
        box = (line["length_nm"], line.get("height_nm") or line["length_nm"])
    out, names = [], set()
    for i, table in enumerate(raw, start=1):
        prefix = f"populations[{i}]"
        p = validate_table(source, prefix, table, ARRAY_SCHEMA["populations"])
        if p["name"] in names:
            raise CaseError(source, _join(prefix, "name"),
                            f"got {_show(p['name'])}; names of populations must be unique")
        names.add(p["name"])
        out.append(_resolve_population(source, prefix, p, base, box))
    return tuple(out)


def _resolve_output(o: dict, base: Path, stem: str) -> OutputSpec:
    """Absolute folder: relative paths count from ``base`` (the case file's directory)."""
    folder = os.path.expanduser(o["folder"] or os.path.join("runs", stem))
    return OutputSpec(os.path.normpath(base / folder), o["snapshot_every"])


# ---------------------------------------------------------------------------------------------
# Public entry points


def _read(path: Path, source: str) -> dict:
    """Parse a TOML file; every failure is a CaseError naming the file."""
    if path.is_dir():
        raise CaseError(source, "", "is a directory, not a case file")
    try:
        text = path.read_bytes().decode("utf-8-sig")  # tolerate a byte-order mark
        return tomllib.loads(text)
    except FileNotFoundError:
        raise CaseError(source, "", "no such file") from None
    except OSError as err:
        raise CaseError(source, "", f"cannot read the file ({err.strerror})") from None
    except UnicodeDecodeError:
        raise CaseError(source, "", "not UTF-8 text; a case file is TOML") from None
    except tomllib.TOMLDecodeError as err:
        raise CaseError(source, "", f"TOML syntax error: {err}") from None


def load_case(source: str | os.PathLike | dict | Case, base_dir: str | os.PathLike | None = None
              ) -> Case:
    """Read and validate a case.

    Parameters
    ----------
    source : str, path-like, dict or Case
        A TOML case file, or the same content as a dictionary (as from :meth:`Case.to_dict`).
        A :class:`Case` is returned unchanged.
    base_dir : str or path-like, optional
        Directory that relative paths in the case count from.  Default: the case file's directory,
        or the working directory for a dictionary.

    Returns
    -------
    Case
        Every default filled in, lengths in nm, ``output.folder`` absolute.

    Raises
    ------
    CaseError
        For a file that is missing, unreadable or not TOML, and for any key that breaks the schema
        (:data:`SCHEMA`) or the rules joining keys.
    """
    if isinstance(source, Case):
        return source
    if isinstance(source, dict):
        name, raw, base, stem = DICT_SOURCE, copy.deepcopy(source), Path.cwd(), "case"
    else:
        path = Path(source)
        name, base, stem = os.fspath(source), path.absolute().parent, path.stem
        raw = _read(path, name)
    if base_dir is not None:
        base = Path(base_dir).absolute()
    top = _validate_top(name, raw)

    def table(section: str) -> dict:
        return validate_table(name, section, raw.get(section, {}), SCHEMA[section])

    material = _resolve_material(name, table("material"))
    if ("obstacles" in raw) == ("populations" in raw):
        raise CaseError(name, "obstacles", "give exactly one of the section [obstacles] and the "
                                           "array of tables [[populations]]")
    line_table = table("line")
    populations, obstacles = (), None
    if "obstacles" in raw:
        obstacles = _resolve_obstacles(name, table("obstacles"))
        line = _resolve_line(name, line_table, obstacles.spacing_nm, obstacles.kind == "square")
    else:
        populations = _resolve_populations(name, raw["populations"], base, line_table)
        n_a = sum(p.areal_density_per_nm2 for p in populations)
        if n_a <= 0.0:
            raise CaseError(name, "populations", "no particle cuts the glide plane")
        line = _resolve_line(name, line_table, P.mean_square_spacing(n_a), False)
    strength = table("strength")
    if strength["loop_spacing_nm"] is None:
        strength["loop_spacing_nm"] = 2.0 * material.burgers_nm
    loading = table("loading")
    if loading["flow_distance"] is None:
        loading["flow_distance"] = line.height_spacings
        loading["flow_distance_is_height"] = True
    spacing = (obstacles.spacing_nm if obstacles is not None
               else P.mean_square_spacing(sum(p.areal_density_per_nm2 for p in populations)))
    elasticity = _resolve_elasticity(name, table("elasticity"), material, spacing)
    case = Case(source=name, title=top["title"], seed=top["seed"], material=material,
                line=line, obstacles=obstacles,
                friction=FrictionSpec(**table("friction")), loading=LoadingSpec(**loading),
                output=_resolve_output(table("output"), base, stem), raw=raw,
                populations=populations, statistics=StatisticsSpec(**table("statistics")),
                strength=StrengthSpec(**strength), elasticity=elasticity)
    case = dataclasses.replace(case, solver=_resolve_solver(name, table("solver")["method"], case),
                               convergence=_resolve_convergence(name, table("convergence")))
    # thermal activation runs on the case's solver (the nodal line where arcs do not qualify)
    case = dataclasses.replace(case, thermal=ThermalSpec(**table("thermal")))
    return dataclasses.replace(case, warnings=bounds.check_case(case))


def arcs_limitation(case: Case) -> str | None:
    """Why the arc construction cannot run this case (None when it can).

    It needs point obstacles under a constant line tension: no finite impenetrable discs (an
    impenetrable population, or a strength law that reaches the bypass limit 2Γ within the sizes
    drawn), no repeated passes (they turn looped particles into discs) and the constant line model.
    """
    if case.elasticity.model != "constant":
        return (f"it needs a constant line tension, and [elasticity] model = "
                f"\"{case.elasticity.model}\"")
    if case.strength.passes > 1:
        return "repeated passes turn looped particles into finite discs"
    two_gamma = 2.0 * case.line.tension_alpha * case.material.shear_modulus_GPa * \
        case.material.burgers_nm ** 2                                   # nN (GPa nm² = nN)
    for i, pop in enumerate(case.populations, start=1):
        rho_max = _largest_radius(pop)
        if pop.strength == "impenetrable" and rho_max > 0.0:
            return f"populations[{i}] are impenetrable discs of finite size"
        if pop.strength == "constant" and pop.critical_force_nN >= two_gamma:
            return (f"populations[{i}] reach the bypass limit 2Γ = {two_gamma:.3g} nN and are "
                    "impenetrable discs")
        if pop.strength == "power_law" and pop.prefactor_nN * rho_max ** pop.exponent >= two_gamma:
            return (f"populations[{i}] reach the bypass limit 2Γ = {two_gamma:.3g} nN within "
                    f"their sizes (F_c at ρ = {rho_max:.3g} nm) and are impenetrable discs there")
    return None


def _largest_radius(pop: PopulationSpec) -> float:
    """The largest planar radius a population can put in the plane (nm)."""
    if pop.arrangement == "file":
        read = P.read_particles_csv if pop.file_kind == "particles" else P.read_sections_csv
        return float(read(pop.file, f"{pop.key}.file", math.inf, math.inf).rho_nm.max(initial=0.0))
    dist = pop.size_distribution()
    return float(getattr(dist, "rho_max", None) or dist.r_max)


def _resolve_convergence(source: str, c: dict) -> ConvergenceSpec:
    if not c["box_max"] > c["box_min"]:
        raise CaseError(source, "convergence.box_max", f"got {c['box_max']:g}; must exceed "
                                                       f"`convergence.box_min` = {c['box_min']:g}")
    return ConvergenceSpec(**c)


def _resolve_solver(source: str, method: str, case: Case) -> SolverSpec:
    """"auto" runs the arc construction wherever it applies; "arcs" where it cannot is refused."""
    reason = arcs_limitation(case)
    if method == "arcs" and reason is not None:
        raise CaseError(source, "solver.method", f'got "arcs", but the arc construction cannot '
                                                 f'run this case: {reason}; use "nodal" or "auto"')
    solver = "arcs" if method != "nodal" and reason is None else "nodal"
    return SolverSpec(method, solver)


def _resolve_elasticity(source: str, e: dict, material: Material, spacing_nm: float
                        ) -> ElasticitySpec:
    """Defaults in nm (core: b, outer: the obstacle spacing); for the models that use them the
    outer cut-off must exceed the core, or the de Wit–Koehler energy K = ln(R_out/r_core)/(4π)
    would not be positive."""
    if e["core_radius_nm"] is None:
        e["core_radius_nm"] = material.burgers_nm
    if e["outer_radius_nm"] is None:
        e["outer_radius_nm"] = spacing_nm
    if e["model"] != "constant" and e["outer_radius_nm"] <= e["core_radius_nm"]:
        raise CaseError(source, "elasticity.outer_radius_nm",
                        f"{e['outer_radius_nm']:g} nm is not larger than the core radius "
                        f"{e['core_radius_nm']:g} nm")
    return ElasticitySpec(**e)


_ARRAY_KEY = re.compile(r"^(\w+)\[(\d+)\]\.(\w+)$")


def _locate(dotted_key: str) -> tuple[str, int | None, str, Section] | None:
    """(section or array name, 1-based element or None, key, its Section), or None if unknown.

    ``"line.length"`` names a key of a section; ``"populations[2].mean_radius_nm"`` a key of the
    second element of an array of tables (counted from 1, as in error messages).
    """
    m = _ARRAY_KEY.match(dotted_key)
    if m:
        name, index, key = m.group(1), int(m.group(2)), m.group(3)
        sec = ARRAY_SCHEMA.get(name)
        return (name, index, key, sec) if sec and index >= 1 and key in sec.keys else None
    section, _, key = dotted_key.rpartition(".")
    sec = SCHEMA.get(section)
    return (section, None, key, sec) if sec and key in sec.keys else None


def schema_has_key(dotted_key: str) -> bool:
    """Whether ``"section.key"``, a top-level ``"key"`` or ``"array[i].key"`` is a case key."""
    return _locate(dotted_key) is not None


def apply_overrides(raw: dict, overrides: dict[str, object], source: str = "<overrides>"
                    ) -> dict:
    """A copy of a raw case dictionary with dotted keys set, for sweeps.

    Setting one key of an either/or group (``line.length`` / ``line.length_nm``) drops the others
    of its group, so an override always wins over the base case.  Values are checked later, by
    :func:`load_case`.  Explicit material numbers in the base still override a swept symbol.

    Parameters
    ----------
    raw : dict
        A case as read from TOML (not modified).
    overrides : dict of str to object
        Dotted key -> value, e.g. ``{"obstacles.critical_angle_deg": 60.0, "seed": 3}``.
    source : str
        Name for error messages (the sweep file).

    Raises
    ------
    CaseError
        For a key the schema does not know, or a section in ``raw`` that is not a table.
    """
    new = copy.deepcopy(raw)
    for dotted, value in overrides.items():
        where = _locate(dotted)
        if where is None:
            known = [_join(s, k) for s, sec in SCHEMA.items() for k in sec.keys]
            known += [f"{a}[1].{k}" for a, sec in ARRAY_SCHEMA.items() for k in sec.keys]
            near = _nearest(dotted, known)
            raise CaseError(source, dotted, f"got {_show(value)}; {_hint(near)}not a key of a case")
        prefix, index, name, section = where
        if index is None:
            table = new.setdefault(prefix, {}) if prefix else new
        else:
            elements = new.get(prefix)
            if not isinstance(elements, list) or index > len(elements):
                count = len(elements) if isinstance(elements, list) else 0
                raise CaseError(source, dotted, f"got {_show(value)}; the base case has {count} "
                                                f"[[{prefix}]] table(s)")
            table = elements[index - 1]
        if not isinstance(table, dict):
            raise CaseError(source, prefix, f"got {_show(table)}; must be a table [{prefix}]")
        for group in section.exactly_one + section.at_most_one:
            if name in group:
                for other in group:
                    table.pop(other, None)
        table[name] = value
    return new
