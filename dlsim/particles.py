"""Particle populations: size distributions, 3D placement, and sections by the glide plane.

This module sits at the geometry boundary, so **every length here is in nm** (number densities in
nm⁻³, areal densities in nm⁻² unless a name says µm⁻²); conversion to reduced units happens later,
in :mod:`dlsim.fields`.

The route from a population to a glide-plane field follows classical stereology (Underwood,
*Quantitative Stereology*, 1970): spheres with a radius distribution p(r) and number density N_V are
placed in 3D around the glide plane z = 0, periodic in x and y, and the plane is cut through them.
A sphere of radius r with its centre at height z cuts the plane when |z| < r, in a disc of planar
radius ρ = sqrt(r² - z²).  Planar radii are never sampled directly from p(r).

Public surface
--------------
Distributions (frozen dataclasses, common interface ``sample(n, rng)``, ``moment(k)``, ``r_max``):
:class:`SingleSize`, :class:`LogNormal`, :class:`LSW`, :class:`Measured` (measured or unfolded
radii); the LSW shape itself: :func:`lsw_pdf`, :func:`lsw_cdf`, :func:`lsw_moment`.  Measured
sections kept as glide-plane sections: :class:`PlanarSizes`.
Relations: :func:`resolve_density`, :func:`planar_density`, :func:`number_density_from_fraction`,
:func:`volume_fraction_from_density`, :func:`areal_density`, :func:`mean_square_spacing`,
:func:`section_radius_moments`, :func:`edge_spacing`, :func:`expected_section_stats`.
Unfolding sections into spheres: :func:`saltykov_matrix`, :func:`unfold_sections`.
Placement and sectioning: :class:`Particles`, :func:`place_poisson`, :func:`place_hard_spheres`,
:func:`place_in_plane`, :class:`Sections`, :func:`section`, :func:`section_stats`,
:func:`sample_sections`.
Files: :func:`read_particles_csv`, :func:`read_sections_csv`, :func:`read_measured_sizes`.
"""
from __future__ import annotations

import csv
import itertools
import math
import os
from array import array
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from numba import njit
from scipy.linalg import solve_triangular
from scipy.optimize import nnls
from scipy.special import ndtr, ndtri

from .errors import CaseError
from .jit import JIT

#: Source named in errors about values passed as function arguments (not read from a file).
ARGUMENTS = "<arguments>"

#: Upper tail cut off the log-normal: r_max is its (1 - 1e-6) quantile.  A choice of this module:
#: one particle in a million is dropped, so a slab of half-thickness r_max stays thin.
LOGNORMAL_UPPER_TAIL = 1e-6

#: LSW shape h(u) lives on [0, 3/2) (Lifshitz & Slyozov 1961; Wagner 1961).
LSW_U_MAX = 1.5
#: Intervals of the LSW table on [0, 3/2): step 2.5e-4, so linear interpolation of the CDF between
#: nodes is off by at most max|h'| Δ²/8 ≈ 1e-7 (|h'| < 15), far below any sampling noise.
LSW_INTERVALS = 6000
#: Gauss–Legendre points per table interval; h is smooth on the closed interval (it vanishes with
#: all its derivatives at u = 3/2), so 10 points per interval integrate it to round-off.
LSW_GAUSS_POINTS = 10

#: Random sequential addition (RSA) of equal spheres jams near f ≈ 0.38 (Torquato, Uche & Stillinger,
#: Phys. Rev. E 74, 2006: 0.3841, *from memory*); insertion slows sharply well before that, so
#: hard-sphere fields are refused above this fraction (common practice: stay clear of jamming).
RSA_MAX_FRACTION = 0.3
#: Random trials allowed for one sphere before the RSA gives up (CaseError).  Measured with this
#: module for 17 000 equal spheres at f = 0.3: a cap of 1000 trials fails, 3000 suffices, so the
#: default leaves a wide margin while still stopping within seconds on an unreachable request.
RSA_MAX_ATTEMPTS = 200_000
#: Half-thickness of the hard-sphere box in units of r_max.  The box is periodic in z with period
#: 6 r_max: every sphere that can cut the plane (|z| < r_max) has all possible neighbours
#: (|Δz| < 2 r_max) present, each sphere's own image is 3 diameters away, and the box is
#: translation-invariant in z, so the plane z = 0 is statistically like any other.
HARD_SPHERE_HALF_THICKNESS = 3.0
#: Fewest random trials drawn from the generator per batch of the RSA (a batch is also at least
#: twice the spheres still to place).
RSA_MIN_BATCH = 65_536
#: Most cells per sphere in the RSA cell table: keeps its memory in proportion for dilute fields.
RSA_CELLS_PER_SPHERE = 4
#: Most particles placed in one box (about 0.3 GB of arrays): protects against a mistyped density.
MAX_PARTICLES = 10_000_000

#: Iterations of the non-negative least squares per unfolding class (Lawson & Hanson's active-set
#: method needs at most a few passes per variable; scipy's default is 3 per variable).
NNLS_ITERATIONS_PER_CLASS = 50

#: Longest line of a CSV file read (characters): far above any table of numbers, and it keeps a
#: file without line breaks from being read whole into memory.
MAX_CSV_LINE_CHARS = 65_536

#: Most measured sizes read from one file: rows of a per-row file, or the total count of a binned
#: one.  Microscopy and atom-probe studies measure 10^2 to 10^5 particles; more is a mistake
#: (a density typed into the count column), and rows beyond are not read.
MAX_MEASURED_SIZES = 1_000_000
#: Measured sizes accepted (nm): below an atom or above a tenth of a millimetre, a number is far
#: more likely a unit mistake (metres, micrometres, pixels) than a particle.
MEASURED_SIZE_RANGE_NM = (1e-3, 1e5)
#: Most classes of an unfolding: the matrix is classes² numbers, and far fewer classes (10-20)
#: are used in practice because each class amplifies the counting noise of those above it.
MAX_UNFOLD_CLASSES = 100
#: Fewest classes of the default unfolding of a per-row file (see default_unfold_classes).
MIN_DEFAULT_CLASSES = 4
CSV_BINS = ("lower_nm", "upper_nm", "count")

CSV_PARTICLES = ("x_nm", "y_nm", "z_nm", "radius_nm")
CSV_SECTIONS = ("x_nm", "y_nm", "radius_nm")


# --------------------------------------------------------------------------------------------------
# validation helpers
# --------------------------------------------------------------------------------------------------
def _key(prefix: str, name: str) -> str:
    """Dotted key ``prefix.name`` (just ``name`` without a prefix)."""
    return f"{prefix}.{name}" if prefix else name


def _positive(value, name: str, source: str, key: str) -> float:
    """Return ``value`` as a float if it is finite and > 0, else raise :class:`CaseError`."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise CaseError(source, _key(key, name), f"got {value!r}; a number > 0 is required") from None
    if not (math.isfinite(x) and x > 0.0):
        raise CaseError(source, _key(key, name), f"got {value!r}; a finite number > 0 is required")
    return x


# --------------------------------------------------------------------------------------------------
# LSW shape function
# --------------------------------------------------------------------------------------------------
def lsw_pdf(u):
    """Lifshitz–Slyozov–Wagner size distribution h(u) of Ostwald-ripened particles.

    ``h(u) = (4/9) u² (3/(3+u))^(7/3) (3/(3-2u))^(11/3) exp(-2u/(3-2u))`` for 0 ≤ u < 3/2 and zero
    elsewhere, with u = r/⟨r⟩ (Lifshitz & Slyozov, J. Phys. Chem. Solids 19, 1961; Wagner,
    Z. Elektrochem. 65, 1961).  Its integral and its mean are 1.

    Evaluated through its logarithm: near u = 3/2 the power (3/(3-2u))^(11/3) overflows while the
    exponential underflows, and the product (which tends to 0 with all its derivatives) would
    become ``inf * 0``.

    Parameters
    ----------
    u : float or array_like
        Reduced radius r/⟨r⟩ (dimensionless).

    Returns
    -------
    float or ndarray
        h(u), same shape as ``u``.
    """
    u = np.asarray(u, dtype=np.float64)
    inside = (u > 0.0) & (u < LSW_U_MAX)
    v = np.where(inside, u, 1.0)  # any harmless point where h is not wanted
    eps = 3.0 - 2.0 * v
    log_h = (math.log(4.0 / 9.0) + 2.0 * np.log(v) + (7.0 / 3.0) * np.log(3.0 / (3.0 + v))
             + (11.0 / 3.0) * np.log(3.0 / eps) - 2.0 * v / eps)
    out = np.where(inside, np.exp(log_h), 0.0)
    return out[()] if out.ndim == 0 else out


@lru_cache(maxsize=1)
def _lsw_table() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Composite Gauss–Legendre quadrature of h on a uniform grid of [0, 3/2].

    Returns
    -------
    u : ndarray, shape (LSW_INTERVALS + 1,)
        Grid nodes.
    cdf : ndarray, shape (LSW_INTERVALS + 1,)
        ∫_0^u h, not renormalised (its last value is 1 to round-off).
    nodes, weights : ndarray, shape (LSW_INTERVALS * LSW_GAUSS_POINTS,)
        Quadrature points and weights over the whole interval, reused for the moments.
    """
    u = np.linspace(0.0, LSW_U_MAX, LSW_INTERVALS + 1)
    x, w = np.polynomial.legendre.leggauss(LSW_GAUSS_POINTS)
    half = 0.5 * (u[1] - u[0])
    nodes = (0.5 * (u[:-1] + u[1:]))[:, None] + half * x[None, :]
    weights = np.broadcast_to(half * w, nodes.shape)
    per_interval = (weights * lsw_pdf(nodes)).sum(axis=1)
    cdf = np.concatenate(([0.0], np.cumsum(per_interval)))
    return u, cdf, nodes.ravel(), weights.ravel().copy()


