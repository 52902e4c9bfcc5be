"""Figures of sweep folders and run folders (matplotlib, no display needed).

Every figure is written as PNG (for slides and quick looks) and PDF (for papers), at a fixed size
(:data:`FIG_SIZE_IN` at :data:`DPI`) with fonts readable on a slide.  The functions build
:class:`matplotlib.figure.Figure` objects directly, so they never touch pyplot's global state and
work with any backend.

- sweep folder: ``<q>_vs_<param>`` — CRSS (or Δσ) against the first swept key with 95 % CI error
  bars (said in the legend's title), one curve per value of the second swept key, each analytic
  estimate as a line of its own colour (the CRSS's plus the friction, Δσ's times M), the legend
  below the axes;
- run folder: ``field`` — obstacles, the final line and any Orowan loops; ``stress_vs_area`` — the
  stress of each relaxation against the area swept from the straight start.
"""
from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
from matplotlib.collections import EllipseCollection
from matplotlib.container import Container
from matplotlib.figure import Figure

from . import output
from .errors import DlsimError
from .output import read_run, read_table  # noqa: F401 - the readers figures use, re-exported

FIG_SIZE_IN = (8.0, 6.0)
DPI = 100                      # 8 × 6 in at 100 dpi: 800 × 600 px PNG
FORMATS = ("png", "pdf")
# Slide-readable type (common practice: >= 14 pt body text on a projected 16:9 slide).
STYLE = {
    "font.size": 14, "axes.titlesize": 16, "axes.labelsize": 16, "xtick.labelsize": 14,
    "ytick.labelsize": 14, "legend.fontsize": 13, "lines.linewidth": 2.0, "lines.markersize": 7,
}
QUANTITIES = {"crss": "CRSS τ$_c$ (MPa)", "delta_sigma": "yield strength increment Δσ (MPa)",
              "activation_volume": "apparent activation volume V* (b³)"}
# Unit suffixes of case keys (DEVELOPERS.md: keys carry their unit in their name).
UNIT_SUFFIXES = {"_nm": "nm", "_MPa": "MPa", "_GPa": "GPa", "_nN": "nN", "_deg": "°",
                 "_per_um2": "µm$^{-2}$", "_um": "µm", "_K": "K", "_per_s": "s$^{-1}$",
                 "_eV": "eV", "_Hz": "Hz", "_per_m2": "m$^{-2}$"}
ESTIMATE_STYLES = ("--", ":", "-.", (0, (5, 1, 1, 1)))    # run figures: estimates in grey
STATE_MARKERS = {"pinned": ("o", "C0"), "moving": (">", "C7"), "flowing": (">", "C1"),
                 "unresolved": ("^", "C3")}
# Legend names of the states where the bare name would not say enough (docs/outputs.md).
STATE_LABELS = {"moving": "moving (a probe of the search, not followed further)"}
# Flowing relaxations glide far more than the pinned ones; the glide axis stops at this multiple of
# the largest pinned glide and flowing points sit at its edge.
AREA_AXIS_MARGIN = 1.3


# --------------------------------------------------------------------------- helpers


def _figure() -> Figure:
    return Figure(figsize=FIG_SIZE_IN, dpi=DPI, layout="constrained")


def _save(fig: Figure, folder: Path, stem: str) -> list[Path]:
    paths = []
    for fmt in FORMATS:
        path = folder / f"{stem}.{fmt}"
        fig.savefig(path, dpi=DPI)
        paths.append(path)
    return paths


def _styled(func):
    """Run a plotting function under :data:`STYLE` (fonts read when artists are made)."""
    import functools

    import matplotlib

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(STYLE):
            return func(*args, **kwargs)
    return wrapper


#: Case keys given in obstacle spacings (L, or L_s of a random field; DEVELOPERS.md, "Case
#: file"), with the name their axis takes.
IN_SPACINGS = {"line.length": "box width", "line.height": "box height",
               "line.node_spacing": "node spacing", "loading.flow_distance": "flow distance"}


def key_label(key: str) -> str:
    """Axis label of a dotted case key: ``"obstacles.spacing_nm"`` → ``"spacing (nm)"``,
    ``"line.length"`` → ``"box width (obstacle spacings)"``."""
    if key in IN_SPACINGS:
        return f"{IN_SPACINGS[key]} (obstacle spacings)"
    name = key.rsplit(".", 1)[-1]
    for suffix, unit in UNIT_SUFFIXES.items():
        if name.endswith(suffix):
            return f"{name[: -len(suffix)].replace('_', ' ')} ({unit})"
    return name.replace("_", " ")


