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
:class:`SingleSize`, :class:`LogNormal`, :class:`LSW`; the LSW shape itself: :func:`lsw_pdf`,
:func:`lsw_cdf`, :func:`lsw_moment`.
Relations: :func:`resolve_density`, :func:`number_density_from_fraction`,
:func:`volume_fraction_from_density`, :func:`areal_density`, :func:`mean_square_spacing`,
:func:`section_radius_moments`, :func:`edge_spacing`, :func:`expected_section_stats`.
Placement and sectioning: :class:`Particles`, :func:`place_poisson`, :func:`place_hard_spheres`,
:class:`Sections`, :func:`section`, :func:`section_stats`, :func:`sample_sections`.
Files: :func:`read_particles_csv`, :func:`read_sections_csv`.
"""
from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from numba import njit
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

    ⟨u⁰⟩ = ⟨u⟩ = 1 and ⟨u³⟩ ≈ 1.1296 (physics.md; Lifshitz & Slyozov 1961; Wagner 1961).

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


SizeDistribution = SingleSize | LogNormal | LSW


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


def resolve_density(distribution: SizeDistribution, volume_fraction=None, number_density=None, *,
                    source: str = ARGUMENTS, key: str = "") -> tuple[float, float]:
    """Check exactly one of f and N_V and return both.

    Parameters
    ----------
    distribution : SingleSize, LogNormal or LSW
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
    if (volume_fraction is None) == (number_density is None):
        raise CaseError(source, _key(key, "volume_fraction"),
                        "give exactly one of `volume_fraction` and `number_density_per_nm3`")
    if volume_fraction is not None:
        f = _positive(volume_fraction, "volume_fraction", source, key)
        if f >= 1.0:
            raise CaseError(source, _key(key, "volume_fraction"),
                            f"got {volume_fraction!r}; allowed 0 < f < 1")
        return f, number_density_from_fraction(distribution, f)
    n_v = _positive(number_density, "number_density_per_nm3", source, key)
    f = volume_fraction_from_density(distribution, n_v)
    if f >= 1.0:
        raise CaseError(source, _key(key, "number_density_per_nm3"),
                        f"got {number_density!r} nm^-3, a volume fraction of {f:.3g}; allowed f < 1")
    return f, n_v


def areal_density(distribution: SizeDistribution, number_density: float) -> float:
    """Expected sections per area of a plane, N_A = 2⟨r⟩ N_V (nm⁻²) (Underwood 1970).

    A sphere of radius r is cut when its centre lies within r of the plane, a slab of thickness 2r.
    """
    return 2.0 * distribution.moment(1) * number_density


def mean_square_spacing(areal_density_per_nm2: float) -> float:
    """Mean square spacing L_s = N_A^(-1/2) (nm); infinite for N_A = 0 (physics.md)."""
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


def expected_section_stats(distribution: SizeDistribution, volume_fraction=None, number_density=None,
                           *, source: str = ARGUMENTS, key: str = "") -> dict:
    """Expected glide-plane statistics of a population (same keys as :func:`section_stats`, no count).

    Returns
    -------
    dict
        ``volume_fraction``, ``number_density_per_nm3``, ``areal_density_per_nm2``,
        ``areal_density_per_um2``, ``mean_square_spacing_nm``, ``rho_mean_nm``, ``rho_std_nm``,
        ``rho2_mean_nm2``, ``edge_spacing_nm``.
    """
    f, n_v = resolve_density(distribution, volume_fraction, number_density, source=source, key=key)
    n_a = areal_density(distribution, n_v)
    rho1, rho2 = section_radius_moments(distribution)
    l_s = mean_square_spacing(n_a)
    return {"volume_fraction": f, "number_density_per_nm3": n_v, "areal_density_per_nm2": n_a,
            "areal_density_per_um2": n_a * 1e6, "mean_square_spacing_nm": l_s, "rho_mean_nm": rho1,
            "rho_std_nm": math.sqrt(max(rho2 - rho1**2, 0.0)), "rho2_mean_nm2": rho2,
            "edge_spacing_nm": edge_spacing(l_s, rho1)}


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
        ``mean_square_spacing_nm`` (L_s = N_A^(-1/2), physics.md); ``rho_mean_nm``, ``rho_std_nm``
        (sample standard deviation, ddof = 1) and ``rho2_mean_nm2``; ``edge_spacing_nm``
        (L_s - 2⟨ρ⟩, common practice, see :func:`edge_spacing`).  Means are NaN with no section.
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
        raise CaseError(source, _key(key, "number_density_per_nm3"),
                        f"the box would hold about {expected:.3g} particles; at most {MAX_PARTICLES} allowed")


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
    n_v = _positive(number_density, "number_density_per_nm3", source, key)
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
    n_v = _positive(number_density, "number_density_per_nm3", source, key)
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


def sample_sections(distribution: SizeDistribution, *, volume_fraction=None, number_density=None,
                    arrangement: str = "poisson", Lx_nm: float, Ly_nm: float, rng: np.random.Generator,
                    source: str = ARGUMENTS, key: str = "") -> Sections:
    """Place a population in 3D around the glide plane and return its sections (all lengths nm).

    Parameters
    ----------
    distribution : SingleSize, LogNormal or LSW
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
    _, n_v = resolve_density(distribution, volume_fraction, number_density, source=source, key=key)
    place = ARRANGEMENTS[arrangement]
    return section(place(distribution, n_v, Lx_nm, Ly_nm, rng, source=source, key=key))


# --------------------------------------------------------------------------------------------------
# files
# --------------------------------------------------------------------------------------------------
def _read_csv(path, key: str, columns: tuple[str, ...]) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Read a numeric CSV whose header holds exactly ``columns`` (any order).

    Returns
    -------
    values : dict of ndarray, shape (n,)
        One float64 array per column.
    lines : ndarray of int, shape (n,)
        File line number (1-based) of each row, for error messages.
    """
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:  # tolerate a byte-order mark
            rows = [(i + 1, row) for i, row in enumerate(csv.reader(fh)) if any(c.strip() for c in row)]
    except (OSError, UnicodeDecodeError, csv.Error) as err:
        raise CaseError(path, key, f"cannot read the file: {err}") from None
    if not rows:
        raise CaseError(path, key, f"empty file; expected the header {','.join(columns)}")
    header = [c.strip() for c in rows[0][1]]
    if sorted(header) != sorted(columns):
        missing = [c for c in columns if c not in header]
        extra = [c for c in header if c not in columns]
        wrong = ", ".join(f"{what} {names}" for what, names in (("missing", missing), ("extra", extra))
                          if names)
        raise CaseError(path, key, f"header {','.join(header)!r} ({wrong or 'repeated columns'}); "
                        f"expected exactly {','.join(columns)}")
    data = np.empty((len(rows) - 1, len(columns)))
    for k, (line, row) in enumerate(rows[1:]):
        if len(row) != len(header):
            raise CaseError(path, key, f"line {line}: {len(row)} fields, expected {len(header)}")
        for c, text in enumerate(row):
            try:
                data[k, c] = float(text)
            except ValueError:
                raise CaseError(path, key,
                                f"line {line}: `{header[c]}` = {text.strip()!r} is not a number") from None
            if not math.isfinite(data[k, c]):
                raise CaseError(path, key, f"line {line}: `{header[c]}` = {text.strip()!r} is not finite")
    lines = np.array([line for line, _ in rows[1:]], dtype=np.int64)
    return {name: data[:, header.index(name)].copy() for name in columns}, lines


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
