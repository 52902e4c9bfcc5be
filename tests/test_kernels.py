"""The line kernels against their NumPy twins (tests/naive.py), the energy, and physical limits.

Sources: nodal forces are the energy-consistent forms of Hirth & Lothe, *Theory of Dislocations*
(1982), ch. 6 (line tension) and ch. 3 (Peach–Koehler force); lattice friction as a threshold on the
resolved stress and overdamped glide v = M τ_eff b as in docs/physics.md (Kocks, Argon & Ashby
1975, §2); no-tunnelling capture and Orowan looping of impenetrable points as in docs/physics.md
("Obstacles").
"""
from __future__ import annotations

import numpy as np
import pytest

from dlsim import contract as C
from dlsim import kernels as K
from dlsim.fields import ObstacleField, random_field
from dlsim.line import LineState
from dlsim.solver import LineModel, Protocol, Relaxer

import naive

GAMMA = 0.5


def wavy_line(rng, n, Lx, amplitude, x0=0.0, y0=0.0, jitter=0.3):
    """A random periodic line of n nodes over one period, a sum of three random Fourier modes."""
    x = x0 + (np.arange(n) + 0.5 + jitter * rng.uniform(-0.5, 0.5, n)) * (Lx / n)
    phase = rng.uniform(0, 2 * np.pi, 3)
    amp = amplitude * rng.uniform(0.2, 1.0, 3)
    y = y0 + sum(a * np.sin(2 * np.pi * (k + 1) * (x - x0) / Lx + p)
                 for k, (a, p) in enumerate(zip(amp, phase)))
    return x, y


def params(Lx, Ly=1.0, tau=0.0, tau_f=0.0, lmin=0.0, lmax=np.inf, dann=0.0, mobility=1.0):
    """The parameter record of a constant-Γ line (every field named, dlsim.contract)."""
    return C.pack_parameters(dict(
        gamma=GAMMA, tau=tau, tau_f=tau_f, mobility=mobility, l_min=lmin, l_max=lmax,
        tolerance=0.0, flow=np.inf, Lx=Lx, Ly=Ly, area_ref=0.0, d_ann=dann,
        model=C.MODEL_CONSTANT, theta=0.0, nu=1.0 / 3.0, a_core=1.0, r_out=1000.0, images=0,
        cutoff=0.0, refresh=1, stiffness=GAMMA))


def padded(a, cap, fill):
    out = np.full(cap, fill, dtype=np.asarray(a).dtype)
    out[: len(a)] = a
    return out


def random_pins(rng, n, fraction, n_obs=1000):
    pin = np.full(n, -1, np.int64)
    sel = rng.random(n) < fraction
    pin[sel] = rng.choice(n_obs, sel.sum(), replace=False)
    return pin


class Work:
    """The work arrays of one capacity (at least the capture lists') for calling kernels one by
    one, with named views of their rows (dlsim.contract)."""

    def __init__(self, cap):
        cap = max(cap, 3 * C.MAX_CAPTURES)
        self.f = np.zeros((C.N_WORK_F, cap))
        self.i = np.zeros((C.N_WORK_I, cap), np.int64)
        self.vx, self.vy, self.fpin = self.f[C.W_VX], self.f[C.W_VY], self.f[C.W_FPIN]
        self.ntx, self.nty = self.f[C.W_NTX], self.f[C.W_NTY]
        self.rx, self.ry, self.rad = self.f[C.W_RX], self.f[C.W_RY], self.f[C.W_RAD]
        self.far, self.tau_int = self.f[C.W_FAR], self.f[C.W_TAU_INT]
        mc = C.MAX_CAPTURES
        self.cap_seg, self.cap_obs = self.i[C.I_CAPTURE, :mc], self.i[C.I_CAPTURE, mc:2 * mc]
        self.cap_s, self.cap_x = self.f[C.W_CAPTURE, :mc], self.f[C.W_CAPTURE, mc:2 * mc]
        self.cap_y = self.f[C.W_CAPTURE, 2 * mc:3 * mc]


def field_tuple(ox, oy, opin, cstart, citems, ncx, ncy, Lx, Ly):
    """The kernels' ``field`` group (critical forces unused by these kernels: impenetrable)."""
    ox, oy = np.asarray(ox, float), np.asarray(oy, float)
    return (ox, oy, np.full(len(ox), np.inf), opin, cstart, citems, int(ncx), int(ncy),
            float(Lx), float(Ly))


def run_node_pass(x, y, pin, prm, tau_int=None):
    """node_pass on padded copies; returns the work arrays and (area, bad, max_te, stiff, vmax,
    turned)."""
    n = len(x)
    w = Work(n + 8)
    xs, ys, ps = padded(x, n + 8, 0.0), padded(y, n + 8, 0.0), padded(pin, n + 8, -1)
    if tau_int is not None:
        w.tau_int[:n] = tau_int
    out = K.node_pass((xs, ys, ps, np.full(n + 8, -1)), n, prm, w.f)
    return w, out


# --- forces ----------------------------------------------------------------------------------