def value_label(key: str, value) -> str:
    """``"obstacles.spacing_nm", 30`` → ``"spacing = 30 nm"``."""
    name, _, unit = key_label(key).partition(" (")
    unit = unit[:-1]
    return f"{name} = {_fmt(value)}" + ("" if unit in ("", "°") else " ") + unit


def _short_names(keys: list[str]) -> dict[str, str]:
    """File-name forms of keys: the last component unless two keys share it."""
    last = [k.rsplit(".", 1)[-1] for k in keys]
    return {k: (s if last.count(s) == 1 else k.replace(".", "_")) for k, s in zip(keys, last)}


def _fmt(value) -> str:
    return f"{value:.4g}" if isinstance(value, (float, np.floating)) else str(value)


# --------------------------------------------------------------------------- sweep figures


@_styled
def plot_sweep(folder, quantity: str = "crss", x: str | None = None) -> list[Path]:
    """CRSS (or Δσ) against a swept key, one curve per value of the next swept key.

    Parameters
    ----------
    folder : path
        A sweep folder (``sweep.json`` and ``summary_points.csv``; the summary is written first if
        missing).
    quantity : {"crss", "delta_sigma", "activation_volume"}
    x : str, optional
        Swept key on the horizontal axis; default the first swept key that takes several values.
        Further swept keys beyond the curve key give one figure per combination.

    Returns
    -------
    list of Path
        The PNG and PDF files, ``<quantity>_vs_<key>[_<other>-<value>...]``.
    """
    folder = Path(folder)
    meta, table = read_sweep_points(folder, quantity)
    x, curve, rest = _roles(meta, table, x)
    names = _short_names(list(meta["vary"]))
    paths = []
    for combo, rows in sweep_figures(table, rest):
        fig = sweep_figure(meta, table, rows, (x, curve), quantity, sweep_title(meta, rest, combo))
        suffix = "".join(f"_{names[k]}-{_fmt(v)}" for k, v in zip(rest, combo))
        paths += _save(fig, folder, f"{quantity}_vs_{names[x]}{suffix}")
    return paths


@_styled
def sweep_figure(meta: dict, table: dict, rows: np.ndarray, roles: tuple[str, str | None],
                 quantity: str, title: str) -> Figure:
    """One slide-sized sweep figure (:func:`draw_sweep` on a new figure, with its title)."""
    fig = _figure()
    ax = fig.add_subplot()
    draw_sweep(ax, meta, table, rows, roles, quantity)
    ax.set_title(title)
    return fig


def read_sweep_points(folder: Path, quantity: str) -> tuple[dict, dict]:
    """``sweep.json`` and ``summary_points.csv`` of a sweep folder (the summary written first if
    missing), refusing a quantity the runs do not report."""
    from .sweep import SUMMARY_POINTS, column_name, read_sweep_json, summarize_sweep

    meta = read_sweep_json(folder)
    if quantity not in QUANTITIES:
        raise DlsimError(f"unknown quantity {quantity!r}; allowed: {', '.join(QUANTITIES)}")
    if not (folder / SUMMARY_POINTS).is_file():
        summarize_sweep(folder)
    table = read_table(folder / SUMMARY_POINTS)
    for key in meta["vary"]:            # swept keys by their dotted names (CSV: column_name)
        table.setdefault(key, table.get(column_name(key)))
    if f"{quantity}_mean_{quantity_unit(quantity)}" not in table:
        raise DlsimError(f"{str(folder)!r}: the runs report no {quantity} values")
    return meta, table


def quantity_unit(quantity: str) -> str:
    """The unit token of a sweep quantity's columns (:data:`dlsim.sweep.POINT_QUANTITIES`)."""
    from .sweep import POINT_QUANTITIES

    return dict(POINT_QUANTITIES.values())[quantity]


def sweep_figures(table: dict, rest: list[str]):
    """``(combination, rows)`` of every combination of the keys ``rest`` that has points."""
    for combo in itertools.product(*(_distinct(table[k]) for k in rest)):
        rows = np.ones(len(table["point"]), dtype=bool)
        for k, v in zip(rest, combo):
            rows &= table[k] == v
        if rows.any():
            yield combo, rows


