"""The one-page report of a run folder or a sweep folder (``dlsim report DIR``).

One landscape page, :data:`PAGE_IN` at :data:`DPI` (1600 × 900 px), the figure a researcher puts
on a slide, written as ``report.png`` and ``report.pdf`` in the folder:

- run folder: the field with the pinned line and the Orowan loops (:func:`dlsim.plots.
  _field_figure`), the stress against glide (:func:`dlsim.plots._area_figure`), the CRSS (and Δσ
  for populations) with its interval beside the analytic estimates in a table (value, what each
  assumes), and the case in brief;
- sweep folder: the sweep curve(s) with error bars and estimates (:func:`dlsim.plots.draw_sweep`),
  a table of the swept values and the case in brief.

The page is laid out by hand (axes at fixed places, text tables at fixed point offsets), so what
is drawn where does not depend on the data.  Values of ``result.json`` are read through the
accessors below (:func:`_crss_interval` and the like), one per quantity, so a renamed key is a
change in one place.  Each file is written to a temporary file and renamed
(:func:`dlsim.output.write_file_atomic`): nothing else in the folder is touched.
"""
from __future__ import annotations

import io
import math
import os
import textwrap
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.transforms import offset_copy

from . import output, plots
from .errors import DlsimError, OutputError

PAGE_IN = (16.0, 9.0)
DPI = 100                       # 16 × 9 in at 100 dpi: 1600 × 900 px, a 16:9 slide
STEM = "report"
FORMATS = ("png", "pdf")
# Type of a dense slide page (common practice: >= 10 pt on a 16 in wide projected page).
STYLE = {
    "font.size": 11, "axes.titlesize": 12, "axes.labelsize": 11, "xtick.labelsize": 10,
    "ytick.labelsize": 10, "legend.fontsize": 10, "lines.linewidth": 1.8, "lines.markersize": 6,
}
TEXT_PT = 10.0                  # tables and the case in brief
LINE_PT = 1.4 * TEXT_PT         # baseline to baseline
#: Rows of the sweep table drawn at the most; the rest are counted in a last line.
MAX_TABLE_ROWS = 16
#: Characters per line of the wrapped column of the result table; the width of a character
#: of DejaVu Sans in ems, on average over prose (measured on the page: 0.55).
ASSUMES_CHARS = 76
CHAR_EM = 0.55
#: The keys of the result of one run that every report needs (a file without them is damaged).
REQUIRED_RESULT_KEYS = ("status", "crss_MPa", "realizations", "box_length_nm", "box_height_nm",
                        "spacing_nm", "case")


# --------------------------------------------------------------------------- result accessors
# result.json keys named once (docs/outputs.md).


def _crss(res: dict) -> float | None:
    """The CRSS (MPa): the mean over realizations, None when none was found."""
    return res["crss_MPa"]


def _crss_interval(res: dict) -> tuple[tuple[float, float] | None, str]:
    """The interval of the CRSS (MPa) and what it is: the 95 % interval of the mean over
    several realizations, or the bracket of one."""
    if _realizations(res) > 1:
        return (_pair(res, "crss_ci95_lo_MPa", "crss_ci95_hi_MPa"),
                res.get("crss_ci95_method") or "95 % interval")
    return _pair(res, "crss_lo_MPa", "crss_hi_MPa"), "bracket: pinned at lo, flowing at hi"


def _realizations(res: dict) -> int:
    """How many realizations the CRSS is the mean of."""
    return res.get("n_realizations") or len(res["realizations"])


def _delta_sigma(res: dict) -> tuple[float | None, tuple[float, float] | None] | None:
    """Δσ (MPa) and its 95 % interval (population cases; None otherwise)."""
    if "delta_sigma_MPa" not in res:
        return None
    return res["delta_sigma_MPa"], _pair(res, "delta_sigma_ci95_lo_MPa",
                                         "delta_sigma_ci95_hi_MPa")


def _taylor_factor(res: dict) -> float:
    return res.get("taylor_factor") or res["case"].get("strength", {}).get("taylor_factor")


