"""Slow NumPy twins of the line kernels (:mod:`dlsim.kernels`), written for clarity, not speed.

Each twin takes the used part of the line (``n`` nodes, node ``n`` is node 0 shifted by (Lx, 0)) and
returns what the kernel computes, so the tests can compare the two on random lines.  Formulas as in
docs/physics.md: line tension ``Γ (t_i - t_{i-1})``, Peach–Koehler ``½ τ ẑ × (r_{i+1} - r_{i-1})``
(Hirth & Lothe, *Theory of Dislocations*, 1982), friction as a threshold on the local driving
stress.
"""
from __future__ import annotations

import numpy as np

from dlsim import contract as C


def closed(x, y, Lx):
    """Node arrays extended by node n = node 0 + (Lx, 0)."""
    return np.append(x, x[0] + Lx), np.append(y, y[0])


def segments(x, y, Lx):
    """Segment vectors s_i = r_{i+1} - r_i, (n, 2)."""
    xc, yc = closed(x, y, Lx)
    return np.stack([np.diff(xc), np.diff(yc)], axis=1)


def neighbours(x, y, Lx):
    """Previous and next node of every node, (n, 2) each, across the seam."""
    r = np.stack([x, y], axis=1)
    prev = np.roll(r, 1, axis=0)
    prev[0, 0] -= Lx
    nxt = np.roll(r, -1, axis=0)
    nxt[-1, 0] += Lx
    return prev, nxt


def line_area(x, y, Lx):
    """Signed area between the line and y = 0 over one period: ∫ y dx along the polygon."""
    xc, yc = closed(x, y, Lx)
    return float(np.sum(0.5 * np.diff(xc) * (yc[1:] + yc[:-1])))


def line_length(x, y, Lx):
    return float(np.sum(np.hypot(*segments(x, y, Lx).T)))


def line_energy(x, y, Lx, gamma, tau):
    """E = Γ·length − τ·area: the energy whose gradient the nodal forces are (b = 1)."""
    return gamma * line_length(x, y, Lx) - tau * line_area(x, y, Lx)


def nodal_forces(x, y, Lx, gamma, tau_node):
    """Line tension Γ (t_i − t_{i−1}) plus Peach–Koehler ½ τ ẑ × (r_{i+1} − r_{i−1}), (n, 2)."""
    s = segments(x, y, Lx)
    t = s / np.hypot(*s.T)[:, None]
    tension = gamma * (t - np.roll(t, 1, axis=0))
    prev, nxt = neighbours(x, y, Lx)
    chord = nxt - prev
    pk = 0.5 * np.asarray(tau_node)[:, None] * np.stack([-chord[:, 1], chord[:, 0]], axis=1)
    return tension + pk


def segment_pass(x, y, pin, Lx, lmin, lmax):
    """Tangents (n, 2), lengths (n,), area, and the first segment out of its bounds (-1: none)."""
    s = segments(x, y, Lx)
    length = np.hypot(*s.T)
    free_end = (pin < 0) | (np.roll(pin, -1) < 0)
    bad = np.flatnonzero((length > lmax) | ((length < lmin) & free_end))
    return s / length[:, None], length, line_area(x, y, Lx), int(bad[0]) if len(bad) else -1


def arc_pin_force(x, y, Lx, gamma, tau):
    """|Γ (t_b − t_a)| at every node, t_a, t_b the end tangents of circular arcs of radius
    Γ/(τ b) over the two arms, bowed to the side τ pushes (half-angle by arcsin, not by parts)."""
    prev, nxt = neighbours(x, y, Lx)
    r = np.stack([x, y], axis=1)
    sa, sb = r - prev, nxt - r
    la, lb = np.hypot(*sa.T), np.hypot(*sb.T)
    ang_a = np.arctan2(sa[:, 1], sa[:, 0]) - np.arcsin(np.clip(tau * la / (2 * gamma), -1, 1))
    ang_b = np.arctan2(sb[:, 1], sb[:, 0]) + np.arcsin(np.clip(tau * lb / (2 * gamma), -1, 1))
    force = gamma * np.hypot(np.cos(ang_b) - np.cos(ang_a), np.sin(ang_b) - np.sin(ang_a))
    # arms swung past each other: the turn from t_a to t_b is a right turn of more than 90°
    turn = np.sin(ang_b - ang_a)
    crossed = (np.cos(ang_b - ang_a) < 0) & (turn * np.sign(tau) < 0)
    return np.where(crossed, np.inf, force)


