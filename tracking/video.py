"""Read a clip frame by frame with its timestamps (never the whole clip in memory).

Decoding uses OpenCV's ``VideoCapture`` (FFmpeg backend). After each
``read()``, ``CAP_PROP_POS_MSEC`` gives the presentation time of the frame
just decoded, which is all we need for variable-frame-rate clips, so PyAV is
not required.

Timestamps (``t_s``, seconds, first yielded frame of the clip at index 0 -> 0 s):

* ``fps_override`` given: ``t_s = index / fps_override`` always. High-speed
  cameras write a playback rate (often 25 or 30 fps) into the container, so
  its times are wrong by the slow-motion factor; the user knows the capture
  rate.
* otherwise, if the container's per-frame times increase steadily and differ
  from ``index / fps`` (a variable frame rate), they are used (relative to
  the first frame); if they agree with ``index / fps`` to 1% of a frame, the
  exact ``index / fps`` is used. The first ``probe_frames`` frames decide.
  A later time that goes backwards is replaced by the previous time plus one
  nominal frame interval and reported in ``warnings``.

A folder of still frames (PNG, TIFF, BMP or JPEG; high-speed cameras often
save these) reads as a clip too: files in natural order of their names
(``f2`` before ``f10``), all of one size, read with OpenCV's ``imread``
(16-bit and grey images become 8-bit BGR). A folder has no frame rate, so
``fps_override`` is required, and times are ``index / fps``.

Frame ``index`` always counts decoded frames from the start of the clip;
``frame_range = (start, stop)`` yields ``start <= index < stop`` (stop may be
None for "to the end").
"""
from __future__ import annotations

import math
import os
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import cv2
import numpy as np

from feltlab.errors import FeltlabError

#: Frames whose container times are examined to decide between the
#: container's times and index / fps.
PROBE_FRAMES = 60
#: Container times that differ from index / fps by less than this fraction of
#: a frame interval count as a constant frame rate.
CFR_TOL_FRAC = 0.01


