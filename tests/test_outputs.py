"""Output names: every key written is documented in docs/outputs.md, every documented key of a
run folder, the estimates and a sweep folder is written, and every key obeys the naming rule
(quantity, then statistic, then unit; intervals as two keys; counts n_<things>).  Also the
on-screen summary of a population case names what each figure counts."""
from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from dlsim import api, output
from dlsim.sweep import column_name, run_sweep
from test_reliability import POPULATION_CASE, TINY_CASE

DOC = Path(__file__).resolve().parents[1] / "docs" / "outputs.md"
#: Unit suffixes of the rule (docs/outputs.md).
UNITS = ("nm", "nm2", "MPa", "GPa", "nN", "deg", "s", "per_um2", "per_nm2", "per_nm3", "spacings",
         "K", "per_s", "b3", "m_per_s")
STATISTICS = ("mean", "std", "sem", "ci95", "lo", "hi", "max", "expected")
UNIT_END = re.compile(r"_(%s)$" % "|".join(UNITS))
#: A unit followed by a statistic breaks the rule (crss_MPa_mean).
UNIT_THEN_STATISTIC = re.compile(r"_(%s)_(%s)(_|$)" % ("|".join(UNITS), "|".join(STATISTICS)))
#: Objects whose keys are case keys (docs/cases.md), not output names.
CASE_KEYED = ("case", "params", "vary", "scales")
#: Documented keys these small runs cannot write, each with the reason.
NOT_EXERCISED = {
    # other line models than the constant line tension
    "model.core_radius_nm", "model.outer_radius_nm", "model.n_image_periods", "model.cutoff_nm",
    "model.n_refresh_steps", "model.loops_interact",
    # thermally activated runs only (written and read back in tests/test_thermal.py)
    "temperature_K", "strain_rate_per_s", "crss_athermal_MPa", "crss_sequences_MPa",
    "crss_sequence_std_MPa", "crss_sequence_ci95_lo_MPa", "crss_sequence_ci95_hi_MPa",
    "activation_volume_b3", "activation_volume_std_b3", "n_sequences", "n_events_per_sequence",
    "velocity_m_per_s", "sequence",
    # sweeps of thermally activated runs only (written in tests/test_plots.py)
    "activation_volume_mean_b3", "activation_volume_sem_b3", "activation_volume_ci95_lo_b3",
    "activation_volume_ci95_hi_b3",
}
MEASURED = "populations.<name>.expected.measured"   # only with measured size files


def documented() -> dict[str, dict[str, tuple[str, str]]]:
    """docs/outputs.md as {section heading: {key: (unit, meaning)}}."""
    sections, current = {}, None
    for line in DOC.read_text(encoding="utf-8").splitlines():
        if line.startswith("#"):
            current = sections.setdefault(line.lstrip("# ").strip(), {})
        elif current is not None and line.startswith("| `"):
            cells = [c.strip() for c in line.strip("|").split("|")]
            current[cells[0].strip("`")] = (cells[1], cells[2])
    return sections


def section(docs: dict, name: str) -> dict[str, tuple[str, str]]:
    (found,) = [rows for head, rows in docs.items() if head.split()[0] == name]
    return found


def pattern(key: str, unit: str = "") -> re.Pattern:
    """A documented key as a regex: ``<key>`` any case key, ``<name>`` one name; a ``table``
    (described elsewhere in the file) covers what it holds."""
    parts = re.split(r"(<[a-z]+>)", key)
    body = "".join((".+" if p == "<key>" else "[^.]+") if p.startswith("<") else re.escape(p)
                   for p in parts)
    return re.compile(body + (r"(\..+)?$" if unit == "table" else "$"))


def paths(data, prefix: str = "") -> tuple[set, set]:
    """(leaves, every path) of a JSON object: ``a.b``, ``a[].b``; objects of CASE_KEYED keys are
    leaves per entry (their keys are case keys), ``case`` itself one leaf."""
    leaves, every = set(), set()
    for key, value in data.items():
        path = prefix + key
        every.add(path)
        if key == "case" or not isinstance(value, (dict, list)):
            leaves.add(path)
        elif key in CASE_KEYED:
            leaves.update(f"{path}.{k}" for k in value)
        elif isinstance(value, dict):
            sub_leaves, sub_every = paths(value, path + ".")
            leaves |= sub_leaves or {path}
            every |= sub_every
        elif value and all(isinstance(v, dict) for v in value):
            for item in value:
                sub_leaves, sub_every = paths(item, path + "[].")
                leaves |= sub_leaves
                every |= sub_every
        else:
            leaves.add(path)
    return leaves, every | leaves