def node_pass(x, y, pin, Lx, gamma, tau, tau_f, mobility, tau_int):
    """Velocities (n, 2), pin forces (n,), chord tangents (n, 2), max |τ_eff|, stiffness, vmax.

    At a free node the driving stress along the chord normal n is τ_loc = F_t·n / l + τ (l the
    nodal length, F_t the line-tension force of :func:`nodal_forces`), reduced by τ_f; the node
    moves along n at M τ_eff.  At a pinned node the PK stress is reduced by τ_f and the force of
    the arcs the two arms stand for is returned (:func:`arc_pin_force`).
    """
    prev, nxt = neighbours(x, y, Lx)
    r = np.stack([x, y], axis=1)
    a = np.hypot(*(r - prev).T)
    b = np.hypot(*(nxt - r).T)
    chord = nxt - prev
    tchord = chord / np.hypot(*chord.T)[:, None]
    normal = np.stack([-tchord[:, 1], tchord[:, 0]], axis=1)
    t_node = tau + tau_int
    free = pin < 0
    f = nodal_forces(x, y, Lx, gamma, np.zeros_like(t_node))
    t_loc = np.sum(f * normal, axis=1) / (0.5 * (a + b)) + t_node
    t_eff = np.maximum(np.abs(t_loc) - tau_f, 0.0)
    speed = np.where(free, mobility * t_eff * np.sign(t_loc), 0.0)
    v = speed[:, None] * normal
    t_pk = np.sign(t_node) * np.maximum(np.abs(t_node) - tau_f, 0.0)
    fpin = np.where(free, 0.0, arc_pin_force(x, y, Lx, gamma, t_pk))
    moving = free & (t_eff > 0.0)
    max_te = float(np.max(t_eff[moving], initial=0.0))
    stiff = float(np.max(1.0 / (a * b)[free], initial=0.0))
    vmax = float(np.max(np.abs(speed), initial=0.0))
    return v, fpin, tchord, max_te, stiff, vmax


def _cross(ox, oy, ax, ay, bx, by):
    return (ax - ox) * (by - oy) - (ay - oy) * (bx - ox)


def in_triangle(p, a, b, c):
    """Points p (m, 2) in the closed triangle abc (either orientation); degenerate holds none."""
    area = _cross(*a, *b, *c)
    d1 = _cross(*a, *b, p[:, 0], p[:, 1])
    d2 = _cross(*b, *c, p[:, 0], p[:, 1])
    d3 = _cross(*c, *a, p[:, 0], p[:, 1])
    if area > 0:
        return (d1 >= 0) & (d2 >= 0) & (d3 >= 0)
    if area < 0:
        return (d1 <= 0) & (d2 <= 0) & (d3 <= 0)
    return np.zeros(len(p), dtype=bool)


def find_captures(x, y, pin, ign, v, dt, ox, oy, opin, Lx, Ly):
    """Brute force: {obstacle: first segment} for obstacles in a swept quadrilateral.

    Every obstacle is tried at its nine periodic images around the segment's first node; the swept
    quadrilateral old(i), old(i+1), new(i+1), new(i) is the union of the triangles (0, 1, 2) and
    (0, 2, 3).  Held obstacle images (``opin`` packs a count per y-image, dlsim.contract) and the
    obstacle an end node has just left are skipped.
    """
    n = len(x)
    xc, yc = closed(x, y, Lx)
    vc = np.vstack([v, v[:1]])
    found: dict[int, int] = {}
    for i in range(n):
        if not (np.any(vc[i] != 0.0) or np.any(vc[i + 1] != 0.0)):
            continue
        p0, p1 = np.array([xc[i], yc[i]]), np.array([xc[i + 1], yc[i + 1]])
        p3, p2 = p0 + vc[i] * dt, p1 + vc[i + 1] * dt
        base = np.array([Lx * np.floor(p0[0] / Lx), Ly * np.floor(p0[1] / Ly)])
        for a in (-1, 0, 1):
            for b in (-1, 0, 1):
                p = np.stack([ox + base[0] + a * Lx, oy + base[1] + b * Ly], axis=1)
                hit = in_triangle(p, p0, p1, p2) | in_triangle(p, p0, p2, p3)
                unit = C.occupancy_unit(np.arange(len(ox)), p[:, 1], oy, Ly)
                hit &= ((opin & (C.OCC_MASK * unit)) == 0) & (np.arange(len(ox)) != ign[i])
                hit &= np.arange(len(ox)) != ign[(i + 1) % n]
                for k in np.flatnonzero(hit):
                    found.setdefault(int(k), i)
    return found


