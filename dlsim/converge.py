"""The infinite-box CRSS: realizations over a series of box sizes, a finite-size fit, and its
extrapolation with a confidence interval.

Small periodic boxes read high (Nogaret & Rodney, Phys. Rev. B 74, 2006).  ``dlsim converge``
runs independent realizations of the case in square boxes of side L (in obstacle spacings L_s,
geometric from ``[convergence] box_min`` to ``box_max``), fits the mean CRSS of each size against
x(L) by weighted least squares (weights 1/SE², SE the standard error of that size's mean),

    τ(L) = τ_∞ + A x(L),

and takes the intercept τ_∞ as the infinite-box CRSS.  The forms x(L) tried are L^-1/2, L^-1,
L^-2 and 1/ln L; the one with the smallest χ² gives the value, with every form's τ_∞ and χ² beside
it (``forms`` in converge.json: the evidence for the choice).  Each form's 95 % interval is
normal, from the propagated standard errors, while it fits (χ²/dof <= 1), else Student t with
n_sizes − 2 degrees of freedom and the covariance scaled by χ²/dof; the reported interval is the
envelope of the intervals of every form the data do not reject (χ² within its 95 % quantile), so
that where the data cannot tell the forms apart the choice of form widens the interval.  Measured
with the arc solver (8-64 L_s): strong points show no size dependence beyond the noise and every
form is accepted; weak ones (φc = 150°) read 9 % high at 8 L_s and only L^-2 is accepted.

After ``realizations_start`` realizations of every size, more are added in batches where they
narrow τ_∞ most per unit of cost (cost ∝ obstacles ∝ L²; the gain of a size is its share of
Var τ_∞), until the half-width falls below ``[statistics] target_half_width`` × τ_∞ or
``budget_realizations`` is spent.  Realization r of size k is drawn from
``SeedSequence(seed, spawn_key=(k, r))``: reproducible, and independent of the budget.
"""
from __future__ import annotations

import copy
import math
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import output, statistics
from .case import Case, load_case
from .errors import CaseError

#: The finite-size forms x(L) of τ(L) = τ_∞ + A x(L), with L the box side in L_s.
FORMS = {
    "L^-1/2": lambda L: L ** -0.5,
    "L^-1": lambda L: 1.0 / L,
    "L^-2": lambda L: L ** -2.0,
    "1/ln L": lambda L: 1.0 / np.log(L),
}
#: No box size gets more than this many times the realizations of the largest box: the optimal
#: allocation for the intercept alone would pile runs into the cheap small boxes, whose values
#: depend most on the form fitted (a choice of dlsim).
MAX_SHARE_OF_LARGEST = 4
CONFIDENCE = 0.95
#: Two-sided 95 % quantile of the normal distribution.
NORMAL_95 = 1.959963984540054
CONVERGE_JSON = "converge.json"
CONVERGE_CSV = "converge.csv"
#: converge.csv: one row per box size (docs/outputs.md).
CONVERGE_COLUMNS = ("box_length_spacings", "n_obstacles_expected", "n_realizations",
                    "crss_mean_MPa", "crss_std_MPa", "crss_sem_MPa")


@dataclass
class SizeRuns:
    """The realizations of one box size (CRSS in MPa)."""

    index: int
    side: float                     # box side in L_s
    n_obstacles: float              # expected obstacles of the box
    values: list = field(default_factory=list)

    def interval(self) -> statistics.Interval:
        return statistics.mean_interval(self.values)


@dataclass(frozen=True)
class Fit:
    """Weighted linear fit τ = τ_∞ + A x of the size means."""

    form: str
    tau_inf: float
    slope: float
    se_tau_inf: float
    chi2: float
    dof: int
    lo: float
    hi: float

    @property
    def half_width(self) -> float:
        return 0.5 * (self.hi - self.lo)

    def to_dict(self) -> dict:
        return {"form": self.form, "crss_infinite_MPa": self.tau_inf,
                "crss_infinite_ci95_lo_MPa": self.lo, "crss_infinite_ci95_hi_MPa": self.hi,
                "slope_MPa": self.slope, "chi2": self.chi2, "n_dof": self.dof}


