"""Measured size data: files of radii or diameters (rows or bins), 3D sizes or planar sections,
the Scheil-Schwartz-Saltykov unfolding, sections placed in the plane, and bad files.

Lengths in nm.  Statistical checks use fixed seeds and a tolerance of four standard errors that
each test computes (delta method for ratios of sample moments: Casella & Berger, *Statistical
Inference*, 2nd ed., 2002, sec. 5.5; Poisson counts); a correct estimate fails such a check with
probability about 6e-5 (common practice: a margin that keeps a fixed-seed test stable while a
wrong formula, off by tens of percent, still fails it).  Goodness-of-fit tests ask for p > 1e-3.
"""
from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import integrate, stats
from scipy.linalg import solve_triangular

from dlsim import particles as P
from dlsim.case import load_case
from dlsim.cli import main
from dlsim.errors import CaseError
from dlsim.fields import population_sections, populations_table
from naive_particles import naive_saltykov_unfold, overlapping_pairs

Z = 4.0  # standard errors allowed in the statistical checks (see the module docstring)
LOGNORMAL = P.LogNormal(5.0, 0.3)
FRACTION = 0.02
KEY = "populations[1].sizes_file"


def write_rows(path, values, column="radius_nm", comment="# invented test data"):
    path.write_text(f"{comment}\n{column}\n" + "".join(f"{float(v)!r}\n" for v in values))
    return path


def write_bins(path, edges, counts, column_names="lower_nm,upper_nm,count"):
    lines = [f"{float(lo)!r},{float(hi)!r},{int(c)}" for lo, hi, c in zip(edges[:-1], edges[1:], counts)]
    path.write_text(column_names + "\n" + "\n".join(lines) + "\n")
    return path


def case(tmp_path, seed=11, length=6, **population):
    """A case dictionary with one measured population (keys of [[populations]] overridden)."""
    pop = {"name": "measured", "volume_fraction": FRACTION, "distribution": "measured",
           "sizes_file": "sizes.csv", "sizes_are": "particles", "strength": "impenetrable"}
    pop.update(population)
    raw = {"seed": seed, "material": {"symbol": "Al"}, "line": {"length": length, "node_spacing": 0.2},
           "populations": [pop]}
    return load_case(raw, base_dir=tmp_path)


def ratio_rel_var(mu, a: int, b: int, n: int) -> float:
    """Relative variance of the ratio of sample moments m_a/m_b of n draws (delta method).

    Var(g)/g² = (μ_2a/μ_a² + μ_2b/μ_b² - 2 μ_(a+b)/(μ_a μ_b)) / n, ``mu(k)`` the population ⟨r^k⟩.
    """
    return (mu(2 * a) / mu(a) ** 2 + mu(2 * b) / mu(b) ** 2 - 2 * mu(a + b) / (mu(a) * mu(b))) / n


def lognormal_sections(n_sections, seed):
    """Sections of Poisson log-normal spheres (LOGNORMAL), about ``n_sections`` of them, and the
    side (nm) of their square box."""
    e = P.expected_section_stats(LOGNORMAL, FRACTION)
    side = math.sqrt(n_sections / e["areal_density_per_nm2"])
    rng = np.random.default_rng(seed)
    return P.sample_sections(LOGNORMAL, volume_fraction=FRACTION, Lx_nm=side, Ly_nm=side,
                             rng=rng), side


# ---------------------------------------------------------------------------------------------
# 3D radii read back reproduce the built-in distribution (Underwood, Quantitative Stereology, 1970:
# N_A = 2<r> N_V, <rho> = (pi/4)<r^2>/<r>, <rho^2> = (2/3)<r^3>/<r>)

N_RADII = 4000


@pytest.fixture(scope="module")
def lognormal_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("lognormal") / "sizes.csv"
    radii = LOGNORMAL.sample(N_RADII, np.random.default_rng(20240611))
    return write_rows(path, radii), radii


# (statistic, moment orders a, b of the ratio m_a/m_b it is proportional to)
SECTION_STATS = [("areal_density_per_nm2", 1, 3), ("rho_mean_nm", 2, 1), ("rho2_mean_nm2", 3, 1)]