@pytest.mark.parametrize("seed", [1, 2, 3])
def test_nodal_forces_equal_twin_on_wavy_line(seed):
    rng = np.random.default_rng(seed)
    n, Lx = 64, 500.0
    x, y = wavy_line(rng, n, Lx, 40.0, x0=rng.uniform(-Lx, Lx))
    tau = rng.uniform(-0.01, 0.01, n)
    fx, fy = np.zeros(n), np.zeros(n)
    K.nodal_forces(x, y, n, params(Lx), tau, fx, fy)
    ref = naive.nodal_forces(x, y, Lx, GAMMA, tau)
    np.testing.assert_allclose(np.stack([fx, fy], 1), ref, rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("seed,tau", [(4, 0.0), (5, 3e-3), (6, -2e-3)])
def test_nodal_forces_equal_minus_energy_gradient(seed, tau):
    # F_i = -∂E/∂r_i with E = Γ·length − τ·area (Hirth & Lothe 1982, ch. 6; docs/physics.md)
    rng = np.random.default_rng(seed)
    n, Lx = 40, 400.0
    x, y = wavy_line(rng, n, Lx, 30.0)
    fx, fy = np.zeros(n), np.zeros(n)
    K.nodal_forces(x, y, n, params(Lx), np.full(n, tau), fx, fy)
    h = 1e-5
    grad = np.zeros((n, 2))
    for i in range(n):
        for c, arr in enumerate((x, y)):
            keep = arr[i]
            arr[i] = keep + h
            ep = naive.line_energy(x, y, Lx, GAMMA, tau)
            arr[i] = keep - h
            em = naive.line_energy(x, y, Lx, GAMMA, tau)
            arr[i] = keep
            grad[i, c] = (ep - em) / (2 * h)
    # central differences of O(h²) on energies of O(Γ Lx): a few 1e-8 G b² of round-off
    np.testing.assert_allclose(np.stack([fx, fy], 1), -grad, atol=1e-7)


@pytest.mark.parametrize("seed", [7, 8])
def test_node_pass_area_and_bounds_equal_twin(seed):
    rng = np.random.default_rng(seed)
    n, Lx = 50, 300.0
    x, y = wavy_line(rng, n, Lx, 20.0, x0=rng.uniform(-Lx, Lx), y0=rng.uniform(-1e3, 1e3))
    pin = random_pins(rng, n, 0.2)
    for lmin, lmax in ((0.0, np.inf), (5.5, 7.0), (1.0, 20.0)):
        _, (area, first_bad, *_) = run_node_pass(x, y, pin, params(Lx, lmin=lmin, lmax=lmax))
        _, _, area_ref, bad_ref = naive.segment_pass(x, y, pin, Lx, lmin, lmax)
        assert area == pytest.approx(area_ref, rel=1e-12, abs=1e-9)
        assert (first_bad >= 0) == (bad_ref >= 0)
        if bad_ref >= 0:
            assert first_bad == bad_ref
        assert K.line_area(x, y, n, Lx) == pytest.approx(area_ref, rel=1e-12, abs=1e-9)


@pytest.mark.parametrize("seed,tau_f", [(9, 0.0), (10, 2e-3), (11, 1.0)])
def test_node_pass_equals_twin(seed, tau_f):
    rng = np.random.default_rng(seed)
    n, Lx = 80, 800.0
    x, y = wavy_line(rng, n, Lx, 60.0, x0=rng.uniform(-Lx, Lx))
    pin = random_pins(rng, n, 0.15)
    tau_int = rng.uniform(-1e-3, 1e-3, n)
    prm = params(Lx, tau=4e-3, tau_f=tau_f, mobility=2.5)
    w, (_, _, max_te, stiff, vmax, turned) = run_node_pass(x, y, pin, prm, tau_int)
    v, fpin, tchord, max_te_ref, stiff_ref, vmax_ref = naive.node_pass(
        x, y, pin, Lx, GAMMA, 4e-3, tau_f, 2.5, tau_int)
    assert turned == np.count_nonzero((pin < 0) & (tchord[:, 0] < 0.5))
    np.testing.assert_allclose(np.stack([w.vx[:n], w.vy[:n]], 1), v, rtol=1e-10, atol=1e-15)
    np.testing.assert_allclose(w.fpin[:n][pin >= 0], fpin[pin >= 0], rtol=1e-10, atol=1e-15)
    np.testing.assert_allclose(np.stack([w.ntx[:n], w.nty[:n]], 1), tchord, rtol=1e-12, atol=1e-15)
    assert max_te == pytest.approx(max_te_ref, rel=1e-10, abs=1e-18)
    assert stiff == pytest.approx(stiff_ref, rel=1e-12)
    assert vmax == pytest.approx(vmax_ref, rel=1e-10, abs=1e-18)


@pytest.mark.parametrize("seed,tau_f,lmin", [(12, 0.0, 0.0), (13, 2e-3, 0.0), (14, 0.0, 9.0)])
def test_refresh_after_release_equals_a_new_pass(seed, tau_f, lmin):
    # relax_line updates only the freed nodes after a release (constant Γ): the same bits as a
    # new node_pass, or False where that pass would find a short free segment and remesh
    rng = np.random.default_rng(seed)
    n, Lx = 80, 800.0
    x, y = wavy_line(rng, n, Lx, 60.0, x0=rng.uniform(-Lx, Lx))
    pin = random_pins(rng, n, 0.3)
    prm = params(Lx, tau=4e-3, tau_f=tau_f, mobility=2.5, lmin=lmin)
    w, passed = run_node_pass(x, y, pin, prm)
    freed = np.flatnonzero(pin >= 0)[::2]
    released = pin.copy()
    released[freed] = -1
    nodes = padded(freed, n + 8, -1)
    xs, ys = padded(x, n + 8, 0.0), padded(y, n + 8, 0.0)
    line = (xs, ys, padded(released, n + 8, -1), np.full(n + 8, -1))
    done, refreshed = K._refresh_released(line, n, prm, w.f, nodes, len(freed), passed)
    fresh, expect = run_node_pass(x, y, released, prm)
    short = np.hypot(np.diff(np.r_[x, x[0] + Lx]), np.diff(np.r_[y, y[0]])) < lmin
    assert done == (expect[1] < 0) and done == (passed[1] < 0 and not short.any())
    if done:
        assert refreshed == expect
        for row in (C.W_VX, C.W_VY, C.W_FPIN, C.W_NTX, C.W_NTY):
            assert np.array_equal(w.f[row, :n], fresh.f[row, :n])


@pytest.mark.parametrize("tau_over_tf", [0.0, 0.5, 1.0, 1.01, 2.0, 10.0])
def test_straight_line_velocity_with_friction(tau_over_tf):
    # friction threshold and overdamped glide: v = M (τ − τ_f) for τ > τ_f, else 0 (docs/physics.md)
    n, Lx, tau_f, mob = 32, 320.0, 1e-3, 3.0
    x = (np.arange(n) + 0.5) * Lx / n
    y = np.full(n, 7.0)
    tau = tau_over_tf * tau_f
    w, (_, _, max_te, _, vmax, _) = run_node_pass(x, y, np.full(n, -1), params(Lx, tau=tau,
                                                                             tau_f=tau_f,
                                                                              mobility=mob))
    expect = mob * max(tau - tau_f, 0.0)
    np.testing.assert_allclose(w.vy[:n], expect, rtol=1e-12, atol=1e-18)
    np.testing.assert_allclose(w.vx[:n], 0.0, atol=1e-18)
    assert vmax == pytest.approx(expect, rel=1e-12, abs=1e-18)


# --- capture ---------------------------------------------------------------------------------

def run_captures(x, y, pin, ign, v, dt, ox, oy, opin, Lx, Ly, cell):
    n = len(x)
    cstart, citems, ncx, ncy = cells(ox, oy, Lx, Ly, cell)
    w = Work(n)
    xm, ym = x.copy(), y.copy()
    w.vx[:n], w.vy[:n], w.rad[:n] = v[:, 0], v[:, 1], K.UNKNOWN
    # l_min large: the step limit MAX_MOVE_FRACTION l_min does not hold any node back here
    ncap, _ = K.move_and_capture((xm, ym, pin, ign), n, dt, params(Lx, Ly, lmin=1e3),
                                 field_tuple(ox, oy, opin, cstart, citems, ncx, ncy, Lx, Ly),
                                 w.f, w.i)
    # every node advanced by v dt
    np.testing.assert_allclose(np.stack([xm, ym], 1), np.stack([x, y], 1) + v * dt, rtol=1e-15)
    return {int(w.cap_obs[c]): int(w.cap_seg[c]) for c in range(ncap)}, w, ncap


CAPTURE_CASES = [
    # seed, line x offset (b), line height (b), moving fraction: interior, and every seam
    (21, 0.0, 500.0, 1.0),
    (22, 0.0, 995.0, 1.0),      # crosses y = Ly while moving
    (23, -37.0, 3.0, 0.7),      # segment n-1 and node 0 straddle x = 0; obstacles near y = 0
    (24, 1000.0 - 5.0, -4.0, 1.0),  # unwrapped one period on; y below the box
    (25, 2000.0 + 3.0, 3000.0 - 2.0, 0.5),  # several periods away in both directions
]


@pytest.mark.parametrize("seed,x0,y0,moving", CAPTURE_CASES)
def test_find_captures_equals_brute_force(seed, x0, y0, moving):
    rng = np.random.default_rng(seed)
    Lx, Ly, n = 1000.0, 1000.0, 60
    m = 3000
    ox, oy = rng.uniform(0, Lx, m), rng.uniform(0, Ly, m)
    # crowd the seams so that images matter
    ox[:250] = rng.uniform(0, 8.0, 250)
    ox[250:500] = Lx - rng.uniform(0, 8.0, 250)
    oy[500:750] = rng.uniform(0, 8.0, 250)
    oy[750:1000] = Ly - rng.uniform(0, 8.0, 250)
    x, y = wavy_line(rng, n, Lx, 6.0, x0=x0, y0=y0)
    v = rng.normal(0.0, 1.0, (n, 2)) + np.array([0.0, 2.0])
    v[rng.random(n) > moving] = 0.0
    dt = 3.0
    pin = random_pins(rng, n, 0.1, m)
    ign = np.full(n, -1, np.int64)
    sel = rng.random(n) < 0.2
    ign[sel] = rng.integers(0, m, sel.sum())
    opin = np.zeros(m, np.int64)
    opin[rng.choice(m, 200, replace=False)] = 1
    found, w, ncap = run_captures(x, y, pin, ign, v, dt, ox, oy, opin, Lx, Ly, cell=50.0)
    ref = naive.find_captures(x, y, pin, ign, v, dt, ox, oy, opin, Lx, Ly)
    assert 5 < len(ref) < C.MAX_CAPTURES   # the case tests something, within one step's room
    assert ncap == len(found)      # no obstacle captured twice
    assert found == ref


@pytest.mark.parametrize("seed", [26, 27])
def test_insert_pins_equals_twin(seed):
    rng = np.random.default_rng(seed)
    Lx, Ly, n, m = 1000.0, 1000.0, 40, 3000
    ox, oy = rng.uniform(0, Lx, m), rng.uniform(0, Ly, m)
    x, y = wavy_line(rng, n, Lx, 6.0, y0=500.0)
    v = rng.normal(0.0, 1.0, (n, 2)) + np.array([0.0, 2.0])
    pin, ign = np.full(n, -1, np.int64), np.full(n, -1, np.int64)
    opin = np.zeros(m, np.int64)
    _, w, ncap = run_captures(x, y, pin, ign, v, 4.0, ox, oy, opin, Lx, Ly, cell=50.0)
    assert ncap > 3
    caps = [(int(w.cap_seg[c]), w.cap_s[c], int(w.cap_obs[c]), w.cap_x[c], w.cap_y[c])
            for c in range(ncap)]
    ref = naive.move_and_pin(x, y, pin, ign, v, 4.0, caps)
    cap = n + ncap
    xs, ys = padded(x + v[:, 0] * 4.0, cap, 0.0), padded(y + v[:, 1] * 4.0, cap, 0.0)
    ps, gs = padded(pin, cap, -1), padded(ign, cap, -1)
    w.rx[:], w.ry[:], w.rad[:] = np.arange(w.f.shape[1], dtype=float), 0.0, np.arange(
        w.f.shape[1], dtype=float)
    w.far[:] = np.arange(w.f.shape[1], dtype=float) + 0.5
    field = field_tuple(ox, oy, opin, *cells(ox, oy, Lx, Ly, 50.0), Lx, Ly)
    n_new = K.insert_pins((xs, ys, ps, gs), n, ncap, field, w.f, w.i)
    rx, rad, far = w.rx[:cap], w.rad[:cap], w.far[:cap]
    assert n_new == n + ncap
    np.testing.assert_allclose(xs, ref[0], rtol=1e-15)
    np.testing.assert_allclose(ys, ref[1], rtol=1e-15)
    np.testing.assert_array_equal(ps, ref[2])
    np.testing.assert_array_equal(gs, ref[3])
    # each new holder is counted at its obstacle's image (dlsim.contract.occupancy)
    obs, heights = np.array([c[2] for c in caps]), np.array([c[4] for c in caps])
    np.testing.assert_array_equal(opin, C.occupancy(obs, heights, oy, Ly, m))
    # clearances travel with their nodes; the new pinned nodes' are unknown
    moved = rx[ps < 0]
    np.testing.assert_array_equal(moved, np.arange(n, dtype=float))
    assert np.all(rad[ps >= 0] == K.UNKNOWN)
    # so does the non-local self-stress; a new pinned node takes its segment start's value
    np.testing.assert_array_equal(far[ps < 0], np.arange(n, dtype=float) + 0.5)
    new_pins = np.flatnonzero(ps >= 0)
    np.testing.assert_array_equal(far[new_pins], far[new_pins - 1])


@pytest.mark.parametrize("seed", [28, 29])
def test_captures_with_kept_clearances_equal_brute_force_every_step(seed):
    # the obstacle-free discs carried from step to step must never hide a capture
    rng = np.random.default_rng(seed)
    Lx, Ly, n, m = 400.0, 400.0, 40, 800
    ox, oy = rng.uniform(0, Lx, m), rng.uniform(0, Ly, m)
    cstart, citems, ncx, ncy = cells(ox, oy, Lx, Ly, 20.0)
    x, y = wavy_line(rng, n, Lx, 5.0, y0=50.0)
    prm = params(Lx, Ly, lmin=5.0, lmax=15.0)
    pin, ign = np.full(n, -1, np.int64), np.full(n, -1, np.int64)
    opin = np.zeros(m, np.int64)
    w = Work(n)
    rad = w.rad[:n]
    rad[:] = K.UNKNOWN
    field = field_tuple(ox, oy, opin, cstart, citems, ncx, ncy, Lx, Ly)
    total = skipped = 0
    steps = 100
    for step in range(steps):
        v = np.minimum(np.abs(rng.normal(0.0, 0.4, (n, 2))), 0.8) * [0.3, 1.0]  # < l_min/4
        v[rng.random(n) < 0.1] = 0.0
        dt = 1.0
        ref = naive.find_captures(x, y, pin, ign, v, dt, ox, oy, opin, Lx, Ly)
        skipped += np.count_nonzero(rad > 0)
        w.vx[:n], w.vy[:n] = v[:, 0], v[:, 1]
        ncap, _ = K.move_and_capture((x, y, pin, ign), n, dt, prm, field, w.f, w.i)
        found = {int(w.cap_obs[c]): int(w.cap_seg[c]) for c in range(ncap)}
        assert found == ref, step
        held = np.array([w.cap_obs[c] for c in range(ncap)], np.int64)   # held from now on,
        np.add.at(opin, held, C.occupancy_unit(held, w.cap_y[:ncap], oy, Ly))  # where captured
        total += ncap
    assert total > 10                # the line did meet obstacles
    assert skipped > 0.5 * steps * n  # and most node-steps vouched for their segments


def test_find_captures_skips_obstacle_just_left():
    # a released obstacle is not re-captured by the arms that just left it (docs/physics.md)
    Lx, Ly = 100.0, 100.0
    x = np.array([10.0, 30.0, 50.0, 70.0, 90.0])
    y = np.full(5, 50.0)
    v = np.tile([0.0, 1.0], (5, 1))
    ox, oy = np.array([40.0, 60.0]), np.array([50.5, 50.5])
    ign = np.array([-1, 0, -1, -1, -1])
    found, _, _ = run_captures(x, y, np.full(5, -1), ign, v, 1.0, ox, oy, np.zeros(2, np.int64),
                               Lx, Ly, cell=25.0)
    assert found == {1: 2}



@pytest.mark.parametrize("held_image, captured", [(0, True), (1, False)])
def test_find_captures_takes_the_image_above_an_obstacle_held_below(held_image, captured):
    # the field repeats in y, so an obstacle's image one box height up is another obstacle to
    # the line: an Orowan loop left round the image below must not stop the line pinning on the
    # one above (docs/physics.md, "Capture and release"; the arc construction, Foreman & Makin
    # 1966, marks images one by one too)
    Lx, Ly = 100.0, 100.0
    x = np.array([10.0, 30.0, 50.0, 70.0, 90.0])
    y = np.full(5, Ly + 50.0)
    v = np.tile([0.0, 1.0], (5, 1))
    ox, oy = np.array([40.0]), np.array([50.5])
    opin = C.occupancy(np.array([0]), oy + held_image * Ly, oy, Ly, 1)   # a loop holds it there
    found, _, _ = run_captures(x, y, np.full(5, -1), np.full(5, -1), v, 1.0, ox, oy, opin,
                               Lx, Ly, cell=25.0)
    assert found == ({0: 1} if captured else {})


def test_occupancy_of_a_state_counts_each_image_apart():
    # one obstacle held by a loop at its own height and by the line one box height up: two
    # holders, each at its image (dlsim.contract.occupancy, read by the kernels' _held)
    Lx = Ly = 100.0
    field = random_field(Lx, Ly, 4 / (Lx * Ly), 1e9, np.random.default_rng(3))
    k = 2
    state = LineState.straight(Lx, field.y[k] + Ly, 5.0)
    state.pin[0], state.x[0] = k, field.x[k]
    state.loop_x[:3], state.loop_y[:3], state.loop_pin[:3] = field.x[k], field.y[k], [k, -1, -1]
    state.loop_off[1] = 3
    state.meta[C.M_NLOOPS], state.meta[C.M_NLOOPNODES] = 1, 3
    opin = Relaxer(field, LineModel(0.5, 5.0)).occupancy(state)
    unit = 1 << C.OCC_BITS
    assert opin[k] == 1 + unit and np.count_nonzero(opin) == 1

# --- remeshing -------------------------------------------------------------------------------

def cells(ox, oy, Lx, Ly, cell):
    """The periodic cell list of the field (ox, oy) in an Lx × Ly box."""
    f = ObstacleField(np.asarray(ox, float), np.asarray(oy, float), np.zeros(len(ox)),
                      np.full(len(ox), np.inf), np.zeros(len(ox), np.int64), Lx, Ly, cell, "random")
    return f.cell_list()


def remeshed(x, y, pin, prm, ox=(), oy=(), first_bad=0):
    """remesh on padded copies from segment ``first_bad``; returns the new x, y, pin."""
    n = len(x)
    cap = 8 * n + 64
    xs, ys = padded(x, cap, 0.0), padded(y, cap, 0.0)
    ps, gs = padded(pin, cap, -1), np.full(cap, -1)
    Lx, Ly = prm.Lx, prm.Ly
    cstart, citems, ncx, ncy = cells(ox, oy, Lx, Ly, Lx / 4)
    w = Work(cap)
    m, lo = K.remesh((xs, ys, ps, gs), n, prm, first_bad,
                     field_tuple(ox, oy, np.zeros(len(ox), np.int64), cstart, citems, ncx, ncy,
                                 Lx, Ly), w.f, w.i)
    src = w.i[C.I_SRC]
    kept = src[lo:m] >= 0
    np.testing.assert_array_equal(xs[lo:m][kept], np.asarray(x, float)[src[lo:m][kept]])
    np.testing.assert_array_equal(xs[:lo], x[:lo])                          # the rest stays
    return xs[:m], ys[:m], ps[:m]


@pytest.mark.parametrize("seed", [31, 32, 33, 34])
def test_remesh_bounds_pins_and_period(seed):
    rng = np.random.default_rng(seed)
    Lx, n = 1000.0, 120
    x, y = wavy_line(rng, n, Lx, 30.0, jitter=0.95)
    x[rng.random(n) < 0.1] += rng.uniform(-2, 2)      # some very short segments
    x = np.sort(x)
    pin = random_pins(rng, n, 0.1)
    lmin, lmax = 4.0, 12.0
    prm = params(Lx, lmin=lmin, lmax=lmax)
    xo, yo, po = remeshed(x, y, pin, prm)
    # pinned nodes are never removed nor moved
    held = {int(p): (a, b) for a, b, p in zip(x, y, pin) if p >= 0}
    got = {int(p): (a, b) for a, b, p in zip(xo, yo, po) if p >= 0}
    assert got == held
    # one period, in order: node m is node 0 shifted by (Lx, 0)
    dx = np.diff(np.append(xo, xo[0] + Lx))
    assert np.all(dx > 0)
    assert np.sum(dx) == pytest.approx(Lx)
    assert 0.0 <= xo[0] < Lx
    # every segment within bounds, except short ones between two pinned nodes
    length = np.hypot(dx, np.diff(np.append(yo, yo[0])))
    both_pinned = (po >= 0) & (np.roll(po, -1) >= 0)
    assert np.all(length <= lmax * (1 + 1e-12))
    assert np.all((length >= lmin) | both_pinned)


@pytest.mark.parametrize("seed", [35, 36])
def test_remesh_from_first_bad_segment_equals_whole(seed):
    # the nodes before the first bad segment stay; the rest comes out as from a whole pass
    rng = np.random.default_rng(seed)
    Lx = 800.0
    x = (np.arange(100) + 0.5) * 8.0
    y = 10.0 * np.sin(2 * np.pi * x / Lx) + rng.normal(0, 0.5, 100)
    keep = np.ones(100, bool)
    keep[rng.integers(50, 60):][:4] = False          # a long segment
    x, y = x[keep], y[keep]
    j = rng.integers(70, 80)
    x, y = np.insert(x, j, x[j - 1] + 1.5), np.insert(y, j, y[j - 1])   # a short one
    pin = np.full(len(x), -1)
    pin[rng.choice(len(x), 8, replace=False)] = np.arange(8)
    prm = params(Lx, lmin=4.0, lmax=12.0)
    _, (_, first_bad, *_) = run_node_pass(x, y, pin, prm)
    assert first_bad > 40
    for part, whole in zip(remeshed(x, y, pin, prm, first_bad=first_bad),
                           remeshed(x, y, pin, prm)):
        np.testing.assert_array_equal(part, whole)


def test_remesh_removes_short_arm_at_node_zero():
    # the seam is not special: a free node 0 next to a pinned node n-1 loses its short arm
    Lx = 100.0
    x = np.array([1.0, 20.0, 40.0, 60.0, 80.0, 99.5])
    y = np.zeros(6)
    pin = np.array([-1, -1, -1, -1, -1, 3])
    xo, yo, po = remeshed(x, y, pin, params(Lx, lmin=5.0, lmax=30.0))
    length = np.hypot(np.diff(np.append(xo, xo[0] + Lx)), np.diff(np.append(yo, yo[0])))
    assert length.min() >= 5.0
    assert 3 in set(po.tolist())


@pytest.mark.parametrize("radius_over_l", [3.0, 8.0, 30.0])
def test_remesh_keeps_circular_arc(radius_over_l):
    # a bowed segment pinned at both ends is a circular arc of radius Γ/(τb) (docs/physics.md); the
    # inserted nodes must stay on it, not on the chords (a flattened line would lose area)
    lmax = 10.0
    R = radius_over_l * lmax
    span = 1.6 * R
    half = np.arcsin(0.5 * span / R)
    segs = int(2 * half * R / (2.5 * lmax))   # arc nodes about 2.5 l_max apart
    theta = np.linspace(-half, half, segs + 1)
    x = R * np.sin(theta) + 0.5 * span
    y = R * np.cos(theta) - R * np.cos(half)
    # the last arc node is node 0 shifted by (Lx, 0): drop it; node 0 is pinned (the arc's ends)
    Lx = span
    x, y = x[:-1], y[:-1]
    pin = np.full(segs, -1)
    pin[0] = 0
    chord = 2 * R * np.sin(half / segs)
    assert chord > 2 * lmax
    prm = params(Lx, Ly=10 * Lx, lmin=0.3 * lmax, lmax=lmax)
    xo, yo, po = remeshed(x, y, pin, prm)
    assert len(xo) >= 3 * len(x)
    r = np.hypot(xo - 0.5 * span, yo + R * np.cos(half))
    sagitta = R * (1 - np.cos(half / segs))
    # The new nodes sit on the parabola of the arc's three-point curvature, whose mid-chord offset
    # l²/(8R) is cos²(α/4) of the true sagitta (α = half/segs... the chord's half angle is
    # half/segs): a relative error of sin²(α/2).  Points on the chord would be off by the whole
    # sagitta.
    alpha = half / segs
    assert np.max(np.abs(r - R)) <= (1.2 * np.sin(0.5 * alpha) ** 2 + 1e-9) * sagitta
    assert np.max(np.abs(r - R)) < 0.1 * sagitta


def test_remesh_does_not_tunnel():
    # an obstacle between a long chord and its arc: the new nodes go on the chord, not past it;
    # an obstacle in the corner a removal would cut: the node stays
    Lx, Ly = 200.0, 200.0
    t = np.linspace(0.0, np.pi, 5)[:-1]
    x = 100.0 - 90.0 * np.cos(t)
    y = 50.0 + 60.0 * np.sin(t)             # an upward arc whose segments are ~70 b long
    pin = np.array([0, -1, -1, -1])
    prm = params(Lx, Ly, lmin=5.0, lmax=30.0)
    xa, ya, _ = remeshed(x, y, pin, prm)
    mid = 0.5 * (np.array([x[1], y[1]]) + np.array([x[2], y[2]]))
    outward = mid - np.array([100.0, 50.0])
    ob = mid + 0.3 * outward / np.linalg.norm(outward)   # just beyond the chord 1-2, inside the arc
    xb, yb, _ = remeshed(x, y, pin, prm, [ob[0]], [ob[1]])
    on_chord = (xb > x[1]) & (xb < x[2])
    assert np.count_nonzero(on_chord) >= 2
    chord = np.array([x[2] - x[1], y[2] - y[1]])
    normal = np.array([-chord[1], chord[0]]) / np.linalg.norm(chord)
    dist = (np.stack([xb[on_chord], yb[on_chord]], 1) - [x[1], y[1]]) @ normal
    np.testing.assert_allclose(dist, 0.0, atol=1e-9)
    # without the obstacle the same nodes bulge off the chord
    sel = (xa > x[1]) & (xa < x[2])
    assert np.all(np.abs((np.stack([xa[sel], ya[sel]], 1) - [x[1], y[1]]) @ normal) > 1.0)
    # a corner: node 2 has a 3.6 b arm; an obstacle inside triangle (1, 2, 3) keeps it
    xc = np.array([10.0, 40.0, 60.0, 62.0, 90.0, 120.0, 150.0, 180.0])
    yc = np.array([0.0, 0.0, 0.0, 3.0, 0.0, 0.0, 0.0, 0.0])
    free = np.full(8, -1)
    x1, _, _ = remeshed(xc, yc, free, prm)
    assert 60.0 not in set(x1.tolist())
    x2, _, _ = remeshed(xc, yc, free, prm, [58.0], [0.5])
    assert 60.0 in set(x2.tolist())


# --- contact and reconnection ------------------------------------------------------------------

def hairpin(n_side=12, gap=2.0, h=5.0, Lx=400.0):
    """A straight line with a narrow hairpin pushed up around a pinned node at its tip."""
    left = np.arange(0, 160.0, h)
    up = np.arange(h, n_side * h, h)
    xs = list(left) + [160.0] * len(up) + [160.0 + gap / 2] + [160.0 + gap] * len(up)
    ys = [0.0] * len(left) + list(up) + [n_side * h] + list(up[::-1])
    right = np.arange(160.0 + gap + h, Lx, h)
    xs += list(right)
    ys += [0.0] * len(right)
    x, y = np.array(xs) + 0.1, np.array(ys)
    pin = np.full(len(x), -1, np.int64)
    pin[len(left) + len(up)] = 5                  # the tip holds obstacle 5
    return x, y, pin, Lx


@pytest.mark.parametrize("gap,expect", [(2.0, True), (12.0, False)])
def test_find_contact_equals_brute_force(gap, expect):
    x, y, pin, Lx = hairpin(gap=gap)
    n = len(x)
    prm = params(Lx, lmax=7.5, dann=2.5)
    w, _ = run_node_pass(x, y, pin, prm)
    i, j = K.find_contact((x, y, pin, np.full(n, -1)), n, prm, w.f, w.i)
    ref = naive.find_contacts(x, y, pin, np.stack([w.ntx[:n], w.nty[:n]], 1), Lx, 2.5,
                              K.RECONNECT_MIN_SEPARATION, K.RECONNECT_COS,
                              K.RECONNECT_MIN_PINS)
    assert bool(ref) == expect
    assert ((i, j) in ref) if ref else (i, j) == (-1, -1)


@pytest.mark.parametrize("seed", [41, 42, 43])
def test_find_contact_equals_brute_force_on_folded_lines(seed):
    rng = np.random.default_rng(seed)
    n, Lx = 150, 600.0
    t = np.arange(n) / n
    # a line that folds back on itself in loops: x(t) not monotonic
    x = Lx * t + 25.0 * np.sin(2 * np.pi * 7 * t + rng.uniform(0, 6))
    y = 25.0 * np.cos(2 * np.pi * 7 * t) + rng.normal(0, 2.0, n)
    x, y = x + rng.uniform(-Lx, Lx), y
    pin = random_pins(rng, n, 0.05)
    prm = params(Lx, lmax=16.0, dann=rng.uniform(3.0, 8.0))
    w, _ = run_node_pass(x, y, pin, prm)
    line = (x, y, pin, np.full(n, -1))
    i, j = K.find_contact(line, n, prm, w.f, w.i)
    ref = naive.find_contacts(x, y, pin, np.stack([w.ntx[:n], w.nty[:n]], 1), Lx,
                              prm.d_ann, K.RECONNECT_MIN_SEPARATION, K.RECONNECT_COS,
                              K.RECONNECT_MIN_PINS)
    assert ((i, j) in ref) if ref else (i, j) == (-1, -1)
    ci, cj = np.zeros(64, np.int64), np.zeros(64, np.int64)
    k = K.find_contacts(line, n, prm, w.f, w.i, ci, cj)
    assert set(zip(ci[:k].tolist(), cj[:k].tolist())) <= ref
    assert (k > 0) == bool(ref)


def test_reconnect_leaves_line_and_loop():
    x, y, pin, Lx = hairpin(gap=2.0)
    n = len(x)
    prm = params(Lx, lmax=7.5, dann=2.5)
    w, _ = run_node_pass(x, y, pin, prm)
    i, j = K.find_contact((x, y, pin, np.full(n, -1)), n, prm, w.f, w.i)
    cap = 4 * n
    xs, ys = padded(x, cap, 0.0), padded(y, cap, 0.0)
    ps, gs = padded(pin, cap, -1), np.full(cap, -1)
    meta = np.zeros(C.N_META, np.int64)
    lx, ly, lp, loff = np.zeros(cap), np.zeros(cap), np.full(cap, -1), np.zeros(cap, np.int64)
    cstart, citems, ncx, ncy = cells([], [], Lx, 100.0, 50.0)
    field = field_tuple([], [], np.zeros(0, np.int64), cstart, citems, ncx, ncy, Lx, 100.0)
    m = K.reconnect((xs, ys, ps, gs), n, i, j, meta, (lx, ly, lp, loff), field, Work(cap).f)
    used = int(meta[C.M_NLOOPNODES])
    assert meta[C.M_NLOOPS] == 1
    assert m + used == n - 1                      # nodes i and j merge into one
    assert 5 in set(lp[:used].tolist())            # the loop holds the obstacle
    assert 5 not in set(ps[:m].tolist())
    # the loop is cut off where the legs touch: the line keeps the part below, the loop the rest
    assert np.min(ly[:used]) >= np.max(ys[:m]) - 1e-12
    assert naive.line_area(xs[:m], ys[:m], Lx) < naive.line_area(x, y, Lx)


def folded_line(seed, n=40, Lx=100.0):
    """A random periodic walk that folds back on itself in places."""
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0, Lx, n)) + rng.normal(0, 6, n)
    return x, np.cumsum(rng.normal(0, 4, n)) * np.linspace(1, 0.2, n), Lx