def _friction(res: dict) -> float:
    return res.get("friction_MPa") or 0.0


def _obstacle_points(res: dict) -> int | None:
    return res.get("n_obstacle_points")


def _particles(res: dict) -> int | None:
    return res.get("n_particles")


def _loops_left(res: dict) -> int | None:
    return (res.get("loops") or {}).get("n_loops_left")


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" + ("" if n == 1 else "s")


def _pair(res: dict, lo: str, hi: str) -> tuple[float, float] | None:
    """The interval given by the keys ``lo`` and ``hi`` (None when either is missing)."""
    value = (res.get(lo), res.get(hi))
    if None in value:
        return None
    return float(value[0]), float(value[1])


# --------------------------------------------------------------------------- entry point


def make_report(folder) -> list[Path]:
    """Write ``report.png`` and ``report.pdf`` of a run or a sweep folder.

    Parameters
    ----------
    folder : path
        A run folder (``result.json``, written by ``dlsim run``) or a sweep folder
        (``sweep.json``, written by ``dlsim sweep``).

    Returns
    -------
    list of Path
        The two files written.

    Raises
    ------
    DlsimError
        One line naming the folder and what is wrong: missing, a file, neither a run nor a
        sweep folder, a damaged ``result.json`` or ``sweep.json``, or not writable.
    """
    folder = _check_folder(folder)
    with _style():
        if (folder / output.SWEEP).is_file():
            fig = sweep_page(folder)
        else:
            fig = run_page(folder)
        return _write(fig, folder)


def _check_folder(folder) -> Path:
    folder = Path(os.path.expanduser(os.fspath(folder)))
    if not os.path.lexists(folder):
        raise DlsimError(f"{str(folder)!r}: no such folder")
    if not folder.is_dir():
        raise DlsimError(f"{str(folder)!r} is a file, not a run or sweep folder")
    if not (folder / output.SWEEP).is_file() and not output.is_run_folder(folder):
        raise DlsimError(f"{str(folder)!r} holds neither a run ({output.RESULT}) nor a sweep "
                         f"({output.SWEEP})")
    return folder


def _style():
    import matplotlib

    return matplotlib.rc_context(STYLE)


def _write(fig: Figure, folder: Path) -> list[Path]:
    """Render both formats to memory first, then write each through a temporary file."""
    rendered = {}
    for fmt in FORMATS:
        buf = io.BytesIO()
        fig.savefig(buf, format=fmt, dpi=DPI)
        rendered[folder / f"{STEM}.{fmt}"] = buf.getvalue()
    for path, data in rendered.items():
        try:
            output.write_file_atomic(path, data)
        except OSError as err:
            reason = err.strerror or type(err).__name__
            raise OutputError(f"{str(path)!r} cannot be written ({reason}); the folder "
                              "was left as it was") from None
    return list(rendered)


def _page() -> Figure:
    return Figure(figsize=PAGE_IN, dpi=DPI)


def _axes_in(fig: Figure, left: float, bottom: float, width: float, height: float, **kw):
    """Axes at a rectangle given in inches from the page's lower left corner."""
    w, h = PAGE_IN
    return fig.add_axes((left / w, bottom / h, width / w, height / h), **kw)


def _header(fig: Figure, title: str, subtitle: str) -> None:
    fig.text(0.012, 0.985, title, ha="left", va="top", fontsize=17, fontweight="bold")
    fig.text(0.012, 0.942, subtitle, ha="left", va="top", fontsize=10.5, color="0.3")


# --------------------------------------------------------------------------- run page


def _read_checked_run(folder: Path) -> dict:
    run = output.read_run(folder)
    res = run["result"]
    missing = [k for k in REQUIRED_RESULT_KEYS if k not in res]
    if missing:
        raise DlsimError(f"{str(folder / output.RESULT)!r}: no `{missing[0]}`, a truncated or "
                         "damaged result file")
    if not res["realizations"] or not isinstance(res["realizations"], list):
        raise DlsimError(f"{str(folder / output.RESULT)!r}: `realizations` is empty, a "
                         "truncated or damaged result file")
    if run["obstacles"] is None:
        raise DlsimError(f"{str(folder)!r}: no {output.OBSTACLES}, an incomplete run folder")
    return run