def lsw_cdf(u):
    """Cumulative LSW distribution H(u) = ∫_0^u h, interpolated in the tabulated quadrature.

    Parameters
    ----------
    u : float or array_like
        Reduced radius r/⟨r⟩.

    Returns
    -------
    float or ndarray
        H(u) in [0, 1], same shape as ``u`` (0 below 0, 1 from 3/2 on).
    """
    grid, cdf, _, _ = _lsw_table()
    out = np.interp(np.asarray(u, dtype=np.float64), grid, cdf / cdf[-1])
    return out[()] if out.ndim == 0 else out


@lru_cache(maxsize=16)
def lsw_moment(k: int) -> float:
    """Moment ⟨u^k⟩ = ∫ u^k h(u) du of the LSW distribution, by the quadrature of :func:`_lsw_table`.

    ⟨u⁰⟩ = ⟨u⟩ = 1 and ⟨u³⟩ ≈ 1.1296 (docs/physics.md; Lifshitz & Slyozov 1961; Wagner 1961).

    Parameters
    ----------
    k : int
        Order, k ≥ 0.

    Returns
    -------
    float
    """
    _, _, nodes, weights = _lsw_table()
    return float(np.sum(weights * nodes**k * lsw_pdf(nodes)))


@lru_cache(maxsize=1)
def _lsw_inverse_table() -> tuple[np.ndarray, np.ndarray]:
    """Strictly increasing (H, u) pairs for inverse-CDF sampling.

    H saturates at 1 in floating point some way below u = 3/2 (the tail is exp(-2u/(3-2u))); the
    saturated nodes are dropped so that interpolation is well posed and every sample is < 3/2.
    """
    grid, cdf, _, _ = _lsw_table()
    cdf = cdf / cdf[-1]
    keep = np.concatenate(([True], np.diff(cdf) > 0.0))
    return cdf[keep], grid[keep]


# --------------------------------------------------------------------------------------------------
# size distributions
# --------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Distribution:
    """Common part of the size distributions: where an invalid parameter is reported.

    ``source`` and the dotted key prefix ``key`` (e.g. ``"populations[0]"``) go into the
    :class:`CaseError` raised for a parameter named in ``_positive_fields`` that is not a finite
    number > 0.
    """

    source: str = field(default=ARGUMENTS, compare=False, repr=False, kw_only=True)
    key: str = field(default="", compare=False, repr=False, kw_only=True)
    _positive_fields = ()

    def __post_init__(self):
        for name in self._positive_fields:
            object.__setattr__(self, name, _positive(getattr(self, name), name, self.source, self.key))