def crossing_setup(x, y, pin, Lx, extra=64):
    n = len(x)
    cap = 4 * n + extra
    line = (padded(x, cap, 0.0), padded(y, cap, 0.0), padded(pin, cap, -1), np.full(cap, -1))
    loops = (np.zeros(cap), np.zeros(cap), np.full(cap, -1), np.zeros(cap, np.int64))
    cstart, citems, ncx, ncy = cells([], [], Lx, 100.0, 50.0)
    m = max(pin.max() + 1, 1)
    opin = C.occupancy(pin, y, np.zeros(m), 100.0, m)
    field = field_tuple(np.zeros(m), np.zeros(m), opin, cstart, citems, ncx, ncy, Lx, 100.0)
    return line, loops, field, Work(cap)


@pytest.mark.parametrize("n, Lx", [(40, 100.0), (400, 1000.0)])
@pytest.mark.parametrize("seed", range(12))
def test_find_crossing_finds_the_smallest_loop_of_brute_force(seed, n, Lx):
    x, y, Lx = folded_line(seed, n, Lx)
    line, _, _, w = crossing_setup(x, y, np.full(n, -1), Lx)
    p, q, t = K.find_crossing(line, n, params(Lx, lmax=12.0), w.i)
    size = naive.smallest_crossing_loop(x, y, Lx, C.MIN_NODES)
    assert (p >= 0) == (size > 0)
    if p >= 0:
        assert q - p == size and 0.0 < t < 1.0


