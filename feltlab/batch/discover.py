"""Find every clip below a folder and decide where its results go.

``discover_clips(folder, out_dir)`` walks ``folder`` (following no symlinked
folders), keeps files with a video extension (case-insensitive, see
:data:`feltlab.batch.settings.VIDEO_EXTENSIONS`), skips hidden files/folders and
anything inside ``out_dir``, and maps each clip to a result folder
``<relative path without extension>``. Two clips that would share a result
folder (``a.mp4`` and ``a.mov`` side by side) both get the extension appended
(``a_mp4``, ``a_mov``) so neither result hides the other.

A folder that holds at least :data:`MIN_FOLDER_FRAMES` frame images and no
video file is one clip (a high-speed camera's image sequence), named by its
relative path; nothing below it is searched. Such clips need ``--fps``.
"""
from __future__ import annotations

import os
from collections import defaultdict
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

from feltlab.batch.settings import VIDEO_EXTENSIONS
from feltlab.errors import FeltlabError
from feltlab.outputs.atomic import sha256_file

#: Top-level names in the output folder used by the batch itself.
RESERVED_NAMES: frozenset[str] = frozenset(
    {"failures.csv", "all_contacts.csv", "all_contacts.parquet", "series.csv", "series.html",
     "series_session.csv", "series_friction.csv", "series_spec.csv", "series_outliers.csv", "series_plots"}
)


#: A folder with at least this many frame images (and no video) is a clip of frames.
MIN_FOLDER_FRAMES = 2


def _is_frame_folder(filenames: list[str]) -> bool:
    from tracking.video import FRAME_SUFFIXES

    if any(is_video_name(n) for n in filenames):
        return False
    return sum(1 for n in filenames if not n.startswith(".") and n.lower().endswith(FRAME_SUFFIXES)) \
        >= MIN_FOLDER_FRAMES


@dataclass(frozen=True)
class Clip:
    """One clip found below the batch folder.

    path: absolute path; rel: path relative to the batch folder (POSIX form);
    result_rel: result folder relative to the output folder (POSIX form);
    size_bytes: file size when found.
    """

    path: Path
    rel: str
    result_rel: str
    size_bytes: int


def is_video_name(name: str) -> bool:
    """True when ``name`` ends in a known video extension (any case).

    >>> is_video_name("Shot_01.MP4"), is_video_name("notes.txt")
    (True, False)
    """
    _, dot, ext = name.rpartition(".")
    return bool(dot) and ext.lower() in VIDEO_EXTENSIONS


def discover_clips(folder: Path | str, out_dir: Path | str | None = None) -> list[Clip]:
    """All clips below ``folder``, sorted by relative path; raises FeltlabError if none."""
    root = Path(folder).expanduser().resolve()
    if not root.is_dir():
        raise FeltlabError(f"{folder} is not a folder; pass the folder that holds the clips", stage="discover")
    skip = Path(out_dir).expanduser().resolve() if out_dir is not None else None
    found: list[tuple[str, Path, int]] = []
    for dirpath, dirnames, filenames in os.walk(root, followlinks=False):
        here = Path(dirpath)
        if _is_frame_folder(filenames):
            from tracking.video import frame_files

            rel = here.relative_to(root).as_posix() if here != root else root.name
            found.append((rel, here, sum(f.stat().st_size for f in frame_files(here))))
            dirnames[:] = []
            continue
        dirnames[:] = sorted(
            d for d in dirnames
            if not d.startswith(".") and (skip is None or (here / d).resolve() != skip)
        )
        for name in sorted(filenames):
            if name.startswith(".") or not is_video_name(name):
                continue
            p = here / name
            if not p.is_file():
                continue
            rel = p.relative_to(root).as_posix()
            found.append((rel, p, p.stat().st_size))
    if not found:
        exts = ", ".join(sorted(VIDEO_EXTENSIONS))
        raise FeltlabError(
            f"no video clips found below {root}; expected files ending in one of: {exts}, "
            "or folders of frame images",
            stage="discover",
        )
    return _assign_result_folders(found)


def _assign_result_folders(found: list[tuple[str, Path, int]]) -> list[Clip]:
    by_target: dict[str, list[int]] = defaultdict(list)
    stems = []
    for i, (rel, _, _) in enumerate(found):
        pp = PurePosixPath(rel)
        stem = str(pp.with_suffix("")) if pp.suffix else rel
        stems.append(stem)
        by_target[stem.lower()].append(i)  # case-insensitive file systems
    clips = []
    for i, (rel, path, size) in enumerate(found):
        target = stems[i]
        if len(by_target[target.lower()]) > 1:
            target = f"{target}_{PurePosixPath(rel).suffix.lstrip('.').lower()}"
        if "/" not in target and target.lower() in RESERVED_NAMES:
            target = f"{target}_clip"
        clips.append(Clip(path=path, rel=rel, result_rel=target, size_bytes=size))
    return sorted(clips, key=lambda c: c.rel)


def file_sha256(path: Path | str) -> str:
    """Hex SHA-256 of a file's content, the same digest ``feltlab analyze`` records in shot.json."""
    return sha256_file(Path(path))
