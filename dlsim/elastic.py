"""Elastic interactions of the line in its glide plane: non-singular self-stress, loops, de Wit–Koehler.

Reduced units throughout: length in b, stress in G, nodal force in G b² (G = b = 1).  The line lies
in the glide plane z = 0, runs along +x on average and is periodic in x (node ``n`` is node 0
shifted by ``(Lx, 0)``); the Burgers vector lies in the plane, ``b = (cos θ0, sin θ0, 0)``.  Every
stress returned here is the glide-plane resolved shear ``τ = σ_zj b_j`` with the sign of the applied
stress: a positive value pushes a line of tangent ``ξ`` along ``ẑ × ξ`` (Peach–Koehler
``F = (σ·b) × ξ``, whose glide part is ``σ_zj b_j ẑ × ξ``), so the stepper simply adds it to τ.

Segment stress (derivation summary)
-----------------------------------
Start: the non-singular stress of a dislocation loop of Cai, Arsenlis, Weinberger & Bulatov,
J. Mech. Phys. Solids 54 (2006) 561–587: de Wit's line integral for the stress of a loop with the
distance ``R = |x - x'|`` replaced everywhere by ``R_a = sqrt(R² + a²)``,

    σ_αβ = (1/8π) ∮ ∂_i∂_p∂_p R_a [b_m ε_imα dx'_β + b_m ε_imβ dx'_α]
         + 1/(4π(1-ν)) ∮ b_m ε_imk (∂_i∂_α∂_β R_a - δ_αβ ∂_i∂_p∂_p R_a) dx'_k ,

derivatives with respect to the field point x.  (The overall sign is the one that, with
``F = (σ·b) × ξ``, gives the fields of Hirth & Lothe, *Theory of Dislocations*, 1982, ch. 3: like
dislocations repel; the tests check it.)  With ``∂_i∂_p∂_p R_a = -R_i (2/R_a³ + 3a²/R_a⁵)`` and, for
a field point in the plane (R_z = 0) and b_z = 0, ``b_β ∂_i∂_z∂_β R_a = -δ_iz (R·b)/R_a³``, the
resolved shear of a line element of tangent t reduces to

    dτ = -dl [ (t·b) (R×b)_z (2/R_a³ + 3a²/R_a⁵)/(8π) + (b×t)_z (R·b)/(4π(1-ν) R_a³) ].

On a straight segment write ``R = s t + d n`` (``n = ẑ × t``, ``s = R·t``, ``d = (t×R)_z`` fixed),
``c = t·b = cos θ``, ``w = (t×b)_z = sin θ``.  Elementary integrals over s give, with
``ρ² = d² + a²``, ``u = 1/R_a``, ``v = s/(ρ² R_a)`` and ``q = a² u²``, the antiderivative

    Fseg(s) = c w [k0 u + a² u³/(8π)] + d v [c² (2 + 2a²/ρ² + q)/(8π) + w²/(4π(1-ν))],
    k0 = -ν/(4π(1-ν)),

and the segment from node A to node B contributes ``τ = Fseg(s_A) - Fseg(s_B)``.  For a → 0 and an
infinite line this is ``(c² + w²/(1-ν))/(2π d)``.  The pair loop evaluates the difference
regrouped (using ``v_A - v_B = P/ρ²`` and ``u_A² v_A - u_B² v_B = Q/ρ²``) as

    τ = c w [k0 (u_A - u_B) + a² (u_A³ - u_B³)/(8π)] + (d/ρ²) [E1 P + E3 (2P/ρ² + Q)],
    P = s_A u_A - s_B u_B,  Q = s_A u_A³ - s_B u_B³,

with the per-segment weights ``c w``, ``E1 = 2c²/(8π) + w²/(4π(1-ν))`` and ``E3 = a² c²/(8π)``
computed once per call.  Per pair that is one square root (at the node, shared by the two segments
meeting there) and one division (it yields 1/R_a at both ends and 1/ρ²): no transcendental call in
the pair loop.

Local part (the node's own two arms)
------------------------------------
Collocated at a node, the two straight arms of a polygonal line give no curvature (line-tension)
stress at all: the node lies on both arms (d = 0), which leaves only a term in the change of ``c w``
across the node, of order ``Δ(c w) (1-3ν)/(8π(1-ν) a)`` — a polygon artefact that grows with h/a and
misses the ``ln(h/a)`` part of the line tension.  We therefore replace the two chords, as seen from
their common node, by the circular arc through the node and its two neighbours (curvature κ,
tangent t0 from the three nodes), integrated to first order in κ:

    τ_arc = c0 w0 [Φ(h-) - Φ(h+)]
          - κ [(c0²/2 - w0²)(2J + Λ)/(8π) + (w0²/2 - c0²) J/(4π(1-ν))],
    Φ(h) = k0/R_h + a²/(8π R_h³),  R_h = sqrt(h² + a²),
    J = Σ± [asinh(h±/a) - h±/R_h±],  Λ = Σ± h±³/R_h±³,

(h- and h+ the arm lengths).  For h ≫ a the curvature term is
``κ (1 - 2ν + 3ν c0²)/(4π(1-ν)) ln(2h/a)``: the local stiffness E + E'' of de Wit & Koehler
(Phys. Rev. 116, 1959), so the total does not depend on the node spacing; for h ≪ a the
correction vanishes and the polygon converges on its own.  A straight line gets no correction.
This is our own first-order treatment of the local part; it assumes the line is smooth on the scale
of its node spacing (κ h ≪ 1).  At a genuine corner (a node pinned at an obstacle, where the arms
meet at a finite angle) it treats the corner as the arc through the three nodes, an approximation.
The collocated stress is not the exact gradient of an energy of the polygon (the weak-form nodal
force of the non-singular theory would be); the difference is of order (h/D)² for segments at
distance D, and for the arms themselves it is what the arc treatment stands in for.

Periodic images and the remainder
---------------------------------
The sum runs over a window of ``2 n_images + 1`` periods of the line centred on the target node
(the images ``|k| <= n_images``, truncated symmetrically).  Every segment outside the window is
replaced by its projection on the straight average line ``y = ȳ`` (ȳ the signed-area mean height);
the projections telescope into two semi-infinite straight dislocations along x, from -∞ to the
window's first node and from its last node to +∞, added in closed form and joined to those nodes
by short connectors along y so that the replacement path is continuous.  What is left out is the
field of the line's deviation from its average over whole periods, which has no net area
(∫ (y - ȳ) dx = 0), so it falls as the fourth power of the distance and the remainder decreases
about as ``n_images⁻³``.  A straight line gets exactly zero.

With ``cutoff > 0`` the window is further cut to the contiguous run of segments around the target
whose midpoints lie within ``cutoff`` of it in x, and the segments beyond are replaced by the same
straight projection: the far-field correction is the field of the straight average line beyond the
cutoff.  What it leaves out is the far field of the line's deviation beyond the cutoff, which falls
about as cutoff⁻² and matters for wavelengths longer than the cutoff (the tests measure it).
"""
from __future__ import annotations