def test_find_crossing_none_on_a_graph_line():
    rng = np.random.default_rng(4)
    x, y = wavy_line(rng, 60, 600.0, 80.0)
    line, _, _, w = crossing_setup(x, y, np.full(60, -1), 600.0)
    assert K.find_crossing(line, 60, params(600.0, lmax=15.0), w.i)[0] == -1


@pytest.mark.parametrize("seed", range(6))
def test_a_cut_said_to_leave_no_crossing_leaves_none(seed):
    # _reconnect_all skips the search after a cut when _cut_leaves_no_crossing says so: a new
    # search must then find nothing; on these lines it says so once, at the last cut
    x, y, Lx = folded_line(seed, 120, 300.0)
    n = len(x)
    line, loops, field, w = crossing_setup(x, y, np.full(n, -1), Lx)
    meta = np.zeros(C.N_META, np.int64)
    prm = params(Lx, lmax=12.0)
    said = 0
    for _ in range(n):
        p, q, t, alone = K._crossing_search(line, n, prm, w.i)
        if p < 0:
            break
        m = K.cut_crossing(line, n, p, q, t, prm, meta, loops, field, w.f)
        if alone and K._cut_leaves_no_crossing(line, n, m, p, q, prm, w.i):
            said += 1
            assert K.find_crossing(line, m, prm, Work(len(line[0])).i)[0] == -1
        n = m
    assert said == 1


