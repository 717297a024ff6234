"""Video input: frames stream in order with the right timestamps; bad files give one-line errors.

Clips are written here with OpenCV's own VideoWriter (an independent
encoder), each frame carrying its index as its grey level, so decoding order
and timing can be checked frame by frame.
"""
from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np
import pytest

from feltlab.errors import FeltlabError
from tracking.video import _decide_times, open_video

FOOTAGE = Path(__file__).resolve().parents[2] / "shared" / "footage"


def _write_clip(path: Path, n: int, fps: float, fourcc: str = "MJPG", size=(96, 64)) -> Path:
    w = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*fourcc), fps, size)
    assert w.isOpened()
    for k in range(n):
        w.write(np.full((size[1], size[0], 3), 5 * k + 30, np.uint8))
    w.release()
    return path


def _level(img: np.ndarray) -> int:
    """Frame index recovered from the grey level written by _write_clip."""
    return int(round((float(np.median(img)) - 30) / 5))


@pytest.mark.parametrize("fourcc,ext", [("MJPG", "avi"), ("mp4v", "mp4")])
def test_frames_in_order_with_index_over_fps_times(tmp_path, fourcc, ext):
    clip = _write_clip(tmp_path / f"c.{ext}", 30, 25.0, fourcc)
    src = open_video(clip)
    assert (src.width, src.height) == (96, 64)
    assert src.fps == pytest.approx(25.0) and src.fps_source == "container"
    assert src.n_frames == 30
    seen = list(src)
    assert [i for i, _, _ in seen] == list(range(30))
    # constant frame rate: t = k / fps exactly (DEVELOPERS.md time convention)
    assert [t for _, t, _ in seen] == [k / 25.0 for k in range(30)]
    # content follows the index (MPEG-4 part 2 at default quality shifts flat grey a little)
    tol = 0 if fourcc == "MJPG" else 1
    assert all(abs(_level(img) - k) <= tol for k, (_, _, img) in enumerate(seen))
    assert all(img.dtype == np.uint8 and img.shape == (64, 96, 3) for _, _, img in seen)
    assert src.frames_read == 30 and not src.truncated


def test_fps_override_and_frame_range(tmp_path):
    # a high-speed camera stores a playback rate (here 30) while it captured 1000 frames/s
    clip = _write_clip(tmp_path / "hs.avi", 40, 30.0)
    src = open_video(clip, fps_override=1000.0, frame_range=(10, 20))
    assert src.fps_source == "override" and src.fps == 1000.0
    got = [(i, t, _level(img)) for i, t, img in src]
    assert [g[0] for g in got] == list(range(10, 20))
    assert [g[1] for g in got] == [k / 1000.0 for k in range(10, 20)]
    assert [g[2] for g in got] == list(range(10, 20))
    assert src.n_frames == 10
    picks = src.sample(4)
    assert len(picks) == 4 and all(10 <= i < 20 for i, _, _ in picks)
    assert [_level(img) for i, _, img in picks] == [i for i, _, _ in picks]


def test_truncated_file_reads_what_it_can_and_reports(tmp_path):
    clip = _write_clip(tmp_path / "full.avi", 40, 30.0)
    data = clip.read_bytes()
    cut = tmp_path / "cut.avi"
    cut.write_bytes(data[: int(len(data) * 0.6)])
    src = open_video(cut)
    got = [i for i, _, _ in src]
    assert 0 < len(got) < 40
    assert got == list(range(len(got)))
    assert src.truncated and any("truncated" in w for w in src.warnings)


@pytest.mark.parametrize("make,match", [
    (lambda d: d / "missing.mp4", "no such file"),
    (lambda d: d, "is a folder"),
    (lambda d: (d / "empty.mp4").write_bytes(b"") and d / "empty.mp4" or d / "empty.mp4", "empty"),
    (lambda d: (d / "text.mp4").write_text("not a video\n") and d / "text.mp4", "not a readable video"),
])
def test_bad_files_raise_one_line_errors(tmp_path, make, match):
    path = make(tmp_path)
    with pytest.raises(FeltlabError, match=match) as exc:
        open_video(path)
    assert "\n" not in str(exc.value)


