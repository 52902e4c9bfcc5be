"""Animations of a run: the line's snapshots over the obstacle field.

A run writes ``snapshots.npz`` when its case sets ``[output] snapshot_every = k > 0``
(DEVELOPERS.md): ``offsets`` (frames + 1), the concatenated ``x_nm``, ``y_nm``, ``pinned`` of all
frames, and ``stress_MPa``, ``step`` per frame.  :func:`make_movie` thins the frames evenly to at
most ``max_frames`` and renders them ``width`` pixels wide (default :data:`DEFAULT_WIDTH_PX`, for
a projector), with the Orowan loops of each frame as relaxed onto their particles
(:mod:`dlsim.loops`): a GIF through Pillow (no external program), or an MP4 (H.264) through an
ffmpeg binary (``pip install 'dlsim[movie]'`` brings one, imageio-ffmpeg).
"""
from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from .errors import DlsimError
from .output import box_nm, read_run, read_snapshots
from .plots import (LOOP_COLOUR, STYLE, close_period, draw_field, draw_line, periodic_polyline)

MOVIE_FORMATS = ("gif", "mp4")
# Frames are 6 × 5 in (fonts of STYLE stay readable) rendered at width/6 dpi: 1280 px wide by
# default (a projector's 720p width, common practice), the height in the same ratio rounded to
# even pixels (H.264 with yuv420p needs even sides).
MOVIE_SIZE_IN = (6.0, 5.0)
DEFAULT_WIDTH_PX = 1280
#: Frame widths allowed (px): below, the text is unreadable; above, a GIF of a hundred frames
#: grows past a few hundred MB.
WIDTH_RANGE_PX = (160, 3840)
DEFAULT_MAX_FRAMES = 120
DEFAULT_FPS = 10
# A scale bar about a fifth of the box width, rounded down to 1, 2 or 5 × 10^k nm.
SCALE_BAR_FRACTION = 0.2
FFMPEG_HINT = ("MP4 needs an ffmpeg binary: pip install 'dlsim[movie]' (or install ffmpeg), "
               "or use --format gif")


def thin_frames(n_frames: int, max_frames: int) -> np.ndarray:
    """Indices of at most ``max_frames`` frames spread evenly over ``n_frames``, first and last
    kept.

    Parameters
    ----------
    n_frames : int
    max_frames : int
        >= 1.

    Returns
    -------
    ndarray of int64, shape (min(n_frames, max_frames),)
    """
    if max_frames < 1:
        raise DlsimError(f"max_frames must be >= 1, got {max_frames}")
    count = min(n_frames, max_frames)
    # Spacing of linspace is >= 1 when count <= n_frames, so the rounded indices are distinct.
    return np.rint(np.linspace(0, n_frames - 1, count)).astype(np.int64)


def scale_bar_length(width_nm: float) -> float:
    """A round length (1, 2 or 5 × 10^k nm) close below ``SCALE_BAR_FRACTION × width``."""
    target = SCALE_BAR_FRACTION * width_nm
    decade = 10.0 ** math.floor(math.log10(target))
    return max(m * decade for m in (1, 2, 5) if m * decade <= target)


