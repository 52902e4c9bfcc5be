"""Run folders: what they hold, how they are written (atomically, whole) and how they are read.

This module is the one owner of the files of a run folder (formats in docs/outputs.md).  Values
arrive already converted to file units (nm, MPa); here they are only rendered, written and read.

Rules, so that a folder never mixes two runs and nothing computed is lost:

- :func:`check_destination` runs *before* any computation: the destination must be a folder (or
  not exist yet), lie under folders only, not hold the case's own inputs, and be writable (a probe
  file is created and removed beside it, and an existing folder is renamed away and back).  An
  existing non-empty folder is accepted only when it holds an earlier run (``result.json``) or
  sweep (``sweep.json``), which is then replaced whole.
- :func:`write_folder` writes every file into a hidden temporary folder beside the destination
  and swaps it in with two renames, so readers see the old run or the new one, never a mixture.
- When even that fails (disk full, permissions changed during a long run), the files are saved
  in a rescue folder that can be written (the system's temporary folder, then the working
  folder) and :class:`dlsim.errors.RescuedOutput` says where in one line.
"""
from __future__ import annotations

import csv
import io
import json
import math
import os
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np

from .errors import DlsimError, OutputError, RescuedOutput

RESULT = "result.json"
OBSTACLES = "obstacles.csv"
LINE = "line.csv"
HISTORY = "history.csv"
LOOPS = "loops.csv"
SNAPSHOTS = "snapshots.npz"
SWEEP = "sweep.json"

#: history.csv: one row per relaxation (docs/outputs.md).
HISTORY_COLUMNS = ("realization", "index", "phase", "stress_MPa", "state", "mean_glide_nm",
                   "swept_area_nm2", "n_pinned_nodes", "plastic_strain_increment", "n_steps",
                   "n_nodes")
#: Columns a thermally activated run adds to history.csv (velocity against stress).
THERMAL_HISTORY_COLUMNS = ("velocity_m_per_s", "strain_rate_per_s", "sequence")
#: loops.csv: one row per node of each Orowan loop; ``relaxation`` is how the loop was relaxed
#: onto its obstacles (dlsim.loops.LOOP_STATUS_NAMES).
LOOPS_COLUMNS = ("loop", "particle", "relaxation", "x_nm", "y_nm")
#: Prefixes of the hidden folders used while writing (never a user's name: they start with a dot).
TMP_TAG = ".tmp-"
OLD_TAG = ".old-"
PROBE_PREFIX = ".dlsim-probe-"
RESCUE_PREFIX = "dlsim-rescued-"


# --------------------------------------------------------------------------- rendering to bytes


