"""Tests of dlsim.particles: size distributions, stereology, placement, sectioning, files.

Lengths in nm throughout.  Statistical checks use fixed seeds and a tolerance of three standard
errors (a correct sampler fails such a check with probability about 0.3%); goodness-of-fit tests
ask for a p-value above 0.01.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from dlsim.errors import CaseError
from dlsim.particles import (
    HARD_SPHERE_HALF_THICKNESS, LSW, LSW_U_MAX, LogNormal, Particles, Sections, SingleSize,
    expected_section_stats,
    lsw_cdf, lsw_moment, lsw_pdf, number_density_from_fraction, place_hard_spheres, place_poisson,
    read_particles_csv, read_sections_csv, resolve_density, rsa_positions, sample_sections, section,
    section_stats, volume_fraction_from_density,
)
from naive_particles import naive_rsa_positions, overlapping_pairs

QUAD = dict(epsabs=1e-13, epsrel=1e-12, limit=200)
DISTRIBUTIONS = {"single": SingleSize(5.0), "lognormal": LogNormal(5.0, 0.3), "lsw": LSW(5.0)}
FILE_KEY = "populations[0].file"


# --------------------------------------------------------------------------------------------------
# LSW shape (Lifshitz & Slyozov, J. Phys. Chem. Solids 19, 1961; Wagner, Z. Elektrochem. 65, 1961)
# --------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("k, expected, tol", [
    (0, 1.0, 1e-10),      # h is normalised (LSW 1961)
    (1, 1.0, 1e-10),      # u = r/<r>, so <u> = 1 (LSW 1961)
    (3, 1.1296, 1e-4),    # docs/physics.md, quoted to 4 decimals
])
def test_lsw_pdf_moments_match_reference(k, expected, tol):
    value, _ = integrate.quad(lambda u: u**k * lsw_pdf(u), 0.0, LSW_U_MAX, **QUAD)
    assert value == pytest.approx(expected, abs=tol)


@pytest.mark.parametrize("k", [0, 1, 2, 3, 6])
def test_lsw_moment_matches_adaptive_quadrature(k):
    # Tabulated Gauss-Legendre against scipy's adaptive quadrature of the same h(u).
    value, _ = integrate.quad(lambda u: u**k * lsw_pdf(u), 0.0, LSW_U_MAX, **QUAD)
    assert lsw_moment(k) == pytest.approx(value, abs=1e-11)


@pytest.mark.parametrize("u", [0.1, 0.5, 0.9, 1.0, 1.2, 1.4, 1.49])
def test_lsw_cdf_matches_adaptive_quadrature(u):
    value, _ = integrate.quad(lsw_pdf, 0.0, u, **QUAD)
    # Linear interpolation between nodes 2.5e-4 apart: error <= max|h'| d^2/8 < 1.2e-7.
    assert lsw_cdf(u) == pytest.approx(value, abs=2e-7)


def test_lsw_pdf_vanishes_outside_support():
    u = np.array([-1.0, 0.0, 1.5, 1.5 - 1e-300, 1.5 - 1e-12, 2.0])
    h = lsw_pdf(u)
    assert np.all(np.isfinite(h)) and np.all(h[[0, 1, 2, 5]] == 0.0) and np.all(h < 1e-100)


@pytest.fixture(scope="module")
def lsw_sample():
    return LSW(1.0).sample(200_000, np.random.default_rng(20261201))


def test_lsw_sample_mean_is_one(lsw_sample):
    # <u> = 1, standard error sqrt((<u^2> - 1)/n) (Lifshitz & Slyozov 1961; Wagner 1961).
    se = math.sqrt((lsw_moment(2) - 1.0) / lsw_sample.size)
    assert abs(lsw_sample.mean() - 1.0) < 3.0 * se


def test_lsw_sample_below_cutoff(lsw_sample):
    # No LSW particle is larger than 3/2 of the mean (Lifshitz & Slyozov 1961; Wagner 1961).
    assert lsw_sample.max() < LSW_U_MAX and lsw_sample.min() >= 0.0


def test_lsw_sample_ks_against_tabulated_cdf(lsw_sample):
    assert stats.kstest(lsw_sample, lsw_cdf).pvalue > 0.01


def test_lsw_sample_chi2_against_binned_pdf(lsw_sample):
    # Expected counts from adaptive quadrature of h(u) over each bin (LSW 1961), independent of
    # the sampler's table; the thin tail bins are merged so that every expected count is >= 20.
    edges = np.linspace(0.0, LSW_U_MAX, 61)
    p = np.array([integrate.quad(lsw_pdf, a, b, **QUAD)[0] for a, b in zip(edges[:-1], edges[1:])])
    observed = np.histogram(lsw_sample, edges)[0].astype(float)
    expected = p * lsw_sample.size
    keep = expected >= 20.0
    obs = np.append(observed[keep], observed[~keep].sum())
    exp = np.append(expected[keep], expected[~keep].sum())
    chi2 = np.sum((obs - exp) ** 2 / exp)
    assert stats.chi2.sf(chi2, obs.size - 1) > 0.01


# --------------------------------------------------------------------------------------------------
# log-normal and single size
# --------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("sigma", [0.2, 0.5, 1.0])
@pytest.mark.parametrize("k", [1, 2, 3])
def test_lognormal_moment_matches_truncated_quadrature(sigma, k):
    # Moments of the log-normal conditioned on r < r_max, by quadrature of its pdf
    # (Johnson, Kotz & Balakrishnan, Continuous Univariate Distributions, vol. 1, ch. 14).
    d = LogNormal(5.0, sigma)
    parent = stats.lognorm(s=sigma, scale=math.exp(d.mu))
    value = parent.expect(lambda r: r**k, ub=d.r_max, conditional=True, epsrel=1e-10)
    assert d.moment(k) == pytest.approx(value, rel=1e-8)


@pytest.mark.parametrize("sigma", [0.2, 0.5])
def test_lognormal_mean_is_parent_mean(sigma):
    # mu = ln(mean) - sigma^2/2 gives the parent mean; the 1e-6 tail shifts it by < 1e-4 for sigma <= 0.5.
    d = LogNormal(5.0, sigma)
    assert math.exp(d.mu + 0.5 * sigma**2) == pytest.approx(5.0, rel=1e-12)
    assert d.moment(1) == pytest.approx(5.0, rel=1e-4)


def test_lognormal_sample_matches_moments():
    d = LogNormal(5.0, 0.5)
    r = d.sample(100_000, np.random.default_rng(7))
    se = math.sqrt((d.moment(2) - d.moment(1) ** 2) / r.size)
    assert abs(r.mean() - d.moment(1)) < 3.0 * se and r.max() < d.r_max
    assert stats.kstest(np.log(r), stats.norm(d.mu, d.sigma).cdf).pvalue > 0.01


def test_single_size_interface():
    d = SingleSize(4.0)
    assert d.r_max == 4.0 and d.moment(3) == 64.0
    assert np.all(d.sample(5, np.random.default_rng(0)) == 4.0)


@pytest.mark.parametrize("make, name", [
    (lambda: SingleSize(-1.0, key="populations[0]"), "populations[0].radius_nm"),
    (lambda: SingleSize(0.0, key="populations[0]"), "populations[0].radius_nm"),
    (lambda: LogNormal(5.0, 0.0, key="populations[0]"), "populations[0].sigma"),
    (lambda: LogNormal(5.0, -0.2, key="populations[0]"), "populations[0].sigma"),
    (lambda: LogNormal(-5.0, 0.2, key="populations[0]"), "populations[0].mean_nm"),
    (lambda: LSW(float("nan"), key="populations[0]"), "populations[0].mean_nm"),
    (lambda: LSW("big"), "mean_nm"),
])
def test_distribution_invalid_parameter_raises(make, name):
    with pytest.raises(CaseError) as err:
        make()
    assert err.value.key == name


# --------------------------------------------------------------------------------------------------
# relations
# --------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", DISTRIBUTIONS)
def test_density_relations_round_trip(name):
    d = DISTRIBUTIONS[name]
    n_v = number_density_from_fraction(d, 0.07)
    assert volume_fraction_from_density(d, n_v) == pytest.approx(0.07, rel=1e-14)
    assert resolve_density(d, number_density=n_v) == pytest.approx((0.07, n_v), rel=1e-14)


def test_expected_section_stats_single_size():
    # One size: N_A = 2 r N_V, <rho> = pi r/4, <rho^2> = 2 r^2/3 (Underwood, Quantitative Stereology, 1970).
    r, f = 5.0, 0.1
    e = expected_section_stats(SingleSize(r), volume_fraction=f)
    n_v = f / (4.0 / 3.0 * math.pi * r**3)
    assert e["number_density_per_nm3"] == pytest.approx(n_v, rel=1e-14)
    assert e["areal_density_per_nm2"] == pytest.approx(2.0 * r * n_v, rel=1e-14)
    assert e["areal_density_per_um2"] == pytest.approx(2e6 * r * n_v, rel=1e-14)
    assert e["rho_mean_nm"] == pytest.approx(math.pi * r / 4.0, rel=1e-14)
    assert e["rho2_mean_nm2"] == pytest.approx(2.0 * r**2 / 3.0, rel=1e-14)
    l_s = (2.0 * r * n_v) ** -0.5
    assert e["mean_square_spacing_nm"] == pytest.approx(l_s, rel=1e-14)
    assert e["edge_spacing_nm"] == pytest.approx(l_s - math.pi * r / 2.0, rel=1e-14)


@pytest.mark.parametrize("kwargs, key", [
    (dict(volume_fraction=0.0), "volume_fraction"),
    (dict(volume_fraction=1.0), "volume_fraction"),
    (dict(volume_fraction=-0.1), "volume_fraction"),
    (dict(volume_fraction=0.1, number_density=1e-5), "volume_fraction"),
    (dict(), "volume_fraction"),
    (dict(number_density=-1e-5), "number_density_per_um3"),
    (dict(number_density=1.0), "number_density_per_um3"),  # f = 524 for r = 5 nm
])
def test_resolve_density_invalid_raises(kwargs, key):
    with pytest.raises(CaseError) as err:
        resolve_density(SingleSize(5.0), **kwargs, source="case.toml", key="populations[1]")
    assert err.value.key == f"populations[1].{key}" and err.value.source == "case.toml"


@pytest.mark.parametrize("kwargs, key", [
    (dict(arrangement="lattice"), "arrangement"),
    (dict(volume_fraction=1.2), "volume_fraction"),
    (dict(Lx_nm=-1.0), "Lx_nm"),
])
def test_sample_sections_invalid_raises(kwargs, key):
    args = dict(volume_fraction=0.05, Lx_nm=200.0, Ly_nm=200.0, rng=np.random.default_rng(0)) | kwargs
    with pytest.raises(CaseError) as err:
        sample_sections(SingleSize(5.0), **args)
    assert err.value.key == key


# --------------------------------------------------------------------------------------------------
# sectioning
# --------------------------------------------------------------------------------------------------
def test_section_cuts_only_spheres_crossing_the_plane():
    p = Particles(x_nm=[1.0, 2.0, 3.0, 4.0], y_nm=[5.0, 6.0, 7.0, 8.0], z_nm=[0.0, 3.0, -4.0, 5.0],
                  r_nm=[2.0, 5.0, 5.0, 5.0], Lx_nm=10.0, Ly_nm=10.0, half_thickness_nm=5.0)
    s = section(p)
    assert np.array_equal(s.x_nm, [1.0, 2.0, 3.0])  # |z| = r is tangent, not cut
    assert np.allclose(s.rho_nm, [2.0, 4.0, 3.0], rtol=0, atol=1e-15)  # sqrt(r^2 - z^2)
    assert np.array_equal(s.r_nm, [2.0, 5.0, 5.0]) and np.array_equal(s.z_nm, [0.0, 3.0, -4.0])


def test_section_stats_known_values():
    rho = np.array([1.0, 2.0, 3.0, 6.0])
    s = Sections(np.zeros(4), np.zeros(4), rho, rho, np.zeros(4))
    st = section_stats(s, 20.0, 10.0)
    assert st["count"] == 4
    assert st["areal_density_per_nm2"] == pytest.approx(0.02)
    assert st["areal_density_per_um2"] == pytest.approx(2e4)
    assert st["mean_square_spacing_nm"] == pytest.approx(50**0.5)
    assert st["rho_mean_nm"] == pytest.approx(3.0) and st["rho2_mean_nm2"] == pytest.approx(12.5)
    assert st["rho_std_nm"] == pytest.approx(math.sqrt(14.0 / 3.0))
    assert st["edge_spacing_nm"] == pytest.approx(50**0.5 - 6.0)


def test_section_stats_empty_field():
    e = np.zeros(0)
    st = section_stats(Sections(e, e, e, e, e), 10.0, 10.0)
    assert st["count"] == 0 and st["mean_square_spacing_nm"] == math.inf and math.isnan(st["rho_mean_nm"])


# --------------------------------------------------------------------------------------------------
# stereology of Poisson fields (Underwood, Quantitative Stereology, 1970)
# --------------------------------------------------------------------------------------------------
F_TEST = 0.05
#: Relative standard error of the sampled f from a Poisson number lam of spheres is
#: sqrt(<r^6>/lam)/<r^3> (compound Poisson).  2% > 3 SE needs lam > (3/0.02)^2 <r^6>/<r^3>^2
#: = 22 500 <r^6>/<r^3>^2 (single size: 22 500; log-normal s=0.3: exp(9 s^2) = 2.25 times that;
#: LSW: <u^6>/<u^3>^2 = 1.26 times); the factor 1.5 is a margin.
F_SPHERES = 1.5 * (3.0 / 0.02) ** 2


def _box_for(d, n_spheres: float, half_thickness: float) -> float:
    """Side L (nm) of a square box holding n_spheres centres in a slab of 2*half_thickness."""
    n_v = number_density_from_fraction(d, F_TEST)
    return math.sqrt(n_spheres / (n_v * 2.0 * half_thickness))


@pytest.fixture(scope="module", params=list(DISTRIBUTIONS))
def poisson_field(request):
    d = DISTRIBUTIONS[request.param]
    n_target = F_SPHERES * d.moment(6) / d.moment(3) ** 2
    L = _box_for(d, n_target, d.r_max)
    p = place_poisson(d, number_density_from_fraction(d, F_TEST), L, L, np.random.default_rng(11))
    return d, L, p


def test_poisson_volume_fraction_within_two_percent(poisson_field):
    d, L, p = poisson_field
    lam = number_density_from_fraction(d, F_TEST) * L * L * 2.0 * d.r_max
    assert 3.0 * math.sqrt(d.moment(6) / lam) / d.moment(3) < 0.02  # the design arithmetic above
    assert p.volume_fraction() == pytest.approx(F_TEST, rel=0.02)


def test_poisson_areal_density_matches_stereology(poisson_field):
    # N_A = 2 <r> N_V; the count of sections is Poisson, SE = sqrt(expected count).
    d, L, p = poisson_field
    expected = 2.0 * d.moment(1) * number_density_from_fraction(d, F_TEST) * L * L
    assert abs(len(section(p)) - expected) < 3.0 * math.sqrt(expected)


@pytest.mark.parametrize("which", ["rho_mean_nm", "rho2_mean_nm2"])
def test_poisson_section_radii_match_stereology(poisson_field, which):
    # <rho> = (pi/4)<r^2>/<r>, <rho^2> = (2/3)<r^3>/<r> (one size: pi r/4, 2 r^2/3).
    d, L, p = poisson_field
    rho = section(p).rho_nm
    values = rho if which == "rho_mean_nm" else rho**2
    expected = expected_section_stats(d, volume_fraction=F_TEST)[which]
    assert abs(values.mean() - expected) < 3.0 * values.std(ddof=1) / math.sqrt(values.size)


# --------------------------------------------------------------------------------------------------
# hard spheres
# --------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("f, attempts", [(0.15, 200_000), (0.3, 40)])
def test_rsa_kernel_matches_naive_twin(f, attempts):
    rng = np.random.default_rng(3)
    box = np.array([40.0, 40.0, 22.5])
    radii = np.sort(LSW(2.5).sample(400, rng))[::-1]
    radii *= (f * box.prod() / (4.0 / 3.0 * math.pi * np.sum(radii**3))) ** (1.0 / 3.0)
    pos, placed = rsa_positions(radii, box, np.random.default_rng(5), attempts)
    pos_n, placed_n = naive_rsa_positions(radii, box, np.random.default_rng(5), attempts)
    assert placed == placed_n and np.array_equal(pos, pos_n)
    assert (placed == radii.size) == (f < 0.2)  # the second case must exercise the give-up path


#: Hard-sphere fields at f = 0.2 hold a fixed number n of spheres, so the sampled f has relative SE
#: cv/sqrt(n) with cv^2 = <r^6>/<r^3>^2 - 1 (LSW: 0.26; log-normal: exp(9 s^2) - 1, 0.22 for
#: s = 0.15).  2% > 3 SE needs n > 22 500 cv^2; n = max(6000, 1.5 * 22 500 cv^2) keeps a margin and
#: the brute-force overlap check below 4e7 pair distances (hence s = 0.15, not 0.3, here).
HS_FRACTION, HS_MIN_SPHERES = 0.2, 6000
HS_DISTRIBUTIONS = {"single": SingleSize(5.0), "lognormal": LogNormal(5.0, 0.15), "lsw": LSW(5.0)}


def _cv2_volume(d) -> float:
    return d.moment(6) / d.moment(3) ** 2 - 1.0


@pytest.fixture(scope="module", params=list(HS_DISTRIBUTIONS))
def hard_field(request):
    d = HS_DISTRIBUTIONS[request.param]
    n_v = number_density_from_fraction(d, HS_FRACTION)
    n = max(HS_MIN_SPHERES, F_SPHERES * _cv2_volume(d))
    L = math.sqrt(n / (n_v * 2.0 * HARD_SPHERE_HALF_THICKNESS * d.r_max))
    return d, L, place_hard_spheres(d, n_v, L, L, np.random.default_rng(17))


def test_overlap_check_detects_periodic_overlap():
    # The checker itself: spheres 1 and 2 overlap only through the periodic boundary in x.
    pos = np.array([[0.5, 5.0, 0.0], [9.0, 5.0, 0.0], [5.0, 5.0, 0.0]])
    radii = np.array([1.0, 1.0, 1.0])
    assert overlapping_pairs(pos, radii, np.array([10.0, 10.0, 10.0])) == 1
    assert overlapping_pairs(pos, radii, np.array([10.0, 10.0, 10.0]), chunk=1) == 1


def test_hard_spheres_do_not_overlap(hard_field):
    d, L, p = hard_field
    pos = np.column_stack([p.x_nm, p.y_nm, p.z_nm])
    box = np.array([L, L, 2.0 * p.half_thickness_nm])
    assert np.abs(p.z_nm).max() <= p.half_thickness_nm
    assert overlapping_pairs(pos, p.r_nm, box) == 0


def test_hard_spheres_preserve_volume_fraction(hard_field):
    d, L, p = hard_field
    se = math.sqrt(_cv2_volume(d) / len(p))
    assert 3.0 * se <= 0.02 and p.volume_fraction() == pytest.approx(HS_FRACTION, rel=0.02)


def test_hard_spheres_areal_density_matches_stereology(hard_field):
    # The box is periodic in z, so each centre is uniform in z whatever its neighbours: sphere i is
    # cut with probability 2 r_i/Lz and E[count] = sum 2 r_i/Lz, i.e. N_A = 2<r>N_V (Underwood 1970).
    # SE of independent spheres, an upper bound for a repulsive arrangement.
    d, L, p = hard_field
    prob = p.r_nm / p.half_thickness_nm
    n_cut = len(section(p))
    assert abs(n_cut - prob.sum()) < 3.0 * math.sqrt(np.sum(prob * (1.0 - prob)))


def test_hard_spheres_section_radius_matches_stereology(hard_field):
    # <rho> = (pi/4)<r^2>/<r> (Underwood 1970) holds for any arrangement invariant along z.
    d, L, p = hard_field
    rho = section(p).rho_nm
    expected = expected_section_stats(d, volume_fraction=HS_FRACTION)["rho_mean_nm"]
    assert abs(rho.mean() - expected) < 3.0 * rho.std(ddof=1) / math.sqrt(rho.size)


@pytest.mark.parametrize("kwargs, fragment", [
    (dict(number_density=number_density_from_fraction(SingleSize(5.0), 0.35)), "jams"),
    (dict(number_density=number_density_from_fraction(SingleSize(5.0), 0.25), max_attempts=2), "no room"),
    (dict(number_density=1e-5, Lx_nm=15.0), "4 r_max"),
])
def test_hard_spheres_unreachable_raises(kwargs, fragment):
    args = dict(Lx_nm=200.0, Ly_nm=200.0, rng=np.random.default_rng(1)) | kwargs
    with pytest.raises(CaseError, match=fragment):
        place_hard_spheres(SingleSize(5.0), **args)


def test_sample_sections_hard_spheres_too_dense_raises():
    with pytest.raises(CaseError) as err:
        sample_sections(SingleSize(5.0), volume_fraction=0.35, arrangement="hard_spheres",
                        Lx_nm=200.0, Ly_nm=200.0, rng=np.random.default_rng(0), key="populations[0]")
    assert err.value.key == "populations[0].volume_fraction"


# --------------------------------------------------------------------------------------------------
# files
# --------------------------------------------------------------------------------------------------
def _write(tmp_path, text: str, name: str = "p.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_read_particles_csv_sections_good_file(tmp_path):
    path = _write(tmp_path, "x_nm,y_nm,z_nm,radius_nm\n10,20,3,5\n30,40,-6,5\n\n50,60,0,2\n")
    s = read_particles_csv(path, FILE_KEY, 100.0, 100.0)
    assert np.array_equal(s.x_nm, [10.0, 50.0]) and np.allclose(s.rho_nm, [4.0, 2.0], rtol=0, atol=1e-15)
    assert np.array_equal(s.z_nm, [3.0, 0.0])


def test_read_particles_csv_any_column_order(tmp_path):
    path = _write(tmp_path, "radius_nm, z_nm, y_nm, x_nm\n5, 4, 20, 10\n")
    s = read_particles_csv(path, FILE_KEY, 100.0, 100.0)
    assert (s.x_nm[0], s.y_nm[0], s.rho_nm[0]) == (10.0, 20.0, 3.0)


def test_read_sections_csv_good_file(tmp_path):
    path = _write(tmp_path, "x_nm,y_nm,radius_nm\n1.5,2.5,3\n4,5,0\n")
    s = read_sections_csv(path, FILE_KEY, 10.0, 10.0)
    assert np.array_equal(s.rho_nm, [3.0, 0.0]) and np.array_equal(s.y_nm, [2.5, 5.0])
    assert np.all(np.isnan(s.r_nm)) and np.all(np.isnan(s.z_nm))


def test_read_sections_csv_accepts_byte_order_mark(tmp_path):
    path = tmp_path / "bom.csv"
    path.write_bytes("x_nm,y_nm,radius_nm\n1,2,3\n".encode("utf-8-sig"))
    assert len(read_sections_csv(path, FILE_KEY, 10.0, 10.0)) == 1


@pytest.mark.parametrize("reader, text, fragment", [
    (read_particles_csv, "x_nm,y_nm,radius_nm\n1,2,3\n", "missing ['z_nm']"),
    (read_particles_csv, "x_nm,y_nm,z_nm,radius_nm,mass\n1,2,3,4,5\n", "extra ['mass']"),
    (read_particles_csv, "x_nm,y_nm,z_nm,radius_nm\n1,2,3,4\n1,2,abc,4\n", "line 3: `z_nm` = 'abc'"),
    (read_particles_csv, "x_nm,y_nm,z_nm,radius_nm\n1,2,3,-4\n", "line 2: `radius_nm` = -4"),
    (read_particles_csv, "x_nm,y_nm,z_nm,radius_nm\n1,2,3,4\n1,2,3\n", "line 3: 3 fields"),
    (read_particles_csv, "x_nm,y_nm,z_nm,radius_nm\n1,2,nan,4\n", "line 2: `z_nm` = 'nan' is not finite"),
    (read_particles_csv, "x_nm,y_nm,z_nm,radius_nm\n1,2,3,4\n1,10,3,4\n", "line 3: `y_nm` = 10 lies outside"),
    (read_particles_csv, "", "empty file"),
    (read_sections_csv, "x_nm,y_nm,z_nm,radius_nm\n1,2,3,4\n", "extra ['z_nm']"),
    (read_sections_csv, "x_nm,y_nm,radius_nm\n-1,2,3\n", "line 2: `x_nm` = -1 lies outside"),
    (read_sections_csv, "x_nm,y_nm,radius_nm\n1,2,-3\n", "line 2: `radius_nm` = -3 is negative"),
    (read_sections_csv, "x_nm,y_nm,radius_nm\n1,2,3\n\n1,2,x\n", "line 4: `radius_nm` = 'x'"),
])
def test_read_csv_malformed_raises(tmp_path, reader, text, fragment):
    path = _write(tmp_path, text)
    with pytest.raises(CaseError) as err:
        reader(path, FILE_KEY, 10.0, 10.0)
    assert err.value.key == FILE_KEY and err.value.source == str(path)
    assert fragment in err.value.problem


@pytest.mark.parametrize("reader", [read_particles_csv, read_sections_csv])
def test_read_csv_missing_file_raises(tmp_path, reader):
    with pytest.raises(CaseError, match="cannot read") as err:
        reader(tmp_path / "absent.csv", FILE_KEY, 10.0, 10.0)
    assert err.value.key == FILE_KEY
