"""The contract between the Python driver and the compiled core (no numba here).

Everything a caller of :mod:`dlsim.kernels` must agree on, in one place that imports only NumPy:
the parameters of a relaxation (one named record, packed by :func:`pack_parameters`), the line
models, the slots of the int64 state vector ``meta``, the rows of the work arrays, the status codes
the stepper returns, and the size limits the caller allocates for.  :mod:`dlsim.case` reads the
model names from here, :mod:`dlsim.solver` packs the parameters, the kernels read both.

The kernels take grouped arguments, all plain arrays (numba tuples unpack at no cost):

``line``
    ``(x, y, pin, ign)``: node positions (float64, b), the obstacle each node holds and the one it
    has just left (int64, -1 for none); the first ``meta[M_N]`` entries are used
    (:class:`dlsim.line.LineState`).
``loops``
    ``(loop_x, loop_y, loop_pin, loop_off)``: the Orowan loops, CSR (loop k is
    ``loop_off[k]:loop_off[k+1]``).
``field``
    ``(ox, oy, ofc, opin, cstart, citems, ncx, ncy, Lx, Ly)``: obstacle positions (b), critical
    forces (G b²), how many line or loop nodes hold each obstacle, per periodic image in y
    (:func:`occupancy`; updated by the kernels), the periodic CSR cell list over ``ncx × ncy``
    cells, and the box (b).
``work_f``, ``work_i``
    ``(N_WORK_F, cap)`` float64 and ``(N_WORK_I, cap)`` int64 scratch, one row per ``W_*`` and
    ``I_*`` name below; the caller zeroes them once per relaxation.
"""
from __future__ import annotations

import numpy as np

# --- parameters of one relaxation ----------------------------------------------------------------
#: (name, dtype, meaning): the fields of the parameter record every kernel reads (``prm.name``).
PARAMETERS = (
    ("gamma", "f8", "constant line tension Γ (G b²); 0 when another line model gives the forces"),
    ("tau", "f8", "applied resolved shear stress τ (G)"),
    ("tau_f", "f8", "lattice friction threshold τ_f (G)"),
    ("mobility", "f8", "mobility M (sets the time unit only)"),
    ("l_min", "f8", "shortest segment the remesher keeps (b)"),
    ("l_max", "f8", "longest segment the remesher keeps (b)"),
    ("tolerance", "f8", "equilibrium: largest |τ_eff| on a free node below this (G)"),
    ("flow", "f8", "mean glide past the reference state that counts as flow (b)"),
    ("Lx", "f8", "box width, period of the line (b)"),
    ("Ly", "f8", "box height, period of the obstacle field (b)"),
    ("area_ref", "f8", "area under the line in the reference (last pinned) state (b²)"),
    ("d_ann", "f8", "distance below which parts of opposite sense reconnect (b)"),
    ("model", "i8", "line model code, MODEL_CONSTANT, MODEL_DWK or MODEL_SELF"),
    ("theta", "f8", "angle of the Burgers vector from +x, the initial line direction (rad)"),
    ("nu", "f8", "Poisson ratio"),
    ("a_core", "f8", "core radius: inner cut-off of de Wit–Koehler, a of the non-singular field (b)"),
    ("r_out", "f8", "outer cut-off radius of de Wit–Koehler (b)"),
    ("images", "i8", "periodic images summed segment by segment on each side (self-stress)"),
    ("cutoff", "f8", "self-stress cutoff along x (b), 0 for none"),
    ("refresh", "i8", "time steps between evaluations of the non-local self-stress (>= 1)"),
    ("stiffness", "f8", "line stiffness Γ_s of the time step and the point-implicit update (G b²)"),
)
PARAMETER_DTYPE = np.dtype([(name, kind) for name, kind, _ in PARAMETERS], align=True)


def pack_parameters(values: dict) -> np.record:
    """The parameter record of a relaxation from ``{name: value}`` naming every field once.

    The record reads by attribute (``prm.tau``) in Python and in the kernels alike.

    Raises ``ValueError`` for a missing or an unknown name (a field nobody sets would otherwise
    read as 0), or an integer field given a non-integral value.
    """
    names = PARAMETER_DTYPE.names
    missing = [k for k in names if k not in values]
    unknown = sorted(set(values) - set(names))
    if missing or unknown:
        raise ValueError(f"parameter record: missing {missing or 'none'}, "
                         f"unknown {unknown or 'none'}")
    record = np.zeros(1, PARAMETER_DTYPE)
    for name, kind, _ in PARAMETERS:
        value = values[name]
        if kind == "i8" and int(value) != value:
            raise ValueError(f"parameter record: {name} must be an integer, got {value!r}")
        record[name] = value
    return record.view(np.recarray)[0]


# --- line models ---------------------------------------------------------------------------------
#: Names of the line models (``[elasticity] model``), indexed by their codes below.
MODEL_NAMES = ("constant", "dewit_koehler", "self_stress")
#: Constant line tension Γ = prm.gamma: F_i = Γ (t_i − t_{i−1}).
MODEL_CONSTANT = 0
#: de Wit–Koehler orientation-dependent line energy, energy-consistent nodal forces.
MODEL_DWK = 1
#: The line's full non-singular elastic field (self-stress, images, Orowan loops); no line
#: tension on top of it.
MODEL_SELF = 2