@pytest.mark.parametrize("name, a, b", SECTION_STATS)
def test_measured_radii_expected_stats_match_builtin_lognormal(lognormal_file, name, a, b):
    path, _ = lognormal_file
    measured = P.read_measured_sizes(path, KEY, sizes_are="particles")
    got = P.expected_section_stats(measured, FRACTION)[name]
    want = P.expected_section_stats(LOGNORMAL, FRACTION)[name]
    # Each statistic is a constant times m_a/m_b of the file's radii (N_A = 3f/(2pi) m1/m3 at
    # fixed f); its error is the sampling error of N_RADII draws of the truncated log-normal.
    sigma = math.sqrt(ratio_rel_var(LOGNORMAL.moment, a, b, N_RADII))
    assert abs(got / want - 1.0) < Z * sigma, (got, want, sigma)


def test_measured_radii_sampled_field_matches_builtin_lognormal(lognormal_file, tmp_path):
    path, _ = lognormal_file
    c = case(path.parent)
    pop = c.populations[0]
    want = P.expected_section_stats(LOGNORMAL, FRACTION)
    side = math.sqrt(20_000 / want["areal_density_per_nm2"])
    sec = population_sections(pop, side, side, np.random.default_rng(5))
    m = len(sec)
    rho = sec.rho_nm
    # Field noise (Poisson count; means of m sections, with their sample variances) and the
    # file's sampling error (delta method, as above) are independent: their variances add.
    checks = [(m / side**2, want["areal_density_per_nm2"], 1.0 / m, 1, 3),
              (rho.mean(), want["rho_mean_nm"], rho.var(ddof=1) / (m * rho.mean() ** 2), 2, 1),
              (np.mean(rho**2), want["rho2_mean_nm2"],
               np.var(rho**2, ddof=1) / (m * np.mean(rho**2) ** 2), 3, 1)]
    for got, expected, field_var, a, b in checks:
        sigma = math.sqrt(field_var + ratio_rel_var(LOGNORMAL.moment, a, b, N_RADII))
        assert abs(got / expected - 1.0) < Z * sigma, (got, expected, sigma)


def test_measured_diameters_are_halved(lognormal_file, tmp_path):
    _, radii = lognormal_file
    path = write_rows(tmp_path / "d.csv", 2.0 * radii, column="diameter_nm")
    d = P.read_measured_sizes(path, KEY, sizes_are="particles", size_kind="diameter")
    # Exact: the same numbers, halved.
    assert d.moment(1) == pytest.approx(radii.mean(), rel=1e-12)
    assert d.r_max == pytest.approx(radii.max(), rel=1e-15)


def test_measured_hard_spheres_do_not_overlap(lognormal_file):
    path, _ = lognormal_file
    measured = P.read_measured_sizes(path, KEY, sizes_are="particles")
    n_v = P.number_density_from_fraction(measured, 0.1)
    side = 8.0 * measured.r_max
    p = P.place_hard_spheres(measured, n_v, side, side, np.random.default_rng(2))
    box = np.array([side, side, 2.0 * p.half_thickness_nm])
    pos = np.column_stack([p.x_nm, p.y_nm, p.z_nm])
    # The slab follows the largest measured radius (HARD_SPHERE_HALF_THICKNESS r_max), and random
    # sequential addition leaves no overlap (checked pair by pair by the brute-force twin).
    assert p.half_thickness_nm == P.HARD_SPHERE_HALF_THICKNESS * measured.r_max
    assert len(p) > 100 and overlapping_pairs(pos, p.r_nm, box) == 0
    assert np.all(np.isin(p.r_nm, measured.lower_nm))


# ---------------------------------------------------------------------------------------------
# Unfolding sections into spheres (Scheil-Schwartz-Saltykov; Underwood 1970)


@pytest.mark.parametrize("classes", [1, 5, 12])
def test_unfold_single_size_analytic_recovers_spheres(classes):
    R, n_v = 5.0, 2e-5
    edges = np.linspace(0.0, R, classes + 1)
    # Section radii of spheres of one radius R: density rho / (R sqrt(R^2 - rho^2)) on (0, R),
    # N_A = 2 R N_V (Underwood 1970); integrated here by adaptive quadrature, not the closed form.
    pdf = lambda rho: rho / (R * math.sqrt(R * R - rho * rho))  # noqa: E731
    counts = [2 * R * n_v * integrate.quad(pdf, lo, hi, epsabs=1e-14, limit=200)[0]
              for lo, hi in zip(edges[:-1], edges[1:])]
    got, info = P.unfold_sections(edges, counts)
    # Every sphere sits at the top class limit R; quadrature error ~1e-10 relative.
    assert got.sum() == pytest.approx(n_v, rel=1e-8)
    assert np.all(np.abs(got[:-1]) < 1e-8 * n_v) and info["negative_fraction"] < 1e-8


