"""Slow NumPy twins of the kernels in :mod:`dlsim.elastic`, written independently for the tests.

The segment formula here is the long form of the antiderivative as it comes out of the
integration (before the regrouping used in the kernels); images are built as explicit copies of
the line; the straight remainder uses the same antiderivative far away instead of its limit.
Two further references check the closed form itself: quadrature of the in-plane integrand, and
quadrature of the full three-dimensional stress tensor of Cai et al. (2006) contracted to σ_zj b_j.
Reduced units (b, G) throughout.
"""
from __future__ import annotations

import numpy as np
from scipy.integrate import quad

#: Stand-in for an infinite distance in the straight remainder (b): the antiderivative is
#: evaluated there instead of taking its limit analytically.
FAR = 1e30


def _burgers(theta0):
    return np.cos(theta0), np.sin(theta0)


def _antiderivative(s, d, c, w, nu, a):
    """Long form of Fseg(s): term by term from the in-plane integrand (module docstring of
    dlsim.elastic)."""
    a2 = a * a
    rho2 = d * d + a2
    ra = np.sqrt(s * s + rho2)
    screw_like = -(c / (8 * np.pi)) * (
        w * (-2.0 / ra - a2 / ra ** 3)
        - d * c * (s / (rho2 * ra)) * (2.0 + 2.0 * a2 / rho2 + a2 / ra ** 2))
    edge_like = (w / (4 * np.pi * (1 - nu))) * (-c / ra + d * w * s / (rho2 * ra))
    return screw_like + edge_like


def segment_stress_np(px, py, xa, ya, xb, yb, theta0, nu, a):
    """Resolved shear σ_zj b_j at points (px, py) from segments A -> B (broadcasting arrays)."""
    bx, by = _burgers(theta0)
    sx, sy = np.subtract(xb, xa), np.subtract(yb, ya)
    h = np.hypot(sx, sy)
    safe = np.where(h > 0, h, 1.0)
    tx, ty = sx / safe, sy / safe
    c = tx * bx + ty * by
    w = tx * by - ty * bx
    rx, ry = np.subtract(px, xa), np.subtract(py, ya)
    d = tx * ry - ty * rx
    s_a = tx * rx + ty * ry
    val = (_antiderivative(s_a, d, c, w, nu, a) - _antiderivative(s_a - h, d, c, w, nu, a))
    return np.where(h > 0, val, 0.0)


def segment_stress_quad(px, py, xa, ya, xb, yb, theta0, nu, a):
    """Quadrature of the in-plane integrand dτ along the segment (no closed form used)."""
    bx, by = _burgers(theta0)
    h = np.hypot(xb - xa, yb - ya)
    tx, ty = (xb - xa) / h, (yb - ya) / h

    def integrand(l):
        rx, ry = px - (xa + l * tx), py - (ya + l * ty)
        ra = np.sqrt(rx * rx + ry * ry + a * a)
        tb = tx * bx + ty * by
        rxb = rx * by - ry * bx
        bxt = bx * ty - by * tx
        rb = rx * bx + ry * by
        return -(tb * rxb * (2 / ra ** 3 + 3 * a * a / ra ** 5) / (8 * np.pi)
                 + bxt * rb / (4 * np.pi * (1 - nu) * ra ** 3))

    val, _ = quad(integrand, 0.0, h, epsabs=1e-14, epsrel=1e-12, limit=400)
    return val


def _levi_civita():
    eps = np.zeros((3, 3, 3))
    for i, j, k in ((0, 1, 2), (1, 2, 0), (2, 0, 1)):
        eps[i, j, k] = 1.0
        eps[i, k, j] = -1.0
    return eps


