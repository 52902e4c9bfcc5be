"""Animations of a run's snapshots: frame thinning, GIF frames and size, missing inputs."""
from __future__ import annotations

import builtins
import shutil
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from dlsim.api import run_case
from dlsim.errors import DlsimError
from dlsim.movie import MOVIE_DPI, MOVIE_SIZE_IN, make_movie, scale_bar_length, thin_frames
from test_sweep import TINY_CASE

# the nodal line's time steps: about 40 frames
MOVIE_CASE = TINY_CASE + '[solver]\nmethod = "nodal"\n[output]\nsnapshot_every = 1000\n'


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("movie")
    (folder / "case.toml").write_text(MOVIE_CASE)
    run_case(folder / "case.toml", out_dir=folder / "run")
    return folder / "run"


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
    path = make_movie(run_dir, max_frames=cap, fps=5)
    with Image.open(path) as im:
        assert im.format == "GIF"
        assert im.size == (round(MOVIE_SIZE_IN[0] * MOVIE_DPI), round(MOVIE_SIZE_IN[1] * MOVIE_DPI))
        assert im.n_frames == min(frames, cap)


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


def _have_ffmpeg() -> bool:
    try:
        import imageio_ffmpeg  # noqa: F401
        return True
    except ImportError:
        return shutil.which("ffmpeg") is not None


@pytest.mark.skipif(not _have_ffmpeg(), reason="no ffmpeg binary (optional extra dlsim[movie])")
def test_make_movie_mp4_with_ffmpeg(run_dir):
    path = make_movie(run_dir, fmt="mp4", max_frames=5)
    assert path.suffix == ".mp4" and path.read_bytes()[4:8] == b"ftyp"  # ISO base media header