import numpy as np
from numba import njit, prange

from dlsim.geometry import neighbours
from dlsim.jit import JIT, JIT_FMA, JIT_PARALLEL, JIT_SUM

INV_4PI = 1.0 / (4.0 * np.pi)
INV_8PI = 1.0 / (8.0 * np.pi)
#: Target nodes are dealt to at most this many interleaved blocks (prange runs over blocks):
#: enough to balance any common thread count, few enough that each block's scratch allocation is
#: free.  A block gets at least BLOCK_TARGETS targets (on short lines the cost of a block, about a
#: microsecond, is that of a few targets).  The result does not depend on the blocks.
TARGET_BLOCKS = 64
BLOCK_TARGETS = 16
#: Longest run of segments summed in one pass (its scratch: at most 3 × 32 kB).  Windows are
#: cut into runs of equal length (at most RUN and at most one period), so that consecutive runs
#: pair up in the software pipeline of :func:`_run_sums`; each run costs about 0.1 µs more than
#: its pairs (measured: RUN = 512 ran 10 % slower than 4096 at N = 4000).
RUN = 4096

# Rows of a segment table (structure of arrays).  Column j holds node j and the segment from
# node j to node j + 1.  A node lies at x = S_X + S_SH: the pair loops subtract the period
# shift S_SH (a multiple of Lx) from the field point first, so that its rounding moves the point
# against a whole period rigidly instead of each node by its own error.  Weights of the pair term
# (module notes), with c = t·b, w = (t×b)_z:
S_X, S_Y, S_SH = 0, 1, 2     # node position and period shift (b)
S_TX, S_TY, S_L = 3, 4, 5    # unit tangent and length (b) of the segment
S_CW, S_E1, S_E3 = 6, 7, 8   # c w, 2c²/(8π) + w²/(4π(1-ν)), a² c²/(8π)
SEG_ROWS = 9


# ------------------------------------------------------------------------------------------------
# geometry and per-segment constants
# ------------------------------------------------------------------------------------------------
@njit(**JIT, inline="always")
def _weights(c, w, nu, a2):
    """The character weights of the pair term (rows S_CW, S_E1, S_E3) of a segment."""
    cb = c * c * INV_8PI
    return c * w, 2.0 * cb + w * w * INV_4PI / (1.0 - nu), a2 * cb


@njit(**JIT, inline="always")
def _call_constants(nu, a2):
    """(a², k0, a²/(8π)): the constants of the pair term shared by every segment."""
    return a2, -nu * INV_4PI / (1.0 - nu), a2 * INV_8PI


@njit(**JIT)
def _fill_segments(seg, j0, j1, bx, by, nu, a2):
    """Tangent, length and weights of segments j0..j1-1 from the nodes in rows S_X, S_Y (the
    shift row S_SH is 0 on the columns j0..j1)."""
    for j in range(j0, j1):
        sx = seg[S_X, j + 1] - seg[S_X, j]
        sy = seg[S_Y, j + 1] - seg[S_Y, j]
        h = np.sqrt(sx * sx + sy * sy)
        ux = sx / h
        uy = sy / h
        cw, e1, e3 = _weights(ux * bx + uy * by, ux * by - uy * bx, nu, a2)
        seg[S_TX, j] = ux
        seg[S_TY, j] = uy
        seg[S_L, j] = h
        seg[S_CW, j] = cw
        seg[S_E1, j] = e1
        seg[S_E3, j] = e3


@njit(**JIT_FMA, inline="always")
def _pair_term(dx, dy, tx, ty, sl, ra, rb, cw, e1, e3, kc):
    """Fseg(s_A) - Fseg(s_B) of one segment; (dx, dy) = field point - node A, ra, rb = R_a at
    A, B, kc = :func:`_call_constants`.

    The regrouped difference of the module notes.  One division gives all three reciprocals
    1/R_a(A), 1/R_a(B) and 1/ρ² (the divider is the bottleneck of the pair loop).
    """
    a2, k0, ka = kc
    d = tx * dy - ty * dx
    sa = tx * dx + ty * dy
    sb = sa - sl
    rho2 = d * d + a2
    rab = ra * rb
    inv = 1.0 / (rho2 * rab)
    g = inv * rho2
    ua = g * rb
    ub = g * ra
    ir = inv * rab
    ua3 = ua * ua * ua
    ub3 = ub * ub * ub
    p = sa * ua - sb * ub
    q = sa * ua3 - sb * ub3
    return (cw * (k0 * (ua - ub) + ka * (ua3 - ub3))
            + d * ir * (e1 * p + e3 * (2.0 * p * ir + q)))


