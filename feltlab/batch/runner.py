"""Run the single-clip analyser over many clips: local processes or a dask cluster.

The runner is built around a callable ``analyze(clip_path, out_dir, settings)``
(by default :func:`feltlab.pipeline.analyze_clip`) that writes one clip's
result files into ``out_dir`` and raises :class:`~feltlab.errors.FeltlabError`
for a clip it cannot analyse. For every clip the runner

1. hashes the content (SHA-256; remembered by size and modification time in
   ``OUT/.batch-hashes.json``) and skips it when a finished result with the same
   content and settings exists (:mod:`feltlab.batch.resume`);
2. analyses each distinct content once; a second file with the same content
   (a copy) gets a copy of the finished result, its manifest naming the source;
3. isolates failures: a clip that raises, or whose worker process dies twice,
   is listed in ``failures.csv`` (path, stage, reason) and the batch goes on.

Locally clips run in a ``concurrent.futures.ProcessPoolExecutor``; with
``scheduler`` (``tcp://HOST:PORT`` or a ``distributed.Client``) they run on an
existing dask.distributed cluster, whose workers must see the clip folder and
the output folder at the same paths.
"""
from __future__ import annotations

import csv
import io
import multiprocessing
import os
import shutil
import time
import traceback
import uuid
from collections import deque
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from feltlab.batch import resume
from feltlab.batch import settings as batch_settings
from feltlab.batch.discover import Clip, discover_clips, file_sha256
from feltlab.batch.settings import WORKER_DEATH_RETRIES
from feltlab.errors import FeltlabError

Analyzer = Callable[[Path, Path, Any], Any]
Log = Callable[[str], None]


@dataclass(frozen=True)
class ClipTask:
    """Everything a worker needs to analyse one clip (picklable)."""

    clip_path: str
    clip_rel: str
    result_rel: str
    clip_sha256: str
    out_dir: str
    settings: Any
    settings_hash: str


@dataclass
class ClipOutcome:
    """What happened to one clip in this run.

    status: "analysed", "skipped" (finished result already there), "copied"
    (same content as another clip, result copied) or "failed".
    result_dir: the finished result folder (None when failed); stage/reason: where and
    why it failed (one line); seconds: wall time spent on it in this run;
    warning: a note such as "result written beside an older one".
    """

    clip_rel: str
    result_rel: str
    clip_sha256: str
    status: str
    result_dir: str | None = None
    stage: str = ""
    reason: str = ""
    seconds: float = 0.0
    warning: str = ""
    source_clip: str = ""


@dataclass
class BatchReport:
    """The outcome of a batch run: one ClipOutcome per clip found, plus file paths."""

    out_dir: Path
    outcomes: list[ClipOutcome]
    failures_csv: Path
    settings_hash: str
    warnings: list[str] = field(default_factory=list)
    series: Any = None  # feltlab.batch.series_report.SeriesOutputs when computed

    @property
    def failed(self) -> list[ClipOutcome]:
        return [o for o in self.outcomes if o.status == "failed"]

    def count(self, status: str) -> int:
        return sum(o.status == status for o in self.outcomes)


def one_line(text: str, limit: int = 300) -> str:
    """Collapse a message to one line of at most ``limit`` characters."""
    s = " ".join(str(text).split())
    return s if len(s) <= limit else s[: limit - 3] + "..."


def default_analyzer() -> Analyzer:
    """The real single-clip analyser, :func:`feltlab.pipeline.analyze_clip`."""
    try:
        from feltlab.pipeline import analyze_clip
    except ImportError as exc:  # pragma: no cover - only while the pipeline is missing
        raise FeltlabError(f"the single-clip analyser is not available ({exc}); reinstall feltlab", stage="batch")
    return analyze_clip