def full_tensor_resolved_shear_quad(px, py, xa, ya, xb, yb, theta0, nu, a):
    """σ_zj b_j from quadrature of the full 3-D non-singular stress tensor of a segment.

    σ_αβ = (1/8π)∫ ∂_i∂_p∂_p R_a [b_m ε_imα t_β + b_m ε_imβ t_α] dl
         + 1/(4π(1-ν)) ∫ b_m ε_imk t_k (∂_i∂_α∂_β R_a - δ_αβ ∂_i∂_p∂_p R_a) dl
    (Cai, Arsenlis, Weinberger & Bulatov 2006, de Wit's formula with R -> R_a; derivatives with
    respect to the field point), every index summed, then contracted with b.
    """
    eps = _levi_civita()
    b = np.array([*_burgers(theta0), 0.0])
    p = np.array([px, py, 0.0])
    a_ = np.array([xa, ya, 0.0])
    t = np.array([xb - xa, yb - ya, 0.0])
    h = np.linalg.norm(t)
    t /= h
    delta = np.eye(3)

    def stress(l):
        r = p - (a_ + l * t)
        ra = np.sqrt(r @ r + a * a)
        d3 = (-(np.einsum("ij,k->ijk", delta, r) + np.einsum("ik,j->ijk", delta, r)
                + np.einsum("jk,i->ijk", delta, r)) / ra ** 3
              + 3 * np.einsum("i,j,k->ijk", r, r, r) / ra ** 5)
        lap = np.einsum("ipp->i", d3)
        bm_eps = np.einsum("m,imk->ik", b, eps)          # b_m ε_imk
        first = np.einsum("i,ia,b->ab", lap, bm_eps, t)
        first = (first + first.T) / (8 * np.pi)
        bt = bm_eps @ t                                   # b_m ε_imk t_k, index i
        second = (np.einsum("i,iab->ab", bt, d3) - delta * (bt @ lap)) / (4 * np.pi * (1 - nu))
        return (first + second)[2] @ b

    val, _ = quad(stress, 0.0, h, epsabs=1e-14, epsrel=1e-12, limit=400)
    return val


def straight_remainder_np(px, py, x_lo, y_lo, x_hi, y_hi, ybar, theta0, nu, a):
    """The line outside the exact window replaced by its straight average (with connectors):
    -FAR -> x_lo and x_hi -> +FAR along x at ȳ, evaluated with the antiderivative at s = ±FAR."""
    bx, by = _burgers(theta0)
    d = py - ybar
    left = (_antiderivative(FAR, d, bx, by, nu, a)
            - _antiderivative(px - x_lo, d, bx, by, nu, a))
    right = (_antiderivative(px - x_hi, d, bx, by, nu, a)
             - _antiderivative(-FAR, d, bx, by, nu, a))
    connectors = (segment_stress_np(px, py, x_lo, ybar, x_lo, y_lo, theta0, nu, a)
                  + segment_stress_np(px, py, x_hi, y_hi, x_hi, ybar, theta0, nu, a))
    return float(left + right + connectors)


def arc_correction_np(prev, node, nxt, theta0, nu, a):
    """Stress of the circular arc through three nodes minus that of its two chords, at the node."""
    bx, by = _burgers(theta0)
    prev, node, nxt = map(np.asarray, (prev, node, nxt))
    sm, sp = node - prev, nxt - node
    hm, hp = np.linalg.norm(sm), np.linalg.norm(sp)
    k0 = -nu / (4 * np.pi * (1 - nu))

    def phi(hh):
        r = np.hypot(hh, a)
        return k0 / r + a * a / (8 * np.pi * r ** 3)

    def cw(v):
        v = v / np.linalg.norm(v)
        return (v[0] * bx + v[1] * by), (v[0] * by - v[1] * bx)

    cm, wm = cw(sm)
    cp, wp = cw(sp)
    chords = cp * wp * (phi(0.0) - phi(hp)) + cm * wm * (phi(hm) - phi(0.0))
    kappa = 2 * (sm[0] * sp[1] - sm[1] * sp[0]) / (hm * hp * np.linalg.norm(sm + sp))
    c0, w0 = cw(hp / hm * sm + hm / hp * sp)
    jj = sum(np.arcsinh(hh / a) - hh / np.hypot(hh, a) for hh in (hm, hp))
    lam = sum((hh / np.hypot(hh, a)) ** 3 for hh in (hm, hp))
    arc = (c0 * w0 * (phi(hm) - phi(hp))
           - kappa * ((0.5 * c0 ** 2 - w0 ** 2) * (2 * jj + lam) / (8 * np.pi)
                      + (0.5 * w0 ** 2 - c0 ** 2) * jj / (4 * np.pi * (1 - nu))))
    return arc - chords


def mean_height_np(x, y, Lx):
    xe, ye = np.append(x, x[0] + Lx), np.append(y, y[0])
    return float(np.sum(0.5 * (ye[1:] + ye[:-1]) * np.diff(xe)) / Lx)