@dataclass
class VideoSource:
    """An open clip: metadata plus a streaming frame iterator.

    width, height: px. n_frames: frames in the selected range as the container
    reports them (may be approximate; ``frames_read`` is exact after a full
    pass). fps: frames per second used for timestamps; fps_source: 'override'
    or 'container'. time_source: 'index' (t = index / fps) or 'container'
    (per-frame presentation times). Iterate to get (frame_index, t_s, BGR
    uint8 image).
    """

    path: Path
    width: int
    height: int
    n_frames: int
    fps: float
    fps_source: str
    time_source: str
    frame_range: tuple[int, int | None]
    container_fps: float
    container_frames: int
    warnings: list[str] = field(default_factory=list)
    frames_read: int = 0
    truncated: bool = False

    def __iter__(self) -> Iterator[tuple[int, float, np.ndarray]]:
        return self.frames()

    def frames(self, step: int = 1) -> Iterator[tuple[int, float, np.ndarray]]:
        """Yield (frame_index, t_s, image) for every ``step``-th frame of the range."""
        start, stop = self.frame_range
        cap = _open_capture(self.path)
        try:
            idx = 0
            t_first = None
            t_prev = None
            n_out = 0
            dt = 1.0 / self.fps
            while stop is None or idx < stop:
                want = idx >= start and (idx - start) % step == 0
                ok = cap.grab()
                if not ok:
                    break
                pts_s = cap.get(cv2.CAP_PROP_POS_MSEC) / 1000.0
                if t_first is None:
                    t_first = pts_s
                t = self._time(idx, pts_s - t_first, t_prev, dt)
                t_prev = t
                if want:
                    ok, img = cap.retrieve()
                    if not ok or img is None:
                        break
                    if img.ndim == 2:
                        img = cv2.cvtColor(img, cv2.COLOR_GRAY2BGR)
                    n_out += 1
                    yield idx, t, img
                idx += 1
            self._finish(idx, start, stop)
        finally:
            cap.release()

    def _time(self, idx: int, pts_rel: float, t_prev: float | None, dt: float) -> float:
        if self.time_source != "container":
            return idx / self.fps
        if t_prev is not None and not (pts_rel > t_prev):
            if not any(w.startswith("container times go backwards") for w in self.warnings):
                self.warnings.append(f"container times go backwards at frame {idx}; "
                                     "used the previous time + 1/fps there")
            return t_prev + dt
        return pts_rel

    def _finish(self, idx: int, start: int, stop: int | None) -> None:
        self.frames_read = max(idx - start, 0)
        expected = (stop if stop is not None else self.container_frames) if self.container_frames > 0 else None
        if idx <= start:
            raise FeltlabError(
                f"{self.path.name}: no frames could be decoded from frame {start} on "
                f"(the clip has {idx} readable frames); check the file or the frame range")
        if expected is not None and idx < expected - 1:
            self.truncated = True
            msg = (f"{self.path.name}: decoding stopped at frame {idx} of {expected}; "
                   "the file looks truncated or damaged: results cover the readable part only")
            if msg not in self.warnings:
                self.warnings.append(msg)

    def sample(self, n: int) -> list[tuple[int, float, np.ndarray]]:
        """About ``n`` frames spread evenly over the range (streams the clip once)."""
        start, stop = self.frame_range
        end = stop if stop is not None else max(self.container_frames, start + 1)
        step = max((end - start) // max(n, 1), 1)
        out = []
        for item in self.frames(step=step):
            out.append(item)
            if len(out) >= n:
                break
        if not out:
            raise FeltlabError(f"{self.path.name}: no frames in the selected range")
        return out


#: File types read from a folder of frames (lower-case suffixes).
FRAME_SUFFIXES = (".png", ".tif", ".tiff", ".bmp", ".jpg", ".jpeg")


def _natural_key(name: str) -> list:
    """Sort key that orders the numbers inside a name by value ('f2' < 'f10')."""
    import re

    return [int(t) if t.isdigit() else t.lower() for t in re.split(r"(\d+)", name)]


def frame_files(folder: Path) -> list[Path]:
    """Image files of a frame folder in natural order; FeltlabError if there are none."""
    files = sorted((f for f in folder.iterdir() if f.is_file() and f.suffix.lower() in FRAME_SUFFIXES),
                   key=lambda f: _natural_key(f.name))
    if not files:
        raise FeltlabError(f"{folder}: is a folder with no frame images ({', '.join(FRAME_SUFFIXES)}); "
                           "give a video file or a folder of frames")
    return files


class FrameFolder:
    """The part of ``cv2.VideoCapture``'s interface we use, over a folder of still frames."""

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        self.files = frame_files(self.folder)
        self.pos = 0  # index of the next frame to grab
        self.size: tuple[int, int] | None = None

    def isOpened(self) -> bool:  # noqa: N802 - mirrors cv2.VideoCapture
        return True

    def grab(self) -> bool:
        if self.pos >= len(self.files):
            return False
        self.pos += 1
        return True

    def retrieve(self) -> tuple[bool, np.ndarray | None]:
        f = self.files[self.pos - 1]
        img = cv2.imread(str(f), cv2.IMREAD_COLOR)
        if img is None:
            raise FeltlabError(f"{f.name}: not a readable image; remove it from {self.folder.name} or replace it")
        if self.size is None:
            self.size = (img.shape[1], img.shape[0])
        elif (img.shape[1], img.shape[0]) != self.size:
            raise FeltlabError(f"{f.name} is {img.shape[1]}x{img.shape[0]} but earlier frames are "
                               f"{self.size[0]}x{self.size[1]}; a frame folder must hold frames of one size")
        return True, img

    def read(self) -> tuple[bool, np.ndarray | None]:
        return self.retrieve() if self.grab() else (False, None)

    def get(self, prop: int) -> float:
        if prop == cv2.CAP_PROP_FRAME_COUNT:
            return float(len(self.files))
        return 0.0  # no frame rate, no presentation times

    def release(self) -> None:
        pass


def _open_capture(path: Path):
    """A cv2.VideoCapture for a video file, a FrameFolder for a folder of frames."""
    if path.is_dir():
        return FrameFolder(path)
    cap = cv2.VideoCapture(str(path))
    if not cap.isOpened():
        cap.release()
        raise FeltlabError(f"{path.name}: not a readable video (damaged, truncated or an unsupported format); "
                           "convert it to MP4/H.264 or check the file")
    return cap


def open_capture(path: str | os.PathLike):
    """Open a video file or frame folder for plain sequential reading (``read()``, ``release()``)."""
    return _open_capture(Path(path))


def open_video(path: str | os.PathLike, fps_override: float | None = None,
               frame_range: tuple[int, int | None] | None = None) -> VideoSource:
    """Open a clip for streaming; check it decodes and work out its timing.

    fps_override: capture rate (frames per second) for high-speed footage.
    frame_range: (start, stop) frame indices, stop exclusive or None.
    Raises FeltlabError for a missing, unreadable or empty file, a bad frame
    rate or a bad frame range.
    """
    p = Path(path)
    if not p.exists():
        raise FeltlabError(f"{p}: no such file; check the path")
    if p.is_dir():
        frame_files(p)  # refuses a folder without frames
        if fps_override is None:
            raise FeltlabError(f"{p.name}: a folder of frames carries no frame rate; pass the capture rate with --fps")
    elif p.stat().st_size == 0:
        raise FeltlabError(f"{p.name}: the file is empty (0 bytes)")
    if fps_override is not None:
        if not (isinstance(fps_override, (int, float)) and math.isfinite(fps_override) and fps_override > 0):
            raise FeltlabError(f"--fps must be a positive number of frames per second, got {fps_override!r}")
    start, stop = _check_range(frame_range)
    cap = _open_capture(p)
    try:
        c_fps = float(cap.get(cv2.CAP_PROP_FPS) or 0.0)
        c_frames = int(cap.get(cv2.CAP_PROP_FRAME_COUNT) or 0)
        ok, img = cap.read()
        if not ok or img is None:
            raise FeltlabError(f"{p.name}: contains no decodable video frames; check the file")
        h, w = img.shape[:2]
        pts = [cap.get(cv2.CAP_PROP_POS_MSEC) / 1000.0]
        for _ in range(PROBE_FRAMES - 1):
            if not cap.grab():
                break
            pts.append(cap.get(cv2.CAP_PROP_POS_MSEC) / 1000.0)
    finally:
        cap.release()
    if c_frames < 0 or c_frames > 10**9:
        c_frames = 0
    if c_frames and start >= c_frames:
        raise FeltlabError(f"frame range starts at {start} but {p.name} has only {c_frames} frames")
    if c_frames and stop is not None and stop > c_frames:
        raise FeltlabError(f"frame range ends at {stop} but {p.name} has only {c_frames} frames; "
                           f"use a stop <= {c_frames} or leave it open")
    fps_ok = math.isfinite(c_fps) and 0 < c_fps < 1e6
    warnings: list[str] = []
    if fps_override is not None:
        fps, fps_source, time_source = float(fps_override), "override", "index"
    else:
        if not fps_ok:
            raise FeltlabError(f"{p.name}: the container gives no frame rate; pass the capture rate with --fps")
        fps, fps_source = c_fps, "container"
        time_source = _decide_times(pts, fps)
    if c_frames:
        n = (stop if stop is not None else c_frames) - start
    else:
        n = 0
        warnings.append(f"{p.name}: the container does not say how many frames it holds")
    return VideoSource(path=p, width=int(w), height=int(h), n_frames=int(n), fps=float(fps),
                       fps_source=fps_source, time_source=time_source, frame_range=(start, stop),
                       container_fps=c_fps if fps_ok else float("nan"), container_frames=c_frames,
                       warnings=warnings)


def _check_range(frame_range) -> tuple[int, int | None]:
    if frame_range is None:
        return 0, None
    try:
        start, stop = frame_range
    except (TypeError, ValueError):
        raise FeltlabError(f"frame range must be (start, stop), got {frame_range!r}") from None
    start = 0 if start is None else start
    for v in (start, stop):
        if v is not None and (not isinstance(v, (int, np.integer)) or v < 0):
            raise FeltlabError(f"frame range values must be whole numbers >= 0, got {frame_range!r}")
    if stop is not None and stop <= start:
        raise FeltlabError(f"frame range {start}..{stop} is empty; stop must be greater than start")
    return int(start), (None if stop is None else int(stop))


def _decide_times(pts: list[float], fps: float) -> str:
    """'container' if the probed presentation times are a steady, non-uniform clock, else 'index'."""
    t = np.asarray(pts, float)
    if len(t) < 3 or not np.all(np.isfinite(t)):
        return "index"
    t = t - t[0]
    d = np.diff(t)
    if not np.all(d > 0):
        return "index"  # missing or broken times
    expect = np.arange(len(t)) / fps
    if np.max(np.abs(t - expect)) <= CFR_TOL_FRAC / fps:
        return "index"
    return "container"