def check_both_ways(written: set, every: set, rows: dict, skip=()) -> None:
    pats = {k: pattern(k, unit) for k, (unit, _) in rows.items()}
    undocumented = sorted(w for w in written if not any(p.match(w) for p in pats.values()))
    assert not undocumented, f"written but not in docs/outputs.md: {undocumented}"
    missing = sorted(k for k, p in pats.items() if k not in NOT_EXERCISED and k not in skip
                     and not k.startswith(MEASURED) and not any(p.match(w) for w in every))
    assert not missing, f"in docs/outputs.md but not written: {missing}"


def obeys_rule(key: str, unit: str) -> bool:
    """The naming rule of docs/outputs.md for one documented key and its unit."""
    last = key.split(".")[-1].replace("[]", "")
    if UNIT_THEN_STATISTIC.search(last):
        return False
    if unit in UNITS:
        return last.endswith("_" + unit)
    if unit == "count":
        return last.startswith("n_")
    return last.startswith("<") or not (UNIT_END.search(last) or last.startswith("n_"))


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("outputs")
    (tmp / "tiny.toml").write_text(TINY_CASE)
    (tmp / "pop.toml").write_text(POPULATION_CASE + "[statistics]\nrealizations = 2\n"
                                  "[output]\nsnapshot_every = 200\n")
    (tmp / "base.toml").write_text(POPULATION_CASE)
    (tmp / "sweep.toml").write_text('base = "base.toml"\n[vary]\n'
                                    '"populations[1].radius_nm" = [8.0, 10.0]\n')
    tiny = api.run_case(tmp / "tiny.toml", out_dir=tmp / "tiny")
    pop = api.run_case(tmp / "pop.toml", out_dir=tmp / "pop")
    run_sweep(tmp / "sweep.toml", out_dir=tmp / "sweep", workers=2, progress=False)
    return {"tmp": tmp, "tiny": tiny, "pop": pop,
            "estimates": json.loads(json.dumps(api.estimate_case(tmp / "pop.toml"),
                                               default=float))}


def test_every_documented_key_obeys_the_rule():
    bad = [(k, u) for rows in documented().values() for k, (u, _) in rows.items()
           if not obeys_rule(k, u)]
    assert not bad


def test_result_json_keys_documented_both_ways(outputs):
    rows = section(documented(), "result.json")
    leaves, every = set(), set()
    for name in ("tiny", "pop"):
        data = json.loads((outputs["tmp"] / name / output.RESULT).read_text())
        got = paths(data)
        leaves |= got[0]
        every |= got[1]
    check_both_ways(leaves, every, rows)


def test_result_json_has_no_pairs(outputs):
    """An interval or a box is two keys: every list left in result.json is documented as one
    value per item (per pass, per realization) or as text."""
    rows = section(documented(), "result.json")
    data = json.loads((outputs["tmp"] / "pop" / output.RESULT).read_text())
    lists = {p for p in paths(data)[0] if isinstance(_get(data, p), list)}
    for path in lists:
        (unit, meaning), = [rows[k] for k in rows if pattern(k).match(path)]
        assert unit == "list" or meaning.split(": ")[-1].startswith("list"), path


def _get(data, path: str):
    value = data
    for part in path.split("."):
        if part.endswith("[]"):
            value = value[part[:-2]][0]
        else:
            value = value[part]
    return value


def test_estimates_keys_documented_both_ways(outputs):
    rows = section(documented(), "Estimates")
    leaves, every = paths(outputs["estimates"])
    check_both_ways(leaves, every, rows)


@pytest.mark.parametrize("name", [output.OBSTACLES, output.LINE, output.HISTORY, output.LOOPS])
def test_csv_columns_documented_both_ways(outputs, name):
    columns = set(output.read_table(outputs["tmp"] / "pop" / name))
    check_both_ways(columns, columns, section(documented(), name))


def test_snapshot_arrays_documented_both_ways(outputs):
    arrays = set(output.read_snapshots(outputs["tmp"] / "pop"))
    check_both_ways(arrays, arrays, section(documented(), output.SNAPSHOTS))


def test_sweep_files_documented_both_ways(outputs):
    folder, docs = outputs["tmp"] / "sweep", documented()
    leaves, every = paths(json.loads((folder / output.SWEEP).read_text()))
    check_both_ways(leaves, every, section(docs, output.SWEEP))
    for name in ("summary_runs.csv", "summary_points.csv"):
        columns = set(output.read_table(folder / name))
        assert "pop1_radius_nm" in columns and not any("[" in c or "." in c for c in columns)
        check_both_ways(columns, columns, section(docs, name))


def test_column_name_rule():
    assert column_name("populations[1].radius_nm") == "pop1_radius_nm"
    assert column_name("populations[12].mean_radius_nm") == "pop12_mean_radius_nm"
    assert column_name("obstacles.spacing_nm") == "obstacles_spacing_nm"
    assert column_name("seed") == "seed"