def run_page(folder) -> Figure:
    """The report page of a run folder (a :class:`Figure`, not yet saved)."""
    folder = Path(folder)
    run = _read_checked_run(folder)
    res = run["result"]
    box = output.box_nm(res)
    fig = _page()
    case = res["case"]
    _header(fig, case.get("title") or folder.name,
            f"{folder}  ·  status {res['status']}  ·  dlsim {res.get('dlsim_version', '?')}")

    field = _axes_in(fig, 0.75, 2.6, 5.2, 5.2)
    field.set_anchor("N")
    plots._field_figure(run, box, ax=field)
    _legend_below(field, ncol=2, offset=-0.12)

    area = _axes_in(fig, 7.0, 4.95, 3.9, 2.95)
    if run["history"] is not None and len(run["history"]["index"]):
        plots._area_figure(run, box, ax=area)
        _legend_below(area, ncol=2, offset=-0.2)
        area.set_title("stress against glide (convergence of the search)")
    else:
        area.set_axis_off()
        area.text(0.5, 0.5, f"no {output.HISTORY}", ha="center", va="center")

    table = _axes_in(fig, 6.4, 0.75, 9.4, 2.75)
    _result_table(table, res)
    _text_rows(_axes_in(fig, 11.5, 3.6, 4.3, 4.6), "the case", case_brief(res))
    _footer(fig, res.get("warnings") or [])
    return fig


def _legend_below(ax, ncol: int, offset: float) -> None:
    """Move the legend a figure function made under the axes, in ``ncol`` columns."""
    old = ax.get_legend()
    if old is None:
        return
    handles, labels = old.legend_handles, [t.get_text() for t in old.get_texts()]
    old.remove()
    ax.legend(handles, labels, loc="upper center", bbox_to_anchor=(0.5, offset), ncol=ncol,
              frameon=False, fontsize=9.5, columnspacing=1.0, handlelength=1.6)


def _result_table(ax, res: dict) -> None:
    """The simulated CRSS (and Δσ) with its interval, then every estimate with what it assumes.

    Estimates of τ_c add the friction stress (the CRSS includes it); those of Δσ are M times the
    obstacles' own estimate (Δσ = M (τ_c − τ_f), docs/physics.md).
    """
    from .analytic import ESTIMATES

    dsig = _delta_sigma(res)
    m, tf = _taylor_factor(res), _friction(res)
    interval, what = _crss_interval(res)
    n = _realizations(res)
    sim = (f"mean of {n} realizations" if n > 1 else "one realization")
    sim += f"; τ_c {_interval(interval)} ({what})"
    if dsig is not None:
        sim += f"; Δσ 95 % {_interval(dsig[1])}"
    header = ["", "τ_c (MPa)"] + (["Δσ (MPa)"] if dsig else []) + ["interval / what it assumes"]
    rows = [["simulation", _num(_crss(res))] + ([_num(dsig[0])] if dsig else []) + [sim]]
    for key, value in (res.get("estimates") or {}).items():
        if value is None or not math.isfinite(value):
            continue
        model = plots.estimate_model(key)
        name, assumes = ESTIMATES.get(model, (model.replace("_", " "), ""))
        rows.append([name, _num(value + tf)] + ([_num(m * value)] if dsig else []) + [assumes])
    note = ["estimates are the obstacles' contribution"
            + (f" plus the friction τ_f = {tf:.4g} MPa" if tf else "")
            + (f"; Δσ = M τ with M = {m:.3g}" if dsig else "")
            + f"; Orowan 2Γ/(bL) = {_num(res.get('orowan_MPa'))} MPa"]
    cols = (0.0, 0.235, 0.32, 0.405) if dsig else (0.0, 0.235, 0.32)
    _table(ax, header, rows, cols, wrap={len(header) - 1: ASSUMES_CHARS}, bold_rows=(0,),
           notes=note, title="CRSS beside the analytic estimates")


