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


# --- the construction again, brute force ---------------------------------------------------------
STRESS_TIE = 1e-12
ANGLE_TIE = 1e-12
POINT_TIE = 1e-9


def arc_integral(p, q, R):
    """∫ y dx along the arc p→q of radius R bulging left of p→q (trapezoid plus segment)."""
    c = math.dist(p, q)
    trap = 0.5 * (q[0] - p[0]) * (p[1] + q[1])
    if not math.isfinite(R) or c == 0.0:
        return trap
    u = min(1.0, 0.5 * c / R)
    return trap + R * R * math.asin(u) - 0.5 * c * R * math.sqrt(max(0.0, 1.0 - u * u))


def phi_at(alpha, a, b, s):
    return alpha - math.asin(min(1.0, a * s)) - math.asin(min(1.0, b * s))


def release_by_bisection(alpha, phic, a, b):
    """Stress at which φ(s) = α - asin(a s) - asin(b s) falls to φc, by bisection on
    [0, 1/max(a, b)]; inf when it stays above φc there (the longer arm goes unstable first)."""
    if alpha - phic <= 0.0:
        return 0.0
    top = 1.0 / max(a, b)
    if phi_at(alpha, a, b, top) > phic:
        return math.inf
    lo, hi = 0.0, top
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if mid <= lo or mid >= hi:
            break
        if phi_at(alpha, a, b, mid) > phic:
            lo = mid
        else:
            hi = mid
    return hi


def circumradius_stress(p, q, x):
    """s = 1/(2R) of the circle through p, x, q (x on the forward side of p→q)."""
    dx, dy = q[0] - p[0], q[1] - p[1]
    cross = dx * (x[1] - p[1]) - dy * (x[0] - p[0])
    return cross / (math.dist(p, x) * math.dist(x, q) * math.hypot(dx, dy))


def in_half_disc(p, q, x):
    mx, my = 0.5 * (p[0] + q[0]), 0.5 * (p[1] + q[1])
    c = math.dist(p, q)
    rx, ry = x[0] - mx, x[1] - my
    return rx * rx + ry * ry < 0.25 * c * c and -(q[1] - p[1]) * rx + (q[0] - p[0]) * ry > 0.0


def ccw_angle(u, v):
    a = math.atan2(u[0] * v[1] - u[1] * v[0], u[0] * v[0] + u[1] * v[1])
    return a if a >= 0.0 else a + TAU


def turn(u, v):
    """Counter-clockwise angle from u to v in [-π/2, 3π/2)."""
    a = math.atan2(u[0] * v[1] - u[1] * v[0], u[0] * v[0] + u[1] * v[1])
    return a + TAU if a < -0.5 * math.pi else a


def tangency_by_scan(a0, a1, b0, b1, s0, s1, samples=4000):
    """First s in [s0, s1] where arcs a0→a1 and b0→b1 (radius 1/(2s)) touch at points inside
    both: the gap |O_a - O_b| - 2R changes sign (dense scan, then bisection)."""
    def gap(s):
        R = 0.5 / s
        oa, ob = arc_center(a0, a1, R), arc_center(b0, b1, R)
        return math.dist(oa, ob) - 2.0 * R, oa, ob, R

    lo = max(s0, 1e-300)
    prev_s, prev_g = lo, gap(lo)[0]
    for k in range(1, samples + 1):
        s = lo + (s1 - lo) * k / samples
        g = gap(s)[0]
        if (g < 0.0) != (prev_g < 0.0) or g == 0.0:
            x, y = prev_s, s
            for _ in range(200):
                m = 0.5 * (x + y)
                if m <= x or m >= y:
                    break
                if (gap(m)[0] < 0.0) == (prev_g < 0.0):
                    x = m
                else:
                    y = m
            _, oa, ob, R = gap(y)
            z = (0.5 * (oa[0] + ob[0]), 0.5 * (oa[1] + ob[1]))
            if on_arc(oa, a0, a1, z) and on_arc(ob, b0, b1, z):
                return y, z
        prev_s, prev_g = s, g
    return math.inf, None


class Pin:
    __slots__ = ("k", "iy", "ix", "alpha")

    def __init__(self, k, iy, ix, alpha=math.pi):
        self.k, self.iy, self.ix, self.alpha = k, iy, ix, alpha