@njit(**JIT)
def segment_stress(px, py, xa, ya, xb, yb, theta0, nu, a_core):
    """Resolved shear σ_zj b_j (G) at (px, py) from the segment A -> B, all in the plane z = 0.

    Non-singular field of Cai, Arsenlis, Weinberger & Bulatov (J. Mech. Phys. Solids 54, 2006,
    561), in-plane closed form of the module docstring.  Lengths in b; a zero-length segment
    contributes nothing.

    Parameters
    ----------
    px, py : float
        Field point (b).
    xa, ya, xb, yb : float
        Segment start and end (b); the line sense runs from A to B.
    theta0, nu, a_core : float
        Burgers-vector angle from +x (rad), Poisson ratio, core radius (b).
    """
    return _segment_stress(px, py, xa, ya, xb, yb, np.cos(theta0), np.sin(theta0), nu,
                           a_core * a_core)


@njit(**JIT_FMA)
def _segment_stress(px, py, xa, ya, xb, yb, bx, by, nu, a2):
    """:func:`segment_stress` with b = (bx, by) and a² given."""
    sx = xb - xa
    sy = yb - ya
    h = np.sqrt(sx * sx + sy * sy)
    if h == 0.0:
        return 0.0
    tx = sx / h
    ty = sy / h
    cw, e1, e3 = _weights(tx * bx + ty * by, tx * by - ty * bx, nu, a2)
    dax = px - xa
    day = py - ya
    dbx = px - xb
    dby = py - yb
    ra = np.sqrt(dax * dax + day * day + a2)
    rb = np.sqrt(dbx * dbx + dby * dby + a2)
    return _pair_term(dax, day, tx, ty, h, ra, rb, cw, e1, e3, _call_constants(nu, a2))


# ------------------------------------------------------------------------------------------------
# pair sums over runs of segments
# ------------------------------------------------------------------------------------------------
@njit(**JIT_FMA, inline="always")
def _distance(px, py, seg, c, a2):
    """R_a from (px, py) to the node in column c (x = S_X + S_SH: the shift is taken off the
    point)."""
    dx = (px - seg[S_SH, c]) - seg[S_X, c]
    dy = py - seg[S_Y, c]
    return np.sqrt(dx * dx + dy * dy + a2)


@njit(**JIT_FMA)
def _distances(px, py, seg, c0, m, a2, rs):
    """rs[j] = R_a from (px, py) to the node in column c0 + j of the table, j < m.

    Unsigned indices: numba then skips its wrap-around of negative indices, which would defeat
    LLVM's vectoriser, and the table needs no row views (whose reference counting costs about as
    much as a short loop).
    """
    c = np.uint64(c0)
    for j in range(np.uint64(m)):
        rs[j] = _distance(px, py, seg, c + j, a2)


@njit(**JIT_FMA, inline="always")
def _term(p, seg, c, rs, k, kc):
    """Pair term at point p of the segment in column c (rs[k], rs[k + 1]: R_a at its nodes)."""
    return _pair_term((p[0] - seg[S_SH, c]) - seg[S_X, c], p[1] - seg[S_Y, c], seg[S_TX, c],
                      seg[S_TY, c], seg[S_L, c], rs[k], rs[k + 1], seg[S_CW, c], seg[S_E1, c],
                      seg[S_E3, c], kc)


@njit(**JIT_FMA)
def _terms(p, seg, c0, m, kc, rs, ts):
    """ts[j] = pair term at point p of the segment in column c0 + j, j < m (R_a of its nodes in
    rs[j], rs[j + 1])."""
    c = np.uint64(c0)
    for j in range(np.uint64(m)):
        ts[j] = _term(p, seg, c + j, rs, j, kc)


@njit(**JIT_FMA)
def _terms_and_distances(p, seg, c0, q, d0, m, kc, rs, ts, rq):
    """:func:`_terms` at point p from column c0 and :func:`_distances` of point q to the nodes
    from column d0 into rq, m of each, in one loop (the software pipeline of _run_sums)."""
    c = np.uint64(c0)
    d = np.uint64(d0)
    for j in range(np.uint64(m)):
        rq[j] = _distance(q[0], q[1], seg, d + j, kc[0])
        ts[j] = _term(p, seg, c + j, rs, j, kc)


@njit(**JIT_SUM)
def _lane_sum(ts, m):
    """Σ ts[:m].  JIT_SUM lets LLVM split the sum into vector partial sums: the order depends on
    m only, so the result is the same on every call and for any thread count."""
    s = 0.0
    for j in range(m):
        s += ts[j]
    return s