@pytest.mark.parametrize("classes, seed", [(3, 0), (8, 1), (15, 2)])
def test_unfold_matches_naive_recurrence(classes, seed):
    rng = np.random.default_rng(seed)
    delta = 0.7
    edges = delta * np.arange(classes + 1)
    positive = P.saltykov_matrix(edges) @ rng.uniform(0.1, 1.0, classes)
    got, info = P.unfold_sections(edges, positive)
    assert info["n_negative_classes"] == 0
    np.testing.assert_allclose(got, naive_saltykov_unfold(positive, delta), rtol=1e-10)


@pytest.mark.parametrize("seed", range(4))
def test_unfold_noisy_counts_negative_classes_replaced_by_nnls(seed):
    rng = np.random.default_rng(seed)
    delta, classes = 1.0, 10
    edges = delta * np.arange(classes + 1)
    counts = rng.integers(0, 30, classes).astype(float)
    counts[-1] = 5.0
    naive = naive_saltykov_unfold(counts, delta)
    got, info = P.unfold_sections(edges, counts)
    a = P.saltykov_matrix(edges)
    assert info["n_negative_classes"] == int(np.sum(naive < 0))
    assert info["negative_fraction"] == pytest.approx(-naive[naive < 0].sum() / np.abs(naive).sum())
    assert np.all(got >= 0.0)
    if info["n_negative_classes"]:
        # Non-negative least squares is the best non-negative fit (Lawson & Hanson 1974): no
        # worse than simply clipping the negative classes of the plain solution.
        residual = np.linalg.norm(a @ got - counts) / np.linalg.norm(counts)
        clipped = np.linalg.norm(a @ np.maximum(naive, 0.0) - counts) / np.linalg.norm(counts)
        assert info["residual_ratio"] == pytest.approx(residual) and residual <= clipped + 1e-12
    else:
        np.testing.assert_allclose(got, naive, rtol=1e-10)


def lognormal_section_histogram(edges, n_v=1.0):
    """Expected sections per area by class of LOGNORMAL spheres at N_V = n_v, by quadrature.

    A sphere of radius r gives 2 (sqrt(r^2 - a^2) - sqrt(r^2 - b^2)) sections per area with rho in
    [a, b) (radicands below 0 read as 0) per unit N_V (Underwood 1970), integrated over p(r).
    """
    parent = stats.lognorm(s=LOGNORMAL.sigma, scale=math.exp(LOGNORMAL.mu))
    kept = parent.cdf(LOGNORMAL.r_max)
    out = []
    for lo, hi in zip(edges[:-1], edges[1:]):
        per = lambda r, lo=lo, hi=hi: 2.0 * (math.sqrt(max(r * r - lo * lo, 0.0))  # noqa: E731
                                             - math.sqrt(max(r * r - hi * hi, 0.0)))
        top = min(hi, LOGNORMAL.r_max)
        inside = integrate.quad(lambda r: parent.pdf(r) * per(r), lo, top, limit=200)[0] if top > lo else 0.0
        beyond = integrate.quad(lambda r: parent.pdf(r) * per(r), top, LOGNORMAL.r_max, limit=200)[0]
        out.append(n_v * (inside + beyond) / kept)
    return np.array(out)


@pytest.mark.parametrize("classes", [10, 20])
def test_unfold_lognormal_analytic_within_binning(classes):
    n_v = 3e-5
    edges = np.linspace(0.0, LOGNORMAL.r_max, classes + 1)
    got, info = P.unfold_sections(edges, lognormal_section_histogram(edges, n_v))
    R = edges[1:]
    mean = float(got @ R / got.sum())
    delta = edges[1]
    true_mean = LOGNORMAL.moment(1)
    assert info["n_negative_classes"] == 0
    # Every section lies in a class, so sum_j 2 R_j N_V(j) = N_A = 2<r> N_V exactly (DeHoff &
    # Rhines; Underwood 1970): the unfolding keeps the first moment to quadrature precision.
    assert got @ R == pytest.approx(n_v * true_mean, rel=1e-6)
    # Binning: the method stands every sphere of a class at its upper limit, on average half a
    # class width Delta above it, so <R> is off by at most about Delta/2 (the bias measured here is
    # 0.16 Delta at 10 classes and 0.11 Delta at 20); N_V then follows from the identity above.
    assert abs(mean - true_mean) < 0.5 * delta
    assert abs(got.sum() / n_v - 1.0) < 0.5 * delta / (true_mean - 0.5 * delta)


def unfolded_stats(edges, counts):
    """Total N_V (counts per area over a length), <R> and <R^3> of the unfolded spheres."""
    n_v, _ = P.unfold_sections(edges, counts)
    return np.array([n_v.sum(), n_v @ edges[1:] / n_v.sum(), n_v @ edges[1:] ** 3 / n_v.sum()])


