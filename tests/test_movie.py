"""Animations of a run's snapshots: frame thinning, GIF and MP4 frames and size, loops drawn,
missing inputs."""
from __future__ import annotations

import builtins
import shutil
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from dlsim import output
from dlsim.errors import DlsimError
from dlsim.movie import (DEFAULT_WIDTH_PX, frame_loops, frame_size, make_movie, scale_bar_length,
                         thin_frames)
from test_plots import POPULATION_CASE, run_folder

# impenetrable discs leave Orowan loops while the line is recorded: about 40 frames
MOVIE_CASE = (POPULATION_CASE.replace("realizations = 2", "realizations = 1")
              + "[output]\nsnapshot_every = 300\n")
SMALL = 320     # px: frame-count tests need no projector size


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory) -> Path:
    return run_folder(tmp_path_factory, MOVIE_CASE)


def n_snapshots(run_dir: Path) -> int:
    with np.load(run_dir / "snapshots.npz") as data:
        return len(data["offsets"]) - 1


@pytest.mark.parametrize("n, cap", [(1, 5), (5, 5), (6, 5), (100, 7), (1000, 120)])
def test_thin_frames_even_and_bounded(n, cap):
    idx = thin_frames(n, cap)
    assert idx.size == min(n, cap)
    assert idx[0] == 0 and idx[-1] == n - 1
    assert np.all(np.diff(idx) >= 1)
    if idx.size > 2:  # even: gaps differ by at most one frame (rounding)
        assert np.ptp(np.diff(idx)) <= 1


@pytest.mark.parametrize("width, bar", [(300.0, 50.0), (1000.0, 200.0), (90.0, 10.0),
                                        (12.0, 2.0)])
def test_scale_bar_length_round_fifth(width, bar):
    assert scale_bar_length(width) == pytest.approx(bar)


@pytest.mark.parametrize("cap", [3, 10_000])
def test_make_movie_gif_frame_count(run_dir, cap):
    frames = n_snapshots(run_dir)
    assert frames >= 4, "the tiny case should give a handful of snapshots"
    path = make_movie(run_dir, max_frames=cap, fps=5, width=SMALL)
    with Image.open(path) as im:
        assert im.format == "GIF"
        assert im.size == frame_size(SMALL)
        assert im.n_frames == min(frames, cap)


def test_make_movie_default_width_for_a_projector(run_dir):
    path = make_movie(run_dir, max_frames=2)
    with Image.open(path) as im:
        assert im.size == frame_size(DEFAULT_WIDTH_PX) and im.size[0] >= 1280
        assert np.asarray(im.convert("L"), dtype=float).std() > 5.0   # not blank


@pytest.mark.parametrize("width", [159, 3841, 640.5])
def test_make_movie_bad_width_raises(run_dir, width):
    with pytest.raises(DlsimError, match="width"):
        make_movie(run_dir, width=width)


def test_snapshots_hold_relaxed_loops_and_frames_draw_them(run_dir):
    snaps = output.read_snapshots(run_dir)
    with_loops = [i for i in range(len(snaps["offsets"]) - 1)
                  if snaps["loop_frames"][i + 1] > snaps["loop_frames"][i]]
    assert with_loops, "the disc case should record frames with Orowan loops"
    box = output.box_nm(output.read_result(run_dir))
    xs, ys = frame_loops(snaps, with_loops[-1], box)
    assert np.isfinite(xs).sum() >= 3 * (snaps["loop_frames"][with_loops[-1] + 1]
                                         - snaps["loop_frames"][with_loops[-1]])


def test_frame_loops_of_old_snapshots_is_empty():
    snaps = {"offsets": np.array([0, 2]), "x_nm": np.zeros(2), "y_nm": np.zeros(2)}
    assert frame_loops(snaps, 0, (10.0, 10.0))[0].size == 0


def test_make_movie_without_snapshots_raises(tmp_path, run_dir):
    bare = tmp_path / "bare"
    shutil.copytree(run_dir, bare, ignore=shutil.ignore_patterns("snapshots.npz"))
    with pytest.raises(DlsimError, match="snapshot_every"):
        make_movie(bare)


def test_make_movie_mp4_without_ffmpeg_raises(run_dir, monkeypatch):
    real_import = builtins.__import__

    def no_imageio(name, *args, **kwargs):
        if name == "imageio_ffmpeg":
            raise ImportError(name)
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(shutil, "which", lambda *a, **k: None)
    monkeypatch.setattr(builtins, "__import__", no_imageio)
    with pytest.raises(DlsimError, match=r"dlsim\[movie\]"):
        make_movie(run_dir, fmt="mp4")


@pytest.mark.parametrize("kwargs, match", [({"fmt": "avi"}, "format"), ({"fps": 0}, "fps"),
                                           ({"max_frames": 0}, "max_frames")])
def test_make_movie_bad_arguments_raise(run_dir, kwargs, match):
    with pytest.raises(DlsimError, match=match):
        make_movie(run_dir, **kwargs)


def test_make_movie_mp4_frames_read_back(run_dir):
    # imageio-ffmpeg is in the test extra (pyproject.toml): the MP4 path always runs
    import imageio_ffmpeg
    path = make_movie(run_dir, fmt="mp4", max_frames=5, width=640)
    assert path.suffix == ".mp4" and path.read_bytes()[4:8] == b"ftyp"  # ISO base media header
    reader = imageio_ffmpeg.read_frames(str(path))
    meta = next(reader)
    assert tuple(meta["size"]) == frame_size(640)
    frames = [np.frombuffer(f, np.uint8) for f in reader]
    assert len(frames) == min(5, n_snapshots(run_dir))
    assert all(f.size == 3 * 640 * frame_size(640)[1] and f.std() > 5.0 for f in frames)