@dataclass(frozen=True)
class SingleSize(_Distribution):
    """Spheres of one radius.

    Parameters
    ----------
    radius_nm : float
        Sphere radius r0 (nm), > 0.
    source, key : str, keyword-only
        Named in the :class:`CaseError` raised for an invalid parameter; ``key`` is the dotted
        prefix of the parameter (e.g. ``"populations[0]"``).
    """

    radius_nm: float
    _positive_fields = ("radius_nm",)

    @property
    def r_max(self) -> float:
        """Largest radius (nm): r0."""
        return self.radius_nm

    def moment(self, k: float) -> float:
        """⟨r^k⟩ = r0^k (nm^k)."""
        return self.radius_nm**k

    def sample(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """``n`` radii (nm), shape (n,); ``rng`` is not used (kept for the common interface)."""
        return np.full(int(n), self.radius_nm)


@dataclass(frozen=True)
class LogNormal(_Distribution):
    """Log-normal radii, truncated at the (1 - LOGNORMAL_UPPER_TAIL) quantile.

    Parametrisation: σ is the standard deviation of ln r and the *untruncated* parent has mean
    ``mean_nm``, i.e. ln r ~ Normal(μ, σ²) with μ = ln(mean_nm) - σ²/2 (so ⟨r⟩ = exp(μ + σ²/2)).
    Radii above r_max = exp(μ + σ z_t), z_t = Φ⁻¹(1 - 1e-6) ≈ 4.753, are cut off; :meth:`sample`
    and :meth:`moment` both describe the truncated distribution.  Its mean is below ``mean_nm``
    by the relative amount 1 - Φ(z_t - σ)/Φ(z_t): 3e-6 at σ = 0.3, 9e-5 at σ = 1; higher moments
    lose more (⟨r³⟩: 6e-5 at σ = 0.3, 4% at σ = 1), which is why :meth:`moment` is exact for the
    truncated form rather than the textbook exp(kμ + k²σ²/2).

    Parameters
    ----------
    mean_nm : float
        Mean radius of the untruncated parent (nm), > 0.
    sigma : float
        Standard deviation of ln r, > 0.
    source, key : str, keyword-only
        As for :class:`SingleSize`.
    """

    mean_nm: float
    sigma: float
    _positive_fields = ("mean_nm", "sigma")

    @property
    def mu(self) -> float:
        """Mean of ln r (ln nm): ln(mean_nm) - σ²/2."""
        return math.log(self.mean_nm) - 0.5 * self.sigma**2

    @property
    def _z_max(self) -> float:
        return float(ndtri(1.0 - LOGNORMAL_UPPER_TAIL))

    @property
    def r_max(self) -> float:
        """Truncation radius (nm): the (1 - 1e-6) quantile of the parent log-normal."""
        return math.exp(self.mu + self.sigma * self._z_max)

    def moment(self, k: float) -> float:
        """⟨r^k⟩ of the truncated distribution (nm^k).

        ``exp(kμ + k²σ²/2) Φ(z_t - kσ) / Φ(z_t)``: the partial moment of a log-normal below its
        quantile z_t (Johnson, Kotz & Balakrishnan, *Continuous Univariate Distributions*, vol. 1,
        ch. 14), renormalised by the mass kept.
        """
        s, z = self.sigma, self._z_max
        kept = 1.0 - LOGNORMAL_UPPER_TAIL
        return math.exp(k * self.mu + 0.5 * (k * s) ** 2) * float(ndtr(z - k * s)) / kept

    def sample(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """``n`` radii (nm), shape (n,), by inversion of the truncated CDF."""
        q = rng.random(int(n)) * (1.0 - LOGNORMAL_UPPER_TAIL)
        return np.exp(self.mu + self.sigma * ndtri(q))


@dataclass(frozen=True)
class LSW(_Distribution):
    """Lifshitz–Slyozov–Wagner radii (Ostwald ripening): r = ⟨r⟩ u with u ~ h(u) on [0, 3/2).

    Parameters
    ----------
    mean_nm : float
        Mean radius ⟨r⟩ (nm), > 0.
    source, key : str, keyword-only
        As for :class:`SingleSize`.
    """

    mean_nm: float
    _positive_fields = ("mean_nm",)

    @property
    def r_max(self) -> float:
        """Largest radius (nm): 1.5 ⟨r⟩ (the LSW distribution has no particle beyond)."""
        return LSW_U_MAX * self.mean_nm

    def moment(self, k: int) -> float:
        """⟨r^k⟩ = ⟨r⟩^k ⟨u^k⟩ (nm^k), with ⟨u^k⟩ from :func:`lsw_moment`."""
        return self.mean_nm**k * lsw_moment(k)

    def sample(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """``n`` radii (nm), shape (n,), by linear interpolation in the inverted CDF table."""
        cdf, u = _lsw_inverse_table()
        return self.mean_nm * np.interp(rng.random(int(n)), cdf, u)


@dataclass(frozen=True, eq=False)
class _Mixture(_Distribution):
    """Sizes as a weighted mixture of point masses and uniform bins (nm), from measured data.

    Component i is the point mass at ``lower_nm[i]`` when ``upper_nm[i] == lower_nm[i]`` (one
    measured size, or an unfolded class), else uniform on [lower_nm[i], upper_nm[i]) (one bin of
    a histogram: the sizes inside a bin are not known, and the uniform density is the usual
    histogram reading of them).  ``weight`` is the fraction of the particles in each component.

    Parameters
    ----------
    lower_nm, upper_nm : ndarray, shape (k,)
        Component bounds (nm), 0 <= lower <= upper.
    weight : ndarray, shape (k,)
        Non-negative weights with a positive sum; stored normalised to 1.
    notes : dict
        Where the sizes came from (file, kind, count, unfolding diagnostics), for result files.

    Raises
    ------
    ValueError
        For arrays of different lengths, bounds out of order, or weights that are negative or sum
        to zero (the file readers check the user's data before, with messages naming the line).
    """

    lower_nm: np.ndarray
    upper_nm: np.ndarray
    weight: np.ndarray
    notes: dict = field(default_factory=dict)

    def __post_init__(self):
        lo, hi, w = (_float_array(getattr(self, n)) for n in ("lower_nm", "upper_nm", "weight"))
        if not (lo.size == hi.size == w.size) or lo.size == 0:
            raise ValueError("lower_nm, upper_nm and weight must be non-empty and of one length")
        if not (np.all(np.isfinite(hi)) and np.all(lo >= 0.0) and np.all(hi >= lo)):
            raise ValueError("component bounds must be finite with 0 <= lower_nm <= upper_nm")
        total = float(w.sum())
        if not (np.all(w >= 0.0) and math.isfinite(total) and total > 0.0):
            raise ValueError("weights must be >= 0 with a finite positive sum")
        for name, value in (("lower_nm", lo), ("upper_nm", hi), ("weight", w / total)):
            object.__setattr__(self, name, value)

    @property
    def size_max(self) -> float:
        """Largest size any component reaches (nm)."""
        return float(self.upper_nm[self.weight > 0.0].max())

    def moment(self, k: float) -> float:
        """⟨s^k⟩ of the mixture (nm^k); k = -1 gives ⟨1/s⟩ (infinite for a bin that starts at 0).

        A uniform bin [a, b) has ⟨s^k⟩ = (b^(k+1) - a^(k+1)) / ((k+1)(b - a)), written for whole
        k >= 0 as Σ_j a^j b^(k-j) / (k+1) so that narrow bins lose no digits, and ln(b/a)/(b - a)
        for k = -1; a point mass at a has a^k.
        """
        a, b = self.lower_nm, self.upper_nm
        bin_ = b > a
        with np.errstate(divide="ignore", invalid="ignore"):
            if float(k).is_integer() and k >= 0:
                k = int(k)
                per = sum(a**j * b**(k - j) for j in range(k + 1)) / (k + 1)
            elif k == -1:
                per = np.where(bin_, np.log(b / a) / (b - a), 1.0 / a)
            else:
                per = np.where(bin_, (b ** (k + 1) - a ** (k + 1)) / ((k + 1) * (b - a)), a**k)
        used = self.weight > 0.0
        return float(np.sum(self.weight[used] * per[used]))

    def sample(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """``n`` sizes (nm), shape (n,): a component by its weight, then a point inside it.

        Two uniform numbers per size (component, then position within a bin), drawn from ``rng``
        in that order, so a seed gives the same sizes.
        """
        n = int(n)
        cdf = np.cumsum(self.weight)
        cdf[-1] = 1.0  # rounding must not leave a gap above the last component
        pick = np.searchsorted(cdf, rng.random(n), side="right")
        pick = np.minimum(pick, cdf.size - 1)
        return self.lower_nm[pick] + (self.upper_nm[pick] - self.lower_nm[pick]) * rng.random(n)


@dataclass(frozen=True, eq=False)
class Measured(_Mixture):
    """Sphere radii from measured data (3D radii as read, or unfolded from sections).

    A :class:`_Mixture` of radii: point masses at measured radii (one per row of a file) or at the
    classes of an unfolding, or uniform bins of a radius histogram.  It has the interface of the
    other distributions (``moment``, ``sample``, ``r_max``), so the stereological relations,
    Poisson and hard-sphere placement and the slab thickness use it unchanged.
    """

    @property
    def r_max(self) -> float:
        """Largest radius (nm): the largest measured radius or the top of the last bin."""
        return self.size_max


@dataclass(frozen=True, eq=False)
class PlanarSizes(_Mixture):
    """Planar section radii ρ placed directly in the glide plane (not a 3D distribution).

    For measured sections that the user asks to be taken as the glide-plane sections themselves:
    :func:`sample_sections` puts Poisson points in the plane with radii drawn from this mixture,
    and :func:`resolve_density` turns a volume fraction or a number density into N_A with the
    relations of planar sections of spheres (Delesse's A_A = V_V; Fullman's N_V = (2/π) N_A ⟨1/d⟩;
    Underwood 1970).
    """

    @property
    def rho_max(self) -> float:
        """Largest planar radius (nm)."""
        return self.size_max


SizeDistribution = SingleSize | LogNormal | LSW | Measured


# --------------------------------------------------------------------------------------------------
# stereological relations
# --------------------------------------------------------------------------------------------------
def _sphere_volume_moment(distribution: SizeDistribution) -> float:
    """Mean sphere volume (4π/3)⟨r³⟩ (nm³)."""
    return 4.0 * math.pi / 3.0 * distribution.moment(3)


def number_density_from_fraction(distribution: SizeDistribution, volume_fraction: float) -> float:
    """N_V = f / ((4π/3)⟨r³⟩) (nm⁻³) (Underwood 1970)."""
    return volume_fraction / _sphere_volume_moment(distribution)


def volume_fraction_from_density(distribution: SizeDistribution, number_density: float) -> float:
    """f = N_V (4π/3)⟨r³⟩ (dimensionless), ``number_density`` N_V in nm⁻³ (Underwood 1970)."""
    return number_density * _sphere_volume_moment(distribution)


def _given_density(volume_fraction, number_density, source: str, key: str
                   ) -> tuple[float | None, float | None]:
    """Exactly one of f (0 < f < 1) and N_V (> 0) given; returns both, the absent one None."""
    if (volume_fraction is None) == (number_density is None):
        raise CaseError(source, _key(key, "volume_fraction"),
                        "give exactly one of `volume_fraction` and `number_density_per_um3`")
    if volume_fraction is None:
        return None, _positive(number_density, "number_density_per_um3", source, key)
    f = _positive(volume_fraction, "volume_fraction", source, key)
    if f >= 1.0:
        raise CaseError(source, _key(key, "volume_fraction"), f"got {volume_fraction!r}; allowed 0 < f < 1")
    return f, None


def _fraction_below_one(f: float, number_density, source: str, key: str) -> float:
    """The volume fraction implied by a number density, refused from 1 on."""
    if not f < 1.0:
        raise CaseError(source, _key(key, "number_density_per_um3"),
                        f"got {number_density * 1e9:.4g} per µm³, a volume fraction of {f:.3g}; "
                        "allowed f < 1")
    return f


def resolve_density(distribution: SizeDistribution, volume_fraction=None, number_density=None, *,
                    source: str = ARGUMENTS, key: str = "") -> tuple[float, float]:
    """Check exactly one of f and N_V and return both.

    Parameters
    ----------
    distribution : SingleSize, LogNormal, LSW or Measured
    volume_fraction : float, optional
        f, 0 < f < 1.
    number_density : float, optional
        N_V (nm⁻³), > 0, with the implied f < 1.
    source, key : str
        Named in the :class:`CaseError` (``key`` is the dotted prefix of the parameters).

    Returns
    -------
    (f, N_V) : tuple of float
    """
    f, n_v = _given_density(volume_fraction, number_density, source, key)
    if f is not None:
        return f, number_density_from_fraction(distribution, f)
    return _fraction_below_one(volume_fraction_from_density(distribution, n_v), number_density,
                               source, key), n_v


def planar_density(sizes: PlanarSizes, volume_fraction=None, number_density=None, *,
                   source: str = ARGUMENTS, key: str = "") -> tuple[float, float, float]:
    """f, N_V and N_A of sections placed directly in the glide plane, from one of f and N_V.

    Two relations of planar sections hold for spheres of any size distribution (Underwood,
    *Quantitative Stereology*, 1970): the area fraction equals the volume fraction, A_A = V_V
    (Delesse 1847), so N_A = f / (π⟨ρ²⟩); and N_V = (2/π) N_A ⟨1/d⟩ with d = 2ρ the section
    diameter (Fullman, Trans. AIME 197, 1953), so N_A = π N_V / ⟨1/ρ⟩.

    Parameters
    ----------
    sizes : PlanarSizes
    volume_fraction : float, optional
        f, 0 < f < 1 (exactly one of f and N_V).
    number_density : float, optional
        N_V (nm⁻³).
    source, key : str
        Named in the :class:`CaseError`.

    Returns
    -------
    (f, N_V, N_A) : tuple of float
        N_V in nm⁻³ (NaN when f is given and ⟨1/ρ⟩ is infinite: sections binned from ρ = 0),
        N_A in nm⁻².

    Raises
    ------
    CaseError
        Neither or both densities, values out of range, or a number density with ⟨1/ρ⟩ infinite.
    """
    f, n_v = _given_density(volume_fraction, number_density, source, key)
    inverse, rho2 = sizes.moment(-1), sizes.moment(2)
    if f is not None:
        n_a = f / (math.pi * rho2)
        return f, (n_a * inverse / math.pi if math.isfinite(inverse) else math.nan), n_a
    if not math.isfinite(inverse):
        raise CaseError(source, _key(key, "number_density_per_um3"),
                        "Fullman's N_V = (2/pi) N_A <1/d> needs the mean inverse section size, "
                        "infinite for sections binned from 0; give `volume_fraction` instead")
    n_a = math.pi * n_v / inverse
    return _fraction_below_one(n_a * math.pi * rho2, number_density, source, key), n_v, n_a


def areal_density(distribution: SizeDistribution, number_density: float) -> float:
    """Expected sections per area of a plane, N_A = 2⟨r⟩ N_V (nm⁻²) (Underwood 1970).

    A sphere of radius r is cut when its centre lies within r of the plane, a slab of thickness 2r.
    """
    return 2.0 * distribution.moment(1) * number_density


def mean_square_spacing(areal_density_per_nm2: float) -> float:
    """Mean square spacing L_s = N_A^(-1/2) (nm); infinite for N_A = 0 (docs/physics.md)."""
    return math.inf if areal_density_per_nm2 <= 0.0 else areal_density_per_nm2**-0.5


def section_radius_moments(distribution: SizeDistribution) -> tuple[float, float]:
    """Expected ⟨ρ⟩ (nm) and ⟨ρ²⟩ (nm²) of the sections a plane cuts through the spheres.

    Derivation (Underwood, *Quantitative Stereology*, 1970).  A sphere of radius r is cut when its
    centre lies in the slab |z| < r, so among the cut spheres the radius has density
    r p(r)/⟨r⟩, and given r the height z is uniform on (-r, r).  With ρ² = r² - z²:

    * E[ρ | r] = (1/2r) ∫_{-r}^{r} sqrt(r² - z²) dz = (1/2r)(π r²/2) = π r/4;
    * E[ρ² | r] = (1/2r) ∫_{-r}^{r} (r² - z²) dz = (1/2r)(2r³ - 2r³/3) = 2r²/3.

    Averaging over r p(r)/⟨r⟩: ⟨ρ⟩ = (π/4)⟨r²⟩/⟨r⟩ and ⟨ρ²⟩ = (2/3)⟨r³⟩/⟨r⟩, which for one size
    reduce to π r/4 and 2r²/3.

    Returns
    -------
    (rho_mean_nm, rho2_mean_nm2) : tuple of float
    """
    m1 = distribution.moment(1)
    return 0.25 * math.pi * distribution.moment(2) / m1, (2.0 / 3.0) * distribution.moment(3) / m1


def edge_spacing(mean_square_spacing_nm: float, rho_mean_nm: float) -> float:
    """Mean edge-to-edge spacing estimate L_s - 2⟨ρ⟩ (nm), common practice.

    The free span between discs of mean radius ⟨ρ⟩ whose centres are L_s apart; a rough estimate
    for a random field (it ignores the spread of spacings) and meaningless once it is ≤ 0.
    """
    return mean_square_spacing_nm - 2.0 * rho_mean_nm


def expected_section_stats(distribution: SizeDistribution | PlanarSizes, volume_fraction=None,
                           number_density=None, *, source: str = ARGUMENTS, key: str = "") -> dict:
    """Expected glide-plane statistics of a population (same keys as :func:`section_stats`, no count).

    For :class:`PlanarSizes` (sections placed in the plane) N_A and f, N_V come from
    :func:`planar_density` and ⟨ρ⟩, ⟨ρ²⟩ are the measured sections' own moments.

    Returns
    -------
    dict
        ``volume_fraction``, ``number_density_per_nm3``, ``areal_density_per_nm2``,
        ``areal_density_per_um2``, ``mean_square_spacing_nm``, ``rho_mean_nm``, ``rho_std_nm``,
        ``rho2_mean_nm2``, ``edge_spacing_nm``; for measured sizes also ``measured`` (their
        ``notes``: file, count, unfolding diagnostics).
    """
    if isinstance(distribution, PlanarSizes):
        f, n_v, n_a = planar_density(distribution, volume_fraction, number_density, source=source,
                                     key=key)
        rho1, rho2 = distribution.moment(1), distribution.moment(2)
    else:
        f, n_v = resolve_density(distribution, volume_fraction, number_density, source=source, key=key)
        n_a = areal_density(distribution, n_v)
        rho1, rho2 = section_radius_moments(distribution)
    l_s = mean_square_spacing(n_a)
    stats = {"volume_fraction": f, "number_density_per_nm3": n_v, "areal_density_per_nm2": n_a,
             "areal_density_per_um2": n_a * 1e6, "mean_square_spacing_nm": l_s, "rho_mean_nm": rho1,
             "rho_std_nm": math.sqrt(max(rho2 - rho1**2, 0.0)), "rho2_mean_nm2": rho2,
             "edge_spacing_nm": edge_spacing(l_s, rho1)}
    if isinstance(distribution, _Mixture):
        stats["measured"] = dict(distribution.notes)
    return stats


# --------------------------------------------------------------------------------------------------
# unfolding planar sections into spheres
# --------------------------------------------------------------------------------------------------
def saltykov_matrix(edges_nm) -> np.ndarray:
    """Sections per unit area, by class, cut from spheres at one per unit volume in each class.

    Scheil–Schwartz–Saltykov discretisation (Underwood, *Quantitative Stereology*, 1970, the
    Schwartz–Saltykov diameter method; Saltykov, *Stereometric Metallography*, 1958, from
    memory), written for radii and for classes of any widths: section radii fall into classes
    [e_i, e_(i+1)), and the spheres of class j all have the class's upper limit R_j = e_(j+1) as
    radius.  A plane cuts a sphere of radius R when its centre lies within R, and the height z of
    the cut is then uniform on (0, R); the section ρ = sqrt(R² - z²) lies in [a, b) when
    sqrt(R² - b²) < z <= sqrt(R² - a²).  So, per unit N_V,

        A[i, j] = 2 (sqrt(R_j² - e_i²) - sqrt(R_j² - e_(i+1)²))   for i <= j, 0 below,

    with negative radicands read as 0 (a class above R_j gets no section).  Column j sums to
    2 sqrt(R_j² - e_0²): 2 R_j when the classes start at 0 (every section of the sphere lies in
    some class, N_A = 2 R N_V), less when they start above 0 (a detection limit: sections below
    e_0 were not counted).

    Parameters
    ----------
    edges_nm : array_like, shape (k + 1,)
        Strictly increasing class edges (nm), edges[0] >= 0.

    Returns
    -------
    ndarray, shape (k, k)
        Upper triangular, positive diagonal; A[i, j] in nm (sections per nm² per sphere per nm³).
    """
    e = _float_array(edges_nm)
    if e.size < 2 or e[0] < 0.0 or np.any(np.diff(e) <= 0.0) or not np.all(np.isfinite(e)):
        raise ValueError("class edges must be finite, >= 0 and strictly increasing (at least two)")
    r2 = e[1:][None, :] ** 2
    below = np.sqrt(np.maximum(r2 - e[:-1, None] ** 2, 0.0))
    above = np.sqrt(np.maximum(r2 - e[1:, None] ** 2, 0.0))
    return np.triu(2.0 * (below - above))


def unfold_sections(edges_nm, counts) -> tuple[np.ndarray, dict]:
    """Sphere number densities by class from section counts by class (Scheil–Schwartz–Saltykov).

    Solves A N_V = N_A, A from :func:`saltykov_matrix`, by back substitution from the largest
    class (Underwood 1970).  Sampling noise in the large classes, whose sections are subtracted
    from every smaller class, can leave some N_V(j) < 0, a well-known weakness of the method.
    Negative densities have no meaning, and dropping them would no
    longer reproduce the measured sections; the solution is then replaced by the non-negative
    least-squares one, min ||A N_V - N_A|| over N_V >= 0 (Lawson & Hanson, *Solving Least Squares
    Problems*, 1974; scipy.optimize.nnls), which equals the plain solution whenever that is
    non-negative.  How much was negative and how well the result reproduces the counts is
    returned, so that it can be reported.

    Parameters
    ----------
    edges_nm : array_like, shape (k + 1,)
        Class edges of the section radii (nm), as for :func:`saltykov_matrix`.
    counts : array_like, shape (k,)
        Sections per class, >= 0 (per unit area N_A(i), or raw counts: the result scales alike).

    Returns
    -------
    n_v : ndarray, shape (k,)
        Spheres per unit volume of radius edges[j + 1] (counts per area divided by a length).
    info : dict
        ``n_classes`` k; ``n_negative_classes``, the classes the plain solution made negative;
        ``negative_fraction``, their share Σ|N_V(j) < 0| / Σ|N_V(j)| of the plain solution;
        ``residual_ratio``, ||A N_V - N_A|| / ||N_A|| of the returned solution (0 to round-off
        without negatives).
    """
    a = saltykov_matrix(edges_nm)
    b = _float_array(counts)
    if b.size != a.shape[0] or np.any(b < 0.0) or not np.all(np.isfinite(b)) or b.sum() <= 0.0:
        raise ValueError("counts must be finite, >= 0, not all 0, one per class")
    raw = solve_triangular(a, b, lower=False)
    negative = raw < 0.0
    n_v = nnls(a, b, maxiter=NNLS_ITERATIONS_PER_CLASS * b.size)[0] if negative.any() else raw
    info = {"n_classes": int(b.size), "n_negative_classes": int(negative.sum()),
            "negative_fraction": float(np.abs(raw[negative]).sum() / np.abs(raw).sum()),
            "residual_ratio": float(np.linalg.norm(a @ n_v - b) / np.linalg.norm(b))}
    return n_v, info


# --------------------------------------------------------------------------------------------------
# particles in 3D and their sections
# --------------------------------------------------------------------------------------------------
def _float_array(a) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.float64).reshape(-1)


@dataclass(frozen=True)
class Particles:
    """Spheres in a slab around the glide plane z = 0, periodic in x and y (all lengths in nm).

    Attributes
    ----------
    x_nm, y_nm, z_nm, r_nm : ndarray, shape (n,)
        Centres (x in [0, Lx), y in [0, Ly), |z| ≤ half_thickness_nm) and radii.
    Lx_nm, Ly_nm : float
        Periodic box in the plane.
    half_thickness_nm : float
        The slab holds the centres with |z| ≤ half_thickness_nm.
    """

    x_nm: np.ndarray
    y_nm: np.ndarray
    z_nm: np.ndarray
    r_nm: np.ndarray
    Lx_nm: float
    Ly_nm: float
    half_thickness_nm: float

    def __post_init__(self):
        for name in ("x_nm", "y_nm", "z_nm", "r_nm"):
            object.__setattr__(self, name, _float_array(getattr(self, name)))
        if not (self.x_nm.size == self.y_nm.size == self.z_nm.size == self.r_nm.size):
            raise ValueError("Particles arrays must have the same length")

    def __len__(self) -> int:
        return self.r_nm.size

    def volume_fraction(self) -> float:
        """Sum of sphere volumes over the slab volume Lx Ly 2h (an unbiased estimate of f)."""
        slab = self.Lx_nm * self.Ly_nm * 2.0 * self.half_thickness_nm
        return float(4.0 * math.pi / 3.0 * np.sum(self.r_nm**3) / slab)


@dataclass(frozen=True)
class Sections:
    """Discs cut by the glide plane z = 0 (all lengths in nm), 1D float64 arrays of one length.

    Attributes
    ----------
    x_nm, y_nm : ndarray, shape (n,)
        Disc centres in the plane.
    rho_nm : ndarray, shape (n,)
        Planar radii ρ = sqrt(r² - z²).
    r_nm, z_nm : ndarray, shape (n,)
        Radius and centre height of the sphere each disc comes from; NaN when unknown (sections
        read from a 2D file).
    """

    x_nm: np.ndarray
    y_nm: np.ndarray
    rho_nm: np.ndarray
    r_nm: np.ndarray
    z_nm: np.ndarray

    def __post_init__(self):
        for name in ("x_nm", "y_nm", "rho_nm", "r_nm", "z_nm"):
            object.__setattr__(self, name, _float_array(getattr(self, name)))
        if len({a.size for a in (self.x_nm, self.y_nm, self.rho_nm, self.r_nm, self.z_nm)}) != 1:
            raise ValueError("Sections arrays must have the same length")

    def __len__(self) -> int:
        return self.rho_nm.size


def section(particles: Particles) -> Sections:
    """Cut the spheres by the plane z = 0: those with |z| < r give discs of radius sqrt(r² - z²)."""
    p = particles
    cut = np.abs(p.z_nm) < p.r_nm
    rho = np.sqrt(p.r_nm[cut] ** 2 - p.z_nm[cut] ** 2)
    return Sections(p.x_nm[cut], p.y_nm[cut], rho, p.r_nm[cut], p.z_nm[cut])


def section_stats(sections: Sections, Lx_nm: float, Ly_nm: float) -> dict:
    """Measured glide-plane statistics of a set of sections in an Lx × Ly box (nm).

    Returns
    -------
    dict
        ``count``; ``areal_density_per_nm2`` and ``areal_density_per_um2`` (N_A = count/(Lx Ly));
        ``mean_square_spacing_nm`` (L_s = N_A^(-1/2), docs/physics.md); ``rho_mean_nm``,
        ``rho_std_nm`` (sample standard deviation, ddof = 1) and ``rho2_mean_nm2``;
        ``edge_spacing_nm`` (L_s - 2⟨ρ⟩, common practice, see :func:`edge_spacing`).  Means are
        NaN with no section.
    """
    rho = sections.rho_nm
    n = rho.size
    n_a = n / (Lx_nm * Ly_nm)
    l_s = mean_square_spacing(n_a)
    rho1 = float(rho.mean()) if n else math.nan
    return {"count": n, "areal_density_per_nm2": n_a, "areal_density_per_um2": n_a * 1e6,
            "mean_square_spacing_nm": l_s, "rho_mean_nm": rho1,
            "rho_std_nm": float(rho.std(ddof=1)) if n > 1 else math.nan,
            "rho2_mean_nm2": float(np.mean(rho**2)) if n else math.nan,
            "edge_spacing_nm": edge_spacing(l_s, rho1)}


def _check_box(Lx_nm, Ly_nm, source: str, key: str) -> tuple[float, float]:
    return _positive(Lx_nm, "Lx_nm", source, key), _positive(Ly_nm, "Ly_nm", source, key)


def _check_count(expected: float, source: str, key: str) -> None:
    if expected > MAX_PARTICLES:
        raise CaseError(source, _key(key, "volume_fraction"),
                        f"the box would hold about {expected:.3g} particles; at most {MAX_PARTICLES} "
                        "allowed")


def place_poisson(distribution: SizeDistribution, number_density: float, Lx_nm: float, Ly_nm: float,
                  rng: np.random.Generator, *, source: str = ARGUMENTS, key: str = "") -> Particles:
    """Poisson (overlapping) spheres in the slab |z| < r_max that holds every sphere the plane cuts.

    The number of centres is Poisson(N_V Lx Ly 2 r_max); centres are uniform in the slab and radii
    independent draws from ``distribution``.

    Parameters
    ----------
    distribution : SingleSize, LogNormal or LSW
    number_density : float
        N_V (nm⁻³).
    Lx_nm, Ly_nm : float
        Periodic box (nm).
    rng : numpy.random.Generator
    source, key : str
        Named in the :class:`CaseError` for invalid parameters.

    Returns
    -------
    Particles
    """
    Lx, Ly = _check_box(Lx_nm, Ly_nm, source, key)
    n_v = _positive(number_density, "number_density_per_um3", source, key)
    h = distribution.r_max
    mean_count = n_v * Lx * Ly * 2.0 * h
    _check_count(mean_count, source, key)
    n = int(rng.poisson(mean_count))
    x, y, z = rng.random(n) * Lx, rng.random(n) * Ly, (2.0 * rng.random(n) - 1.0) * h
    return Particles(x, y, z, distribution.sample(n, rng), Lx, Ly, h)


# --------------------------------------------------------------------------------------------------
# hard spheres: random sequential addition with a cell list
# --------------------------------------------------------------------------------------------------
@njit(**JIT)
def _wrap_cell(i, n):
    """Cell index i taken periodically in [0, n)."""
    return (i % n + n) % n


@njit(**JIT)
def _overlaps(x, y, z, r, rmax, pos, rad, head, nxt, ncell, cell, box):
    """True if the sphere (x, y, z, r) overlaps a placed sphere (periodic minimum image in x, y, z).

    Candidates lie within r + rmax of the centre, so along each axis the search covers
    ceil((r + rmax)/side) cells either side of the sphere's own cell ``cell`` (every cell once
    when that wraps round the box).
    """
    reach = np.empty(3, dtype=np.int64)
    for k in range(3):
        reach[k] = min(2 * int(np.ceil((r + rmax) * ncell[k] / box[k])) + 1, ncell[k])
    for ox in range(reach[0]):
        cx = _wrap_cell(cell[0] - reach[0] // 2 + ox, ncell[0])
        for oy in range(reach[1]):
            cy = _wrap_cell(cell[1] - reach[1] // 2 + oy, ncell[1])
            for oz in range(reach[2]):
                cz = _wrap_cell(cell[2] - reach[2] // 2 + oz, ncell[2])
                j = head[(cx * ncell[1] + cy) * ncell[2] + cz]
                while j >= 0:
                    ux = x - pos[j, 0]
                    ux -= box[0] * np.floor(ux / box[0] + 0.5)
                    uy = y - pos[j, 1]
                    uy -= box[1] * np.floor(uy / box[1] + 0.5)
                    uz = z - pos[j, 2]
                    uz -= box[2] * np.floor(uz / box[2] + 0.5)
                    s = r + rad[j]
                    if ux * ux + uy * uy + uz * uz < s * s:
                        return True
                    j = nxt[j]
    return False


@njit(**JIT)
def _rsa_kernel(rad, trials, box, ncell, max_attempts, pos, head, nxt, state):
    """Random sequential addition of spheres ``rad`` (in order) with trials from ``trials``.

    Parameters
    ----------
    rad : float64 (n,)
        Radii in the order of insertion.
    trials : float64 (m, 3)
        Uniform numbers in [0, 1): trial centre (u0 Lx, u1 Ly, (u2 - 1/2) Lz).
    box : float64 (3,)
        Periods Lx, Ly, Lz.
    ncell : int64 (3,)
        Cells along x, y, z (any number ≥ 1; the search reach adapts to the cell side).
    max_attempts : int
        Trials allowed for one sphere.
    pos : float64 (n, 3), out
        Accepted centres (z in [-Lz/2, Lz/2)).
    head : int64 (ncell.prod(),), in/out
        First sphere of each cell's linked list, -1 for none.
    nxt : int64 (n,), in/out
        Next sphere in the same cell, -1 at the end.
    state : int64 (2,), in/out
        [next sphere to place, trials spent on it]; the kernel resumes from it.

    Returns
    -------
    int
        Number of rows of ``trials`` consumed.  The kernel stops when every sphere is placed, the
        trials run out, or one sphere has used ``max_attempts`` trials.
    """
    n, m = rad.size, trials.shape[0]
    i, a, t = state[0], state[1], 0
    cell = np.empty(3, dtype=np.int64)
    rmax = rad.max() if n > 0 else 0.0
    while i < n and t < m and a < max_attempts:
        x = trials[t, 0] * box[0]
        y = trials[t, 1] * box[1]
        z = (trials[t, 2] - 0.5) * box[2]
        t += 1
        a += 1
        cell[0] = min(int(trials[t - 1, 0] * ncell[0]), ncell[0] - 1)
        cell[1] = min(int(trials[t - 1, 1] * ncell[1]), ncell[1] - 1)
        cell[2] = min(int(trials[t - 1, 2] * ncell[2]), ncell[2] - 1)
        if not _overlaps(x, y, z, rad[i], rmax, pos, rad, head, nxt, ncell, cell, box):
            pos[i, 0], pos[i, 1], pos[i, 2] = x, y, z
            c = (cell[0] * ncell[1] + cell[1]) * ncell[2] + cell[2]
            nxt[i] = head[c]
            head[c] = i
            i += 1
            a = 0
    state[0], state[1] = i, a
    return t


def rsa_positions(radii: np.ndarray, box: np.ndarray, rng: np.random.Generator,
                  max_attempts: int = RSA_MAX_ATTEMPTS) -> tuple[np.ndarray, int]:
    """Centres of non-overlapping spheres by random sequential addition, periodic in x, y and z.

    Spheres are inserted in the order given; each gets trial centres uniform in the box until one
    does not overlap any sphere already placed (Widom, J. Chem. Phys. 44, 1966).  Trials come from
    ``rng`` in batches, so the result is reproducible for a given generator state.

    Parameters
    ----------
    radii : ndarray, shape (n,)
        Radii (any length unit, the same as ``box``), order of insertion.
    box : ndarray, shape (3,)
        Periods (Lx, Ly, Lz), each ≥ 4 max(radii) so the minimum image is the only possible overlap.
    rng : numpy.random.Generator
    max_attempts : int
        Trials allowed for one sphere.

    Returns
    -------
    pos : ndarray, shape (n, 3)
        Centres, x in [0, Lx), y in [0, Ly), z in [-Lz/2, Lz/2); rows past the first failure are 0.
    placed : int
        Spheres placed; ``placed < n`` means sphere ``placed`` used up ``max_attempts``.
    """
    rad = _float_array(radii)
    box = _float_array(box)
    n = rad.size
    # Cell side max + mean radius: the typical reach r_i + max(r) spans about one cell, and for
    # broad distributions (log-normal) this was measured twice as fast as a side of 2 max(r).
    side = rad.max() + rad.mean() if n else 1.0
    # Dilute fields would have many empty cells per sphere; cap the table's size instead.
    side = max(side, (box.prod() / (RSA_CELLS_PER_SPHERE * n + 1)) ** (1.0 / 3.0))
    ncell = np.maximum(np.floor(box / side), 1).astype(np.int64)
    pos = np.zeros((n, 3))
    head = np.full(int(ncell.prod()), -1, dtype=np.int64)
    nxt = np.full(n, -1, dtype=np.int64)
    state = np.zeros(2, dtype=np.int64)
    while state[0] < n and state[1] < max_attempts:
        trials = rng.random((max(2 * (n - state[0]), RSA_MIN_BATCH), 3))
        _rsa_kernel(rad, trials, box, ncell, max_attempts, pos, head, nxt, state)
    return pos, int(state[0])


def place_hard_spheres(distribution: SizeDistribution, number_density: float, Lx_nm: float, Ly_nm: float,
                       rng: np.random.Generator, *, max_attempts: int = RSA_MAX_ATTEMPTS,
                       source: str = ARGUMENTS, key: str = "") -> Particles:
    """Non-overlapping spheres by random sequential addition, largest first, around z = 0.

    The box is Lx × Ly × 2h with h = HARD_SPHERE_HALF_THICKNESS r_max, periodic in all three
    directions (see that constant for why), and holds round(N_V Lx Ly 2h) spheres, a fixed number
    (hard spheres have sub-Poissonian number fluctuations).  Inserting the largest first lets the
    big spheres find room before the small ones fill the gaps.

    Parameters
    ----------
    distribution : SingleSize, LogNormal or LSW
    number_density : float
        N_V (nm⁻³), with f = N_V (4π/3)⟨r³⟩ ≤ RSA_MAX_FRACTION.
    Lx_nm, Ly_nm : float
        Periodic box (nm), each ≥ 4 r_max.
    rng : numpy.random.Generator
    max_attempts : int
        Random trials allowed for one sphere.
    source, key : str
        Named in the :class:`CaseError`.

    Returns
    -------
    Particles
        Sorted by decreasing radius; ``half_thickness_nm`` = h.

    Raises
    ------
    CaseError
        For f > RSA_MAX_FRACTION, a box narrower than 4 r_max, or a sphere that finds no room.
    """
    Lx, Ly = _check_box(Lx_nm, Ly_nm, source, key)
    n_v = _positive(number_density, "number_density_per_um3", source, key)
    f = volume_fraction_from_density(distribution, n_v)
    if f > RSA_MAX_FRACTION:
        raise CaseError(source, _key(key, "volume_fraction"),
                        f"got {f:.4g} for hard spheres; random sequential addition jams near 0.38, "
                        f"allowed f <= {RSA_MAX_FRACTION} (use arrangement \"poisson\" for more)")
    r_max = distribution.r_max
    for name, length in (("Lx_nm", Lx), ("Ly_nm", Ly)):
        if length < 4.0 * r_max:
            raise CaseError(source, _key(key, name), f"got {length:.4g} nm; hard spheres need at least "
                            f"4 r_max = {4.0 * r_max:.4g} nm")
    h = HARD_SPHERE_HALF_THICKNESS * r_max
    n = int(round(n_v * Lx * Ly * 2.0 * h))
    _check_count(n, source, key)
    radii = np.sort(distribution.sample(n, rng))[::-1]
    pos, placed = rsa_positions(radii, np.array([Lx, Ly, 2.0 * h]), rng, max_attempts)
    if placed < n:
        raise CaseError(source, _key(key, "volume_fraction"),
                        f"got {f:.4g}: random sequential addition found no room for sphere {placed + 1} "
                        f"of {n} after {max_attempts} trials; ask for a lower volume fraction")
    return Particles(pos[:, 0], pos[:, 1], pos[:, 2], radii, Lx, Ly, h)


ARRANGEMENTS = {"poisson": place_poisson, "hard_spheres": place_hard_spheres}


def place_in_plane(sizes: PlanarSizes, areal_density_per_nm2: float, Lx_nm: float, Ly_nm: float,
                   rng: np.random.Generator, *, source: str = ARGUMENTS, key: str = "") -> Sections:
    """Sections put directly in the glide plane: Poisson(N_A Lx Ly) centres, radii from ``sizes``.

    The sections of Poisson spheres by a plane are themselves a Poisson field of discs, so this
    is the field a 3D placement would give if the measured sections were the glide plane's.  The
    sphere radius and height of each disc are unknown (NaN), as for a file of sections.
    """
    Lx, Ly = _check_box(Lx_nm, Ly_nm, source, key)
    mean_count = areal_density_per_nm2 * Lx * Ly
    _check_count(mean_count, source, key)
    n = int(rng.poisson(mean_count))
    x, y = rng.random(n) * Lx, rng.random(n) * Ly
    nan = np.full(n, np.nan)
    return Sections(x, y, sizes.sample(n, rng), nan, nan.copy())


def sample_sections(distribution: SizeDistribution | PlanarSizes, *, volume_fraction=None,
                    number_density=None, arrangement: str = "poisson", Lx_nm: float, Ly_nm: float,
                    rng: np.random.Generator, source: str = ARGUMENTS, key: str = "") -> Sections:
    """Place a population in 3D around the glide plane and return its sections (all lengths nm).

    Parameters
    ----------
    distribution : SingleSize, LogNormal, LSW, Measured or PlanarSizes
        Sphere radii; :class:`PlanarSizes` are placed directly in the plane
        (:func:`place_in_plane`, Poisson only).
    volume_fraction : float, optional
        f, 0 < f < 1 (exactly one of f and N_V).
    number_density : float, optional
        N_V (nm⁻³).
    arrangement : {"poisson", "hard_spheres"}
        Overlapping Poisson spheres, or non-overlapping spheres by random sequential addition.
    Lx_nm, Ly_nm : float
        Periodic box in the plane (nm).
    rng : numpy.random.Generator
    source, key : str
        Named in the :class:`CaseError` (``key`` is the dotted prefix of the parameters).

    Returns
    -------
    Sections
    """
    if arrangement not in ARRANGEMENTS:
        raise CaseError(source, _key(key, "arrangement"),
                        f"got {arrangement!r}; allowed {', '.join(map(repr, ARRANGEMENTS))}")
    if isinstance(distribution, PlanarSizes):
        if arrangement != "poisson":
            raise CaseError(source, _key(key, "arrangement"), f"got {arrangement!r}; sections "
                            "placed in the glide plane are Poisson discs, allowed 'poisson'")
        _, _, n_a = planar_density(distribution, volume_fraction, number_density, source=source,
                                   key=key)
        return place_in_plane(distribution, n_a, Lx_nm, Ly_nm, rng, source=source, key=key)
    _, n_v = resolve_density(distribution, volume_fraction, number_density, source=source, key=key)
    place = ARRANGEMENTS[arrangement]
    return section(place(distribution, n_v, Lx_nm, Ly_nm, rng, source=source, key=key))


# --------------------------------------------------------------------------------------------------
# files
# --------------------------------------------------------------------------------------------------
def _csv_rows(path, key: str):
    """(line number, cells) of each row of a CSV file that is neither blank nor a ``#`` comment.

    Read line by line, each at most MAX_CSV_LINE_CHARS long, so that a huge file or a file with
    no line breaks costs no more memory than one line before it is refused.  Every failure is a
    :class:`CaseError` naming the file and ``key``.
    """
    if os.path.isdir(path):
        raise CaseError(path, key, "is a folder, not a CSV file")
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:  # tolerate a byte-order mark
            for number in itertools.count(1):
                text = fh.readline(MAX_CSV_LINE_CHARS + 1)
                if not text:
                    return
                if len(text) > MAX_CSV_LINE_CHARS and not text.endswith(("\n", "\r")):
                    raise CaseError(path, key, f"line {number}: longer than {MAX_CSV_LINE_CHARS} "
                                               "characters; not a CSV table of numbers")
                if text.lstrip().startswith("#"):
                    continue
                cells = next(csv.reader([text]), [])
                if any(c.strip() for c in cells):
                    yield number, cells
    except FileNotFoundError:
        raise CaseError(path, key, "cannot read the file: no such file") from None
    except UnicodeDecodeError as err:
        raise CaseError(path, key, f"not UTF-8 text (byte {err.object[err.start]:#04x}); save "
                                   "it as UTF-8 CSV") from None
    except (OSError, csv.Error) as err:
        raise CaseError(path, key, f"cannot read the file: {err}") from None


def _number(path, key: str, line: int, column: str, text: str) -> float:
    """One cell as a finite float, or a CaseError naming the line and column."""
    try:
        value = float(text)
    except ValueError:
        raise CaseError(path, key, f"line {line}: `{column}` = {text.strip()!r} is not a number") from None
    if not math.isfinite(value):
        raise CaseError(path, key, f"line {line}: `{column}` = {text.strip()!r} is not finite")
    return value


def _columns(path, key: str, rows, header: list[str], wanted: tuple[str, ...], max_rows: int
             ) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Parse the ``wanted`` columns of the remaining ``rows`` (at most ``max_rows``) as floats.

    Returns
    -------
    values : dict of ndarray, shape (n,)
        One float64 array per wanted column.
    lines : ndarray of int, shape (n,)
        File line number (1-based) of each row, for error messages.
    """
    where = [header.index(name) for name in wanted]
    store = [array("d") for _ in wanted]
    lines = array("q")
    for line, row in rows:
        if len(lines) == max_rows:
            raise CaseError(path, key, f"line {line}: more than {max_rows} rows; at most "
                                       f"{max_rows} allowed")
        if len(row) != len(header):
            raise CaseError(path, key, f"line {line}: {len(row)} fields, expected {len(header)}")
        for out, c in zip(store, where):
            out.append(_number(path, key, line, header[c], row[c]))
        lines.append(line)
    values = {name: np.frombuffer(out, dtype=np.float64).copy() for name, out in zip(wanted, store)}
    return values, np.frombuffer(lines, dtype=np.int64).copy()


def _read_csv(path, key: str, columns: tuple[str, ...]) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Read a numeric CSV whose header holds exactly ``columns`` (any order), MAX_PARTICLES rows.

    Returns
    -------
    values, lines
        As for :func:`_columns`.
    """
    rows = _csv_rows(path, key)
    first = next(rows, None)
    if first is None:
        raise CaseError(path, key, f"empty file; expected the header {','.join(columns)}")
    header = [c.strip() for c in first[1]]
    if sorted(header) != sorted(columns):
        missing = [c for c in columns if c not in header]
        extra = [c for c in header if c not in columns]
        wrong = ", ".join(f"{what} {names}" for what, names in (("missing", missing), ("extra", extra))
                          if names)
        raise CaseError(path, key, f"header {','.join(header)!r} ({wrong or 'repeated columns'}); "
                        f"expected exactly {','.join(columns)}")
    return _columns(path, key, rows, header, columns, MAX_PARTICLES)


def _first_bad(path, key: str, bad: np.ndarray, lines: np.ndarray, describe) -> None:
    """Raise a CaseError naming the first row flagged in ``bad``; ``describe(i)`` words the problem."""
    if bad.any():
        i = int(np.argmax(bad))
        raise CaseError(path, key, f"line {lines[i]}: {describe(i)}")


def _check_rows(path, key: str, v: dict, lines: np.ndarray, Lx: float, Ly: float) -> None:
    """Radii >= 0 and centres inside [0, Lx) x [0, Ly)."""
    r = v["radius_nm"]
    _first_bad(path, key, r < 0.0, lines, lambda i: f"`radius_nm` = {r[i]:g} is negative; radii must be >= 0")
    for name, length in (("x_nm", Lx), ("y_nm", Ly)):
        c = v[name]
        _first_bad(path, key, (c < 0.0) | (c >= length), lines,
                   lambda i: f"`{name}` = {c[i]:g} lies outside the box [0, {length:g}) nm")


def read_particles_csv(path, key: str, Lx_nm: float, Ly_nm: float) -> Sections:
    """Read a 3D particle file and cut it by the glide plane z = 0.

    The file is CSV with the header ``x_nm,y_nm,z_nm,radius_nm`` (nm; columns in any order), one
    sphere per line; x in [0, Lx), y in [0, Ly), any z, radius ≥ 0.

    Parameters
    ----------
    path : str or path-like
    key : str
        Case-file key that named the file (e.g. ``"populations[0].file"``), used in errors.
    Lx_nm, Ly_nm : float
        Periodic box in the plane (nm).

    Returns
    -------
    Sections
        The spheres with |z| < r.

    Raises
    ------
    CaseError
        Unreadable file, wrong columns, a non-numeric or non-finite value, a negative radius, a
        centre outside the box (naming the line).
    """
    v, lines = _read_csv(path, key, CSV_PARTICLES)
    _check_rows(path, key, v, lines, float(Lx_nm), float(Ly_nm))
    slab = float(np.abs(v["z_nm"]).max(initial=0.0))
    return section(Particles(v["x_nm"], v["y_nm"], v["z_nm"], v["radius_nm"], Lx_nm, Ly_nm, slab))


def read_sections_csv(path, key: str, Lx_nm: float, Ly_nm: float) -> Sections:
    """Read a file of glide-plane sections: CSV with the header ``x_nm,y_nm,radius_nm`` (nm).

    ``radius_nm`` is the planar radius ρ ≥ 0 (0 for a point obstacle); the sphere radius and height
    are unknown and set to NaN.  Parameters and errors as for :func:`read_particles_csv`.

    Returns
    -------
    Sections
    """
    v, lines = _read_csv(path, key, CSV_SECTIONS)
    _check_rows(path, key, v, lines, float(Lx_nm), float(Ly_nm))
    nan = np.full(lines.size, np.nan)
    return Sections(v["x_nm"], v["y_nm"], v["radius_nm"], nan, nan.copy())


# --------------------------------------------------------------------------------------------------
# measured size data
# --------------------------------------------------------------------------------------------------
def _measured_header(path, key: str, rows, column: str | None, kind: str) -> tuple[list[str], bool]:
    """The header of a sizes file and whether it is binned (``lower_nm,upper_nm,count``)."""
    first = next(rows, None)
    per_row = column or f"{kind}_nm"
    expected = f"{per_row} (one size per row) or {','.join(CSV_BINS)} (bins)"
    if first is None:
        raise CaseError(path, key, f"empty file; expected a header naming {expected}")
    header = [c.strip() for c in first[1]]
    if all(_is_number(c) for c in header):
        raise CaseError(path, key, f"line {first[0]}: no header (the first line holds numbers); "
                                   f"expected a header naming {expected}")
    if len(set(header)) != len(header):
        raise CaseError(path, key, f"line {first[0]}: header {','.join(header)!r} repeats a column")
    binned = CSV_BINS[0] in header or CSV_BINS[1] in header
    wanted = CSV_BINS if binned else (per_row,)
    missing = [c for c in wanted if c not in header]
    if binned and column is not None:
        raise CaseError(path, key, f"a binned file ({','.join(CSV_BINS)}) takes no "
                                   f"`sizes_column` (got {column!r})")
    if missing:
        other = "diameter" if kind == "radius" else "radius"
        hint = (f" (the file has `{other}_nm`: set size_kind = \"{other}\")"
                if not binned and column is None and f"{other}_nm" in header else "")
        raise CaseError(path, key, f"line {first[0]}: header {','.join(header)!r} lacks "
                                   f"{', '.join(f'`{c}`' for c in missing)}{hint}; expected {expected}")
    return header, binned


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _check_sizes(path, key: str, values: np.ndarray, lines: np.ndarray, column: str,
                 allow_zero: bool = False) -> None:
    """Sizes (nm) > 0 (or >= 0) and within MEASURED_SIZE_RANGE_NM, naming the first bad line."""
    lo, hi = MEASURED_SIZE_RANGE_NM
    if allow_zero:
        _first_bad(path, key, values < 0.0, lines, lambda i: f"`{column}` = {values[i]:g} is negative")
        small = (values > 0.0) & (values < lo)
    else:
        _first_bad(path, key, values <= 0.0, lines,
                   lambda i: f"`{column}` = {values[i]:g}; sizes must be > 0 nm")
        small = values < lo
    _first_bad(path, key, small | (values > hi), lines,
               lambda i: f"`{column}` = {values[i]:g} nm lies outside [{lo:g}, {hi:g}] nm, the "
                         "range of particle sizes accepted (a unit mistake?)")


def _read_bins(path, key: str, rows, header: list[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Bins ``lower_nm,upper_nm,count`` in increasing order, not overlapping, whole counts."""
    v, lines = _columns(path, key, rows, header, CSV_BINS, MAX_MEASURED_SIZES)
    lower, upper, count = (v[c] for c in CSV_BINS)
    if lines.size == 0:
        raise CaseError(path, key, "no bins after the header")
    _check_sizes(path, key, lower, lines, "lower_nm", allow_zero=True)
    _check_sizes(path, key, upper, lines, "upper_nm")
    _first_bad(path, key, upper <= lower, lines,
               lambda i: f"bin [{lower[i]:g}, {upper[i]:g}) nm: `upper_nm` must exceed `lower_nm`")
    _first_bad(path, key, np.r_[False, lower[1:] < lower[:-1]], lines,
               lambda i: f"bin [{lower[i]:g}, {upper[i]:g}) nm comes after [{lower[i - 1]:g}, "
                         f"{upper[i - 1]:g}); list the bins in increasing order")
    _first_bad(path, key, np.r_[False, lower[1:] < upper[:-1]], lines,
               lambda i: f"bin [{lower[i]:g}, {upper[i]:g}) nm overlaps [{lower[i - 1]:g}, "
                         f"{upper[i - 1]:g})")
    _first_bad(path, key, (count < 0.0) | (count != np.round(count)), lines,
               lambda i: f"`count` = {count[i]:g}; a count is a whole number of particles >= 0")
    total = float(count.sum())
    if not 0.0 < total <= MAX_MEASURED_SIZES:
        raise CaseError(path, key, f"the counts add up to {total:g}; between 1 and "
                                   f"{MAX_MEASURED_SIZES} measured particles allowed")
    return lower, upper, count


def default_unfold_classes(n: int) -> int:
    """Classes for unfolding ``n`` per-row section sizes: round(2 n^(1/3)) (the Rice rule for the
    bins of a histogram, common practice), at least MIN_DEFAULT_CLASSES, at most MAX_UNFOLD_CLASSES.

    More classes lower the bias of putting every sphere of a class at its upper limit; each class
    added amplifies the counting noise that the unfolding subtracts from the smaller classes.
    Measured with this module on sections of log-normal spheres (σ = 0.3), 40 samples each of
    50, 200, 1000, 5000 and 20 000 sections: the rms relative error of the unfolded ⟨R³⟩ was
    0.22, 0.10, 0.05, 0.03, 0.008 at the Rice count, 0.18, 0.09, 0.04, 0.02, 0.008 at the best of
    4 to 55 classes, and 0.18, 0.10, 0.06, 0.08, 0.09 with a fixed 15 classes (whose width grows
    with the largest section measured).
    """
    return int(min(max(round(2.0 * n ** (1.0 / 3.0)), MIN_DEFAULT_CLASSES), MAX_UNFOLD_CLASSES))


def _classes(path, key: str, lower: np.ndarray, upper: np.ndarray, count: np.ndarray
             ) -> tuple[np.ndarray, np.ndarray]:
    """Contiguous class edges and counts of ordered bins, a gap becoming a class of count 0.

    Bin i becomes class i + (gaps before it); edges[c] = lower and edges[c + 1] = upper of the
    bin in class c, so a gap class runs from the previous bin's upper edge to the next lower one.
    """
    gap = lower[1:] > upper[:-1]
    n = lower.size + int(gap.sum())
    if n > MAX_UNFOLD_CLASSES:
        raise CaseError(path, key, f"{n} classes to unfold (bins and the gaps between them); at "
                                   f"most {MAX_UNFOLD_CLASSES} allowed")
    where = np.arange(lower.size) + np.concatenate(([0], np.cumsum(gap)))
    edges, counts = np.empty(n + 1), np.zeros(n)
    edges[where], edges[where + 1], counts[where] = lower, upper, count
    return edges, counts


def read_measured_sizes(path, key: str, *, sizes_are: str, size_kind: str = "radius",
                        column: str | None = None, sections_as: str = "unfolded",
                        classes: int | None = None) -> Measured | PlanarSizes:
    """Read measured particle sizes (one per row, or bins with counts) as a size distribution.

    The file is CSV (UTF-8, ``#`` comment lines and blank lines skipped) with a header.  Per row:
    a column of sizes in nm, ``column`` (default ``radius_nm`` or ``diameter_nm`` after
    ``size_kind``), other columns ignored.  Binned: ``lower_nm,upper_nm,count`` (nm, bins in
    increasing order, not overlapping, whole counts), other columns ignored.

    * ``sizes_are = "particles"``: 3D radii (atom-probe tomography, or sizes already corrected);
      a :class:`Measured` of point masses (rows) or uniform bins.
    * ``sizes_are = "sections"``, ``sections_as = "unfolded"``: planar section radii, unfolded to
      spheres by :func:`unfold_sections` (Scheil–Schwartz–Saltykov); rows are first binned into
      ``classes`` equal classes on [0, ρ_max] (default :func:`default_unfold_classes`), bins are
      the classes (a gap between bins is a class with no section).  A :class:`Measured` of point
      masses at the class upper limits.
    * ``sizes_are = "sections"``, ``sections_as = "in_plane"``: the sections themselves, to be
      placed in the glide plane; a :class:`PlanarSizes`.

    Parameters
    ----------
    path : str or path-like
    key : str
        Case key that named the file (e.g. ``"populations[1].sizes_file"``), used in errors.
    sizes_are : {"particles", "sections"}
    size_kind : {"radius", "diameter"}
        What the numbers are; diameters are halved.
    column : str, optional
        Column of a per-row file.
    sections_as : {"unfolded", "in_plane"}
    classes : int, optional
        Unfolding classes of a per-row file of sections, 1 to MAX_UNFOLD_CLASSES.

    Returns
    -------
    Measured or PlanarSizes
        With ``notes``: ``file``, ``format`` ("rows" or "bins"), ``sizes_are``, ``size_kind``,
        ``n_sizes`` (particles measured) and, after unfolding, the ``unfolding`` diagnostics of
        :func:`unfold_sections` plus ``method`` and ``class_width_nm``.

    Raises
    ------
    CaseError
        For an unreadable file, a missing header or column, a non-numeric, non-finite,
        non-positive or implausible size, bins out of order or overlapping, counts that are not
        whole or add up to 0 or more than MAX_MEASURED_SIZES, more than MAX_MEASURED_SIZES rows
        or MAX_UNFOLD_CLASSES classes (each naming the line where it applies).
    """
    column = column.strip() if column else None
    rows = _csv_rows(path, key)
    header, binned = _measured_header(path, key, rows, column, size_kind)
    half = 0.5 if size_kind == "diameter" else 1.0
    notes = {"file": os.fspath(path), "format": "bins" if binned else "rows", "sizes_are": sizes_are,
             "size_kind": size_kind}
    if binned:
        lower, upper, count = _read_bins(path, key, rows, header)
        lower, upper = lower * half, upper * half
        notes["n_sizes"] = int(count.sum())
    else:
        name = column or f"{size_kind}_nm"
        v, lines = _columns(path, key, rows, header, (name,), MAX_MEASURED_SIZES)
        if lines.size == 0:
            raise CaseError(path, key, "no sizes after the header")
        _check_sizes(path, key, v[name], lines, name)
        lower = upper = v[name] * half
        count = np.ones(lower.size)
        notes["n_sizes"] = int(lower.size)
    if sizes_are == "particles":
        return Measured(lower, upper, count, notes, source=os.fspath(path), key=key)
    if sections_as == "in_plane":
        return PlanarSizes(lower, upper, count, notes, source=os.fspath(path), key=key)
    return _unfolded(path, key, lower, upper, count, binned, classes, notes)


def _unfolded(path, key: str, lower, upper, count, binned: bool, classes: int | None,
              notes: dict) -> Measured:
    """Spheres unfolded from section radii (rows or bins), as point masses at the class limits."""
    if binned:
        edges, counts = _classes(path, key, lower, upper, count)
    else:
        classes = default_unfold_classes(lower.size) if classes is None else int(classes)
        if not 1 <= classes <= MAX_UNFOLD_CLASSES:
            raise CaseError(path, key, f"got {classes} unfolding classes; allowed 1 to "
                                       f"{MAX_UNFOLD_CLASSES}")
        edges = np.linspace(0.0, float(upper.max()), classes + 1)
        counts = np.histogram(upper, bins=edges)[0].astype(np.float64)
    n_v, info = unfold_sections(edges, counts)
    widths = np.diff(edges)
    notes = {**notes, "method": "Scheil-Schwartz-Saltykov (Underwood 1970)",
             "class_width_nm": float(widths.max()), "unfolding": info}
    return Measured(edges[1:], edges[1:], n_v, notes, source=os.fspath(path), key=key)