def test_old_run_folder_read_under_new_names(outputs, tmp_path):
    """A result.json written before the rule reads as the current one (sweeps resume from it)."""
    new = json.loads((outputs["tmp"] / "tiny" / output.RESULT).read_text())
    old = {k: v for k, v in new.items() if k not in (
        "n_realizations", "crss_lo_MPa", "crss_hi_MPa", "box_length_nm", "box_height_nm",
        "box_length_spacings", "box_height_spacings", "estimates", "realizations")}
    old.update(realizations_count=1, crss_bracket_MPa=[new["crss_lo_MPa"], new["crss_hi_MPa"]],
               box_nm=[new["box_length_nm"], new["box_height_nm"]],
               box_in_spacings=[new["box_length_spacings"], new["box_height_spacings"]],
               estimates_MPa={k.removesuffix("_MPa"): v for k, v in new["estimates"].items()},
               realizations=[{"crss_bracket_MPa": [r["crss_lo_MPa"], r["crss_hi_MPa"]],
                              "relaxations": r["n_relaxations"], **{
                                  k: v for k, v in r.items()
                                  if k not in ("crss_lo_MPa", "crss_hi_MPa", "n_relaxations")}}
                             for r in new["realizations"]])
    (tmp_path / output.RESULT).write_text(json.dumps(old))
    got = output.read_result(tmp_path)
    assert {k: got[k] for k in new if k != "realizations"} == {
        k: v for k, v in new.items() if k != "realizations"}
    assert got["realizations"][0] == new["realizations"][0]


def test_summary_names_what_each_figure_counts(outputs):
    """The population summary: particles beside obstacle points, the Orowan estimate under its
    estimates-table name with the estimates' value, and each loop count named."""
    result = outputs["pop"]
    s, text = result.summary, api.format_summary(result)
    assert (f"{s['n_particles']} particles, {s['n_obstacle_points']} obstacle points "
            "(particle sections and the ring points of impenetrable discs)") in text
    assert s["n_obstacle_points"] > s["n_particles"] > 0      # discs are rings of points
    orowan = s["estimates"][api.OROWAN_ESTIMATE]
    assert np.isclose(orowan, s["orowan_MPa"], rtol=1e-12)
    name = api.estimate_name(api.OROWAN_ESTIMATE)
    assert f"{name} 2Γ/(bL) = {orowan:.2f} MPa" in text
    table = api.format_estimates(outputs["estimates"])
    assert any(row.startswith(name) and f"{orowan:.2f}" in row for row in table.splitlines())
    loops = s["loops"]
    assert (f"{s['events']['n_loops_cut']} cut off by the line pinned at the CRSS; "
            f"{loops['n_loops_left']} left after it crossed the field once, "
            f"{loops['n_loops_stored']} stored in loops.csv; {loops['n_particles_looped']} "
            "particles enclosed by loops") in text
    stored = output.read_table(outputs["tmp"] / "pop" / output.LOOPS)["loop"]
    assert loops["n_loops_stored"] == len(np.unique(stored))


def test_sweep_resumes_in_a_folder_written_before_the_rule(outputs, tmp_path):
    """sweep.json with ``seeds`` and runs' ``id``, and run folders with the old result names: the
    same sweep resumes there (nothing left to run) and the summaries come out in the new names."""
    import shutil

    folder = tmp_path / "sweep"
    shutil.copytree(outputs["tmp"] / "sweep", folder)
    record = json.loads((folder / output.SWEEP).read_text())
    record["seeds"] = record.pop("n_seeds")
    record["runs"] = [{("id" if k == "run_id" else k): v for k, v in r.items()}
                      for r in record["runs"]]
    (folder / output.SWEEP).write_text(json.dumps(record))
    for run in (folder / "runs").iterdir():
        res = json.loads((run / output.RESULT).read_text())
        res["realizations_count"] = res.pop("n_realizations")
        res["estimates_MPa"] = {k.removesuffix("_MPa"): v
                                for k, v in res.pop("estimates").items()}
        (run / output.RESULT).write_text(json.dumps(res))
    (folder / "summary_points.csv").unlink()
    outcome = run_sweep(outputs["tmp"] / "sweep.toml", out_dir=folder, progress=False)
    assert outcome.ran == [] and len(outcome.skipped) == 2
    fresh = output.read_table(outputs["tmp"] / "sweep" / "summary_points.csv")
    again = output.read_table(folder / "summary_points.csv")
    assert set(again) == set(fresh)
    assert np.array_equal(again["estimate_foreman_makin_mean_MPa"],
                          fresh["estimate_foreman_makin_mean_MPa"])