def test_unfold_sampled_lognormal_sections_file_matches_analytic(tmp_path):
    sec, side = lognormal_sections(5000, seed=3)
    area = side * side
    n_v_true = P.number_density_from_fraction(LOGNORMAL, FRACTION)
    path = write_rows(tmp_path / "sec.csv", 2.0 * sec.rho_nm, column="diameter_nm")
    got = P.read_measured_sizes(path, KEY, sizes_are="sections", size_kind="diameter")
    k = got.notes["unfolding"]["n_classes"]
    edges = np.linspace(0.0, sec.rho_nm.max(), k + 1)
    assert k == P.default_unfold_classes(len(sec)) and np.allclose(got.lower_nm, edges[1:])
    counts = np.histogram(sec.rho_nm, edges)[0].astype(float)
    measured = unfolded_stats(edges, counts / area)
    assert measured[1:] == pytest.approx([got.moment(1), got.moment(3)], rel=1e-12)
    # What the method gives, with the same classes, for the exact (infinitely many) sections:
    expected = unfolded_stats(edges, lognormal_section_histogram(edges, n_v_true))
    # Counting noise: Poisson resamples of the measured class counts (200: the standard error of
    # a standard deviation is then 5%).
    rng = np.random.default_rng(9)
    boot = np.array([unfolded_stats(edges, rng.poisson(counts) / area) for _ in range(200)])
    sigma = boot.std(axis=0, ddof=1)
    assert np.all(np.abs(measured - expected) < Z * sigma), (measured, expected, sigma)
    # and against the true spheres: binning (as in the analytic test) plus noise
    half = 0.5 * edges[1]
    assert abs(measured[1] - LOGNORMAL.moment(1)) < half + Z * sigma[1]
    assert abs(measured[0] / n_v_true - 1.0) < half / (LOGNORMAL.moment(1) - half) + Z * sigma[0] / n_v_true


def test_unfolded_spheres_resectioned_give_the_sections_back():
    edges = np.linspace(0.0, LOGNORMAL.r_max, 15)
    counts = lognormal_section_histogram(edges)
    n_v, info = P.unfold_sections(edges, counts)
    spheres = P.Measured(edges[1:], edges[1:], n_v)
    side = math.sqrt(20_000 / P.expected_section_stats(spheres, FRACTION)["areal_density_per_nm2"])
    sec = P.sample_sections(spheres, volume_fraction=FRACTION, Lx_nm=side, Ly_nm=side,
                            rng=np.random.default_rng(4))
    # Spheres placed in 3D and cut by the plane (no use of the matrix) reproduce the section
    # histogram that was unfolded: chi-square goodness of fit (Pearson).
    observed = np.histogram(sec.rho_nm, edges)[0]
    expected = counts / counts.sum() * observed.sum()
    assert info["n_negative_classes"] == 0
    assert stats.chisquare(observed, expected).pvalue > 1e-3


# ---------------------------------------------------------------------------------------------
# Binned input and per-row input


def test_binned_radii_match_rows_statistically(lognormal_file, tmp_path):
    path, radii = lognormal_file
    width = 0.5
    edges = np.arange(0.0, radii.max() + width, width)
    binned_path = write_bins(tmp_path / "bins.csv", edges, np.histogram(radii, edges)[0])
    rows = P.read_measured_sizes(path, KEY, sizes_are="particles")
    bins = P.read_measured_sizes(binned_path, KEY, sizes_are="particles")
    # Grouping (Sheppard 1898): a value's offset from its bin's middle is uniform on
    # (-w/2, w/2), so the bin-midpoint mean differs from the row mean by a mean of N_RADII such
    # offsets, standard error w / sqrt(12 N).
    assert abs(bins.moment(1) - rows.moment(1)) < Z * width / math.sqrt(12 * N_RADII)
    side = math.sqrt(20_000 / P.expected_section_stats(rows, FRACTION)["areal_density_per_nm2"])
    draw = lambda d, seed: P.sample_sections(d, volume_fraction=FRACTION, Lx_nm=side, Ly_nm=side,  # noqa: E731
                                             rng=np.random.default_rng(seed)).rho_nm
    # Two-sample Kolmogorov-Smirnov on the sections of the two populations.
    assert stats.ks_2samp(draw(rows, 1), draw(bins, 2)).pvalue > 1e-3