def fit_form(sizes: list[SizeRuns], form: str) -> Fit:
    """Weighted least squares of the size means on x(L) = FORMS[form](L)."""
    L = np.array([s.side for s in sizes])
    means = np.array([s.interval().mean for s in sizes])
    se = np.array([s.interval().std / math.sqrt(len(s.values)) for s in sizes])
    se = np.where(se > 0, se, np.nanmin(se[se > 0]) if np.any(se > 0) else 1.0)
    x = FORMS[form](L)
    w = 1.0 / se ** 2
    X = np.column_stack([np.ones_like(x), x])
    cov = np.linalg.inv(X.T @ (w[:, None] * X))
    beta = cov @ (X.T @ (w * means))
    resid = means - X @ beta
    chi2 = float(np.sum(w * resid ** 2))
    dof = len(sizes) - 2
    # The size means carry measured standard errors: while the form fits them (χ²/dof <= 1) the
    # intercept's error is the propagated one and its quantile normal; a misfit (χ²/dof > 1)
    # scales the covariance by χ²/dof and takes Student's t with dof degrees of freedom (the
    # Birge-ratio treatment of inconsistent data, e.g. the Particle Data Group's practice).
    misfit = dof > 0 and chi2 / dof > 1.0
    se_inf = math.sqrt(cov[0, 0] * (chi2 / dof if misfit else 1.0))
    t = statistics.t_quantile(dof + 1) if misfit else NORMAL_95
    return Fit(form, float(beta[0]), float(beta[1]), se_inf, chi2, dof,
               float(beta[0] - t * se_inf), float(beta[0] + t * se_inf))


def acceptable(fit: Fit) -> bool:
    """Whether a form fits the size means: χ² within its 95 % quantile (dof = n_sizes − 2)."""
    from scipy.stats import chi2

    return fit.dof > 0 and fit.chi2 <= chi2.ppf(CONFIDENCE, fit.dof)


def best_fit(sizes: list[SizeRuns]) -> tuple[Fit, list[Fit]]:
    """The extrapolation: the value of the form with the smallest χ², and an interval that covers
    every form the data do not reject (the envelope of their 95 % intervals), so the choice of
    form is part of the uncertainty; with every form rejected, the best form's own interval."""
    fits = [fit_form(sizes, form) for form in FORMS]
    best = min(fits, key=lambda f: f.chi2)
    kept = [f for f in fits if acceptable(f)] or [best]
    lo, hi = min(f.lo for f in kept + [best]), max(f.hi for f in kept + [best])
    return Fit(best.form, best.tau_inf, best.slope, best.se_tau_inf, best.chi2, best.dof,
               lo, hi), fits


def size_case(case: Case, side: float) -> Case:
    """The case in a square box of ``side`` obstacle spacings, one realization."""
    d = copy.deepcopy(case.to_dict())
    line = d["line"]
    for k in ("length_nm", "height_nm", "length", "height"):
        line.pop(k, None)
    line["length"] = line["height"] = float(side)
    d["statistics"]["realizations"] = 1
    if "flow_distance" not in (case.raw.get("loading") or {}):   # the default follows the box
        d["loading"].pop("flow_distance", None)
    return load_case(d, base_dir=Path(case.source).parent if not case.source.startswith("<")
                     else None)


def _check(case: Case) -> None:
    if case.obstacles is not None and case.obstacles.kind == "square":
        raise CaseError(case.source, "obstacles.kind", 'got "square"; a square array has no '
                                                       "finite-size bias to extrapolate")
    if any(p.arrangement == "file" for p in case.populations):
        raise CaseError(case.source, "populations", "particles read from a file fix the box; "
                                                    "`dlsim converge` needs drawn fields")


def _one(case_k: Case, k: int, r: int) -> float:
    """The CRSS (MPa) of realization r of size k."""
    from .api import _realization

    seed = int(np.random.SeedSequence(case_k.seed, spawn_key=(k, r)).generate_state(1)[0])
    import dataclasses
    real = _realization(dataclasses.replace(case_k, seed=seed), 0)
    return float(case_k.units.stress_MPa(real.search.crss))


def _next_size(sizes: list[SizeRuns], fit: Fit) -> int:
    """The size whose next batch narrows τ_∞ most per unit of cost (obstacles)."""
    L = np.array([s.side for s in sizes])
    x = FORMS[fit.form](L)
    n = np.array([len(s.values) for s in sizes], float)
    var = np.array([max(s.interval().std, 1e-12) ** 2 for s in sizes])
    # Var τ_∞ = Σ c_i² var_i / n_i for the intercept's weights c_i; adding runs to size i lowers
    # it by c_i² var_i (1/n_i − 1/(n_i+1)): the gain per obstacle
    w = n / var
    X = np.column_stack([np.ones_like(x), x])
    cov = np.linalg.inv(X.T @ (w[:, None] * X))
    c = (cov @ (X * w[:, None]).T)[0]
    gain = c ** 2 * var / (n * (n + 1)) / np.array([s.n_obstacles for s in sizes])
    # never lean on the small boxes alone: their values depend most on the fitted form
    gain[n >= MAX_SHARE_OF_LARGEST * n[-1]] = -np.inf
    if not np.isfinite(gain).any():
        return len(sizes) - 1
    return int(np.argmax(gain))