def point_segment_distance(p, a, b):
    e = b - a
    s = np.clip(np.dot(p - a, e) / np.dot(e, e), 0.0, 1.0)
    return float(np.hypot(*(a + s * e - p)))


def find_contacts(x, y, pin, tchord, Lx, dann, min_separation, cos_max, min_pins=2):
    """Brute force over all pairs: every (i, j), i < j, of free nodes on parts of opposite sense.

    A pair is in contact when one node lies within ``dann`` of one of the other's two segments
    (nearest periodic image in x) and that node's chord tangent has t_x < 1/2 (of two tangents
    closer to antiparallel than 120°, at least one has), they are at least ``min_separation``
    nodes apart along the line or the shorter way between them holds at least ``min_pins`` pinned
    nodes, and their chord tangents have a dot product below ``cos_max``.
    """
    n = len(x)
    prev, nxt = neighbours(x, y, Lx)
    out = set()
    for i in range(n):
        for j in range(n):
            if i == j or pin[i] >= 0 or pin[j] >= 0 or tchord[i][0] >= 0.5:
                continue
            lo, hi = min(i, j), max(i, j)
            inner = list(range(lo + 1, hi))
            outer = [k % n for k in range(hi + 1, lo + n)]
            between = inner if len(inner) <= len(outer) else outer
            wrapped = sum(1 for k in between if pin[k] >= 0) >= min_pins
            if (len(between) + 1 < min_separation and not wrapped) or (
                    tchord[i] @ tchord[j] >= cos_max):
                continue
            shift = Lx * np.floor((x[i] - x[j]) / Lx + 0.5)
            p, sh = np.array([x[i], y[i]]), np.array([shift, 0.0])
            rj = np.array([x[j], y[j]]) + sh
            d = min(point_segment_distance(p, prev[j] + sh, rj),
                    point_segment_distance(p, rj, nxt[j] + sh))
            if d < dann:
                out.add((min(i, j), max(i, j)))
    return out


def move_and_pin(x, y, pin, ign, v, dt, captures):
    """Advance every node by v dt and insert a pinned node after segment start i for each capture.

    ``captures`` is a list of (segment, position along it, obstacle, x, y); returns x, y, pin, ign.
    """
    rows = [(x[i] + v[i, 0] * dt, y[i] + v[i, 1] * dt, pin[i], ign[i]) for i in range(len(x))]
    out = []
    order = sorted(captures, key=lambda c: (c[0], c[1]))
    for i, row in enumerate(rows):
        out.append(row)
        out.extend((cx, cy, k, -1) for seg, _, k, cx, cy in order if seg == i)
    xo, yo, po, io = (np.array(col) for col in zip(*out))
    return xo.astype(float), yo.astype(float), po.astype(np.int64), io.astype(np.int64)


def smallest_crossing_loop(x, y, Lx, min_nodes):
    """Node count of the smallest loop a self-crossing of the periodic line cuts off (unwrapped
    nodes P+1..Q for segment P crossing segment Q, Q an image index), 0 if it does not cross:
    every pair of segments against every image, one by one."""
    n = len(x)
    xc, yc = closed(x, y, Lx)
    best = 0

    def orient(p, q, r):
        return np.sign((q[0] - p[0]) * (r[1] - p[1]) - (q[1] - p[1]) * (r[0] - p[0]))

    for k1 in range(n):
        a, b = (xc[k1], yc[k1]), (xc[k1 + 1], yc[k1 + 1])
        for k2 in range(n):
            if (k2 - k1) % n in (0, 1, n - 1):
                continue
            for m in (-1, 0, 1):
                c = (xc[k2] + m * Lx, yc[k2])
                d = (xc[k2 + 1] + m * Lx, yc[k2 + 1])
                if orient(a, b, c) * orient(a, b, d) < 0 and orient(c, d, a) * orient(c, d, b) < 0:
                    size = abs(k2 + m * n - k1)
                    if 2 <= size <= n + 1 - min_nodes and (best == 0 or size < best):
                        best = size
    return best