# --- slots of the int64 state vector ``meta`` ----------------------------------------------------
M_N = 0               # number of nodes of the line
M_NLOOPS = 1          # number of loops recorded
M_NLOOPNODES = 2      # nodes used in the loop buffers
M_STEPS = 3           # time steps taken (cumulative, the caller resets it)
M_RELEASES = 4        # obstacles released (cumulative)
M_CAPTURES = 5        # obstacles captured (cumulative)
M_RECONNECT = 6       # reconnections (cumulative)
M_REMESH = 7          # remeshing passes (cumulative)
M_CONTACT_CHECKS = 8  # contact searches run (cumulative)
M_SETTLE = 9          # of the time steps, backward-Euler steps of a settling line (cumulative)
N_META = 10

# --- rows of the work arrays ---------------------------------------------------------------------
# float64 rows of ``work_f``
W_VX = 0        # node velocity (b per time unit)
W_VY = 1
W_FPIN = 2      # force on a pinned node's obstacle (G b²), or a free node's stiffness k_i
W_RX = 3        # centre of the node's obstacle-free disc (b) ...
W_RY = 4
W_RAD = 5       # ... and its radius (b), UNKNOWN when not measured (kernels.move_and_capture)
W_NTX = 6       # unit chord tangent at the node
W_NTY = 7
W_CAPTURE = 8   # captures of one step: positions along the segment, x, y (MAX_CAPTURES each)
W_FEX = 9       # extra nodal forces of the line model (G b²)
W_FEY = 10
W_FAR = 11      # non-local self-stress, kept between evaluations (G)
W_NEAR = 12     # local self-stress (G)
W_BUF = 13      # scratch
W_BX = 14       # remesher's copy of the line
W_BY = 15
W_TAU_INT = 16  # internal stress at the nodes, added to τ (G)
N_WORK_F = 17
# int64 rows of ``work_i``
I_CAPTURE = 0   # captures of one step: segment, obstacle (MAX_CAPTURES each)
I_HEAD = 1      # contact grid: first node of each cell
I_NEXT = 2      # contact grid: next node in the same cell
I_BPIN = 3      # remesher's copy of the line
I_BIGN = 4
I_SRC = 5       # remesher: old index of each rebuilt node
I_KEEP = 6      # remesher: whether each node stays
N_WORK_I = 7

# --- status codes of kernels.relax_line ----------------------------------------------------------
EQUILIBRIUM = 0
FLOWING = 1
MAX_STEPS = 2
CAPACITY = 3
STATUS_NAMES = ("pinned", "flowing", "unresolved", "capacity")

# --- occupancy of the obstacles (``field[3]``) ----------------------------------------------------
#: The images of an obstacle one box height apart are different obstacles to the line (the field
#: repeats in y): an Orowan loop left round an obstacle must not stop the line from pinning on
#: that obstacle's image one box height up.  ``opin[k]`` therefore packs one count of holders
#: (line and loop nodes) per y-image, OCC_BITS bits each, the image index taken modulo
#: OCC_SLOTS: images OCC_SLOTS box heights apart share a count (the line would have to glide
#: that far past a loop for it to matter).  By construction an image has at most one holder
#: (a capture skips held images; a loop takes its pins over from the line).
OCC_BITS = 4
OCC_SLOTS = 15
#: Mask of one image's count (shift it by OCC_BITS × slot).
OCC_MASK = (1 << OCC_BITS) - 1
#: Every image held: the flag of an obstacle that may never be captured (a relaxing loop's own).
OCC_ALL = sum(1 << (OCC_BITS * s) for s in range(OCC_SLOTS))


def occupancy_unit(k: np.ndarray, y: np.ndarray, oy: np.ndarray, Ly: float) -> np.ndarray:
    """The count unit in ``opin`` of obstacle ``k``'s image at height ``y`` (b): one holder there.

    The image index is round((y − oy[k])/Ly) modulo OCC_SLOTS, as in the kernels' ``_occ_unit``.
    """
    iy = np.floor((np.asarray(y, float) - oy[k]) / Ly + 0.5).astype(np.int64) % OCC_SLOTS
    return np.left_shift(np.int64(1), OCC_BITS * iy)


def occupancy(k: np.ndarray, y: np.ndarray, oy: np.ndarray, Ly: float, m: int) -> np.ndarray:
    """(m,) int64 ``opin`` of the holders ``k`` (obstacle indices, -1 for none) at heights ``y``."""
    sel = np.asarray(k) >= 0
    k, y = np.asarray(k)[sel], np.asarray(y)[sel]
    opin = np.zeros(m, np.int64)
    np.add.at(opin, k, occupancy_unit(k, y, oy, Ly))
    return opin


# --- limits the caller allocates for -------------------------------------------------------------
#: Captures recorded in one step at the most (a step moves each node by < l_min/4, so even dense
#: fields capture a handful).
MAX_CAPTURES = 256
#: The remesher never thins a line below this many nodes.
MIN_NODES = 4
#: relax_line returns CAPACITY unless the arrays hold this many nodes beyond twice the line's
#: count: room to insert a step's captures, then to split every segment in two.
HEADROOM = 2 * MAX_CAPTURES + 16
#: Smallest capacity of the node arrays (the capture lists live in work rows of this length).
MIN_CAPACITY = 4 * MAX_CAPTURES
#: Pair interactions (target nodes × source segments × periodic copies) of one self-stress
#: evaluation below which the stepper sums on one thread: a thread team costs tens of µs to wake
#: and, on a loaded machine, waits for the other processes (``bench_selfstress.py --crossover``:
#: on an idle machine two threads won from 1e4 pairs on, 0.57 of the serial time at 2e5; with one
#: other job running a two-thread call took 7-8 ms whatever its size, 22 ms at load 6 on 2 CPUs),
#: while 1e6 pairs take about 2 ms on one core.  Above it the parallel kernels of
#: :mod:`dlsim.elastic` take over.
PARALLEL_MIN_PAIRS = 1_000_000
