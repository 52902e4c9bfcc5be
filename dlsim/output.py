"""Files of a run folder: ``result.json`` and the CSV tables (formats in DEVELOPERS.md).

Values arrive here already converted to file units (nm, MPa); this module only writes and reads.
"""
from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np

RESULT = "result.json"
OBSTACLES = "obstacles.csv"
LINE = "line.csv"
HISTORY = "history.csv"
LOOPS = "loops.csv"
SNAPSHOTS = "snapshots.npz"

HISTORY_COLUMNS = ("index", "phase", "stress_MPa", "state", "mean_glide_nm", "swept_area_nm2",
                   "pinned", "plastic_strain_increment", "steps", "nodes")


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


def write_json(path: Path, data: dict) -> None:
    path.write_text(json.dumps(_clean(data), indent=2) + "\n", encoding="utf-8")


def read_json(path: Path) -> dict:
    return json.loads(Path(path).read_text(encoding="utf-8"))


def write_table(path: Path, columns, rows) -> None:
    """CSV with a header; floats written with 10 significant digits."""
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(columns)
        for row in rows:
            w.writerow([f"{v:.10g}" if isinstance(v, (float, np.floating)) else v for v in row])


def write_columns(path: Path, columns: dict) -> None:
    """CSV from equal-length 1-D arrays keyed by column name."""
    names = list(columns)
    write_table(path, names, zip(*(np.asarray(columns[k]).tolist() for k in names)))


def write_snapshots(path: Path, frames: list[tuple[np.ndarray, np.ndarray, np.ndarray, float, int]]
                    ) -> None:
    """Line snapshots (x_nm, y_nm, pinned, stress_MPa, step) as one compressed npz (CSR)."""
    sizes = [f[0].shape[0] for f in frames]
    offsets = np.zeros(len(frames) + 1, np.int64)
    np.cumsum(sizes, out=offsets[1:])
    cat = (lambda k, dt: np.concatenate([f[k] for f in frames]).astype(dt)
           if frames else np.zeros(0, dt))
    np.savez_compressed(path, offsets=offsets, x_nm=cat(0, np.float64), y_nm=cat(1, np.float64),
                        pinned=cat(2, np.bool_),
                        stress_MPa=np.array([f[3] for f in frames], np.float64),
                        step=np.array([f[4] for f in frames], np.int64))
