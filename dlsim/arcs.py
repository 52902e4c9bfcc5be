"""Exact quasi-static arc construction for point obstacles (Foreman & Makin, Phil. Mag. 14, 1966).

Under a constant line tension Γ and a uniform resolved shear stress τ, every free segment of the
line between two pinning points is a circular arc of radius R = Γ/(τ b) (the line-tension relation;
Hirth & Lothe, *Theory of Dislocations*, 1982, ch. 7).  The line is therefore a periodic chain of
arcs between pinned point obstacles, and its monotonic quasi-static loading can be followed
geometrically, event by event, without time steps.  This module builds that construction and finds
the critical resolved shear stress (CRSS) exactly: the stress is raised to the next *event stress*
(the smallest stress at which some arc or pin of the current stable configuration becomes
unstable), the avalanche that follows runs at that fixed stress, and the CRSS is the event stress
at which the line glides the flow distance without being held.

Reduced units throughout (lengths in b, stress in G, Γ in G b²).  Inside the kernels the stress
is carried as ``s = τ/(2Γ) = 1/(2R)`` (the half curvature of the arcs).

The construction, its event types, the avalanche order and its limits are described in
DEVELOPERS.md ("The arc solver").  :func:`find_crss_arcs` is the public entry point;
:func:`arc_limitations` says whether a field and line model are within its reach.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
from numba import njit

from dlsim import contract as K
from dlsim.fields import ObstacleField
from dlsim.jit import JIT
from dlsim.line import LineState
from dlsim.solver import CrssResult, LineModel, Protocol, Relaxation

# --- numerical knobs -----------------------------------------------------------------------------
#: Events whose stress lies within this relative distance above the current stress happen at the
#: current stress (ties of degenerate geometry, e.g. every pin of a square array at once).  Far
#: above rounding (1e-16) and far below any physical spread of event stresses.
STRESS_TIE = 1e-12
#: Rotation angles (rad) within this of each other, or of zero, count as equal: a roll that meets an
#: obstacle lying on its starting circle (to rounding) meets it at once.
ANGLE_TIE = 1e-12
#: Points closer than this fraction of R are the same point (shared ends of arcs, contact points).
POINT_TIE = 1e-9
#: Largest centre offset of an arc considered when looking for contacts near zero stress, in units
#: of the size of the pair (a contact at a radius above 10^6 times the pair's size would need two
#: nearly straight arcs already touching).
TANGENT_CAP = 1e6
#: Images of an obstacle above the lowest image not yet passed that can be marked passed exactly
#: (a bit mask per obstacle); the line would have to span 62 box heights to exceed it.
IMAGE_BITS = 62
#: Safety bound on elementary events per obstacle of the field and per box height of glide
#: (measured: about 3 per obstacle for impenetrable and 6 for weak random points).
EVENTS_PER_OBSTACLE = 400
#: A history row is written when the stress has risen by this fraction since the last one (and at
#: the end), so that large fields do not give one row per avalanche.
HISTORY_STRESS_BIN = 0.01
#: Rows of the history buffer between returns to Python.
HISTORY_CHUNK = 4096
#: Candidate hits of a roll found invalid (lying beyond the line's crossing of its old position)
#: that are remembered while looking for the next one.
MAX_EXCLUDED = 32

# --- state layout: rows of the pin arrays --------------------------------------------------------
PX, PY, PAL = 0, 1, 2                 # float rows: position (b), chord angle α (rad, continuous)
N_PF = 3
(PK, PIY, PPREV, PNEXT, PSH, PVER, PAVER, PGEN, PST, PJST, PAEP, PSAME, PLNK) = range(13)
N_PI = 13
# PK obstacle, PIY y-image, PPREV/PNEXT line order, PSH periods to add to the next pin's x,
# PVER arms version, PAVER right-arc version, PGEN allocation count, PST state (0 free, 1 on the
# line, 2 left the line in the current avalanche), PJST journal epoch, PAEP allocation epoch,
# PSAME next pin on the same obstacle, PLNK free/deferred list link.
ST_FREE, ST_LINE, ST_DEFERRED = 0, 1, 2

# event payload rows (per element e: arc of slot i is e = 2i, pin of slot i is e = 2i + 1)
EKIND, EVER, EA, EB, EC, ED, EE = range(7)
N_EP = 7
EV_NONE, EV_CAPTURE, EV_INSTABLE, EV_TANGENT, EV_SWEEP, EV_RELEASE = range(6)

# scalar slots
(F_S, F_DA, F_AGAP, F_SLO, F_SROW, F_AROW, F_AREF, F_BX0, F_BX1, F_BY0, F_BY1,
 F_YTOP) = range(12)
N_SF = 12
FPR = N_SF                      # W_FS: scalars, then parameters, roll state, roll candidate
FRF = FPR + 9
FCB = FRF + 6
N_FS = FCB + 6
(I_NPINS, I_FREE, I_NFREE, I_DEFER, I_HN, I_EPOCH, I_JN, I_ANCHOR, I_EVENTS, I_CAPT, I_REL,
 I_BYP, I_LOOPS, I_NGAP, I_APN, I_NLOOP, I_NLARC, I_LTRUNC, I_NHIST, I_STAMP, I_DBEHIND,
 I_DFOLD, I_DXMISS, I_TRANSL, I_UNRES, I_NTOUCH, I_NEX, I_NEXTSNAP, I_SNAPEVERY, I_MAXEV,
 I_ROWEV, I_LOOPSPIN, I_LARCPIN, I_NCX, I_NCY, I_ANCX, I_ANCY, I_LASTPIN, I_PINSROW,
 I_DINVALID, I_TSTAMP, I_SWEPT, I_JON, I_WLENS, I_WSCAN, I_WFLAG, I_WTRANS, I_WARCS,
 I_WPAIRS, I_WHY, I_MAXGAP, I_MAXLOOP, I_GHEAD, I_GROLL, I_GEN, I_GLIN, I_GSTAMP) = range(57)
N_SI = 57
IRI = N_SI                      # W_IS: scalars, then roll state, roll candidate, exclusions
ICBI = IRI + 4
IEX = ICBI + 4
N_IS = IEX + 4 * MAX_EXCLUDED
(R_LX, R_LY, R_FLOW, R_SMAX, R_OCWX, R_OCWY, R_ACW, R_ACH, R_H) = range(9)
N_PR = 9

# roll state
RP, RMP, RN, RMN = range(4)                      # ints: pivot, its period offset, target, offset
RCX, RCY, RPHI0, RUNX, RUNY, RPHIN = range(6)    # floats: start centre, pivot angle, target arm
# candidate of a roll
CK_NONE, CK_OBST, CK_TARGET, CK_PIN, CK_ARC = range(5)

# kernel return codes
S_FLOW, S_GIVEUP, S_MAXEV, S_SNAP, S_HIST, S_GROW, S_FATAL = range(7)
STATUS_NAMES = ("flowing", "no flow", "event limit", "snapshot", "history", "grow", "capacity")

# The work arrays, few of them: numba's compile time grows with the length of the tuple every
# kernel takes (measured: 0.4 s a function for 36 arrays, 0.1 s for 4).  Related arrays share a
# 2-D array; the names the kernels use are row views of it (offsets below).
(W_FP, W_EK, W_OB, W_LS, W_LR, W_HR, W_FS, W_IP, W_EH, W_OJ, W_CSI, W_AG, W_AP, W_GE, W_LO,
 W_IS) = range(16)
N_W = 16
FJ, FG = 3, 4                   # W_FP: pin rows PX, PY, PAL, journal α, then 6 gap-arc rows
N_FP = FG + 6
IJ, ITL, IST, IQB, ITS, IGV = 13, 18, 19, 20, 21, 22   # W_IP: pin rows, journal (5), lists
N_IP = 23
EHP = 7                         # W_EH: event payload rows, then the heap (2 rows)
N_EH = EHP + 2
OJO = 6                         # W_OJ: obstacle rows (6), then the flags journal (3 rows)
N_OJ = OJO + 3
LSK = 6                         # W_LS, W_LR: arc rows (6) and the pin at the arc's start
N_LA = 7
# history row fields
H_S, H_AREA, H_SWEPT, H_PINS, H_EVENTS, H_NODES, H_FLOW = range(7)
N_HR = 7


@njit(**JIT)
def _citems(W):
    """Obstacles of the cell list (W_CSI holds the cell starts, then the items)."""
    return W[W_CSI][W[W_IS][I_NCX] * W[W_IS][I_NCY] + 1:]


# --- plane geometry (all arcs have the radius R of the current stress) ---------------------------
@njit(**JIT)
def _pang(c, s):
    """Pseudo-angle in [0, 4) of the direction (c, s), monotone in its polar angle (diamond angle;
    no transcendental call, linear near 0 so small rotations keep their resolution)."""
    if s >= 0.0:
        if c > 0.0:
            return s / (c + s)
        return 1.0 - c / (s - c)
    if c < 0.0:
        return 2.0 - s / (-c - s)
    return 3.0 + c / (c - s)


@njit(**JIT)
def _cw_p(ux, uy, vx, vy):
    """Clockwise pseudo-angle from direction u to direction v."""
    return _pang(ux * vx + uy * vy, uy * vx - ux * vy)


@njit(**JIT)
def _center(px, py, qx, qy, R):
    """Centre of the arc of radius R from P to Q bulging to the left of P→Q (the forward side).

    The centre lies on the perpendicular bisector, at h = sqrt(R² - c²/4) to the right of the
    chord; a chord longer than 2R (an unstable arc) gets h = 0, the semicircle.
    """
    dx, dy = qx - px, qy - py
    c = math.sqrt(dx * dx + dy * dy)
    h2 = R * R - 0.25 * c * c
    h = math.sqrt(h2) if h2 > 0.0 else 0.0
    return 0.5 * (px + qx) + h * dy / c, 0.5 * (py + qy) - h * dx / c


@njit(**JIT)
def _on_arc(cx, cy, ax, ay, bx, by, zx, zy):
    """Whether Z (on the circle) lies on the arc from A clockwise to B about C (ends included)."""
    ux, uy = ax - cx, ay - cy
    pz = _cw_p(ux, uy, zx - cx, zy - cy)
    pb = _cw_p(ux, uy, bx - cx, by - cy)
    if pz > 4.0 - POINT_TIE:
        pz -= 4.0
    return -POINT_TIE <= pz <= pb + POINT_TIE


@njit(**JIT)
def _arc_integral(ax, ay, bx, by, R):
    """∫ y dx along the arc from A to B (radius R, bulging to the left of A→B), b².

    The chord's trapezoid plus the circular segment R² asin(c/2R) - (c/2) sqrt(R² - c²/4); the sum
    over the arcs of one period is the area between the line and y = 0.
    """
    dx, dy = bx - ax, by - ay
    c = math.sqrt(dx * dx + dy * dy)
    trap = 0.5 * dx * (ay + by)
    if R == np.inf or c == 0.0:
        return trap
    u = min(1.0, 0.5 * c / R)
    return trap + R * R * math.asin(u) - 0.5 * c * R * math.sqrt(max(0.0, 1.0 - u * u))


@njit(**JIT)
def _arc_length(c, R):
    """Length 2R asin(c/2R) of the arc of chord c (b)."""
    if R == np.inf:
        return c
    return 2.0 * R * math.asin(min(1.0, 0.5 * c / R))


@njit(**JIT)
def release_stress(alpha, phic, a, b):
    """Stress s = τ/(2Γ) at which a pin's arm angle falls to its critical angle.

    The arm angle is φ = α - asin(a s) - asin(b s) (α the angle between the chords a, b of its two
    arms, each arm tilted from its chord by half the arc's central angle).  asin(a s) + asin(b s)
    = A (A = α - φc) is the triangle of sides a, b and circumradius R = 1/(2s) whose angle between
    a and b is π - A: by the law of cosines its third side is d² = a² + b² + 2ab cos A and
    s = sin A/d.  Written with the half angle, d² = (a - b)² + 4ab cos²(A/2) and sin A =
    2 sin(A/2) cos(A/2), which stays exact where a = b and A → π (the square array at φc = 0).
    The root is the asin branch only while both triangle angles at the pin's neighbours are acute,
    b + a cos A >= 0 and a + b cos A >= 0; beyond that the longer arm becomes a semicircle (and
    unstable) first and the pin never releases with these arms: +inf.  A <= 0: released at once.
    """
    A = alpha - phic
    if A <= 0.0:
        return 0.0
    if A >= math.pi:
        return np.inf
    C = math.cos(0.5 * A)
    S = math.sin(0.5 * A)
    if (a - b) + 2.0 * b * C * C < 0.0 or (b - a) + 2.0 * a * C * C < 0.0:
        return np.inf
    den = math.sqrt((a - b) * (a - b) + 4.0 * a * b * C * C)
    return 2.0 * S * C / den


@njit(**JIT)
def _phi(alpha, a, b, s):
    """Arm angle φ = α - asin(a s) - asin(b s) of a pin at stress s."""
    return alpha - math.asin(min(1.0, a * s)) - math.asin(min(1.0, b * s))


@njit(**JIT)
def _dist(ax, ay, bx, by):
    return math.sqrt((bx - ax) * (bx - ax) + (by - ay) * (by - ay))


@njit(**JIT)
def _span(lo, hi, period, ncell):
    """First cell, its image index and the number of cells of a periodic axis covering [lo, hi]."""
    img = int(math.floor(lo / period))
    first = int((lo - img * period) * ncell / period)
    if first >= ncell:
        first -= ncell
        img += 1
    last = int(math.floor((hi - img * period) * ncell / period))
    return first, img, max(0, last - first + 1)


# --- obstacles passed by the line ----------------------------------------------------------------
# An obstacle image (k, iy) (y-image iy, any x-image: the line is periodic in x) is "behind" once the
# line has passed it: every image below front[k], and those above marked in a bit mask.
@njit(**JIT)
def _behind(W, k, iy):
    OI = W[W_OJ]
    off = iy - OI[0, k]
    if off < 0:
        return True
    if off >= IMAGE_BITS:
        return False
    return (OI[1, k] >> off) & 1 == 1


@njit(**JIT)
def _set_behind(W, k, iy):
    OI, SI = W[W_OJ], W[W_IS]
    off = iy - OI[0, k]
    if off < 0:
        return
    if OI[5, k] != SI[I_EPOCH]:         # journal: the flags as the avalanche found them
        JO = W[W_OJ][OJO:]
        n = SI[I_JON]
        JO[0, n], JO[1, n], JO[2, n] = k, OI[0, k], OI[1, k]
        SI[I_JON] = n + 1
        OI[5, k] = SI[I_EPOCH]
    if off >= IMAGE_BITS:              # the line spans more than IMAGE_BITS box heights
        W[W_IS][I_DFOLD] += 1
        OI[0, k] = iy - IMAGE_BITS + 1
        OI[1, k] = 0
        off = IMAGE_BITS - 1
    OI[1, k] |= 1 << off
    while OI[1, k] & 1 == 1:
        OI[1, k] >>= 1
        OI[0, k] += 1


@njit(**JIT)
def _find_pin(W, k, iy):
    """Slot of the pin held by obstacle image (k, iy), -1 if it holds none."""
    PI = W[W_IP]
    i = W[W_OJ][2, k]
    while i >= 0:
        if PI[PIY, i] == iy:
            return i
        i = PI[PSAME, i]
    return -1


# --- pins ----------------------------------------------------------------------------------------
@njit(**JIT)
def _journal(W, i):
    """Remember slot i as it was when the current avalanche began (once per avalanche), so that
    the pinned configuration can be restored if the avalanche turns out to be the flow."""
    PI, SI = W[W_IP], W[W_IS]
    ep = SI[I_EPOCH]
    if PI[PJST, i] == ep or PI[PAEP, i] == ep:
        return
    JI = W[W_IP][IJ:IJ + 5]
    n = SI[I_JN]
    JI[0, n], JI[1, n], JI[2, n] = i, PI[PPREV, i], PI[PNEXT, i]
    JI[3, n], JI[4, n] = PI[PSH, i], PI[PST, i]
    W[W_FP][FJ][n] = W[W_FP][PAL, i]
    SI[I_JN] = n + 1
    PI[PJST, i] = ep


@njit(**JIT)
def _extend_box(W, x, y):
    """Grow the box of what the current roll changed (pins made or taken off; stored x)."""
    SF = W[W_FS]
    SF[F_BX0], SF[F_BX1] = min(SF[F_BX0], x), max(SF[F_BX1], x)
    SF[F_BY0], SF[F_BY1] = min(SF[F_BY0], y), max(SF[F_BY1], y)


@njit(**JIT)
def _alloc(W, k, iy):
    """A new pin at obstacle image (k, iy); -1 when no slot is left."""
    PF, PI, SI, OB, OI = W[W_FP], W[W_IP], W[W_IS], W[W_OB], W[W_OJ]
    i = SI[I_FREE]
    if i < 0:
        return -1
    SI[I_FREE] = PI[PLNK, i]
    SI[I_NFREE] -= 1
    PI[PK, i], PI[PIY, i], PI[PST, i] = k, iy, ST_LINE
    PI[PGEN, i] += 1
    PI[PVER, i] += 1
    PI[PAVER, i] += 1
    PI[PAEP, i] = SI[I_EPOCH]
    PF[PX, i] = OB[0, k]
    PF[PY, i] = OB[1, k] + iy * W[W_FS][FPR:][R_LY]
    PI[PSAME, i] = OI[2, k]
    OI[2, k] = i
    off = iy - OI[4, k]
    if 0 <= off < IMAGE_BITS:           # for the checks: images the line has ever touched
        OI[3, k] |= 1 << off
    _extend_box(W, PF[PX, i], PF[PY, i])
    W[W_FS][F_YTOP] = max(W[W_FS][F_YTOP], PF[PY, i])
    SI[I_NPINS] += 1
    SI[I_LASTPIN] = i
    return i


@njit(**JIT)
def _hremove(W, e):
    HP = W[W_EH][EHP:]
    SI = W[W_IS]
    p = HP[1, e]
    if p < 0:
        return
    n = SI[I_HN] - 1
    last = HP[0, n]
    SI[I_HN] = n
    HP[1, e] = -1
    if last != e:
        HP[0, p] = last
        HP[1, last] = p
        _hdown(W, p)
        _hup(W, HP[1, last])


@njit(**JIT)
def _drop(W, i):
    """Take pin i off the line (released, bypassed or left in a loop); its events go."""
    PI, SI, OI = W[W_IP], W[W_IS], W[W_OJ]
    _journal(W, i)
    k = PI[PK, i]
    if OI[2, k] == i:
        OI[2, k] = PI[PSAME, i]
    else:
        j = OI[2, k]
        while PI[PSAME, j] != i:
            j = PI[PSAME, j]
        PI[PSAME, j] = PI[PSAME, i]
    _hremove(W, 2 * i)
    _hremove(W, 2 * i + 1)
    _extend_box(W, W[W_FP][PX, i], W[W_FP][PY, i])
    PI[PVER, i] += 1
    PI[PAVER, i] += 1
    SI[I_NPINS] -= 1
    if PI[PAEP, i] == SI[I_EPOCH]:     # made in this avalanche: nothing to restore, reuse it
        PI[PST, i] = ST_FREE
        PI[PLNK, i] = SI[I_FREE]
        SI[I_FREE] = i
        SI[I_NFREE] += 1
    else:                              # kept until the avalanche ends pinned
        PI[PST, i] = ST_DEFERRED
        PI[PLNK, i] = SI[I_DEFER]
        SI[I_DEFER] = i


@njit(**JIT)
def _link(W, i, j, shift):
    """Make j the next pin after i (j's x plus shift periods is its position in i's frame)."""
    PI = W[W_IP]
    _journal(W, i)
    _journal(W, j)
    PI[PNEXT, i] = j
    PI[PSH, i] = shift
    PI[PAVER, i] += 1
    PI[PVER, i] += 1
    PI[PPREV, j] = i
    PI[PVER, j] += 1
    W[W_IS][I_LASTPIN] = i


@njit(**JIT)
def _set_alpha(W, i, alpha):
    _journal(W, i)
    W[W_FP][PAL, i] = alpha
    W[W_IP][PVER, i] += 1


@njit(**JIT)
def _touch(W, i):
    """Queue pin i (and its right arc) for new events when the current event is done."""
    SI, TS = W[W_IS], W[W_IP][ITS]
    if TS[i] == SI[I_TSTAMP]:
        return
    TS[i] = SI[I_TSTAMP]
    W[W_IP][ITL][SI[I_NTOUCH]] = i
    SI[I_NTOUCH] += 1


@njit(**JIT)
def _next_pos(W, i):
    """Position of the pin after i, in i's frame."""
    PF, PI = W[W_FP], W[W_IP]
    j = PI[PNEXT, i]
    return PF[PX, j] + PI[PSH, i] * W[W_FS][FPR:][R_LX], PF[PY, j]


@njit(**JIT)
def _prev_pos(W, i):
    """Position of the pin before i, in i's frame."""
    PF, PI = W[W_FP], W[W_IP]
    j = PI[PPREV, i]
    return PF[PX, j] - PI[PSH, j] * W[W_FS][FPR:][R_LX], PF[PY, j]


@njit(**JIT)
def _pin_alpha(W, i):
    """Chord angle α of pin i, read from the positions of the pin and its two neighbours.

    The events update the tracked α (row PAL) by increments, which can fall behind the positions
    (seen: 0.023 rad after a release left two pins, the neighbours of one being images of the
    other, so its force read 3 % low); the tracked value only chooses the turn, α being
    continuous beyond (0, 2π] where the line has wound round a pin.
    """
    PF = W[W_FP]
    ax, ay = _prev_pos(W, i)
    bx, by = _next_pos(W, i)
    geo = _chord_alpha(ax, ay, PF[PX, i], PF[PY, i], bx, by)
    return geo + 2.0 * math.pi * np.rint((PF[PAL, i] - geo) / (2.0 * math.pi))


@njit(**JIT)
def _pin_phi(W, i, s):
    """Arm angle of pin i at stress s from its chord angle and its two chords."""
    PF = W[W_FP]
    x, y = PF[PX, i], PF[PY, i]
    ax, ay = _prev_pos(W, i)
    bx, by = _next_pos(W, i)
    return _phi(_pin_alpha(W, i), _dist(x, y, ax, ay), _dist(x, y, bx, by), s)


@njit(**JIT)
def _chord_alpha(ax, ay, px, py, bx, by):
    """Counter-clockwise angle in (0, 2π] from the chord P→B (right arm) to P→A (left arm)."""
    ux, uy, vx, vy = bx - px, by - py, ax - px, ay - py
    a = math.atan2(ux * vy - uy * vx, ux * vx + uy * vy)
    return a if a > 0.0 else a + 2.0 * math.pi


# --- indexed binary heap of element events, ordered by (stress, element) --------------------------
@njit(**JIT)
def _hless(EK, a, b):
    return EK[a] < EK[b] or (EK[a] == EK[b] and a < b)


@njit(**JIT)
def _hup(W, p):
    HP, EK = W[W_EH][EHP:], W[W_EK]
    e = HP[0, p]
    while p > 0:
        q = (p - 1) // 2
        f = HP[0, q]
        if not _hless(EK, e, f):
            break
        HP[0, p] = f
        HP[1, f] = p
        p = q
    HP[0, p] = e
    HP[1, e] = p


@njit(**JIT)
def _hdown(W, p):
    HP, EK = W[W_EH][EHP:], W[W_EK]
    n = W[W_IS][I_HN]
    e = HP[0, p]
    while True:
        q = 2 * p + 1
        if q >= n:
            break
        if q + 1 < n and _hless(EK, HP[0, q + 1], HP[0, q]):
            q += 1
        f = HP[0, q]
        if not _hless(EK, f, e):
            break
        HP[0, p] = f
        HP[1, f] = p
        p = q
    HP[0, p] = e
    HP[1, e] = p


@njit(**JIT)
def _hset(W, e, key):
    HP, EK, SI = W[W_EH][EHP:], W[W_EK], W[W_IS]
    EK[e] = key
    p = HP[1, e]
    if p < 0:
        p = SI[I_HN]
        SI[I_HN] = p + 1
        HP[0, p] = e
        HP[1, e] = p
        _hup(W, p)
    else:
        _hup(W, p)
        _hdown(W, HP[1, e])


# --- periodic cell list of the line's arcs (x periodic, y hashed on a power-of-two grid) ----------
@njit(**JIT)
def _arc_box(W, i, m):
    """Bounding box of the disc on the chord of arc i (which holds the arc at every stress it
    can have), with i's frame shifted by m periods."""
    PF = W[W_FP]
    px, py = PF[PX, i] + m * W[W_FS][FPR:][R_LX], PF[PY, i]
    qx, qy = _next_pos(W, i)
    qx += m * W[W_FS][FPR:][R_LX]
    mx, my = 0.5 * (px + qx), 0.5 * (py + qy)
    q = 0.5 * _dist(px, py, qx, qy)
    return mx - q, mx + q, my - q, my + q


@njit(**JIT)
def _register(W, i):
    """Enter arc i (pin i to its next pin) in every cell its disc covers; False when the pool is
    full even after dropping stale entries."""
    AH, AP, SI, PR = W[W_AG][0], W[W_AP], W[W_IS], W[W_FS][FPR:]
    x0, x1, y0, y1 = _arc_box(W, i, np.int64(0))
    ncx, ncy = SI[I_ANCX], SI[I_ANCY]
    cx0 = int(math.floor(x0 / PR[R_ACW]))
    cx1 = int(math.floor(x1 / PR[R_ACW]))
    cy0 = int(math.floor(y0 / PR[R_ACH]))
    cy1 = int(math.floor(y1 / PR[R_ACH]))
    nxc = min(cx1 - cx0 + 1, ncx)
    nyc = min(cy1 - cy0 + 1, ncy)
    if SI[I_APN] + nxc * nyc > AP.shape[1]:
        _compact(W)
        if SI[I_APN] + nxc * nyc > AP.shape[1]:
            return False
    ver = W[W_IP][PAVER, i]
    for a in range(nxc):
        kx = (cx0 + a) % ncx
        for b in range(nyc):
            cell = kx + ncx * ((cy0 + b) & (ncy - 1))
            n = SI[I_APN]
            AP[0, n], AP[1, n], AP[2, n] = i, ver, AH[cell]
            AH[cell] = n
            SI[I_APN] = n + 1
    return True


@njit(**JIT)
def _compact(W):
    """Rebuild the arc cell lists keeping only entries of arcs still on the line."""
    AH, SI, PI = W[W_AG][0], W[W_IS], W[W_IP]
    AP = W[W_AP]
    OLD = AP[:, : SI[I_APN]].copy()       # read from a copy: the pool is rewritten in place
    n = 0
    for cell in range(AH.shape[0]):
        e = AH[cell]
        AH[cell] = -1
        tail = -1
        while e >= 0:
            i, ver, nxt = OLD[0, e], OLD[1, e], OLD[2, e]
            if PI[PST, i] == ST_LINE and PI[PAVER, i] == ver:
                AP[0, n], AP[1, n], AP[2, n] = i, ver, -1
                if tail < 0:
                    AH[cell] = n
                else:
                    AP[2, tail] = n
                tail = n
                n += 1
            e = nxt
    SI[I_APN] = n


@njit(**JIT)
def _gather_arcs(W, x0, x1, y0, y1):
    """Slots of the arcs on the line whose cells meet the box (each once), into the IQB row of
    W_IP; their count."""
    AH, AP, SI, PR, PI = W[W_AG][0], W[W_AP], W[W_IS], W[W_FS][FPR:], W[W_IP]
    ST, QB = W[W_IP][IST], W[W_IP][IQB]
    SI[I_STAMP] += 1
    stamp = SI[I_STAMP]
    ncx, ncy = SI[I_ANCX], SI[I_ANCY]
    cx0 = int(math.floor(x0 / PR[R_ACW]))
    cx1 = int(math.floor(x1 / PR[R_ACW]))
    cy0 = int(math.floor(y0 / PR[R_ACH]))
    cy1 = int(math.floor(y1 / PR[R_ACH]))
    nxc = min(cx1 - cx0 + 1, ncx)
    nyc = min(cy1 - cy0 + 1, ncy)
    count = 0
    for a in range(nxc):
        kx = (cx0 + a) % ncx
        for b in range(nyc):
            cell = kx + ncx * ((cy0 + b) & (ncy - 1))
            prev = -1
            e = AH[cell]
            while e >= 0:
                SI[I_WARCS] += 1
                i, nxt = AP[0, e], AP[2, e]
                if PI[PST, i] != ST_LINE or PI[PAVER, i] != AP[1, e]:
                    if prev < 0:               # stale: the arc left the line; unlink it
                        AH[cell] = nxt
                    else:
                        AP[2, prev] = nxt
                    e = nxt
                    continue
                if ST[i] != stamp and i != SI[I_UNRES]:
                    ST[i] = stamp
                    if count < QB.shape[0]:
                        QB[count] = i
                        count += 1
                prev = e
                e = nxt
    return count


# --- events of a stable configuration ------------------------------------------------------------
@njit(**JIT)
def _lens_capture(W, px, py, qx, qy, s):
    """First free obstacle met by the arc P→Q as the stress rises from s.

    The arc sweeps the half disc on its chord (forward side); it meets an obstacle X of that half
    disc when its radius is the circumradius of P, X, Q, i.e. at s_X = 1/(2R_PXQ) = 2K/(|PX||XQ|c)
    (K the area of the triangle, c = |PQ|; a closed form).  Returns (s_X, k, ix, iy) of the
    smallest, (inf, -1, 0, 0) if the half disc holds none.  Obstacles of the half disc already
    behind the arc (s_X < s) would have been met before; they are counted as a diagnostic.
    """
    SI, PR, OB, CS, CI = W[W_IS], W[W_FS][FPR:], W[W_OB], W[W_CSI], _citems(W)
    Lx, Ly = PR[R_LX], PR[R_LY]
    dx, dy = qx - px, qy - py
    c = math.sqrt(dx * dx + dy * dy)
    mx, my, q = 0.5 * (px + qx), 0.5 * (py + qy), 0.5 * c
    nx, ny = -dy / c, dx / c
    best, bk, bix, biy = np.inf, -1, 0, 0
    ncx, ncy = SI[I_NCX], SI[I_NCY]
    kx, ix, nkx = _span(mx - q, mx + q, Lx, ncx)
    ky0, iy0, nky = _span(my - q, my + q, Ly, ncy)
    for _a in range(nkx):
        ky, iy = ky0, iy0
        for _b in range(nky):
            cell = kx + ncx * ky
            SI[I_WLENS] += CS[cell + 1] - CS[cell]
            for e in range(CS[cell], CS[cell + 1]):
                k = CI[e]
                x, y = OB[0, k] + ix * Lx, OB[1, k] + iy * Ly
                rx, ry = x - mx, y - my
                if rx * rx + ry * ry >= q * q or rx * nx + ry * ny <= 0.0:
                    continue
                if _behind(W, k, iy) or _find_pin(W, k, iy) >= 0:
                    continue
                ax, ay = x - px, y - py
                cross = dx * ay - dy * ax
                sx = cross / (math.sqrt(ax * ax + ay * ay)
                              * math.sqrt((qx - x) * (qx - x) + (qy - y) * (qy - y)) * c)
                if sx < s * (1.0 - STRESS_TIE):
                    SI[I_DBEHIND] += 1
                    continue
                if sx < best or (sx == best and (k < bk or (k == bk and iy < biy))):
                    best, bk, bix, biy = sx, k, ix, iy
            ky += 1
            if ky == ncy:
                ky, iy = 0, iy + 1
        kx += 1
        if kx == ncx:
            kx, ix = 0, ix + 1
    return best, bk, bix, biy


@njit(**JIT)
def _peval(c, deg, t):
    v = c[deg]
    for j in range(deg - 1, -1, -1):
        v = v * t + c[j]
    return v


@njit(**JIT)
def _bisect(c, deg, a, b, fa):
    """Root of the polynomial c (degree deg) in [a, b] where it changes sign (fa = value at a)."""
    for _ in range(200):
        m = 0.5 * (a + b)
        if m <= a or m >= b:
            break
        fm = _peval(c, deg, m)
        if fm == 0.0:
            return m
        if (fm < 0.0) == (fa < 0.0):
            a, fa = m, fm
        else:
            b = m
    return 0.5 * (a + b)


@njit(**JIT)
def poly_roots(coef, lo, hi, out):
    """Real roots in [lo, hi] of a polynomial of degree <= 4 (coef[j] multiplies t^j), ascending.

    Exact to rounding, no transcendental call: the roots of each derivative split [lo, hi] into
    pieces where the polynomial one degree up is monotone, and each piece holding a sign change is
    bisected to machine precision (working up from the linear derivative to the quartic).
    """
    D = np.zeros((5, 5))
    for j in range(5):
        D[4, j] = coef[j]
    for d in range(3, 0, -1):
        for j in range(d + 1):
            D[d, j] = (j + 1) * D[d + 1, j + 1]
    br = np.empty(6)
    nb = 0
    if D[1, 1] != 0.0:
        r = -D[1, 0] / D[1, 1]
        if lo < r < hi:
            br[0] = r
            nb = 1
    pts = np.empty(8)
    for d in range(2, 5):
        pts[0] = lo
        for j in range(nb):
            pts[j + 1] = br[j]
        pts[nb + 1] = hi
        nr = 0
        fa = _peval(D[d], d, pts[0])
        if fa == 0.0:
            br[nr] = pts[0]
            nr += 1
        for j in range(nb + 1):
            a, b = pts[j], pts[j + 1]
            fb = _peval(D[d], d, b)
            if fb == 0.0:
                if nr == 0 or br[nr - 1] < b:
                    br[nr] = b
                    nr += 1
            elif fa != 0.0 and (fa < 0.0) != (fb < 0.0):
                br[nr] = _bisect(D[d], d, a, b, fa)
                nr += 1
            fa = fb
        nb = nr
    for j in range(nb):
        out[j] = br[j]
    return nb


@njit(**JIT)
def tangency(pax, pay, nax, nay, pbx, pby, nbx, nby, s0, s1):
    """First stress s in [s0, s1] at which two arcs P_a→N_a and P_b→N_b touch at interior points.

    At radius R the arcs' centres are O = M - n t (M the chord's midpoint, n its forward normal,
    t = sqrt(R² - q²), q the half chord).  They touch when |O_a - O_b| = 2R with the point of
    contact (O_a + O_b)/2 on both arcs.  With t = t_a and t_b² = t² + q_a² - q_b², the condition
    F(t) + t_b H(t) = 0 (F = E - 2t² - 2At, H = 2B - 2Gt; A = D·n_a, B = D·n_b, G = n_a·n_b,
    D = M_a - M_b, E = |D|² + q_a² - q_b² - 4q_a²) squares to a quartic in t, whose roots in the
    range of t are isolated exactly (:func:`poly_roots`); a root counts if the unsquared equation
    holds and the contact point lies on both arcs.  Returns (s, zx, zy), s = inf if none.
    """
    dxa, dya = nax - pax, nay - pay
    dxb, dyb = nbx - pbx, nby - pby
    ca, cb = math.sqrt(dxa * dxa + dya * dya), math.sqrt(dxb * dxb + dyb * dyb)
    qa, qb = 0.5 * ca, 0.5 * cb
    max_, may = 0.5 * (pax + nax), 0.5 * (pay + nay)
    mbx, mby = 0.5 * (pbx + nbx), 0.5 * (pby + nby)
    nxa, nya = -dya / ca, dxa / ca
    nxb, nyb = -dyb / cb, dxb / cb
    Dx, Dy = max_ - mbx, may - mby
    A, B, G = Dx * nxa + Dy * nya, Dx * nxb + Dy * nyb, nxa * nxb + nya * nyb
    dl = qa * qa - qb * qb
    E = Dx * Dx + Dy * Dy + dl - 4.0 * qa * qa
    coef = np.empty(5)
    coef[4] = 1.0 - G * G
    coef[3] = 2.0 * A + 2.0 * G * B
    coef[2] = A * A - E - B * B - G * G * dl
    coef[1] = -A * E + 2.0 * G * B * dl
    coef[0] = 0.25 * E * E - B * B * dl
    scale = math.sqrt(Dx * Dx + Dy * Dy) + qa + qb
    R0 = np.inf if s0 <= 0.0 else 0.5 / s0
    R1 = 0.5 / s1
    t_hi = min(math.sqrt(max(0.0, R0 * R0 - qa * qa)), TANGENT_CAP * scale)
    t_lo = math.sqrt(max(0.0, R1 * R1 - qa * qa))
    t_lo = max(t_lo, math.sqrt(max(0.0, -dl)))
    if not t_lo < t_hi:
        return np.inf, 0.0, 0.0
    roots = np.empty(6)
    nr = poly_roots(coef, t_lo, t_hi, roots)
    for j in range(nr - 1, -1, -1):       # largest t first: the smallest stress
        t = roots[j]
        tb = math.sqrt(max(0.0, t * t + dl))
        F = E - 2.0 * t * t - 2.0 * A * t
        H = 2.0 * B - 2.0 * G * t
        if abs(F + tb * H) > 1e-7 * (abs(F) + abs(tb * H) + scale * scale):
            continue
        R = math.sqrt(qa * qa + t * t)
        oax, oay = max_ - nxa * t, may - nya * t
        obx, oby = mbx - nxb * tb, mby - nyb * tb
        zx, zy = 0.5 * (oax + obx), 0.5 * (oay + oby)
        if (_on_arc(oax, oay, pax, pay, nax, nay, zx, zy)
                and _on_arc(obx, oby, pbx, pby, nbx, nby, zx, zy)):
            return 0.5 / R, zx, zy
    return np.inf, 0.0, 0.0


@njit(**JIT)
def _sweep_stress(px, py, qx, qy, x, y, s):
    """Stress at which the arc P→Q passes the point X (inf unless X is in its half disc ahead)."""
    dx, dy = qx - px, qy - py
    c = math.sqrt(dx * dx + dy * dy)
    mx, my = 0.5 * (px + qx), 0.5 * (py + qy)
    rx, ry = x - mx, y - my
    if rx * rx + ry * ry >= 0.25 * c * c or -dy * rx + dx * ry <= 0.0:
        return np.inf
    ax, ay = x - px, y - py
    sx = (dx * ay - dy * ax) / (math.sqrt(ax * ax + ay * ay)
                                * math.sqrt((qx - x) * (qx - x) + (qy - y) * (qy - y)) * c)
    return sx if sx >= s * (1.0 - STRESS_TIE) else np.inf


@njit(**JIT)
def _halfdiscs_meet(pax, pay, nax, nay, pbx, pby, nbx, nby):
    """Cheap necessary test that the half discs on two chords (forward sides) overlap."""
    ca = _dist(pax, pay, nax, nay)
    cb = _dist(pbx, pby, nbx, nby)
    max_, may = 0.5 * (pax + nax), 0.5 * (pay + nay)
    mbx, mby = 0.5 * (pbx + nbx), 0.5 * (pby + nby)
    tol = POINT_TIE * (ca + cb)
    if _dist(max_, may, mbx, mby) > 0.5 * (ca + cb) + tol:
        return False
    # the other half disc must reach the forward side of each chord
    if ((mbx - pax) * -(nay - pay) + (mby - pay) * (nax - pax)) / ca + 0.5 * cb < -tol:
        return False
    if ((max_ - pbx) * -(nby - pby) + (may - pby) * (nbx - pbx)) / cb + 0.5 * ca < -tol:
        return False
    return True


@njit(**JIT)
def _arc_event(W, i):
    """Next event of arc i (pin i to its next pin) as the stress rises: capture, instability or
    contact with another arc of the line, whichever comes first; entered in the heap."""
    PF, PI, EP, SI = W[W_FP], W[W_IP], W[W_EH], W[W_IS]
    Lx = W[W_FS][FPR:][R_LX]
    s = W[W_FS][F_S]
    e = 2 * i
    px, py = PF[PX, i], PF[PY, i]
    qx, qy = _next_pos(W, i)
    c = _dist(px, py, qx, qy)
    best, kind = 1.0 / c, EV_INSTABLE
    sx, k, ix, iy = _lens_capture(W, px, py, qx, qy, s)
    if sx <= best:
        best, kind = sx, EV_CAPTURE
        EP[EA, e], EP[EB, e], EP[EC, e] = k, iy, ix
    x0, x1, y0, y1 = _arc_box(W, i, np.int64(0))
    n = _gather_arcs(W, x0, x1, y0, y1)
    QB = W[W_IP][IQB]
    for a in range(n):
        j = QB[a]
        for m in range(-2, 3):
            if j == i or (PI[PNEXT, i] == j and PI[PSH, i] == m) or (
                    PI[PNEXT, j] == i and PI[PSH, j] + m == 0):
                continue
            u0, u1, v0, v1 = _arc_box(W, j, m)
            if u1 < x0 or u0 > x1 or v1 < y0 or v0 > y1:
                continue
            bx, by = PF[PX, j] + m * Lx, PF[PY, j]
            cx_, cy_ = _next_pos(W, j)
            cx_ += m * Lx
            if not _halfdiscs_meet(px, py, qx, qy, bx, by, cx_, cy_):
                continue
            SI[I_WPAIRS] += 1
            smax = min(1.0 / c, 1.0 / _dist(bx, by, cx_, cy_))
            st, _zx, _zy = tangency(px, py, qx, qy, bx, by, cx_, cy_, s, smax)
            if st < best:
                best, kind = st, EV_TANGENT
                EP[EA, e], EP[EB, e], EP[EC, e] = j, PI[PAVER, j], m
            # one arc passing over an end pin of the other
            for end in range(2):
                d = j if end == 0 else PI[PNEXT, j]
                ex, ey = (bx, by) if end == 0 else (cx_, cy_)
                sw = _sweep_stress(px, py, qx, qy, ex, ey, s)
                if sw < best:
                    best, kind = sw, EV_SWEEP
                    EP[EA, e], EP[EB, e], EP[EC, e] = i, PI[PAVER, i], d
                    EP[ED, e], EP[EE, e] = PI[PGEN, d], m + (0 if end == 0 else PI[PSH, j])
                d = i if end == 0 else PI[PNEXT, i]
                ex, ey = (px, py) if end == 0 else (qx, qy)
                sw = _sweep_stress(bx, by, cx_, cy_, ex, ey, s)
                if sw < best:
                    best, kind = sw, EV_SWEEP
                    EP[EA, e], EP[EB, e], EP[EC, e] = j, PI[PAVER, j], d
                    EP[ED, e], EP[EE, e] = PI[PGEN, d], (0 if end == 0 else PI[PSH, i]) - m
    EP[EKIND, e], EP[EVER, e] = kind, PI[PAVER, i]
    _hset(W, e, best)


@njit(**JIT)
def _pin_event(W, i):
    """Release stress of pin i (closed form, :func:`release_stress`), entered in the heap."""
    PF, PI, EP = W[W_FP], W[W_IP], W[W_EH]
    e = 2 * i + 1
    x, y = PF[PX, i], PF[PY, i]
    ax, ay = _prev_pos(W, i)
    bx, by = _next_pos(W, i)
    sr = release_stress(_pin_alpha(W, i), W[W_OB][2, PI[PK, i]], _dist(x, y, ax, ay),
                        _dist(x, y, bx, by))
    EP[EKIND, e], EP[EVER, e] = EV_RELEASE, PI[PVER, i]
    if sr == np.inf:
        _hremove(W, e)
    else:
        _hset(W, e, sr)


@njit(**JIT)
def _event_valid(W, e):
    """Whether the stored event of element e still describes the line (else it is recomputed)."""
    PI, EP = W[W_IP], W[W_EH]
    i = e // 2
    if PI[PST, i] != ST_LINE:
        return False
    if e % 2 == 1:
        return PI[PVER, i] == EP[EVER, e]
    if PI[PAVER, i] != EP[EVER, e]:
        return False
    kind = EP[EKIND, e]
    if kind == EV_CAPTURE:
        return not _behind(W, EP[EA, e], EP[EB, e]) and _find_pin(W, EP[EA, e], EP[EB, e]) < 0
    if kind == EV_TANGENT:
        j = EP[EA, e]
        return PI[PST, j] == ST_LINE and PI[PAVER, j] == EP[EB, e]
    if kind == EV_SWEEP:
        x, d = EP[EA, e], EP[EC, e]
        return (PI[PST, x] == ST_LINE and PI[PAVER, x] == EP[EB, e]
                and PI[PST, d] == ST_LINE and PI[PGEN, d] == EP[ED, e])
    return True


@njit(**JIT)
def _refresh_touched(W):
    """New events for every pin touched by the last event, and for its right arc."""
    SI, PI, TL = W[W_IS], W[W_IP], W[W_IP][ITL]
    for a in range(SI[I_NTOUCH]):
        i = TL[a]
        if PI[PST, i] == ST_LINE:
            _arc_event(W, i)
            _pin_event(W, i)
    SI[I_NTOUCH] = 0
    SI[I_TSTAMP] += 1


# --- loops cut off the line -----------------------------------------------------------------------
@njit(**JIT)
def _ls_add(W, n, cx, cy, x0, y0, x1, y1, k):
    """Append an arc (centre, start, end; clockwise) to the loop being built; its new size."""
    LS = W[W_LS]
    if n >= LS.shape[1]:
        return n
    LS[0, n], LS[1, n], LS[2, n], LS[3, n], LS[4, n], LS[5, n] = cx, cy, x0, y0, x1, y1
    W[W_LS][LSK][n] = k
    return n + 1


@njit(**JIT)
def _roll_pos(W, i, m):
    PF = W[W_FP]
    return PF[PX, i] + m * W[W_FS][FPR:][R_LX], PF[PY, i]


@njit(**JIT)
def _ls_chain(W, a, ma, b, n, R):
    """Append the arcs of the line from pin a (period offset ma) forward to pin b; returns the new
    size and the arcs' ∫ y dx (their share of the area under the line)."""
    PI = W[W_IP]
    i, m, area = a, ma, 0.0
    for _ in range(W[W_IS][I_NPINS] + 1):
        if i == b:
            break
        j, mj = PI[PNEXT, i], m + PI[PSH, i]
        px, py = _roll_pos(W, i, m)
        qx, qy = _roll_pos(W, j, mj)
        cx, cy = _center(px, py, qx, qy, R)
        n = _ls_add(W, n, cx, cy, px, py, qx, qy, PI[PK, i])
        area += _arc_integral(px, py, qx, qy, R)
        i, m = j, mj
    return n, area


@njit(**JIT)
def _drop_chain(W, a, b):
    """Take the pins from a forward to b (both included) off the line; they stay behind."""
    PI = W[W_IP]
    i = a
    for _ in range(W[W_IS][I_NPINS] + 1):
        nxt = PI[PNEXT, i]
        _set_behind(W, PI[PK, i], PI[PIY, i])
        _drop(W, i)
        if i == b:
            break
        i = nxt


@njit(**JIT)
def _in_loop(W, n, qx, qy, R):
    """Whether Q lies inside the closed curve of the n loop arcs: crossings of a ray towards +x,
    counted on the y-monotone pieces of each arc (split at the circle's top and bottom), each
    piece counted when its ends lie on either side of the ray (so shared ends count once)."""
    LS = W[W_LS]
    inside = False
    pp = np.empty(4)
    yy = np.empty(4)
    for a in range(n):
        cx, cy, x0, y0, x1, y1 = LS[0, a], LS[1, a], LS[2, a], LS[3, a], LS[4, a], LS[5, a]
        dy = qy - cy
        if (x0 == x1 and y0 == y1) or abs(dy) >= R:
            continue
        ux, uy = x0 - cx, y0 - cy
        pend = _cw_p(ux, uy, x1 - cx, y1 - cy)
        pp[0], yy[0] = 0.0, y0
        m = 1
        for sy in (1.0, -1.0):
            p = _cw_p(ux, uy, 0.0, sy)
            if 0.0 < p < pend:
                pp[m], yy[m] = p, cy + sy * R
                m += 1
        if m == 3 and pp[2] < pp[1]:
            pp[1], pp[2] = pp[2], pp[1]
            yy[1], yy[2] = yy[2], yy[1]
        pp[m], yy[m] = pend, y1
        w = math.sqrt(R * R - dy * dy)
        for b in range(m):
            ya, yb = yy[b], yy[b + 1]
            if (ya > qy) != (yb > qy):
                xc = cx + w if yb < ya else cx - w   # clockwise: downwards on the right half
                if xc > qx:
                    inside = not inside
    return inside


@njit(**JIT)
def _loop_finish(W, n, R):
    """A loop of n arcs (in the loop scratch) was cut off: every free obstacle inside it is now
    behind the line; the loop is recorded for the output (while the record buffers last)."""
    LS, SI, PR, OB, CS, CI = W[W_LS], W[W_IS], W[W_FS][FPR:], W[W_OB], W[W_CSI], _citems(W)
    Lx, Ly = PR[R_LX], PR[R_LY]
    x0, x1, y0, y1 = np.inf, -np.inf, np.inf, -np.inf
    for a in range(n):
        if LS[2, a] == LS[4, a] and LS[3, a] == LS[5, a]:
            x0, x1 = min(x0, LS[2, a]), max(x1, LS[2, a])
            y0, y1 = min(y0, LS[3, a]), max(y1, LS[3, a])
        else:
            x0, x1 = min(x0, LS[0, a] - R), max(x1, LS[0, a] + R)
            y0, y1 = min(y0, LS[1, a] - R), max(y1, LS[1, a] + R)
    ncx, ncy = SI[I_NCX], SI[I_NCY]
    if n > 1:
        kx, ix, nkx = _span(x0, x1, Lx, ncx)
        ky0, iy0, nky = _span(y0, y1, Ly, ncy)
        for _a in range(nkx):
            ky, iy = ky0, iy0
            for _b in range(nky):
                cell = kx + ncx * ky
                for e in range(CS[cell], CS[cell + 1]):
                    k = CI[e]
                    x, y = OB[0, k] + ix * Lx, OB[1, k] + iy * Ly
                    if x < x0 or x > x1 or y < y0 or y > y1:
                        continue
                    if _behind(W, k, iy) or _find_pin(W, k, iy) >= 0:
                        continue
                    if _in_loop(W, n, x, y, R):
                        _set_behind(W, k, iy)
                ky += 1
                if ky == ncy:
                    ky, iy = 0, iy + 1
            kx += 1
            if kx == ncx:
                kx, ix = 0, ix + 1
    if n > 1:
        SI[I_LOOPS] += 1
        SI[I_MAXLOOP] = max(SI[I_MAXLOOP], n)
    LR, LRK, LO = W[W_LR], W[W_LR][LSK], W[W_LO]
    nl, na = SI[I_NLOOP], SI[I_NLARC]
    if nl + 2 <= LO.shape[0] and na + n <= LR.shape[1]:
        for a in range(n):
            for r in range(6):
                LR[r, na + a] = LS[r, a]
            LRK[na + a] = W[W_LS][LSK][a]
        LO[nl + 1] = na + n
        SI[I_NLOOP], SI[I_NLARC] = nl + 1, na + n
    else:
        SI[I_LTRUNC] += 1


@njit(**JIT)
def _point_loop(W, x, y, k):
    """An impenetrable point bypassed by its two arms meeting at it: an Orowan loop of zero size
    holding obstacle k."""
    n = _ls_add(W, np.int64(0), x, y, x, y, x, y, k)
    _loop_finish(W, n, 1.0)
    W[W_IS][I_BYP] += 1


@njit(**JIT)
def _leave(W, i, x, y):
    """Pin i is released (sheared, or bypassed when impenetrable): it is behind the line now."""
    PI, SI = W[W_IP], W[W_IS]
    k = PI[PK, i]
    _set_behind(W, k, PI[PIY, i])
    if W[W_OB][2, k] == 0.0:
        _point_loop(W, x, y, k)
    else:
        SI[I_REL] += 1


# --- the gap: the current line between the pivot of a roll and its target ---------------------
# A ring of arcs (centre, start, end; clockwise), logical index 0 at the pivot.  Each arc is also
# entered in a cell grid (the arc grid's cells) so that crossing searches look only at gap arcs
# near the rolling circle; the grid's heads carry the stamp of the gap's life (W_AG row 2), so
# clearing the gap clears the grid at once.  If the grid's entry pool runs out, searches fall
# back to the whole ring for the rest of that gap's life.
@njit(**JIT)
def _gcol(W, a):
    return (W[W_IS][I_GHEAD] + a) % W[W_FP][FG:].shape[1]


@njit(**JIT)
def _gap_register(W, col, R):
    GH, GE, SI, PR, GP = W[W_AG][1:], W[W_GE], W[W_IS], W[W_FS][FPR:], W[W_FP][FG:]
    W[W_IP][IGV][col] += 1
    if SI[I_GLIN] != 0:
        return
    _gap_enter(W, col, R)


@njit(**JIT)
def _gap_enter(W, col, R):
    GH, GE, SI, PR, GP = W[W_AG][1:], W[W_GE], W[W_IS], W[W_FS][FPR:], W[W_FP][FG:]
    ncx, ncy = SI[I_ANCX], SI[I_ANCY]
    cx0 = int(math.floor((GP[0, col] - R) / PR[R_ACW]))
    cx1 = int(math.floor((GP[0, col] + R) / PR[R_ACW]))
    cy0 = int(math.floor((GP[1, col] - R) / PR[R_ACH]))
    cy1 = int(math.floor((GP[1, col] + R) / PR[R_ACH]))
    nxc, nyc = min(cx1 - cx0 + 1, ncx), min(cy1 - cy0 + 1, ncy)
    if SI[I_GEN] + nxc * nyc > GE.shape[1]:
        SI[I_GLIN] = 2                  # out of entries: whole-gap searches from now on
        return
    stamp = SI[I_GROLL]
    for a in range(nxc):
        kx = (cx0 + a) % ncx
        for b in range(nyc):
            cell = kx + ncx * ((cy0 + b) & (ncy - 1))
            if GH[1, cell] != stamp:
                GH[0, cell], GH[1, cell] = -1, stamp
            n = SI[I_GEN]
            GE[0, n], GE[1, n], GE[2, n] = col, W[W_IP][IGV][col], GH[0, cell]
            GH[0, cell] = n
            SI[I_GEN] = n + 1


@njit(**JIT)
def _gap_near(W, cx, cy, R):
    """Logical indices of the gap arcs whose circle may meet the circle of radius R about (cx, cy),
    each once, into the IQB row of W_IP; their count."""
    GH, GE, SI, PR = W[W_AG][1:], W[W_GE], W[W_IS], W[W_FS][FPR:]
    GV, QB, ST = W[W_IP][IGV], W[W_IP][IQB], W[W_IP][IST]
    n = SI[I_NGAP]
    G = W[W_FP][FG:].shape[1]
    head = SI[I_GHEAD]
    count = 0
    if SI[I_GLIN] != 0:
        for a in range(n):
            QB[a] = a
        return n
    SI[I_GSTAMP] -= 1                  # negative stamps: apart from the touch stamps (>= 0)
    stamp = SI[I_GSTAMP]
    ncx, ncy = SI[I_ANCX], SI[I_ANCY]
    cx0 = int(math.floor((cx - R) / PR[R_ACW]))     # circles that meet share a point, so
    cx1 = int(math.floor((cx + R) / PR[R_ACW]))     # a cell of both boxes
    cy0 = int(math.floor((cy - R) / PR[R_ACH]))
    cy1 = int(math.floor((cy + R) / PR[R_ACH]))
    nxc, nyc = min(cx1 - cx0 + 1, ncx), min(cy1 - cy0 + 1, ncy)
    for a in range(nxc):
        kx = (cx0 + a) % ncx
        for b in range(nyc):
            cell = kx + ncx * ((cy0 + b) & (ncy - 1))
            if GH[1, cell] != SI[I_GROLL]:
                continue
            e = GH[0, cell]
            while e >= 0:
                col = GE[0, e]
                if GE[1, e] == GV[col]:
                    g = (col - head) % G
                    if g < n and ST[col] != stamp:
                        ST[col] = stamp
                        QB[count] = g
                        count += 1
                e = GE[2, e]
    return count


@njit(**JIT)
def _gap_put(W, front, cx, cy, x0, y0, x1, y1, R):
    """Add an arc of the line to the gap, at its front (pivot side) or back (target side)."""
    GP, SI = W[W_FP][FG:], W[W_IS]
    n = SI[I_NGAP]
    G = GP.shape[1]
    if n >= G:
        return False
    if front:
        SI[I_GHEAD] = (SI[I_GHEAD] - 1) % G
        col = SI[I_GHEAD]
    else:
        col = _gcol(W, n)
    GP[0, col], GP[1, col], GP[2, col], GP[3, col], GP[4, col], GP[5, col] = cx, cy, x0, y0, x1, y1
    SI[I_NGAP] = n + 1
    SI[I_MAXGAP] = max(SI[I_MAXGAP], n + 1)
    W[W_FS][F_AGAP] += _arc_integral(x0, y0, x1, y1, R)
    _gap_register(W, col, R)
    if SI[I_GLIN] == 1 and n + 1 > GAP_INDEX_MIN:      # long enough to be worth the grid
        SI[I_GLIN] = 0
        for a in range(n + 1):
            _gap_enter(W, _gcol(W, a), R)
    return True


@njit(**JIT)
def _gap_clear(W):
    SI = W[W_IS]
    SI[I_NGAP], SI[I_GHEAD], SI[I_GEN], SI[I_GLIN] = 0, 0, 0, 1
    SI[I_GROLL] += 1
    W[W_FS][F_AGAP] = 0.0


@njit(**JIT)
def _gap_trim(W, g, xx, xy, R):
    """The rolling circle has passed the gap up to X on gap arc g: drop what lies before X."""
    GP, SI, SF, GV = W[W_FP][FG:], W[W_IS], W[W_FS], W[W_IP][IGV]
    for a in range(g):
        c = _gcol(W, a)
        SF[F_AGAP] -= _arc_integral(GP[2, c], GP[3, c], GP[4, c], GP[5, c], R)
        GV[c] += 1
    c = _gcol(W, g)
    SF[F_AGAP] += (_arc_integral(xx, xy, GP[4, c], GP[5, c], R)
                   - _arc_integral(GP[2, c], GP[3, c], GP[4, c], GP[5, c], R))
    GP[2, c], GP[3, c] = xx, xy
    SI[I_GHEAD] = c
    SI[I_NGAP] -= g


@njit(**JIT)
def _gap_lead(W, ocx, ocy, fx, fy, R, at_f):
    """The line now follows the circle about O from F until it meets the old line (the gap): that
    piece replaces the part of the gap it has passed.  False (gap unchanged) if it meets none.
    ``at_f``: F itself counts if the gap passes through it (not so for the pivot, through which
    every rolling circle passes)."""
    g, xx, xy = _gap_cross(W, ocx, ocy, fx, fy, R, at_f)
    if g < 0:
        return False
    _gap_trim(W, g, xx, xy, R)
    return _gap_put(W, np.int64(1), ocx, ocy, fx, fy, xx, xy, R)


@njit(**JIT)
def _circle_cuts(ocx, ocy, gcx, gcy, R):
    """Intersections of two circles of radius R (count, x1, y1, x2, y2); same circle: 0."""
    dx, dy = gcx - ocx, gcy - ocy
    d2 = dx * dx + dy * dy
    if d2 >= 4.0 * R * R or d2 < (POINT_TIE * R) ** 2:
        return 0, 0.0, 0.0, 0.0, 0.0
    dd = math.sqrt(d2)
    hh = math.sqrt(R * R - 0.25 * d2)
    mx, my = 0.5 * (ocx + gcx), 0.5 * (ocy + gcy)
    wx, wy = -dy / dd * hh, dx / dd * hh
    return 2, mx + wx, my + wy, mx - wx, my - wy


@njit(**JIT)
def _crosses_gap(W, ocx, ocy, px, py, zx, zy, R):
    """Whether the arc from P clockwise to Z about O crosses the old line (the gap) before Z: then
    Z lies beyond where the rolling arc meets the old line and is not reached."""
    GP, QB = W[W_FP][FG:], W[W_IP][IQB]
    tol = POINT_TIE * R
    ux, uy = px - ocx, py - ocy
    pz = _cw_p(ux, uy, zx - ocx, zy - ocy)
    for q in range(_gap_near(W, ocx, ocy, R)):
        g = _gcol(W, QB[q])
        nc, ax, ay, bx, by = _circle_cuts(ocx, ocy, GP[0, g], GP[1, g], R)
        for c in range(nc):
            ix, iy = (ax, ay) if c == 0 else (bx, by)
            if _dist(ix, iy, px, py) < tol or _dist(ix, iy, zx, zy) < tol:
                continue
            if not _on_arc(GP[0, g], GP[1, g], GP[2, g], GP[3, g], GP[4, g], GP[5, g], ix, iy):
                continue
            if _cw_p(ux, uy, ix - ocx, iy - ocy) < pz:
                return True
    return False


@njit(**JIT)
def _gap_cross(W, ocx, ocy, zx, zy, R, at_z):
    """First point after Z (clockwise about O) where the circle meets the gap: (logical index of
    the gap arc, x, y), index -1 if it meets none.  With ``at_z``, Z itself counts when the gap
    passes through it (the old line runs on from there: a hit on the old line, in ties)."""
    GP, QB = W[W_FP][FG:], W[W_IP][IQB]
    tol = POINT_TIE * R
    ux, uy = zx - ocx, zy - ocy
    best, bg, bx_, by_ = np.inf, -1, 0.0, 0.0
    nq = _gap_near(W, ocx, ocy, R)
    if at_z:
        for q in range(nq):
            a = QB[q]
            g = _gcol(W, a)
            if (abs(_dist(zx, zy, GP[0, g], GP[1, g]) - R) < tol and (bg < 0 or a < bg)
                    and _on_arc(GP[0, g], GP[1, g], GP[2, g], GP[3, g], GP[4, g], GP[5, g],
                                zx, zy)):
                bg = a
        if bg >= 0:
            return bg, zx, zy
    for q in range(nq):
        a = QB[q]
        g = _gcol(W, a)
        nc, ax, ay, bx, by = _circle_cuts(ocx, ocy, GP[0, g], GP[1, g], R)
        for c in range(nc):
            ix, iy = (ax, ay) if c == 0 else (bx, by)
            if _dist(ix, iy, zx, zy) < tol:
                continue
            if not _on_arc(GP[0, g], GP[1, g], GP[2, g], GP[3, g], GP[4, g], GP[5, g], ix, iy):
                continue
            p = _cw_p(ux, uy, ix - ocx, iy - ocy)
            if p < best or (p == best and a < bg):
                best, bg, bx_, by_ = p, a, ix, iy
    return bg, bx_, by_


@njit(**JIT)
def _loop_gap_part(W, n, ocx, ocy, zx, zy, R):
    """Append to the loop the rolling circle from Z to where it meets the gap, and the gap from
    there to its end (the part of the old line the loop takes with it)."""
    GP = W[W_FP][FG:]
    g, xx, xy = _gap_cross(W, ocx, ocy, zx, zy, R, np.int64(1))
    if g < 0:
        W[W_IS][I_DXMISS] += 1
        return n
    n = _ls_add(W, n, ocx, ocy, zx, zy, xx, xy, np.int64(-1))
    c = _gcol(W, g)
    n = _ls_add(W, n, GP[0, c], GP[1, c], xx, xy, GP[4, c], GP[5, c], np.int64(-1))
    for a in range(g + 1, W[W_IS][I_NGAP]):
        c = _gcol(W, a)
        n = _ls_add(W, n, GP[0, c], GP[1, c], GP[2, c], GP[3, c], GP[4, c], GP[5, c], np.int64(-1))
    return n


# --- the roll ------------------------------------------------------------------------------------
@njit(**JIT)
def _excluded(W, kind, a, b, c):
    EX = W[W_IS][IEX:IEX + 4 * MAX_EXCLUDED].reshape(4, MAX_EXCLUDED)
    for j in range(W[W_IS][I_NEX]):
        if EX[0, j] == kind and EX[1, j] == a and EX[2, j] == b and EX[3, j] == c:
            return True
    return False


@njit(**JIT)
def _better(p, d2, kind, a, b, c, CB, CBI):
    """Lexicographic order of roll candidates: rotation (ties at zero snapped), distance from the
    pivot along the circle, kind, then ids."""
    bp, bd2 = CB[0], CB[1]
    if p != bp:
        return p < bp
    if d2 != bd2:
        return d2 < bd2
    if kind != CBI[0]:
        return kind < CBI[0]
    if a != CBI[1]:
        return a < CBI[1]
    if b != CBI[2]:
        return b < CBI[2]
    return c < CBI[3]


@njit(**JIT)
def _take(CB, CBI, p, d2, ocx, ocy, zx, zy, kind, a, b, c):
    CB[0], CB[1], CB[2], CB[3], CB[4], CB[5] = p, d2, ocx, ocy, zx, zy
    CBI[0], CBI[1], CBI[2], CBI[3] = kind, a, b, c


@njit(**JIT)
def _rot(v0x, v0y, vx, vy):
    """Pseudo-angle of the rotation from the start centre direction v0 to v (counter-clockwise),
    rotations within ANGLE_TIE of zero (either side) snapped to zero."""
    p = _pang(v0x * vx + v0y * vy, v0x * vy - v0y * vx)
    if p > 4.0 - ANGLE_TIE or p < ANGLE_TIE:
        return 0.0
    return p


@njit(**JIT)
def _scan(W, R):
    """The first thing the rolling circle meets as it turns about the pivot (counter-clockwise,
    sweeping forward), within the rotation at which the pivot would be released.

    The circle of radius R through the pivot P turns about P from its start centre; points are
    met on its advancing half (clockwise from P up to the opposite point).  Candidates: a free
    obstacle (centre of the circle through P and X, on the right of P→X), the target pin (only
    while its chord is shorter than 2R), another pin of the line, or an arc of the line touched
    from outside (centre at 2R from the arc's centre: the intersection of two circles).  The
    best goes to the candidate buffers; returns its kind (CK_NONE: the pivot is released first).
    """
    PF, PI, SI, PR, OB = W[W_FP], W[W_IP], W[W_IS], W[W_FS][FPR:], W[W_OB]
    CS, CI = W[W_CSI], _citems(W)
    RI, RF, CB, CBI = W[W_IS][IRI:], W[W_FS][FRF:], W[W_FS][FCB:], W[W_IS][ICBI:]
    Lx, Ly = PR[R_LX], PR[R_LY]
    P, mP, N, mN = RI[RP], RI[RMP], RI[RN], RI[RMN]
    px, py = _roll_pos(W, P, mP)
    v0x, v0y = RF[RCX] - px, RF[RCY] - py
    thmax = RF[RPHI0] - OB[2, PI[PK, P]]
    CB[0], CB[1] = np.inf, np.inf
    CBI[0] = CK_NONE
    if thmax < -ANGLE_TIE:
        return CK_NONE
    if thmax <= 0.0:
        pmax = 0.0
    elif thmax >= 2.0 * math.pi:
        pmax = 4.0
    else:
        pmax = _pang(math.cos(thmax), math.sin(thmax))
    R2 = R * R
    reach2 = 4.0 * R2 * (1.0 + 1e-14)
    target2 = 4.0 * R2 / ((1.0 + STRESS_TIE) * (1.0 + STRESS_TIE))
    ncx, ncy = SI[I_NCX], SI[I_NCY]
    kx, ix, nkx = _span(px - 2.0 * R, px + 2.0 * R, Lx, ncx)
    ky0, iy0, nky = _span(py - 2.0 * R, py + 2.0 * R, Ly, ncy)
    for _a in range(nkx):
        ky, iy = ky0, iy0
        for _b in range(nky):
            cell = kx + ncx * ky
            SI[I_WSCAN] += CS[cell + 1] - CS[cell]
            for e in range(CS[cell], CS[cell + 1]):
                k = CI[e]
                x, y = OB[0, k] + ix * Lx, OB[1, k] + iy * Ly
                dx, dy = x - px, y - py
                d2 = dx * dx + dy * dy
                if d2 >= reach2 or d2 == 0.0 or _behind(W, k, iy):
                    continue
                D = _find_pin(W, k, iy)
                kind, a, b, c = CK_OBST, k, ix, iy
                if D >= 0:
                    if D == P and ix == mP:
                        continue
                    if D == N and ix == mN:
                        if d2 >= target2:
                            continue
                        kind = CK_TARGET
                    else:
                        kind = CK_PIN
                    a, b, c = D, ix, 0
                d = math.sqrt(d2)
                h = math.sqrt(max(R2 - 0.25 * d2, 0.0))
                ox, oy = px + 0.5 * dx + h * dy / d, py + 0.5 * dy - h * dx / d
                p = _rot(v0x, v0y, ox - px, oy - py)
                if p > pmax + ANGLE_TIE:
                    continue
                if _better(p, d2, kind, a, b, c, CB, CBI) and not _excluded(W, kind, a, b, c):
                    _take(CB, CBI, p, d2, ox, oy, x, y, kind, a, b, c)
            ky += 1
            if ky == ncy:
                ky, iy = 0, iy + 1
        kx += 1
        if kx == ncx:
            kx, ix = 0, ix + 1
    _scan_arcs(W, R, px, py, v0x, v0y, pmax)
    return CBI[0]


@njit(**JIT)
def _scan_arcs(W, R, px, py, v0x, v0y, pmax):
    """Arcs of the line the rolling circle touches from outside (see :func:`_scan`)."""
    PF, PI, RI, CB, CBI = W[W_FP], W[W_IP], W[W_IS][IRI:], W[W_FS][FCB:], W[W_IS][ICBI:]
    Lx = W[W_FS][FPR:][R_LX]
    P, mP = RI[RP], RI[RMP]
    x0, x1, y0, y1 = px - 2.0 * R, px + 2.0 * R, py - 2.0 * R, py + 2.0 * R
    n = _gather_arcs(W, x0, x1, y0, y1)
    QB = W[W_IP][IQB]
    for q in range(n):
        j = QB[q]
        for m in range(mP - 2, mP + 3):
            u0, u1, v0, v1 = _arc_box(W, j, m)
            if u1 < x0 or u0 > x1 or v1 < y0 or v0 > y1:
                continue
            if PI[PNEXT, j] == P and m + PI[PSH, j] == mP:
                continue                   # the pivot's own left arm
            ex0, ey0 = PF[PX, j] + m * Lx, PF[PY, j]
            ex1, ey1 = _next_pos(W, j)
            ex1 += m * Lx
            ecx, ecy = _center(ex0, ey0, ex1, ey1, R)
            D = _dist(px, py, ecx, ecy)
            if D < R * (1.0 - 1e-12) or D > 3.0 * R:
                continue
            a = (D * D - 3.0 * R * R) / (2.0 * D)
            h = math.sqrt(max(R * R - a * a, 0.0))
            ux, uy = (ecx - px) / D, (ecy - py) / D
            for sg in (-1.0, 1.0):
                ox, oy = px + a * ux - sg * h * uy, py + a * uy + sg * h * ux
                p = _rot(v0x, v0y, ox - px, oy - py)
                if p > pmax + ANGLE_TIE:
                    continue
                zx, zy = 0.5 * (ox + ecx), 0.5 * (oy + ecy)
                if not _on_arc(ecx, ecy, ex0, ey0, ex1, ey1, zx, zy):
                    continue
                if _cw_p(px - ox, py - oy, zx - ox, zy - oy) > 2.0 + POINT_TIE:
                    continue
                d2 = (zx - px) * (zx - px) + (zy - py) * (zy - py)
                ck, zero = np.int64(CK_ARC), np.int64(0)
                if _better(p, d2, ck, j, m, zero, CB, CBI) and not _excluded(W, ck, j, m, zero):
                    _take(CB, CBI, p, d2, ox, oy, zx, zy, np.int64(CK_ARC), j, m, np.int64(0))


ROLL_DONE = -1      # a roll (or one of its steps) ended with the line connected again
ROLL_ON = -2        # the roll goes on
ROLL_START = -3     # an event handler set a roll up
FREE_START = -4     # an event handler left the line without pins: a free glide, then a roll
# a roll step hands on to another (returned to :func:`_roll`, which calls it: see _start_roll)
GO_TARGET, GO_PIVOT, GO_RELEASE, GO_FREE = -5, -6, -7, -8
SENTINEL = -(1 << 60)


@njit(**JIT)
def _walk_offset(W, start, m0, target, stop):
    """Period offset of pin target reached walking forward from start (offset m0) before stop."""
    PI = W[W_IP]
    i, m = start, m0
    for _ in range(W[W_IS][I_NPINS] + 1):
        if i == target:
            return m
        if i == stop:
            return SENTINEL
        m += PI[PSH, i]
        i = PI[PNEXT, i]
    return SENTINEL


@njit(**JIT)
def _turn(ux, uy, vx, vy):
    """Angle (rad) from direction u to direction v, counter-clockwise, in [-π/2, 3π/2): an arm
    turns forward by less than three quarters of a turn in one step, and back by less than one."""
    a = math.atan2(ux * vy - uy * vx, ux * vx + uy * vy)
    return a + 2.0 * math.pi if a < -0.5 * math.pi else a


@njit(**JIT)
def _rotation(W, ocx, ocy, px, py):
    """Real rotation angle (rad) of the rolling circle from its start centre to centre O."""
    RF = W[W_FS][FRF:]
    v0x, v0y = RF[RCX] - px, RF[RCY] - py
    vx, vy = ocx - px, ocy - py
    if _rot(v0x, v0y, vx, vy) == 0.0:
        return 0.0
    th = math.atan2(v0x * vy - v0y * vx, v0x * vx + v0y * vy)
    return th if th > 0.0 else th + 2.0 * math.pi


@njit(**JIT)
def _fix_pivot(W, theta, c_new, s):
    """The pivot's right arm stops after turning by theta, on a chord of length c_new."""
    PF, PI, RI, RF = W[W_FP], W[W_IP], W[W_IS][IRI:], W[W_FS][FRF:]
    P = RI[RP]
    phi = RF[RPHI0] - theta
    if P == RI[RN]:                    # single pin: it is also the target, whose angle is carried
        RF[RPHIN] = phi
        return
    ax, ay = _prev_pos(W, P)
    cl = _dist(PF[PX, P], PF[PY, P], ax, ay)
    _set_alpha(W, P, phi + math.asin(min(1.0, cl * s)) + math.asin(min(1.0, c_new * s)))


@njit(**JIT)
def _left_tangent(W, i, m, R):
    """Unit direction from pin i (offset m) back along its left arm."""
    x, y = _roll_pos(W, i, m)
    ax, ay = _prev_pos(W, i)
    ax += m * W[W_FS][FPR:][R_LX]
    cx, cy = _center(ax, ay, x, y, R)
    return -(y - cy) / R, (x - cx) / R


@njit(**JIT)
def _hit_obstacle(W, k, ix, iy, ocx, ocy, theta, s, R):
    """The rolling circle meets a free obstacle: it becomes a pin and the next pivot."""
    RI, RF, SI = W[W_IS][IRI:], W[W_FS][FRF:], W[W_IS]
    P, mP, N, mN = RI[RP], RI[RMP], RI[RN], RI[RMN]
    q = _alloc(W, k, iy)
    if q < 0:
        W[W_IS][I_WHY] = 1458
        return S_FATAL
    px, py = _roll_pos(W, P, mP)
    qx, qy = _roll_pos(W, q, ix)
    _fix_pivot(W, theta, _dist(px, py, qx, qy), s)
    _link(W, P, q, ix - mP)
    _link(W, q, N, mN - ix)
    SI[I_UNRES] = q
    if not _gap_lead(W, ocx, ocy, qx, qy, R, np.int64(1)):
        SI[I_DXMISS] += 1
    if not _register(W, P):
        W[W_IS][I_WHY] = 1468
        return S_FATAL
    W[W_FS][F_DA] += _arc_integral(px, py, qx, qy, R)
    _touch(W, P)
    _touch(W, q)
    SI[I_CAPT] += 1
    RI[RP], RI[RMP] = q, ix
    RF[RCX], RF[RCY], RF[RPHI0] = ocx, ocy, math.pi
    return ROLL_ON


@njit(**JIT)
def _release_target(W, ocx, ocy, theta, s, R):
    """The target pin cannot hold with its new left arm: released, the roll goes on about the same
    pivot towards the pin after it."""
    PF, PI, RI, RF = W[W_FP], W[W_IP], W[W_IS][IRI:], W[W_FS][FRF:]
    P, mP, N, mN = RI[RP], RI[RMP], RI[RN], RI[RMN]
    nx, ny = _roll_pos(W, N, mN)
    N2, mN2 = PI[PNEXT, N], mN + PI[PSH, N]
    x2, y2 = _roll_pos(W, N2, mN2)
    cx, cy = _center(nx, ny, x2, y2, R)
    px, py = _roll_pos(W, P, mP)
    _gap_clear(W)
    _gap_put(W, np.int64(0), ocx, ocy, px, py, nx, ny, R)
    if not _gap_put(W, np.int64(0), cx, cy, nx, ny, x2, y2, R):
        W[W_IS][I_WHY] = 1492
        return S_FATAL
    W[W_FS][F_DA] -= _arc_integral(nx, ny, x2, y2, R)
    phi2 = RF[RPHI0] - theta if N2 == P else _pin_phi(W, N2, s)
    _leave(W, N, nx, ny)
    _link(W, P, N2, mN2 - mP)
    _drop(W, N)
    RI[RN], RI[RMN] = N2, mN2
    RF[RUNX], RF[RUNY], RF[RPHIN] = -(y2 - cy) / R, (x2 - cx) / R, phi2
    RF[RCX], RF[RCY] = ocx, ocy
    RF[RPHI0] -= theta
    return ROLL_ON


@njit(**JIT)
def _hit_target(W, ocx, ocy, theta, s, R):
    """The rolling circle reaches the target pin: connect, unless the target's new arm angle is
    below its critical angle (then it is released and the roll goes on)."""
    PF, PI, RI, RF, SI = W[W_FP], W[W_IP], W[W_IS][IRI:], W[W_FS][FRF:], W[W_IS]
    P, mP, N, mN = RI[RP], RI[RMP], RI[RN], RI[RMN]
    px, py = _roll_pos(W, P, mP)
    nx, ny = _roll_pos(W, N, mN)
    c = _dist(px, py, nx, ny)
    phic = W[W_OB][2, PI[PK, N]]
    if N == P:
        alpha, cr = math.pi, c
    else:
        unx, uny = -(ny - ocy) / R, (nx - ocx) / R
        phin = RF[RPHIN] - _turn(unx, uny, RF[RUNX], RF[RUNY])
        bx, by = _next_pos(W, N)
        cr = _dist(PF[PX, N], PF[PY, N], bx, by)
        alpha = phin + math.asin(min(1.0, c * s)) + math.asin(min(1.0, cr * s))
    if release_stress(alpha, phic, c, cr) <= s * (1.0 + STRESS_TIE):
        if N == P:
            RF[RCX], RF[RCY] = ocx, ocy
            RF[RPHI0] -= theta
            return GO_PIVOT
        return GO_RELEASE
    if N != P:
        _fix_pivot(W, theta, c, s)
    _link(W, P, N, mN - mP)
    _set_alpha(W, N, alpha)
    SI[I_UNRES] = -1
    if not _register(W, P):
        W[W_IS][I_WHY] = 1535
        return S_FATAL
    W[W_FS][F_DA] += _arc_integral(px, py, nx, ny, R)
    _touch(W, P)
    _touch(W, N)
    return ROLL_DONE


@njit(**JIT)
def _pivot_release(W, s, R):
    """The pivot's arm angle reached its critical angle before the circle met anything: the pivot
    is released and the roll goes on about the pin before it, from the circle of its arc."""
    PI, RI, RF, SI = W[W_IP], W[W_IS][IRI:], W[W_FS][FRF:], W[W_IS]
    P, mP, N, mN = RI[RP], RI[RMP], RI[RN], RI[RMN]
    px, py = _roll_pos(W, P, mP)
    _leave(W, P, px, py)
    th = max(0.0, RF[RPHI0] - W[W_OB][2, PI[PK, P]])
    v0x, v0y = RF[RCX] - px, RF[RCY] - py
    ct, st = math.cos(th), math.sin(th)
    _gap_lead(W, px + ct * v0x - st * v0y, py + st * v0x + ct * v0y, px, py, R, np.int64(0))
    if SI[I_NPINS] == 1:
        _drop(W, P)
        SI[I_UNRES] = -1
        return GO_FREE
    O = PI[PPREV, P]
    mO = mP - PI[PSH, O]
    ox, oy = _roll_pos(W, O, mO)
    cx, cy = _center(ox, oy, px, py, R)
    if not _gap_put(W, np.int64(1), cx, cy, ox, oy, px, py, R):
        W[W_IS][I_WHY] = 1563
        return S_FATAL
    W[W_FS][F_DA] -= _arc_integral(ox, oy, px, py, R)
    phi0 = RF[RPHIN] if O == N else _pin_phi(W, O, s)
    _link(W, O, N, mN - mO)
    SI[I_UNRES] = O
    _drop(W, P)
    RI[RP], RI[RMP] = O, mO
    RF[RCX], RF[RCY], RF[RPHI0] = cx, cy, phi0
    return ROLL_ON


@njit(**JIT)
def _hit_pin(W, D, ix, ocx, ocy, theta, s, R):
    """The rolling circle touches another pin of the line: the part of the line between is cut off
    as a loop.  Ahead of the target (right part): the circle reaches that pin, which becomes the
    target.  Behind the pivot (left part): that pin becomes the pivot."""
    PF, PI, RI, RF, SI = W[W_FP], W[W_IP], W[W_IS][IRI:], W[W_FS][FRF:], W[W_IS]
    P, mP, N, mN = RI[RP], RI[RMP], RI[RN], RI[RMN]
    mD = _walk_offset(W, N, mN, D, P)
    px, py = _roll_pos(W, P, mP)
    dx, dy = _roll_pos(W, D, ix)
    if mD != SENTINEL and ix == mD:
        n = _loop_gap_part(W, np.int64(0), ocx, ocy, dx, dy, R)
        n, area = _ls_chain(W, N, mN, D, n, R)
        W[W_FS][F_DA] -= area
        _loop_finish(W, n, R)
        unx, uny = _left_tangent(W, D, ix, R)
        phid = _pin_phi(W, D, s)
        _drop_chain(W, N, PI[PPREV, D])
        _gap_clear(W)
        _gap_put(W, np.int64(0), ocx, ocy, px, py, dx, dy, R)
        _link(W, P, D, ix - mP)
        RI[RN], RI[RMN] = D, ix
        RF[RUNX], RF[RUNY], RF[RPHIN] = unx, uny, phid
        return GO_TARGET
    if mD != SENTINEL and ix == mD - 1:
        n, area = _ls_chain(W, D, ix, P, np.int64(0), R)
        n = _ls_add(W, n, ocx, ocy, px, py, dx, dy, PI[PK, P])
        W[W_FS][F_DA] -= area
        _loop_finish(W, n, R)
        bx, by = _next_pos(W, D)
        bx += ix * W[W_FS][FPR:][R_LX]
        ccx, ccy = _center(dx, dy, bx, by, R)
        told_x, told_y = -(ccy - dy) / R, (ccx - dx) / R
        tnew_x, tnew_y = -(ocy - dy) / R, (ocx - dx) / R
        phid = (RF[RPHIN] if D == N else _pin_phi(W, D, s)) - _turn(told_x, told_y, tnew_x, tnew_y)
        if D == N:
            RF[RPHIN] = phid
        _drop_chain(W, PI[PNEXT, D], P)
        _gap_lead(W, ocx, ocy, dx, dy, R, np.int64(1))
        _link(W, D, N, mN - ix)
        SI[I_UNRES] = D
        _touch(W, D)
        RI[RP], RI[RMP] = D, ix
        RF[RCX], RF[RCY], RF[RPHI0] = ocx, ocy, phid
        return ROLL_ON
    return SENTINEL


@njit(**JIT)
def _hit_arc(W, j, m, ocx, ocy, zx, zy, theta, s, R):
    """The rolling circle touches an arc E (pin j to the next) of the line from outside: the part
    of the line between is cut off as a loop.  E ahead of the target: the roll goes on about the
    same pivot towards E's far end.  E behind the pivot: E's near end becomes the pivot."""
    PF, PI, RI, RF, SI = W[W_FP], W[W_IP], W[W_IS][IRI:], W[W_FS][FRF:], W[W_IS]
    P, mP, N, mN = RI[RP], RI[RMP], RI[RN], RI[RMN]
    me = _walk_offset(W, N, mN, j, P)
    if me == SENTINEL or (m != me and m != me - 1):
        return SENTINEL
    px, py = _roll_pos(W, P, mP)
    e1x, e1y = _roll_pos(W, j, m)
    j2, m2 = PI[PNEXT, j], m + PI[PSH, j]
    e2x, e2y = _roll_pos(W, j2, m2)
    ecx, ecy = _center(e1x, e1y, e2x, e2y, R)
    ie = _arc_integral(e1x, e1y, e2x, e2y, R)
    if m == me:
        n = _loop_gap_part(W, np.int64(0), ocx, ocy, zx, zy, R)
        n, area = _ls_chain(W, N, mN, j, n, R)
        n = _ls_add(W, n, ecx, ecy, e1x, e1y, zx, zy, PI[PK, j])
        W[W_FS][F_DA] -= area + ie
        _loop_finish(W, n, R)
        phi2 = RF[RPHI0] - theta if j2 == P else _pin_phi(W, j2, s)
        _drop_chain(W, N, j)
        _gap_clear(W)
        _gap_put(W, np.int64(0), ocx, ocy, px, py, zx, zy, R)
        _gap_put(W, np.int64(0), ecx, ecy, zx, zy, e2x, e2y, R)
        _link(W, P, j2, m2 - mP)
        RI[RN], RI[RMN] = j2, m2
        RF[RUNX], RF[RUNY], RF[RPHIN] = -(e2y - ecy) / R, (e2x - ecx) / R, phi2
        RF[RCX], RF[RCY] = ocx, ocy
        RF[RPHI0] -= theta
        return ROLL_ON
    n = _ls_add(W, np.int64(0), ecx, ecy, zx, zy, e2x, e2y, np.int64(-1))
    n, area = _ls_chain(W, j2, m2, P, n, R)
    n = _ls_add(W, n, ocx, ocy, px, py, zx, zy, PI[PK, P])
    W[W_FS][F_DA] -= area + ie
    _loop_finish(W, n, R)
    phi0 = RF[RPHIN] if j == N else _pin_phi(W, j, s)
    _gap_lead(W, ocx, ocy, zx, zy, R, np.int64(1))
    if not _gap_put(W, np.int64(1), ecx, ecy, e1x, e1y, zx, zy, R):
        W[W_IS][I_WHY] = 1663
        return S_FATAL
    _drop_chain(W, j2, P)
    _link(W, j, N, mN - m)
    SI[I_UNRES] = j
    _touch(W, j)
    RI[RP], RI[RMP] = j, m
    RF[RCX], RF[RCY], RF[RPHI0] = ecx, ecy, phi0
    return ROLL_ON


@njit(**JIT)
def _translate(W, R):
    """A line freed of every pin glides on rigidly (keeping its last shape, the gap) until it
    touches a free obstacle: the smallest upward shift d between the gap arcs and an obstacle
    directly above them.  Returns (d, k, ix, iy, arc); arc -1 if the field holds no obstacle."""
    GP, SI, PR, OB, CS, CI = W[W_FP][FG:], W[W_IS], W[W_FS][FPR:], W[W_OB], W[W_CSI], _citems(W)
    Lx, Ly = PR[R_LX], PR[R_LY]
    ncx, ncy = SI[I_NCX], SI[I_NCY]
    ng = SI[I_NGAP]
    ylo, yhi = np.inf, -np.inf
    for g in range(ng):
        ylo = min(ylo, GP[1, g] - R)
        yhi = max(yhi, GP[1, g] + R)
    H = 2.0 * PR[R_OCWY]
    while True:
        best, bk, bix, biy, bg = np.inf, -1, 0, 0, -1
        for g in range(ng):
            cx, cy, ax, ay, bx, by = GP[0, g], GP[1, g], GP[2, g], GP[3, g], GP[4, g], GP[5, g]
            gx0 = cx - R if _on_arc(cx, cy, ax, ay, bx, by, cx - R, cy) else min(ax, bx)
            gx1 = cx + R if _on_arc(cx, cy, ax, ay, bx, by, cx + R, cy) else max(ax, bx)
            gy0 = cy - R if _on_arc(cx, cy, ax, ay, bx, by, cx, cy - R) else min(ay, by)
            gy1 = cy + R if _on_arc(cx, cy, ax, ay, bx, by, cx, cy + R) else max(ay, by)
            kx, ix, nkx = _span(gx0, gx1, Lx, ncx)
            ky0, iy0, nky = _span(gy0, gy1 + H, Ly, ncy)
            for _a in range(nkx):
                ky, iy = ky0, iy0
                for _b in range(nky):
                    cell = kx + ncx * ky
                    SI[I_WTRANS] += CS[cell + 1] - CS[cell]
                    for e in range(CS[cell], CS[cell + 1]):
                        k = CI[e]
                        x, y = OB[0, k] + ix * Lx, OB[1, k] + iy * Ly
                        dx = x - cx
                        if x < gx0 or x > gx1 or abs(dx) > R or _behind(W, k, iy):
                            continue
                        w = math.sqrt(R * R - dx * dx)
                        for yy in (cy + w, cy - w):
                            d = y - yy
                            if d < -POINT_TIE * R or not _on_arc(cx, cy, ax, ay, bx, by, x, yy):
                                continue
                            d = max(d, 0.0)
                            if d < best or (d == best and (k < bk or (k == bk and iy < biy))):
                                best, bk, bix, biy, bg = d, k, ix, iy, g
                    ky += 1
                    if ky == ncy:
                        ky, iy = 0, iy + 1
                kx += 1
                if kx == ncx:
                    kx, ix = 0, ix + 1
        if best <= H:
            return best, bk, bix, biy, bg
        if H > 2.0 * Ly + (yhi - ylo) + 4.0 * R:
            return np.inf, -1, 0, 0, -1
        H *= 2.0


@njit(**JIT)
def _gap_linear(W):
    """Lay the gap ring out from column 0 (for the whole-gap passes of a free glide)."""
    GP, SI = W[W_FP][FG:], W[W_IS]
    n = SI[I_NGAP]
    old = np.empty((6, n))
    for a in range(n):
        c = _gcol(W, a)
        for r in range(6):
            old[r, a] = GP[r, c]
    for a in range(n):
        for r in range(6):
            GP[r, a] = old[r, a]
    SI[I_GHEAD] = 0


@njit(**JIT)
def _gap_rotate(W, g, qx, qy, R):
    """Reorder the gap (one period of line, laid out from column 0) to run from Q, on gap arc g,
    round to Q one period on: the rest of arc g, the arcs after it, the arcs before it one period
    on, arc g up to Q."""
    GP, SI = W[W_FP][FG:], W[W_IS]
    Lx = W[W_FS][FPR:][R_LX]
    n = SI[I_NGAP]
    if n + 1 > GP.shape[1]:
        return
    old = GP[:, :n].copy()
    _gap_clear(W)
    for a in range(g, n + g + 1):
        b = a % n
        sh = Lx if a >= n else 0.0
        x0, y0, x1, y1 = old[2, b] + sh, old[3, b], old[4, b] + sh, old[5, b]
        if a == g:
            x0, y0 = qx, qy                     # arc g from Q on
        if a == n + g:
            x1, y1 = qx + Lx, qy                # arc g up to Q, a period on
        _gap_put(W, np.int64(0), old[0, b] + sh, old[1, b], x0, y0, x1, y1, R)


@njit(**JIT)
def _free_line(W, s, R):
    """Every pin is gone: the line glides on at the same stress (:func:`_translate`) and is caught
    again by the first obstacle it touches, which starts a new roll with itself as the target
    one period on."""
    GP, SI, RI, RF = W[W_FP][FG:], W[W_IS], W[W_IS][IRI:], W[W_FS][FRF:]
    _gap_linear(W)
    d, k, ix, iy, g = _translate(W, R)
    if g < 0:
        return S_FLOW                   # nothing can ever hold the line
    ng = SI[I_NGAP]
    span = 0.0
    for a in range(ng):
        GP[1, a] += d
        GP[3, a] += d
        GP[5, a] += d
        span += GP[4, a] - GP[2, a]
    W[W_FS][F_AGAP] += d * span
    SI[I_TRANSL] += 1
    q = _alloc(W, k, iy)
    if q < 0:
        W[W_IS][I_WHY] = 1778
        return S_FATAL
    _link(W, q, q, np.int64(1))
    SI[I_UNRES] = q
    SI[I_CAPT] += 1
    _touch(W, q)
    qx, qy = _roll_pos(W, q, ix)
    gin, gout = g, g
    tol = POINT_TIE * R
    for a in range(ng):                 # at a cusp of the gap: the arcs on either side
        if _dist(qx, qy, GP[4, a], GP[5, a]) < tol and _dist(qx, qy, GP[2, g], GP[3, g]) < tol:
            gin = a
        if _dist(qx, qy, GP[2, a], GP[3, a]) < tol and _dist(qx, qy, GP[4, g], GP[5, g]) < tol:
            gout = a
    unx, uny = -(qy - GP[1, gin]) / R, (qx - GP[0, gin]) / R
    trx, try_ = -(GP[1, gout] - qy) / R, (GP[0, gout] - qx) / R
    ocx, ocy = GP[0, gout], GP[1, gout]
    _gap_rotate(W, gout, qx, qy, R)
    phi = math.atan2(trx * uny - try_ * unx, trx * unx + try_ * uny)
    if phi < -ANGLE_TIE:                # bent backwards; arms along each other (a cusp of
        phi += 2.0 * math.pi            # tangent arcs) is φ = 0
    phi = max(phi, 0.0)
    RI[RP], RI[RMP], RI[RN], RI[RMN] = q, ix, q, ix + 1
    RF[RCX], RF[RCY], RF[RPHI0] = ocx, ocy, phi
    RF[RUNX], RF[RUNY], RF[RPHIN] = unx, uny, phi
    return ROLL_ON


@njit(**JIT)
def _roll(W):
    """Run a roll to its end (the line connected again), the flow, or a capacity failure.

    Each step turns the circle through the pivot forward to the first thing it meets
    (:func:`_scan`): a candidate lying beyond where the rolling arc crosses the old line (the
    gap) is not reached and is skipped (:func:`_crosses_gap`).  Returns ROLL_DONE or a status.
    """
    SI, SF, PR, CB, CBI = W[W_IS], W[W_FS], W[W_FS][FPR:], W[W_FS][FCB:], W[W_IS][ICBI:]
    s = SF[F_S]
    R = 0.5 / s
    SI[I_NEX] = 0
    while True:
        SI[I_EVENTS] += 1
        if SI[I_EVENTS] > SI[I_MAXEV]:
            return S_MAXEV
        if (SF[F_DA] + SF[F_AGAP]) / PR[R_LX] >= PR[R_FLOW]:
            return S_FLOW
        if SI[I_NFREE] < 2:
            W[W_IS][I_WHY] = 1824
            return S_FATAL
        kind = _scan(W, R)
        RI = W[W_IS][IRI:]
        px, py = _roll_pos(W, RI[RP], RI[RMP])
        ocx, ocy, theta = 0.0, 0.0, 0.0
        if kind == CK_NONE:
            r = _pivot_release(W, s, R)
        else:
            ocx, ocy, zx, zy = CB[2], CB[3], CB[4], CB[5]
            a, b, c = CBI[1], CBI[2], CBI[3]
            if _crosses_gap(W, ocx, ocy, px, py, zx, zy, R):
                r = SENTINEL
            else:
                theta = _rotation(W, ocx, ocy, px, py)
                if kind == CK_OBST:
                    r = _hit_obstacle(W, a, b, c, ocx, ocy, theta, s, R)
                elif kind == CK_TARGET:
                    r = _hit_target(W, ocx, ocy, theta, s, R)
                elif kind == CK_PIN:
                    r = _hit_pin(W, a, b, ocx, ocy, theta, s, R)
                else:
                    r = _hit_arc(W, a, b, ocx, ocy, zx, zy, theta, s, R)
            if r == SENTINEL:           # not reached after all: look again without it
                SI[I_DINVALID] += 1
                if SI[I_NEX] < MAX_EXCLUDED:
                    EX = W[W_IS][IEX:IEX + 4 * MAX_EXCLUDED].reshape(4, MAX_EXCLUDED)
                    n = SI[I_NEX]
                    EX[0, n], EX[1, n], EX[2, n], EX[3, n] = kind, a, b, c
                    SI[I_NEX] = n + 1
                    SI[I_EVENTS] -= 1
                    continue
                r = _pivot_release(W, s, R)
        while r <= GO_TARGET:           # hand-overs between steps
            if r == GO_TARGET:
                r = _hit_target(W, ocx, ocy, theta, s, R)
            elif r == GO_RELEASE:
                r = _release_target(W, ocx, ocy, theta, s, R)
            elif r == GO_PIVOT:
                r = _pivot_release(W, s, R)
            else:
                r = _free_line(W, s, R)
        SI[I_NEX] = 0
        if r == ROLL_DONE:
            return ROLL_DONE
        if r != ROLL_ON:
            return r


# --- events of the stable configuration ----------------------------------------------------------
@njit(**JIT)
def _behind_line(W, x, y, R):
    """Whether (x, y) lies behind the line (stable arcs on the line): the signed number of its
    arcs crossed by the vertical ray upwards from it is one (the line runs +x overall, forward side
    up).  Each arc is cut into pieces monotone in x at its circle's leftmost and rightmost points;
    a piece crosses when its ends lie on either side of the ray (so a ray through a pin counts
    the pin once, or not at all where the line only touches it), +1 running towards +x (the
    upper half of the circle, clockwise) and -1 towards -x."""
    PF = W[W_FP]
    Lx = W[W_FS][FPR:][R_LX]
    top = W[W_FS][F_YTOP] + 2.0 * R
    n = _gather_arcs(W, x, x, y, max(y, top))
    QB = W[W_IP][IQB]
    px = np.empty(4)
    count = 0
    for q in range(n):
        j = QB[q]
        for m in range(-2, 3):
            u0, u1, v0, v1 = _arc_box(W, j, m)
            if x < u0 or x > u1 or v1 < y:
                continue
            ax, ay = PF[PX, j] + m * Lx, PF[PY, j]
            bx, by = _next_pos(W, j)
            bx += m * Lx
            cx, cy = _center(ax, ay, bx, by, R)
            dx = x - cx
            if abs(dx) >= R:
                continue
            ux, uy = ax - cx, ay - cy
            pend = _cw_p(ux, uy, bx - cx, by - cy)
            pl = _cw_p(ux, uy, -1.0, 0.0)
            pr = _cw_p(ux, uy, 1.0, 0.0)
            px[0] = ax
            k = 1
            first, second = (pl, pr) if pl < pr else (pr, pl)
            for pc in (first, second):
                if 0.0 < pc < pend:
                    px[k] = cx - R if pc == pl else cx + R
                    k += 1
            px[k] = bx
            w = math.sqrt(R * R - dx * dx)
            for a in range(k):
                xa, xb = px[a], px[a + 1]
                if (xa > x) != (xb > x):
                    yy = cy + w if xb > xa else cy - w
                    if yy > y:
                        count += 1 if xb > xa else -1
    return count == 1


@njit(**JIT)
def _flag_swept(W, R):
    """After a roll: every free obstacle of the region it changed that now lies behind the line
    was carried over without being met (the line advanced past it); it is behind from now on."""
    SF, SI, PR, OB, CS, CI = W[W_FS], W[W_IS], W[W_FS][FPR:], W[W_OB], W[W_CSI], _citems(W)
    Lx, Ly = PR[R_LX], PR[R_LY]
    if not SF[F_BX0] <= SF[F_BX1]:
        return
    x0, x1, y0, y1 = SF[F_BX0] - R, SF[F_BX1] + R, SF[F_BY0] - R, SF[F_BY1] + R
    if x1 - x0 > Lx:
        x0, x1 = 0.0, Lx
    ncx, ncy = SI[I_NCX], SI[I_NCY]
    kx, ix, nkx = _span(x0, x1, Lx, ncx)
    ky0, iy0, nky = _span(y0, y1, Ly, ncy)
    for _a in range(nkx):
        ky, iy = ky0, iy0
        for _b in range(nky):
            cell = kx + ncx * ky
            for e in range(CS[cell], CS[cell + 1]):
                k = CI[e]
                x, y = OB[0, k] + ix * Lx, OB[1, k] + iy * Ly
                if x < x0 or x > x1 or y < y0 or y > y1:
                    continue
                if _behind(W, k, iy) or _find_pin(W, k, iy) >= 0:
                    continue
                SI[I_WFLAG] += 1
                if _behind_line(W, x, y, R):
                    _set_behind(W, k, iy)
                    SI[I_SWEPT] += 1
            ky += 1
            if ky == ncy:
                ky, iy = 0, iy + 1
        kx += 1
        if kx == ncx:
            kx, ix = 0, ix + 1


@njit(**JIT)
def _start_roll(W, P, mP, ocx, ocy, phi0, N, mN, s, R):
    """Set up a roll about pivot P (period offset mP in the roll frame) towards target N, the
    target's current left arm and angle taken from the line; :func:`advance` runs it (the event
    handlers only set rolls up: a shallow call graph keeps numba's compile time down)."""
    RI, RF = W[W_IS][IRI:], W[W_FS][FRF:]
    if N == P:
        unx, uny, phin = 0.0, 0.0, phi0
    else:
        unx, uny = _left_tangent(W, N, mN, R)
        phin = _pin_phi(W, N, s)
    _link(W, P, N, mN - mP)
    W[W_IS][I_UNRES] = P
    RI[RP], RI[RMP], RI[RN], RI[RMN] = P, mP, N, mN
    RF[RCX], RF[RCY], RF[RPHI0] = ocx, ocy, phi0
    RF[RUNX], RF[RUNY], RF[RPHIN] = unx, uny, phin
    return ROLL_START


@njit(**JIT)
def _run_roll(W, s, R, free):
    """Run the roll set up in the roll state (after a free glide when ``free``: the line has no
    pin left); afterwards mark what it carried the line over."""
    SF = W[W_FS]
    r = _free_line(W, s, R) if free else ROLL_ON
    if r == ROLL_ON:
        r = _roll(W)
    W[W_IS][I_UNRES] = -1
    if r == ROLL_DONE:
        _gap_clear(W)                   # the line is whole again: no gap in the glide estimate
        _flag_swept(W, R)
    SF[F_BX0], SF[F_BY0], SF[F_BX1], SF[F_BY1] = np.inf, np.inf, -np.inf, -np.inf
    return r


@njit(**JIT)
def _do_capture(W, i, k, ix, iy, s, R):
    """Arc i meets a free obstacle as it bows: the obstacle becomes a pin on the same circle
    (arm angle π; the neighbours' tangents do not move, only their chords)."""
    PF, PI, SI = W[W_FP], W[W_IP], W[W_IS]
    j, sh = PI[PNEXT, i], PI[PSH, i]
    px, py = PF[PX, i], PF[PY, i]
    nx, ny = _next_pos(W, i)
    q = _alloc(W, k, iy)
    if q < 0:
        W[W_IS][I_WHY] = 1990
        return S_FATAL
    qx, qy = _roll_pos(W, q, ix)
    cpn, cpq, cqn = _dist(px, py, nx, ny), _dist(px, py, qx, qy), _dist(qx, qy, nx, ny)
    apn, apq, aqn = (math.asin(min(1.0, cpn * s)), math.asin(min(1.0, cpq * s)),
                     math.asin(min(1.0, cqn * s)))
    _set_alpha(W, i, PF[PAL, i] - apn + apq)
    _set_alpha(W, j, PF[PAL, j] - apn + aqn)
    _set_alpha(W, q, math.pi + apq + aqn)
    W[W_FS][F_DA] += (_arc_integral(px, py, qx, qy, R) + _arc_integral(qx, qy, nx, ny, R)
                      - _arc_integral(px, py, nx, ny, R))
    _link(W, i, q, ix)
    _link(W, q, j, sh - ix)
    if not (_register(W, i) and _register(W, q)):
        W[W_IS][I_WHY] = 2003
        return S_FATAL
    _touch(W, i)
    _touch(W, q)
    _touch(W, j)
    SI[I_CAPT] += 1
    return ROLL_DONE


@njit(**JIT)
def _do_release(W, b, s, R):
    """Pin b releases (its arm angle fell below its critical angle): the roll starts about the pin
    before it, from the circle of that pin's arc, towards the pin after it."""
    PI, SI = W[W_IP], W[W_IS]
    a, c = PI[PPREV, b], PI[PNEXT, b]
    mb = PI[PSH, a]
    mc = mb + PI[PSH, b]
    ax, ay = _roll_pos(W, a, np.int64(0))
    bx, by = _roll_pos(W, b, mb)
    cx, cy = _roll_pos(W, c, mc)
    c1x, c1y = _center(ax, ay, bx, by, R)
    c2x, c2y = _center(bx, by, cx, cy, R)
    _gap_clear(W)
    _gap_put(W, np.int64(0), c1x, c1y, ax, ay, bx, by, R)
    single = SI[I_NPINS] == 1          # b alone: the gap is its one arc, round one period
    if not single:
        _gap_put(W, np.int64(0), c2x, c2y, bx, by, cx, cy, R)
    W[W_FS][F_DA] -= (_arc_integral(ax, ay, bx, by, R) + _arc_integral(bx, by, cx, cy, R))
    _leave(W, b, bx, by)
    if SI[I_NPINS] == 1:
        W[W_FS][F_DA] += _arc_integral(bx, by, cx, cy, R)
        _drop(W, b)
        SI[I_UNRES] = -1
        return FREE_START
    phi0 = _pin_phi(W, a, s)            # two pins (a == c): the target is a one period on
    _drop(W, b)
    return _start_roll(W, a, np.int64(0), c1x, c1y, phi0, c, mc, s, R)


@njit(**JIT)
def _do_instability(W, i, s, R):
    """Arc i can no longer span its chord (chord >= 2R): it rolls on about its left pin from the
    semicircle on the chord, towards its right pin."""
    PI, SI = W[W_IP], W[W_IS]
    j, mj = PI[PNEXT, i], PI[PSH, i]
    px, py = _roll_pos(W, i, np.int64(0))
    qx, qy = _roll_pos(W, j, mj)
    cx, cy = _center(px, py, qx, qy, R)
    _gap_clear(W)
    _gap_put(W, np.int64(0), cx, cy, px, py, qx, qy, R)
    W[W_FS][F_DA] -= _arc_integral(px, py, qx, qy, R)
    return _start_roll(W, i, np.int64(0), cx, cy, _pin_phi(W, i, s), j, mj, s, R)


@njit(**JIT)
def _do_tangent(W, i, j, m, s, R):
    """Arcs i and j (period offset m) touch as they bow: the part of the line between them is cut
    off as a loop, and the line rolls on from the first arc's left pin to the second's right pin."""
    PI, SI = W[W_IP], W[W_IS]
    if j == i:
        return ROLL_DONE
    mj = _walk_offset(W, PI[PNEXT, i], PI[PSH, i], j, i)
    if mj == m:
        f, mf, g, mg = i, 0, j, m
    elif mj == m + 1:
        f, mf, g, mg = j, m, i, 0
    else:
        SI[I_DINVALID] += 1
        return ROLL_DONE
    f2, mf2 = PI[PNEXT, f], mf + PI[PSH, f]
    g2, mg2 = PI[PNEXT, g], mg + PI[PSH, g]
    ax, ay = _roll_pos(W, f, mf)
    bx, by = _roll_pos(W, f2, mf2)
    cx, cy = _roll_pos(W, g, mg)
    dx, dy = _roll_pos(W, g2, mg2)
    st, zx, zy = tangency(ax, ay, bx, by, cx, cy, dx, dy, s * (1.0 - STRESS_TIE),
                          s * (1.0 + STRESS_TIE))
    if st == np.inf:
        SI[I_DINVALID] += 1
        return ROLL_DONE
    c1x, c1y = _center(ax, ay, bx, by, R)
    c2x, c2y = _center(cx, cy, dx, dy, R)
    n = _ls_add(W, np.int64(0), c1x, c1y, zx, zy, bx, by, np.int64(-1))
    n, area = _ls_chain(W, f2, mf2, g, n, R)
    n = _ls_add(W, n, c2x, c2y, cx, cy, zx, zy, PI[PK, g])
    _loop_finish(W, n, R)
    i1, i2 = _arc_integral(ax, ay, bx, by, R), _arc_integral(cx, cy, dx, dy, R)
    W[W_FS][F_DA] -= i1 + i2 + area
    _gap_clear(W)
    _gap_put(W, np.int64(0), c1x, c1y, ax, ay, zx, zy, R)
    _gap_put(W, np.int64(0), c2x, c2y, zx, zy, dx, dy, R)
    phi0 = _pin_phi(W, f, s)
    _drop_chain(W, f2, g)
    return _start_roll(W, f, mf, c1x, c1y, phi0, g2, mg2, s, R)


@njit(**JIT)
def _do_sweep(W, x, d, m, s, R):
    """Arc x bows over pin d of the line (period offset m): the part of the line between the arc
    and the pin is cut off as a loop, and the arc ends at d instead (same circle)."""
    PF, PI, SI = W[W_FP], W[W_IP], W[W_IS]
    x2, mx2 = PI[PNEXT, x], PI[PSH, x]
    md = _walk_offset(W, x2, mx2, d, x)
    px, py = _roll_pos(W, x, np.int64(0))
    qx, qy = _roll_pos(W, x2, mx2)
    dx, dy = _roll_pos(W, d, m)
    ccx, ccy = _center(px, py, qx, qy, R)
    ix_ = _arc_integral(px, py, qx, qy, R)
    if md == m:                         # d ahead of the arc: x now ends at d
        n = _ls_add(W, np.int64(0), ccx, ccy, dx, dy, qx, qy, np.int64(-1))
        n, area = _ls_chain(W, x2, mx2, d, n, R)
        _loop_finish(W, n, R)
        unx, uny = _left_tangent(W, d, m, R)
        tnx, tny = -(dy - ccy) / R, (dx - ccx) / R
        phid = _pin_phi(W, d, s) - _turn(tnx, tny, unx, uny)
        bx, by = _next_pos(W, d)
        cr = _dist(PF[PX, d], PF[PY, d], bx, by)
        cnew = _dist(px, py, dx, dy)
        cold = _dist(px, py, qx, qy)
        _drop_chain(W, x2, PI[PPREV, d])
        _set_alpha(W, x, PF[PAL, x] - math.asin(min(1.0, cold * s))
                   + math.asin(min(1.0, cnew * s)))
        _link(W, x, d, m)
        _set_alpha(W, d, phid + math.asin(min(1.0, cnew * s)) + math.asin(min(1.0, cr * s)))
        W[W_FS][F_DA] += _arc_integral(px, py, dx, dy, R) - ix_ - area
    elif md == m + 1:                   # d behind the arc: the arc now starts at d
        n, area = _ls_chain(W, d, m, x, np.int64(0), R)
        n = _ls_add(W, n, ccx, ccy, px, py, dx, dy, PI[PK, x])
        _loop_finish(W, n, R)
        bx, by = _next_pos(W, d)
        bx += m * W[W_FS][FPR:][R_LX]
        c0x, c0y = _center(dx, dy, bx, by, R)
        told_x, told_y = -(c0y - dy) / R, (c0x - dx) / R
        tnew_x, tnew_y = -(ccy - dy) / R, (ccx - dx) / R
        phid = _pin_phi(W, d, s) - _turn(told_x, told_y, tnew_x, tnew_y)
        ax, ay = _prev_pos(W, d)
        cl = _dist(PF[PX, d], PF[PY, d], ax, ay)
        cnew = _dist(dx, dy, qx, qy)
        cold = _dist(px, py, qx, qy)
        _set_alpha(W, x2, PF[PAL, x2] - math.asin(min(1.0, cold * s))
                   + math.asin(min(1.0, cnew * s)))
        _drop_chain(W, PI[PNEXT, d], x)
        _link(W, d, x2, mx2 - m)
        _set_alpha(W, d, phid + math.asin(min(1.0, cl * s)) + math.asin(min(1.0, cnew * s)))
        W[W_FS][F_DA] += _arc_integral(dx, dy, qx, qy, R) - ix_ - area
        x = d
    else:
        SI[I_DINVALID] += 1
        return ROLL_DONE
    if not _register(W, x):
        W[W_IS][I_WHY] = 2156
        return S_FATAL
    _touch(W, x)
    _touch(W, PI[PNEXT, x])
    _touch(W, PI[PPREV, x])
    return ROLL_DONE


@njit(**JIT)
def _process(W, e, se, s, R):
    """Carry out the event of element e at stress s; ROLL_DONE or a status."""
    EP = W[W_EH]
    i = e // 2
    if e % 2 == 1:
        return _do_release(W, i, s, R)
    kind = EP[EKIND, e]
    if kind == EV_CAPTURE:
        return _do_capture(W, i, EP[EA, e], EP[EC, e], EP[EB, e], s, R)
    if kind == EV_INSTABLE:
        return _do_instability(W, i, s, R)
    if kind == EV_TANGENT:
        return _do_tangent(W, i, EP[EA, e], EP[EC, e], min(se, s), R)
    if kind == EV_SWEEP:
        return _do_sweep(W, EP[EA, e], EP[EC, e], EP[EE, e], s, R)
    return ROLL_DONE


# --- loading -------------------------------------------------------------------------------------
def _init(run: "_Run", y0: float) -> int:
    """The straight line along y = y0 glides (at any stress above zero) to the first obstacles it
    meets; those at that height within rounding pin it.  Every image below y0 is behind.
    Returns the number of pins."""
    W = run.W
    OB, OJ = W[W_OB], W[W_OJ]
    Ly = float(W[W_FS][FPR + R_LY])
    m = OB.shape[1]
    if m == 0:
        return 0
    iy = np.ceil((y0 - OB[1]) / Ly).astype(np.int64)
    iy += (OB[1] + iy * Ly < y0)
    OJ[0], OJ[1], OJ[2], OJ[3], OJ[4] = iy, 0, -1, 0, iy
    y = OB[1] + iy * Ly
    tol = POINT_TIE * max(float(W[W_FS][FPR + R_LX]), Ly)
    sel = np.flatnonzero(y <= y.min() + tol)
    sel = sel[np.argsort(OB[0, sel], kind="stable")].astype(np.int64)
    _init_pins(run.tuple(), sel, iy[sel].astype(np.int64))
    return int(sel.shape[0])


@njit(**JIT)
def _init_pins(W, ks, iys):
    """Pin obstacle images (ks, iys), in order along x, as the straight starting line; their
    events are computed when :func:`advance` starts."""
    PF = W[W_FP]
    n = ks.shape[0]
    slots = np.empty(n, np.int64)
    for a in range(n):
        slots[a] = _alloc(W, ks[a], iys[a])
    for a in range(n):
        _link(W, slots[a], slots[(a + 1) % n], np.int64(1) if a == n - 1 else np.int64(0))
    for a in range(n):
        i = slots[a]
        ax, ay = _prev_pos(W, i)
        bx, by = _next_pos(W, i)
        PF[PAL, i] = _chord_alpha(ax, ay, PF[PX, i], PF[PY, i], bx, by)
    W[W_FS][F_S] = 0.0
    for a in range(n):
        _register(W, slots[a])
        _touch(W, slots[a])
    W[W_IS][I_ANCHOR] = slots[0]


@njit(**JIT)
def _line_area(W, s):
    """Area under the line (b²), its node count when sampled at spacing h, over one period."""
    PF, PI, SI = W[W_FP], W[W_IP], W[W_IS]
    h = W[W_FS][FPR:][R_H]
    R = np.inf if s <= 0.0 else 0.5 / s
    i = SI[I_ANCHOR]
    area, nodes = 0.0, 0
    for _ in range(SI[I_NPINS] + 2):
        px, py = PF[PX, i], PF[PY, i]
        qx, qy = _next_pos(W, i)
        area += _arc_integral(px, py, qx, qy, R)
        nodes += max(1, int(math.ceil(_arc_length(_dist(px, py, qx, qy), R) / h)))
        i = PI[PNEXT, i]
        if i == SI[I_ANCHOR]:
            break
    return area, nodes


@njit(**JIT)
def _count_pins(W):
    PI, SI = W[W_IP], W[W_IS]
    i, n = SI[I_ANCHOR], 0
    for _ in range(PI.shape[1] + 1):
        n += 1
        i = PI[PNEXT, i]
        if i == SI[I_ANCHOR]:
            break
    return n


@njit(**JIT)
def _row(W, s, area, flowing):
    SI, SF, HR = W[W_IS], W[W_FS], W[W_HR]
    r = SI[I_NHIST]
    _, nodes = _line_area(W, s)
    HR[H_S, r], HR[H_AREA, r], HR[H_SWEPT, r] = s, area, area - SF[F_AROW]
    HR[H_PINS, r], HR[H_EVENTS, r] = _count_pins(W), SI[I_EVENTS] - SI[I_ROWEV]
    HR[H_NODES, r], HR[H_FLOW, r] = nodes, flowing
    SI[I_NHIST] = r + 1
    SI[I_ROWEV] = SI[I_EVENTS]
    SF[F_SROW], SF[F_AROW] = s, area


@njit(**JIT)
def _end_avalanche(W):
    """The line is stable at the current stress: a pinned configuration.  Slots left in the
    avalanche become free, the journal restarts, and the configuration is the new reference."""
    PI, SI, SF = W[W_IP], W[W_IS], W[W_FS]
    i = SI[I_DEFER]
    while i >= 0:
        nxt = PI[PLNK, i]
        PI[PST, i] = ST_FREE
        PI[PLNK, i] = SI[I_FREE]
        SI[I_FREE] = i
        SI[I_NFREE] += 1
        i = nxt
    SI[I_DEFER] = -1
    SI[I_JN] = 0
    SI[I_JON] = 0
    SF[F_SLO] = SF[F_S]
    SI[I_LOOPSPIN], SI[I_LARCPIN] = SI[I_NLOOP], SI[I_NLARC]
    a = SI[I_LASTPIN]
    if a < 0 or PI[PST, a] != ST_LINE:
        for j in range(PI.shape[1]):
            if PI[PST, j] == ST_LINE:
                a = j
                break
    SI[I_ANCHOR] = a


@njit(**JIT)
def _restore(W):
    """Undo the current avalanche (it was the flow): back to the last pinned configuration."""
    PF, PI, SI, JI, JF = W[W_FP], W[W_IP], W[W_IS], W[W_IP][IJ:IJ + 5], W[W_FP][FJ]
    for n in range(SI[I_JN] - 1, -1, -1):
        i = JI[0, n]
        PI[PPREV, i], PI[PNEXT, i], PI[PSH, i], PI[PST, i] = JI[1, n], JI[2, n], JI[3, n], JI[4, n]
        PF[PAL, i] = JF[n]
    SI[I_JN] = 0
    JO, OI = W[W_OJ][OJO:], W[W_OJ]
    for n in range(SI[I_JON] - 1, -1, -1):
        OI[0, JO[0, n]], OI[1, JO[0, n]] = JO[1, n], JO[2, n]
    SI[I_JON] = 0
    SI[I_NPINS] = _count_pins(W)


@njit(**JIT)
def advance(W):
    """Raise the stress event by event until the line flows or a return condition; returns the
    status (S_*).  Resumable: every return happens between two events."""
    SI, SF, PR, HP, EK, PI = W[W_IS], W[W_FS], W[W_FS][FPR:], W[W_EH][EHP:], W[W_EK], W[W_IP]
    Lx = PR[R_LX]
    if SI[I_NTOUCH] > 0:
        _refresh_touched(W)
    while True:
        if SI[I_EVENTS] >= SI[I_MAXEV]:
            return S_MAXEV
        if SI[I_APN] > 3 * (W[W_AP].shape[1] // 4):   # compact at 3/4, grow if still past 1/2
            _compact(W)
        C = W[W_FP].shape[1]
        if (SI[I_NFREE] < SI[I_NPINS] + 64 or SI[I_APN] > W[W_AP].shape[1] // 2
                or SI[I_NLARC] + C > W[W_LR].shape[1] or SI[I_NLOOP] + C > W[W_LO].shape[0] - 2):
            return S_GROW
        if SI[I_NHIST] + 2 > W[W_HR].shape[1]:
            return S_HIST
        if SI[I_SNAPEVERY] > 0 and SI[I_EVENTS] >= SI[I_NEXTSNAP]:
            SI[I_NEXTSNAP] += SI[I_SNAPEVERY]
            return S_SNAP
        if SI[I_HN] == 0:
            return S_GIVEUP
        e = HP[0, 0]
        se = EK[e]
        s = SF[F_S]
        if se > s * (1.0 + STRESS_TIE) or (s == 0.0 and se > 0.0):
            _end_avalanche(W)
            if se > PR[R_SMAX]:
                if SF[F_SROW] < s:
                    _row(W, s, _line_area(W, s)[0], np.int64(0))
                return S_GIVEUP
            if s >= SF[F_SROW] * (1.0 + HISTORY_STRESS_BIN) and s > 0.0:
                _row(W, s, _line_area(W, s)[0], np.int64(0))
            SF[F_S] = se
            SI[I_EPOCH] += 1
            SF[F_DA], SF[F_AGAP] = 0.0, 0.0
            continue
        _hremove(W, e)
        if not _event_valid(W, e):
            i = e // 2
            if PI[PST, i] == ST_LINE:
                if e % 2 == 0:
                    _arc_event(W, i)
                else:
                    _pin_event(W, i)
            continue
        R = np.inf if s <= 0.0 else 0.5 / s
        SF[F_BX0], SF[F_BY0], SF[F_BX1], SF[F_BY1] = np.inf, np.inf, -np.inf, -np.inf
        r = _process(W, e, se, s, R)
        if r == ROLL_START or r == FREE_START:
            r = _run_roll(W, s, R, r == FREE_START)
        SI[I_EVENTS] += 1
        if r == ROLL_DONE:
            _refresh_touched(W)
            if (SF[F_DA] + SF[F_AGAP]) / Lx < PR[R_FLOW]:
                continue
            r = S_FLOW
        if r == S_FLOW:
            area = SF[F_DA] + SF[F_AGAP]
            _restore(W)
            _row(W, s, _line_area(W, s)[0] + area, np.int64(1))
        return r


# --- Python driver -------------------------------------------------------------------------------
#: Pin slots allocated per box width in obstacle spacings (a line holds about 1.5 pins per
#: spacing at its CRSS, more in an avalanche); grown by doubling when short.
PINS_PER_SPACING = 32
#: Least pin capacity.
MIN_PINS = 256
#: Entries of the arc cell pool per pin slot (an arc covers a few cells); grown when short.
POOL_PER_PIN = 16
#: Entries of the gap's cell pool per gap arc (the box of its circle, some R/L_s cells a side);
#: when short, that roll's crossing searches go through the whole gap instead.
GAP_POOL_PER_ARC = 16
#: The gap gets its cell grid once it holds more arcs than this (a search through a few arcs is
#: cheaper than the grid; measured on random fields, where most gaps hold 2 to 10 arcs).
GAP_INDEX_MIN = 24


def arc_limitations(obstacles: ObstacleField, model: LineModel) -> str | None:
    """None when the exact arc construction applies to this field and line model, else why not.

    It needs point obstacles (no impenetrable disc: finite discs are rings of points whose arcs
    the construction does not resolve; a shearable particle is a point obstacle at its centre
    whatever the section radius it records for plots) and a constant line tension (the arcs are
    circles only then).
    """
    if model.elasticity.model != "constant":
        return (f"the arc construction needs a constant line tension, not the "
                f"{model.elasticity.model!r} line model")
    discs = np.isinf(np.asarray(obstacles.fc)) & (np.asarray(obstacles.radius) > 0.0)
    if obstacles.n and np.any(discs):
        return "the arc construction needs point obstacles; this field has impenetrable discs"
    return None


def critical_angles(obstacles: ObstacleField, tension: float) -> np.ndarray:
    """(m,) critical angle φc = 2 acos(F_c/(2Γ)) of every obstacle (rad); 0 when impenetrable."""
    ratio = np.clip(np.asarray(obstacles.fc, dtype=float) / (2.0 * tension), 0.0, 1.0)
    return 2.0 * np.arccos(ratio)


def _pow2_at_least(n: int) -> int:
    p = 1
    while p < n:
        p *= 2
    return p


class _Run:
    """The work arrays of one construction (the ``W_*`` tuple slots)."""

    def __init__(self, obstacles: ObstacleField, model: LineModel, protocol: Protocol,
                 y0: float, capacity: int, snapshot_every: int):
        m = obstacles.n
        self.field, self.model, self.protocol, self.y0 = obstacles, model, protocol, float(y0)
        Lx, Ly = float(obstacles.Lx), float(obstacles.Ly)
        cstart, citems, ncx, ncy = obstacles.cell_list()
        size = float(obstacles.spacing)
        ancx = max(1, int(Lx / size))
        ancy = _pow2_at_least(max(1, int(Ly / size)))
        C = capacity
        W = self.W = [None] * N_W
        W[W_FP] = np.zeros((N_FP, C))
        ip = np.zeros((N_IP, C), np.int64)
        ip[PPREV:PNEXT + 1] = -1
        ip[PLNK] = np.append(np.arange(1, C), -1)
        ip[ITS] = -1
        W[W_IP] = ip
        W[W_EK] = np.full(2 * C, np.inf)
        eh = np.zeros((N_EH, 2 * C), np.int64)
        eh[EHP:] = -1
        W[W_EH] = eh
        W[W_OB] = np.ascontiguousarray(np.vstack([
            np.asarray(obstacles.x, float), np.asarray(obstacles.y, float),
            critical_angles(obstacles, model.tension)]).reshape(3, m))
        W[W_OJ] = np.zeros((N_OJ, m), np.int64)
        W[W_CSI] = np.concatenate([cstart, citems]).astype(np.int64)
        ag = np.full((3, ancx * ancy), -1, np.int64)
        W[W_AG] = ag
        W[W_AP] = np.zeros((3, max(2 * ancx * ancy, POOL_PER_PIN * C)), np.int64)
        W[W_GE] = np.zeros((3, GAP_POOL_PER_ARC * C), np.int64)
        W[W_LS] = np.zeros((N_LA, C + 8))
        W[W_LR] = np.zeros((N_LA, 4 * C))
        W[W_LO] = np.zeros(4 * C + 1, np.int64)
        W[W_HR] = np.zeros((N_HR, HISTORY_CHUNK))
        fs = np.zeros(N_FS)
        fs[[F_BX0, F_BY0]] = np.inf
        fs[[F_BX1, F_BY1, F_YTOP]] = -np.inf
        pr = fs[FPR:FPR + N_PR]
        pr[R_LX], pr[R_LY] = Lx, Ly
        pr[R_FLOW] = protocol.flow_distance
        pr[R_SMAX] = (protocol.max_stress - model.friction) / (2.0 * model.tension)
        pr[R_OCWX], pr[R_OCWY] = Lx / ncx, Ly / ncy
        pr[R_ACW], pr[R_ACH] = Lx / ancx, size
        pr[R_H] = model.node_spacing
        W[W_FS] = fs
        si = np.zeros(N_IS, np.int64)
        si[I_FREE], si[I_NFREE], si[I_DEFER], si[I_EPOCH] = 0, C, -1, 1
        si[I_UNRES], si[I_LASTPIN], si[I_ANCHOR] = -1, -1, -1
        si[I_NCX], si[I_NCY], si[I_ANCX], si[I_ANCY] = ncx, ncy, ancx, ancy
        si[I_SNAPEVERY] = max(0, int(snapshot_every))
        si[I_NEXTSNAP] = si[I_SNAPEVERY]
        heights = 1 + int(np.ceil(protocol.flow_distance / Ly))
        si[I_MAXEV] = EVENTS_PER_OBSTACLE * (m + 16) * heights
        W[W_IS] = si

    @property
    def capacity(self) -> int:
        return self.W[W_FP].shape[1]

    def tuple(self):
        return tuple(self.W)

    def grow(self) -> None:
        """Double the pin capacity (and what is sized by it) keeping the state; grow the arc pool
        and the loop record when they run short."""
        W, C = self.W, self.capacity
        si = W[W_IS]

        def wider(a, fill, n):
            out = np.full(a.shape[:-1] + (n,), fill, dtype=a.dtype)
            out[..., : a.shape[-1]] = a
            return out

        if si[I_NFREE] < si[I_NPINS] + 64 + C // 4:
            C2 = 2 * C
            W[W_FP] = wider(W[W_FP], 0.0, C2)
            ip = wider(W[W_IP], 0, C2)
            ip[PPREV:PNEXT + 1, C:] = -1
            ip[PLNK, C:] = np.append(np.arange(C + 1, C2), si[I_FREE])
            ip[ITS, C:] = -1
            W[W_IP] = ip
            si[I_FREE] = C
            si[I_NFREE] += C
            W[W_EK] = wider(W[W_EK], np.inf, 2 * C2)
            eh = wider(W[W_EH], 0, 2 * C2)
            eh[EHP:, 2 * C:] = -1
            W[W_EH] = eh
            W[W_LS] = wider(W[W_LS], 0.0, C2 + 8)
            W[W_GE] = wider(W[W_GE], 0, GAP_POOL_PER_ARC * C2)
        if si[I_APN] > W[W_AP].shape[1] // 4:
            W[W_AP] = wider(W[W_AP], 0, 2 * W[W_AP].shape[1])
        if si[I_NLARC] + 2 * self.capacity > W[W_LR].shape[1] or \
                si[I_NLOOP] + self.capacity > W[W_LO].shape[0] - 2:
            n = 2 * W[W_LR].shape[1] + 2 * self.capacity
            W[W_LR] = wider(W[W_LR], 0.0, n)
            W[W_LO] = wider(W[W_LO], 0, n + 1)


def _sample_arc(px, py, qx, qy, R, h):
    """Points from P (included) to Q (excluded) along the arc of radius R, at most h apart."""
    c = math.hypot(qx - px, qy - py)
    length = c if not np.isfinite(R) else 2.0 * R * math.asin(min(1.0, 0.5 * c / R))
    n = max(1, int(math.ceil(length / h)))
    if not np.isfinite(R) or c == 0.0:
        u = np.arange(n) / n
        return px + u * (qx - px), py + u * (qy - py)
    cx, cy = _center(px, py, qx, qy, R)
    a0 = math.atan2(py - cy, px - cx)
    sweep = 2.0 * math.asin(min(1.0, 0.5 * c / R))
    a = a0 - sweep * np.arange(n) / n
    return cx + R * np.cos(a), cy + R * np.sin(a)


def _pins_in_order(W) -> list[tuple[int, float, float]]:
    """The line's pins from the anchor, one period: (slot, x, y) with x unwrapped."""
    PF, PI, SI = W[W_FP], W[W_IP], W[W_IS]
    Lx = W[W_FS][FPR:][R_LX]
    i = int(SI[I_ANCHOR])
    if i < 0:
        return []
    out, shift = [], 0
    for _ in range(PI.shape[1] + 1):
        out.append((i, PF[PX, i] + shift * Lx, PF[PY, i]))
        shift += PI[PSH, i]
        i = int(PI[PNEXT, i])
        if i == SI[I_ANCHOR]:
            break
    return out


def _line_state(run: _Run, s: float, y_free: float | None = None) -> LineState:
    """The configuration at stress s sampled along its arcs (pins marked), with its loops."""
    W = run.W
    Lx, h = float(W[W_FS][FPR:][R_LX]), run.model.node_spacing
    R = np.inf if s <= 0.0 else 0.5 / s
    pins = _pins_in_order(W)
    xs, ys, ps = [], [], []
    if not pins:                               # a free straight line (no obstacle at all)
        n = max(K.MIN_NODES, int(math.ceil(Lx / h)))
        xs, ys, ps = [(np.arange(n) + 0.5) * Lx / n], [np.full(n, y_free)], [np.full(n, -1)]
    for a, (i, x, y) in enumerate(pins):
        nx_, ny_ = (pins[a + 1][1], pins[a + 1][2]) if a + 1 < len(pins) else (
            pins[0][1] + Lx, pins[0][2])
        px_, py_ = _sample_arc(x, y, nx_, ny_, R, h)
        pin = np.full(px_.shape[0], -1, np.int64)
        pin[0] = W[W_IP][PK, i]
        xs.append(px_)
        ys.append(py_)
        ps.append(pin)
    x, y, pin = np.concatenate(xs), np.concatenate(ys), np.concatenate(ps).astype(np.int64)
    lx, ly, lp, off = _loop_nodes(W, int(W[W_IS][I_LOOPSPIN]), R, h)
    meta = np.zeros(K.N_META, np.int64)
    meta[K.M_N], meta[K.M_NLOOPS], meta[K.M_NLOOPNODES] = x.shape[0], off.shape[0] - 1, lx.shape[0]
    si = W[W_IS]
    meta[K.M_STEPS] = si[I_EVENTS]
    meta[K.M_RELEASES], meta[K.M_CAPTURES] = si[I_REL] + si[I_BYP], si[I_CAPT]
    meta[K.M_RECONNECT] = si[I_LOOPS]
    cap = max(x.shape[0], 4)
    grow = lambda a, fill: np.concatenate([a, np.full(cap - a.shape[0], fill, a.dtype)])
    lcap = max(lx.shape[0], 4)
    lgrow = lambda a, fill: np.concatenate([a, np.full(lcap - a.shape[0], fill, a.dtype)])
    return LineState(grow(x, 0.0), grow(y, 0.0), grow(pin, -1), np.full(cap, -1, np.int64), meta,
                     lgrow(lx, 0.0), lgrow(ly, 0.0), lgrow(lp, -1),
                     np.concatenate([off, np.zeros(max(0, lcap + 1 - off.shape[0]), np.int64)]),
                     Lx)


def _loop_nodes(W, nloops: int, R: float, h: float):
    """The first nloops recorded loops sampled along their arcs (CSR: x, y, pin, offsets)."""
    LR, LRK, LO = W[W_LR], W[W_LR][LSK], W[W_LO]
    na = int(LO[nloops]) if nloops > 0 else 0
    if na == 0:
        return np.zeros(0), np.zeros(0), np.zeros(0, np.int64), np.zeros(1, np.int64)
    cx, cy, x0, y0, x1, y1 = LR[:6, :na]
    point = (x0 == x1) & (y0 == y1)
    a0 = np.arctan2(y0 - cy, x0 - cx)
    sweep = np.mod(a0 - np.arctan2(y1 - cy, x1 - cx), 2.0 * np.pi)    # clockwise
    sweep[point] = 0.0
    n = np.ones(na, np.int64) if not np.isfinite(R) else np.maximum(
        1, np.ceil(R * sweep / h).astype(np.int64))
    n[point] = 1
    arc = np.repeat(np.arange(na), n)
    first = np.cumsum(n) - n
    t = (np.arange(arc.shape[0]) - first[arc]) / n[arc]
    ang = a0[arc] - sweep[arc] * t
    lx = np.where(point[arc], x0[arc], cx[arc] + R * np.cos(ang))
    ly = np.where(point[arc], y0[arc], cy[arc] + R * np.sin(ang))
    lp = np.full(arc.shape[0], -1, np.int64)
    lp[first] = LRK[:na]
    off = np.concatenate([[0], np.cumsum(n)])[LO[: nloops + 1]]
    return lx, ly, lp, off.astype(np.int64)


def _cw_angle(ux, uy, vx, vy) -> float:
    """Clockwise angle (rad, [0, 2π)) from direction u to direction v."""
    a = math.atan2(uy * vx - ux * vy, ux * vx + uy * vy)
    return a if a >= 0.0 else a + 2.0 * math.pi


def _counters(W) -> dict:
    si = W[W_IS]
    return {"captures": int(si[I_CAPT]), "releases": int(si[I_REL]),
            "bypasses": int(si[I_BYP]), "loops": int(si[I_LOOPS]),
            "reconnections": int(si[I_LOOPS]), "free_glides": int(si[I_TRANSL]),
            "events": int(si[I_EVENTS]), "loops_not_recorded": int(si[I_LTRUNC]),
            "diag_behind_in_lens": int(si[I_DBEHIND]), "diag_skipped_hits": int(si[I_DINVALID]),
            "diag_loops_without_gap": int(si[I_DXMISS]), "diag_tall_line": int(si[I_DFOLD]),
            "carried_over": int(si[I_SWEPT]),
            "work_lens": int(si[I_WLENS]), "work_roll": int(si[I_WSCAN]),
            "work_swept": int(si[I_WFLAG]), "work_glide": int(si[I_WTRANS]),
            "work_arc_entries": int(si[I_WARCS]), "work_pairs": int(si[I_WPAIRS]),
            "largest_gap": int(si[I_MAXGAP]), "largest_loop": int(si[I_MAXLOOP])}


@dataclass
class ArcRun:
    """Everything a construction produced (reduced units), for tests and diagnostics."""

    status: str
    s: float                   # stress τ/(2Γ) when it stopped (G/(G b²) · b⁻¹ = b⁻¹)
    s_lo: float                # stress of the last pinned configuration
    rows: list
    run: _Run


def run_arcs(obstacles: ObstacleField, model: LineModel, protocol: Protocol, y0: float = 0.0,
             snapshot_every: int = 0,
             on_snapshot: Callable[[LineState, float, int], None] | None = None,
             on_row: Callable[[np.ndarray], None] | None = None) -> ArcRun:
    """Run the construction to the flow (or to giving up) and keep its state (:class:`ArcRun`)."""
    reason = arc_limitations(obstacles, model)
    if reason is not None:
        raise ValueError(reason)
    spacing = float(obstacles.spacing)
    capacity = max(MIN_PINS, PINS_PER_SPACING * int(math.ceil(obstacles.Lx / spacing)))
    while True:
        run = _Run(obstacles, model, protocol, y0, capacity, snapshot_every)
        rows = []
        if _init(run, float(y0)) == 0:
            return ArcRun("flowing", 0.0, 0.0, rows, run)
        while True:
            status = advance(run.tuple())
            if status in (S_HIST, S_FLOW, S_GIVEUP, S_MAXEV):
                si = run.W[W_IS]
                for r in range(int(si[I_NHIST])):
                    rows.append(run.W[W_HR][:, r].copy())
                    if on_row is not None:
                        on_row(rows[-1])
                si[I_NHIST] = 0
            if status == S_GROW:
                run.grow()
            elif status == S_SNAP:
                if on_snapshot is not None:
                    s = float(run.W[W_FS][F_S])
                    on_snapshot(_line_state(run, s), 2.0 * model.tension * s + model.friction,
                                int(run.W[W_IS][I_EVENTS]))
            elif status != S_HIST:
                break
        if status != S_FATAL:
            return ArcRun(STATUS_NAMES[status], float(run.W[W_FS][F_S]),
                          float(run.W[W_FS][F_SLO]), rows, run)
        capacity *= 4


def find_crss_arcs(obstacles: ObstacleField, model: LineModel, protocol: Protocol,
                   y0: float = 0.0, snapshot_every: int = 0,
                   on_snapshot: Callable[[LineState, float, int], None] | None = None,
                   on_relaxation: Callable[[Relaxation], None] | None = None) -> CrssResult:
    """CRSS of a line that starts straight along y = ``y0``, by the exact arc construction.

    Parameters
    ----------
    obstacles : ObstacleField
        Point obstacles (radius 0), each with its own critical force ``fc`` (G b²; inf =
        impenetrable).
    model : LineModel
        ``tension`` Γ (G b², constant line tension), ``friction`` τ_f (G; added as an offset, see
        below), ``node_spacing`` (b: the largest spacing of the sampled output line).
    protocol : Protocol
        ``flow_distance`` (b) and ``max_stress`` (G) are used; ``stress_step``, ``tolerance``
        and ``bisections`` are not (the construction is exact, event by event), nor is
        ``max_steps`` (the events are bounded by ``EVENTS_PER_OBSTACLE`` per obstacle and box
        height of glide instead).
    y0 : float
        Height of the straight starting line (b).
    snapshot_every : int
        Call ``on_snapshot(state, tau, events)`` every so many elementary events (0: only at
        the end).
    on_relaxation : callable
        Receives each history row as it is made.

    Returns
    -------
    CrssResult
        ``crss = hi``, the event stress at which the line flowed (it is pinned at every lower
        stress: the CRSS exactly); ``lo`` the stress at which the last pinned configuration was
        established (it stays pinned up to ``hi``); ``line`` that configuration sampled at the
        CRSS, with the loops cut off before it; ``history`` one row per batch of events within
        HISTORY_STRESS_BIN of stress, and the flow; ``counters`` the elementary events.

    Friction enters as an offset: under monotonic quasi-static loading the configuration at τ
    with friction τ_f is the frictionless one at τ - τ_f (the friction threshold only subtracts
    from the driving stress), so every stress reported is τ_f plus the frictionless one.

    Raises
    ------
    ValueError
        When :func:`arc_limitations` gives a reason (discs, or a line model other than a
        constant line tension).
    """
    gamma, tf = model.tension, model.friction
    Lx = float(obstacles.Lx)
    history: list[Relaxation] = []

    def row(r: np.ndarray) -> None:
        rel = Relaxation("arcs", 2.0 * gamma * r[H_S] + tf, "flowing" if r[H_FLOW] else "pinned",
                         r[H_AREA] / Lx - y0, r[H_SWEPT], int(r[H_PINS]), int(r[H_EVENTS]),
                         int(r[H_NODES]))
        history.append(rel)
        if on_relaxation is not None:
            on_relaxation(rel)

    out = run_arcs(obstacles, model, protocol, y0, snapshot_every, on_snapshot, row)
    W = out.run.W
    tau = 2.0 * gamma * out.s + tf
    lo = 2.0 * gamma * out.s_lo + tf
    state = _line_state(out.run, out.s, y_free=y0)
    if on_snapshot is not None:
        on_snapshot(state, tau, int(W[W_IS][I_EVENTS]))
    name = "exact quasi-static arc construction"
    if out.status == "flowing":
        msg = (f"{name}: flowed at the event stress hi (pinned at every lower stress); lo is "
               "where the last pinned configuration was established")
        return CrssResult(tau, lo, tau, True, msg, history, state, _counters(W))
    msg = (f"{name}: no flow up to {protocol.max_stress:.4g} G" if out.status == "no flow" else
           f"{name}: stopped at the event limit ({int(W[W_IS][I_MAXEV])} events)")
    return CrssResult(np.nan, lo, np.nan, False, msg, history, state, _counters(W))