def run_one(task: ClipTask, analyze: Analyzer) -> ClipOutcome:
    """Analyse one clip into a staging folder and publish it; never raises for a bad clip.

    Runs in a worker (process or dask). FeltlabError -> failed with its stage;
    any other exception -> failed with stage "internal" (a bug: type and message).
    """
    t0 = time.perf_counter()
    out_dir = Path(task.out_dir)
    base = dict(clip_rel=task.clip_rel, result_rel=task.result_rel, clip_sha256=task.clip_sha256)
    done = resume.find_finished(out_dir, task.result_rel, task.clip_sha256, task.settings_hash)
    if done is not None:  # finished by an earlier attempt whose report was lost
        return ClipOutcome(**base, status="skipped", result_dir=str(done))
    staging = resume.new_staging_dir(out_dir)
    try:
        staged = staging / "result"
        try:
            analyze(Path(task.clip_path), staged, task.settings)
        except FeltlabError as exc:
            return ClipOutcome(**base, status="failed", stage=getattr(exc, "stage", "input") or "input",
                               reason=one_line(str(exc)), seconds=time.perf_counter() - t0)
        except Exception as exc:  # noqa: BLE001 - isolate one clip's bug from the batch
            where = traceback.extract_tb(exc.__traceback__)[-1]
            return ClipOutcome(**base, status="failed", stage="internal",
                               reason=one_line(f"{type(exc).__name__}: {exc} (at {Path(where.filename).name}:"
                                               f"{where.lineno}; please report this)"),
                               seconds=time.perf_counter() - t0)
        if not staged.is_dir() or not any(staged.iterdir()):
            return ClipOutcome(**base, status="failed", stage="internal",
                               reason="the analyser returned without writing any result files",
                               seconds=time.perf_counter() - t0)
        done = resume.find_finished(out_dir, task.result_rel, task.clip_sha256, task.settings_hash)
        if done is not None:  # another process (e.g. an orphaned worker of a killed run) finished it meanwhile
            return ClipOutcome(**base, status="skipped", result_dir=str(done), seconds=time.perf_counter() - t0)
        dest, warning = resume.choose_destination(out_dir, task.result_rel, task.clip_sha256, task.settings_hash)
        manifest = resume.make_manifest(task.clip_rel, task.clip_sha256, task.settings, task.settings_hash,
                                        origin="analysed")
        final = resume.publish(staged, dest, manifest)
        return ClipOutcome(**base, status="analysed", result_dir=str(final), seconds=time.perf_counter() - t0,
                           warning=warning or "")
    finally:
        shutil.rmtree(staging, ignore_errors=True)


# ---------------------------------------------------------------------------
# executors
# ---------------------------------------------------------------------------

def _worker_init() -> None:
    """Each worker process uses one OpenCV thread: the pool already fills the cores."""
    try:
        import cv2

        cv2.setNumThreads(1)
    except ImportError:  # pragma: no cover
        pass


def _new_pool(workers: int) -> ProcessPoolExecutor:
    """A pool of fresh interpreters ("spawn"), never forked copies of this process.

    A forked child inherits locks held by the parent's threads (OpenCV's and
    BLAS's thread pools, a progress-bar thread) and can hang on its first
    import or OpenCV call; spawned workers start clean, at ~1 s each.
    """
    return ProcessPoolExecutor(max_workers=workers, initializer=_worker_init,
                               mp_context=multiprocessing.get_context("spawn"))


def _outcome_of(fut, task: ClipTask) -> ClipOutcome | None:
    """A finished future's outcome; None when its worker process died (BrokenProcessPool)."""
    try:
        return fut.result()
    except BrokenProcessPool:
        return None
    except Exception as exc:  # noqa: BLE001 - e.g. settings or analyser that cannot be sent to a process
        return ClipOutcome(task.clip_rel, task.result_rel, task.clip_sha256, "failed", stage="worker",
                           reason=one_line(f"could not run in a worker process: {type(exc).__name__}: {exc}"))