@pytest.mark.parametrize("strength", [np.inf, 1.0])
@pytest.mark.parametrize("seed", range(8))
def test_cutting_every_crossing_leaves_a_simple_periodic_line(seed, strength):
    x, y, Lx = folded_line(seed)
    n = len(x)
    rng = np.random.default_rng(seed)
    pin = np.where(rng.uniform(size=n) < 0.3, np.arange(n), -1)
    line, loops, field, w = crossing_setup(x, y, pin, Lx)
    field[2][:] = strength
    meta = np.zeros(C.N_META, np.int64)
    prm = params(Lx, lmax=12.0)
    held0 = int(field[3].sum())
    for _ in range(n):
        p, q, t = K.find_crossing(line, n, prm, w.i)
        if p < 0:
            break
        pins = np.count_nonzero(line[2][np.arange(p + 1, q + 1) % n] >= 0)
        loops_before, released = meta[C.M_NLOOPS], meta[C.M_RELEASES]
        m = K.cut_crossing(line, n, p, q, t, prm, meta, loops, field, w.f)
        assert m == n - (q - p) + 1
        # two pins or more: an Orowan loop; one: an impenetrable point keeps its loop, a
        # shearable one is released; none: dropped
        kept = pins >= 2 or (pins == 1 and strength == np.inf)
        assert meta[C.M_NLOOPS] - loops_before == kept
        assert meta[C.M_RELEASES] - released == (pins == 1 and not kept)
        n = m
    state = LineState.straight(Lx, 0.0, Lx / n)
    state.x[:n], state.y[:n] = line[0][:n], line[1][:n]
    assert state.self_crossings() == 0
    # every obstacle still counted as held is held by the line or a stored loop
    held = np.count_nonzero(line[2][:n] >= 0) + np.count_nonzero(
        loops[2][: meta[C.M_NLOOPNODES]] >= 0)
    assert int(field[3].sum()) == held == held0 - meta[C.M_RELEASES]


