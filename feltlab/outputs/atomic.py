"""Finished results appear all at once or not at all.

Everything is written into a hidden temporary folder beside the destination
(``.<name>.partial-<random>``); only when every file is complete is it renamed
to the destination. A crash or an error removes the temporary folder, so a
half-written result never sits where a finished one would. ``shot.json`` is
the marker of a finished result: a destination holding one is never replaced
unless the caller asks.
"""
from __future__ import annotations

import json
import os
import shutil
import uuid
from pathlib import Path

MARKER = "shot.json"


def finished_result(dest: Path) -> dict | None:
    """The ``shot.json`` of a finished result in ``dest``, or None if there is none."""
    p = Path(dest) / MARKER
    if not p.is_file():
        return None
    try:
        return json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def sha256_file(path: Path | str, chunk: int = 1 << 20) -> str:
    """Hex SHA-256 of a file, read in 1 MiB chunks; of a frame folder, over its frames' names and bytes in order."""
    import hashlib

    h = hashlib.sha256()
    if Path(path).is_dir():
        from tracking.video import frame_files

        files = frame_files(Path(path))
    else:
        files = [Path(path)]
    for fp in files:
        if len(files) > 1:
            h.update(fp.name.encode() + b"\0")
        with open(fp, "rb") as f:
            while True:
                b = f.read(chunk)
                if not b:
                    break
                h.update(b)
    return h.hexdigest()


class ResultFolder:
    """Context manager: yields a temporary folder, renames it to ``dest`` on success.

    ``dest`` may not exist, may be an empty folder, or (only with
    ``replace=True``) may hold an older result, which is removed after the new
    one is in place. On any exception the temporary folder is deleted and the
    exception propagates; ``dest`` is left exactly as it was.
    """

    def __init__(self, dest: Path, replace: bool = False) -> None:
        self.dest = Path(dest)
        self.replace = replace
        self.tmp: Path | None = None

    def __enter__(self) -> Path:
        self.dest.parent.mkdir(parents=True, exist_ok=True)
        self.tmp = self.dest.parent / f".{self.dest.name}.partial-{uuid.uuid4().hex[:8]}"
        self.tmp.mkdir()
        return self.tmp

    def __exit__(self, exc_type, exc, tb) -> bool:
        assert self.tmp is not None
        if exc_type is not None:
            shutil.rmtree(self.tmp, ignore_errors=True)
            return False
        try:
            self._commit()
        except BaseException:
            shutil.rmtree(self.tmp, ignore_errors=True)
            raise
        return False

    def _commit(self) -> None:
        assert self.tmp is not None
        old: Path | None = None
        if self.dest.exists():
            if self.dest.is_dir() and not any(self.dest.iterdir()):
                self.dest.rmdir()
            elif self.replace:
                old = self.dest.parent / f".{self.dest.name}.old-{uuid.uuid4().hex[:8]}"
                os.replace(self.dest, old)
            else:
                raise FileExistsError(f"{self.dest} exists and is not empty")
        os.replace(self.tmp, self.dest)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
