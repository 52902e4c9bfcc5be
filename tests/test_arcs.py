"""The exact quasi-static arc construction (dlsim.arcs) against closed forms, invariants and its
slow twin.

Sources: a square array of point obstacles with the line along a row, τ_c = (2Γ/(bL)) cos(φc/2)
(Hull & Bacon, *Introduction to Dislocations*, 5th ed., 2011, ch. 10; Foreman & Makin, Phil. Mag.
14, 911, 1966); the bow-out radius R = Γ/(τb) of a segment pinned at both ends (line-tension
relation, common practice); random impenetrable points ≈ 0.81 · 2Γ/(b L_s) (Foreman & Makin 1966,
the figure from memory); Friedel's weak-obstacle law τ = (2Γ/(b L_s)) cos^{3/2}(φc/2) (Friedel,
*Dislocations*, 1964), an asymptotic law for φc → π.
"""
import math

import numpy as np
import pytest

from dlsim import analytic, arcs
from dlsim.fields import ObstacleField, random_field, square_field
from dlsim.solver import Elasticity, LineModel, Protocol

import naive_arcs as NA

GAMMA = 0.5                 # Γ = G b²/2 (reduced)
L = 200.0                   # spacing (b)


def protocol(spacing, flow):
    """Protocol of the case layer's shape (api.model_and_protocol): only flow_distance and
    max_stress matter to the arc construction."""
    ref = analytic.orowan(GAMMA, spacing)
    return Protocol(0.02 * ref, 1e-4 * ref, flow, 6, 2_000_000, 5.0 * ref)


def strength(phi_deg):
    return np.inf if phi_deg == 0 else analytic.critical_force(GAMMA, math.radians(phi_deg))


def random_points(n, phi_deg, seed):
    side = math.sqrt(n) * L
    return random_field(side, side, 1.0 / L ** 2, strength(phi_deg), np.random.default_rng(seed))


def crss_over_orowan(field, friction=0.0, **kw):
    model = LineModel(GAMMA, field.spacing / 20, friction)
    result = arcs.find_crss_arcs(field, model, protocol(field.spacing, field.Ly), **kw)
    return (result.crss - friction) / analytic.orowan(GAMMA, field.spacing), result


@pytest.mark.parametrize("phi_deg", [0.0, 60.0, 120.0, 150.0])
def test_crss_square_array_is_cos_half_critical_angle(phi_deg):
    # Hull & Bacon; Foreman & Makin 1966: τ_c = (2Γ/(bL)) cos(φc/2).  The construction is exact;
    # only the rounding of the release stress (closed form) and of the coordinates remains.
    ratio, result = crss_over_orowan(square_field(L, 5, 3, strength(phi_deg)))
    assert result.converged and "exact quasi-static arc construction" in result.message
    assert ratio == pytest.approx(math.cos(math.radians(phi_deg) / 2), abs=1e-9)


def test_bow_out_radius_is_gamma_over_tau():
    # Line-tension relation (common practice): an arc between two pins has radius Γ/(τb).  One
    # obstacle per period: the arc runs from the pin to its image; sampled at the CRSS.
    result = crss_over_orowan(square_field(L, 1, 1, np.inf))[1]
    x, y, pin = result.line.nodes()
    assert np.count_nonzero(pin >= 0) == 1
    A = np.column_stack([x, y, np.ones_like(x)])
    D, E, F = np.linalg.lstsq(A, -(x ** 2 + y ** 2), rcond=None)[0]
    assert math.sqrt(D * D / 4 + E * E / 4 - F) == pytest.approx(GAMMA / result.crss, rel=1e-9)


def test_friction_is_an_offset_of_every_stress():
    # Under monotonic quasi-static loading the configuration at τ with friction τ_f is the
    # frictionless one at τ - τ_f (the threshold only subtracts from the driving stress), so the
    # construction runs frictionless and adds τ_f: the same events, every stress shifted.
    field = random_points(300, 60.0, seed=3)
    tau_f = 0.3 * analytic.orowan(GAMMA, L)
    r0, r1 = crss_over_orowan(field)[1], crss_over_orowan(field, friction=tau_f)[1]
    assert r1.crss == pytest.approx(r0.crss + tau_f, rel=1e-12)
    assert r1.lo == pytest.approx(r0.lo + tau_f, rel=1e-12)
    assert [h.stress - tau_f for h in r1.history] == pytest.approx([h.stress for h in r0.history])
    np.testing.assert_array_equal(r0.line.nodes()[2], r1.line.nodes()[2])