def converge_case(case, out_dir=None, progress: bool = False) -> dict:
    """Run the box-size series of a case and extrapolate its CRSS to the infinite box.

    Parameters
    ----------
    case : path, dict or Case
        A random field (``[obstacles] kind = "random"`` or drawn ``[[populations]]``).
    out_dir : path, optional
        Folder for converge.json, converge.csv and the figure (default: the case's output folder
        with ``-converge`` appended); False writes nothing.
    progress : bool
        One line per batch on stderr.

    Returns
    -------
    dict
        What converge.json holds (docs/outputs.md): ``crss_infinite_MPa``,
        ``crss_infinite_ci95_lo_MPa``, ``crss_infinite_ci95_hi_MPa``, the form,
        every form's fit, the box sizes, their realizations and means, status and message.
    """
    case = load_case(case)
    _check(case)
    folder = None
    if out_dir is not False:
        folder = output.check_destination(
            out_dir if out_dir is not None else case.output.folder + "-converge",
            inputs=[case.source] if not case.source.startswith("<") else [], marker=CONVERGE_JSON)
    t0 = time.perf_counter()
    conv, stat = case.convergence, case.statistics
    cases = [size_case(case, side) for side in conv.sizes()]
    sizes = [SizeRuns(k, side, _expected_obstacles(c), []) for k, (side, c)
             in enumerate(zip(conv.sizes(), cases))]
    for s, c in zip(sizes, cases):
        for r in range(conv.realizations_start):
            s.values.append(_one(c, s.index, r))
    used = conv.realizations_start * len(sizes)
    fit, fits = best_fit(sizes)
    _say(progress, sizes, fit, used)
    batch = max(2, conv.realizations_start // 2)
    while fit.half_width > stat.target_half_width * abs(fit.tau_inf) and used < \
            stat.budget_realizations:
        k = _next_size(sizes, fit)
        for _ in range(min(batch, stat.budget_realizations - used)):
            sizes[k].values.append(_one(cases[k], k, len(sizes[k].values)))
            used += 1
        fit, fits = best_fit(sizes)
        _say(progress, sizes, fit, used)
    reached = fit.half_width <= stat.target_half_width * abs(fit.tau_inf)
    result = _record(case, sizes, fit, fits, used, reached, time.perf_counter() - t0)
    if folder is not None:
        output.write_folder(folder, converge_files(result))
        result["out_dir"] = str(folder)
    return result


def _expected_obstacles(case: Case) -> float:
    from .bounds import estimate_counts

    return max(1.0, estimate_counts(case).obstacles)


def _say(progress: bool, sizes, fit: Fit, used: int) -> None:
    if progress:
        counts = "/".join(str(len(s.values)) for s in sizes)
        print(f"  {used:5d} realizations ({counts}): τ_∞ = {fit.tau_inf:.4g} MPa ± "
              f"{fit.half_width:.3g} (95%, form {fit.form})", file=sys.stderr, flush=True)


def _record(case: Case, sizes, fit: Fit, fits, used: int, reached: bool, wall: float) -> dict:
    target = case.statistics.target_half_width
    message = (f"95% half-width {fit.half_width:.3g} MPa is within the target "
               f"{100 * target:g}% of τ_∞" if reached else
               f"budget of {case.statistics.budget_realizations} realizations spent; 95% "
               f"half-width {fit.half_width:.3g} MPa = {100 * fit.half_width / abs(fit.tau_inf):.2g}"
               f"% of τ_∞ (target {100 * target:g}%)")
    return {
        "status": "ok" if reached else "budget_spent", "message": message,
        "solver": case.solver.solver,
        "crss_infinite_MPa": fit.tau_inf, "crss_infinite_ci95_lo_MPa": fit.lo,
        "crss_infinite_ci95_hi_MPa": fit.hi,
        "form": fit.form, "fit": fit.to_dict(),
        "forms": [{**f.to_dict(), "accepted": acceptable(f)} for f in fits],
        "model": "τ(L) = τ_∞ + A x(L), weighted least squares on the size means (weights 1/SE²),"
                 " the form of smallest χ²; interval: the envelope of the 95 % intervals of every "
                 "form whose χ² lies within its 95 % quantile (each normal from the propagated "
                 "errors while χ²/dof <= 1, else Student t with n_sizes − 2 dof and the "
                 "covariance scaled by χ²/dof)",
        "n_realizations": used,
        "boxes": [{"box_length_spacings": s.side, "n_obstacles_expected": s.n_obstacles,
                   "n_realizations": len(s.values), "crss_mean_MPa": s.interval().mean,
                   "crss_std_MPa": s.interval().std,
                   "crss_sem_MPa": s.interval().std / math.sqrt(len(s.values)),
                   "crss_realizations_MPa": s.values} for s in sizes],
        "seed": case.seed, "target_half_width": case.statistics.target_half_width,
        "wall_time_s": wall, "case": case.to_dict(),
    }


def converge_files(result: dict) -> dict[str, bytes]:
    """converge.json, converge.csv (one row per box size) and the figure (PNG, PDF)."""
    rows = [tuple(b[c] for c in CONVERGE_COLUMNS) for b in result["boxes"]]
    files = {CONVERGE_JSON: output.json_bytes(result),
             CONVERGE_CSV: output.table_bytes(CONVERGE_COLUMNS, rows)}
    files.update(_figure_bytes(result))
    return files


def _figure_bytes(result: dict) -> dict[str, bytes]:
    """CRSS against x(L) of the chosen form: size means with 95 % intervals, the fit and τ_∞."""
    import io

    import matplotlib
    from matplotlib.figure import Figure

    boxes, fit = result["boxes"], result["fit"]
    x_of = FORMS[result["form"]]
    L = np.array([b["box_length_spacings"] for b in boxes])
    with matplotlib.rc_context({"font.size": 14, "axes.labelsize": 16, "legend.fontsize": 13}):
        fig = Figure(figsize=(8.0, 6.0), dpi=100, layout="constrained")
        ax = fig.add_subplot()
        half = [statistics.t_quantile(b["n_realizations"]) * b["crss_sem_MPa"] for b in boxes]
        ax.errorbar(x_of(L), [b["crss_mean_MPa"] for b in boxes], yerr=half, fmt="o",
                    color="C0", capsize=4,
                    label="mean over realizations, 95 % interval")
        xs = np.linspace(0.0, float(x_of(L).max()) * 1.05, 50)
        ax.plot(xs, fit["crss_infinite_MPa"] + fit["slope_MPa"] * xs, color="C1",
                label=f"fit τ_∞ + A·{result['form']}")
        lo, hi = result["crss_infinite_ci95_lo_MPa"], result["crss_infinite_ci95_hi_MPa"]
        ax.errorbar([0.0], [result["crss_infinite_MPa"]], yerr=[[result["crss_infinite_MPa"] - lo],
                                                               [hi - result["crss_infinite_MPa"]]],
                    fmt="s", color="C3", capsize=6,
                    label=f"infinite box {result['crss_infinite_MPa']:.4g} MPa")
        for xv, side in zip(x_of(L), L):
            ax.annotate(f"{side:.3g} L_s", (xv, 0), xycoords=("data", "axes fraction"),
                        xytext=(0, 4), textcoords="offset points", ha="center", fontsize=11)
        ax.set_xlim(left=-0.03 * float(x_of(L).max()))
        ax.set_xlabel(f"x = {result['form']} (box side L in L_s)")
        ax.set_ylabel("CRSS τ$_c$ (MPa)")
        ax.legend(loc="best", frameon=False)
        out = {}
        for fmt in ("png", "pdf"):
            buf = io.BytesIO()
            fig.savefig(buf, format=fmt, dpi=100)
            out[f"converge.{fmt}"] = buf.getvalue()
    return out


def format_converge(result: dict) -> str:
    """A few lines for the terminal."""
    lo, hi = result["crss_infinite_ci95_lo_MPa"], result["crss_infinite_ci95_hi_MPa"]
    lines = [f"CRSS of the infinite box  {result['crss_infinite_MPa']:.2f} MPa, 95% [{lo:.2f}, "
             f"{hi:.2f}] MPa (form {result['form']}, {result['solver']} solver)"]
    for b in result["boxes"]:
        lines.append(f"  box {b['box_length_spacings']:6.1f} L_s ({b['n_obstacles_expected']:.0f} "
                     f"obstacles): {b['crss_mean_MPa']:.2f} ± {b['crss_sem_MPa']:.2f} MPa over "
                     f"{b['n_realizations']} realizations")
    lines.append("forms     " + "; ".join(
        f"{f['form']}: τ_∞ {f['crss_infinite_MPa']:.2f} MPa, χ² {f['chi2']:.2f}"
        + ("" if f["accepted"] else " (rejected)") for f in result["forms"]))
    lines.append(f"status    {result['status']}: {result['message']}; "
                 f"{result['wall_time_s']:.1f} s")
    if result.get("out_dir"):
        lines.append(f"written   {result['out_dir']}")
    return "\n".join(lines)