class NaiveArcs:
    """The arc construction on a Python list of pins (one period, x continuous; pin j + n is pin j
    one period on), every search by brute force.  ``run()`` returns (status, s, pins)."""

    def __init__(self, x, y, phic, Lx, Ly, flow, s_max, y0=0.0, max_events=200000):
        self.ox, self.oy = list(map(float, x)), list(map(float, y))
        self.phic = list(map(float, phic))
        self.Lx, self.Ly, self.flow, self.s_max, self.y0 = Lx, Ly, flow, s_max, y0
        self.max_events = max_events
        self.iy0 = [int(math.ceil((y0 - yy) / Ly)) for yy in self.oy]
        self.iy0 = [i + (1 if self.oy[k] + i * Ly < y0 else 0) for k, i in enumerate(self.iy0)]
        self.passed = set()
        self.events = 0
        self.line = []
        self.gap = []
        self.loops = []

    # -- positions and lookups --
    def pos(self, p, shift=0):
        return (self.ox[p.k] + (p.ix + shift) * self.Lx, self.oy[p.k] + p.iy * self.Ly)

    def at(self, j):
        n = len(self.line)
        return self.line[j % n], j // n

    def xy(self, j):
        p, sh = self.at(j)
        return self.pos(p, sh)

    def behind(self, k, iy):
        return iy < self.iy0[k] or (k, iy) in self.passed

    def pinned(self, k, iy):
        return any(p.k == k and p.iy == iy for p in self.line)

    def images(self, xmin, xmax, ymin, ymax):
        """Every obstacle image (k, ix, iy, x, y) in the box."""
        out = []
        for k in range(len(self.ox)):
            for ix in range(int(math.floor((xmin - self.ox[k]) / self.Lx)),
                            int(math.floor((xmax - self.ox[k]) / self.Lx)) + 1):
                for iy in range(int(math.floor((ymin - self.oy[k]) / self.Ly)),
                                int(math.floor((ymax - self.oy[k]) / self.Ly)) + 1):
                    x, y = self.ox[k] + ix * self.Lx, self.oy[k] + iy * self.Ly
                    if xmin <= x <= xmax and ymin <= y <= ymax:
                        out.append((k, ix, iy, x, y))
        return out

    def pin_phi(self, j, s):
        a, p, b = self.xy(j - 1), self.xy(j), self.xy(j + 1)
        return phi_at(self.at(j)[0].alpha, math.dist(a, p), math.dist(p, b), s)

    def line_area(self, s, skip_first=False):
        R = 0.5 / s if s > 0 else math.inf
        return sum(arc_integral(self.xy(j), self.xy(j + 1), R)
                   for j in range(1 if skip_first else 0, len(self.line)))

    def mark(self, k, iy):
        if iy >= self.iy0[k]:
            self.passed.add((k, iy))

    # -- events of the stable line --
    def arc_pairs(self, i):
        """Extended indices of the arcs a contact of arc i may involve: not i itself (any
        period), not its neighbours."""
        n = len(self.line)
        for b in range(i - 2 * n, i + 3 * n):
            if (b - i) % n == 0 or b == i - 1 or b == i + 1:
                continue
            yield b

    def next_event(self, s):
        """The first event of the stable line as the stress rises from s: (stress, kind, data),
        the minimum over every arc (capture, instability, contact) and pin (release)."""
        n = len(self.line)
        best = (math.inf, None, None)
        for i in range(n):
            p, q = self.xy(i), self.xy(i + 1)
            c = math.dist(p, q)
            cand = (1.0 / c, "instable", (i,))
            mx, my = 0.5 * (p[0] + q[0]), 0.5 * (p[1] + q[1])
            top = (math.inf, None)
            for k, ix, iy, x, y in self.images(mx - c / 2, mx + c / 2, my - c / 2, my + c / 2):
                if not in_half_disc(p, q, (x, y)) or self.behind(k, iy) or self.pinned(k, iy):
                    continue
                sx = circumradius_stress(p, q, (x, y))
                if sx < s * (1.0 - STRESS_TIE):
                    continue
                if sx < top[0] or (sx == top[0] and (k, iy) < top[1][:2]):
                    top = (sx, (k, iy, ix))
            if top[0] <= cand[0]:
                cand = (top[0], "capture", (i,) + top[1])
            for b in self.arc_pairs(i):
                p2, q2 = self.xy(b), self.xy(b + 1)
                if math.dist((mx, my), (0.5 * (p2[0] + q2[0]), 0.5 * (p2[1] + q2[1]))) > \
                        0.5 * (c + math.dist(p2, q2)) * (1 + 1e-9):
                    continue
                smax = min(1.0 / c, 1.0 / math.dist(p2, q2))
                st, z = self.tangency(p, q, p2, q2, s, smax)
                if st < cand[0]:
                    cand = (st, "tangent", (i, b, z))
                for sweeper, end in ((i, b), (i, b + 1), (b, i), (b, i + 1)):
                    a0, a1 = self.xy(sweeper), self.xy(sweeper + 1)
                    e = self.xy(end)
                    if not in_half_disc(a0, a1, e):
                        continue
                    sw = circumradius_stress(a0, a1, e)
                    if sw >= s * (1.0 - STRESS_TIE) and sw < cand[0]:
                        cand = (sw, "sweep", (sweeper, end))
            if cand[0] < best[0]:
                best = cand
        for j in range(n):
            a, p, b = self.xy(j - 1), self.xy(j), self.xy(j + 1)
            sr = release_by_bisection(self.line[j].alpha, self.phic[self.line[j].k],
                                      math.dist(a, p), math.dist(p, b))
            if sr < best[0]:
                best = (sr, "release", (j,))
        return best

    def tangency(self, p, q, p2, q2, s0, s1):
        key = (p, q, p2, q2)
        memo = self._tangent_memo.get(key)
        if memo is not None and memo[0] <= s0 and (memo[1] >= s0 or memo[1] == math.inf):
            return memo[1], memo[2]
        st, z = tangency_by_scan(p, q, p2, q2, s0, s1)
        self._tangent_memo[key] = (s0, st, z)
        return st, z

    # -- the gap (the current line from the pivot to the target) and loops --
    def gap_crossings(self, c, R):
        out = []
        for g, (gc, a, b) in enumerate(self.gap):
            for z in circle_cuts(c, gc, R):
                if on_arc(gc, a, b, z):
                    out.append((g, z))
        return out

    def crosses_gap(self, c, p, z, R):
        tol = POINT_TIE * R
        u = (p[0] - c[0], p[1] - c[1])
        az = cw_angle(u, (z[0] - c[0], z[1] - c[1]))
        for _, i in self.gap_crossings(c, R):
            if math.dist(i, p) < tol or math.dist(i, z) < tol:
                continue
            if cw_angle(u, (i[0] - c[0], i[1] - c[1])) < az:
                return True
        return False

    def gap_cross(self, c, f, R, at_f=True):
        """First meeting, clockwise after F about c, of the circle with the gap: (g, point); F
        itself when ``at_f`` and the gap passes through F."""
        tol = POINT_TIE * R
        if at_f:
            for g, (gc, a, b) in enumerate(self.gap):
                if abs(math.dist(f, gc) - R) < tol and on_arc(gc, a, b, f):
                    return g, f
        u = (f[0] - c[0], f[1] - c[1])
        best = (math.inf, -1, None)
        for g, i in self.gap_crossings(c, R):
            if math.dist(i, f) < tol:
                continue
            a = cw_angle(u, (i[0] - c[0], i[1] - c[1]))
            if a < best[0] or (a == best[0] and g < best[1]):
                best = (a, g, i)
        return best[1], best[2]

    def gap_lead(self, c, f, R, at_f=True):
        g, x = self.gap_cross(c, f, R, at_f)
        if g < 0:
            return False
        gc, _, b = self.gap[g]
        self.gap = [(c, f, x), (gc, x, b)] + self.gap[g + 1:]
        return True

    def loop_from(self, arcs):
        """A loop (arcs: centre, start, end) was cut off: free obstacles inside are behind."""
        self.loops.append(arcs)
        if len(arcs) < 2:
            return
        R = self.R
        px, py = [], []
        for c, a, b in arcs:
            sweep = cw_angle((a[0] - c[0], a[1] - c[1]), (b[0] - c[0], b[1] - c[1]))
            a0 = math.atan2(a[1] - c[1], a[0] - c[0])
            for t in np.linspace(0.0, 1.0, 200, endpoint=False):
                px.append(c[0] + R * math.cos(a0 - sweep * t))
                py.append(c[1] + R * math.sin(a0 - sweep * t))
        x0, x1, y0, y1 = min(px), max(px), min(py), max(py)
        for k, ix, iy, x, y in self.images(x0, x1, y0, y1):
            if not self.behind(k, iy) and not self.pinned(k, iy) and inside_polygon(px, py, x, y):
                self.mark(k, iy)

    def chain_arcs(self, j0, j1):
        """Arcs of the line from extended pin j0 to j1 (centre, start, end)."""
        return [(arc_center(self.xy(j), self.xy(j + 1), self.R), self.xy(j), self.xy(j + 1))
                for j in range(j0, j1)]

    def leave(self, p):
        """Pin p is released (sheared, or bypassed: a point loop when impenetrable)."""
        self.mark(p.k, p.iy)
        if self.phic[p.k] == 0.0:
            q = self.pos(p)
            self.loops.append([(q, q, q)])

    def rotate_to(self, j):
        """Renumber the line so that extended pin j is pin 0 (x kept continuous)."""
        n = len(self.line)
        out = []
        for a in range(j, j + n):
            p, sh = self.at(a)
            out.append(Pin(p.k, p.iy, p.ix + sh, p.alpha))
        self.line = out

    # -- the roll: pivot is pin 0, the target pin 1 (pin 0 again, a period on, if alone) --
    def scan(self):
        """Every thing the rolling circle meets before the pivot's release, by rotation angle."""
        R, n = self.R, len(self.line)
        p = self.xy(0)
        v0 = (self.c0[0] - p[0], self.c0[1] - p[1])
        thmax = self.phi0 - self.phic[self.line[0].k]
        if thmax < -ANGLE_TIE:
            return []
        thmax = max(thmax, 0.0)

        def rot(o):
            th = ccw_angle(v0, (o[0] - p[0], o[1] - p[1]))
            return 0.0 if th < ANGLE_TIE or th > TAU - ANGLE_TIE else th

        out = []
        for k, ix, iy, x, y in self.images(p[0] - 2 * R, p[0] + 2 * R, p[1] - 2 * R, p[1] + 2 * R):
            d2 = (x - p[0]) ** 2 + (y - p[1]) ** 2
            if d2 >= 4 * R * R * (1 + 1e-14) or d2 == 0.0 or self.behind(k, iy):
                continue
            kind, ref = "obstacle", (k, ix, iy)
            if self.pinned(k, iy):
                j = next((j for j in range(-2 * n, 3 * n) if self.at(j)[0].k == k and
                          self.at(j)[0].iy == iy and self.at(j)[0].ix + self.at(j)[1] == ix), None)
                if j is None or (j != 1 and j % n == 0):
                    continue                    # the pivot (at any period)
                if j == 1:
                    if d2 >= 4 * R * R / (1 + STRESS_TIE) ** 2:
                        continue
                    kind = "target"
                elif 2 <= j <= n - 1:
                    kind = "right pin"
                elif 1 - n <= j <= -1:
                    kind = "left pin"
                else:
                    continue
                ref = (j,)
            o = arc_center(p, (x, y), R)
            th = rot(o)
            if th <= thmax + ANGLE_TIE:
                out.append((th, d2, kind, ref, o, (x, y)))
        for b in range(-2 * n, 3 * n):
            if b % n == 0 or b == -1:
                continue
            if 1 <= b <= n - 1:
                kind = "right arc"
            elif 1 - n <= b <= -2:
                kind = "left arc"
            else:
                continue
            e0, e1 = self.xy(b), self.xy(b + 1)
            ec = arc_center(e0, e1, R)
            D = math.dist(p, ec)
            if D < R * (1 - 1e-12) or D > 3 * R:
                continue
            a = (D * D - 3 * R * R) / (2 * D)
            h = math.sqrt(max(R * R - a * a, 0.0))
            u = ((ec[0] - p[0]) / D, (ec[1] - p[1]) / D)
            for sg in (-1.0, 1.0):
                o = (p[0] + a * u[0] - sg * h * u[1], p[1] + a * u[1] + sg * h * u[0])
                z = (0.5 * (o[0] + ec[0]), 0.5 * (o[1] + ec[1]))
                if not on_arc(ec, e0, e1, z):
                    continue
                if cw_angle((p[0] - o[0], p[1] - o[1]),
                            (z[0] - o[0], z[1] - o[1])) > math.pi + 1e-9:
                    continue
                th = rot(o)
                if th <= thmax + ANGLE_TIE:
                    out.append((th, (z[0] - p[0]) ** 2 + (z[1] - p[1]) ** 2, kind, (b,), o, z))
        order = {"obstacle": 1, "target": 2, "right pin": 3, "left pin": 3, "right arc": 4,
                 "left arc": 4}
        out.sort(key=lambda c: (c[0], c[1], order[c[2]]))
        return out

    def fix_pivot(self, theta, c_new):
        phi = self.phi0 - theta
        if len(self.line) == 1:
            self.phiN = phi
            return
        cl = math.dist(self.xy(-1), self.xy(0))
        self.line[0].alpha = (phi + math.asin(min(1, cl * self.s))
                              + math.asin(min(1, c_new * self.s)))

    def left_tangent(self, j):
        p, a = self.xy(j), self.xy(j - 1)
        c = arc_center(a, p, self.R)
        return (-(p[1] - c[1]) / self.R, (p[0] - c[0]) / self.R)

    def roll(self):
        """Run the roll set up (pivot pin 0, start circle c0, angles phi0, uN, phiN, gap)."""
        while True:
            self.events += 1
            if self.events > self.max_events:
                return "event limit"
            if (self.area_now() - self.area_ref) / self.Lx >= self.flow:
                return "flowing"
            hit = None
            for cand in self.scan():
                if not self.crosses_gap(cand[4], self.xy(0), cand[5], self.R):
                    hit = cand
                    break
            if hit is None:
                r = self.pivot_release()
            else:
                th, _, kind, ref, o, z = hit
                p = self.xy(0)
                v0 = (self.c0[0] - p[0], self.c0[1] - p[1])
                theta = 0.0 if th == 0.0 else ccw_angle(v0, (o[0] - p[0], o[1] - p[1]))
                r = getattr(self, "hit_" + kind.replace(" ", "_"))(ref, o, z, theta)
            if r != "on":
                return r

    def hit_obstacle(self, ref, o, z, theta):
        k, ix, iy = ref
        self.fix_pivot(theta, math.dist(self.xy(0), z))
        self.line.insert(1, Pin(k, iy, ix))
        self.rotate_to(1)
        self.gap_lead(o, z, self.R)
        self.c0, self.phi0 = o, math.pi
        return "on"

    def hit_target(self, ref, o, z, theta):
        n, s, R = len(self.line), self.s, self.R
        p, t = self.xy(0), self.xy(1)
        c = math.dist(p, t)
        tp = self.line[1 % n]
        if n == 1:
            alpha, cr = math.pi, c
        else:
            un = (-(t[1] - o[1]) / R, (t[0] - o[0]) / R)
            phin = self.phiN - turn(un, self.uN)
            cr = math.dist(t, self.xy(2))
            alpha = phin + math.asin(min(1, c * s)) + math.asin(min(1, cr * s))
        if release_by_bisection(alpha, self.phic[tp.k], c, cr) <= s * (1 + STRESS_TIE):
            if n == 1:
                self.c0, self.phi0 = o, self.phi0 - theta
                return self.pivot_release()
            return self.release_target(o, theta)
        if n != 1:
            self.fix_pivot(theta, c)
        tp.alpha = alpha
        return "done"

    def release_target(self, o, theta):
        n, R = len(self.line), self.R
        t, t2 = self.xy(1), self.xy(2)
        c2 = arc_center(t, t2, R)
        phi2 = self.phi0 - theta if n == 2 else self.pin_phi(2, self.s)
        self.gap = [(o, self.xy(0), t), (c2, t, t2)]
        self.leave(self.line[1])
        del self.line[1]
        self.uN = (-(t2[1] - c2[1]) / R, (t2[0] - c2[0]) / R)
        self.phiN = phi2
        self.c0, self.phi0 = o, self.phi0 - theta
        return "on"

    def pivot_release(self):
        R, n = self.R, len(self.line)
        p = self.xy(0)
        th = max(0.0, self.phi0 - self.phic[self.line[0].k])
        v0 = (self.c0[0] - p[0], self.c0[1] - p[1])
        ct, st = math.cos(th), math.sin(th)
        self.gap_lead((p[0] + ct * v0[0] - st * v0[1], p[1] + st * v0[0] + ct * v0[1]), p, R, False)
        self.leave(self.line[0])
        if n == 1:
            self.line = []
            return self.free_line()
        o = self.xy(-1)
        c = arc_center(o, p, R)
        self.gap = [(c, o, p)] + self.gap
        phi0 = self.phiN if n == 2 else self.pin_phi(-1, self.s)
        self.rotate_to(-1)
        del self.line[1]
        self.c0, self.phi0 = c, phi0
        return "on"

    def hit_right_pin(self, ref, o, z, theta):
        (j,) = ref
        R = self.R
        loop = self.loop_gap_part(o, z) + self.chain_arcs(1, j)
        self.loop_from(loop)
        un = self.left_tangent(j)
        phid = self.pin_phi(j, self.s)
        for a in range(1, j):
            self.mark(self.line[a].k, self.line[a].iy)
        self.line = [self.line[0]] + self.line[j:]
        self.gap = [(o, self.xy(0), z)]
        self.uN, self.phiN = un, phid
        return self.hit_target((1,), o, z, theta)

    def hit_left_pin(self, ref, o, z, theta):
        (j,) = ref
        R, n = self.R, len(self.line)
        p, d = self.xy(0), self.xy(j)
        self.loop_from(self.chain_arcs(j, 0) + [(o, p, d)])
        b = self.xy(j + 1)
        cc = arc_center(d, b, R)
        told = (-(cc[1] - d[1]) / R, (cc[0] - d[0]) / R)
        tnew = (-(o[1] - d[1]) / R, (o[0] - d[0]) / R)
        base = self.phiN if j == 1 - n else self.pin_phi(j, self.s)
        phid = base - turn(told, tnew)
        if j == 1 - n:
            self.phiN = phid
        for a in range(j + 1, 1):
            q, _ = self.at(a)
            self.mark(q.k, q.iy)
        keep = self.line[1:j + n]
        dp, sh = self.at(j)
        self.line = [Pin(dp.k, dp.iy, dp.ix + sh, dp.alpha)] + keep
        self.gap_lead(o, d, R)
        self.c0, self.phi0 = o, phid
        return "on"

    def hit_right_arc(self, ref, o, z, theta):
        (b,) = ref
        R, n = self.R, len(self.line)
        e1, e2 = self.xy(b), self.xy(b + 1)
        ec = arc_center(e1, e2, R)
        self.loop_from(self.loop_gap_part(o, z) + self.chain_arcs(1, b) + [(ec, e1, z)])
        phi2 = self.phi0 - theta if b + 1 == n else self.pin_phi(b + 1, self.s)
        for a in range(1, b + 1):
            self.mark(self.line[a].k, self.line[a].iy)
        self.line = [self.line[0]] + self.line[b + 1:]
        self.gap = [(o, self.xy(0), z), (ec, z, e2)]
        self.uN, self.phiN = (-(e2[1] - ec[1]) / R, (e2[0] - ec[0]) / R), phi2
        self.c0, self.phi0 = o, self.phi0 - theta
        return "on"

    def hit_left_arc(self, ref, o, z, theta):
        (b,) = ref
        R, n = self.R, len(self.line)
        p, e1, e2 = self.xy(0), self.xy(b), self.xy(b + 1)
        ec = arc_center(e1, e2, R)
        self.loop_from([(ec, z, e2)] + self.chain_arcs(b + 1, 0) + [(o, p, z)])
        phi0 = self.phiN if b == 1 - n else self.pin_phi(b, self.s)
        for a in range(b + 1, 1):
            q, _ = self.at(a)
            self.mark(q.k, q.iy)
        keep = self.line[1:b + n]
        ep, sh = self.at(b)
        self.line = [Pin(ep.k, ep.iy, ep.ix + sh, ep.alpha)] + keep
        self.gap_lead(o, z, R)
        self.gap = [(ec, e1, z)] + self.gap
        self.c0, self.phi0 = ec, phi0
        return "on"

    def loop_gap_part(self, o, z):
        g, x = self.gap_cross(o, z, self.R)
        if g < 0:
            return []
        gc, _, b = self.gap[g]
        return [(o, z, x), (gc, x, b)] + self.gap[g + 1:]

    # -- a line without pins --
    def free_line(self):
        """Translate the gap (the line's last shape) up to the first free obstacle above it."""
        R = self.R
        best = (math.inf, -1, 0, 0, -1)
        ylo = min(c[1] - R for c, _, _ in self.gap)
        yhi = max(c[1] + R for c, _, _ in self.gap)
        for g, (c, a, b) in enumerate(self.gap):
            gx0 = c[0] - R if on_arc(c, a, b, (c[0] - R, c[1])) else min(a[0], b[0])
            gx1 = c[0] + R if on_arc(c, a, b, (c[0] + R, c[1])) else max(a[0], b[0])
            gy0 = c[1] - R if on_arc(c, a, b, (c[0], c[1] - R)) else min(a[1], b[1])
            for k, ix, iy, x, y in self.images(gx0, gx1, gy0, yhi + 3 * self.Ly + (yhi - ylo)):
                dx = x - c[0]
                if abs(dx) > R or self.behind(k, iy):
                    continue
                w = math.sqrt(R * R - dx * dx)
                for yy in (c[1] + w, c[1] - w):
                    d = y - yy
                    if d < -POINT_TIE * R or not on_arc(c, a, b, (x, yy)):
                        continue
                    d = max(d, 0.0)
                    if d < best[0] or (d == best[0] and (k, iy) < (best[1], best[3])):
                        best = (d, k, ix, iy, g)
        d, k, ix, iy, g = best
        if g < 0:
            return "flowing"
        self.gap = [((c[0], c[1] + d), (a[0], a[1] + d), (b[0], b[1] + d)) for c, a, b in self.gap]
        q = Pin(k, iy, ix)
        self.line = [q]
        qx = self.pos(q)
        tol = POINT_TIE * R
        gin = gout = g
        for a, (c, st, en) in enumerate(self.gap):
            if math.dist(qx, en) < tol and math.dist(qx, self.gap[g][1]) < tol:
                gin = a
            if math.dist(qx, st) < tol and math.dist(qx, self.gap[g][2]) < tol:
                gout = a
        ci, co = self.gap[gin][0], self.gap[gout][0]
        un = (-(qx[1] - ci[1]) / R, (qx[0] - ci[0]) / R)
        tr = (-(co[1] - qx[1]) / R, (co[0] - qx[0]) / R)
        phi = math.atan2(tr[0] * un[1] - tr[1] * un[0], tr[0] * un[0] + tr[1] * un[1])
        if phi < -ANGLE_TIE:
            phi += TAU
        phi = max(phi, 0.0)
        n = len(self.gap)
        order = [(a % n, a >= n) for a in range(gout, gout + n + 1)]
        new = []
        for pos, (b, wrap) in enumerate(order):
            c, st, en = self.gap[b]
            sh = self.Lx if wrap else 0.0
            c, st, en = (c[0] + sh, c[1]), (st[0] + sh, st[1]), (en[0] + sh, en[1])
            if pos == 0:
                st = qx
            if pos == n:
                en = (qx[0] + self.Lx, qx[1])
            new.append((c, st, en))
        self.gap = new
        self.c0, self.phi0, self.uN, self.phiN = co, phi, un, phi
        return "on"

    def area_now(self):
        if not self.line:
            return sum(arc_integral(a, b, self.R) for _, a, b in self.gap)
        area = self.line_area(self.s, skip_first=self.rolling)
        if self.rolling:
            area += sum(arc_integral(a, b, self.R) for _, a, b in self.gap)
        return area

    def behind_line(self, x, y):
        """behind() on this line, arcs built from exact obstacle images."""
        n, R = len(self.line), self.R
        count = 0
        for j in range(-2 * n, 3 * n):
            p, q = self.xy(j), self.xy(j + 1)
            c = arc_center(p, q, R)
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

    def flag_swept(self):
        ys = [self.xy(j)[1] for j in range(len(self.line))]
        for k, ix, iy, x, y in self.images(0.0, self.Lx * (1 - 1e-15), min(ys) - self.R,
                                           max(ys) + self.R):
            if not self.behind(k, iy) and not self.pinned(k, iy) and self.behind_line(x, y):
                self.mark(k, iy)

    # -- the events --
    def start_roll(self, gap, c0, phi0, un, phin):
        self.gap, self.c0, self.phi0, self.uN, self.phiN = gap, c0, phi0, un, phin
        self.rolling = True
        r = self.roll()
        self.rolling = False
        if r == "done":
            self.flag_swept()
        return r

    def do_capture(self, i, k, iy, ix):
        s = self.s
        p, q = self.xy(i), self.xy(i + 1)
        x = (self.ox[k] + ix * self.Lx, self.oy[k] + iy * self.Ly)
        apn, apq, aqn = (math.asin(min(1, math.dist(a, b) * s)) for a, b in ((p, q), (p, x), (x, q)))
        pi_, _ = self.at(i)
        pj, _ = self.at(i + 1)
        pi_.alpha += apq - apn
        pj.alpha += aqn - apn
        self.rotate_to(i)
        self.line.insert(1, Pin(k, iy, ix, math.pi + apq + aqn))
        return "done"

    def do_release(self, j):
        n, R, s = len(self.line), self.R, self.s
        a, b, c = self.xy(j - 1), self.xy(j), self.xy(j + 1)
        gap = [(arc_center(a, b, R), a, b)]
        if n > 1:
            gap.append((arc_center(b, c, R), b, c))
        self.leave(self.line[j])
        if n == 1:
            self.line = []
            self.gap, self.rolling = gap, True
            r = self.free_line()
            if r != "on":
                self.rolling = False
                return r
            r = self.roll()
            self.rolling = False
            if r == "done":
                self.flag_swept()
            return r
        phi0 = self.pin_phi(j - 1, s)
        un, phin = self.left_tangent(j + 1), self.pin_phi(j + 1, s)
        self.rotate_to(j - 1)
        del self.line[1]
        if len(self.line) == 1:
            un, phin = (0.0, 0.0), phi0
        return self.start_roll(gap, arc_center(a, b, R), phi0, un, phin)

    def do_instable(self, i):
        n, R, s = len(self.line), self.R, self.s
        p, q = self.xy(i), self.xy(i + 1)
        c = arc_center(p, q, R)
        phi0 = self.pin_phi(i, s)
        if n == 1:
            un, phin = (0.0, 0.0), phi0
        else:
            un, phin = self.left_tangent(i + 1), self.pin_phi(i + 1, s)
        self.rotate_to(i)
        return self.start_roll([(c, p, q)], c, phi0, un, phin)

    def do_tangent(self, a, b, z):
        n, R, s = len(self.line), self.R, self.s
        if a < b < a + n:
            f, g = a, b
        elif a - n < b < a:
            f, g = b, a
        else:
            return "done"
        pf, pf2, pg, pg2 = self.xy(f), self.xy(f + 1), self.xy(g), self.xy(g + 1)
        c1, c2 = arc_center(pf, pf2, R), arc_center(pg, pg2, R)
        self.loop_from([(c1, z, pf2)] + self.chain_arcs(f + 1, g) + [(c2, pg, z)])
        phi0 = self.pin_phi(f, s)
        un, phin = self.left_tangent(g + 1), self.pin_phi(g + 1, s)
        for q in range(f + 1, g + 1):
            p, _ = self.at(q)
            self.mark(p.k, p.iy)
        self.rotate_to(f)
        del self.line[1:g - f + 1]
        if len(self.line) == 1:
            un, phin = (0.0, 0.0), phi0
        return self.start_roll([(c1, pf, z), (c2, z, pg2)], c1, phi0, un, phin)

    def do_sweep(self, x, d):
        n, R, s = len(self.line), self.R, self.s
        px, qx, dx = self.xy(x), self.xy(x + 1), self.xy(d)
        cc = arc_center(px, qx, R)
        r = d - x
        if 2 <= r <= n - 1:
            self.loop_from([(cc, dx, qx)] + self.chain_arcs(x + 1, d))
            un = self.left_tangent(d)
            tn = (-(dx[1] - cc[1]) / R, (dx[0] - cc[0]) / R)
            phid = self.pin_phi(d, s) - turn(tn, un)
            cr = math.dist(dx, self.xy(d + 1))
            cnew, cold = math.dist(px, dx), math.dist(px, qx)
            for q in range(x + 1, d):
                p, _ = self.at(q)
                self.mark(p.k, p.iy)
            self.rotate_to(x)
            del self.line[1:r]
            self.line[0].alpha += math.asin(min(1, cnew * s)) - math.asin(min(1, cold * s))
            self.line[1].alpha = phid + math.asin(min(1, cnew * s)) + math.asin(min(1, cr * s))
        elif 1 - n <= r <= -1:
            self.loop_from(self.chain_arcs(d, x) + [(cc, px, dx)])
            b = self.xy(d + 1)
            c0 = arc_center(dx, b, R)
            told = (-(c0[1] - dx[1]) / R, (c0[0] - dx[0]) / R)
            tnew = (-(cc[1] - dx[1]) / R, (cc[0] - dx[0]) / R)
            phid = self.pin_phi(d, s) - turn(told, tnew)
            cl = math.dist(dx, self.xy(d - 1))
            cnew, cold = math.dist(dx, qx), math.dist(px, qx)
            p2, _ = self.at(x + 1)
            p2.alpha += math.asin(min(1, cnew * s)) - math.asin(min(1, cold * s))
            for q in range(d + 1, x + 1):
                p, _ = self.at(q)
                self.mark(p.k, p.iy)
            self.rotate_to(d)
            del self.line[1:x - d + 1]
            self.line[0].alpha = phid + math.asin(min(1, cl * s)) + math.asin(min(1, cnew * s))
        return "done"

    # -- the loading --
    def start(self):
        Ly = self.Ly
        ys = [self.oy[k] + self.iy0[k] * Ly for k in range(len(self.ox))]
        tol = POINT_TIE * max(self.Lx, Ly)
        low = [k for k in range(len(ys)) if ys[k] <= min(ys) + tol]
        sel = sorted(low, key=lambda k: self.ox[k])
        self.line = [Pin(k, self.iy0[k], 0) for k in sel]
        for j in range(len(self.line)):
            a, p, b = self.xy(j - 1), self.xy(j), self.xy(j + 1)
            u, v = (b[0] - p[0], b[1] - p[1]), (a[0] - p[0], a[1] - p[1])
            al = math.atan2(u[0] * v[1] - u[1] * v[0], u[0] * v[0] + u[1] * v[1])
            self.line[j].alpha = al if al > 0 else al + TAU

    def run(self):
        """(status, s, pins) with pins the last pinned configuration as (k, iy, x, y)."""
        import copy
        self._tangent_memo = {}
        self.rolling = False
        self.start()
        self.s, self.R = 0.0, math.inf
        pinned = copy.deepcopy(self.line)
        while True:
            se, kind, data = self.next_event(self.s)
            if se > self.s * (1 + STRESS_TIE) or (self.s == 0.0 and se > 0.0):
                pinned = copy.deepcopy(self.line)
                if se > self.s_max:
                    return "no flow", self.s, self.describe(pinned)
                self.s, self.R = se, 0.5 / se
                self.area_ref = self.line_area(self.s)
                continue
            self.events += 1
            if kind == "capture":
                r = self.do_capture(*data)
            elif kind == "release":
                r = self.do_release(*data)
            elif kind == "instable":
                r = self.do_instable(*data)
            elif kind == "tangent":
                r = self.do_tangent(*data)
            else:
                r = self.do_sweep(*data)
            if r == "done" and (self.area_now() - self.area_ref) / self.Lx >= self.flow:
                r = "flowing"
            if r == "flowing":
                return "flowing", self.s, self.describe(pinned)
            if r != "done":
                return r, self.s, self.describe(pinned)

    def describe(self, line):
        return [(p.k, p.iy, self.ox[p.k] + p.ix * self.Lx, self.oy[p.k] + p.iy * self.Ly)
                for p in line]