def test_arms_crossed_behind_a_point_release_it():
    # a point whose two arms have crossed behind it (arm angle below zero, past any critical
    # angle) is bypassed: Foreman & Makin 1966, the point-obstacle rule of docs/physics.md
    Lx = 100.0
    x = np.array([10.0, 30.0, 52.0, 50.0, 48.0, 70.0, 90.0])
    y = np.array([0.0, 0.0, 20.0, 30.0, 20.0, 0.0, 0.0])
    pin = np.array([-1, -1, -1, 7, -1, -1, -1])
    line, loops, field, w = crossing_setup(x, y, pin, Lx)
    meta = np.zeros(C.N_META, np.int64)
    p, q, t = K.find_crossing(line, 7, params(Lx, lmax=30.0), w.i)
    assert (p, q) == (1, 4)
    field[2][7] = 2 * GAMMA * np.cos(np.radians(30))   # shearable (φ_c = 60°): released
    m = K.cut_crossing(line, 7, p, q, t, params(Lx, lmax=30.0), meta, loops, field, w.f)
    assert m == 5 and meta[C.M_NLOOPS] == 0 and field[3][7] == 0
    assert np.all(line[2][:m] == -1)
    # the line runs through the crossing point, on the segment 30 -> 52 (x = 30 + 22 t)
    assert line[0][2] == pytest.approx(30.0 + 22.0 * t) and line[1][2] > 0.0