def _interval(pair) -> str:
    return "[—]" if pair is None else f"[{pair[0]:.4g}, {pair[1]:.4g}] MPa"


def _num(value) -> str:
    return "—" if value is None or not math.isfinite(value) else f"{value:.4g}"


def case_brief(res: dict) -> list[tuple[str, str]]:
    """The case of a run in brief: (label, text) rows."""
    case = res["case"]
    rows = [("material", _material(case.get("material", {})))]
    if case.get("populations"):
        for pop in case["populations"]:
            rows.append((pop.get("name", "population"), _population(pop, res)))
    elif case.get("obstacles"):
        rows.append(("obstacles", _obstacles(case["obstacles"], res)))
    box = output.box_nm(res)
    spacings = (res.get("box_length_spacings", math.nan), res.get("box_height_spacings", math.nan))
    rows.append(("box", f"{box[0]:.4g} × {box[1]:.4g} nm = {spacings[0]:.3g} × "
                        f"{spacings[1]:.3g} spacings ({res['spacing_nm']:.3g} nm); "
                        f"{_obstacle_points(res)} obstacle points"
                        + (f" for {_plural(_particles(res), 'particle')} (discs are rings of "
                           "points)" if _particles(res) is not None else "")))
    model = res.get("model") or {}
    rows.append(("line", f"{model.get('line_model', 'constant').replace('_', ' ')} line model, "
                         f"Γ = {res.get('line_tension_nN', math.nan):.3g} nN; friction "
                         f"{_friction(res):.3g} MPa"))
    rows.append(("solver", _solver(res)))
    first = res["realizations"]
    n = _realizations(res)
    rows.append(("seeds", f"seed {res.get('seed')}; {_plural(n, 'realization')}"
                          + ("" if n == 1 else ", each its own field")
                          + ("" if len(first) < 2 else
                             f" (streams 0–{len(first) - 1} of the seed)")))
    if _loops_left(res) is not None:
        rows.append(("loops", f"{_plural(_loops_left(res), 'Orowan loop')} left after the line "
                              "crossed the field (realization 0)"))
    rows.append(("status", f"{res['status']}: {res.get('message', '')}"))
    return rows


def _material(mat: dict) -> str:
    return (f"{mat.get('symbol') or 'custom'}: G = {mat.get('shear_modulus_GPa', math.nan):.4g} "
            f"GPa, ν = {mat.get('poisson_ratio', math.nan):.3g}, b = "
            f"{mat.get('burgers_nm', math.nan):.4g} nm")


def _obstacles(obs: dict, res: dict) -> str:
    kind = {"square": "square array", "random": "random field"}.get(obs.get("kind"),
                                                                   str(obs.get("kind")))
    spacing = (f"spacing {obs['spacing_nm']:.4g} nm" if "spacing_nm" in obs else
               f"{obs.get('density_per_um2', math.nan):.4g} per µm²")
    if "critical_force_nN" in obs:
        strength = f"F_c = {obs['critical_force_nN']:.3g} nN"
    else:
        phi = obs.get("critical_angle_deg", math.nan)
        strength = f"φ_c = {phi:.3g}°" + (" (impenetrable)" if phi == 0 else "")
    return f"{kind} of points, {spacing}, {strength}"


def _population(pop: dict, res: dict) -> str:
    amount = (f"f = {pop['volume_fraction']:.3g}" if "volume_fraction" in pop else
              f"N_V = {pop.get('number_density_per_um3', math.nan):.3g} µm⁻³")
    dist = pop.get("distribution", "")
    size = next((f"{k.removesuffix('_nm').replace('_', ' ')} {pop[k]:.3g} nm"
                 for k in ("radius_nm", "mean_radius_nm") if k in pop), "")
    strength = pop.get("strength", "")
    if strength == "point" and "critical_angle_deg" in pop:
        strength += f" φ_c = {pop['critical_angle_deg']:.3g}°"
    elif strength == "constant" and "critical_force_nN" in pop:
        strength += f" F_c = {pop['critical_force_nN']:.3g} nN"
    sections = ((res.get("populations") or {}).get(pop.get("name")) or {}).get("count")
    text = f"{amount}, {dist} {size}, {pop.get('arrangement', '')}, {strength}"
    return text + (f"; {_plural(sections, 'section')} (realization 0)" if sections is not None
                   else "")


