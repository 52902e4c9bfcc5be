"""The nodal line against the arc construction on the same fields (0.2 L_s, point obstacles).

The arc construction of Foreman & Makin (Phil. Mag. 14, 1966) is exact for point obstacles under
a constant line tension, so on the same field the nodal line's CRSS must agree with it; 0.5 % is
the target of the project (the nodal line read 3-7 % high on impenetrable random fields at this
node spacing before the crossing and crossed-arm rules, docs/physics.md).  Every final nodal line
must be free of self-crossings.  benchmarks/compare_solvers.py prints the same table with times.
Three of these fields (random φc = 0 seed 0, φc = 60° seeds 0 and 2) read 1-11 % low while an
Orowan loop left round an obstacle kept its image one box height up from pinning the line
(docs/physics.md, "Capture and release").
"""
from __future__ import annotations

import os
import sys

import pytest

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "benchmarks"))

from compare_solvers import case_dict, solve  # noqa: E402

NODE_SPACING = 0.2      # L_s
POINTS = 144            # obstacles of a random field (box 12 L_s)
TOLERANCE = 0.005       # the two-solver target

FIELDS = [("random", angle, seed) for angle in (0.0, 60.0, 120.0, 150.0) for seed in range(5)]
FIELDS += [("square", angle, 0) for angle in (0.0, 60.0, 120.0, 150.0)]


@pytest.mark.parametrize("kind, angle, seed", FIELDS)
def test_nodal_line_agrees_with_arc_construction(kind, angle, seed):
    arcs, _, _ = solve(case_dict(kind, angle, seed, POINTS, NODE_SPACING, "arcs"))
    nodal, _, crossings = solve(case_dict(kind, angle, seed, POINTS, NODE_SPACING, "nodal"))
    assert crossings == 0
    assert nodal / arcs == pytest.approx(1.0, abs=TOLERANCE)


@pytest.mark.parametrize("seed", [3, 20])
def test_small_box_weak_points_where_a_tracked_chord_angle_went_stale(seed):
    # Boxes of 36 weak points (φc = 150°) hold few pins a period; there the arc construction's
    # incrementally tracked chord angle of a pin fell behind its neighbours' positions and the
    # arcs read 13 % (seed 3) and 11 % (seed 20) above the nodal line, whose value the exact
    # two-arc geometry of its pinned configuration confirms (Foreman & Makin's construction;
    # the chord angle is now read from the positions, docs/physics.md, "The arc solver").
    arcs, _, _ = solve(case_dict("random", 150.0, seed, 36, NODE_SPACING, "arcs"))
    nodal, _, crossings = solve(case_dict("random", 150.0, seed, 36, NODE_SPACING, "nodal"))
    assert crossings == 0
    assert nodal / arcs == pytest.approx(1.0, abs=TOLERANCE)