def test_binned_sections_unfold_exactly_like_rows_in_the_same_classes(tmp_path):
    sec, _ = lognormal_sections(2000, seed=6)
    rows_path = write_rows(tmp_path / "rows.csv", sec.rho_nm)
    rows = P.read_measured_sizes(rows_path, KEY, sizes_are="sections", classes=12)
    edges = np.linspace(0.0, sec.rho_nm.max(), 13)
    bins_path = write_bins(tmp_path / "bins.csv", edges, np.histogram(sec.rho_nm, edges)[0])
    bins = P.read_measured_sizes(bins_path, KEY, sizes_are="sections")
    # The same classes and counts: the same spheres (edges written with repr round-trip exactly).
    np.testing.assert_allclose(bins.lower_nm, rows.lower_nm, rtol=1e-15)
    np.testing.assert_allclose(bins.weight, rows.weight, rtol=1e-12)


def test_bins_with_gap_and_detection_limit_unfold():
    # A gap [2, 3) with no bin is a class without sections; the first class starting at 1 nm is a
    # detection limit: sections below it were not counted.  Sections of spheres of radius 4
    # only, computed with the same model, must give spheres of radius 4 only.
    edges = np.array([1.0, 2.0, 3.0, 4.0])
    a = P.saltykov_matrix(edges)
    counts = a[:, 2] * 7.0
    n_v, _ = P.unfold_sections(edges, counts)
    np.testing.assert_allclose(n_v, [0.0, 0.0, 7.0], atol=1e-12)
    # Column j sums to 2 sqrt(R_j^2 - e_0^2) = 2 R_j P(rho >= e_0 | R_j): the sections below e_0
    # are not counted (a section of a sphere R lies below a with probability
    # 1 - sqrt(1 - a^2/R^2), Underwood 1970).
    np.testing.assert_allclose(a.sum(axis=0), 2 * np.sqrt(edges[1:] ** 2 - 1.0), rtol=1e-14)


def test_binned_sections_file_with_gap(tmp_path):
    path = tmp_path / "gap.csv"
    path.write_text("lower_nm,upper_nm,count\n1,2,10\n3,4,5\n")
    d = P.read_measured_sizes(path, KEY, sizes_are="sections")
    assert d.notes["unfolding"]["n_classes"] == 3 and np.allclose(d.lower_nm, [2.0, 3.0, 4.0])