def _run_local(tasks: list[ClipTask], analyze: Analyzer, workers: int, on_done: Callable[[ClipOutcome], None],
               log: Log) -> None:
    """ProcessPoolExecutor with at most ``workers`` clips in flight.

    When a worker process dies (crash in a decoder, out of memory, killed), every
    clip then in flight is retried, each alone, so a second death is blamed on the
    right clip; a clip whose worker dies more than WORKER_DEATH_RETRIES times fails.
    """
    pending: deque[ClipTask] = deque(tasks)
    strikes: dict[str, int] = {}
    pool = _new_pool(workers)
    inflight: dict[Any, ClipTask] = {}
    try:
        while pending or inflight:
            while pending and len(inflight) < workers:
                nxt = pending[0]
                solo = strikes.get(nxt.clip_rel, 0) > 0
                if solo and inflight:
                    break
                pending.popleft()
                inflight[pool.submit(run_one, nxt, analyze)] = nxt
                if solo:
                    break
            done, _ = wait(list(inflight), return_when=FIRST_COMPLETED)
            died: list[ClipTask] = []
            for fut in done:
                task = inflight.pop(fut)
                outcome = _outcome_of(fut, task)
                if outcome is None:
                    died.append(task)
                else:
                    on_done(outcome)
            if not died:
                continue
            # the pool is broken: every other clip in flight is lost as well
            for fut, task in list(inflight.items()):
                outcome = _outcome_of(fut, task)
                if outcome is None:
                    died.append(task)
                else:
                    on_done(outcome)
            inflight.clear()
            pool.shutdown(wait=True, cancel_futures=True)
            retry = []
            for task in died:
                n = strikes.get(task.clip_rel, 0) + 1
                strikes[task.clip_rel] = n
                if n > WORKER_DEATH_RETRIES:
                    on_done(ClipOutcome(task.clip_rel, task.result_rel, task.clip_sha256, "failed", stage="worker",
                                        reason=f"the worker process died {n} times while analysing this clip "
                                               "(decoder crash, out of memory or killed); try it alone with "
                                               "feltlab analyze"))
                else:
                    log(f"a worker process died; retrying {task.clip_rel}")
                    retry.append(task)
            pending.extendleft(reversed(retry))
            pool = _new_pool(workers)
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def connect_scheduler(scheduler: Any):
    """A distributed.Client for an address (``tcp://HOST:PORT``) or the Client given."""
    try:
        import distributed
    except ImportError:
        raise FeltlabError(
            "--scheduler needs dask.distributed, which is not installed; install it with "
            "pip install 'feltlab[cluster]'",
            stage="batch",
        ) from None
    if isinstance(scheduler, distributed.Client):
        return scheduler, False
    address = str(scheduler)
    if "://" not in address:
        address = f"tcp://{address}"
    try:
        return distributed.Client(address, timeout=f"{batch_settings.SCHEDULER_CONNECT_TIMEOUT_S}s"), True
    except (OSError, TimeoutError, ValueError) as exc:
        raise FeltlabError(
            f"could not reach the dask scheduler at {address} ({one_line(str(exc), 120)}); check the address "
            "(tcp://HOST:PORT) and that the scheduler is running",
            stage="batch",
        ) from None


def _run_dask(tasks: list[ClipTask], analyze: Analyzer, scheduler: Any, on_done: Callable[[ClipOutcome], None],
              log: Log) -> None:
    """Submit every clip to a dask.distributed cluster; a KilledWorker marks that clip failed."""
    import distributed

    client, own = connect_scheduler(scheduler)
    try:
        futures = {}
        for task in tasks:
            fut = client.submit(run_one, task, analyze, pure=False,
                                key=f"feltlab-clip-{task.clip_sha256[:16]}-{uuid.uuid4().hex[:12]}")
            futures[fut] = task
        for fut in distributed.as_completed(list(futures)):
            task = futures[fut]
            try:
                on_done(fut.result())
            except distributed.KilledWorker:
                on_done(ClipOutcome(task.clip_rel, task.result_rel, task.clip_sha256, "failed", stage="worker",
                                    reason="dask workers died repeatedly while analysing this clip "
                                           "(decoder crash, out of memory or killed)"))
            except Exception as exc:  # noqa: BLE001 - e.g. a worker that cannot import feltlab
                on_done(ClipOutcome(task.clip_rel, task.result_rel, task.clip_sha256, "failed", stage="worker",
                                    reason=one_line(f"the cluster could not run this clip: {type(exc).__name__}: "
                                                    f"{exc}")))
    finally:
        if own:
            client.close()


# ---------------------------------------------------------------------------
# the batch
# ---------------------------------------------------------------------------

class _Progress:
    """One overall rich progress bar: clips done/total, failures, ETA (stderr)."""

    def __init__(self, total: int, enabled: bool) -> None:
        self.enabled = enabled
        self.failed = 0
        if not enabled:
            return
        from rich.console import Console
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn,
                                   TimeRemainingColumn)

        self.bar = Progress(
            TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
            TextColumn("{task.fields[extra]}"), TimeElapsedColumn(), TextColumn("ETA"),
            TimeRemainingColumn(), console=Console(stderr=True), transient=False,
        )
        self.bar.start()
        self.hash_task = self.bar.add_task("hashing", total=total, extra="")
        self.task = self.bar.add_task("clips", total=total, extra="failed 0", start=False)

    def hashed(self) -> None:
        if self.enabled:
            self.bar.update(self.hash_task, advance=1)

    def start_clips(self) -> None:
        if self.enabled:
            self.bar.remove_task(self.hash_task)
            self.bar.start_task(self.task)

    def advance(self, outcome: ClipOutcome) -> None:
        self.failed += outcome.status == "failed"
        if self.enabled:
            self.bar.update(self.task, advance=1, extra=f"failed {self.failed}")

    def log(self, text: str) -> None:
        if self.enabled:
            self.bar.console.print(text, markup=False, highlight=False)

    def stop(self) -> None:
        if self.enabled:
            self.bar.stop()