#: Characters of a sweep figure's title line (16 pt on an 8 in wide figure); longer titles wrap.
TITLE_CHARS = 60


def sweep_title(meta: dict, rest: list[str], combo) -> str:
    """The sweep's title and the values of the keys held fixed, wrapped to fit the figure."""
    import textwrap

    text = ", ".join([meta["title"]] * bool(meta.get("title"))
                     + [value_label(k, v) for k, v in zip(rest, combo)])
    return "\n".join(textwrap.wrap(text, TITLE_CHARS))


def draw_sweep(ax, meta: dict, table: dict, rows: np.ndarray, roles: tuple[str, str | None],
               quantity: str, legend_ncol: int = 2) -> None:
    """One sweep figure's content on ``ax``: the curves with their 95 % bars, the estimates, the
    axis labels and scale, and the legend below the axes (what the error bars are in its title).

    ``roles`` is ``(x, curve)``: the key on the horizontal axis and the key of the curves (None:
    one curve).
    """
    x, curve = roles
    _draw_curves(ax, _as_quantity(meta, table, quantity), rows, x, curve, quantity)
    ax.set_xlabel(key_label(x))
    ax.set_ylabel(QUANTITIES[quantity])
    if meta["scales"].get(x) == "log":
        ax.set_xscale("log")
        _log_ticks(ax, table[x][rows])
    # the simulated curves first, then the estimates
    handles, labels = ax.get_legend_handles_labels()
    order = sorted(range(len(handles)), key=lambda k: not isinstance(handles[k], Container))
    # below the axes: inside, a legend sits on the points of some sweep or other
    ax.legend([handles[k] for k in order], [labels[k] for k in order], loc="upper center",
              bbox_to_anchor=(0.5, -0.16), ncol=legend_ncol, frameon=False, fontsize="small",
              title=_bars_note(table["n_runs"][rows]), title_fontsize="x-small")


def _bars_note(n: np.ndarray) -> str:
    """What the error bars are, for the legend's title."""
    counts = sorted({int(v) for v in n if np.isfinite(v)})
    seeds = (f"{counts[0]} seeds" if len(counts) == 1 else
             f"{counts[0]}–{counts[-1]} seeds") if counts else "the seeds"
    return f"error bars: 95 % Student-t interval of the mean over {seeds} per point"


def _distinct(col: np.ndarray) -> list:
    seen = []
    for v in col:
        if not any(v == s for s in seen):
            seen.append(v)
    return seen


def _roles(meta: dict, table: dict, x: str | None) -> tuple[str, str | None, list[str]]:
    """Pick the x key, the curve key (grid sweeps only) and the keys left for separate figures."""
    keys = list(meta["vary"])
    if x is not None and x not in keys:
        raise DlsimError(f"{x!r} is not a swept key; swept: {', '.join(keys)}")
    varying = [k for k in keys if len(_distinct(table[k])) > 1] or keys[:1]
    x = x or varying[0]
    others = [k for k in varying if k != x]
    if meta["combine"] == "zip":
        return x, None, []
    curve = others[0] if others else None
    return x, curve, others[1:]


#: Colours of the analytic estimates, one each, set apart from the curves' colours (the
#: colour-blind-safe set of Okabe & Ito 2008, and black); others take :data:`OTHER_ESTIMATE`.
ESTIMATE_COLOURS = {"orowan_square": "#000000", "square_array": "#D55E00",
                    "orowan_finite": "#CC79A7", "foreman_makin": "#009E73", "friedel": "#E69F00",
                    "superposition_linear": "#56B4E9", "superposition_pythagorean": "#882255"}
OTHER_ESTIMATE = "0.5"
#: Colours and markers of the simulated curves (blues, purples, dark greens and browns, apart
#: from the estimates' colours).
CURVE_COLOURS = ("C0", "#6A3D9A", "#1B7837", "#8C510A", "#2166AC", "#762A83")
CURVE_MARKERS = ("o", "s", "^", "D", "v", "P")