@pytest.mark.slow
def test_random_impenetrable_points_near_foreman_makin():
    # Foreman & Makin 1966: ≈ 0.81 of 2Γ/(b L_s) (from memory).  Boxes of 10^4 obstacles (100 L_s
    # a side); measured: mean 0.817, spread of one box 0.012, so the mean of 6 is good to
    # ±0.005; a finite box reads a little high (Nogaret & Rodney 2006).  3 % covers that and the
    # figure's being recalled rather than read.
    values = [crss_over_orowan(random_points(10_000, 0.0, seed))[0] for seed in range(6)]
    assert np.mean(values) == pytest.approx(analytic.FOREMAN_MAKIN_FACTOR, rel=0.03)


@pytest.mark.slow
def test_random_weak_points_close_below_friedel():
    # Friedel (1964): (2Γ/(b L_s)) cos^{3/2}(φc/2), asymptotic as φc → π; at φc = 150°
    # computed random arrays lie somewhat below it (Foreman & Makin 1966, from memory: a few
    # per cent to ~10 %).  Measured mean of 6 boxes of 10^4 obstacles: 0.925 of Friedel (one box: ±0.02).  The
    # window 0.85-1.02 checks "close to and not above Friedel" without claiming more.
    values = [crss_over_orowan(random_points(10_000, 150.0, 100 + seed))[0] for seed in range(6)]
    friedel = math.cos(math.radians(75.0)) ** 1.5
    assert 0.85 < np.mean(values) / friedel < 1.02


def check_configuration(field, out):
    """Invariants of the final pinned configuration of ArcRun ``out`` (slow NumPy checks)."""
    W = out.run.W
    R = 0.5 / out.s
    order = arcs._pins_in_order(W)
    pins = [(x, y) for _, x, y in order]
    held = [(int(W[arcs.W_IP][arcs.PK, i]), int(W[arcs.W_IP][arcs.PIY, i])) for i, _, _ in order]
    phic = arcs.critical_angles(field, GAMMA)
    angles = NA.arm_angles(pins, field.Lx, R)
    assert min(a - phic[k] for a, (k, _) in zip(angles, held)) > -1e-9
    assert NA.self_crossings(pins, field.Lx, R) == []
    # behind the line (geometry) <=> marked passed (the construction's bookkeeping), pins aside
    held_set, wrong = set(held), []
    top = max(y for _, y in pins) + R
    for k in range(field.n):
        for iy in range(-1, int(math.ceil(top / field.Ly)) + 1):
            x, y = field.x[k], field.y[k] + iy * field.Ly
            if (k, iy) in held_set or any(abs((x - px) / field.Lx - round((x - px) / field.Lx))
                                          < 1e-12 for px, _ in pins):
                continue                # a pin, or a ray through a pin's image: no test
            geometric = y < 0.0 or NA.behind(pins, field.Lx, R, x, y)
            if geometric != bool(arcs._behind(tuple(W), k, iy)):
                wrong.append((k, iy))
    assert wrong == []


@pytest.mark.parametrize("phi_deg", [0.0, 60.0, 120.0, 150.0])
def test_final_configuration_invariants_on_random_fields(phi_deg):
    # Construction rules: every pin holds (arm angle >= φc), the line does not cross itself, and
    # "behind the line" is exact: an obstacle is behind the final line iff it was passed (met and
    # released, bypassed, left in a loop or carried over by a roll).  Every arc is a circle of
    # radius Γ/τ: the sampled line's arcs fit circles of that radius.
    for seed in (0, 1):
        field = random_points(200, phi_deg, seed)
        out = arcs.run_arcs(field, LineModel(GAMMA, L / 20), protocol(L, field.Ly))
        assert out.status == "flowing"
        check_configuration(field, out)
        state = arcs._line_state(out.run, out.s)
        x, y, pin = state.nodes()
        starts = np.flatnonzero(pin >= 0)
        R = 0.5 / out.s
        for a, b in zip(starts, np.append(starts[1:], x.shape[0])):
            if b - a < 3:
                continue
            A = np.column_stack([x[a:b], y[a:b], np.ones(b - a)])
            D, E, F = np.linalg.lstsq(A, -(x[a:b] ** 2 + y[a:b] ** 2), rcond=None)[0]
            assert math.sqrt(D * D / 4 + E * E / 4 - F) == pytest.approx(R, rel=1e-7)