def _solver(res: dict) -> str:
    if res.get("solver") == "arcs":
        return "exact quasi-static arc construction (Foreman & Makin 1966)"
    loading = res["case"].get("loading", {})
    line = res["case"].get("line", {})
    text = "nodal line relaxed in time"
    if "node_spacing_nm" in line:
        text += f", nodes {line['node_spacing_nm']:.3g} nm apart"
    if "stress_step" in loading:
        text += (f"; stress steps {loading['stress_step']:.3g} · 2Γ/(bL), "
                 f"bracket refined {loading.get('bisections', '?')} halvings")
    return text


def _footer(fig: Figure, warnings: list[str]) -> None:
    if not warnings:
        return
    text = "\n".join(textwrap.shorten("warning: " + w, 190) for w in warnings[:3])
    if len(warnings) > 3:
        text += f"\n… {len(warnings) - 3} more warnings in {output.RESULT}"
    fig.text(0.012, 0.012, text, ha="left", va="bottom", fontsize=8.5, color="0.35")


# --------------------------------------------------------------------------- text tables


def _table(ax, header: list[str], rows: list[list[str]], cols, wrap: dict[int, int] | None = None,
           bold_rows=(), notes=(), title: str | None = None) -> None:
    """A table of text in ``ax`` (axis off): rows at fixed point offsets from its top, columns
    at axes fractions ``cols``, cells of the columns in ``wrap`` wrapped at that many
    characters, a rule under the header."""
    ax.set_axis_off()
    wrap = wrap or {}
    line = 0
    if title:
        _put(ax, 0.0, line, title, fontweight="bold", fontsize=TEXT_PT + 1.5)
        line += 1.3
    for k, text in enumerate(header):
        _put(ax, cols[k], line, text, fontweight="bold")
    line += 1
    ax.plot([0, 1], [1, 1], color="0.5", linewidth=0.8, transform=_offset(ax, line - 0.25),
            clip_on=False)
    for r, row in enumerate(rows):
        height = 1
        for k, text in enumerate(row):
            parts = textwrap.wrap(text, wrap[k]) if k in wrap and text else [text]
            for i, part in enumerate(parts):
                _put(ax, cols[k], line + i, part,
                     fontweight="bold" if r in bold_rows and k == 0 else "normal")
            height = max(height, len(parts))
        line += height
    for note in notes:
        for part in textwrap.wrap(note, 2 * ASSUMES_CHARS - 20):
            _put(ax, 0.0, line + 0.2, part, fontsize=TEXT_PT - 1, color="0.35")
            line += 1


def _text_rows(ax, title: str, rows: list[tuple[str, str]], label_in: float = 1.1) -> None:
    """(label, text) rows under a bold title, the text wrapped to the width of ``ax`` (the
    case in brief); labels take ``label_in`` inches."""
    ax.set_axis_off()
    width_in = ax.get_position().width * PAGE_IN[0]
    chars = int((width_in - label_in) * 72 / (CHAR_EM * TEXT_PT))
    _put(ax, 0.0, 0, title, fontweight="bold", fontsize=TEXT_PT + 1.5)
    line = 1.3
    for label, text in rows:
        _put(ax, 0.0, line, label, fontweight="bold")
        parts = textwrap.wrap(text, chars) or [""]
        for i, part in enumerate(parts):
            _put(ax, label_in / width_in, line + i, part)
        line += len(parts) + 0.25


def _offset(ax, line: float):
    return offset_copy(ax.transAxes, fig=ax.figure, y=-line * LINE_PT, units="points")


def _put(ax, x: float, line: float, text: str, **kw) -> None:
    """Text at axes fraction ``x``, ``line`` lines below the top of ``ax``."""
    kw.setdefault("fontsize", TEXT_PT)
    ax.text(x, 1.0, text, transform=_offset(ax, line), ha="left", va="top", **kw)


# --------------------------------------------------------------------------- sweep page