def _as_quantity(meta: dict, table: dict, quantity: str) -> dict:
    """The summary with its estimate columns as the quantity drawn: the CRSS estimates plus each
    point's friction stress (the CRSS includes it; ``estimates`` do not), the Δσ
    estimates M times the obstacles' estimate (Δσ = M (τ_c − τ_f), docs/physics.md)."""
    from .analytic import TAYLOR_FCC

    cases = {}
    for run in meta["runs"]:
        cases.setdefault(run["point"], run.get("case") or {})
    points = [cases.get(int(p), {}) for p in table["point"]]
    if quantity == "crss":
        shift = np.array([c.get("friction", {}).get("stress_MPa", 0.0) for c in points])
        scale = np.ones_like(shift)
    else:
        scale = np.array([c.get("strength", {}).get("taylor_factor", TAYLOR_FCC)
                          for c in points])
        shift = np.zeros_like(scale)
    return {k: (scale * v + shift if k.startswith("estimate_") else v) for k, v in table.items()}


def estimate_label(column: str) -> str:
    """``"estimate_foreman_makin_mean_MPa"`` (or ``..._MPa``) → its name in
    :data:`dlsim.analytic.ESTIMATES`."""
    from .analytic import ESTIMATES

    key = estimate_model(column)
    return ESTIMATES.get(key, (key.replace("_", " "),))[0]


def estimate_model(column: str) -> str:
    """The model of an estimate column or key: ``"estimate_friedel_mean_MPa"``,
    ``"estimate_friedel_MPa"`` and ``"friedel_MPa"`` → ``"friedel"``."""
    return column.removeprefix("estimate_").removesuffix("_MPa").removesuffix("_mean")


def _draw_curves(ax, table: dict, rows: np.ndarray, x: str, curve: str | None, q: str) -> None:
    """Simulated means with their 95 % bars per curve, each analytic estimate in its own colour.

    An estimate that is the same for every curve is drawn once; one that differs is drawn per
    curve, with that curve's marker (hollow).  Without estimates in the results, the Orowan
    stress 2Γ/(bL) (always reported) is drawn for the CRSS, once in grey when every curve has the
    same values, otherwise per curve.
    """
    # the estimates are stresses: none for V*
    estimates = [c for c in table if c.startswith("estimate_")] if q != "activation_volume" else []
    values = _distinct(table[curve][rows]) if curve else [None]
    unit = quantity_unit(q)
    curves = []
    for i, value in enumerate(values):
        sel = rows & (table[curve] == value) if curve else rows
        xs, (mean, lo, hi) = _sorted(table, sel, x, [f"{q}_{stat}_{unit}"
                                                     for stat in ("mean", "ci95_lo", "ci95_hi")])
        style = {"color": CURVE_COLOURS[i % len(CURVE_COLOURS)],
                 "marker": CURVE_MARKERS[i % len(CURVE_MARKERS)]}
        ax.errorbar(xs, mean, yerr=[np.nan_to_num(mean - lo), np.nan_to_num(hi - mean)],
                    capsize=4, label=value_label(curve, value) if curve else "simulation",
                    zorder=3, **style)
        curves.append((sel, xs, style))
    for col in estimates:
        colour = ESTIMATE_COLOURS.get(estimate_model(col), OTHER_ESTIMATE)
        _draw_per_curve(ax, table, curves, x, col, colour, estimate_label(col), "--")
    if not estimates and q == "crss" and "orowan_mean_MPa" in table:
        _draw_per_curve(ax, table, curves, x, "orowan_mean_MPa", "0.35", "Orowan 2Γ/(bL)", ":")


def _draw_per_curve(ax, table, curves, x, col, colour, label, linestyle) -> None:
    """The column ``col`` against ``x`` as thin lines: once when every curve has the same values
    (within 1e-9), else once per curve with the curve's hollow marker; one legend entry."""
    lines = [(xs, _sorted(table, sel, x, [col])[1][0], style) for sel, xs, style in curves]
    lines = [ln for ln in lines if np.isfinite(ln[1]).any()]
    if not lines:
        return
    shared = all(len(ln[0]) == len(lines[0][0]) and np.array_equal(ln[0], lines[0][0])
                 and np.allclose(ln[1], lines[0][1], rtol=1e-9, equal_nan=True) for ln in lines)
    for k, (xs, ys, style) in enumerate(lines[:1] if shared else lines):
        marker = {} if shared else {"marker": style["marker"], "markerfacecolor": "none",
                                    "markersize": 5}
        ax.plot(xs, ys, linestyle=linestyle, color=colour, linewidth=1.5, zorder=2,
                label=label if k == 0 else None, **marker)