@pytest.mark.parametrize("kw,match", [
    (dict(frame_range=(5, 5)), "empty"),
    (dict(frame_range=(7, 3)), "empty"),
    (dict(frame_range=(50, None)), "only 12 frames"),
    (dict(frame_range=(0, 99)), "only 12 frames"),
    (dict(frame_range=(-1, 4)), ">= 0"),
    (dict(frame_range=(1.5, 4)), "whole numbers"),
    (dict(fps_override=0), "positive"),
    (dict(fps_override=-30.0), "positive"),
    (dict(fps_override=float("nan")), "positive"),
])
def test_bad_ranges_and_rates(tmp_path, kw, match):
    clip = _write_clip(tmp_path / "c.avi", 12, 30.0)
    with pytest.raises(FeltlabError, match=match):
        open_video(clip, **kw)


def test_time_source_decision():
    fps = 30.0
    cfr = [k / fps for k in range(20)]
    assert _decide_times(cfr, fps) == "index"
    # variable frame rate: steady but uneven presentation times are used as given
    rng = np.random.default_rng(3)
    vfr = np.cumsum(rng.uniform(0.5, 1.5, 20) / fps)
    assert _decide_times(list(vfr - vfr[0]), fps) == "container"
    # missing times (all zero) or times going backwards: fall back to index / fps
    assert _decide_times([0.0] * 20, fps) == "index"
    assert _decide_times([0.0, 0.1, 0.05, 0.2], fps) == "index"


@pytest.mark.footage
@pytest.mark.skipif(not (FOOTAGE / "D1.mp4").exists(), reason="outside footage not present")
def test_outside_footage_metadata():
    import json

    truth = json.loads((FOOTAGE / "D1.truth.json").read_text())
    src = open_video(FOOTAGE / "D1.mp4")
    # the truth file states fps, resolution and frame count (made by another tool)
    assert src.fps == pytest.approx(truth["fps"])
    assert [src.width, src.height] == truth["resolution"]
    assert src.n_frames == truth["n_frames"]
    first = next(iter(src.frames(step=60)))
    assert first[0] == 0 and first[1] == 0.0


def _write_frames(folder: Path, n: int, ext: str = "png", size=(96, 64), bits16: bool = False,
                  grey: bool = False) -> Path:
    """Frames f1..fn (unpadded numbers, so plain name order would be wrong), grey level = index."""
    folder.mkdir(parents=True, exist_ok=True)
    for k in range(n):
        level = 5 * k + 30
        img = np.full((size[1], size[0]) if grey else (size[1], size[0], 3), level, np.uint8)
        if bits16:
            img = img.astype(np.uint16) * 257  # the same brightness in 16 bits (x 65535 / 255)
        assert cv2.imwrite(str(folder / f"f{k + 1}.{ext}"), img)
    return folder


@pytest.mark.parametrize("ext,bits16,grey", [("png", False, False), ("tif", True, False), ("png", False, True)])
def test_frame_folder_reads_in_natural_order_at_the_given_rate(tmp_path, ext, bits16, grey):
    # Images written with OpenCV's own imwrite (independent of our reader).
    folder = _write_frames(tmp_path / "seq", 12, ext, bits16=bits16, grey=grey)
    with pytest.raises(FeltlabError, match="--fps") as exc:
        open_video(folder)
    assert "\n" not in str(exc.value)
    src = open_video(folder, fps_override=500.0, frame_range=(2, 11))
    assert (src.width, src.height) == (96, 64) and src.n_frames == 9
    got = [(i, t, _level(img), img.dtype, img.shape) for i, t, img in src]
    assert [g[0] for g in got] == list(range(2, 11))
    assert [g[1] for g in got] == [k / 500.0 for k in range(2, 11)]
    assert [g[2] for g in got] == list(range(2, 11))  # f10 after f9, not after f1
    assert all(g[3] == np.uint8 and g[4] == (64, 96, 3) for g in got)


def test_frame_folder_errors(tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    (empty / "notes.txt").write_text("no frames here\n")
    with pytest.raises(FeltlabError, match="no frame images"):
        open_video(empty, fps_override=100.0)
    mixed = _write_frames(tmp_path / "mixed", 4)
    cv2.imwrite(str(mixed / "f5.png"), np.zeros((32, 48, 3), np.uint8))
    src = open_video(mixed, fps_override=100.0)
    with pytest.raises(FeltlabError, match="one size") as exc:
        list(src)
    assert "\n" not in str(exc.value)