def self_stress_np(x, y, n, Lx, theta0, nu, a, n_images, cutoff):
    """Twin of dlsim.elastic.self_stress: explicit images, window, remainder, arc correction."""
    x, y = np.asarray(x[:n], float), np.asarray(y[:n], float)
    periods = n_images + 2
    ks = np.repeat(np.arange(-periods, periods + 1), n)
    gx = np.tile(x, 2 * periods + 1) + ks * Lx        # every node of 2*periods+1 copies
    gy = np.tile(y, 2 * periods + 1)
    gx = np.append(gx, x[0] + (periods + 1) * Lx)
    gy = np.append(gy, y[0])
    base = periods * n                                # global index of node 0 of the cell
    ybar = mean_height_np(x, y, Lx)
    xmid = 0.5 * (gx[1:] + gx[:-1])
    out = np.empty(n)
    for i in range(n):
        g = base + i
        lo = g - (n_images * n + n // 2)
        hi = lo + (2 * n_images + 1) * n
        if cutoff > 0:
            inside = np.abs(xmid - x[i]) <= cutoff
            top = g
            while top < hi and inside[top]:
                top += 1
            bot = g - 1
            while bot >= lo and inside[bot]:
                bot -= 1
            lo, hi = bot + 1, top
        seg = slice(lo, hi)
        total = np.sum(segment_stress_np(x[i], y[i], gx[seg], gy[seg], gx[lo + 1:hi + 1],
                                         gy[lo + 1:hi + 1], theta0, nu, a))
        total += straight_remainder_np(x[i], y[i], gx[lo], gy[lo], gx[hi], gy[hi], ybar, theta0,
                                       nu, a)
        total += arc_correction_np((gx[g - 1], gy[g - 1]), (gx[g], gy[g]),
                                   (gx[g + 1], gy[g + 1]), theta0, nu, a)
        out[i] = total
    return out


def loop_self_stress_np(x, y, n, theta0, nu, a):
    """Twin of dlsim.elastic.loop_self_stress: every segment of the closed polygon plus the arc."""
    x, y = np.asarray(x[:n], float), np.asarray(y[:n], float)
    xn, yn = np.roll(x, -1), np.roll(y, -1)
    out = np.empty(n)
    for i in range(n):
        out[i] = np.sum(segment_stress_np(x[i], y[i], x, y, xn, yn, theta0, nu, a))
        out[i] += arc_correction_np((x[i - 1], y[i - 1]), (x[i], y[i]),
                                    (xn[i], yn[i]), theta0, nu, a)
    return out


def loop_stress_np(x, y, n, loop_x, loop_y, loop_offsets, n_loops, Lx, theta0, nu, a, n_images):
    """Twin of dlsim.elastic.loop_stress: every segment of every loop and image, at every node."""
    out = np.zeros(n)
    for k in range(n_loops):
        lx = np.asarray(loop_x[loop_offsets[k]:loop_offsets[k + 1]], float)
        ly = np.asarray(loop_y[loop_offsets[k]:loop_offsets[k + 1]], float)
        for m in range(-n_images, n_images + 1):
            xa, xb = lx + m * Lx, np.roll(lx, -1) + m * Lx
            for i in range(n):
                out[i] += np.sum(segment_stress_np(x[i], y[i], xa, ly, xb, np.roll(ly, -1),
                                                   theta0, nu, a))
    return out


def dwk_energy_np(x, y, n, Lx, theta0, nu, r_core, r_out):
    """Σ E(θ_j)|s_j| with E(θ) = K (1 - ν cos²θ)/(1 - ν) (de Wit & Koehler 1959), θ from angles."""
    xe, ye = np.append(x[:n], x[0] + Lx), np.append(y[:n], y[0])
    sx, sy = np.diff(xe), np.diff(ye)
    theta = np.arctan2(sy, sx) - theta0
    K = np.log(r_out / r_core) / (4 * np.pi)
    return float(np.sum(K * (1 - nu * np.cos(theta) ** 2) / (1 - nu) * np.hypot(sx, sy)))


def dwk_forces_np(x, y, n, Lx, theta0, nu, r_core, r_out):
    """-∂E/∂r_i by differentiating E(θ)|s| in the angle form: ∂/∂s of |s| E(φ - θ0), φ = atan2."""
    xe, ye = np.append(x[:n], x[0] + Lx), np.append(y[:n], y[0])
    sx, sy = np.diff(xe), np.diff(ye)
    h = np.hypot(sx, sy)
    theta = np.arctan2(sy, sx) - theta0
    K = np.log(r_out / r_core) / (4 * np.pi)
    e = K * (1 - nu * np.cos(theta) ** 2) / (1 - nu)
    de = K * nu * np.sin(2 * theta) / (1 - nu)
    # ∂|s|/∂s = t, ∂φ/∂s = n/|s| with n = ẑ × t
    tx, ty = sx / h, sy / h
    gx = e * tx + de * (-ty)
    gy = e * ty + de * tx
    return gx - np.roll(gx, 1), gy - np.roll(gy, 1)