def _sorted(table: dict, sel: np.ndarray, x: str, cols: list[str]):
    """The selected x values in increasing order and the given columns in the same order."""
    xs = table[x][sel]
    order = np.argsort(xs) if xs.dtype != object else np.arange(xs.size)
    return xs[order], [table[c][sel][order] for c in cols]


def _log_ticks(ax, xs: np.ndarray) -> None:
    """Plain-number ticks at the swept values (a sweep has few, and 3×10¹ reads badly)."""
    from matplotlib.ticker import NullFormatter

    ticks = np.unique(xs.astype(float))
    ax.set_xticks(ticks, labels=[f"{t:.3g}" for t in ticks])
    ax.xaxis.set_minor_formatter(NullFormatter())


# --------------------------------------------------------------------------- run figures


def wrap_polyline(x: np.ndarray, y: np.ndarray, box: tuple[float, float]):
    """Fold an unwrapped line into the periodic box, breaking it (NaN) where it crosses a side.

    Parameters
    ----------
    x, y : ndarray, shape (n,)
        Node positions (nm), unwrapped.
    box : (Lx, Ly)
        Box sides (nm).

    Returns
    -------
    xw, yw : ndarray
        Positions in [0, Lx) × [0, Ly) with NaN between nodes in different periodic images.
    """
    Lx, Ly = box
    ix, iy = np.floor(x / Lx), np.floor(y / Ly)
    xw, yw = x - ix * Lx, y - iy * Ly
    jump = np.flatnonzero((np.diff(ix) != 0) | (np.diff(iy) != 0)) + 1
    return np.insert(xw, jump, np.nan), np.insert(yw, jump, np.nan)


def close_period(x: np.ndarray, y: np.ndarray, Lx: float) -> tuple[np.ndarray, np.ndarray]:
    """Append node n = node 0 shifted by (Lx, 0), so the drawn line spans the whole period."""
    if x.size == 0:
        return x, y
    return np.append(x, x[0] + Lx), np.append(y, y[0])


#: Periodic copies of one curve drawn at the most along each axis (a pinned line or a loop
#: spans a few box heights at the very most; beyond this the rest is left out).
MAX_COPIES = 8
#: Colours of the obstacle populations (colour-blind-safe qualitative set, Okabe & Ito 2008),
#: the line (C0), pins (C3) and loops (C1) keeping matplotlib's defaults.
POPULATION_COLOURS = ("#7f7f7f", "#009E73", "#CC79A7", "#56B4E9", "#E69F00", "#0072B2",
                      "#D55E00", "#F0E442")
LINE_COLOUR, PIN_COLOUR, LOOP_COLOUR = "C0", "C3", "C1"