FAILURE_COLUMNS = ["path", "stage", "reason"]


def write_failures(path: Path, outcomes: list[ClipOutcome]) -> Path:
    """failures.csv (path relative to the batch folder, stage, reason) for this run's failed clips; header only when none."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(FAILURE_COLUMNS)
    for o in sorted((o for o in outcomes if o.status == "failed"), key=lambda o: o.clip_rel):
        w.writerow([o.clip_rel, o.stage, o.reason])
    tmp = path.with_name(f".{path.name}.tmp")
    tmp.write_text(buf.getvalue(), encoding="utf-8")
    os.replace(tmp, path)
    return path


def run_batch(
    folder: Path | str,
    out_dir: Path | str,
    settings: Any,
    analyze: Analyzer | None = None,
    workers: int | None = None,
    scheduler: Any = None,
    progress: bool = False,
    log: Log | None = None,
    series: bool = True,
    spec: Any = None,
    in_process: bool = False,
) -> BatchReport:
    """Analyse every clip below ``folder`` into ``out_dir``; see the module docstring.

    workers: local worker processes (default ``os.cpu_count()``); even one worker runs in its
    own process, so a decoder crash cannot take the batch down, unless ``in_process`` is True
    (then clips run one after another in this process: for notebooks and tests);
    scheduler: dask scheduler address or Client (then ``workers`` is ignored).
    series: write the series files (:mod:`feltlab.batch.series_report`) from every
    finished clip of this run; spec: a :class:`feltlab.batch.spec.Spec` to judge.
    Returns a :class:`BatchReport`; failures are in it and in ``out_dir/failures.csv``.
    """
    folder = Path(folder).expanduser().resolve()
    out = Path(out_dir).expanduser().resolve()
    if out == folder:
        raise FeltlabError("--out must differ from the clip folder; e.g. --out results", stage="batch")
    if out.exists() and not out.is_dir():
        raise FeltlabError(f"--out {out} exists and is not a folder; choose a folder", stage="batch")
    analyze = analyze or default_analyzer()
    workers = max(1, int(workers or os.cpu_count() or 1))
    clips = discover_clips(folder, out)
    out.mkdir(parents=True, exist_ok=True)
    settings_hash = resume.settings_sha256(settings)
    warnings: list[str] = []
    bar = _Progress(len(clips), progress)

    def say(text: str) -> None:
        warnings.append(text)
        if progress:
            bar.log(f"feltlab: warning: {text}")
        elif log:
            log(text)

    outcomes: dict[str, ClipOutcome] = {}
    try:
        with resume.OutputLock(out):
            resume.clear_staging(out)
            shas: dict[str, str] = {}
            cache = resume.HashCache(out)
            for c in clips:
                try:
                    shas[c.rel] = cache.sha256(c.path, file_sha256)
                except OSError as exc:
                    outcomes[c.rel] = ClipOutcome(c.rel, c.result_rel, "", "failed", stage="read",
                                                  reason=one_line(f"cannot read the file ({exc.strerror or exc}); "
                                                                  "check it exists and its permissions"))
                bar.hashed()
            cache.save()
            bar.start_clips()
            tasks, waiting, ready = _plan([c for c in clips if c.rel in shas], shas, out, settings, settings_hash,
                                          outcomes)
            task_hash = {t.clip_rel: t.settings_hash for t in tasks}
            for o in outcomes.values():
                bar.advance(o)
            for copy_clip, src in ready:
                o = _copy_for(copy_clip, src, shas, out, settings, settings_hash)
                outcomes[copy_clip.rel] = o
                bar.advance(o)
                if o.warning:
                    say(o.warning)

            def on_done(o: ClipOutcome) -> None:
                outcomes[o.clip_rel] = o
                bar.advance(o)
                if o.warning:
                    say(o.warning)
                for dup in waiting.pop(o.clip_sha256 + task_hash.get(o.clip_rel, settings_hash), []):
                    if o.status == "failed":
                        d = ClipOutcome(dup.rel, dup.result_rel, o.clip_sha256, "failed", stage=o.stage,
                                        reason=one_line(f"same content as {o.clip_rel}, which failed: {o.reason}"),
                                        source_clip=o.clip_rel)
                    else:
                        d = _copy_for(dup, (o.clip_rel, Path(o.result_dir)), shas, out, settings, settings_hash)
                        if d.warning:
                            say(d.warning)
                    outcomes[dup.rel] = d
                    bar.advance(d)

            if tasks:
                if scheduler is not None:
                    _run_dask(tasks, analyze, scheduler, on_done, say)
                elif in_process:
                    for t in tasks:
                        on_done(run_one(t, analyze))
                else:
                    _run_local(tasks, analyze, min(workers, len(tasks)), on_done, say)
            resume.clear_staging(out, remove_empty=True)
            ordered = [outcomes[c.rel] for c in clips]
            failures = write_failures(out / "failures.csv", ordered)
            report = BatchReport(out_dir=out, outcomes=ordered, failures_csv=failures, settings_hash=settings_hash,
                                 warnings=warnings)
            if series:
                from feltlab.batch.series_report import write_series

                report.series = write_series(out, ordered, spec=spec, settings=resume.settings_to_dict(settings),
                                             failures=report.failed)
    finally:
        bar.stop()
    return report


def clip_settings(clip_path: Path, settings: Any) -> Any:
    """The settings one clip is analysed with: ``settings.for_clip(path)`` where the settings
    object has it (AnalyzeSettings picks up a calibration file kept beside the clip), else as given."""
    for_clip = getattr(settings, "for_clip", None)
    return for_clip(Path(clip_path)) if callable(for_clip) else settings


def _plan(clips: list[Clip], shas: dict[str, str], out: Path, settings: Any, settings_hash: str,
          outcomes: dict[str, ClipOutcome]):
    """Split clips into: already finished (into ``outcomes``), tasks to analyse (one per
    content and settings), copies waiting for a task (by content and settings hash) and copies
    ready now. Settings may differ per clip (:func:`clip_settings`)."""
    per_clip: dict[str, tuple[Any, str]] = {}
    for c in clips:
        s_c = clip_settings(c.path, settings)
        per_clip[c.rel] = (s_c, settings_hash if s_c is settings else resume.settings_sha256(s_c))
    finished_by_key: dict[str, tuple[str, Path]] = {}
    for c in clips:
        h = per_clip[c.rel][1]
        found = resume.find_finished(out, c.result_rel, shas[c.rel], h)
        if found is not None:
            outcomes[c.rel] = ClipOutcome(c.rel, c.result_rel, shas[c.rel], "skipped", result_dir=str(found))
            finished_by_key.setdefault(shas[c.rel] + h, (c.rel, found))
    tasks: list[ClipTask] = []
    waiting: dict[str, list[Clip]] = {}
    ready: list[tuple[Clip, tuple[str, Path]]] = []
    for c in clips:
        if c.rel in outcomes:
            continue
        s_c, h = per_clip[c.rel]
        key = shas[c.rel] + h
        if key in finished_by_key:
            ready.append((c, finished_by_key[key]))
        elif key in waiting:
            waiting[key].append(c)
        else:
            waiting[key] = []
            tasks.append(ClipTask(str(c.path), c.rel, c.result_rel, shas[c.rel], str(out), s_c, h))
    return tasks, waiting, ready


def _copy_for(clip: Clip, src: tuple[str, Path], shas: dict[str, str], out: Path, settings: Any,
              settings_hash: str) -> ClipOutcome:
    """Fill a duplicate clip's result from the finished result of the same content."""
    t0 = time.perf_counter()
    sha = shas[clip.rel]
    src_rel, src_dir = src
    s_c = clip_settings(clip.path, settings)
    if s_c is not settings:
        settings, settings_hash = s_c, resume.settings_sha256(s_c)
    dest, warning = resume.choose_destination(out, clip.result_rel, sha, settings_hash)
    manifest = resume.make_manifest(clip.rel, sha, settings, settings_hash, origin="copied", copied_from=src_rel)
    try:
        final = resume.copy_result(src_dir, dest, out, manifest)
    except OSError as exc:
        return ClipOutcome(clip.rel, clip.result_rel, sha, "failed", stage="output",
                           reason=one_line(f"could not copy the result of {src_rel} (same content): {exc}"))
    return ClipOutcome(clip.rel, clip.result_rel, sha, "copied", result_dir=str(final),
                       seconds=time.perf_counter() - t0, warning=warning or "", source_clip=src_rel)