@pytest.mark.parametrize("bins, fragment", [
    (P.MAX_UNFOLD_CLASSES + 1, f"{P.MAX_UNFOLD_CLASSES + 1} classes to unfold"),
    (P.MAX_UNFOLD_CLASSES // 2 + 1, f"{P.MAX_UNFOLD_CLASSES + 1} classes to unfold"),  # + gaps
])
def test_binned_sections_too_many_classes_refused(tmp_path, bins, fragment):
    step = 1.0 if bins > P.MAX_UNFOLD_CLASSES else 2.0  # step 2: a gap after every bin
    lines = [f"{step * i},{step * i + 1},1" for i in range(bins)]
    path = tmp_path / "many.csv"
    path.write_text("lower_nm,upper_nm,count\n" + "\n".join(lines) + "\n")
    with pytest.raises(CaseError, match=fragment):
        P.read_measured_sizes(path, KEY, sizes_are="sections")
    assert len(P.read_measured_sizes(path, KEY, sizes_are="particles").weight) == bins


# ---------------------------------------------------------------------------------------------
# Sections placed directly in the glide plane


def test_in_plane_sections_area_fraction_is_volume_fraction(tmp_path):
    sec, _ = lognormal_sections(3000, seed=7)
    write_rows(tmp_path / "sizes.csv", sec.rho_nm)
    f = 0.05
    c = case(tmp_path, sizes_are="sections", sections_as="in_plane", volume_fraction=f)
    sizes = c.populations[0].size_distribution()
    assert isinstance(sizes, P.PlanarSizes)
    n_a = f / (math.pi * sizes.moment(2))
    side = math.sqrt(20_000 / n_a)
    got = population_sections(c.populations[0], side, side, np.random.default_rng(8))
    # Delesse: A_A = V_V (Underwood 1970).  The covered area of a Poisson field of discs is a
    # compound Poisson sum, variance N_A L^2 <(pi rho^2)^2> / L^4.
    area = np.sum(math.pi * got.rho_nm**2) / side**2
    sigma = math.sqrt(n_a * side**2 * math.pi**2 * sizes.moment(4)) / side**2
    assert abs(area - f) < Z * sigma
    assert np.all(np.isin(got.rho_nm, sec.rho_nm)) and np.all(np.isnan(got.r_nm))


def test_in_plane_number_density_uses_fullman():
    # Sections all of radius a: <1/d> = 1/(2a), so Fullman's N_V = (2/pi) N_A <1/d> gives
    # N_A = pi a N_V (Fullman, Trans. AIME 197, 1953; Underwood 1970).
    a, n_v = 3.0, 1e-5
    sizes = P.PlanarSizes(np.full(4, a), np.full(4, a), np.ones(4))
    f, got_nv, n_a = P.planar_density(sizes, number_density=n_v)
    assert n_a == pytest.approx(math.pi * a * n_v) and f == pytest.approx(n_a * math.pi * a * a)
    assert got_nv == n_v


# ---------------------------------------------------------------------------------------------
# Reproducibility


@pytest.mark.parametrize("sizes_are", ["particles", "sections"])
def test_measured_population_same_seed_same_sections(lognormal_file, sizes_are):
    path, _ = lognormal_file
    one = populations_table(case(path.parent, seed=3, sizes_are=sizes_are), 0)[0]
    two = populations_table(case(path.parent, seed=3, sizes_are=sizes_are), 0)[0]
    other_seed = populations_table(case(path.parent, seed=4, sizes_are=sizes_are), 0)[0]
    other_realization = populations_table(case(path.parent, seed=3, sizes_are=sizes_are), 1)[0]
    assert one.n > 10
    for a, b in ((one.x, two.x), (one.rho, two.rho)):
        np.testing.assert_array_equal(a, b)
    for other in (other_seed, other_realization):
        assert other.n != one.n or not np.array_equal(other.rho, one.rho)


# ---------------------------------------------------------------------------------------------
# Case keys


def test_measured_case_round_trips_through_to_dict(lognormal_file):
    path, _ = lognormal_file
    c = case(path.parent, sizes_are="sections")
    again = load_case(c.to_dict())
    assert again == c and again.populations[0].unfold_classes == P.default_unfold_classes(N_RADII)
    assert again.populations[0].size_distribution().moment(1) == c.populations[0].measured.moment(1)


@pytest.mark.parametrize("changes, key, fragment", [
    ({"sizes_file": None}, "sizes_file", 'missing; distribution = "measured" needs'),
    ({"sizes_are": None}, "sizes_are", "missing"),
    ({"sizes_are": "spheres"}, "sizes_are", 'must be one of "particles", "sections"'),
    ({"size_kind": "area"}, "size_kind", "must be one of"),
    ({"sizes_column": "radius_um"}, "sizes_column", "ending in _nm"),
    ({"sections_as": "in_plane"}, "sections_as", 'only for sizes_are = "sections"'),
    ({"unfold_classes": 10}, "unfold_classes", 'only for sizes_are = "sections"'),
    ({"sizes_are": "sections", "unfold_classes": 0}, "unfold_classes", "in [1, 100]"),
    ({"sizes_are": "sections", "sections_as": "in_plane", "unfold_classes": 8}, "unfold_classes",
     'only for sections_as = "unfolded"'),
    ({"sizes_are": "sections", "sections_as": "in_plane", "arrangement": "hard_spheres"},
     "arrangement", "Poisson discs"),
    ({"distribution": "lognormal", "mean_radius_nm": 5.0, "sigma": 0.3}, "sizes_file",
     'only for distribution = "measured"'),
    ({"distribution": "single", "radius_nm": 5.0, "sizes_file": None, "sizes_are": None,
      "size_kind": "radius"}, "size_kind", 'only for distribution = "measured"'),
    ({"arrangement": "file", "file": "p.csv", "distribution": None, "volume_fraction": None},
     "sizes_file", "takes its particles and sizes from the file"),
])
def test_measured_case_keys_bad_values(lognormal_file, changes, key, fragment):
    path, _ = lognormal_file
    pop = {"name": "m", "volume_fraction": FRACTION, "distribution": "measured",
           "sizes_file": "sizes.csv", "sizes_are": "particles", "strength": "impenetrable"}
    pop = {k: v for k, v in {**pop, **changes}.items() if v is not None}  # None: key left out
    raw = {"seed": 1, "material": {"symbol": "Al"}, "line": {"length": 6}, "populations": [pop]}
    with pytest.raises(CaseError) as err:
        load_case(raw, base_dir=path.parent)
    assert err.value.key == f"populations[1].{key}" and fragment in err.value.problem


def test_unfold_classes_refused_for_binned_sections(tmp_path):
    write_bins(tmp_path / "sizes.csv", [0.0, 1.0, 2.0], [3, 4])
    with pytest.raises(CaseError) as err:
        case(tmp_path, sizes_are="sections", unfold_classes=5)
    assert err.value.key == "populations[1].unfold_classes" and "the bins of" in err.value.problem


# ---------------------------------------------------------------------------------------------
# Bad files: one line, exit 2, through the real command line


def _binary(path):
    path.write_bytes(b"radius_nm\n1.0\n\xff\xfe2.0\n")


def _folder(path):
    path.mkdir()


def _long_line(path):
    path.write_text("radius_nm\n" + "1," * 40_000 + "1\n")


BAD_FILES = [
    # (stem, file text or a function making the file, fragment of the problem)
    ("count_huge", "lower_nm,upper_nm,count\n1,2,1e15\n", "the counts add up to 1e+15"),
    ("count_fraction", "lower_nm,upper_nm,count\n1,2,2.5\n", "whole number"),
    ("non_numeric", "radius_nm\n1.0\nabc\n", "line 3: `radius_nm` = 'abc' is not a number"),
    ("negative", "radius_nm\n1.0\n-2\n", "line 3: `radius_nm` = -2; sizes must be > 0"),
    ("zero", "radius_nm\n0\n", "line 2: `radius_nm` = 0; sizes must be > 0"),
    ("nan", "radius_nm\n1\nnan\n", "line 3: `radius_nm` = 'nan' is not finite"),
    ("inf", "radius_nm\ninf\n", "is not finite"),
    ("too_large", "radius_nm\n5e6\n", "lies outside [0.001, 100000] nm"),
    ("empty", "", "empty file"),
    ("header_only", "radius_nm\n", "no sizes after the header"),
    ("no_header", "1.5\n2.5\n", "no header"),
    ("wrong_column", "diameter_nm\n3\n", 'set size_kind = "diameter"'),
    ("overlap", "lower_nm,upper_nm,count\n0,2,3\n1,3,4\n", "overlaps [0, 2)"),
    ("unordered", "lower_nm,upper_nm,count\n2,3,3\n0,1,4\n", "list the bins in increasing order"),
    ("reversed_bin", "lower_nm,upper_nm,count\n2,1,3\n", "`upper_nm` must exceed `lower_nm`"),
    ("ragged", "id,radius_nm\n1,2\n3\n", "line 3: 1 fields, expected 2"),
    ("binary", _binary, "not UTF-8 text"),
    ("folder", _folder, "is a folder"),
    ("long_line", _long_line, "longer than 65536 characters"),
    ("absent", None, "no such file"),
]


CASE_TOML = """seed = 1
[material]
symbol = "Al"
[line]
length = 6
[[populations]]
name = "measured"
volume_fraction = 0.02
distribution = "measured"
sizes_file = "{file}"
sizes_are = "particles"
strength = "impenetrable"
"""


def bad_case(tmp_path, stem, make):
    sizes = tmp_path / f"{stem}.csv"
    if isinstance(make, str):
        sizes.write_text(make)
    elif make is not None:
        make(sizes)
    path = tmp_path / f"{stem}.toml"
    path.write_text(CASE_TOML.format(file=sizes.name))
    return path, sizes


@pytest.mark.parametrize("command", ["run", "estimate"])
@pytest.mark.parametrize("stem, make, fragment", BAD_FILES)
def test_cli_bad_sizes_file_one_line_exit_2(tmp_path, capsys, command, stem, make, fragment):
    path, sizes = bad_case(tmp_path, stem, make)
    code = main([command, str(path), "--quiet"] if command == "run" else [command, str(path)])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1, err
    assert str(sizes) in err and f"`{KEY}`" in err and fragment in err, err


def test_cli_sizes_file_too_many_rows_subprocess(tmp_path):
    sizes = tmp_path / "many.csv"
    with open(sizes, "w") as fh:  # one row more than allowed, written in blocks
        fh.write("radius_nm\n")
        block = "1\n" * 100_000
        for _ in range(P.MAX_MEASURED_SIZES // 100_000):
            fh.write(block)
        fh.write("1\n")
    path = tmp_path / "many.toml"
    path.write_text(CASE_TOML.format(file=sizes.name))
    out = subprocess.run([sys.executable, "-m", "dlsim.cli", "estimate", str(path)],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 2 and out.stderr.count("\n") == 1, out.stderr
    assert f"more than {P.MAX_MEASURED_SIZES} rows" in out.stderr and "Traceback" not in out.stderr


@pytest.mark.parametrize("stem", ["overlap", "binary"])
def test_cli_bad_sizes_file_subprocess_run(tmp_path, stem):
    make = dict((s, m) for s, m, _ in BAD_FILES)[stem]
    path, sizes = bad_case(tmp_path, stem, make)
    out = subprocess.run([sys.executable, "-m", "dlsim.cli", "run", str(path), "--quiet"],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 2 and out.stderr.count("\n") == 1 and str(sizes) in out.stderr


# ---------------------------------------------------------------------------------------------
# Fuzzing the file: every outcome is a usable population or a one-line CaseError

PLAUSIBLE = st.floats(min_value=1e-2, max_value=2e5).map(lambda v: f"{v:.6g}")
JUNK = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(min_value=-10, max_value=10**16).map(str),
    st.sampled_from(["", " ", "abc", "1e400", "-0", "0", "1e-9", "0x10", "1,5", '"3"', "nan", "∞",
                     "1_0"]),
    st.text(max_size=6),
)
GOOD_HEADERS = ["radius_nm", "diameter_nm", "id,radius_nm", "lower_nm,upper_nm,count",
                "upper_nm,lower_nm,count"]
HEADERS = st.sampled_from(3 * GOOD_HEADERS + ["lower_nm,upper_nm", "size", "", "# x"])


@st.composite
def sizes_files(draw):
    """File bytes: a header, rows of plausible numbers with now and then a junk cell, a row of
    the wrong length or ordered bins, and an ending (sometimes a byte that is not UTF-8)."""
    header = draw(HEADERS)
    width = max(1, header.count(",") + 1 + draw(st.sampled_from([0, 0, 0, 0, -1, 1])))
    rows = draw(st.lists(st.lists(PLAUSIBLE, min_size=width, max_size=width), max_size=12))
    if header.startswith("lower_nm") and rows and draw(st.booleans()):  # ordered bins
        edges = sorted(draw(st.lists(st.floats(0.0, 50.0), min_size=2, max_size=8, unique=True)))
        counts = draw(st.lists(st.integers(0, 10**7), min_size=len(edges) - 1,
                               max_size=len(edges) - 1))
        rows = [[repr(lo), repr(hi), str(c)] for lo, hi, c in zip(edges, edges[1:], counts)]
    if rows and draw(st.booleans()):
        row = draw(st.integers(0, len(rows) - 1))
        rows[row][draw(st.integers(0, len(rows[row]) - 1))] = draw(JUNK)
    text = header + "\n" + "\n".join(",".join(r) for r in rows)
    ending = st.sampled_from([b"", b"\n", b"\r\n1\n"] * 3 + [b"\xff"])
    return text.encode("utf-8") + draw(ending)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(content=sizes_files(), sizes_are=st.sampled_from(["particles", "sections"]),
       flip=st.sampled_from([False, False, False, True]), plane=st.booleans())
def test_fuzzed_sizes_file_valid_population_or_one_line_error(tmp_path, content, sizes_are, flip,
                                                              plane):
    (tmp_path / "sizes.csv").write_bytes(content)
    kind = "diameter" if (b"diameter" in content) != flip else "radius"
    extra = {"sections_as": "in_plane"} if plane and sizes_are == "sections" else {}
    try:
        c = case(tmp_path, sizes_are=sizes_are, size_kind=kind, **extra)
    except CaseError as err:
        assert "\n" not in str(err) and err.source and err.key.startswith("populations[1]")
        return
    d = c.populations[0].size_distribution()
    e = P.expected_section_stats(d, FRACTION)
    assert np.all(d.weight >= 0.0) and d.weight.sum() == pytest.approx(1.0)
    for value in (d.moment(1), d.moment(3), e["areal_density_per_nm2"], e["rho_mean_nm"]):
        assert math.isfinite(value) and value > 0.0
    # Sample the field only where it stays small (a file can ask for one huge particle among
    # tiny ones, which the count bound refuses with a CaseError anyway).
    slab = getattr(d, "r_max", 0.0)
    expected = e["areal_density_per_nm2"] * c.line.length_nm**2 * max(
        1.0, slab / max(d.moment(1), 1e-300))
    if expected < 1e5:
        table, _ = populations_table(c, 0)
        assert np.all(np.isfinite(table.rho)) and np.all(table.rho >= 0.0)


# ---------------------------------------------------------------------------------------------
# The demo case


def test_demo_case_estimate_runs(capsys):
    from pathlib import Path

    demo = Path(__file__).resolve().parents[1] / "cases" / "measured_precipitates.toml"
    assert main(["estimate", str(demo)]) == 0
    assert "Scheil-Schwartz-Saltykov" in capsys.readouterr().out