def frame_size(width: int) -> tuple[int, int]:
    """(width, height) in pixels of the frames of a movie ``width`` pixels wide (even sides)."""
    height = 2 * round(width * MOVIE_SIZE_IN[1] / MOVIE_SIZE_IN[0] / 2)
    return 2 * (width // 2), height


def make_movie(run_dir, fmt: str = "gif", max_frames: int = DEFAULT_MAX_FRAMES,
               fps: float = DEFAULT_FPS, out: str | Path | None = None,
               width: int = DEFAULT_WIDTH_PX) -> Path:
    """Render a run's snapshots as an animation.

    Parameters
    ----------
    run_dir : path
        A run folder with ``snapshots.npz``, ``obstacles.csv`` and ``result.json``.
    fmt : {"gif", "mp4"}
    max_frames : int
        Upper bound on the number of frames (evenly thinned).
    fps : float
        Frames per second.
    out : path, optional
        Output file; default ``<run_dir>/movie.<fmt>``.
    width : int
        Frame width in pixels (WIDTH_RANGE_PX); the height follows (:func:`frame_size`).

    Returns
    -------
    Path
        The written file.
    """
    import matplotlib

    run_dir = Path(run_dir)
    if fmt not in MOVIE_FORMATS:
        raise DlsimError(f"unknown movie format {fmt!r}; allowed: {', '.join(MOVIE_FORMATS)}")
    if not fps > 0:
        raise DlsimError(f"fps must be > 0, got {fps}")
    if not (isinstance(width, int) and WIDTH_RANGE_PX[0] <= width <= WIDTH_RANGE_PX[1]):
        raise DlsimError(f"width must be a whole number of pixels in "
                         f"[{WIDTH_RANGE_PX[0]}, {WIDTH_RANGE_PX[1]}], got {width!r}")
    writer = _writer(fmt, fps)
    run, snaps = read_run(run_dir), read_snapshots(run_dir)
    out = Path(out) if out is not None else run_dir / f"movie.{fmt}"
    frames = thin_frames(len(snaps["offsets"]) - 1, max_frames)
    size = frame_size(width)
    with matplotlib.rc_context(STYLE):
        fig, update = _scene(run, snaps)
        # the exact pixel size: dpi from the width, the height set to its even value
        dpi = size[0] / MOVIE_SIZE_IN[0]
        fig.set_size_inches(MOVIE_SIZE_IN[0], size[1] / dpi)
        with writer.saving(fig, str(out), dpi=dpi):
            for i in frames:
                update(i)
                writer.grab_frame()
    return out


def _writer(fmt: str, fps: float):
    from matplotlib import animation, rcParams

    if fmt == "gif":
        return animation.PillowWriter(fps=fps)
    exe = shutil.which(rcParams["animation.ffmpeg_path"]) or shutil.which("ffmpeg")
    if exe is None:
        try:
            import imageio_ffmpeg
            exe = imageio_ffmpeg.get_ffmpeg_exe()
        except (ImportError, RuntimeError):
            raise DlsimError(FFMPEG_HINT) from None
    rcParams["animation.ffmpeg_path"] = exe
    return animation.FFMpegWriter(fps=fps, codec="h264", extra_args=["-pix_fmt", "yuv420p"])


def _scene(run: dict, snaps: dict):
    """The figure (field, scale bar) and a function drawing frame ``i`` on it."""
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    box = box_nm(run["result"])
    fig = Figure(figsize=MOVIE_SIZE_IN, layout="constrained")
    ax = fig.add_subplot()
    draw_field(ax, run["obstacles"], box)
    ax.set_xticks([])
    ax.set_yticks([])
    bar = scale_bar_length(box[0])
    ax.add_artist(AnchoredSizeBar(ax.transData, bar, f"{bar:g} nm", "lower right", pad=0.4,
                                  color="k", frameon=True, size_vertical=bar / 40))
    offsets = snaps["offsets"]
    curve, pins = draw_line(ax, np.zeros(0), np.zeros(0), np.zeros(0, dtype=bool), box)
    (loops,) = ax.plot([], [], color=LOOP_COLOUR, linewidth=1.2, zorder=3.5)
    title = ax.set_title("")

    def update(i: int) -> None:
        sl = slice(offsets[i], offsets[i + 1])
        x, y, pinned = snaps["x_nm"][sl], snaps["y_nm"][sl], snaps["pinned"][sl].astype(bool)
        curve.set_data(*periodic_polyline(*close_period(x, y, box[0]), box))
        pins.set_data(np.mod(x[pinned], box[0]), np.mod(y[pinned], box[1]))
        loops.set_data(*frame_loops(snaps, i, box))
        title.set_text(f"τ = {snaps['stress_MPa'][i]:.4g} MPa   step {snaps['step'][i]}")

    return fig, update


def frame_loops(snaps: dict, i: int, box) -> tuple[np.ndarray, np.ndarray]:
    """The Orowan loops of frame ``i`` (closed, with periodic copies) as one NaN-separated
    polyline; empty for frames without loops or snapshots written before loops were kept."""
    if "loop_frames" not in snaps:
        return np.zeros(0), np.zeros(0)
    first, last = snaps["loop_frames"][i], snaps["loop_frames"][i + 1]
    off = snaps["loop_offsets"]
    parts = [periodic_polyline(snaps["loop_x_nm"][off[k]:off[k + 1]],
                               snaps["loop_y_nm"][off[k]:off[k + 1]], box, closed=True)
             for k in range(first, last)]
    if not parts:
        return np.zeros(0), np.zeros(0)
    return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])