def test_a_freed_obstacle_shrinks_the_discs_it_lies_in():
    # move_and_capture skips a segment whose ends stay in their obstacle-free discs, which hold
    # no free obstacle within W_RAD + l_max/2 of their centres; a released obstacle must shrink
    # exactly the discs that now contain it (its nearest periodic image counts), no others
    Lx, Ly, lmax = 100.0, 80.0, 10.0
    n = 4
    w = Work(n)
    w.rx[:n], w.ry[:n] = [10.0, 40.0, 97.0, 60.0], [10.0, 10.0, 78.0, 50.0]
    w.rad[:n] = [20.0, 20.0, 20.0, K.UNKNOWN]
    field = field_tuple([4.0], [6.0], np.zeros(1, np.int64), *cells([4.0], [6.0], Lx, Ly, 25.0),
                        Lx, Ly)
    K._obstacle_freed(0, n, params(Lx, Ly, lmax=lmax), field, w.f)
    half = 0.5 * lmax
    d_image = np.hypot(4.0 + Lx - 97.0, 6.0 + Ly - 78.0)   # node 2 sees the image across both seams
    assert w.rad[0] == pytest.approx(np.hypot(6.0, 4.0) - half)
    assert w.rad[1] == 20.0                       # 36.2 b away: its disc stays
    assert w.rad[2] == pytest.approx(d_image - half)
    assert w.rad[3] == K.UNKNOWN


def test_move_and_capture_point_implicit_step():
    # a node moves by v dt/(1 + k dt), and never more than MAX_MOVE_FRACTION l_min
    Lx, n = 100.0, 4
    x, y = np.array([10.0, 35.0, 60.0, 85.0]), np.zeros(n)
    vx, vy = np.zeros(n), np.array([1.0, 2.0, 0.5, 40.0])
    k = np.array([0.0, 1.0, 3.0, 0.0])
    dt = 0.5
    prm = params(Lx, 100.0, lmin=20.0, lmax=30.0)
    cstart, citems, ncx, ncy = cells([], [], Lx, 100.0, 25.0)
    w = Work(n)
    w.vx[:n], w.vy[:n], w.fpin[:n], w.rad[:n] = vx, vy, k, K.UNKNOWN
    K.move_and_capture((x, y, np.full(n, -1), np.full(n, -1)), n, dt, prm,
                       field_tuple([], [], np.zeros(0, np.int64), cstart, citems, ncx, ncy, Lx,
                                   100.0), w.f, w.i)
    expect = vy * dt / (1 + k * dt)
    expect[3] = K.MAX_MOVE_FRACTION * 20.0
    np.testing.assert_allclose(y, expect, rtol=1e-14)


def test_relaxation_bows_to_circular_arc():
    # a segment pinned at both ends bows to a circular arc of radius Γ/(τ b) (docs/physics.md;
    # Hirth & Lothe 1982, ch. 6): here one obstacle per period, so the arc spans L
    from dlsim.fields import square_field
    L = 200.0
    field = square_field(L, 1, 1, np.inf)
    model = LineModel(GAMMA, node_spacing=L / 40)
    tau = 0.5 * 2 * GAMMA / L                       # R = Γ/τ = L, below the Orowan stress
    protocol = Protocol(0.1 * tau, 1e-7 * tau, 10 * L, 0, 400_000, 10 * tau)
    state = LineState.straight(L, 0.0, model.node_spacing)
    name, _ = Relaxer(field, model).relax(state, tau, state.area(), protocol)
    assert name == "pinned"
    x, y, pin = state.nodes()
    R = GAMMA / tau
    cx, cy = L, 0.5 * L - np.sqrt(R * R - 0.25 * L * L)   # arc from (L/2, L/2) to its image
    xs = np.where(x < 0.5 * L, x + L, x)
    r = np.hypot(xs - cx, y - cy)
    # the arc is resolved by 40 chords: the nodes lie on it to well under 1% of R
    assert np.max(np.abs(r - R)) < 1e-3 * R