def sweep_page(folder) -> Figure:
    """The report page of a sweep folder (a :class:`Figure`, not yet saved): Δσ (populations) or
    the CRSS against the first swept key, the table of the points, the case in brief."""
    from .sweep import RUNS_FOLDER, is_finished

    folder = Path(folder)
    meta, table = plots.read_sweep_points(folder, "crss")
    quantity = "delta_sigma" if "delta_sigma_mean_MPa" in table else "crss"
    done = [r for r in meta["runs"] if is_finished(folder, r["run_id"])]
    if not done:
        raise DlsimError(f"{str(folder)!r}: no run of the sweep has finished yet")
    first = _read_checked_run(folder / RUNS_FOLDER / done[0]["run_id"])["result"]
    fig = _page()
    _header(fig, meta.get("title") or f"sweep {Path(meta.get('source') or folder).name}",
            f"{folder}  ·  {len(done)} of {_plural(len(meta['runs']), 'run')} finished, "
            f"{_plural(meta['n_seeds'], 'seed')} per point, {meta['combine']} of "
            f"{_plural(len(meta['vary']), 'key')}  ·  dlsim {first.get('dlsim_version', '?')}")

    x, curve, rest = plots._roles(meta, table, None)
    figures = list(plots.sweep_figures(table, rest))
    combo, rows = figures[0]
    ax = _axes_in(fig, 0.9, 2.8, 7.2, 5.1)
    plots.draw_sweep(ax, meta, table, rows, (x, curve), quantity)
    title = plots.sweep_title({"title": ""}, rest, combo)
    if len(figures) > 1:
        title += f" (1 of {len(figures)} figures; `dlsim plot` draws every one)"
    ax.set_title(title or f"{plots.QUANTITIES[quantity].split(' (')[0]} against "
                          f"{plots.key_label(x).split(' (')[0]}")

    _points_table(_axes_in(fig, 9.0, 3.6, 6.8, 4.55), meta, table)
    rows = [("swept", "; ".join(f"{k} = {', '.join(plots._fmt(v) for v in vals)}"
                                for k, vals in meta["vary"].items()))]
    brief = [r for r in case_brief(first) if r[0] not in ("status", "loops")]
    _text_rows(_axes_in(fig, 9.0, 0.3, 6.8, 3.1), f"the case (run {done[0]['run_id']}; the swept "
               "keys vary)", rows + brief)
    return fig


def _points_table(ax, meta: dict, table: dict) -> None:
    """One row per point: the swept values, the runs, the CRSS and Δσ with their intervals."""
    keys = list(meta["vary"])
    quantities = [q for q in ("crss", "delta_sigma") if f"{q}_mean_MPa" in table]
    header = ([plots.key_label(k) for k in keys] + ["n"]
              + [{"crss": "τ_c (MPa) [95 %]", "delta_sigma": "Δσ (MPa) [95 %]"}[q]
                 for q in quantities])
    count = len(table["point"])
    body = []
    for i in range(min(count, MAX_TABLE_ROWS)):
        cells = [plots._fmt(table[k][i]) for k in keys] + [f"{int(table['n_runs'][i])}"]
        for q in quantities:
            lo, hi = table[f"{q}_ci95_lo_MPa"][i], table[f"{q}_ci95_hi_MPa"][i]
            cells.append(f"{_num(table[f'{q}_mean_MPa'][i])} "
                         + (_interval((lo, hi)).removesuffix(" MPa")
                            if math.isfinite(lo) else "[—]"))
        body.append(cells)
    widths = [max(len(h), 6) for h in header[:len(keys)]] + [3] + [22] * len(quantities)
    cols = np.concatenate([[0.0], np.cumsum(widths[:-1]) / sum(widths)])
    notes = ([f"… {count - MAX_TABLE_ROWS} more points in summary_points.csv"]
             if count > MAX_TABLE_ROWS else [])
    notes.append("intervals: 95 % Student-t interval of the mean over the seeds of a point "
                 "(summary_points.csv)")
    _table(ax, header, body, cols, notes=notes, title="the points of the sweep")