def periodic_polyline(x: np.ndarray, y: np.ndarray, box: tuple[float, float],
                      closed: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Every periodic copy of a curve (nm, unwrapped) that overlaps the box, one polyline with NaN
    between copies: drawn in axes limited to the box, the curve runs unbroken through the box
    sides (a copy enters where the other leaves).

    Parameters
    ----------
    x, y : ndarray, shape (n,)
        Nodes (nm), unwrapped (neighbours closer than half a period).
    box : (Lx, Ly)
        Box sides (nm).
    closed : bool
        Join the last node to the first (a loop).

    Returns
    -------
    xs, ys : ndarray
        At most MAX_COPIES² copies, shifted by whole periods.
    """
    if x.size == 0:
        return x, y
    if closed:
        x, y = np.append(x, x[0]), np.append(y, y[0])
    Lx, Ly = box
    ix = np.arange(np.floor(x.min() / Lx), np.floor(x.max() / Lx) + 1)[:MAX_COPIES]
    iy = np.arange(np.floor(y.min() / Ly), np.floor(y.max() / Ly) + 1)[:MAX_COPIES]
    parts_x, parts_y = [], []
    for i in ix:
        for j in iy:
            parts_x += [x - i * Lx, [np.nan]]
            parts_y += [y - j * Ly, [np.nan]]
    return np.concatenate(parts_x), np.concatenate(parts_y)


def population_names(obstacles: dict) -> list[str]:
    """The populations of ``obstacles.csv`` in order of appearance (["obstacles"] without the
    column)."""
    if "population" not in obstacles:
        return ["obstacles"]
    return list(dict.fromkeys(str(p) for p in obstacles["population"]))


def draw_field(ax, obstacles: dict, box: tuple[float, float]) -> list:
    """Obstacles on ``ax``: points as dots, finite particles as discs of their radius (nm), each
    population in its own colour (:data:`POPULATION_COLOURS`); discs overlapping a box side are
    drawn at their periodic images too.  Returns one legend handle per population."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    Lx, Ly = box
    x, y, r = obstacles["x_nm"], obstacles["y_nm"], obstacles["radius_nm"]
    pops = (np.asarray(obstacles["population"]).astype(str) if "population" in obstacles
            else np.full(x.shape, "obstacles"))
    handles = []
    for k, name in enumerate(population_names(obstacles)):
        colour = POPULATION_COLOURS[k % len(POPULATION_COLOURS)]
        sel = pops == name
        points, discs = sel & (r <= 0), sel & (r > 0)
        ax.scatter(x[points], y[points], s=8, color=colour, linewidths=0, zorder=2)
        if discs.any():
            cx, cy, d = _disc_images(x[discs], y[discs], r[discs], box)
            ax.add_collection(EllipseCollection(
                d, d, np.zeros_like(d), units="xy", offsets=np.column_stack([cx, cy]),
                offset_transform=ax.transData, facecolors=colour, edgecolors="0.3",
                linewidths=0.5, alpha=0.6, zorder=2))
        label = f"{name} ({int(sel.sum())})"
        handles.append(Patch(facecolor=colour, edgecolor="0.3", alpha=0.6, label=label)
                       if discs.any() else Line2D([], [], marker="o", linestyle="none",
                                                  color=colour, markersize=4, label=label))
    ax.add_patch(_box_patch(Lx, Ly))
    ax.set_xlim(0, Lx)
    ax.set_ylim(0, Ly)
    ax.set_aspect("equal")
    return handles


def _disc_images(x, y, r, box):
    """Centres and diameters of discs and of the periodic images of those crossing a side."""
    Lx, Ly = box
    cx, cy, rr = [x], [y], [r]
    for sx in (-Lx, 0.0, Lx):
        for sy in (-Ly, 0.0, Ly):
            if sx == 0.0 and sy == 0.0:
                continue
            px, py = x + sx, y + sy
            near = (px + r > 0) & (px - r < Lx) & (py + r > 0) & (py - r < Ly)
            cx.append(px[near]), cy.append(py[near]), rr.append(r[near])
    return np.concatenate(cx), np.concatenate(cy), 2 * np.concatenate(rr)


def _box_patch(Lx: float, Ly: float):
    from matplotlib.patches import Rectangle

    return Rectangle((0, 0), Lx, Ly, fill=False, edgecolor="0.5", linewidth=1.0)


def draw_line(ax, x, y, pinned, box, **style):
    """A line (nm, unwrapped) with its periodic copies in the box, its pinned nodes marked;
    returns the artists (curve, pins), labelled for a legend.

    The files hold nodes 0..n-1 of the periodic line; node n is node 0 shifted by Lx.
    """
    xs, ys = periodic_polyline(*close_period(x, y, box[0]), box)
    (curve,) = ax.plot(xs, ys, color=style.get("color", LINE_COLOUR), linewidth=2.0, zorder=3,
                       label="dislocation line")
    (pins,) = ax.plot(np.mod(x[pinned], box[0]), np.mod(y[pinned], box[1]), "o",
                      color=PIN_COLOUR, markersize=5, zorder=4, label="pinned points")
    return curve, pins


def loop_polylines(loops: dict | None, box) -> tuple[np.ndarray, np.ndarray]:
    """Every loop of ``loops.csv`` (closed, with its periodic copies) as one NaN-separated
    polyline (empty without loops)."""
    if loops is None or not len(loops["loop"]):
        return np.zeros(0), np.zeros(0)
    xs, ys = [], []
    for k in np.unique(loops["loop"]):
        sel = loops["loop"] == k
        px, py = periodic_polyline(loops["x_nm"][sel], loops["y_nm"][sel], box, closed=True)
        xs.append(px), ys.append(py)
    return np.concatenate(xs), np.concatenate(ys)


def draw_loops(ax, loops: dict | None, box):
    """The Orowan loops (as relaxed onto their particles, dlsim.loops); returns the artist, or
    None without loops."""
    xs, ys = loop_polylines(loops, box)
    if not xs.size:
        return None
    count = len(np.unique(loops["loop"]))
    # over the line, thinner: a loop hugging a particle the line also wraps stays visible
    (art,) = ax.plot(xs, ys, color=LOOP_COLOUR, linewidth=1.2, zorder=3.5,
                     label=f"Orowan loops ({count}, relaxed)")
    return art


@_styled
def plot_run(folder) -> list[Path]:
    """The obstacle field with the final line and loops, and stress against swept area.

    Parameters
    ----------
    folder : path
        A run folder written by :func:`dlsim.api.run_case`.

    Returns
    -------
    list of Path
        ``field.png/.pdf`` and ``stress_vs_area.png/.pdf`` (the latter only with ``history.csv``).
    """
    folder = Path(folder)
    run = read_run(folder)
    box = output.box_nm(run["result"])
    paths = _save(_field_figure(run, box), folder, "field")
    if run["history"] is not None and len(run["history"]["index"]):
        paths += _save(_area_figure(run, box), folder, "stress_vs_area")
    return paths


def _axes(ax):
    """A new slide-sized figure and its axes, or the figure of the axes given."""
    if ax is not None:
        return ax.figure, ax
    fig = _figure()
    return fig, fig.add_subplot()


def _field_figure(run: dict, box, ax=None) -> Figure:
    """The field of realization 0: obstacles by population, the pinned line at the CRSS with its
    periodic copies, its pins and the relaxed Orowan loops, with a legend of each (``ax``: draw
    there instead of a new figure)."""
    fig, ax = _axes(ax)
    handles = draw_field(ax, run["obstacles"], box)
    line = run["line"]
    if line is not None and len(line["x_nm"]):
        handles = list(draw_line(ax, line["x_nm"], line["y_nm"], line["pinned"].astype(bool),
                                 box)) + handles
    loops = draw_loops(ax, run["loops"], box)
    if loops is not None:
        handles.insert(2, loops)
    ax.set_xlabel("x (nm)")
    ax.set_ylabel("glide direction y (nm)")
    ax.set_title(_field_title(run["result"]))
    # below the box, so it hides no obstacle (beside it, the square axes and a long legend
    # overflowed the figure under the constrained layout)
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=3,
              frameon=False, fontsize="small", columnspacing=1.0, handlelength=1.5)
    return fig