def test_reconnect_all_keeps_count_when_loop_buffers_fill():
    # two hairpins, room for one loop: the first reconnection stands and its node count is kept
    x1, y1, p1, Lx = hairpin(gap=2.0)
    x = np.concatenate([x1, x1 + Lx])
    y = np.concatenate([y1, y1])
    pin = np.concatenate([p1, np.where(p1 >= 0, 6, -1)])
    Lx, n = 2 * Lx, len(x)
    prm = params(Lx, Ly=100.0, lmax=7.5, dann=2.5)
    w, _ = run_node_pass(x, y, pin, prm)
    cap = 4 * n
    xs, ys = padded(x, cap, 0.0), padded(y, cap, 0.0)
    ps, gs = padded(pin, cap, -1), np.full(cap, -1)
    one_loop = np.count_nonzero(y1 > 0) + 4
    lx, ly, lp = np.zeros(one_loop), np.zeros(one_loop), np.full(one_loop, -1)
    loff, meta = np.zeros(cap, np.int64), np.zeros(C.N_META, np.int64)
    cstart, citems, ncx, ncy = cells([], [], Lx, 100.0, 50.0)
    field = field_tuple([], [], np.zeros(0, np.int64), cstart, citems, ncx, ncy, Lx, 100.0)
    work = Work(cap)
    work.ntx[:n], work.nty[:n] = w.ntx[:n], w.nty[:n]
    m, full = K._reconnect_all((xs, ys, ps, gs), n, prm, meta, (lx, ly, lp, loff), field,
                               work.f, work.i)
    assert full and meta[C.M_NLOOPS] == 1
    assert m + meta[C.M_NLOOPNODES] == n - 1     # one reconnection, counted in the node count
    held = set(ps[:m].tolist()) | set(lp[: meta[C.M_NLOOPNODES]].tolist())
    assert {5, 6} <= held                         # both tips still held, by the line or the loop


# --- whole relaxation: no tunnelling -------------------------------------------------------------

def below_line(px, py, x, y, Lx):
    """Points strictly below the periodic line (odd number of crossings of the upward ray)."""
    xc, yc = naive.closed(x, y, Lx)
    count = np.zeros(len(px), dtype=np.int64)
    for shift in (-Lx, 0.0, Lx):
        ax, bx = xc[:-1] + shift, xc[1:] + shift
        ay, by = yc[:-1], yc[1:]
        straddle = (ax[None, :] <= px[:, None]) != (bx[None, :] <= px[:, None])
        with np.errstate(divide="ignore", invalid="ignore"):
            s = (px[:, None] - ax[None, :]) / (bx - ax)[None, :]
        yy = ay[None, :] + s * (by - ay)[None, :]
        count += np.sum(straddle & (yy > py[:, None]), axis=1)
    return count % 2 == 1


def inside_polygon(px, py, x, y):
    xc, yc = np.append(x, x[0]), np.append(y, y[0])
    ax, bx, ay, by = xc[:-1], xc[1:], yc[:-1], yc[1:]
    straddle = (ay[None, :] <= py[:, None]) != (by[None, :] <= py[:, None])
    with np.errstate(divide="ignore", invalid="ignore"):   # one-node loops: zero-length edges
        s = (py[:, None] - ay[None, :]) / (by - ay)[None, :]
        xx = ax[None, :] + s * (bx - ax)[None, :]
    return np.sum(straddle & (xx > px[:, None]), axis=1) % 2 == 1


@pytest.mark.parametrize("seed,small_loops", [(51, False), (52, False), (53, True)])
def test_relaxation_never_tunnels(seed, small_loops):
    # an impenetrable point the line has swept past must be held by the line or by an Orowan loop
    rng = np.random.default_rng(seed)
    Ls = 100.0
    Lx, Ly = 10 * Ls, 40 * Ls
    field = random_field(Lx, Ly, Ls ** -2, np.inf, rng)
    model = LineModel(GAMMA, node_spacing=0.6 * Ls)      # large node spacing: long steps
    tau = 5 * 2 * GAMMA / Ls
    y0 = 1.0
    protocol = Protocol(0.1 * tau, 1e-6 * tau, 25 * Ls, 0, 4000, 10 * tau)
    relaxer = Relaxer(field, model)
    state = LineState.straight(Lx, y0, model.node_spacing)
    if small_loops:   # loop buffers run full in the middle of rounds of reconnections
        state.loop_x, state.loop_y = np.zeros(8), np.zeros(8)
        state.loop_pin, state.loop_off = np.full(8, -1), np.zeros(3, np.int64)
    checks = []

    def check(st, _tau, _steps):
        n = st.n
        x, y = st.x[:n], st.y[:n]
        px = field.x + Lx * np.floor((x[0] - field.x) / Lx + 1.0)  # images in [x0, x0 + Lx)
        swept = below_line(px, field.y, x, y, Lx) & (field.y > y0)
        for lx, ly, _ in st.loops():          # a loop lies at any periodic image in x
            for k in (-2, -1, 0, 1, 2):
                swept &= ~inside_polygon(px + k * Lx, field.y, lx, ly)
        held = relaxer.occupancy(st) > 0
        checks.append(int(swept.sum()))
        assert not np.any(swept & ~held), np.flatnonzero(swept & ~held)

    name, steps = relaxer.relax(state, tau, state.area(), protocol, chunk=5, on_chunk=check)
    assert name == "flowing"
    assert state.meta[C.M_CAPTURES] > 20 and state.n_loops > 10
    assert max(checks) > 20


# --- the contract --------------------------------------------------------------------------------

def test_pack_parameters_refuses_missing_and_unknown_fields():
    full = {name: 1 for name in C.PARAMETER_DTYPE.names}
    assert C.pack_parameters(full).refresh == 1
    short = dict(full)
    del short["tau"]
    with pytest.raises(ValueError, match="missing \\['tau'\\]"):
        C.pack_parameters(short)
    with pytest.raises(ValueError, match="unknown \\['taus'\\]"):
        C.pack_parameters(dict(full, taus=0.0))
    with pytest.raises(ValueError, match="images must be an integer"):
        C.pack_parameters(dict(full, images=1.5))


def test_kernels_take_at_most_ten_arguments():
    # grouped arguments (dlsim.contract): no kernel signature is a list of two dozen arrays
    import inspect
    from numba.core.registry import CPUDispatcher
    kernels = [obj for obj in vars(K).values()
               if isinstance(obj, CPUDispatcher) and obj.py_func.__module__ == K.__name__]
    assert len(kernels) > 30
    widest = max(kernels, key=lambda k: len(inspect.signature(k.py_func).parameters))
    assert len(inspect.signature(widest.py_func).parameters) <= 10, widest.py_func.__name__
