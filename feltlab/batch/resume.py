"""Resumable, atomic per-clip results.

A finished clip result is a folder ``OUT/<result_rel>/`` holding the analyser's
files plus ``batch_manifest.json``: the clip's SHA-256, a SHA-256 of the
analysis settings (canonical JSON), the settings themselves, when it finished
and whether it was analysed or copied from a clip with the same content.

Rules (also in the README text of :mod:`feltlab.cmd_batch`):

* Results are built in ``OUT/.batch-staging/<token>/`` and renamed into place
  only when complete, so an interrupted run never leaves a folder that looks
  finished. The staging folder is emptied at the start of the next run.
* A clip is skipped when a finished result with the same clip hash and settings
  hash exists at its place (or at its side place, below).
* A finished result made from other settings, or from an earlier version of
  the clip, is never overwritten: the new result goes beside it into
  ``OUT/<result_rel>__<key>/`` (key = first 8 hex digits of
  SHA-256(clip hash + settings hash)) and the run says so.
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import shutil
import socket
import uuid
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from feltlab.errors import FeltlabError

MANIFEST_NAME = "batch_manifest.json"
STAGING_NAME = ".batch-staging"
LOCK_NAME = ".batch.lock"
HASHES_NAME = ".batch-hashes.json"


def settings_to_dict(settings: Any) -> dict:
    """A settings object as plain JSON-able data (dataclass, mapping, or object with __dict__)."""
    if settings is None:
        return {}
    if callable(getattr(settings, "identity", None)):  # AnalyzeSettings: includes the calibration file's hash
        data = settings.identity()
    elif dataclasses.is_dataclass(settings) and not isinstance(settings, type):
        data = dataclasses.asdict(settings)
    elif isinstance(settings, dict):
        data = dict(settings)
    elif hasattr(settings, "to_dict"):
        data = settings.to_dict()
    else:
        data = dict(vars(settings))
    return json.loads(json.dumps(data, sort_keys=True, default=_json_default))


def _json_default(obj: Any) -> Any:
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return dataclasses.asdict(obj)
    if isinstance(obj, (set, frozenset)):
        return sorted(obj)
    if hasattr(obj, "item"):  # numpy scalars
        return obj.item()
    return str(obj)


def settings_sha256(settings: Any) -> str:
    """SHA-256 (hex) of the settings as canonical JSON (sorted keys, no spaces)."""
    text = json.dumps(settings_to_dict(settings), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def side_key(clip_sha256: str, settings_hash: str) -> str:
    """8-hex-digit key naming a side result folder for this clip content + settings."""
    return hashlib.sha256((clip_sha256 + settings_hash).encode("ascii")).hexdigest()[:8]


def read_manifest(result_dir: Path) -> dict | None:
    """The manifest of a finished result, or None when absent/unreadable."""
    try:
        return json.loads((Path(result_dir) / MANIFEST_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def manifest_matches(result_dir: Path, clip_sha256: str, settings_hash: str) -> bool:
    m = read_manifest(result_dir)
    return bool(m) and m.get("clip_sha256") == clip_sha256 and m.get("settings_sha256") == settings_hash


def shot_matches(result_dir: Path, clip_sha256: str, settings_hash: str) -> bool:
    """True when a result without a batch manifest (e.g. made by ``feltlab analyze``) has a
    shot.json recording this clip's SHA-256 and these settings."""
    try:
        shot = json.loads((Path(result_dir) / "shot.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    clip = shot.get("clip") if isinstance(shot, dict) else None
    sha = clip.get("sha256") if isinstance(clip, dict) else None
    return sha == clip_sha256 and "settings" in shot and settings_sha256(shot["settings"]) == settings_hash


def find_finished(out_dir: Path, result_rel: str, clip_sha256: str, settings_hash: str) -> Path | None:
    """The finished result for this clip content + settings at its place or side place, else None.

    A folder without a batch manifest counts when its shot.json names the same clip hash
    and settings (a result made by ``feltlab analyze`` into the same output folder).
    """
    for cand in (Path(out_dir) / result_rel, Path(out_dir) / f"{result_rel}__{side_key(clip_sha256, settings_hash)}"):
        if not cand.is_dir():
            continue
        if manifest_matches(cand, clip_sha256, settings_hash):
            return cand
        if read_manifest(cand) is None and shot_matches(cand, clip_sha256, settings_hash):
            return cand
    return None


def choose_destination(out_dir: Path, result_rel: str, clip_sha256: str, settings_hash: str) -> tuple[Path, str | None]:
    """Where a new result goes, and a warning when it must go to the side place.

    Returns (path, warning). The path does not exist yet unless it already holds
    this very result (callers check :func:`find_finished` first).
    """
    primary = Path(out_dir) / result_rel
    if not primary.exists():
        return primary, None
    side = Path(out_dir) / f"{result_rel}__{side_key(clip_sha256, settings_hash)}"
    m = read_manifest(primary)
    if m is None:
        why = "a result this batch did not make"
    elif m.get("clip_sha256") != clip_sha256:
        why = "a result from different clip content (the clip changed since)"
    else:
        why = "a result made with different settings"
    return side, f"{primary} holds {why}; kept it and wrote the new result to {side}"


def write_json_atomic(path: Path, data: dict) -> None:
    """Write JSON to ``path`` via a temporary name + rename (never a half file)."""
    path = Path(path)
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.tmp")
    tmp.write_text(json.dumps(data, indent=2, sort_keys=True, default=_json_default), encoding="utf-8")
    os.replace(tmp, path)


def make_manifest(
    clip_rel: str, clip_sha256: str, settings: Any, settings_hash: str, origin: str, copied_from: str | None = None
) -> dict:
    from feltlab import __version__

    return {
        "clip": clip_rel,
        "clip_sha256": clip_sha256,
        "settings_sha256": settings_hash,
        "settings": settings_to_dict(settings),
        "origin": origin,  # "analysed" or "copied"
        "copied_from": copied_from,
        "finished_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "feltlab_version": __version__,
    }


def new_staging_dir(out_dir: Path) -> Path:
    """A fresh, empty staging folder below ``OUT/.batch-staging``."""
    d = Path(out_dir) / STAGING_NAME / uuid.uuid4().hex
    d.mkdir(parents=True)
    return d


def publish(staged_result: Path, dest: Path, manifest: dict) -> Path:
    """Write the manifest into a complete staged result and rename it to ``dest``.

    The finished folder at ``dest`` is never replaced. If ``dest`` appeared meanwhile
    (another process finished the same clip) and holds the same clip hash and settings,
    that result is kept and returned and the staged one is left for the caller to
    discard; if it holds something else, the new result goes to a side name.
    """
    write_json_atomic(Path(staged_result) / MANIFEST_NAME, manifest)
    dest = Path(dest)
    dest.parent.mkdir(parents=True, exist_ok=True)
    try:
        os.rename(staged_result, dest)  # atomic on one file system; fails if dest is a non-empty dir
    except OSError:
        if not dest.exists():
            raise
        if manifest_matches(dest, manifest["clip_sha256"], manifest["settings_sha256"]):
            return dest
        alt = dest.with_name(f"{dest.name}__{uuid.uuid4().hex[:8]}")
        os.rename(staged_result, alt)
        return alt
    return dest


def copy_result(src: Path, dest: Path, out_dir: Path, manifest: dict) -> Path:
    """Copy a finished result to ``dest`` (staged, then renamed), with a new manifest."""
    staging = new_staging_dir(out_dir)
    try:
        staged = staging / "result"
        shutil.copytree(src, staged)
        return publish(staged, dest, manifest)
    finally:
        shutil.rmtree(staging, ignore_errors=True)


class OutputLock:
    """One batch run per output folder: ``OUT/.batch.lock`` holds host and pid.

    A lock left by a process that no longer runs on this host is taken over;
    one held by a live process raises FeltlabError.
    """

    def __init__(self, out_dir: Path) -> None:
        self.path = Path(out_dir) / LOCK_NAME
        self.held = False

    def __enter__(self) -> "OutputLock":
        self.path.parent.mkdir(parents=True, exist_ok=True)
        me = {"host": socket.gethostname(), "pid": os.getpid()}
        for _ in range(2):
            try:
                fd = os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
            except FileExistsError:
                try:
                    other = json.loads(self.path.read_text())
                except (OSError, ValueError):
                    other = {}
                if other.get("host") == me["host"] and _pid_alive(int(other.get("pid", -1))):
                    raise FeltlabError(
                        f"another batch run (pid {other['pid']}) is writing to {self.path.parent}; "
                        "wait for it to finish or choose another --out",
                        stage="batch",
                    ) from None
                if other.get("host") not in (None, me["host"]):
                    raise FeltlabError(
                        f"{self.path} says a batch on host {other['host']} is writing there; if it has stopped, "
                        "delete that lock file and run again",
                        stage="batch",
                    ) from None
                self.path.unlink(missing_ok=True)  # stale lock from a dead run
                continue
            with os.fdopen(fd, "w") as fh:
                json.dump(me, fh)
            self.held = True
            return self
        raise FeltlabError(f"could not lock {self.path}; delete it if no batch is running", stage="batch")

    def __exit__(self, *exc) -> None:
        if self.held:
            self.path.unlink(missing_ok=True)
            self.held = False


def _pid_alive(pid: int) -> bool:
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def clear_staging(out_dir: Path, remove_empty: bool = False) -> int:
    """Remove leftovers of interrupted runs from the staging folder; returns how many.

    remove_empty: also remove the staging folder itself when it ends up empty.
    """
    staging = Path(out_dir) / STAGING_NAME
    if not staging.is_dir():
        return 0
    n = 0
    for child in staging.iterdir():
        shutil.rmtree(child, ignore_errors=True) if child.is_dir() else child.unlink(missing_ok=True)
        n += 1
    if remove_empty:
        try:
            staging.rmdir()
        except OSError:
            pass
    return n


class HashCache:
    """Clip SHA-256 remembered by absolute path, size and modification time (ns).

    A clip whose size and mtime are unchanged since it was hashed is not read again
    (the "quick check" rsync and make also rely on; common practice). Touch a file,
    or delete ``OUT/.batch-hashes.json``, to force a fresh hash.
    """

    def __init__(self, out_dir: Path) -> None:
        self.path = Path(out_dir) / HASHES_NAME
        try:
            data = json.loads(self.path.read_text(encoding="utf-8"))
            self.entries: dict[str, list] = data if isinstance(data, dict) else {}
        except (OSError, ValueError):
            self.entries = {}

    def sha256(self, path: Path, hasher) -> str:
        """The file's SHA-256 from the cache when size and mtime match, else ``hasher(path)``."""
        p = Path(path).resolve()
        size, mtime = _stat_signature(p)
        key = str(p)
        hit = self.entries.get(key)
        if isinstance(hit, list) and len(hit) == 3 and hit[0] == size and hit[1] == mtime:
            return str(hit[2])
        sha = hasher(p)
        self.entries[key] = [size, mtime, sha]
        return sha

    def save(self) -> None:
        write_json_atomic(self.path, self.entries)


def _stat_signature(p: Path) -> tuple[int, int]:
    """(size in bytes, latest mtime in ns) of a clip file, or over every frame of a frame folder
    (a frame edited in place changes the folder's signature, not only its own)."""
    if p.is_dir():
        from tracking.video import frame_files

        sts = [f.stat() for f in frame_files(p)]
        return sum(st.st_size for st in sts) + len(sts), max(st.st_mtime_ns for st in sts)
    st = p.stat()
    return st.st_size, st.st_mtime_ns