def _field_title(res: dict) -> str:
    """The field figure shows realization 0: its own CRSS, and the mean when there are more."""
    first = res["realizations"][0]
    text = f"pinned line at the CRSS, {_mpa(first['crss_MPa'])}"
    if res["n_realizations"] > 1:
        text = (f"realization 0 of {res['n_realizations']}: {_mpa(first['crss_MPa'])} "
                f"(mean {_mpa(res['crss_MPa'])})")
    return text


def _mpa(value) -> str:
    return "no CRSS" if value is None else f"{value:.4g} MPa"


def run_estimates(res: dict) -> dict[str, float]:
    """The analytic estimates of a run as applied stresses (MPa): each obstacle estimate plus
    the friction stress, so they compare with the CRSS; ``{label: value}``."""
    from .analytic import ESTIMATES

    est = res.get("estimates") or {}
    friction = res.get("friction_MPa") or 0.0
    return {ESTIMATES.get(m, (m.replace("_", " "), ""))[0]: v + friction
            for m, v in ((k.removesuffix("_MPa"), v) for k, v in est.items())
            if v is not None and np.isfinite(v)}


def _area_figure(run: dict, box, ax=None) -> Figure:
    """Stress against the mean glide distance from the straight start (swept area / Lx, in
    L_s), every realization (realization 0 highlighted with its states and bracket), the mean
    CRSS and the analytic estimates as labelled horizontal lines (``ax``: draw there)."""
    hist, res = run["history"], run["result"]
    spacing = res["spacing_nm"]
    glide = hist["mean_glide_nm"] / spacing
    real = hist["realization"] if "realization" in hist else np.zeros(glide.shape)
    pinned = hist["state"] == "pinned"
    top = AREA_AXIS_MARGIN * glide[pinned].max() if pinned.any() and glide[pinned].max() > 0 \
        else None
    fig, ax = _axes(ax)
    several = len(np.unique(real)) > 1
    for r in np.unique(real)[::-1]:         # realization 0 last, on top
        sel = pinned & (real == r)
        order = np.argsort(glide[sel])
        label = ("realization 0" if r == 0 else "other realizations" if r == 1 else None)
        ax.plot(glide[sel][order], hist["stress_MPa"][sel][order],
                color="C0" if r == 0 else "0.7", linewidth=2.0 if r == 0 else 1.0,
                zorder=3 if r == 0 else 2, label=label if several else None)
    first = res["realizations"][0]
    if first["crss_MPa"] is not None:
        ax.axhspan(first["crss_lo_MPa"], first["crss_hi_MPa"], color="C2", alpha=0.25, linewidth=0,
                   label="realization 0 CRSS bracket")
    if res["crss_MPa"] is not None:
        n = res["n_realizations"]
        ax.axhline(res["crss_MPa"], color="C2", linestyle="--",
                   label=(f"mean CRSS of {n} realizations " if n > 1 else "CRSS ")
                   + f"{res['crss_MPa']:.4g} MPa")
    _state_markers(ax, glide[real == 0], hist["stress_MPa"][real == 0],
                   hist["state"][real == 0], top)
    if top:
        ax.set_xlim(0, top * (1 + FLOW_MARKER_PAD))
    ax.set_xlabel("mean glide from the straight start ($L_s$)")
    ax.set_ylabel("applied stress τ (MPa)")
    ax.set_ylim(bottom=0)
    _estimate_lines(ax, run_estimates(res))
    # below the axes: inside, it would cover the curve or the estimates' labels
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.14), ncol=2, frameon=False,
              fontsize="small")
    return fig