def two_rows(nx=4):
    """A weak row (φc = 150°) at y = L/2 and a strong one (φc = 60°) at 3L/2, box 2L high."""
    x = np.tile((np.arange(nx) + 0.5) * L, 2)
    y = np.repeat([0.5 * L, 1.5 * L], nx)
    fc = np.repeat([strength(150.0), strength(60.0)], nx)
    return ObstacleField(x, y, np.zeros(2 * nx), fc, np.zeros(2 * nx, np.int64), nx * L, 2 * L,
                         L, "square")


def test_line_released_everywhere_is_caught_again_ahead():
    # The weak row lets go of every pin at (2Γ/(bL)) cos(75°); the free line glides on at that
    # stress and the strong row catches it, which holds to (2Γ/(bL)) cos(30°) (Hull & Bacon's
    # square-array law for each row).  Stopping at "no pins left" would report cos(75°).
    ratio, result = crss_over_orowan(two_rows())
    assert ratio == pytest.approx(math.cos(math.radians(30.0)), abs=1e-9)
    assert result.counters["free_glides"] >= 1
    assert result.lo / analytic.orowan(GAMMA, L) == pytest.approx(math.cos(math.radians(75.0)),
                                                                  abs=1e-9)


def run_twin(field):
    p = protocol(field.spacing, field.Ly)
    twin = NA.NaiveArcs(field.x, field.y, arcs.critical_angles(field, GAMMA), field.Lx, field.Ly,
                        p.flow_distance, p.max_stress / (2 * GAMMA))
    status, s, pins = twin.run()
    return status, s, sorted((k, iy) for k, iy, _, _ in pins)


def run_kernel(field):
    out = arcs.run_arcs(field, LineModel(GAMMA, field.spacing / 20),
                        protocol(field.spacing, field.Ly))
    W = out.run.W
    return out.status, out.s, sorted((int(W[arcs.W_IP][arcs.PK, i]), int(W[arcs.W_IP][arcs.PIY, i]))
                                     for i, _, _ in arcs._pins_in_order(W))


@pytest.mark.parametrize("phi_deg, seed", [(0.0, 0), (0.0, 1), (60.0, 0), (120.0, 0),
                                           (150.0, 0), (150.0, 1)])
def test_kernel_matches_naive_twin(phi_deg, seed):
    # Same rules, different machinery (cell lists, heap, stored events, journal, gap grid against
    # brute force, recomputation, copies): same CRSS and the same pins.
    field = random_points(100, phi_deg, seed)
    k_status, k_s, k_pins = run_kernel(field)
    t_status, t_s, t_pins = run_twin(field)
    assert (k_status, k_pins) == (t_status, t_pins)
    assert k_s == pytest.approx(t_s, rel=1e-9)


def test_kernel_matches_naive_twin_mixed_strengths():
    # Every obstacle its own strength: impenetrable, 90° and 150° points mixed.
    field = random_points(120, 0.0, seed=7)
    rng = np.random.default_rng(8)
    fc = np.array([strength(phi) for phi in rng.choice([0.0, 90.0, 150.0], field.n)])
    field = ObstacleField(field.x, field.y, field.radius, fc, field.population, field.Lx,
                          field.Ly, field.spacing, "random")
    k_status, k_s, k_pins = run_kernel(field)
    t_status, t_s, t_pins = run_twin(field)
    assert (k_status, k_pins) == (t_status, t_pins)
    assert k_s == pytest.approx(t_s, rel=1e-9)