@njit(**JIT)
def _blocks(n):
    """How many interleaved blocks the n targets of a parallel kernel are dealt to."""
    return max(1, min(TARGET_BLOCKS, n // BLOCK_TARGETS))


@njit(**JIT)
def _new_runs(count):
    """Room for ``count`` runs: target index, field point x and y, first column, segments."""
    return (np.empty(count, dtype=np.int64), np.empty(count), np.empty(count),
            np.empty(count, dtype=np.int64), np.empty(count, dtype=np.int64))


@njit(**JIT)
def _run_sums(seg, runs, count, kc, out):
    """out[t] += Σ pair terms of every run (target t seen from (px, py), segments c0 .. c0+m-1),
    runs taken in order, each summed by itself.

    Software-pipelined: the pass over one run's segments also computes the node distances of the
    next run, so that the square roots (for that one) and the divisions of the pair terms (for
    this one) share a loop and the divider works while the multiply-adds do.
    Every run's sum is what it would be alone, so the result depends only on how targets split
    into runs, not on the blocks or threads.
    """
    tgt, px, py, c0, m = runs
    width = 1
    for r in range(count):
        width = max(width, m[r] + 1)
    rs = np.empty(width)
    rq = np.empty(width)
    ts = np.empty(width)
    if count > 0:
        _distances(px[0], py[0], seg, c0[0], m[0] + 1, kc[0], rs)
    for r in range(count):
        p = (px[r], py[r])
        mr = m[r]
        if r + 1 < count:
            mq = m[r + 1] + 1                   # nodes of the next run
            both = min(mr, mq)
            _terms_and_distances(p, seg, c0[r], (px[r + 1], py[r + 1]), c0[r + 1], both, kc,
                                 rs, ts, rq)
            _terms(p, seg, c0[r] + both, mr - both, kc, rs[both:], ts[both:])
            _distances(px[r + 1], py[r + 1], seg, c0[r + 1] + both, mq - both, kc[0], rq[both:])
        else:
            _terms(p, seg, c0[r], mr, kc, rs, ts)
        out[tgt[r]] += _lane_sum(ts, mr)
        rs, rq = rq, rs


@njit(**JIT, inline="always")
def _add_run(runs, r, i, px, py, c0, m):
    """Put the run of target i seen from (px, py), segments c0 .. c0 + m - 1, in slot r."""
    tgt, rx, ry, rc, rm = runs
    tgt[r], rx[r], ry[r], rc[r], rm[r] = i, px, py, c0, m
    return r + 1


@njit(**JIT, inline="always")
def _split(m, longest):
    """Cut m segments into the fewest runs of at most ``longest``, of near-equal length: (runs,
    base length, how many are one longer)."""
    pieces = max((m + longest - 1) // longest, 1)
    base = m // pieces
    return pieces, base, m - base * pieces


@njit(**JIT)
def _straight_end(px, py, xa, ybar, toward_plus, bx, by, nu, a2):
    """Resolved shear at (px, py) from a semi-infinite straight dislocation along +x at y = ybar.

    ``toward_plus``: it runs from x = xa to +∞; otherwise from -∞ to x = xa.  Same antiderivative
    Fseg with t = x̂ (c = b_x, w = b_y); at infinity u = 0 and v = ±1/ρ².
    """
    dx = px - xa
    d = py - ybar
    ir = 1.0 / (d * d + a2)
    u = 1.0 / np.sqrt(dx * dx + d * d + a2)
    q = a2 * u * u
    v = dx * u * ir
    cw = bx * by
    k0 = -nu * INV_4PI / (1.0 - nu)
    cb = bx * bx * INV_8PI
    cc = by * by * INV_4PI / (1.0 - nu)
    f_end = cw * (k0 * u + q * u * INV_8PI) + d * v * (cb * (2.0 + 2.0 * a2 * ir + q) + cc)
    f_inf = d * ir * (cb * (2.0 + 2.0 * a2 * ir) + cc)
    if toward_plus:
        return f_end + f_inf    # Fseg(s_A) - Fseg(-∞)
    return f_inf - f_end        # Fseg(+∞) - Fseg(s_B)


@njit(**JIT)
def _remainder(px, py, x_lo, y_lo, x_hi, y_hi, ybar, bx, by, nu, a2):
    """The line outside the window, as its straight average: -∞ -> (x_lo, ȳ) -> (x_lo, y_lo) and
    (x_hi, y_hi) -> (x_hi, ȳ) -> +∞.

    The two short connectors keep the replacement path continuous with the window, so that what
    is left out is a chain of closed circuits with no net area (field ~ distance⁻⁴); without them
    the error would fall only as n_images⁻².
    """
    return (_straight_end(px, py, x_lo, ybar, False, bx, by, nu, a2)
            + _segment_stress(px, py, x_lo, ybar, x_lo, y_lo, bx, by, nu, a2)
            + _segment_stress(px, py, x_hi, y_hi, x_hi, ybar, bx, by, nu, a2)
            + _straight_end(px, py, x_hi, ybar, True, bx, by, nu, a2))


@njit(**JIT)
def _phi(h, a2, k0):
    """Φ(h) = k0/R_h + a²/(8π R_h³): the d = 0 antiderivative per unit c w (see module notes)."""
    r = np.sqrt(h * h + a2)
    return k0 / r + a2 * INV_8PI / (r * r * r)


@njit(**JIT)
def _arc_correction(xm, ym, x0, y0, xp, yp, bx, by, nu, a2):
    """Arc-minus-chords stress at node (x0, y0) with neighbours (xm, ym), (xp, yp).

    The two chords' contribution at their common node is replaced by that of the circular arc
    through the three nodes, to first order in its curvature (module notes, "Local part").
    """
    arc, chords = _arc_and_chords(xm, ym, x0, y0, xp, yp, bx, by, nu, a2)
    return arc - chords


@njit(**JIT)
def _arc_and_chords(xm, ym, x0, y0, xp, yp, bx, by, nu, a2):
    """Stress at node (x0, y0) of its two arms: as the arc through the three nodes, as chords."""
    amx = x0 - xm
    amy = y0 - ym
    apx = xp - x0
    apy = yp - y0
    hm = np.sqrt(amx * amx + amy * amy)
    hp = np.sqrt(apx * apx + apy * apy)
    k0 = -nu * INV_4PI / (1.0 - nu)
    a = np.sqrt(a2)
    cm = (amx * bx + amy * by) / hm
    wm = (amx * by - amy * bx) / hm
    cp = (apx * bx + apy * by) / hp
    wp = (apx * by - apy * bx) / hp
    phi_a = _phi(0.0, a2, k0)
    phi_m = _phi(hm, a2, k0)
    phi_p = _phi(hp, a2, k0)
    chords = cp * wp * (phi_a - phi_p) + cm * wm * (phi_m - phi_a)
    # circumcircle: signed curvature and the tangent at the middle node (first order in κ h)
    sx = amx + apx
    sy = amy + apy
    kappa = 2.0 * (amx * apy - amy * apx) / (hm * hp * np.sqrt(sx * sx + sy * sy))
    t0x = (hp / hm) * amx + (hm / hp) * apx
    t0y = (hp / hm) * amy + (hm / hp) * apy
    t0 = np.sqrt(t0x * t0x + t0y * t0y)
    c0 = (t0x * bx + t0y * by) / t0
    w0 = (t0x * by - t0y * bx) / t0
    rm = np.sqrt(hm * hm + a2)
    rp = np.sqrt(hp * hp + a2)
    jj = np.arcsinh(hm / a) - hm / rm + np.arcsinh(hp / a) - hp / rp
    lam = (hm / rm) ** 3 + (hp / rp) ** 3
    arc = (c0 * w0 * (phi_m - phi_p)
           - kappa * ((0.5 * c0 * c0 - w0 * w0) * (2.0 * jj + lam) * INV_8PI
                      + (0.5 * w0 * w0 - c0 * c0) * jj * INV_4PI / (1.0 - nu)))
    return arc, chords


@njit(**JIT)
def local_stress(x, y, n, Lx, theta0, nu, a_core, out):
    """The part of :func:`self_stress` that comes from each node's own two arms (G).

    Each node's two arms, taken as the circular arc through it and its neighbours (module notes,
    "Local part"): the stiff, short-range part of the self-stress, which carries the local line
    tension E + E'' ln(2h/a).  O(n), one pass.  The time stepper evaluates it at every step and
    the rest of the self-stress (``self_stress - local_stress``, smooth on the scale of the node
    spacing) only every few steps.

    Parameters are those of :func:`self_stress` (no images, no cutoff: the arms are local).
    """
    bx = np.cos(theta0)
    by = np.sin(theta0)
    a2 = a_core * a_core
    for i in range(n):
        xm, ym, xp, yp = neighbours(x, y, n, i, Lx)
        out[i] = _arc_and_chords(xm, ym, x[i], y[i], xp, yp, bx, by, nu, a2)[0]


@njit(**JIT)
def mean_height(x, y, n, Lx):
    """Signed-area mean height ȳ = (1/Lx) ∫ y dx of the periodic line (b)."""
    area = 0.0
    for j in range(n):
        if j == n - 1:
            xn = x[0] + Lx
            yn = y[0]
        else:
            xn = x[j + 1]
            yn = y[j + 1]
        area += 0.5 * (y[j] + yn) * (xn - x[j])
    return area / Lx


# ------------------------------------------------------------------------------------------------
# self-stress of the periodic line
# ------------------------------------------------------------------------------------------------
@njit(**JIT)
def _closed_table(x, y, n, shift, bx, by, nu, a2):
    """Segment table of a chain of n nodes closed by node n = node 0 shifted by (shift, 0):
    shift = Lx for one period of the line, 0 for a closed loop.  No period shifts (S_SH = 0)."""
    seg = np.empty((SEG_ROWS, n + 1))
    for j in range(n):
        seg[S_X, j] = x[j]
        seg[S_Y, j] = y[j]
    seg[S_X, n] = x[0] + shift
    seg[S_Y, n] = y[0]
    seg[S_SH, :] = 0.0
    _fill_segments(seg, 0, n, bx, by, nu, a2)
    return seg


@njit(**JIT)
def _line_table(x, y, n, Lx, bx, by, nu, a2):
    """Three periods of the line, k = -1, 0, 1: column c = node and segment c mod n of period
    c // n - 1 (S_SH = k Lx), so period 0 starts at column n.  Any run of at most n segments
    that starts in period -1 or 0 is contiguous."""
    base = _closed_table(x, y, n, Lx, bx, by, nu, a2)
    seg = np.empty((SEG_ROWS, 3 * n))
    for k in range(3):
        seg[:, k * n:(k + 1) * n] = base[:, :n]
        seg[S_SH, k * n:(k + 1) * n] = (k - 1) * Lx
    return seg


@njit(**JIT, inline="always")
def _global_node(seg, g, n, Lx):
    """Position of global node g of the periodic line (node g mod n of period g // n)."""
    k = g // n
    j = n + g - k * n
    return seg[S_X, j] + k * Lx, seg[S_Y, j]


@njit(**JIT, inline="always")
def _midpoint_x(seg, g, n, Lx):
    """x of the midpoint of global segment g (segment g mod n of period g // n)."""
    k = g // n
    j = n + g - k * n
    return seg[S_X, j] + 0.5 * seg[S_TX, j] * seg[S_L, j] + k * Lx


@njit(**JIT, inline="always")
def _run_shift(g, n):
    """Periods s by which a run that starts at global segment g is moved to lie in the table:
    0 for runs starting in periods -1 and 0, which therefore see the target exactly where it
    is (its near field carries no rounding of the shift), k - 1 or k + 1 beyond."""
    k = g // n
    if k > 0:
        return k
    if k < -1:
        return k + 1
    return 0


@njit(**JIT)
def _window(i, n, seg, Lx, n_images, cutoff):
    """Global segment range [g_lo, g_hi) summed exactly for target node i (module notes)."""
    half = n_images * n + n // 2
    g_lo = i - half
    g_hi = g_lo + (2 * n_images + 1) * n
    if cutoff <= 0.0:
        return g_lo, g_hi
    xi = seg[S_X, n + i]
    g = i
    while g < g_hi and abs(_midpoint_x(seg, g, n, Lx) - xi) <= cutoff:
        g += 1
    hi = g
    g = i - 1
    while g >= g_lo and abs(_midpoint_x(seg, g, n, Lx) - xi) <= cutoff:
        g -= 1
    return g + 1, hi


@njit(**JIT)
def _prepare_self_stress(x, y, n, Lx, theta0, nu, a_core, n_images, cutoff):
    """Per-call constants of :func:`self_stress`: the line's table, every target's window and
    the constants of the pair, remainder and arc terms (the ``line`` tuple)."""
    bx = np.cos(theta0)
    by = np.sin(theta0)
    a2 = a_core * a_core
    seg = _line_table(x, y, n, Lx, bx, by, nu, a2)
    lo = np.empty(n, dtype=np.int64)
    hi = np.empty(n, dtype=np.int64)
    for i in range(n):
        lo[i], hi[i] = _window(i, n, seg, Lx, n_images, cutoff)
    return (seg, lo, hi, n, Lx, bx, by, nu, a2, mean_height(x, y, n, Lx))


@njit(**JIT)
def _line_runs(blk, n_blocks, line):
    """Runs of the windows of targets blk, blk + n_blocks, ...: each window cut into runs of
    near-equal length, at most RUN and at most n segments, each moved into the three-period table
    by :func:`_run_shift` (its field point is the target shifted by -s Lx)."""
    seg, lo, hi, n, Lx = line[:5]
    longest = min(RUN, n)
    bound = 0
    for i in range(blk, n, n_blocks):
        bound += _split(hi[i] - lo[i], longest)[0]
    runs = _new_runs(bound)
    r = 0
    for i in range(blk, n, n_blocks):
        pieces, base, extra = _split(hi[i] - lo[i], longest)
        g = lo[i]
        for q in range(pieces):
            s = _run_shift(g, n)
            m = base + (1 if q < extra else 0)
            r = _add_run(runs, r, i, seg[S_X, n + i] - s * Lx, seg[S_Y, n + i], g - s * n + n, m)
            g += m
    return runs, r


@njit(**JIT)
def _line_ends(i, line):
    """The part of τ_self at node i beyond its window's pair sum: the straight remainder of the
    line outside the window and the arc correction of the node's own arms (module notes)."""
    seg, lo, hi, n, Lx, bx, by, nu, a2, ybar = line
    px = seg[S_X, n + i]
    py = seg[S_Y, n + i]
    x_lo, y_lo = _global_node(seg, lo[i], n, Lx)
    x_hi, y_hi = _global_node(seg, hi[i], n, Lx)
    xm, ym = _global_node(seg, i - 1, n, Lx)
    xp, yp = _global_node(seg, i + 1, n, Lx)
    return (_remainder(px, py, x_lo, y_lo, x_hi, y_hi, ybar, bx, by, nu, a2)
            + _arc_correction(xm, ym, px, py, xp, yp, bx, by, nu, a2))


@njit(**JIT)
def _self_stress_block(blk, n_blocks, line, out):
    """τ_self at the targets ``blk, blk + n_blocks, ...`` (out[i] per target only)."""
    n = line[3]
    runs, count = _line_runs(blk, n_blocks, line)
    for i in range(blk, n, n_blocks):
        out[i] = 0.0
    _run_sums(line[0], runs, count, _call_constants(line[7], line[8]), out)
    for i in range(blk, n, n_blocks):
        out[i] += _line_ends(i, line)


def _self_stress_impl(x, y, n, Lx, theta0, nu, a_core, n_images, cutoff, out):
    line = _prepare_self_stress(x, y, n, Lx, theta0, nu, a_core, n_images, cutoff)
    n_blocks = _blocks(n)
    for blk in prange(n_blocks):
        _self_stress_block(np.int64(blk), n_blocks, line, out)


_SELF_STRESS_DOC = """Non-singular elastic self-stress of the periodic line at its nodes.

    Parameters
    ----------
    x, y : (>= n,) float64
        Node positions (b); node n is node 0 shifted by (Lx, 0).
    n : int
        Number of nodes (>= 3).
    Lx : float
        Period of the line along x (b).
    theta0 : float
        Angle of the Burgers vector from +x (rad): 0 screw, π/2 edge.
    nu : float
        Poisson ratio.
    a_core : float
        Core radius a of the non-singular theory (b), > 0.
    n_images : int
        Periods on each side of the target summed segment by segment (>= 0); the rest of the
        line enters as its straight average (module notes).
    cutoff : float
        0 for none; otherwise segments whose midpoints lie farther than this along x (b) are
        replaced by the straight average line.
    out : (>= n,) float64
        Receives τ_self,i (G), resolved shear σ_zj b_j with the sign of the applied stress.
        It contains the line's whole elastic self-interaction, line tension included: do not add
        a line-tension force on top of it.  Segments must have non-zero length.

    Notes
    -----
    Segment field: Cai, Arsenlis, Weinberger & Bulatov, J. Mech. Phys. Solids 54 (2006) 561,
    reduced to the glide plane (module docstring); the two arms of each node are replaced by the
    arc through it and its neighbours.  Each target writes only ``out[i]``: the result does not
    depend on the thread count.
    """

self_stress = njit(**JIT_PARALLEL)(_self_stress_impl)
self_stress.__doc__ = _SELF_STRESS_DOC


def _self_stress_serial_impl(x, y, n, Lx, theta0, nu, a_core, n_images, cutoff, out):
    line = _prepare_self_stress(x, y, n, Lx, theta0, nu, a_core, n_images, cutoff)
    _self_stress_block(np.int64(0), np.int64(1), line, out)    # one block: one pipeline


self_stress_serial = njit(**JIT)(_self_stress_serial_impl)
self_stress_serial.__doc__ = "Serial twin of :func:`self_stress` (same code, one thread).\n\n" \
    + _SELF_STRESS_DOC


# ------------------------------------------------------------------------------------------------
# closed loops
# ------------------------------------------------------------------------------------------------
@njit(**JIT)
def _closed_neighbours(x, y, n, i):
    """Previous and next node of node i on a closed polygon of n nodes."""
    im = n - 1 if i == 0 else i - 1
    ip = 0 if i == n - 1 else i + 1
    return x[im], y[im], x[ip], y[ip]


@njit(**JIT)
def _add_split(runs, r, i, px, py, c0, m):
    """Append segments c0 .. c0 + m - 1 seen from (px, py) for target i, cut into runs of
    near-equal length of at most RUN; return the next free slot."""
    pieces, base, extra = _split(m, RUN)
    for q in range(pieces):
        length = base + (1 if q < extra else 0)
        r = _add_run(runs, r, i, px, py, c0, length)
        c0 += length
    return r


@njit(**JIT)
def _loop_self_stress_block(blk, n_blocks, x, y, n, loop, out):
    """Targets ``blk, blk + n_blocks, ...`` of :func:`loop_self_stress`."""
    seg, bx, by, nu, a2 = loop
    runs = _new_runs(((n - 1 - blk) // n_blocks + 1) * _split(n, RUN)[0])
    r = 0
    for i in range(blk, n, n_blocks):
        r = _add_split(runs, r, i, x[i], y[i], 0, n)
        out[i] = 0.0
    _run_sums(seg, runs, r, _call_constants(nu, a2), out)
    for i in range(blk, n, n_blocks):
        xm, ym, xp, yp = _closed_neighbours(x, y, n, i)
        out[i] += _arc_correction(xm, ym, x[i], y[i], xp, yp, bx, by, nu, a2)


def _loop_self_stress_impl(x, y, n, theta0, nu, a_core, out):
    bx, by, a2 = np.cos(theta0), np.sin(theta0), a_core * a_core
    loop = (_closed_table(x, y, n, 0.0, bx, by, nu, a2), bx, by, nu, a2)
    n_blocks = _blocks(n)
    for blk in prange(n_blocks):
        _loop_self_stress_block(np.int64(blk), n_blocks, x, y, n, loop, out)


loop_self_stress = njit(**JIT_PARALLEL)(_loop_self_stress_impl)
loop_self_stress.__doc__ = """Non-singular self-stress at the nodes of one closed planar loop.

    Parameters
    ----------
    x, y : (>= n,) float64
        Loop nodes (b), in the order of the line sense; the last node joins the first.
    n : int
        Number of nodes (>= 3).
    theta0, nu, a_core
        Burgers-vector angle (rad), Poisson ratio, core radius (b), as in :func:`self_stress`.
    out : (>= n,) float64
        Receives the resolved shear σ_zj b_j (G) at each node, same sign convention as the line.

    Notes
    -----
    Same segment formula and local arc treatment as :func:`self_stress`, no images: the loop in
    an infinite medium.  A loop traversed clockwise (seen from +z) expands under τ > 0, so its
    self-stress, which shrinks it, is negative.
    """


@njit(**JIT)
def _prepare_loops(loop_x, loop_y, loop_offsets, n_loops, theta0, nu, a2):
    """Every loop in one segment table: loop after loop, each as its n_l nodes and its first
    node again, the segment from that closing node to the next loop's first node a gap of zero
    weight (its pair term is exactly 0), so that one run sums every loop.  Returns the table."""
    bx = np.cos(theta0)
    by = np.sin(theta0)
    seg = np.zeros((SEG_ROWS, loop_offsets[n_loops] - loop_offsets[0] + n_loops))
    e = 0
    for k in range(n_loops):
        lo = loop_offsets[k]
        nl = loop_offsets[k + 1] - lo
        for j in range(nl):
            seg[S_X, e + j] = loop_x[lo + j]
            seg[S_Y, e + j] = loop_y[lo + j]
        seg[S_X, e + nl] = loop_x[lo]
        seg[S_Y, e + nl] = loop_y[lo]
        _fill_segments(seg, e, e + nl, bx, by, nu, a2)
        e += nl + 1
        seg[S_TX, e - 1] = 1.0          # the gap: finite geometry, weights left at 0
        seg[S_L, e - 1] = 1.0
    return seg


@njit(**JIT)
def _loop_stress_block(blk, n_blocks, x, y, n, Lx, n_images, seg, kc, out):
    """Targets ``blk, blk + n_blocks, ...`` of :func:`loop_stress`: the loops' table (``seg``,
    :func:`_prepare_loops`) once per image, seen from the target shifted by -k Lx."""
    m = max(seg.shape[1] - 1, 0)
    per_target = (2 * n_images + 1) * _split(m, RUN)[0]
    runs = _new_runs(((n - 1 - blk) // n_blocks + 1) * per_target)
    r = 0
    for i in range(blk, n, n_blocks):
        out[i] = 0.0
        for k in range(-n_images, n_images + 1):
            r = _add_split(runs, r, i, x[i] - k * Lx, y[i], 0, m)
    _run_sums(seg, runs, r, kc, out)


# Two Python functions, not two dispatchers of one: numba's on-disk cache names an entry after
# the Python function and keys it by signature and bytecode only, not by ``parallel``, so two
# dispatchers of one function would load each other's code (dlsim.jit, "One function per
# dispatcher").
def _loop_stress_impl(x, y, n, loop_x, loop_y, loop_offsets, n_loops, Lx, theta0, nu, a_core,
                      n_images, out):
    a2 = a_core * a_core
    seg = _prepare_loops(loop_x, loop_y, loop_offsets, n_loops, theta0, nu, a2)
    kc = _call_constants(nu, a2)
    n_blocks = _blocks(n)
    for blk in prange(n_blocks):
        _loop_stress_block(np.int64(blk), n_blocks, x, y, n, Lx, n_images, seg, kc, out)


def _loop_stress_serial_impl(x, y, n, loop_x, loop_y, loop_offsets, n_loops, Lx, theta0, nu,
                             a_core, n_images, out):
    a2 = a_core * a_core
    seg = _prepare_loops(loop_x, loop_y, loop_offsets, n_loops, theta0, nu, a2)
    _loop_stress_block(np.int64(0), np.int64(1), x, y, n, Lx, n_images, seg,
                       _call_constants(nu, a2), out)


loop_stress = njit(**JIT_PARALLEL)(_loop_stress_impl)
loop_stress.__doc__ = """Resolved shear at the line nodes from closed loops in the glide plane.

    Parameters
    ----------
    x, y : (>= n,) float64
        Line nodes (b), the targets.
    n : int
        Number of line nodes.
    loop_x, loop_y : (>= loop_offsets[n_loops],) float64
        Loop nodes (b), CSR: loop k is ``loop_offsets[k] .. loop_offsets[k+1]-1``, closed (its
        last node joins its first), in the unwrapped frame of the line.
    loop_offsets : (>= n_loops + 1,) int64
        Offsets of the loops.
    n_loops : int
        Number of loops.
    Lx : float
        Period along x (b); loops are repeated at k·Lx for |k| <= n_images.
    theta0, nu, a_core
        As in :func:`self_stress`.  Every loop has the Burgers vector of the line.
    n_images : int
        Periodic images of the loops on each side (the field of a closed loop decays as 1/r³, so
        the image sum converges absolutely and needs no remainder).
    out : (>= n,) float64
        Receives the loops' resolved shear σ_zj b_j (G) at each line node (overwritten).

    Notes
    -----
    Sense convention: the node order of a loop is its line sense, the sense of the part of the
    line that formed it.  A line running along +x and gliding toward +y (τ > 0) that bypasses a
    particle leaves a loop whose front segment (below the particle) runs along +x, its right side
    along +y, its back along -x and its left side along -y: counter-clockwise seen from +z.  Such
    a loop is pressed against its particle by τ > 0, and its front segment repels the next line
    arriving from below (a negative resolved shear at that line: the Orowan back stress).  Same
    segment formula as :func:`self_stress` (Cai et al. 2006, in-plane form).
    """


loop_stress_serial = njit(**JIT)(_loop_stress_serial_impl)
loop_stress_serial.__doc__ = "Serial twin of :func:`loop_stress` (same code, one thread).\n\n" \
    + loop_stress.__doc__


# ------------------------------------------------------------------------------------------------
# orientation-dependent line tension (de Wit & Koehler 1959)
# ------------------------------------------------------------------------------------------------
@njit(**JIT)
def dwk_prefactor(r_core, r_out):
    """K = ln(R_out/r_core)/(4π) (G b²), the energy scale of a straight screw segment per length."""
    return np.log(r_out / r_core) * INV_4PI


@njit(**JIT)
def _segment(x, y, n, Lx, j):
    """Vector of segment j of the periodic line (node j to node j+1)."""
    if j == n - 1:
        return x[0] + Lx - x[j], y[0] - y[j]
    return x[j + 1] - x[j], y[j + 1] - y[j]


@njit(**JIT)
def dwk_energy(x, y, n, Lx, theta0, nu, r_core, r_out):
    """Line energy Σ E(θ_j)|s_j| of one period, E(θ) = K (1 - ν cos²θ)/(1 - ν) (G b²).

    de Wit & Koehler, Phys. Rev. 116 (1959) 1113; θ_j is the angle between segment j and b,
    ``cos θ_j = (s_j·b)/|s_j|``, so ``E_j |s_j| = K/(1-ν) (|s_j| - ν (s_j·b)²/|s_j|)``.
    """
    bx = np.cos(theta0)
    by = np.sin(theta0)
    pref = dwk_prefactor(r_core, r_out) / (1.0 - nu)
    total = 0.0
    for j in range(n):
        sx, sy = _segment(x, y, n, Lx, j)
        h = np.sqrt(sx * sx + sy * sy)
        sb = sx * bx + sy * by
        total += pref * (h - nu * sb * sb / h)
    return total


@njit(**JIT)
def dwk_forces(x, y, n, Lx, theta0, nu, r_core, r_out, pinned, fx, fy):
    """Energy-consistent nodal forces of the de Wit–Koehler line energy.

    ``F_i = -∂/∂r_i Σ_j E(θ_j)|s_j| = g_i - g_{i-1}`` with
    ``g_j = ∂(E_j|s_j|)/∂s_j = K/(1-ν) [(1 + ν c_j²) t_j - 2ν c_j b]``, ``c_j = t_j·b`` (exact for
    straight segments; only square roots and divisions in the loop).

    Parameters
    ----------
    x, y : (>= n,) float64
        Node positions (b); node n is node 0 shifted by (Lx, 0).
    n : int
        Number of nodes.
    Lx : float
        Period (b).
    theta0, nu : float
        Burgers-vector angle from +x (rad) and Poisson ratio.
    r_core, r_out : float
        Inner and outer cut-off radii of K = ln(r_out/r_core)/(4π) (b).
    pinned : (>= n,) int64
        Obstacle holding each node or -1.  Pinned nodes get the same force as free ones: it is the
        force the line exerts on the obstacle, which the release test needs; the array is taken
        for symmetry with the other force kernels.
    fx, fy : (>= n,) float64
        Output nodal forces (G b²).
    """
    bx = np.cos(theta0)
    by = np.sin(theta0)
    pref = dwk_prefactor(r_core, r_out) / (1.0 - nu)
    sx, sy = _segment(x, y, n, Lx, n - 1)
    gxm, gym = _dwk_gradient(sx, sy, bx, by, nu, pref)
    for i in range(n):
        sx, sy = _segment(x, y, n, Lx, i)
        gx, gy = _dwk_gradient(sx, sy, bx, by, nu, pref)
        fx[i] = gx - gxm
        fy[i] = gy - gym
        gxm = gx
        gym = gy


@njit(**JIT)
def _dwk_gradient(sx, sy, bx, by, nu, pref):
    """∂(E|s|)/∂s of one segment s (see :func:`dwk_forces`)."""
    h = np.sqrt(sx * sx + sy * sy)
    tx = sx / h
    ty = sy / h
    c = tx * bx + ty * by
    return (pref * ((1.0 + nu * c * c) * tx - 2.0 * nu * c * bx),
            pref * ((1.0 + nu * c * c) * ty - 2.0 * nu * c * by))


@njit(**JIT)
def dwk_stiffness(theta, nu, K):
    """Line stiffness Γ(θ) = E + E'' = K (1 - 2ν + 3ν cos²θ)/(1 - ν) (G b²).

    de Wit & Koehler 1959: K(1+ν)/(1-ν) for screw (θ = 0), K(1-2ν)/(1-ν) for edge (θ = π/2).
    """
    c = np.cos(theta)
    return K * (1.0 - 2.0 * nu + 3.0 * nu * c * c) / (1.0 - nu)