#: Flowing relaxations sit at the right edge of the glide axis; the axis runs this fraction
#: beyond it so their markers are drawn whole.
FLOW_MARKER_PAD = 0.06


def _state_markers(ax, glide, stress, state, top) -> None:
    """Realization 0's relaxations by state; those that glided beyond the axis at its edge."""
    for name, (marker, colour) in STATE_MARKERS.items():
        sel = state == name
        if sel.any():
            beyond = top is not None and (glide[sel] > top).any()
            xs = np.minimum(glide[sel], top) if top else glide[sel]
            ax.plot(xs, stress[sel], marker, color=colour, linestyle="none", zorder=4,
                    label=STATE_LABELS.get(name, name)
                    + (" (glided beyond the axis)" if beyond else ""))


def _estimate_lines(ax, estimates: dict[str, float]) -> None:
    """Horizontal lines at the analytic estimates, each labelled at the right end; labels of
    close values are moved apart (at least LABEL_GAP of the axes height) so none overlap."""
    if not estimates:
        return
    lo, hi = ax.get_ylim()
    hi = max(hi, max(estimates.values()) * (1 + LABEL_GAP))
    ax.set_ylim(lo, hi)
    order = sorted(estimates.items(), key=lambda kv: kv[1])
    place = [(v - lo) / (hi - lo) for _, v in order]
    for k in range(1, len(place)):
        place[k] = max(place[k], place[k - 1] + LABEL_GAP)
    for k, ((label, value), at) in enumerate(zip(order, place)):
        ax.axhline(value, color="0.35", linestyle=ESTIMATE_STYLES[k % len(ESTIMATE_STYLES)],
                   linewidth=1.2, zorder=1)
        ax.annotate(f"{label} {value:.4g} MPa", (0.99, at), xycoords="axes fraction",
                    ha="right", va="bottom", fontsize="x-small", color="0.25",
                    annotation_clip=False)


#: Smallest distance between two estimate labels, as a fraction of the axes height (an x-small
#: label is about 3 % of a slide figure's axes).
LABEL_GAP = 0.04


def plot_dir(folder, quantity: str = "crss") -> list[Path]:
    """Plot a sweep folder (``sweep.json``) or a run folder (``result.json``).  The CRSS figures
    of a sweep of thermally activated runs come with their V* figures."""
    folder = Path(folder)
    if (folder / output.SWEEP).is_file():
        paths = plot_sweep(folder, quantity=quantity)
        if quantity == "crss" and "activation_volume_mean_b3" in read_sweep_points(folder,
                                                                                   quantity)[1]:
            paths += plot_sweep(folder, quantity="activation_volume")
        return paths
    if output.is_run_folder(folder):
        return plot_run(folder)
    raise DlsimError(f"{str(folder)!r} holds neither a sweep ({output.SWEEP}) nor a run "
                     f"({output.RESULT})")
