"""LineState diagnostics: the self-crossing count of a periodic line."""
from __future__ import annotations

import numpy as np
import pytest

from dlsim.line import LineState


def line_through(x, y, Lx=100.0) -> LineState:
    state = LineState.straight(Lx, 0.0, Lx / len(x))
    state.x[: len(x)] = x
    state.y[: len(y)] = y
    return state


def brute_crossings(state: LineState) -> int:
    """Every pair of segments of one period against each other and the next period's, one by one."""
    n, Lx = state.n, state.Lx
    px = np.append(state.x[:n], state.x[0] + Lx)
    py = np.append(state.y[:n], state.y[0])

    def cross(a, b, c, d):
        o = lambda p, q, r: np.sign((q[0] - p[0]) * (r[1] - p[1]) - (q[1] - p[1]) * (r[0] - p[0]))
        return o(a, b, c) * o(a, b, d) < 0 and o(c, d, a) * o(c, d, b) < 0

    seg = [((px[i], py[i]), (px[i + 1], py[i + 1])) for i in range(n)]
    count = 0
    for i in range(n):
        for j in range(n):
            for shift in (0.0, Lx):
                if shift == 0.0 and (j <= i or (j - i) % n in (1, n - 1)):
                    continue
                if shift == Lx and i == n - 1 and j == 0:
                    continue
                c, d = ((seg[j][0][0] + shift, seg[j][0][1]), (seg[j][1][0] + shift, seg[j][1][1]))
                count += cross(seg[i][0], seg[i][1], c, d)
    return count


def test_straight_line_has_no_crossing():
    assert LineState.straight(100.0, 3.0, 10.0).self_crossings() == 0


@pytest.mark.parametrize("x, y, expected", [
    # a loop folded back over the line: its return crosses its way out once
    ([5, 15, 25, 40, 50, 30, 30, 75, 85, 95], [0, 0, 0, 10, 20, 20, -5, 0, 0, 0], 1),
    # the last segments reach into the next period and cross the image of the first segment
    ([5, 15, 25, 35, 45, 55, 65, 75, 100, 120], [0, 0, 0, 0, 0, 0, 0, 0, 5, -5], 1),
    # a bowed line without crossings
    ([5, 15, 25, 35, 45, 55, 65, 75, 85, 95], [0, 3, 6, 8, 9, 9, 8, 6, 3, 0], 0),
])
def test_self_crossings_counts_each_crossing_pair(x, y, expected):
    state = line_through(np.array(x, float), np.array(y, float))
    assert state.self_crossings() == expected == brute_crossings(state)


@pytest.mark.parametrize("seed", range(4))
def test_self_crossings_matches_brute_force_on_random_walks(seed):
    rng = np.random.default_rng(seed)
    n = 40
    x = np.sort(rng.uniform(0, 100, n)) + rng.normal(0, 6, n)
    y = np.cumsum(rng.normal(0, 4, n))
    state = line_through(x, y)
    assert state.self_crossings() == brute_crossings(state)
