"""Slow, obviously-correct NumPy/Python twins of the arc construction (dlsim.arcs).

Two parts:

- geometric checks of a configuration, from its pins alone (arc centres, arm angles, crossings,
  which obstacles lie behind the line), used by the invariant tests;
- :class:`NaiveArcs`, the whole construction again with brute-force searches: every obstacle
  image near the line is tried at every step, every pair of arcs is tried for contacts, the
  next event is the minimum over all elements recomputed from scratch (no cell lists, no heap,
  no stored events, no journal), Python lists for the line, angles from atan2 and release
  stresses by bisection of φ(s) = φc instead of the kernels' closed forms.  It follows the same
  rules (documented in DEVELOPERS.md, "The arc solver"), so on small fields it must give the same
  CRSS and the same pins.
"""
from __future__ import annotations

import math

import numpy as np

TAU = 2.0 * math.pi


# --- geometry of a configuration ---------------------------------------------------------------
def arc_center(p, q, R):
    """Centre of the arc of radius R from p to q bulging to the left of p→q."""
    (px, py), (qx, qy) = p, q
    dx, dy = qx - px, qy - py
    c = math.hypot(dx, dy)
    h = math.sqrt(max(R * R - 0.25 * c * c, 0.0))
    return 0.5 * (px + qx) + h * dy / c, 0.5 * (py + qy) - h * dx / c


def cw_angle(u, v):
    """Clockwise angle from direction u to direction v, in [0, 2π)."""
    a = math.atan2(u[1] * v[0] - u[0] * v[1], u[0] * v[0] + u[1] * v[1])
    return a if a >= 0.0 else a + TAU


def on_arc(c, a, b, z, tol=1e-9):
    """Z on the circle lies on the clockwise arc from a to b about c."""
    u = (a[0] - c[0], a[1] - c[1])
    pz = cw_angle(u, (z[0] - c[0], z[1] - c[1]))
    if pz > TAU - tol:
        pz -= TAU
    return -tol <= pz <= cw_angle(u, (b[0] - c[0], b[1] - c[1])) + tol


def periodic_pins(pins, Lx):
    """Pins of one period plus the first one a period on (closing the chain)."""
    return list(pins) + [(pins[0][0] + Lx, pins[0][1])]


def arm_angles(pins, Lx, R):
    """Arm angle (rad, in [0, 2π)) at every pin: counter-clockwise from the right arm's tangent
    to the left arm's tangent, i.e. the angle between the arms on the forward side."""
    chain = [(pins[-1][0] - Lx, pins[-1][1])] + periodic_pins(pins, Lx)
    out = []
    for i in range(1, len(chain) - 1):
        a, p, b = chain[i - 1], chain[i], chain[i + 1]
        cl, cr = arc_center(a, p, R), arc_center(p, b, R)
        tl = (-(p[1] - cl[1]), p[0] - cl[0])          # from p back along the left arm
        tr = (-(cr[1] - p[1]), cr[0] - p[0])          # from p along the right arm
        ang = math.atan2(tr[0] * tl[1] - tr[1] * tl[0], tr[0] * tl[0] + tr[1] * tl[1])
        out.append(ang if ang >= -1e-12 else ang + TAU)
    return np.asarray(out)


def circle_cuts(c1, c2, R):
    dx, dy = c2[0] - c1[0], c2[1] - c1[1]
    d = math.hypot(dx, dy)
    if d < 1e-12 * R or d >= 2.0 * R:
        return []
    h = math.sqrt(R * R - 0.25 * d * d)
    mx, my = 0.5 * (c1[0] + c2[0]), 0.5 * (c1[1] + c2[1])
    return [(mx - dy / d * h, my + dx / d * h), (mx + dy / d * h, my - dx / d * h)]


def arcs_of(pins, Lx, R, images=(-1, 0, 1)):
    """Every arc of the line, for the given periodic images: (index, image, p, q, centre)."""
    chain = periodic_pins(pins, Lx)
    out = []
    for m in images:
        for i in range(len(pins)):
            p = (chain[i][0] + m * Lx, chain[i][1])
            q = (chain[i + 1][0] + m * Lx, chain[i + 1][1])
            out.append((i, m, p, q, arc_center(p, q, R)))
    return out


def self_crossings(pins, Lx, R, tol=1e-7):
    """Points where two arcs of the line meet other than at a shared pin (a line that does not
    cross or touch itself has none)."""
    arcs = arcs_of(pins, Lx, R)
    base = [a for a in arcs if a[1] == 0]
    found = []
    for i, _, p, q, c in base:
        for j, m, p2, q2, c2 in arcs:
            if (j, m) <= (i, 0) and m == 0:
                continue
            if m == 0 and j == i:
                continue
            for z in circle_cuts(c, c2, R):
                if min(math.dist(z, e) for e in (p, q, p2, q2)) < tol * R:
                    continue
                if on_arc(c, p, q, z) and on_arc(c2, p2, q2, z):
                    found.append(z)
    return found


def behind(pins, Lx, R, x, y):
    """Whether (x, y) lies behind the line: the signed number of crossings of the ray straight up
    from the point is 1 (a periodic line going +x overall, forward side up).  Each arc is split
    into pieces monotone in x (at its circle's leftmost and rightmost points); a piece crosses
    when its ends lie on either side of the ray, +1 running towards +x (the upper half of its
    circle, clockwise) and -1 towards -x."""
    count = 0
    for _, _, p, q, c in arcs_of(pins, Lx, R, images=(-2, -1, 0, 1, 2)):
        dx = x - c[0]
        if abs(dx) >= R:
            continue
        u = (p[0] - c[0], p[1] - c[1])
        end = cw_angle(u, (q[0] - c[0], q[1] - c[1]))
        cuts = [(0.0, p)]
        for side in (-1.0, 1.0):
            a = cw_angle(u, (side, 0.0))
            if 0.0 < a < end:
                cuts.append((a, (c[0] + side * R, c[1])))
        cuts.sort()
        cuts.append((end, q))
        w = math.sqrt(R * R - dx * dx)
        for (_, a), (_, b) in zip(cuts[:-1], cuts[1:]):
            if (a[0] > x) != (b[0] > x):
                yy = c[1] + w if b[0] > a[0] else c[1] - w
                if yy > y:
                    count += 1 if b[0] > a[0] else -1
    return count == 1


def inside_polygon(px, py, x, y):
    """Crossing-number test of (x, y) against the closed polygon px, py."""
    inside = False
    n = len(px)
    for a in range(n):
        b = (a + 1) % n
        if (py[a] > y) != (py[b] > y):
            xc = px[a] + (y - py[a]) * (px[b] - px[a]) / (py[b] - py[a])
            if xc > x:
                inside = not inside
    return inside