def _clean(value):
    """JSON has no NaN or infinity: write them as null."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, np.generic):
        return _clean(value.item())
    return value


def json_bytes(data: dict) -> bytes:
    return (json.dumps(_clean(data), indent=2) + "\n").encode("utf-8")


def table_bytes(columns, rows) -> bytes:
    """CSV with a header; floats written with 10 significant digits."""
    buf = io.StringIO(newline="")
    w = csv.writer(buf)
    w.writerow(columns)
    for row in rows:
        w.writerow([f"{v:.10g}" if isinstance(v, (float, np.floating)) else v for v in row])
    return buf.getvalue().encode("utf-8")


def columns_bytes(columns: dict) -> bytes:
    """CSV from equal-length 1-D arrays keyed by column name."""
    names = list(columns)
    return table_bytes(names, zip(*(np.asarray(columns[k]).tolist() for k in names)))


def snapshots_bytes(frames: list[tuple]) -> bytes:
    """Line snapshots (x_nm, y_nm, pinned, stress_MPa, step[, loops]) as one compressed npz (CSR).

    ``loops`` of a frame is a list of (x_nm, y_nm) arrays, the Orowan loops shown with it: they
    are stored as ``loop_frames`` (frames + 1 offsets into the loops), ``loop_offsets`` (loops + 1
    offsets into ``loop_x_nm``, ``loop_y_nm``).
    """
    sizes = [f[0].shape[0] for f in frames]
    offsets = np.zeros(len(frames) + 1, np.int64)
    np.cumsum(sizes, out=offsets[1:])
    cat = (lambda k, dt: np.concatenate([f[k] for f in frames]).astype(dt)
           if frames else np.zeros(0, dt))
    loops = [f[5] if len(f) > 5 else [] for f in frames]
    loop_frames = np.zeros(len(frames) + 1, np.int64)
    np.cumsum([len(lp) for lp in loops], out=loop_frames[1:])
    flat = [lp for frame in loops for lp in frame]
    loop_offsets = np.zeros(len(flat) + 1, np.int64)
    np.cumsum([lp[0].shape[0] for lp in flat], out=loop_offsets[1:])
    loop_xy = [np.concatenate([lp[k] for lp in flat]).astype(np.float64) if flat else np.zeros(0)
               for k in (0, 1)]
    buf = io.BytesIO()
    np.savez_compressed(buf, offsets=offsets, x_nm=cat(0, np.float64), y_nm=cat(1, np.float64),
                        pinned=cat(2, np.bool_),
                        stress_MPa=np.array([f[3] for f in frames], np.float64),
                        step=np.array([f[4] for f in frames], np.int64),
                        loop_frames=loop_frames, loop_offsets=loop_offsets,
                        loop_x_nm=loop_xy[0], loop_y_nm=loop_xy[1])
    return buf.getvalue()


# --------------------------------------------------------------------------- destinations


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.resolve().relative_to(folder.resolve())
        return True
    except ValueError:
        return False


def check_destination(folder, inputs=(), marker: str = RESULT, label: str = "output folder"
                      ) -> Path:
    """Check that ``folder`` can receive a run (``marker`` = result.json) or a sweep (sweep.json).

    Parameters
    ----------
    folder : path-like
        The destination.
    inputs : iterable of path-like
        Files the computation reads (the case file, particle files): they must not lie inside
        the destination, which is replaced whole.
    marker : str
        The file that shows an existing folder holds an earlier dlsim result.
    label : str
        How the message names the destination (e.g. ``"--out"``).

    Returns
    -------
    Path
        The absolute destination; its parent folders exist.

    Raises
    ------
    OutputError
        One line naming the destination and what is wrong.
    """
    folder = Path(os.path.abspath(os.path.expanduser(os.fspath(folder))))
    where = f"{label} {str(folder)!r}"
    up = folder
    while not os.path.lexists(up):
        up = up.parent
    if up != folder and not up.is_dir():
        raise OutputError(f"{where}: {str(up)!r} is a file, so nothing can be written under it")
    if os.path.lexists(folder):
        if not folder.is_dir():
            raise OutputError(f"{where} is a file, not a folder; give a folder (new, empty or "
                              "holding an earlier result)")
        entries = sorted(p.name for p in folder.iterdir())
        if entries and marker not in entries:
            raise OutputError(f"{where} holds files dlsim did not write (e.g. {entries[0]!r}); "
                              "give a new or empty folder, or one holding an earlier result")
    for item in inputs:
        if item is not None and _inside(Path(item), folder):
            raise OutputError(f"{where} holds {str(item)!r}, an input of this run, and would be "
                              "replaced whole; give another folder")
    _probe(folder, where)
    return folder


def _probe(folder: Path, where: str) -> None:
    """Create and remove a file beside ``folder``, and rename an existing ``folder`` away and back
    (what :func:`write_folder` will do), so a read-only or immutable place fails now."""
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
        fd, probe = tempfile.mkstemp(prefix=PROBE_PREFIX, dir=folder.parent)
        os.close(fd)
        os.remove(probe)
        if folder.is_dir():
            aside = folder.with_name(f"{OLD_TAG}{folder.name}-{os.getpid()}-probe")
            os.rename(folder, aside)
            os.rename(aside, folder)
    except OSError as err:
        reason = err.strerror or type(err).__name__
        raise OutputError(f"{where} cannot be written ({reason}); give a folder you can "
                          "write to") from None


# --------------------------------------------------------------------------- writing


def write_folder(folder, files: dict[str, bytes]) -> Path:
    """Write ``files`` (name → bytes) as the folder ``folder``, replacing any earlier one whole.

    Returns the folder written: ``folder`` itself, or a rescue folder when ``folder`` could not
    be written, in which case :class:`RescuedOutput` is raised naming it.
    """
    folder = Path(os.path.abspath(os.fspath(folder)))
    try:
        return _swap_in(folder, files)
    except OSError as err:
        reason = err.strerror or type(err).__name__
        rescue = _rescue(folder.name, files)
        if rescue is None:
            raise OutputError(f"could not write the results to {str(folder)!r} ({reason}) nor to "
                              "any rescue folder") from None
        raise RescuedOutput(f"could not write the results to {str(folder)!r} ({reason}); they "
                            f"were saved in {str(rescue)!r}", rescue) from None


def _fill(target: Path, files: dict[str, bytes]) -> None:
    for name, data in files.items():
        with open(target / name, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())


def _swap_in(folder: Path, files: dict[str, bytes]) -> Path:
    folder.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f"{TMP_TAG}{folder.name}-", dir=folder.parent))
    try:
        _fill(tmp, files)
        old = None
        if os.path.lexists(folder):
            old = folder.with_name(f"{OLD_TAG}{folder.name}-{os.getpid()}-{time.time_ns()}")
            os.rename(folder, old)
        try:
            os.rename(tmp, folder)
        except BaseException:
            if old is not None and not os.path.lexists(folder):  # put the earlier run back
                os.rename(old, folder)
            raise
    except BaseException:  # an error, or Ctrl-C / SIGTERM mid-write: leave no half-made folder
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
    return folder


def _rescue(name: str, files: dict[str, bytes]) -> Path | None:
    """Save ``files`` in a new folder of the temporary folder, else of the working folder."""
    stamp = time.strftime("%Y%m%d-%H%M%S")
    for place in (tempfile.gettempdir(), os.getcwd(), os.path.expanduser("~")):
        try:
            target = Path(tempfile.mkdtemp(prefix=f"{RESCUE_PREFIX}{name}-{stamp}-", dir=place))
            _fill(target, files)
            return target
        except OSError:
            continue
    return None


def write_file_atomic(path, data: bytes) -> None:
    """Write one file through a temporary beside it and a rename (readers never see half)."""
    path = Path(path)
    tmp = path.with_name(f"{TMP_TAG}{path.name}-{os.getpid()}")
    try:
        with open(tmp, "wb") as fh:
            fh.write(data)
        os.replace(tmp, path)
    except BaseException:  # a full disk, a folder in the way, Ctrl-C: leave no temporary
        tmp.unlink(missing_ok=True)
        raise


def clear_leftovers(folder) -> None:
    """Remove the hidden folders an interrupted write left in ``folder``."""
    for tag in (TMP_TAG, OLD_TAG):
        for left in Path(folder).glob(tag + "*"):
            if left.is_dir():
                shutil.rmtree(left, ignore_errors=True)
            else:
                left.unlink(missing_ok=True)


# --------------------------------------------------------------------------- reading


def read_json(path, what: str = "file") -> dict:
    """A JSON file; a missing, unreadable or truncated one is a one-line :class:`DlsimError`."""
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise DlsimError(f"{str(path)!r}: no such {what}") from None
    except (OSError, UnicodeDecodeError) as err:
        raise DlsimError(f"{str(path)!r}: cannot read the {what} ({err})") from None
    except json.JSONDecodeError as err:
        raise DlsimError(f"{str(path)!r}: not valid JSON ({err.msg} at line {err.lineno}), a "
                         f"truncated or damaged {what}") from None
    if not isinstance(data, dict):
        raise DlsimError(f"{str(path)!r}: not a dlsim {what}")
    return data


def is_run_folder(folder) -> bool:
    return (Path(folder) / RESULT).is_file()


def read_result(folder) -> dict:
    """``result.json`` of a run folder, in the current names (:func:`upgrade_result`)."""
    folder = Path(folder)
    if not is_run_folder(folder):
        raise DlsimError(f"{str(folder)!r} is not a run folder (no {RESULT})")
    return upgrade_result(read_json(folder / RESULT, "result file"))


def box_nm(result: dict) -> tuple[float, float]:
    """The box (Lx, Ly) in nm of a ``result.json``."""
    return result["box_length_nm"], result["box_height_nm"]


# --------------------------------------------------------------------------- earlier names

#: Keys renamed when the output names were brought under one rule (docs/outputs.md): old → new.
#: Run folders written before are read under the new names, so sweeps resume from them.
RENAMED = {"realizations_count": "n_realizations", "relaxations": "n_relaxations",
           "time_steps": "n_time_steps", "captures": "n_captures", "releases": "n_releases",
           "reconnections": "n_reconnections", "loops_at_crss": "n_loops_cut",
           "loops_after_crossing": "n_loops_left", "particles_looped": "n_particles_looped",
           "loops_max_per_particle": "n_loops_per_particle_max", "steps_max": "n_steps_max",
           "images": "n_image_periods", "refresh": "n_refresh_steps"}
#: JSON pairs [lo, hi] (or [x, y]) that became two keys: old → (first, second).
SPLIT = {"crss_bracket_MPa": ("crss_lo_MPa", "crss_hi_MPa"),
         "crss_ci95_MPa": ("crss_ci95_lo_MPa", "crss_ci95_hi_MPa"),
         "delta_sigma_ci95_MPa": ("delta_sigma_ci95_lo_MPa", "delta_sigma_ci95_hi_MPa"),
         "box_nm": ("box_length_nm", "box_height_nm"),
         "box_in_spacings": ("box_length_spacings", "box_height_spacings")}
#: history.csv columns renamed: old → new.
RENAMED_HISTORY = {"pinned": "n_pinned_nodes", "steps": "n_steps", "nodes": "n_nodes"}


def _renamed(record: dict) -> dict:
    out = {}
    for key, value in record.items():
        if key in SPLIT and isinstance(value, list) and len(value) == 2:
            out.update(zip(SPLIT[key], value))
        elif key == "estimates_MPa" and isinstance(value, dict):
            out["estimates"] = {f"{k}_MPa": v for k, v in value.items()}
        elif key in ("events", "loops", "loop_relaxation", "model") and isinstance(value, dict):
            out[key] = {RENAMED.get(k, k): v for k, v in value.items()}
        else:
            out[RENAMED.get(key, key)] = value
    return out


def upgrade_result(data: dict) -> dict:
    """A ``result.json`` in the current names: one written before the naming rule
    (``realizations_count``, ``crss_bracket_MPa`` pairs, ``estimates_MPa``) is renamed key by
    key (:data:`RENAMED`, :data:`SPLIT`); the resolved ``case`` is left as it is."""
    if "realizations_count" not in data and "estimates_MPa" not in data:
        return data
    out = _renamed({k: v for k, v in data.items() if k != "case"})
    out["realizations"] = [_renamed(r) for r in data.get("realizations", [])
                           if isinstance(r, dict)]
    if "case" in data:
        out["case"] = data["case"]
    return out


def read_table(path) -> dict[str, np.ndarray]:
    """A CSV file with a header as column name → array (float where every cell is a number).

    Empty cells read as NaN in numeric columns.
    """
    path = Path(path)
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            rows = list(csv.reader(fh))
    except (OSError, UnicodeDecodeError) as err:
        raise DlsimError(f"{str(path)!r}: cannot read the table ({err})") from None
    if not rows:
        raise DlsimError(f"{str(path)!r}: empty table (no header)")
    names, body = rows[0], rows[1:]
    if any(len(r) != len(names) for r in body):
        raise DlsimError(f"{str(path)!r}: rows of unequal length, a truncated or damaged table")
    return {name: _column([r[k] for r in body]) for k, name in enumerate(names)}


def _column(cells: list[str]) -> np.ndarray:
    try:
        return np.array([float(c) if c != "" else math.nan for c in cells], dtype=float)
    except ValueError:
        return np.array(cells, dtype=object)


def read_run(folder) -> dict:
    """The files of a run folder: ``result`` (dict), ``obstacles``, ``line``, ``history`` and
    ``loops`` (column dicts; None when absent)."""
    folder = Path(folder)
    run = {"result": read_result(folder)}
    for name in (OBSTACLES, LINE, HISTORY, LOOPS):
        path = folder / name
        run[name.removesuffix(".csv")] = read_table(path) if path.is_file() else None
    if run["history"] is not None and "steps" in run["history"]:   # before the naming rule
        run["history"] = {RENAMED_HISTORY.get(k, k): v for k, v in run["history"].items()}
    return run


def read_snapshots(folder) -> dict[str, np.ndarray]:
    """The arrays of ``snapshots.npz`` of a run folder (CSR, see :func:`snapshots_bytes`)."""
    path = Path(folder) / SNAPSHOTS
    if not path.is_file():
        raise DlsimError(f"{str(folder)!r} has no {SNAPSHOTS}: run the case with "
                         "[output] snapshot_every = k (> 0)")
    try:
        with np.load(path) as data:
            return {k: data[k] for k in data.files}
    except (OSError, ValueError) as err:
        raise DlsimError(f"{str(path)!r}: cannot read the snapshots ({err})") from None
