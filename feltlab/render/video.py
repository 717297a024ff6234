"""Writing frames: MP4 ('mp4v'), lossless AVI ('FFV1') or a folder of PNGs.

The output's suffix decides the format: ``.mp4`` -> mp4v, ``.avi`` -> FFV1,
no suffix -> PNG frames ``frame_000000.png`` in that folder. Frames go to a
temporary name first and are renamed only when the clip is complete, so an
interrupted render never leaves a file that looks finished.
"""
from __future__ import annotations

import shutil
from pathlib import Path

import cv2
import numpy as np

from feltlab.errors import FeltlabError

FORMATS = {".mp4": "mp4v", ".avi": "ffv1", "": "png"}


def codec_for(path: Path) -> str:
    """The codec implied by an output path's suffix (raises FeltlabError for other suffixes)."""
    suf = path.suffix.lower()
    if suf not in FORMATS:
        raise FeltlabError(f"output {path.name!r}: use a .mp4 (mp4v), .avi (lossless FFV1) or suffix-less folder (PNG frames) name")
    return FORMATS[suf]


def partial_path(path: Path) -> Path:
    return path.with_name(f".{path.stem}.partial{path.suffix}")


class ClipWriter:
    """Context manager: ``with ClipWriter(path, fps, (w, h)) as wr: wr.write(bgr)``; renames on success."""

    def __init__(self, path: str | Path, fps: float, size: tuple[int, int]) -> None:
        self.path = Path(path)
        self.codec = codec_for(self.path)
        self.fps, self.size = float(fps), (int(size[0]), int(size[1]))
        if self.codec == "mp4v" and (self.size[0] % 2 or self.size[1] % 2):
            raise FeltlabError(f"MPEG-4 needs an even width and height, got {self.size[0]}x{self.size[1]}; "
                               "change the resolution or write .avi / PNG frames")
        self.tmp = partial_path(self.path)
        self.count = 0
        self._vw = None

    def __enter__(self) -> "ClipWriter":
        self._cleanup()
        self.path.parent.mkdir(parents=True, exist_ok=True)
        if self.codec == "png":
            self.tmp.mkdir(parents=True)
        else:
            fourcc = cv2.VideoWriter_fourcc(*("mp4v" if self.codec == "mp4v" else "FFV1"))
            self._vw = cv2.VideoWriter(str(self.tmp), fourcc, self.fps, self.size)
            if not self._vw.isOpened():
                raise FeltlabError(f"OpenCV cannot write {self.codec} video here; try a .mp4 or suffix-less (PNG) output")
        return self

    def write(self, bgr: np.ndarray) -> None:
        if bgr.shape[:2] != (self.size[1], self.size[0]):
            raise ValueError(f"frame {bgr.shape} does not match clip size {self.size}")
        if self.codec == "png":
            cv2.imwrite(str(self.tmp / f"frame_{self.count:06d}.png"), bgr)
        else:
            self._vw.write(bgr)
        self.count += 1

    def _cleanup(self) -> None:
        if self.tmp.is_dir():
            shutil.rmtree(self.tmp)
        elif self.tmp.exists():
            self.tmp.unlink()

    def __exit__(self, exc_type, exc, tb) -> None:
        if self._vw is not None:
            self._vw.release()
        if exc_type is not None:
            self._cleanup()
            return
        if self.path.is_dir():
            shutil.rmtree(self.path)
        self.tmp.replace(self.path)
