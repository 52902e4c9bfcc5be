"""Numba kernels of the line model: forces, motion, capture, release, remeshing, reconnection.

Everything here works in reduced units (length in b, stress in G, line tension and nodal force in
G b²) on plain arrays grouped as :mod:`dlsim.contract` describes (``line``, ``loops``, ``field``,
the work arrays with named rows, the parameter record ``prm``).  The public driver of one
relaxation is :func:`relax_line`; it runs the whole loop of time steps in compiled code and returns
a status code, so Python costs nothing per step.

The nodal forces are the energy-consistent forms of docs/physics.md (exact for straight segments):
line tension ``F_i = Γ (t_i - t_{i-1})`` and Peach–Koehler ``F_i = ½ τ ẑ × (r_{i+1} - r_{i-1})``
(Hirth & Lothe, *Theory of Dislocations*, 1982, ch. 3 and 6); a free node is driven by
``τ_loc = F_t·n/l + τ`` and a pin feels the force of the arcs its arms stand for, so that circular
arcs of radius Γ/(τb) are exact at any node spacing (ARC_DRIVE, :func:`_arc_pin_force`).  Lattice
friction is a threshold on the local driving stress; motion is overdamped, ``v = M τ_eff n``.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from dlsim.contract import (CAPACITY, EQUILIBRIUM, FLOWING, HEADROOM, I_BIGN, I_BPIN, I_CAPTURE,
                            I_HEAD, I_KEEP, I_NEXT, I_SRC, M_CAPTURES, M_CONTACT_CHECKS, M_SETTLE,
                            M_N, M_NLOOPNODES, M_NLOOPS, M_RECONNECT, M_RELEASES, M_REMESH, M_STEPS,
                            MAX_CAPTURES, MAX_STEPS, MIN_NODES, MODEL_CONSTANT, MODEL_DWK,
                            MODEL_SELF, OCC_BITS, OCC_MASK, OCC_SLOTS, PARALLEL_MIN_PAIRS, W_BUF,
                            W_BX, W_BY, W_CAPTURE, W_FAR, W_FEX, W_FEY, W_FPIN, W_NEAR, W_NTX,
                            W_NTY, W_RAD, W_RX, W_RY, W_TAU_INT, W_VX, W_VY)
from dlsim.elastic import (dwk_forces, local_stress, loop_stress, loop_stress_serial, self_stress,
                           self_stress_serial)
from dlsim.geometry import neighbours as _neighbours
from dlsim.jit import JIT, start_threads

# relax_line links the parallel self-stress kernels into its own code; its cache entry may not
# restart the threading layer they need (dlsim.jit, numba issue #8578), so start it now, before
# anything can call the stepper.  (They run on every thread numba is given: sweeps give each
# worker one.)
start_threads()

#: Each node's own line-tension stiffness k_i = 2MΓ/(a_i b_i) (a_i, b_i its arms; the diagonal of
#: the line-tension Jacobian) is taken implicitly: a node moves by v dt/(1 + k_i dt) (point-implicit
#: Euler).  The update is non-expansive in the max norm at any dt, so short arms next to pins no
#: longer bound the step of the whole line (explicit Euler needs dt < a b/(2MΓ) at the shortest
#: arms), and every equilibrium (v = 0) is the same.  The step is set so that k dt equals this at a
#: node whose arms are the target spacing (l_min + l_max)/2 (2: half the way to the largest
#: damped step, a choice checked against the regular-array CRSS).  The self-stress line, and a
#: line without a pin, take this step; the others take implicit steps (IMPLICIT_GROWTH).
STEP_STIFFNESS = 2.0
#: No node moves more than this fraction of the shortest segment in one step, so that the swept
#: quadrilaterals stay simple and capture geometry stays accurate.  The few fast nodes (next to a
#: fresh pin) are held to it one by one rather than shortening the step of the whole line.
MAX_MOVE_FRACTION = 0.25
#: Clearance of a node whose distance to the nearest free obstacle is not known (must be measured
#: before the node can vouch that its segments sweep no obstacle).
UNKNOWN = -np.inf
#: A node closer to a free obstacle than its half-segment measures its clearance again only after
#: moving this fraction of l_min (until then its segments are always tested exactly).
REFRESH_FRACTION = 0.25
#: Nodes closer than this many places along the line are never reconnected with each other.  The
#: two arms at a pin meeting at angle φ come within the annihilation distance d = l_min at about
#: s·φ = d from the pin, s the path length to the pin; with at least 20 nodes between them
#: (s >= 10 l_min) that is φ < 0.1, so the wedge at a pin reconnects only when it has closed to
#: within cos(φ/2) > 0.9987 of the Orowan configuration (4 nodes gave a 0.8 % early bypass).
RECONNECT_MIN_SEPARATION = 20
#: ... unless the shorter part of the line between them holds at least this many pinned nodes: it
#: is then wrapped round a disc (a ring of pins at most h/4 apart: half a turn round a disc of
#: radius ρ holds about 4πρ/h of them), not the wedge of one pin, and the two arms meeting behind
#: it reconnect wherever they touch (the arms behind a small disc, pulled together by their
#: elastic attraction, meet fewer than 20 nodes apart).  Point obstacles seldom put 8 pins within
#: 20 nodes: random point fields are unaffected (1024-point CRSS identical on 3 seeds; with 2 pins
#: one moved by 2 %).
RECONNECT_MIN_PINS = 8
#: Two parts of the line reconnect only when their tangents are closer to antiparallel than this.
RECONNECT_COS = -0.5
#: A free node whose chord tangent has t_x below this has turned more than 60° from +x.  Two
#: tangents more than 120° apart (RECONNECT_COS) cannot both lie within 60° of +x, so only such
#: nodes can start a contact.
TURNED_TX = 0.5
#: ARC_DRIVE: a free node is driven by τ_loc = F_t·n/l + τ (F_t the line-tension force, n the unit
#: chord normal, l the nodal length), not by the energy-consistent (F_t + ½ τ ẑ×c)·n/l: nodes on a
#: circle of radius Γ/(τb) are then exactly at rest whatever the node spacing, where the
#: energy-consistent form bows the discrete line to Γ/(τb cos θ), θ = asin(l/2R) (a line stiffer
#: by √(1 + (l/2R)²): +2.6 % on the square-array Orowan stress at 0.2 L, arc construction as the
#: reference).  Both forms have the same continuum limit.
#: relax_line's loop runs at most this many passes per time step allowed: a pass that releases
#: pins (other than with constant Γ) or reconnects does not move the line and is followed by
#: another (a bound, never reached
#: in practice, that keeps a line that would release and reconnect for ever from hanging).
PASSES_PER_STEP = 4
#: The constant-Γ and de Wit–Koehler lines take linearly implicit (backward-Euler) steps, solved
#: along each chain of free nodes between pins (:func:`implicit_displacements`), whose length dt
#: follows the line: after each step it is multiplied by cap/u (cap = MAX_MOVE_FRACTION l_min, u
#: the largest move of a node that a shorter step would slow), by at most this factor, so that
#: the fastest nodes move about the cap, not what the stiffness of the short wavelengths allows.
#: It is never shorter than the time a straight free line needs to glide the cap, or than
#: :func:`time_step` if that is shorter: nodes faster than a free line are driven by the curvature
#: of a few segments next to a fresh pin or a released one, and are held to the cap one by one.
IMPLICIT_GROWTH = 2.0
#: The implicit time step in explicit steps (:func:`time_step`) at the most: the slowest mode of a
#: chain of m nodes then decays by 1/(1 + SETTLE_STEP π²/m²) per step (a factor 5 at m = 50), so
#: a line near equilibrium settles in few steps.  Steps this long are counted as settling steps
#: (meta slot M_SETTLE).
SETTLE_STEP = 1000.0
#: Slot of row W_CAPTURE, past its capture lists, that carries the implicit time step from one
#: call of :func:`relax_line` to the next within a relaxation (0: none yet; the caller zeroes the
#: work rows at its start), so that the steps do not depend on how the relaxation is chunked; the
#: next slot holds the count of releases (meta slot M_RELEASES) the step has seen, so that a
#: release made between calls (a thermal event) shortens it as one made in a call does.
DT_SLOT = 3 * MAX_CAPTURES


@njit(**JIT)
def nodal_forces(x, y, n, prm, tau_node, fx, fy):
    """Line-tension plus Peach–Koehler force at every node (no friction).

    Parameters
    ----------
    x, y : (>= n,) float64
        Node positions (b); node n is node 0 shifted by (Lx, 0).
    n : int
        Number of nodes.
    prm : parameter record (dlsim.contract)
        ``gamma`` and ``Lx`` used here.
    tau_node : (>= n,) float64
        Resolved shear stress at each node (G): applied plus any internal stress.
    fx, fy : (>= n,) float64
        Output nodal forces (G b²).
    """
    gamma, Lx = prm.gamma, prm.Lx
    for i in range(n):
        xm, ym, xp, yp = _neighbours(x, y, n, i, Lx)
        ax, ay = x[i] - xm, y[i] - ym
        bx, by = xp - x[i], yp - y[i]
        a = np.sqrt(ax * ax + ay * ay)
        b = np.sqrt(bx * bx + by * by)
        half = 0.5 * tau_node[i]
        fx[i] = gamma * (bx / b - ax / a) - half * (yp - ym)
        fy[i] = gamma * (by / b - ay / a) + half * (xp - xm)


@njit(**JIT, inline="always")
def _arc_pin_force(uax, uay, a, ubx, uby, b, curvature_half, gamma):
    """|Γ (t_b − t_a)| at a pin, t_a, t_b the tangents there of the arcs its two arms stand for.

    Under a uniform stress each arm of a constant-Γ line is, in equilibrium, a circular arc of
    radius R = Γ/(τb) through its end nodes (docs/physics.md); its tangent at the pin is the chord
    direction turned by the half-angle θ, sin θ = l/(2R), towards the side the arc bows to.  The
    force of the arcs on the pin is exactly Γ (t_b − t_a); the chords' Γ (u_b − u_a) plus the
    Peach–Koehler force of the half-segments reads the arm angle too open by θ_a/2 + θ_b/2, which
    releases pins late at coarse node spacing.  ``curvature_half`` is τ/(2Γ) = 1/(2R) (b⁻¹, signed
    with τ); an arm longer than 2R is taken as a half-circle.  A pin whose arms have crossed
    (:func:`_arms_crossed`) gets an infinite force, so that it is released.
    """
    sa = min(max(curvature_half * a, -1.0), 1.0)
    sb = min(max(curvature_half * b, -1.0), 1.0)
    ca = np.sqrt(1.0 - sa * sa)
    cb = np.sqrt(1.0 - sb * sb)
    # t_b = cos θ_b u_b + sin θ_b ẑ×u_b, t_a = cos θ_a u_a − sin θ_a ẑ×u_a
    tbx, tby = cb * ubx - sb * uby, cb * uby + sb * ubx
    tax, tay = ca * uax + sa * uay, ca * uay - sa * uax
    if _arms_crossed(tax, tay, tbx, tby, curvature_half):
        return np.inf
    fx, fy = tbx - tax, tby - tay
    return gamma * np.sqrt(fx * fx + fy * fy)


@njit(**JIT, inline="always")
def _arms_crossed(tax, tay, tbx, tby, stress):
    """Whether the arms of a pin have swung past each other (arm angle φ below zero).

    A line pushed by τ > 0 turns left (counter-clockwise) at every pin, by π − φ; past φ = 0 the
    turn reads as a right turn of more than 90°.  Such a pin holds nothing any more: its arms have
    crossed behind it (an impenetrable point is bypassed so, Foreman & Makin 1966), and the
    crossing lies at the pin itself, where no two segments of the line cross at interior points.
    ``stress`` carries only the sign of τ.
    """
    turn = tax * tby - tay * tbx
    return tax * tbx + tay * tby < 0.0 and turn * stress < 0.0


@njit(**JIT)
def node_pass(line, n, prm, work_f):
    """Forces, friction and velocities of every node in one pass over the line.

    At a free node the local driving stress ``τ_loc = F_t·n/l + τ`` (``F_t`` the line-tension
    force, ``n`` the normal of the chord r_{i+1} − r_{i−1}, ``l`` the nodal length; ARC_DRIVE) is
    reduced by the friction threshold τ_f (no motion while |τ_loc| <= τ_f); the node moves along
    ``n`` at ``M τ_eff``.  A pinned node does not move; row W_FPIN receives the magnitude of the
    force the line exerts on it (constant Γ: the arcs' force, :func:`_arc_pin_force`; other
    models: the chords' line tension plus the Peach–Koehler force of the half-segments), with the
    stress reduced by friction like everywhere else, and at a free node its line stiffness
    ``2 M Γ_s/(a b)`` (per time unit, Γ_s = prm.stiffness; STEP_STIFFNESS).  Rows W_FEX, W_FEY hold nodal forces of a line-tension model
    other than the constant one (de Wit–Koehler), added to ``Γ (t_i − t_{i−1})``; row W_TAU_INT
    an internal stress added to τ.  Rows W_NTX, W_NTY receive the unit chord tangent at each node.
    Each segment is computed once and carried to the next node, so every node's data is read once
    per pass.

    Parameters
    ----------
    line : (x, y, pin, ign)
        The line (dlsim.contract); node n is node 0 shifted by (Lx, 0).
    n : int
        Number of nodes.
    prm : parameter record
        gamma, tau, tau_f, mobility, l_min, l_max, Lx, stiffness used here.
    work_f : (N_WORK_F, cap) float64
        Reads W_TAU_INT, W_FEX, W_FEY; writes W_VX, W_VY (velocity, b per time unit), W_FPIN
        (pin force, G b², or stiffness), W_NTX, W_NTY.

    Returns
    -------
    area : float
        Signed area between the line and y = 0 over one period (b²), as :func:`line_area`.
    first_bad : int
        The first segment that is longer than l_max or shorter than l_min with a free end (it
        starts at that node), -1 if none: where :func:`remesh` has to start.
    max_tau_eff : float
        Largest |τ_eff| over free nodes (G): the equilibrium residual.
    stiffness : float
        Largest 1/(a b) over free nodes with arms a, b (b⁻²): the explicit-Euler stability
        bound, dt < 1/(2 M Γ_s stiffness) (the point-implicit step does not need it).
    vmax : float
        Largest node speed.
    n_turned : int
        Free nodes whose chord tangent has t_x < TURNED_TX: only these can start a contact
        (:func:`find_contacts`).
    """
    x, y, pin, _ = line
    tau_int, fex, fey = work_f[W_TAU_INT], work_f[W_FEX], work_f[W_FEY]
    vx, vy, fpin, ntx, nty = work_f[W_VX], work_f[W_VY], work_f[W_FPIN], work_f[W_NTX], work_f[W_NTY]
    gamma, tau, tau_f, mob = prm.gamma, prm.tau, prm.tau_f, prm.mobility
    Lx, lmin, lmax = prm.Lx, prm.l_min, prm.l_max
    k_stiff = 2.0 * mob * prm.stiffness
    # the arm behind node 0 is segment n-1, across the seam
    ax, ay = x[0] + Lx - x[n - 1], y[0] - y[n - 1]
    a = np.sqrt(ax * ax + ay * ay)
    uax, uay = ax / a, ay / a
    area = 0.0
    first_bad = -1
    max_te = 0.0
    min_ab = np.inf
    vmax = 0.0
    turned = 0
    for i in range(n):
        xi, yi, pi = x[i], y[i], pin[i]
        if i < n - 1:
            xj, yj, pj = x[i + 1], y[i + 1], pin[i + 1]
        else:
            xj, yj, pj = x[0] + Lx, y[0], pin[0]
        bx, by = xj - xi, yj - yi
        b = np.sqrt(bx * bx + by * by)
        inv_b = 1.0 / b
        ubx, uby = bx * inv_b, by * inv_b
        area += 0.5 * bx * (yi + yj)
        if first_bad < 0 and (b > lmax or (b < lmin and (pi < 0 or pj < 0))):
            first_bad = i
        cx, cy = ax + bx, ay + by           # chord r_{i+1} - r_{i-1}
        tx, ty = gamma * (ubx - uax) + fex[i], gamma * (uby - uay) + fey[i]
        c = np.sqrt(cx * cx + cy * cy)
        inv_c = 1.0 / c
        tnx, tny = cx * inv_c, cy * inv_c
        ntx[i], nty[i] = tnx, tny
        t_node = tau + tau_int[i]
        if pi >= 0:
            t_pk = max(abs(t_node) - tau_f, 0.0)
            if t_node < 0.0:
                t_pk = -t_pk
            if gamma > 0.0:
                fpin[i] = _arc_pin_force(uax, uay, a, ubx, uby, b, t_pk / (2.0 * gamma), gamma)
            else:   # other models: the chords (crossed arms are left to find_crossing)
                px, py = tx - 0.5 * t_pk * cy, ty + 0.5 * t_pk * cx
                fpin[i] = np.sqrt(px * px + py * py)
            vx[i] = 0.0
            vy[i] = 0.0
        else:
            if tnx < TURNED_TX:
                turned += 1
            t_loc = (ty * tnx - tx * tny) / (0.5 * (a + b)) + t_node
            t_eff = abs(t_loc) - tau_f
            if t_eff <= 0.0:
                vx[i] = 0.0
                vy[i] = 0.0
            else:
                max_te = max(max_te, t_eff)
                speed = mob * t_eff
                vmax = max(vmax, speed)
                if t_loc < 0.0:
                    speed = -speed
                vx[i] = -speed * tny
                vy[i] = speed * tnx
            min_ab = min(min_ab, a * b)
            fpin[i] = k_stiff / (a * b)
        ax, ay, a, uax, uay = bx, by, b, ubx, uby
    stiff = 0.0 if min_ab == np.inf else 1.0 / min_ab
    return area, first_bad, max_te, stiff, vmax, turned


@njit(**JIT, inline="always")
def _drive(i, geometry, t_node, tau_f, mob, vx, vy):
    """Velocity of free node i into ``vx[i], vy[i]``; returns τ_eff, 0 where friction holds it.

    ``geometry`` = (tx, ty, tnx, tny, a, b): the line-tension force, the unit chord tangent
    (normal (−tny, tnx)) and the arms; ``t_node`` the stress at the node.  τ_loc = F_t·n/l + τ
    (ARC_DRIVE), and the node moves along n at M (|τ_loc| − τ_f).  The same expressions, in the
    same order, as :func:`node_pass` writes inline (a call there measured 3 % slower), so that
    :func:`_refresh_released` gives the same bits.
    """
    tx, ty, tnx, tny, a, b = geometry
    t_loc = (ty * tnx - tx * tny) / (0.5 * (a + b)) + t_node
    t_eff = abs(t_loc) - tau_f
    if t_eff <= 0.0:
        vx[i] = 0.0
        vy[i] = 0.0
        return 0.0
    speed = mob * t_eff
    if t_loc < 0.0:
        speed = -speed
    vx[i] = -speed * tny
    vy[i] = speed * tnx
    return t_eff


@njit(**JIT, inline="always")
def _unit_segment(x, y, n, k, Lx):
    """Segment k of the line as :func:`node_pass` computes it: (ex, ey, length, unit ex, unit
    ey), the unit vector by one reciprocal."""
    if k < n - 1:
        ex, ey = x[k + 1] - x[k], y[k + 1] - y[k]
    else:
        ex, ey = x[0] + Lx - x[k], y[0] - y[k]
    e = np.sqrt(ex * ex + ey * ey)
    inv_e = 1.0 / e
    return ex, ey, e, ex * inv_e, ey * inv_e


@njit(**JIT)
def _refresh_released(line, n, prm, work_f, nodes, count, passed):
    """Bring :func:`node_pass`'s results up to date after :func:`_release` freed ``nodes[:count]``
    (constant Γ only), without a pass over the line; (False, ``passed``) where that pass would
    remesh.

    Nothing moved, so only a released node's own entries change: it now has a velocity, a
    stiffness in W_FPIN, may count as turned and enter the residual and the largest speed (maxima,
    whatever the order); the area and every other node's entries (a pin's force depends only on
    its arms, not on its neighbours' pins) stay, and each quantity is computed by the same
    arithmetic as in :func:`node_pass`, so the results are identical to a new pass.  A free end
    can make a short arm out of bounds (a new pass would remesh): then False, as it is when the
    previous pass left a segment out of bounds.  The de Wit–Koehler and self-stress forces
    depend on the pins (:func:`model_forces`): the caller passes the line again for them.
    """
    area, first_bad, max_te, stiff, vmax, turned = passed
    x, y = line[0], line[1]
    vx, vy, fpin = work_f[W_VX], work_f[W_VY], work_f[W_FPIN]
    ntx, nty, tau_int, fex, fey = (work_f[W_NTX], work_f[W_NTY], work_f[W_TAU_INT],
                                   work_f[W_FEX], work_f[W_FEY])
    gamma, Lx, lmin, mob = prm.gamma, prm.Lx, prm.l_min, prm.mobility
    k_stiff = 2.0 * mob * prm.stiffness
    if first_bad >= 0:
        return False, passed
    for e in range(count):
        i = nodes[e]
        ax, ay, a, uax, uay = _unit_segment(x, y, n, i - 1 if i > 0 else n - 1, Lx)
        if i == 0:      # node_pass takes the arm across the seam by a division
            uax, uay = ax / a, ay / a
        bx, by, b, ubx, uby = _unit_segment(x, y, n, i, Lx)
        if a < lmin or b < lmin:
            return False, passed
        tx, ty = gamma * (ubx - uax) + fex[i], gamma * (uby - uay) + fey[i]
        tnx, tny = ntx[i], nty[i]
        if tnx < TURNED_TX:
            turned += 1
        t_eff = _drive(i, (tx, ty, tnx, tny, a, b), prm.tau + tau_int[i], prm.tau_f, mob, vx, vy)
        max_te = max(max_te, t_eff)
        vmax = max(vmax, mob * t_eff)
        stiff = max(stiff, 1.0 / (a * b))     # 1/min(a b): the reciprocal is monotone
        fpin[i] = k_stiff / (a * b)
    return True, (area, first_bad, max_te, stiff, vmax, turned)


@njit(**JIT)
def _in_triangle(px, py, ax, ay, bx, by, cx, cy):
    """Point in closed triangle (either orientation); degenerate triangles hold nothing."""
    area = (bx - ax) * (cy - ay) - (by - ay) * (cx - ax)
    if area == 0.0:
        return False
    d1 = (bx - ax) * (py - ay) - (by - ay) * (px - ax)
    d2 = (cx - bx) * (py - by) - (cy - by) * (px - bx)
    d3 = (ax - cx) * (py - cy) - (ay - cy) * (px - cx)
    if area > 0.0:
        return d1 >= 0.0 and d2 >= 0.0 and d3 >= 0.0
    return d1 <= 0.0 and d2 <= 0.0 and d3 <= 0.0


# --- the periodic cell list ------------------------------------------------------------------------
# Every search of the obstacles walks the cells a bounding box covers, at the image of each cell
# that falls inside the box: :func:`_cell_walk` describes the walk, :func:`_walk_cell` gives its
# t-th cell, so a search reads
#     walk = _cell_walk(x0, x1, y0, y1, field)
#     for t in range(walk[6]):
#         cell, shx, shy = _walk_cell(walk, t, field)
#         for q in range(cstart[cell], cstart[cell + 1]): ... ox[citems[q]] + shx ...


@njit(inline="always", **JIT)
def _cell_span(lo, hi, period, ncell):
    """Cells of a periodic axis that the interval [lo, hi] covers.

    Returns the first cell (in [0, ncell)), the image shift that maps the interval into the box
    from that cell on (add it to an obstacle coordinate), and the number of cells.  Walking on,
    the cell index wraps to 0 and the shift grows by one period.
    """
    shift = period * np.floor(lo / period)
    inv_cell = ncell / period
    first = int((lo - shift) * inv_cell)
    count = int((hi - shift) * inv_cell) - first + 1
    if first >= ncell:          # lo a rounding error below the next period
        first -= ncell
        shift += period
    return first, shift, count


@njit(inline="always", **JIT)
def _cell_walk(x0, x1, y0, y1, field):
    """The walk over the cells the box [x0, x1] × [y0, y1] covers: (first cell and shift along
    x, cells along x, the same along y, cells in all); x outer, y inner."""
    ncx, ncy, Lx, Ly = field[6], field[7], field[8], field[9]
    kx0, sx0, nx = _cell_span(x0, x1, Lx, ncx)
    ky0, sy0, ny = _cell_span(y0, y1, Ly, ncy)
    return kx0, sx0, nx, ky0, sy0, ny, nx * ny


@njit(inline="always", **JIT)
def _wrapped_axis(k0, s0, step, ncell, period):
    """Cell ``k0 + step`` of a periodic axis and its shift, the shift grown by one period at each
    wrap (added one period at a time, as a walk cell by cell would)."""
    k, shift = k0 + step, s0
    while k >= ncell:
        k -= ncell
        shift += period
    return k, shift


@njit(inline="always", **JIT)
def _walk_cell(walk, t, field):
    """Cell index and image shifts (shx, shy) of the t-th cell of ``walk`` (:func:`_cell_walk`)."""
    kx0, sx0, _, ky0, sy0, ny, _ = walk
    ncx, ncy, Lx, Ly = field[6], field[7], field[8], field[9]
    if ny == 1:     # most boxes lie in one row of cells: no integer division
        ix, iy = t, 0
    else:
        ix, iy = t // ny, t % ny
    kx, shx = _wrapped_axis(kx0, sx0, ix, ncx, Lx)
    ky, shy = _wrapped_axis(ky0, sy0, iy, ncy, Ly)
    return kx + ncx * ky, shx, shy


@njit(inline="always", **JIT)
def _occ_unit(field, k, py):
    """Count unit in ``opin`` of obstacle k's image at height py: the images one box height
    apart are different obstacles (dlsim.contract, OCC_BITS)."""
    iy = int(np.floor((py - field[1][k]) / field[9] + 0.5)) % OCC_SLOTS
    return np.int64(1) << (OCC_BITS * iy)


@njit(inline="always", **JIT)
def _held(field, k, py):
    """Whether a line or loop node holds obstacle k's image at height py."""
    held = field[3][k]
    return held != 0 and (held & (OCC_MASK * _occ_unit(field, k, py))) != 0


@njit(**JIT)
def free_obstacle_in_triangle(ax, ay, bx, by, cx, cy, field):
    """Whether some free obstacle image (not held, :func:`_held`) lies in the triangle abc."""
    ox, oy, cstart, citems = field[0], field[1], field[4], field[5]
    x0, x1 = min(ax, min(bx, cx)), max(ax, max(bx, cx))
    y0, y1 = min(ay, min(by, cy)), max(ay, max(by, cy))
    walk = _cell_walk(x0, x1, y0, y1, field)
    for t in range(walk[6]):
        cell, shx, shy = _walk_cell(walk, t, field)
        for q in range(cstart[cell], cstart[cell + 1]):
            k = citems[q]
            px, py = ox[k] + shx, oy[k] + shy
            if (x0 <= px <= x1 and y0 <= py <= y1 and not _held(field, k, py)
                    and _in_triangle(px, py, ax, ay, bx, by, cx, cy)):
                return True
    return False


@njit(inline="always", **JIT)
def _capture_in_quad(i, quad, skip_a, skip_b, field, ncap, captures):
    """Record the free obstacles inside the quadrilateral ``quad`` swept by segment i.

    ``quad`` = (x0, y0, x1, y1, x2, y2, x3, y3): old(i), old(i+1), new(i+1), new(i), tested as the
    closed triangles (0, 1, 2) and (0, 2, 3); obstacles are found in the cells its bounding box
    covers, at their image inside that box.  Held obstacles, ``skip_a``/``skip_b`` (just left by
    an end node) and obstacles already recorded are skipped.  ``captures`` = (segment, position
    along the new segment, obstacle, x, y) lists.  Returns the new capture count.
    """
    ox, oy, cstart, citems = field[0], field[1], field[4], field[5]
    cap_seg, cap_s, cap_obs, cap_x, cap_y = captures
    x0, y0, x1, y1, x2, y2, x3, y3 = quad
    xmin, xmax = min(min(x0, x1), min(x2, x3)), max(max(x0, x1), max(x2, x3))
    ymin, ymax = min(min(y0, y1), min(y2, y3)), max(max(y0, y1), max(y2, y3))
    walk = _cell_walk(xmin, xmax, ymin, ymax, field)
    for t in range(walk[6]):
        cell, shx, shy = _walk_cell(walk, t, field)
        for q in range(cstart[cell], cstart[cell + 1]):
            k = citems[q]
            px, py = ox[k] + shx, oy[k] + shy
            if px < xmin or px > xmax or py < ymin or py > ymax:
                continue
            if _held(field, k, py) or k == skip_a or k == skip_b:
                continue
            if not (_in_triangle(px, py, x0, y0, x1, y1, x2, y2)
                    or _in_triangle(px, py, x0, y0, x2, y2, x3, y3)):
                continue
            dup = False
            for m in range(ncap):
                dup |= cap_obs[m] == k
            if dup or ncap >= cap_obs.shape[0]:
                continue
            ex, ey = x2 - x3, y2 - y3
            ee = ex * ex + ey * ey
            cap_seg[ncap] = i
            cap_s[ncap] = 0.5 if ee == 0.0 else ((px - x3) * ex + (py - y3) * ey) / ee
            cap_obs[ncap], cap_x[ncap], cap_y[ncap] = k, px, py
            ncap += 1
    return ncap


@njit(**JIT)
def _clearance(px, py, reach, field):
    """Distance from (px, py) to the nearest free obstacle (any image), capped at ``reach``.

    ``reach`` must not exceed one cell of the list, so the cells scanned hold every obstacle
    closer than it.
    """
    ox, oy, cstart, citems = field[0], field[1], field[4], field[5]
    best = reach * reach
    walk = _cell_walk(px - reach, px + reach, py - reach, py + reach, field)
    for t in range(walk[6]):
        cell, shx, shy = _walk_cell(walk, t, field)
        for q in range(cstart[cell], cstart[cell + 1]):
            k = citems[q]
            dx, dy = ox[k] + shx - px, oy[k] + shy - py
            d2 = dx * dx + dy * dy
            if d2 < best and not _held(field, k, oy[k] + shy):
                best = d2
    return np.sqrt(best)


@njit(inline="always", **JIT)
def _inside(px, py, cx, cy, r):
    """Whether (px, py) lies strictly inside the disc of radius r > 0 about (cx, cy)."""
    dx, dy = px - cx, py - cy
    return r > 0.0 and dx * dx + dy * dy < r * r


@njit(inline="always", **JIT)
def _step_factor(vx, vy, k, dt, cap2):
    """Time a node moves for: dt/(1 + k dt), less if it would move more than sqrt(cap2)."""
    h = dt / (1.0 + k * dt)
    v2 = vx * vx + vy * vy
    if v2 * h * h > cap2:
        h = np.sqrt(cap2 / v2)
    return h


@njit(inline="always", **JIT)
def _captures(work_f, work_i):
    """The capture lists of one step, views of their work rows: (segment, position along the new
    segment, obstacle, x, y of its image)."""
    mc = MAX_CAPTURES
    return (work_i[I_CAPTURE, :mc], work_f[W_CAPTURE, :mc], work_i[I_CAPTURE, mc:2 * mc],
            work_f[W_CAPTURE, mc:2 * mc], work_f[W_CAPTURE, 2 * mc:3 * mc])


@njit(**JIT)
def move_and_capture(line, n, dt, prm, field, work_f, work_i):
    """Advance every node by ``v dt / (1 + k dt)`` and list the obstacles the segments sweep.

    ``v`` is rows W_VX, W_VY and ``k`` row W_FPIN at free nodes, each node's line-tension stiffness
    (per time unit, from :func:`node_pass`; zero gives plain explicit Euler), see STEP_STIFFNESS;
    no node moves more than MAX_MOVE_FRACTION l_min.  No obstacle is tunnelled through:

    The area segment i sweeps is the quadrilateral old(i), old(i+1), new(i+1), new(i)
    (:func:`_capture_in_quad`); segments with both ends at rest sweep nothing.  Obstacles come
    from the periodic cell list of ``field``.

    Most segments are far from every free obstacle, and most steps move them by a small fraction of
    that distance, so each node keeps a disc free of obstacles: centre W_RX, W_RY (where its
    clearance was measured) and radius W_RAD (the clearance less ``h = l_max/2``).  A point of the
    area a segment no longer than l_max before and after the step sweeps lies within ``h`` of one
    end's path (the segment's length along the way is at most the larger of the two), and each
    path, a straight step from a position inside the disc, stays inside it (discs are convex); so
    when both ends end the step inside their discs the segment sweeps no obstacle and its exact
    test is skipped.  A node outside its disc (or with radius UNKNOWN) measures its clearance
    again at its new position, except that a node nearer than ``h`` to an obstacle waits until it
    has moved REFRESH_FRACTION l_min (its segments are tested exactly meanwhile).  Callers set the
    radius to UNKNOWN wherever nodes are created or moved other than here, and shrink the discs an
    obstacle lies in when it becomes free (:func:`_obstacle_freed`).  Each node is moved right
    after the segment it starts has been tested, so the line is read once.  The captures go to
    the capture rows (:func:`_captures`), not yet into the line (:func:`insert_pins`).

    Returns
    -------
    ncap : int
        Number of captures written.
    first_bad : int
        The first segment out of its bounds after the move, as in :func:`node_pass` (-1: none).
    """
    x, y, pin, ign = line
    vx, vy, stiff = work_f[W_VX], work_f[W_VY], work_f[W_FPIN]
    rx, ry, rad = work_f[W_RX], work_f[W_RY], work_f[W_RAD]
    captures = _captures(work_f, work_i)
    ncx, ncy = field[6], field[7]
    Lx, Ly, lmin, lmax = prm.Lx, prm.Ly, prm.l_min, prm.l_max
    lmin2 = lmin * lmin
    first_bad = -1
    reach = min(Lx / ncx, Ly / ncy)
    half = 0.5 * lmax
    lmax2 = lmax * lmax
    wait2 = (REFRESH_FRACTION * lmin) ** 2
    x_first, y_first = x[0], y[0]          # node 0 before it moves, for the closing segment
    xa, ya, vxa, vya, ga, pa = x[0], y[0], vx[0], vy[0], ign[0], pin[0]
    cap2 = (MAX_MOVE_FRACTION * lmin) ** 2
    ha = _step_factor(vx[0], vy[0], stiff[0], dt, cap2)
    h_first = ha
    xa_new, ya_new = xa + vxa * ha, ya + vya * ha
    safe_a = _inside(xa_new, ya_new, rx[0], ry[0], rad[0])
    safe_first = safe_a
    ncap = 0
    for i in range(n):
        if i < n - 1:
            xb, yb, vxb, vyb, gb = x[i + 1], y[i + 1], vx[i + 1], vy[i + 1], ign[i + 1]
            pb = pin[i + 1]
            hb = _step_factor(vxb, vyb, stiff[i + 1], dt, cap2)
            xb_new, yb_new = xb + vxb * hb, yb + vyb * hb
            safe_b = _inside(xb_new, yb_new, rx[i + 1], ry[i + 1], rad[i + 1])
        else:
            xb, yb, vxb, vyb, gb = x_first + Lx, y_first, vx[0], vy[0], ign[0]
            pb = pin[0]
            xb_new, yb_new = xb + vxb * h_first, yb + vyb * h_first
            safe_b = safe_first
        fx, fy = xb_new - xa_new, yb_new - ya_new
        f2 = fx * fx + fy * fy
        if first_bad < 0 and (f2 > lmax2 or (f2 < lmin2 and (pa < 0 or pb < 0))):
            first_bad = i
        if vxa != 0.0 or vya != 0.0 or vxb != 0.0 or vyb != 0.0:
            ex, ey = xb - xa, yb - ya
            if not (safe_a and safe_b) or ex * ex + ey * ey > lmax2 or f2 > lmax2:
                ncap = _capture_in_quad(i, (xa, ya, xb, yb, xb_new, yb_new, xa_new, ya_new),
                                        ga, gb, field, ncap, captures)
        x[i], y[i] = xa_new, ya_new
        if not safe_a:
            r = rad[i]
            dx, dy = xa_new - rx[i], ya_new - ry[i]
            if r > 0.0 or r == UNKNOWN or dx * dx + dy * dy > wait2:
                rx[i], ry[i] = xa_new, ya_new
                rad[i] = _clearance(xa_new, ya_new, reach, field) - half
        xa, ya, vxa, vya, ga, pa = xb, yb, vxb, vyb, gb, pb
        xa_new, ya_new, safe_a = xb_new, yb_new, safe_b
    return ncap, first_bad


@njit(**JIT)
def _sort_captures(ncap, captures):
    """Order captures by segment, then by position along it (insertion sort: ncap is small)."""
    cap_seg, cap_s, cap_obs, cap_x, cap_y = captures
    for a in range(1, ncap):
        b = a
        while b > 0 and (cap_seg[b - 1] > cap_seg[b]
                         or (cap_seg[b - 1] == cap_seg[b] and cap_s[b - 1] > cap_s[b])):
            cap_seg[b - 1], cap_seg[b] = cap_seg[b], cap_seg[b - 1]
            cap_s[b - 1], cap_s[b] = cap_s[b], cap_s[b - 1]
            cap_obs[b - 1], cap_obs[b] = cap_obs[b], cap_obs[b - 1]
            cap_x[b - 1], cap_x[b] = cap_x[b], cap_x[b - 1]
            cap_y[b - 1], cap_y[b] = cap_y[b], cap_y[b - 1]
            b -= 1


@njit(**JIT)
def insert_pins(line, n, ncap, field, work_f, work_i):
    """Insert a pinned node at every captured obstacle, in place; return the new node count.

    Each capture (:func:`_captures`) becomes a node after the start of its segment, in order along
    the segment; the arrays must hold ``n + ncap`` nodes.  The line is shifted from its end
    backwards, so no buffer is needed; the clearances (rows W_RX, W_RY, W_RAD,
    :func:`move_and_capture`) and the non-local self-stress (W_FAR, :func:`model_forces`) move
    with their nodes, a new pin taking the value of its segment's start.  The occupancy
    ``field[3]`` counts the new holders, each at its image.
    """
    x, y, pin, ign = line
    rx, ry, rad, far = work_f[W_RX], work_f[W_RY], work_f[W_RAD], work_f[W_FAR]
    captures = _captures(work_f, work_i)
    _sort_captures(ncap, captures)
    cap_seg, _, cap_obs, cap_x, cap_y = captures
    dst = n + ncap - 1
    c = ncap - 1
    for i in range(n - 1, -1, -1):
        if c < 0:
            break
        while c >= 0 and cap_seg[c] == i:
            x[dst], y[dst], pin[dst], ign[dst] = cap_x[c], cap_y[c], cap_obs[c], -1
            rad[dst], far[dst] = UNKNOWN, far[i]
            field[3][cap_obs[c]] += _occ_unit(field, cap_obs[c], cap_y[c])
            dst -= 1
            c -= 1
        x[dst], y[dst], pin[dst], ign[dst] = x[i], y[i], pin[i], ign[i]
        rx[dst], ry[dst], rad[dst], far[dst] = rx[i], ry[i], rad[i], far[i]
        dst -= 1
    return n + ncap


@njit(**JIT)
def _dist2(dx, dy):
    return dx * dx + dy * dy


@njit(**JIT)
def _node_curvature(x, y, n, pin, i, Lx):
    """Signed curvature of the circle through node i and its neighbours (0 at a pinned node)."""
    if pin[i] >= 0:
        return 0.0
    xm, ym, xp, yp = _neighbours(x, y, n, i, Lx)
    ax, ay = x[i] - xm, y[i] - ym
    bx, by = xp - x[i], yp - y[i]
    cx, cy = xp - xm, yp - ym
    den = np.sqrt((ax * ax + ay * ay) * (bx * bx + by * by) * (cx * cx + cy * cy))
    if den == 0.0:
        return 0.0
    return 2.0 * (ax * by - ay * bx) / den


@njit(**JIT)
def remesh(line, n, prm, first_bad, field, work_f, work_i):
    """Keep every segment length within [l_min, l_max], in place; return (node count, lo).

    A free node is removed when one of its arms is shorter than l_min; pinned nodes are never
    removed.  A segment longer than l_max is then split into equal parts (each longer than
    l_max/2 >= l_min, so a removal never leaves a segment out of bounds), the new nodes placed on
    the circular arc whose curvature is the mean of the free end nodes' three-point curvatures (so
    remeshing does not flatten a bowed line).  Remeshing moves the line a little (a removed node's
    corner is cut, an arc bulges off its chord); where that would carry the line across a free
    obstacle of ``field`` the node is kept, or the new nodes go on the chord, so that remeshing
    never tunnels.

    Segments before ``first_bad`` (from :func:`node_pass`; 0 redoes the whole line) are within
    bounds, so the nodes before ``lo = first_bad - 1`` stay where they are and only the rest of
    the line is rebuilt, through the scratch rows W_BX, W_BY, I_BPIN, I_BIGN (I_KEEP marks the
    nodes kept).  The seam is no special place: when node 0 may have to go (its arm across the
    seam is short) the whole line is redone, and shifted by a period if need be so that node 0
    lies in [0, Lx).  Row I_SRC receives in ``lo:m`` the old index of each rebuilt node (-1 for
    an inserted node, and for every node when the line was shifted).
    """
    x, y, pin, ign = line
    keep = work_i[I_KEEP]
    copy = (work_f[W_BX], work_f[W_BY], work_i[I_BPIN], work_i[I_BIGN], work_i[I_SRC])
    bx, by, bpin, bign, src = copy
    lmin, lmax, Lx = prm.l_min, prm.l_max, prm.Lx
    lmin2 = lmin * lmin
    seam_short = pin[0] < 0 and _dist2(x[0] + Lx - x[n - 1], y[0] - y[n - 1]) < lmin2
    lo = first_bad - 1 if first_bad >= 1 and not seam_short else 0
    # pass 1: mark removals, walking from the last kept node; node 0 is decided last, against its
    # kept neighbours across the seam
    for i in range(lo, n):
        keep[i] = 1
    last = lo
    removed = 0
    for i in range(lo + 1, n):
        nxt = i + 1 if i < n - 1 else 0
        sh = 0.0 if i < n - 1 else Lx
        if pin[i] < 0 and n - removed > MIN_NODES:
            da = _dist2(x[i] - x[last], y[i] - y[last])
            db = _dist2(x[nxt] + sh - x[i], y[nxt] - y[i])
            if (da < lmin2 or db < lmin2) and not free_obstacle_in_triangle(
                    x[last], y[last], x[i], y[i], x[nxt] + sh, y[nxt], field):
                keep[i] = 0
                removed += 1
                continue
        last = i
    first = lo + 1              # the first kept node after lo
    while first < n and keep[first] == 0:
        first += 1
    if lo == 0 and pin[0] < 0 and n - removed > MIN_NODES and first < n:
        da = _dist2(x[0] + Lx - x[last], y[0] - y[last])
        db = _dist2(x[first] - x[0], y[first] - y[0])
        if (da < lmin2 or db < lmin2) and not free_obstacle_in_triangle(
                x[last] - Lx, y[last], x[0], y[0], x[first], y[first], field):
            keep[0] = 0
    head = lo if keep[lo] == 1 else first     # new node 0 when lo = 0, else node lo itself
    wrap = Lx if lo == 0 and x[head] >= Lx else 0.0
    # pass 2: copy kept nodes from `head` on, splitting long segments on the local arc
    m = lo
    i = head
    while True:
        j = i + 1
        while j < n and keep[j] == 0:
            j += 1
        closing = j >= n
        if closing:
            j = 0 if lo > 0 else head
        sh = Lx if closing else 0.0
        bx[m], by[m], bpin[m], bign[m] = x[i] - wrap, y[i], pin[i], ign[i]
        src[m] = i if wrap == 0.0 else -1
        m += 1
        ex, ey = x[j] + sh - x[i], y[j] - y[i]
        if ex * ex + ey * ey > lmax * lmax:
            m = _split_segment(line, n, i, j, (ex, ey, np.sqrt(ex * ex + ey * ey)), prm, wrap,
                               copy, m, field)
        if closing:
            break
        i = j
    for q in range(lo, m):
        x[q], y[q], pin[q], ign[q] = bx[q], by[q], bpin[q], bign[q]
    return m, lo


@njit(**JIT)
def _split_segment(line, n, i, j, chord, prm, wrap, copy, m, field):
    """Write the free nodes that split the long segment i -> i + e (``chord`` = (ex, ey, |e|))
    into ``copy`` = (x, y, pin, ign, src) rows at m on; return the next m."""
    x, y, pin, _ = line
    bx, by, bpin, bign, src = copy
    ex, ey, length = chord
    parts = int(np.ceil(length / prm.l_max))
    kappa = _split_curvature(x, y, n, pin, i, j, prm.Lx, length)
    if kappa != 0.0 and _arc_crosses_obstacle(x[i], y[i], chord, kappa, parts, field):
        kappa = 0.0
    nx, ny = -ey / length, ex / length
    for p in range(1, parts):
        u = p / parts
        off = -0.5 * kappa * length * length * u * (1.0 - u)
        bx[m] = x[i] - wrap + u * ex + off * nx
        by[m] = y[i] + u * ey + off * ny
        bpin[m], bign[m], src[m] = -1, -1, -1
        m += 1
    return m


@njit(**JIT)
def _split_curvature(x, y, n, pin, i, j, Lx, length):
    """Curvature of the arc a long segment i -> j is split on: the mean of its free ends'."""
    ki = _node_curvature(x, y, n, pin, i, Lx)
    kj = _node_curvature(x, y, n, pin, j, Lx)
    if pin[i] >= 0:
        kappa = kj
    elif pin[j] >= 0:
        kappa = ki
    else:
        kappa = 0.5 * (ki + kj)
    if abs(kappa) * length > 1.0:  # never more than a near-semicircle per segment
        kappa = np.sign(kappa) / length
    return kappa


@njit(**JIT)
def _arc_crosses_obstacle(xi, yi, chord, kappa, parts, field):
    """Whether a free obstacle lies between the chord r_i -> r_i + e and the split arc's polygon.

    ``chord`` = (ex, ey, |e|).  The region is the fan of triangles (r_i, p_k, p_k+1) over the arc
    points p_1 .. p_parts (p_parts = r_i + e), convex for a circular arc.
    """
    ex, ey, length = chord
    nx, ny = -ey / length, ex / length
    px, py = xi + ex / parts, yi + ey / parts
    off = -0.5 * kappa * length * length * (1.0 / parts) * (1.0 - 1.0 / parts)
    px, py = px + off * nx, py + off * ny
    for p in range(2, parts + 1):
        u = p / parts
        off = -0.5 * kappa * length * length * u * (1.0 - u)
        qx, qy = xi + u * ex + off * nx, yi + u * ey + off * ny
        if free_obstacle_in_triangle(xi, yi, px, py, qx, qy, field):
            return True
        px, py = qx, qy
    return False


@njit(**JIT)
def line_area(x, y, n, Lx):
    """Signed area between the line and y = 0 over one period (trapezoids, exact for polygons)."""
    area = 0.0
    for i in range(n - 1):
        area += 0.5 * (x[i + 1] - x[i]) * (y[i] + y[i + 1])
    area += 0.5 * (x[0] + Lx - x[n - 1]) * (y[n - 1] + y[0])
    return area


@njit(**JIT)
def _point_segment_dist2(px, py, ax, ay, bx, by):
    ex, ey = bx - ax, by - ay
    ee = ex * ex + ey * ey
    s = 0.0 if ee == 0.0 else ((px - ax) * ex + (py - ay) * ey) / ee
    s = min(1.0, max(0.0, s))
    dx, dy = ax + s * ex - px, ay + s * ey - py
    return dx * dx + dy * dy


@njit(**JIT)
def _pow2_at_most(value):
    """Largest power of two <= value (at least 1)."""
    p = 1
    while 2 * p <= value:
        p *= 2
    return p


@njit(**JIT)
def find_contact(line, n, prm, work_f, work_i):
    """A pair of free nodes (i, j), i < j, on parts of the line of opposite sense in contact.

    The first pair :func:`find_contacts` finds; (-1, -1) when there is none.
    """
    ci, cj = np.empty(1, np.int64), np.empty(1, np.int64)
    if find_contacts(line, n, prm, work_f, work_i, ci, cj) == 0:
        return -1, -1
    return ci[0], cj[0]


@njit(**JIT)
def _wrapped(pin, n, i, j):
    """The shorter part of the line between nodes i and j holds RECONNECT_MIN_PINS pinned nodes
    (it is wrapped round a disc), so they may reconnect although they are close along it."""
    lo, hi = min(i, j), max(i, j)
    sep = hi - lo
    held = 0
    if sep <= n - sep:
        for k in range(lo + 1, hi):
            if pin[k] >= 0:
                held += 1
    else:
        for k in range(hi + 1, n + lo):
            if pin[k % n] >= 0:
                held += 1
    return held >= RECONNECT_MIN_PINS


@njit(**JIT)
def find_contacts(line, n, prm, work_f, work_i, ci, cj):
    """Pairs of free nodes (i, j), i < j, on parts of the line of opposite sense in contact.

    Node i touches node j's part of the line when it lies within the annihilation distance of one
    of j's two segments, the two are at least RECONNECT_MIN_SEPARATION
    nodes apart along the line (or wrapped round obstacles between, RECONNECT_MIN_PINS) and their
    chord tangents (rows W_NTX, W_NTY, :func:`node_pass`) are closer to antiparallel than
    RECONNECT_COS; only nodes with t_x < TURNED_TX need to look (most of a gliding line does
    not).  Candidates come from a hashed cell list over the free nodes, with power-of-two cell
    counts so that wrapping is a bit mask (rows I_HEAD: cells, I_NEXT: nodes).  Each looking node
    contributes the first partner it finds; the pairs go to ``ci, cj`` until they are full.
    Returns the number of pairs.
    """
    x, y, pin, _ = line
    ntx, nty = work_f[W_NTX], work_f[W_NTY]
    head, nxt = work_i[I_HEAD], work_i[I_NEXT]
    Lx, dann = prm.Lx, prm.d_ann
    hc = prm.l_max + dann
    ncx = _pow2_at_most(Lx / hc)
    ncy = _pow2_at_most(max(1.0, min(head.shape[0] / ncx, 2.0 * n / ncx + 1.0)))
    mx, my = ncx - 1, ncy - 1
    inv_cw, inv_hc = ncx / Lx, 1.0 / hc
    width = Lx / ncx
    for c in range(ncx * ncy):
        head[c] = -1
    for i in range(n):
        if pin[i] < 0:
            c = (int(np.floor(x[i] * inv_cw)) & mx) + ncx * (int(np.floor(y[i] * inv_hc)) & my)
            nxt[i] = head[c]
            head[c] = i
    d2max = dann * dann
    count = 0
    for i in range(n):
        if pin[i] >= 0 or ntx[i] >= TURNED_TX:
            continue
        ix0 = int(np.floor(x[i] * inv_cw))
        iy0 = int(np.floor(y[i] * inv_hc))
        partner = -1
        # a column of cells is wider than hc: the one on the side node i lies further from
        # holds no node within hc of it in x (all its candidates would fail the box test below;
        # a margin far above rounding), so it is not walked
        frac = (x[i] * inv_cw - ix0) * width
        margin = 1e-9 * (abs(x[i]) + 4.0 * Lx)
        dx0 = -1 if ncx < 4 or frac <= hc + margin else 0
        dx1 = 1 if ncx < 4 or width - frac <= hc + margin else 0
        for dx in range(dx0, dx1 + 1):
            for dy in range(-1, 2):
                j = head[((ix0 + dx) & mx) + ncx * ((iy0 + dy) & my)]
                while j >= 0 and partner < 0:
                    sep = abs(j - i)
                    sep = min(sep, n - sep)
                    # nodes within RECONNECT_MIN_PINS places can never qualify: an integer test
                    # rejects the line's own neighbours, most of the candidates, before any load
                    if (sep > RECONNECT_MIN_PINS
                            and ntx[i] * ntx[j] + nty[i] * nty[j] < RECONNECT_COS):
                        shift = Lx * np.floor((x[i] - x[j]) / Lx + 0.5)
                        xj, yj = x[j] + shift, y[j]
                        if abs(xj - x[i]) < hc and abs(yj - y[i]) < hc:
                            jm_x, jm_y, jp_x, jp_y = _neighbours(x, y, n, j, Lx)
                            d2 = min(_point_segment_dist2(x[i], y[i], jm_x + shift, jm_y, xj, yj),
                                     _point_segment_dist2(x[i], y[i], xj, yj, jp_x + shift, jp_y))
                            # near along the line (the wedge at a pin): only round a disc;
                            # the count of pins between comes last, it is the dearest test
                            if d2 < d2max and (sep >= RECONNECT_MIN_SEPARATION
                                               or _wrapped(pin, n, i, j)):
                                partner = j
                    j = nxt[j]
        if partner >= 0:
            ci[count], cj[count] = min(i, partner), max(i, partner)
            count += 1
            if count == ci.shape[0]:
                return count
    return count


@njit(**JIT)
def _cut_crosses_obstacle(x, y, n, i, j, shift, field):
    """Whether a free obstacle lies in the corner a reconnection of i and j cuts (i's frame).

    The corner is the polygon i-1, i, i+1, j-1, j, j+1, m (m the joining midpoint) or, across the
    seam, where the loop is the other part, i-1, i, i+1, m, j-1, j, j+1; the fan of triangles from
    m over its other edges covers it (the winding number of the polygon about any inside point is
    the sum of the fan triangles').
    """
    Lx = field[8]
    ixm, iym, ixp, iyp = _neighbours(x, y, n, i, Lx)
    jxm, jym, jxp, jyp = _neighbours(x, y, n, j, Lx)
    jx = x[j] - shift
    jxm, jxp = jxm - shift, jxp - shift
    mx, my = 0.5 * (x[i] + jx), 0.5 * (y[i] + y[j])
    px = (ixm, x[i], ixp, jxm, jx, jxp)
    py = (iym, y[i], iyp, jym, y[j], jyp)
    for k in range(5):
        a = k if shift == 0.0 or k < 2 else k + 1    # across the seam: skip (i+1, j-1) ...
        b = (a + 1) % 6                                # ... and close with (j+1, i-1)
        if free_obstacle_in_triangle(mx, my, px[a], py[a], px[b], py[b], field):
            return True
    return False


@njit(**JIT)
def _obstacle_in_loop(x, y, n, lo, hi, shift, field):
    """Whether a free obstacle lies inside the closed loop of nodes lo..hi (indices mod n, the
    nodes past n shifted by ``shift``): crossing number of a ray in +x over the loop's edges."""
    ox, oy, cstart, citems = field[0], field[1], field[4], field[5]
    x0, x1, y0, y1 = np.inf, -np.inf, np.inf, -np.inf
    for q in range(lo, hi + 1):
        qx = x[q % n] + (shift if q >= n else 0.0)
        x0, x1, y0, y1 = min(x0, qx), max(x1, qx), min(y0, y[q % n]), max(y1, y[q % n])
    walk = _cell_walk(x0, x1, y0, y1, field)
    for t in range(walk[6]):
        cell, shx, shy = _walk_cell(walk, t, field)
        for c in range(cstart[cell], cstart[cell + 1]):
            k = citems[c]
            px, py = ox[k] + shx, oy[k] + shy
            if px < x0 or px > x1 or py < y0 or py > y1 or _held(field, k, py):
                continue
            inside = False
            for q in range(lo, hi + 1):
                r = q + 1 if q < hi else lo
                ax, ay = x[q % n] + (shift if q >= n else 0.0), y[q % n]
                bx, by = x[r % n] + (shift if r >= n else 0.0), y[r % n]
                if (ay > py) != (by > py) and px < ax + (py - ay) * (bx - ax) / (by - ay):
                    inside = not inside
            if inside:
                return True
    return False


@njit(**JIT)
def _store_loop(x, y, pin, n, lo, hi, shift, meta, loops):
    """Append nodes lo..hi (mod n, past n shifted by ``shift``) as a loop; False if the buffers
    are full (then nothing is stored)."""
    lx, ly, lpin, loff = loops
    nl, used = meta[M_NLOOPS], meta[M_NLOOPNODES]
    if used + (hi - lo + 1) > lx.shape[0] or nl + 2 > loff.shape[0]:
        return False
    for q in range(lo, hi + 1):
        k = q % n
        lx[used] = x[k] + (shift if q >= n else 0.0)
        ly[used] = y[k]
        lpin[used] = pin[k]
        used += 1
    loff[nl + 1] = used
    meta[M_NLOOPS] = nl + 1
    meta[M_NLOOPNODES] = used
    return True


@njit(**JIT)
def reconnect(line, n, i, j, meta, loops, field, work_f):
    """Join two parts of opposite sense at nodes i < j, cutting off a closed loop.

    The line is rebuilt in place as ``[..i-1, m, j+1..]`` (m the midpoint of i and j) and the part
    between them, ``[i+1 .. j-1]``, becomes a closed loop; where the contact lies across the
    periodic seam (node j is node i's neighbour one period on) it is the other way round.  A loop
    holding a pinned node is stored in ``loops`` (CSR, dlsim.contract): an Orowan loop left around
    its obstacles, which stay held.  A loop holding none is dropped (under line tension alone it
    would shrink away).  Returns the new node count; ``n`` unchanged when the contact is not a
    reconnection (folded across the seam backwards), -1 when the loop buffers are full (nothing
    changed).  The clearances (rows W_RX, W_RY, W_RAD, :func:`move_and_capture`) move with their
    nodes; the joining node's is unknown.

    Reconnection must not tunnel either: it is refused (``n`` returned, nothing changed) while a
    free obstacle of ``field`` lies in the corner it cuts, the polygon i-1, i, i+1, j-1, j, j+1, m,
    or inside a loop that would be dropped.  The line then moves on, sweeps and captures that
    obstacle, and reconnects later around it.
    """
    x, y, pin, ign = line
    Lx = field[8]
    shift = Lx * np.floor((x[j] - x[i]) / Lx + 0.5)
    if shift < 0.0:
        return n
    if shift == 0.0:
        lo, hi = i + 1, j - 1
    else:
        lo, hi = j + 1, i - 1 + n
    has_pin = False
    for q in range(lo, hi + 1):
        if pin[q % n] >= 0:
            has_pin = True
    if _cut_crosses_obstacle(x, y, n, i, j, shift, field):
        return n
    if not has_pin and _obstacle_in_loop(x, y, n, lo, hi, shift, field):
        return n
    if has_pin and not _store_loop(x, y, pin, n, lo, hi, shift, meta, loops):
        return -1
    return _join(line, n, i, j, shift, work_f)


@njit(**JIT)
def _join(line, n, i, j, shift, work_f):
    """Rebuild the line without the part a reconnection of i and j cuts off; return the count.

    Nodes i and j merge into their midpoint m: the line keeps [0 .. i-1] + [m] + [j+1 .. n-1],
    or across the seam [i+1 .. j-1] + [m] (:func:`_rejoin` of the nodes between).
    """
    x, y = line[0], line[1]
    xmid = 0.5 * (x[i] + shift + x[j])
    ymid = 0.5 * (y[i] + y[j])
    if shift == 0.0:
        return _rejoin(line, n, i - 1, j, xmid, ymid, work_f)
    return _rejoin(line, n, j - 1, i + n, xmid, ymid, work_f)


@njit(**JIT, inline="always")
def _node_at(x, y, n, k, Lx):
    """Node k of the unwrapped line (k >= 0; node k + n is node k shifted by Lx)."""
    return x[k % n] + (k // n) * Lx, y[k % n]


@njit(**JIT, inline="always")
def _cross_param(ax, ay, bx, by, cx, cy, dx, dy):
    """Where segment AB crosses segment CD: the fraction along AB, or -1 if they do not cross at a
    point interior to both (parallel and touching segments do not cross).

    Most pairs tested do not cross, and their numerators already tell: t = a/d (or u) is at most
    0 when a and d differ in sign, and at least 1 when |a| > |d| with the same sign, whatever the
    rounding (a correctly rounded quotient is monotone in the exact one), so those pairs are
    rejected before the two divisions, with the same answer."""
    ex, ey = bx - ax, by - ay
    fx, fy = dx - cx, dy - cy
    den = ex * fy - ey * fx
    if den == 0.0:
        return -1.0
    gx, gy = cx - ax, cy - ay
    at = gx * fy - gy * fx
    au = gx * ey - gy * ex
    if den > 0.0:
        if at <= 0.0 or au <= 0.0 or at > den or au > den:
            return -1.0
    elif at >= 0.0 or au >= 0.0 or at < den or au < den:
        return -1.0
    t = at / den
    u = au / den
    if t <= 0.0 or t >= 1.0 or u <= 0.0 or u >= 1.0:
        return -1.0
    return t


@njit(**JIT, inline="always")
def _segment_end(x, y, n, k, Lx):
    """The end node of segment k (0 <= k < n): node k + 1, or node 0 shifted by Lx."""
    if k < n - 1:
        return x[k + 1], y[k + 1]
    return x[0] + Lx, y[0]


@njit(**JIT)
def _mark_backward_bins(x, n, Lx, ncx, width, marked):
    """Mark the x bins (mod Lx) that a segment running backwards (x decreasing) spans; return how
    many segments run backwards."""
    marked[:ncx] = False
    count = 0
    for k in range(n):
        xa = x[k]
        xb = x[k + 1] if k < n - 1 else x[0] + Lx
        if xb < xa:
            count += 1
            i0 = int(np.floor(xb / width))
            for i in range(i0, min(int(np.floor(xa / width)), i0 + ncx - 1) + 1):
                marked[i & (ncx - 1)] = True
    return count


@njit(**JIT)
def _segment_grid(x, y, n, Lx, grid, marked, lists):
    """Hash the crossing candidates of :func:`find_crossing` into its grid; return the entries
    made, or minus the entries needed when the lists are too short (nothing usable written).

    ``grid`` = (ncx, ncy, width, height): power-of-two cell counts (wrapping is a bit mask) and
    the cell size; a candidate is a segment whose x span shares a bin with a backwards one
    (``marked``, :func:`_mark_backward_bins`), entered in every cell its box covers.  ``lists`` =
    (head, next, seg): the first entry of each cell, the next entry in the same cell and the
    segment of each entry.  The segments are entered from the last to the first, so that each
    cell lists its segments in ascending order; one pass, no count first.
    """
    ncx, ncy, width, hc = grid
    head, nxt, seg = lists
    mx, my = ncx - 1, ncy - 1
    inv_w, inv_h = 1.0 / width, 1.0 / hc
    room = min(nxt.shape[0], seg.shape[0])
    head[:ncx * ncy] = -1
    entries = 0
    for k in range(n - 1, -1, -1):
        ax, ay = x[k], y[k]
        bx, by = _segment_end(x, y, n, k, Lx)
        i0, i1 = int(np.floor(min(ax, bx) * inv_w)), int(np.floor(max(ax, bx) * inv_w))
        i1 = min(i1, i0 + ncx - 1)
        hit = False
        for i in range(i0, i1 + 1):
            hit = hit or marked[i & mx] != 0
        if not hit:
            continue
        j0, j1 = int(np.floor(min(ay, by) * inv_h)), int(np.floor(max(ay, by) * inv_h))
        for i in range(i0, i1 + 1):
            for j in range(j0, min(j1, j0 + ncy - 1) + 1):
                if entries < room:
                    c = (i & mx) + ncx * (j & my)
                    seg[entries], nxt[entries] = k, head[c]
                    head[c] = entries
                entries += 1
    return entries if entries <= room else -entries


@njit(**JIT)
def find_crossing(line, n, prm, work_i):
    """The crossing of two segments of the line that cuts off the smallest loop.

    A line without a segment running backwards is a graph y(x) over its period and cannot cross
    itself; where parts fold back, the vertical through a crossing point also meets a backwards
    segment, so only segments whose x span shares a bin (mod Lx) with a backwards one are
    candidates.  They go into a hashed grid of cells at least l_max wide (each segment in every
    cell its box covers, :func:`_segment_grid`) and the pairs of each cell are tested exactly,
    images in x included.

    Returns
    -------
    (P, Q, t) : (int, int, float)
        Segments P (0 <= P < n) and Q (unwrapped: segment Q mod n shifted by (Q // n) Lx;
        P + 2 <= Q <= P + n + 1 - MIN_NODES, so the line keeps MIN_NODES) cross at the fraction
        t along segment P; the loop is the unwrapped nodes P+1..Q.  P = -1 when the line does not
        cross itself.
    """
    p, q, t, _ = _crossing_search(line, n, prm, work_i)
    return p, q, t


@njit(**JIT)
def _crossing_search(line, n, prm, work_i):
    """:func:`find_crossing`, and whether its crossing is the only pair of segments it found
    crossing, with the grid in the work rows I_HEAD, I_NEXT, I_SRC (:func:`_segment_grid`; the
    marks of the backwards bins in I_KEEP): then :func:`_cut_leaves_no_crossing` can tell from
    them whether the cut line crosses itself.  (Allowing other pairs that the cut changes or
    removes found no more lines free of crossings on the bench_step rig.)"""
    x, y = line[0], line[1]
    Lx = prm.Lx
    grid = _crossing_grid(n, prm, work_i.shape[1])
    marked = work_i[I_KEEP]
    if _mark_backward_bins(x, n, Lx, grid[0], grid[2], marked) == 0:
        return -1, -1, -1.0, False
    ncx, ncy = grid[0], grid[1]
    head, nxt, seg = work_i[I_HEAD], work_i[I_NEXT], work_i[I_SRC]
    entries = _segment_grid(x, y, n, Lx, grid, marked, (head, nxt, seg))
    if entries < 0:     # more entries than a work row holds: lists of their own
        nxt, seg = np.empty(-entries, np.int64), np.empty(-entries, np.int64)
        _segment_grid(x, y, n, Lx, grid, marked, (head, nxt, seg))
    best_p, best_q, best_t, best_size = -1, -1, -1.0, n
    first1, first2, several = -1, -1, False
    for c in range(ncx * ncy):
        e = head[c]
        while e >= 0:
            k1 = seg[e]
            ax, ay = x[k1], y[k1]
            bx, by = _segment_end(x, y, n, k1, Lx)
            e = nxt[e]
            f = e
            while f >= 0:       # the segments after k1 in the cell
                k2 = seg[f]
                f = nxt[f]
                t, m = _pair_crossing(x, y, n, Lx, (k1, ax, ay, bx, by), k2)
                if t < 0.0:
                    continue
                if first1 < 0:
                    first1, first2 = k1, k2
                several |= k1 != first1 or k2 != first2
                q = k2 + m * n              # k2's image, unwrapped, relative to k1
                if q > k1:
                    p, size = k1, q - k1
                else:                       # k1's image, in k2's frame, comes later
                    p, size = k2, k1 - q
                    cx, cy = x[k2] + m * Lx, y[k2]
                    dx, dy = _segment_end(x, y, n, k2, Lx)
                    t = _cross_param(cx - m * Lx, cy, dx, dy, ax - m * Lx, ay, bx - m * Lx, by)
                # the line keeps n - size + 1 nodes: at least MIN_NODES
                if 2 <= size <= n + 1 - MIN_NODES and size < best_size and t > 0.0:
                    best_p, best_q, best_t, best_size = p, p + size, t, size
    return best_p, best_q, best_t, best_p >= 0 and not several and entries >= 0


@njit(**JIT, inline="always")
def _pair_crossing(x, y, n, Lx, first, k2):
    """Whether segment k1 < k2 crosses segment k2 (its image nearest to k1): (t, m), t the
    fraction along k1 (-1: no crossing, or the segments are neighbours on the line), m the image.

    ``first`` = (k1, ax, ay, bx, by): k1 and its end points.  The image is found without a
    division within a quarter period (exactly what the rounded floor gives there), most pairs.
    """
    k1, ax, ay, bx, by = first
    gap = k2 - k1           # (k2 - k1) mod n, without a division
    if gap < 0:
        gap += n
    if gap <= 1 or gap >= n - 1:
        return -1.0, 0
    sep = ax - x[k2]
    m = 0 if abs(sep) <= 0.25 * Lx else int(np.floor(sep / Lx + 0.5))
    cx, cy = x[k2] + m * Lx, y[k2]
    dx, dy = _segment_end(x, y, n, k2, Lx)
    return _cross_param(ax, ay, bx, by, cx, cy, dx + m * Lx, dy), m


@njit(**JIT)
def _crossing_grid(n, prm, room):
    """The grid of :func:`find_crossing` for n nodes, ``room`` cells at most: (ncx, ncy, cell
    width, cell height), power-of-two counts of cells at least l_max wide and l_max high."""
    hc = prm.l_max
    ncx = _pow2_at_most(prm.Lx / hc)
    ncy = _pow2_at_most(max(1.0, min((room - 1) / ncx, 2.0 * n / ncx + 1.0)))
    return ncx, ncy, prm.Lx / ncx, hc


@njit(**JIT)
def _cut_leaves_no_crossing(line, n_old, n, p, q, prm, work_i):
    """Whether :func:`find_crossing` on the line just cut at segments p, q (:func:`cut_crossing`
    of the unwrapped nodes p+1..q, ``n_old`` nodes before, n now) finds nothing, decided from
    the search that found that crossing alone (:func:`_crossing_search`: its grid and marks are
    still in the work rows); False where it cannot tell.

    A new search would test only pairs of the segments the cut left as they were, in the same
    order, with the same numbers, and pairs with the two new ones (p → X, X → q+1), provided its
    grid is the same (the same cell count for n nodes) and it marks no bin the old search did
    not (the candidates are then among the old ones, in the same cells).  The pairs of unchanged
    segments it would test were tested and found not crossing (the only crossing pair was p, q);
    so it finds nothing if neither new segment crosses any segment listed in the old grid's cells
    it covers (those it would pair it with, and more).
    """
    x, y = line[0], line[1]
    Lx = prm.Lx
    room = work_i.shape[1]
    grid = _crossing_grid(n, prm, room)
    if grid[1] != _crossing_grid(n_old, prm, room)[1]:
        return False
    ncx, ncy, width, hc = grid
    mx, my = ncx - 1, ncy - 1
    inv_w, inv_h = 1.0 / width, 1.0 / hc
    marked, head, nxt, seg = work_i[I_KEEP], work_i[I_HEAD], work_i[I_NEXT], work_i[I_SRC]
    s0 = q + 1 - n_old if q >= n_old else 0      # across the seam: old node s0 is new node 0
    w0 = p - s0                                   # the new segments w0 (p -> X) and w0 + 1
    for w in range(w0, w0 + 2):
        ax, ay = x[w], y[w]
        bx, by = _segment_end(x, y, n, w, Lx)
        if bx < ax:     # running backwards: its bins must be marked already
            i0 = int(np.floor(bx / width))
            for i in range(i0, min(int(np.floor(ax / width)), i0 + ncx - 1) + 1):
                if marked[i & mx] == 0:
                    return False
        i0, i1 = int(np.floor(min(ax, bx) * inv_w)), int(np.floor(max(ax, bx) * inv_w))
        j0, j1 = int(np.floor(min(ay, by) * inv_h)), int(np.floor(max(ay, by) * inv_h))
        for i in range(i0, min(i1, i0 + ncx - 1) + 1):
            for j in range(j0, min(j1, j0 + ncy - 1) + 1):
                e = head[(i & mx) + ncx * (j & my)]
                while e >= 0:
                    k = seg[e]
                    e = nxt[e]
                    # k's new index: unchanged segments lie outside the unwrapped p..q
                    if q < n_old:
                        kn = k if k < p else (k - (q - p) + 1 if k > q else -1)
                    else:
                        kn = k - s0 if s0 <= k < p else -1
                    if kn < 0:
                        continue
                    k1, k2 = min(w, kn), max(w, kn)
                    ex, ey = _segment_end(x, y, n, k1, Lx)
                    if _pair_crossing(x, y, n, Lx, (k1, x[k1], y[k1], ex, ey), k2)[0] >= 0.0:
                        return False
    return True


@njit(**JIT)
def cut_crossing(line, n, p, q, t, prm, meta, loops, field, work_f):
    """Cut the loop of the unwrapped nodes p+1..q off where segments p and q cross
    (:func:`find_crossing`); return the new node count, -1 if the loop buffers are full.

    The line keeps ``.. p, X, q+1 ..`` (X the crossing point, a free node).  What the loop holds
    decides what it is: two pins or more, an Orowan loop, stored with its obstacles still held (as
    :func:`reconnect` stores one); one pin, the arms of that pin have crossed behind it (its arm
    angle is below zero, past any critical angle): a shearable obstacle is released and the loop
    dropped, an impenetrable one is bypassed the Orowan way and keeps its loop; no pin, a loop
    that line tension would shrink away, dropped.
    """
    x, y, pin = line[0], line[1], line[2]
    Lx = field[8]
    ax, ay = x[p], y[p]
    bx, by = _node_at(x, y, n, p + 1, Lx)
    cx, cy = ax + t * (bx - ax), ay + t * (by - ay)
    pins = 0
    held = -1
    for k in range(p + 1, q + 1):
        if pin[k % n] >= 0:
            pins += 1
            held = k % n
    keep = pins >= 2 or (pins == 1 and field[2][pin[held]] == np.inf)
    if keep:        # the loop's nodes, then the crossing point that closes it
        lx, ly, lpin, loff = loops
        if (meta[M_NLOOPNODES] + q - p + 1 > lx.shape[0]
                or not _store_loop(x, y, pin, n, p + 1, q, Lx, meta, loops)):
            return -1
        used = meta[M_NLOOPNODES]
        lx[used], ly[used], lpin[used] = cx, cy, -1
        meta[M_NLOOPNODES] = used + 1
        loff[meta[M_NLOOPS]] = used + 1
    elif pins == 1:
        _unhold(pin[held], y[held], n, prm, field, work_f)
        meta[M_RELEASES] += 1
    return _rejoin(line, n, p, q, cx, cy, work_f)


@njit(**JIT)
def _rejoin(line, n, p, q, cx, cy, work_f):
    """The line without the unwrapped nodes p+1..q, joined through the free node (cx, cy); return
    the node count."""
    x, y, pin, ign = line
    rx, ry, rad = work_f[W_RX], work_f[W_RY], work_f[W_RAD]
    if q < n:       # line = [0 .. p] + [X] + [q+1 .. n-1]
        m = p + 1
        x[m], y[m], pin[m], ign[m], rad[m] = cx, cy, -1, -1, UNKNOWN
        m += 1
        for k in range(q + 1, n):
            x[m], y[m], pin[m], ign[m] = x[k], y[k], pin[k], ign[k]
            rx[m], ry[m], rad[m] = rx[k], ry[k], rad[k]
            m += 1
        return m
    m = 0           # across the seam: line = [q+1-n .. p] + [X]
    for k in range(q + 1 - n, p + 1):
        x[m], y[m], pin[m], ign[m] = x[k], y[k], pin[k], ign[k]
        rx[m], ry[m], rad[m] = rx[k], ry[k], rad[k]
        m += 1
    x[m], y[m], pin[m], ign[m], rad[m] = cx, cy, -1, -1, UNKNOWN
    return m + 1


@njit(**JIT)
def _reconnect_all(line, n, prm, meta, loops, field, work_f, work_i):
    """Reconnect every contact of the line; return (node count, whether the loop buffers ran
    full: then grow them and call again).

    Each round lists the contacts (:func:`find_contacts`, pairs in the capture rows) and
    reconnects them from the end of the line backwards, each pair lying wholly before the last
    one done (so that the indices it names are still valid); a pair across the seam renumbers
    the line and ends the round.  The chord tangents are then recomputed
    (:func:`_chord_tangents`, as :func:`node_pass` would) and the line searched again, until no
    contact is left: a line touching itself in many places is resolved without a force pass, or a
    search, per contact.  After a cut the crossing search is not run again where the search
    that found the cut can tell the cut line does not cross itself
    (:func:`_cut_leaves_no_crossing`).
    """
    x, y = line[0], line[1]
    ci, cj = work_i[I_CAPTURE, :MAX_CAPTURES], work_i[I_CAPTURE, MAX_CAPTURES:2 * MAX_CAPTURES]
    Lx = prm.Lx
    uncrossed = False       # the last change was a cut that left the line not crossing itself
    while True:
        meta[M_CONTACT_CHECKS] += 1
        k = find_contacts(line, n, prm, work_f, work_i, ci, cj)
        _sort_pairs(k, ci, cj)
        done = False
        limit = n                      # pairs must lie wholly before the last one reconnected
        for q in range(k - 1, -1, -1):
            i, j = ci[q], cj[q]
            if j >= limit:
                continue
            across = x[j] - x[i] > 0.5 * Lx   # then the line is renumbered from i + 1
            n_new = reconnect(line, n, i, j, meta, loops, field, work_f)
            if n_new < 0:
                return n, True
            if n_new == n:
                continue
            n = n_new
            meta[M_RECONNECT] += 1
            done = True
            limit = i
            if across:
                break
        if not done:   # no contact left: cut where the line crosses itself, if it does
            if uncrossed:
                return n, False
            p, q, t, alone = _crossing_search(line, n, prm, work_i)
            if p < 0:
                return n, False
            n_new = cut_crossing(line, n, p, q, t, prm, meta, loops, field, work_f)
            if n_new < 0:
                return n, True
            uncrossed = alone and _cut_leaves_no_crossing(line, n, n_new, p, q, prm, work_i)
            n = n_new
            meta[M_RECONNECT] += 1
        else:
            uncrossed = False
        _chord_tangents(x, y, n, Lx, work_f[W_NTX], work_f[W_NTY])


@njit(**JIT)
def _sort_pairs(k, ci, cj):
    """Order contact pairs by their first node (insertion sort: there are few)."""
    for a in range(1, k):
        b = a
        while b > 0 and ci[b - 1] > ci[b]:
            ci[b - 1], ci[b] = ci[b], ci[b - 1]
            cj[b - 1], cj[b] = cj[b], cj[b - 1]
            b -= 1


@njit(**JIT)
def _chord_tangents(x, y, n, Lx, ntx, nty):
    """Unit chord tangents (r_{i+1} - r_{i-1})/|...| of every node, as in :func:`node_pass`."""
    for i in range(n):
        xm, ym, xp, yp = _neighbours(x, y, n, i, Lx)
        cx, cy = xp - xm, yp - ym
        inv_c = 1.0 / np.sqrt(cx * cx + cy * cy)
        ntx[i], nty[i] = cx * inv_c, cy * inv_c


@njit(**JIT)
def _release(line, n, prm, field, work_f, meta, loops, nodes):
    """Free every pinned node whose force (row W_FPIN) exceeds its obstacle's strength; return
    the count, -1 if the loop buffers are full (nothing more is released: grow them, call again).
    The freed nodes are listed in ``nodes`` (for :func:`_refresh_released`).

    A pin whose arms have crossed behind it (force infinite, :func:`_arms_crossed`) is past any
    critical angle: a shearable obstacle is released; an impenetrable one (infinite strength) is
    bypassed the Orowan way, by a loop of zero size left round it (one node at the obstacle,
    which keeps it held), while the line node leaves it.  An obstacle nothing holds any more
    shrinks the nodes' obstacle-free discs (:func:`_obstacle_freed`).
    """
    x, y, pin, ign = line
    fpin = work_f[W_FPIN]
    ofc = field[2]
    released = 0
    for i in range(n):
        k = pin[i]
        if k >= 0 and (fpin[i] > ofc[k] or fpin[i] == np.inf):
            if ofc[k] == np.inf:
                if not _store_loop(x, y, pin, n, i, i, 0.0, meta, loops):
                    return -1
            else:
                _unhold(k, y[i], n, prm, field, work_f)
            pin[i] = -1
            ign[i] = k
            nodes[released] = i
            released += 1
    return released


@njit(**JIT)
def _unhold(k, py, n, prm, field, work_f):
    """A line node at height py lets go of obstacle k: one holder less of that image, and, if it
    is free now, the discs it lies in shrink (:func:`_obstacle_freed`)."""
    field[3][k] -= _occ_unit(field, k, py)
    if not _held(field, k, py):
        _obstacle_freed(k, n, prm, field, work_f)


@njit(**JIT)
def _obstacle_freed(k, n, prm, field, work_f):
    """An image of obstacle k has just become free: shrink every node's obstacle-free disc that
    k's nearest image now lies in (:func:`move_and_capture`: no free obstacle within
    W_RAD + l_max/2 of the disc's centre), so that those nodes' segments are tested exactly
    again; the other discs stay valid (the freed image is no nearer than the nearest one)."""
    ox, oy, Lx, Ly = field[0][k], field[1][k], field[8], field[9]
    rx, ry, rad = work_f[W_RX], work_f[W_RY], work_f[W_RAD]
    half = 0.5 * prm.l_max
    inv_x, inv_y = 1.0 / Lx, 1.0 / Ly
    for i in range(n):
        r = rad[i]
        if r > 0.0:
            dx, dy = ox - rx[i], oy - ry[i]
            dx -= Lx * np.rint(dx * inv_x)           # the nearest image
            dy -= Ly * np.rint(dy * inv_y)
            d2 = dx * dx + dy * dy
            if d2 < (r + half) * (r + half):
                rad[i] = np.sqrt(d2) - half


@njit(**JIT)
def _remesh_line(line, n, prm, first_bad, field, work_f, work_i):
    """:func:`remesh` from ``first_bad`` on, the node clearances and (MODEL_SELF) the non-local
    self-stress (row W_FAR) following; return the count."""
    n, lo = remesh(line, n, prm, first_bad, field, work_f, work_i)
    src = work_i[I_SRC]
    _gather_clearance(lo, n, src, work_f[W_RX], work_f[W_RY], work_f[W_RAD], work_f[W_BX],
                      work_f[W_BY])
    if prm.model == MODEL_SELF:
        _gather_far(lo, n, src, work_f[W_FAR], work_f[W_BX])
    return n


@njit(**JIT)
def _gather_far(lo, n, src, far, buf):
    """Carry the non-local self-stress of nodes lo.. through a remesh (``src``: old index or -1);
    a new node takes the mean of its neighbours' values (the field is smooth on the node
    spacing, and it is evaluated afresh within prm.refresh steps)."""
    for m in range(lo, n):
        buf[m] = far[src[m]] if src[m] >= 0 else np.nan
    for m in range(lo, n):
        far[m] = buf[m]
    for m in range(lo, n):
        if np.isnan(far[m]):
            before = far[m - 1] if m > 0 else far[n - 1]
            k = m + 1
            while k < n and np.isnan(far[k]):
                k += 1
            after = far[k] if k < n else far[0]
            if np.isnan(before):
                before = after
            if np.isnan(after):
                after = before
            far[m] = 0.5 * (before + after)


@njit(**JIT)
def _gather_clearance(lo, n, src, rx, ry, rad, buf_a, buf_b):
    """Reorder the clearances of nodes lo.. after remeshing (``src``: old index or -1, see
    :func:`remesh`)."""
    for m in range(lo, n):
        k = src[m]
        if k >= 0:
            buf_a[m], buf_b[m] = rx[k], ry[k]
    for m in range(lo, n):
        if src[m] >= 0:
            rx[m], ry[m] = buf_a[m], buf_b[m]
    for m in range(lo, n):
        buf_a[m] = rad[src[m]] if src[m] >= 0 else UNKNOWN
    for m in range(lo, n):
        rad[m] = buf_a[m]


@njit(**JIT)
def model_forces(line, n, prm, meta, loops, work_f, fresh):
    """Internal stress (row W_TAU_INT) and extra line-tension forces (W_FEX, W_FEY) of the model.

    - MODEL_CONSTANT: nothing to do (the constant Γ is in :func:`node_pass`).
    - MODEL_DWK: W_FEX, W_FEY = de Wit–Koehler nodal forces (:func:`dlsim.elastic.dwk_forces`),
      and prm.gamma is 0.
    - MODEL_SELF: at a free node W_TAU_INT = the line's non-singular self-stress (window of
      images plus straight remainder, :func:`dlsim.elastic.self_stress`) plus the stress of the
      stored Orowan ``loops`` (:func:`dlsim.elastic.loop_stress`), W_FEX = W_FEY = 0; prm.gamma
      is 0.  The non-local part (W_FAR: everything except the node's own arms) is evaluated only
      when ``fresh`` (the caller asks every prm.refresh steps and after reconnections; remeshing
      and captures carry it to the new nodes, :func:`_gather_far`, :func:`insert_pins`); the
      local part (W_NEAR, :func:`dlsim.elastic.local_stress`, the stiff one) at every call.
      At a pinned node, where the arc treatment of the own arms does not hold (the arms meet at a
      corner), the force on the obstacle is the de Wit–Koehler pull of its two arms (in
      W_FEX, W_FEY, cut-offs prm.a_core, prm.r_out) plus the Peach–Koehler force of the applied
      and the non-local stress (W_TAU_INT = W_FAR).

    Row W_FAR persists between calls; W_NEAR and W_BUF are scratch.
    """
    model = prm.model
    if model == MODEL_CONSTANT:
        return
    x, y, pin, _ = line
    tau_int, fex, fey = work_f[W_TAU_INT], work_f[W_FEX], work_f[W_FEY]
    far, near, buf = work_f[W_FAR], work_f[W_NEAR], work_f[W_BUF]
    Lx, theta, nu, a = prm.Lx, prm.theta, prm.nu, prm.a_core
    dwk_forces(x, y, n, Lx, theta, nu, a, prm.r_out, pin, fex, fey)
    if model == MODEL_DWK:
        return
    n_img = prm.images
    if fresh:
        copies = 2 * n_img + 1
        if n * n * copies >= PARALLEL_MIN_PAIRS:
            self_stress(x, y, n, Lx, theta, nu, a, n_img, prm.cutoff, far)
        else:
            self_stress_serial(x, y, n, Lx, theta, nu, a, n_img, prm.cutoff, far)
        n_loops = meta[M_NLOOPS]
        if n_loops > 0:
            lx, ly, _, loff = loops
            if n * loff[n_loops] * copies >= PARALLEL_MIN_PAIRS:
                loop_stress(x, y, n, lx, ly, loff, n_loops, Lx, theta, nu, a, n_img, buf)
            else:
                loop_stress_serial(x, y, n, lx, ly, loff, n_loops, Lx, theta, nu, a, n_img, buf)
            for i in range(n):
                far[i] += buf[i]
    local_stress(x, y, n, Lx, theta, nu, a, near)
    for i in range(n):
        if fresh:
            far[i] -= near[i]
        if pin[i] >= 0:
            tau_int[i] = far[i]
        else:
            tau_int[i] = far[i] + near[i]
            fex[i] = 0.0
            fey[i] = 0.0


@njit(**JIT)
def time_step(prm):
    """Time step of the point-implicit update (STEP_STIFFNESS; time unit 1/(M G)), the unit
    of the implicit step's length (SETTLE_STEP)."""
    h = 0.5 * (prm.l_min + prm.l_max)
    return STEP_STIFFNESS * h * h / (2.0 * prm.mobility * prm.stiffness)


@njit(**JIT)
def implicit_step_bounds(prm):
    """(dt0, cap, dt_low) of the implicit step: :func:`time_step`, the displacement cap
    MAX_MOVE_FRACTION l_min, and the shortest step, the time a straight free line needs to glide
    the cap (dt0 if that is shorter)."""
    dt0 = time_step(prm)
    cap = MAX_MOVE_FRACTION * prm.l_min
    drive = prm.mobility * (abs(prm.tau) - prm.tau_f)   # a straight free line's speed
    return dt0, cap, (dt0 if drive * dt0 <= cap else cap / drive)


@njit(**JIT)
def next_implicit_step(dt, big, cap, dt0):
    """The implicit step after one of length ``dt`` whose fastest limited node moved ``big``
    (:func:`implicit_displacements`; -1: a point-implicit step): grown by IMPLICIT_GROWTH at the
    most, towards the length at which that node moves ``cap``, never past SETTLE_STEP dt0."""
    if 0.0 <= big * IMPLICIT_GROWTH <= cap:
        return min(dt * IMPLICIT_GROWTH, SETTLE_STEP * dt0)
    if 0.0 < big < cap:
        return min(dt * cap / big, SETTLE_STEP * dt0)
    return dt


@njit(**JIT)
def _first_bad(line, n, prm):
    """:func:`node_pass`'s ``first_bad`` alone: the first segment longer than l_max, or shorter
    than l_min with a free end, -1 if none (the same lengths, by the same arithmetic).

    A squared length clear of both bounds squared by a relative 1e-9 (far above the rounding of
    the root) is within them whatever the root rounds to; only the others take the root.
    """
    x, y, pin = line[0], line[1], line[2]
    Lx, lmin, lmax = prm.Lx, prm.l_min, prm.l_max
    above_min, below_max = lmin * lmin * (1.0 + 1e-9), lmax * lmax * (1.0 - 1e-9)
    for i in range(n):
        if i < n - 1:
            xj, yj, pj = x[i + 1], y[i + 1], pin[i + 1]
        else:
            xj, yj, pj = x[0] + Lx, y[0], pin[0]
        bx, by = xj - x[i], yj - y[i]
        b2 = bx * bx + by * by
        if above_min < b2 < below_max:
            continue
        b = np.sqrt(b2)
        if b > lmax or (b < lmin and (pin[i] < 0 or pj < 0)):
            return i
    return -1


@njit(**JIT)
def _forces(line, n, prm, meta, loops, field, work_f, work_i, fresh, reconnected):
    """The line model's forces, then :func:`node_pass`; remesh first if a segment is out of
    bounds (the line was changed since the last move).  Returns (node count, node_pass's
    results).

    Just after a reconnection (``reconnected``) a segment is out of bounds more often than not
    (the joining node lies anywhere along its neighbours' segments), and the pass would be done
    again after remeshing: the bounds are then looked up first (:func:`_first_bad`, a square
    root per segment instead of the whole pass).
    """
    model_forces(line, n, prm, meta, loops, work_f, fresh)
    bad = _first_bad(line, n, prm) if reconnected else -1
    if bad < 0:
        out = node_pass(line, n, prm, work_f)
        bad = out[1]
    if bad >= 0:
        meta[M_REMESH] += 1
        n = _remesh_line(line, n, prm, bad, field, work_f, work_i)
        model_forces(line, n, prm, meta, loops, work_f, False)
        out = node_pass(line, n, prm, work_f)
    return n, out


@njit(**JIT)
def _advance(line, n, dt, dt_low, prm, meta, field, work_f, work_i):
    """Move the free nodes by one step, pin what they swept and remesh where a segment left its
    bounds; return (node count, the step's length, the largest displacement it asked for).

    The constant-Γ and de Wit–Koehler lines take the backward-Euler step of length ``dt`` along
    their chains (:func:`implicit_displacements`), shortened (not below ``dt_low``) when a node
    that a shorter step would slow would move more than MAX_MOVE_FRACTION l_min; the self-stress
    line, and a line without a pin (one periodic chain), the point-implicit step of
    :func:`time_step` (largest displacement -1).  Either way no node moves more than
    MAX_MOVE_FRACTION l_min and :func:`move_and_capture` pins every obstacle the segments sweep.
    An implicit step stops each chain where it first meets an obstacle (:func:`_first_contacts`),
    so that the chain is pinned there, on the line, and not a step past it.
    """
    big = -1.0
    dt0 = time_step(prm)
    if prm.model != MODEL_SELF:
        big = implicit_displacements(line, n, dt, prm, work_f)
        cap = MAX_MOVE_FRACTION * prm.l_min
        if big > cap and dt > dt_low:
            dt = max(dt * cap / big, dt_low)
            big = implicit_displacements(line, n, dt, prm, work_f)
    if big >= 0.0:
        _implicit_moves(line[2], n, work_f)
        x, y = line[0], line[1]
        work_f[W_BX, :n] = x[:n]
        work_f[W_BY, :n] = y[:n]
        ncap, bad = move_and_capture(line, n, 1.0, prm, field, work_f, work_i)
        if ncap > 0:
            ncap, back = _first_contacts(line, n, ncap, prm, work_f, work_i)
            if back >= 0:
                bad = back if bad < 0 else min(bad, back)
        if dt >= SETTLE_STEP * dt0:
            meta[M_SETTLE] += 1
    else:
        ncap, bad = move_and_capture(line, n, dt0, prm, field, work_f, work_i)
    if ncap > 0:
        meta[M_CAPTURES] += ncap
        n = insert_pins(line, n, ncap, field, work_f, work_i)
        first = work_i[I_CAPTURE, 0]          # the first capture's segment, once sorted
        bad = first if bad < 0 else min(bad, first)   # pins split segments
    if bad >= 0:   # remesh now, so that the next step's node_pass is its only one
        meta[M_REMESH] += 1
        n = _remesh_line(line, n, prm, bad, field, work_f, work_i)
    return n, dt, big


@njit(**JIT)
def _first_contacts(line, n, ncap, prm, work_f, work_i):
    """Stop every chain that swept obstacles in this step where it met the first of them; return
    (the captures kept, the first segment out of its bounds among the chains stopped, -1: none).

    Within a step each node moves on a straight path from its place before the step (rows W_BX,
    W_BY) to its place after it; the time each captured obstacle was met is when it lay on its
    segment (:func:`_contact_time`).  A chain of free nodes between two pins that swept several
    obstacles met the first of them first, and that one pins it: the nodes of the chain are put
    back to where they were at that time (:func:`_put_back`), so that the obstacle
    lies on the line, and the obstacles it would have met later are not captured (the chain,
    behind them, sweeps them in a later step if it still gets there).  Chains do not feel each
    other within a step (the pins between them hold), so each keeps its own first contact; a
    step that captures nothing is unchanged.  Scratch row W_NEAR (the contact times).
    """
    x, y, pin = line[0], line[1], line[2]
    bx, by, when = work_f[W_BX], work_f[W_BY], work_f[W_NEAR]
    captures = _captures(work_f, work_i)
    _sort_captures(ncap, captures)
    seg, pos, obs, cx, cy = captures
    Lx = prm.Lx
    for c in range(ncap):
        s = seg[c]
        s1, sh = (s + 1, 0.0) if s < n - 1 else (0, Lx)
        when[c] = _contact_time((bx[s], by[s], x[s], y[s]),
                                (bx[s1] + sh, by[s1], x[s1] + sh, y[s1]), cx[c], cy[c])
    # runs of captures on one chain (no pin between their segments), from one after a pin
    start = 0
    for c in range(ncap):
        before = seg[c - 1] if c > 0 else seg[ncap - 1] - n
        if _pinned_between(pin, n, before, seg[c]):
            start = c
            break
    bad = -1
    c = start
    done = 0
    while done < ncap:
        last, size = c, 1
        t = when[c]
        while size < ncap:
            nxt = last + 1 if last + 1 < ncap else 0
            if _pinned_between(pin, n, seg[last], seg[nxt] if nxt > last else seg[nxt] + n):
                break
            last, size = nxt, size + 1
            t = min(t, when[nxt])
        k = c
        for _ in range(size):
            if when[k] > t:
                obs[k] = -1               # met later than the first: not reached
            k = k + 1 if k + 1 < ncap else 0
        if t < 1.0:
            back = _put_back(line, n, seg[c], t, prm, work_f)
            if back >= 0:
                bad = back if bad < 0 else min(bad, back)
        done += size
        c = last + 1 if last + 1 < ncap else 0
    kept = 0
    for c in range(ncap):
        if obs[c] >= 0:
            seg[kept], pos[kept], obs[kept], cx[kept], cy[kept] = seg[c], pos[c], obs[c], cx[c], cy[c]
            kept += 1
    return kept, bad


@njit(**JIT)
def _pinned_between(pin, n, a, b):
    """Whether a pinned node lies among nodes a+1 .. b (b >= a, indices mod n)."""
    for q in range(a + 1, b + 1):
        if pin[q % n] >= 0:
            return True
    return False


@njit(**JIT)
def _put_back(line, n, s, t, prm, work_f):
    """Put the free nodes of the chain through segment s back to the fraction t of their step
    (from rows W_BX, W_BY); a disc that no longer holds its node is UNKNOWN (one that does still
    holds the node's next straight step's start, :func:`move_and_capture`).  Returns the first of
    the chain's segments out of [l_min, l_max] (-1: none)."""
    x, y, pin = line[0], line[1], line[2]
    bx, by = work_f[W_BX], work_f[W_BY]
    rx, ry, rad = work_f[W_RX], work_f[W_RY], work_f[W_RAD]
    Lx, lmin2, lmax2 = prm.Lx, prm.l_min * prm.l_min, prm.l_max * prm.l_max
    lo = s + n
    while pin[lo % n] < 0:
        lo -= 1
    hi = s + 1 + n
    while pin[hi % n] < 0:
        hi += 1
    for q in range(lo + 1, hi):
        i = q % n
        x[i] = bx[i] + t * (x[i] - bx[i])
        y[i] = by[i] + t * (y[i] - by[i])
        if rad[i] > 0.0 and not _inside(x[i], y[i], rx[i], ry[i], rad[i]):
            rad[i] = UNKNOWN
    bad = -1
    for q in range(lo, hi):
        i, j = q % n, (q + 1) % n
        ex, ey = x[j] + (Lx if j == 0 else 0.0) - x[i], y[j] - y[i]
        e2 = ex * ex + ey * ey
        if e2 > lmax2 or e2 < lmin2:
            bad = i if bad < 0 else min(bad, i)
    return bad


@njit(**JIT)
def _contact_time(a, b, ox, oy):
    """The earliest fraction t in [0, 1] of a step at which the point (ox, oy) lies on the line
    through the segment's ends, each moving straight from (x0, y0) to (x1, y1) (``a``, ``b`` =
    (x0, y0, x1, y1)); 1 if it does not.

    The cross product of the segment with the point's offset is quadratic in t; the first change
    of its sign is bracketed (at its extremum if that lies inside) and bisected.
    """
    ax, ay, dax, day = a[0], a[1], a[2] - a[0], a[3] - a[1]
    ex, ey = b[0] - ax, b[1] - ay
    fx, fy = b[2] - b[0] - dax, b[3] - b[1] - day
    wx, wy = ox - ax, oy - ay
    c0 = ex * wy - ey * wx
    c1 = (fx * wy - fy * wx) - (ex * day - ey * dax)
    c2 = -(fx * day - fy * dax)
    if c0 == 0.0:
        return 0.0
    hi = 1.0
    if c2 != 0.0:
        te = -0.5 * c1 / c2
        if 0.0 < te < 1.0 and (c0 + (c1 + c2 * te) * te) * c0 <= 0.0:
            hi = te
    if (c0 + (c1 + c2 * hi) * hi) * c0 > 0.0:
        return 1.0
    lo = 0.0
    for _ in range(50):
        mid = 0.5 * (lo + hi)
        if (c0 + (c1 + c2 * mid) * mid) * c0 > 0.0:
            lo = mid
        else:
            hi = mid
    return hi


@njit(**JIT)
def implicit_displacements(line, n, dt, prm, work_f):
    """Backward-Euler displacements of the free nodes over a time ``dt`` (row W_BUF, along the
    normal); return the largest of the nodes the step length limits (b), -1 if the line has no
    pin.

    Along each chain of free nodes between two pinned ones, the normal displacements u solve the
    tridiagonal system of one backward-Euler step, linearised about the current line:

        (1/(M dt) + 2Γ_s/(a_i b_i)) u_i − Γ_s c⁻_i/(a_i l_i) u_{i−1} − Γ_s c⁺_i/(b_i l_i) u_{i+1} = τ_eff,i

    (a_i, b_i the arms, l_i their mean, c±_i the cosines between neighbouring chord tangents,
    Γ_s = prm.stiffness; the diagonal is the point-implicit stiffness of :func:`node_pass`).
    Pins, and nodes friction holds (τ_eff = 0), do not move.  The matrix is an M-matrix (weakly
    diagonally dominant, strictly once 1/(M dt) is added), so a chain pushed one way moves that
    way only, by no more than its linearised equilibrium would: a line near equilibrium settles
    into it without overshooting it, so it sweeps no obstacle beyond it.  The wavelengths much
    longer than sqrt(M Γ_s dt) move by M τ_eff dt, as in an explicit step; the shorter ones, too
    stiff for an explicit step of that length, go to their quasi-static shape.  A node whose own
    stiffness holds it to less than half its explicit move M τ_eff dt (a corner left by a
    release or a capture) moves by about the same whatever the step: the largest displacement
    returned is that of the other nodes, the ones a shorter step would slow.

    Reads rows W_VX, W_VY (the explicit velocities, M τ_eff n), W_NTX, W_NTY from
    :func:`node_pass`, unchanged (:func:`_implicit_moves` writes the displacements to W_VX,
    W_VY); scratch row W_NEAR.  One pass round the line from the first pin solves every chain
    (the Thomas algorithm, each row scaled by a_i b_i l_i/Γ_s), the arms carried from node to
    node, and one pass back substitutes.
    """
    x, y, pin = line[0], line[1], line[2]
    vx, vy = work_f[W_VX], work_f[W_VY]
    ntx, nty = work_f[W_NTX], work_f[W_NTY]
    cp, dp = work_f[W_NEAR], work_f[W_BUF]
    Lx = prm.Lx
    first = -1
    for i in range(n):
        if pin[i] >= 0:
            first = i
            break
    if first < 0:
        return -1.0
    c_dt = 1.0 / (prm.mobility * prm.stiffness * dt)
    inv_mg = 1.0 / (prm.mobility * prm.stiffness)
    # node j of the unwrapped line (j >= n: shifted by Lx); from the first pin round to it again
    xj, yj = x[first], y[first]
    j1 = first + 1
    i1 = j1 if j1 < n else j1 - n
    xn, yn = x[i1] + (Lx if j1 >= n else 0.0), y[i1]
    b = np.sqrt((xn - xj) ** 2 + (yn - yj) ** 2)
    prev_free = False
    c_prev, d_prev = 0.0, 0.0
    for j in range(first + 1, first + n):
        i = i1
        a = b
        xj, yj = xn, yn
        j1 = j + 1
        i1 = j1 if j1 < n else j1 - n
        xn, yn = x[i1] + (Lx if j1 >= n else 0.0), y[i1]
        b = np.sqrt((xn - xj) ** 2 + (yn - yj) ** 2)
        if pin[i] >= 0:
            prev_free = False
            continue
        vn = vy[i] * ntx[i] - vx[i] * nty[i]                  # M τ_eff along the normal
        if vn == 0.0:           # held by friction (or exactly at rest): fixed this step
            cp[i], dp[i] = 0.0, 0.0
            prev_free = False
            continue
        l = 0.5 * (a + b)
        ab = a * b
        den = (c_dt * ab + 2.0) * l
        rhs = vn * ab * l * inv_mg
        if prev_free:
            im = i - 1 if i > 0 else n - 1
            lower = (ntx[i] * ntx[im] + nty[i] * nty[im]) * b
            den -= lower * c_prev
            rhs += lower * d_prev
        upper = (ntx[i] * ntx[i1] + nty[i] * nty[i1]) * a if pin[i1] < 0 else 0.0
        inv = 1.0 / den
        c_prev, d_prev = upper * inv, rhs * inv
        cp[i], dp[i] = c_prev, d_prev
        prev_free = True
    # back substitution, u = 0 at the pins and the held nodes (cp = dp = 0)
    big = 0.0
    u_next = 0.0
    for j in range(first + n - 1, first, -1):
        i = j if j < n else j - n
        if pin[i] >= 0:
            u_next = 0.0
            continue
        u = dp[i] + cp[i] * u_next
        dp[i] = u
        u_next = u
        if 2.0 * abs(u) >= dt * abs(vy[i] * ntx[i] - vx[i] * nty[i]):
            big = max(big, abs(u))
    return big


@njit(**JIT)
def _implicit_moves(pin, n, work_f):
    """Write the displacements of :func:`implicit_displacements` (row W_BUF, along the normal) to
    the free nodes' W_VX, W_VY, with zero stiffness in W_FPIN: :func:`move_and_capture` with
    dt = 1 then moves the nodes by them."""
    vx, vy, fpin, u = work_f[W_VX], work_f[W_VY], work_f[W_FPIN], work_f[W_BUF]
    ntx, nty = work_f[W_NTX], work_f[W_NTY]
    for i in range(n):
        if pin[i] < 0:
            vx[i], vy[i] = -u[i] * nty[i], u[i] * ntx[i]
            fpin[i] = 0.0


@njit(**JIT)
def relax_line(line, meta, prm, max_steps, field, loops, work_f, work_i):
    """Relax the line at fixed stress until equilibrium, flow, or ``max_steps`` time steps.

    One step: the line model's forces and the node pass (:func:`_forces`, remeshing first if the
    line came in out of bounds); stop if the line has glided the flow distance; release
    overloaded pins (then pass the line again, or with constant Γ update only the freed nodes,
    :func:`_refresh_released`); reconnect parts of opposite sense in contact (only searched for
    when some node has turned past 60°); stop at equilibrium; otherwise advance the free nodes by
    one implicit step (IMPLICIT_GROWTH; the self-stress line: the point-implicit step,
    STEP_STIFFNESS), pin every obstacle swept on the way and remesh where a segment left its
    bounds (:func:`_advance`).  The implicit step's length is carried to the next call
    (DT_SLOT); a release (here, in a crossing cut or between calls) shortens it to at most
    :func:`time_step`, since the two chains it joins make a longer one whose slow modes the step
    might carry beyond the cap.

    Parameters
    ----------
    line : (x, y, pin, ign) of capacity cap
        Updated in place (first ``meta[M_N]`` entries used).
    meta : (N_META,) int64
        Counts, updated in place.
    prm : parameter record (dlsim.contract.pack_parameters)
    max_steps : int
        Time steps allowed in this call.
    field : obstacle field tuple (dlsim.contract); its ``opin`` is updated.
    loops : loop buffers (dlsim.contract)
    work_f : (N_WORK_F, cap) float64 and work_i : (N_WORK_I, cap) int64
        Work rows (cap >= 4 MAX_CAPTURES), zeroed by the caller at the start of a relaxation;
        W_TAU_INT stays zero for the line-tension models, W_FAR carries the non-local self-stress
        and W_CAPTURE[DT_SLOT] the implicit step between calls; the node clearances are reset at
        every call.

    Returns
    -------
    int
        EQUILIBRIUM, FLOWING, MAX_STEPS or CAPACITY (grow the arrays and call again).
    """
    cap = line[0].shape[0]
    Lx = prm.Lx
    n = meta[M_N]
    work_f[W_RAD, :n] = UNKNOWN       # the line may have changed since the last call
    moved = 0
    searched = False
    reconnections = meta[M_RECONNECT]
    refresh = max(prm.refresh, 1)
    stale = True            # the non-local self-stress must be evaluated (MODEL_SELF)
    dt0, cap_move, dt_low = implicit_step_bounds(prm)
    dt, seen = work_f[W_CAPTURE, DT_SLOT], work_f[W_CAPTURE, DT_SLOT + 1]
    if dt <= 0.0:
        dt, seen = dt_low, float(meta[M_RELEASES])
    since = 0               # moves since the non-local self-stress was evaluated
    for _ in range(PASSES_PER_STEP * max_steps):
        if moved >= max_steps:
            break
        if 2 * n + HEADROOM > cap:   # room to insert captures, then remesh
            meta[M_N] = n
            return CAPACITY
        fresh = stale or since >= refresh
        n, passed = _forces(line, n, prm, meta, loops, field, work_f, work_i, fresh,
                            searched)
        area, _, max_te, _, _, turned = passed
        if fresh:
            stale, since = False, 0
        if (area - prm.area_ref) / Lx > prm.flow:
            meta[M_N] = n
            return FLOWING
        released = _release(line, n, prm, field, work_f, meta, loops, work_i[I_KEEP])
        if released < 0:
            meta[M_N] = n
            return CAPACITY
        if released > 0:
            meta[M_RELEASES] += released
            if prm.model != MODEL_CONSTANT:
                continue
            # nothing moved: update the freed nodes, not the whole line (a pass again would
            # release nothing more, the other pins' forces being the same)
            done, passed = _refresh_released(line, n, prm, work_f, work_i[I_KEEP], released,
                                             passed)
            if not done:
                continue
            area, _, max_te, _, _, turned = passed
        # no free node turned past 60° from x: no two parts can be antiparallel; just after a
        # round of reconnections the line has been searched already
        if turned > 0 and not searched:
            n_new, full = _reconnect_all(line, n, prm, meta, loops, field, work_f, work_i)
            if full:      # earlier reconnections of the round stand: keep their node count
                meta[M_N] = n_new
                return CAPACITY
            if n_new != n or meta[M_RECONNECT] != reconnections:
                n, reconnections, searched = n_new, meta[M_RECONNECT], True
                stale = True
                continue
        searched = False
        if max_te < prm.tolerance:
            meta[M_N] = n
            return EQUILIBRIUM
        if meta[M_RELEASES] != seen:    # here, in a crossing cut or between calls
            dt, seen = min(dt, dt0), float(meta[M_RELEASES])
        n, dt, big = _advance(line, n, dt, dt_low, prm, meta, field, work_f, work_i)
        dt = next_implicit_step(dt, big, cap_move, dt0)
        work_f[W_CAPTURE, DT_SLOT], work_f[W_CAPTURE, DT_SLOT + 1] = dt, seen
        moved += 1
        since += 1
        meta[M_STEPS] += 1
    meta[M_N] = n
    return MAX_STEPS