def test_release_stress_closed_form_matches_bisection():
    # The closed form s = 2 sin(A/2) cos(A/2)/sqrt((a-b)² + 4ab cos²(A/2)) solves
    # asin(a s) + asin(b s) = A = α - φc (law of cosines in the triangle of circumradius 1/(2s)).
    rng = np.random.default_rng(1)
    for _ in range(2000):
        alpha, phic = rng.uniform(0.1, 2 * math.pi - 0.1), rng.uniform(0.0, math.pi)
        a, b = rng.uniform(0.1, 3.0, 2)
        exact = NA.release_by_bisection(alpha, phic, a, b)
        closed = arcs.release_stress(alpha, phic, a, b)
        if math.isinf(exact):
            assert math.isinf(closed) or NA.phi_at(alpha, a, b, closed) == pytest.approx(
                phic, abs=1e-9)
        else:
            assert closed == pytest.approx(exact, rel=1e-9, abs=1e-12)


def test_tangency_quartic_matches_scan():
    # First contact of two bowing arcs: exact root isolation of the quartic against a dense scan
    # of the gap between their circles.  Pairs of arcs facing each other (one running +x, the
    # other -x above it), so that most of them touch before either goes unstable.
    rng = np.random.default_rng(2)
    found = 0
    for _ in range(60):
        c1, c2, h = rng.uniform(0.5, 2.0), rng.uniform(0.5, 2.0), rng.uniform(0.2, 1.5)
        x0 = rng.uniform(-0.5, 0.5)
        p0, p1 = (0.0, 0.0), (c1, rng.uniform(-0.3, 0.3))
        q0, q1 = (x0 + c2, h + rng.uniform(-0.3, 0.3)), (x0, h)
        smax = min(1 / math.dist(p0, p1), 1 / math.dist(q0, q1))
        s, zx, zy = arcs.tangency(*p0, *p1, *q0, *q1, 0.05 * smax, smax)
        s2, z2 = NA.tangency_by_scan(p0, p1, q0, q1, 0.05 * smax, smax, samples=4000)
        assert math.isinf(s) == math.isinf(s2)
        if not math.isinf(s):
            found += 1
            assert s == pytest.approx(s2, rel=1e-8)
            assert (zx, zy) == pytest.approx(z2, abs=1e-6)
    assert found > 20


def test_poly_roots_matches_numpy():
    rng = np.random.default_rng(3)
    out = np.empty(6)
    for _ in range(500):
        coef = rng.normal(size=5)
        n = arcs.poly_roots(coef, -2.0, 2.0, out)
        ref = np.roots(coef[::-1])
        ref = np.sort(ref[(abs(ref.imag) < 1e-9) & (abs(ref.real) < 2.0)].real)
        np.testing.assert_allclose(out[:n], ref, atol=1e-7)


def test_same_field_same_numbers():
    field = random_points(300, 0.0, seed=5)
    frames = []
    a = crss_over_orowan(field, snapshot_every=50,
                         on_snapshot=lambda st, tau, ev: frames.append((st.n, tau, ev)))[1]
    b = crss_over_orowan(field)[1]
    assert a.crss == b.crss and a.lo == b.lo and a.counters == b.counters
    assert [(h.stress, h.pinned, h.steps) for h in a.history] == \
        [(h.stress, h.pinned, h.steps) for h in b.history]
    for u, v in zip(a.line.nodes(), b.line.nodes()):
        np.testing.assert_array_equal(u, v)
    assert len(frames) >= 2 and frames[-1][1] == a.crss
    assert a.history[-1].state == "flowing" and a.history[-1].stress == a.crss


def test_discs_and_other_line_models_are_refused():
    points = square_field(L, 2, 2, np.inf)
    model = LineModel(GAMMA, L / 20)
    assert arcs.arc_limitations(points, model) is None
    discs = ObstacleField(points.x, points.y, np.full(4, 10.0), points.fc, points.population,
                          points.Lx, points.Ly, points.spacing, "particles")
    elastic = LineModel(GAMMA, L / 20, elasticity=Elasticity("dewit_koehler"))
    for field, m in ((discs, model), (points, elastic)):
        assert isinstance(arcs.arc_limitations(field, m), str)
        with pytest.raises(ValueError):
            arcs.find_crss_arcs(field, m, protocol(L, L))
