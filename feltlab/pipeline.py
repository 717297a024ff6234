"""One clip, end to end: :func:`analyze_clip`.

clip -> calibration -> detections -> tracks (:func:`tracking.pipeline.track_clip`)
-> events / segments / contacts (:func:`physics.pipeline.analyze_tracks`)
-> outputs (:mod:`feltlab.outputs`) in ``out_dir``:

    tracks.csv/.parquet, segments.csv/.parquet, contacts.csv/.parquet, events.csv/.parquet,
    shot.json, speed.png, table.png, frames/*.png, annotated.mp4, report.html

Everything is written into a hidden temporary folder beside ``out_dir`` and
renamed into place only when complete, so an interrupted or failed run leaves
nothing that looks like a result. ``shot.json`` marks a finished result; a
finished result is never replaced silently: the same clip (SHA-256) with the
same settings is reused as it is, anything else needs ``replace=True``.

Units: mm, s, mm/s, kg, N·s, J (see DEVELOPERS.md).
"""
from __future__ import annotations

import dataclasses
import logging
import math
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd

from feltlab import __version__
from feltlab.errors import FeltlabError
from feltlab.outputs.atomic import ResultFolder, finished_result, sha256_file
from feltlab.outputs.shotfile import jsonable
from feltlab.standards import DEFAULT_TABLE, TablePreset, table_preset

log = logging.getLogger("feltlab.analyze")

#: progress(stage, done, total): stage is "track" (frames read) or "draw" (frames annotated).
Progress = Callable[[str, int, int], None]

# A clip NAME.mp4 (or a frame folder NAME/) with a file NAME + this suffix beside it is calibrated
# from that file when no --calib is given (our convention; see calibration_beside).
CALIBRATION_BESIDE_SUFFIX = ".calibration.toml"


@dataclass
class AnalyzeSettings:
    """Everything that decides what ``analyze_clip`` produces.

    table: preset name (None: the calibration file's preset, else the preset the picture points
    to: carom when the long cushions have no side pockets, else pool-9ft or the pool size /
    snooker preset the balls' image size points to; tracking/pockets.py, ball_size.py).
    calib: manual calibration file (TOML; None: automatic calibration).
    fps: frame rate override (frames/s; high-speed cameras often write a
    playback rate such as 30 into the file). ball_mass_kg: None -> the
    preset's ball mass. frame_range: (first, last+1) frame indices or None.
    video / frames / plots / report: which optional outputs to write.
    hfov_deg: the lens's horizontal field of view (deg) for automatic calibration or manual
    corners (None: measured from the cushion faces where they show, else assumed).
    tracking / physics: stage settings dataclasses (None: their defaults).
    """

    table: str | None = None
    calib: str | None = None
    fps: float | None = None
    ball_mass_kg: float | None = None
    frame_range: tuple[int, int] | None = None
    video: bool = True
    frames: bool = True
    plots: bool = True
    report: bool = True
    tracking: Any = None
    physics: Any = None
    hfov_deg: float | None = None

    def for_clip(self, clip: Path | str) -> "AnalyzeSettings":
        """These settings for one clip: with no ``calib`` given, a calibration file kept beside
        the clip (:func:`calibration_beside`) is used; otherwise the settings as they are."""
        if self.calib:
            return self
        side = calibration_beside(clip)
        return self if side is None else dataclasses.replace(self, calib=str(side))

    def identity(self) -> dict:
        """JSON-safe record of the settings (stored in shot.json and compared on re-runs).

        The calibration file is recorded by name and SHA-256: editing it counts
        as a change of settings, moving it does not.
        """
        d: dict[str, Any] = {}
        for f in dataclasses.fields(self):
            v = getattr(self, f.name)
            if dataclasses.is_dataclass(v) and not isinstance(v, type):
                v = {"type": type(v).__name__, **dataclasses.asdict(v)}
            d[f.name] = v
        if d.get("hfov_deg") is None:
            d.pop("hfov_deg", None)  # results made before the option existed stay reusable
        if self.calib:
            p = Path(self.calib)
            d["calib"] = p.name  # where the file sits does not change the result; its content does
            d["calib_sha256"] = sha256_file(p) if p.is_file() else None
        return jsonable(d)


def calibration_beside(clip: Path | str) -> Path | None:
    """The calibration file kept beside a clip, if there is one: ``NAME.calibration.toml`` in the
    clip's folder for a clip ``NAME.mp4`` (any video extension) or a folder of frames ``NAME/``.

    A bench camera filming part of a table cannot be calibrated from the cushions; keeping its
    corner file beside each clip lets one folder mix such clips with whole-table ones.

    >>> calibration_beside("no/such/folder/shot.mp4") is None
    True
    """
    p = Path(clip)
    stem = p.name if p.is_dir() else p.stem
    side = p.with_name(stem + CALIBRATION_BESIDE_SUFFIX)
    return side if side.is_file() else None


@dataclass
class AnalysisResult:
    """What one run produced. ``reused``: a finished result with the same clip and settings was found."""

    out_dir: Path
    clip: Path
    sha256: str
    n_frames: int
    fps: float
    fps_source: str
    contacts: pd.DataFrame
    shot: dict
    files: list[str] = field(default_factory=list)
    reused: bool = False
    warnings: list[str] = field(default_factory=list)

    @classmethod
    def from_finished(cls, out_dir: Path, clip: Path, shot: dict) -> "AnalysisResult":
        p = Path(out_dir) / "contacts.csv"
        contacts = pd.read_csv(p, keep_default_na=False, na_values=[""]) if p.is_file() else pd.DataFrame()
        return cls(out_dir=Path(out_dir), clip=Path(clip), sha256=shot["clip"]["sha256"],
                   n_frames=int(shot["n_frames"]), fps=float(shot["fps"]), fps_source=str(shot["fps_source"]),
                   contacts=contacts, shot=shot, files=list(shot.get("files", [])), reused=True,
                   warnings=list(shot.get("warnings", [])))


# --------------------------------------------------------------------------- checks
def _check_inputs(clip: Path, settings: AnalyzeSettings) -> None:
    if not clip.exists():
        raise FeltlabError(f"clip {clip} does not exist; check the path")
    if clip.is_dir():
        from tracking.video import FRAME_SUFFIXES

        if not any(f.suffix.lower() in FRAME_SUFFIXES for f in clip.iterdir()):
            raise FeltlabError(f"clip {clip} is a folder without frame images; pass a video file, a folder of "
                               "frames (with --fps), or give a folder of clips to `feltlab batch`")
        if settings.fps is None:
            raise FeltlabError(f"clip {clip} is a folder of frames, which carries no frame rate; "
                               "pass the capture rate with --fps")
    elif clip.stat().st_size == 0:
        raise FeltlabError(f"clip {clip} is empty (0 bytes); re-copy or re-export the video")
    if settings.fps is not None and not (math.isfinite(settings.fps) and 0 < settings.fps <= 100000):
        raise FeltlabError(f"--fps {settings.fps} is not a frame rate; give the camera's capture rate, e.g. --fps 240")
    if settings.ball_mass_kg is not None and not (math.isfinite(settings.ball_mass_kg)
                                                  and 0.01 <= settings.ball_mass_kg <= 2.0):
        raise FeltlabError(f"--ball-mass {settings.ball_mass_kg} kg is implausible; give kilograms, e.g. 0.163")
    if settings.calib is not None and not Path(settings.calib).is_file():
        raise FeltlabError(f"calibration file {settings.calib} does not exist; check the path "
                           "(or omit --calib for automatic calibration)")
    if settings.frame_range is not None:
        a, b = settings.frame_range
        if not (0 <= a < b):
            raise FeltlabError(f"frame range {a}:{b} is empty or negative; give FIRST:LAST with FIRST < LAST")


def _preset(name: str) -> TablePreset:
    try:
        return table_preset(name)
    except ValueError as exc:
        raise FeltlabError(str(exc)) from None


def _check_destination(out_dir: Path, sha: str, ident: dict, replace: bool) -> dict | None:
    """The finished result to reuse (same clip and settings), or None to analyse; raise if blocked."""
    prev = finished_result(out_dir)
    if prev is not None:
        same_clip = prev.get("clip", {}).get("sha256") == sha
        same_settings = prev.get("settings") == ident
        if same_clip and same_settings and not replace:
            return prev
        if not replace:
            what = "a different clip" if not same_clip else "different settings"
            raise FeltlabError(f"{out_dir} already holds a finished result made from {what}; "
                               "pass --replace to overwrite it or choose another --out")
        return None
    if out_dir.exists() and not replace:
        if not out_dir.is_dir() or any(out_dir.iterdir()):
            raise FeltlabError(f"{out_dir} exists and is not an empty folder or a feltlab result; "
                               "choose another --out or remove it")
    return None


# --------------------------------------------------------------------------- stages
class _stage:
    """Context: a FeltlabError raised inside gets ``stage`` set to where it arose (if not already)."""

    def __init__(self, name: str) -> None:
        self.name = name

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb) -> bool:
        if isinstance(exc, FeltlabError) and getattr(exc, "stage", "input") in (None, "", "input"):
            exc.stage = self.name
        return False


def _calibration(settings: AnalyzeSettings, table: TablePreset | None):
    if not settings.calib:
        return None
    from tracking.calibrate import calibration_from_file

    try:
        return calibration_from_file(settings.calib, table=table, hfov_deg=settings.hfov_deg)
    except TypeError:  # older signature without `table`
        return calibration_from_file(settings.calib)


def _track(clip: Path, table: TablePreset, cal, settings: AnalyzeSettings, progress: Progress | None):
    from tracking.pipeline import track_clip

    kw: dict[str, Any] = dict(table=table, calibration=cal, fps=settings.fps, frame_range=settings.frame_range,
                              auto_table=settings.table is None and cal is None)
    if settings.hfov_deg is not None:
        kw["hfov_deg"] = settings.hfov_deg
    if settings.tracking is not None:
        kw["settings"] = settings.tracking
    if progress is not None:
        kw["progress"] = lambda done, total: progress("track", int(done), int(total or 0))
    return track_clip(clip, **kw)


def _physics(tr, table: TablePreset, radius_mm: float, mass_kg: float, settings: AnalyzeSettings):
    from physics.pipeline import analyze_tracks

    kw: dict[str, Any] = {}
    if settings.physics is not None:
        kw["settings"] = settings.physics
    return analyze_tracks(tr.tracks, tr.detections, table, radius_mm, mass_kg, tr.fps, **kw)


def _balls_table(tr) -> pd.DataFrame | list:
    balls = getattr(tr, "balls", None)
    if isinstance(balls, pd.DataFrame):
        return balls
    if balls is not None:
        return list(balls)
    return sorted(tr.tracks["ball"].astype(str).unique())


def _frame_times(tracks: pd.DataFrame, n: int, fps: float) -> np.ndarray:
    t = np.arange(n) / fps
    if len(tracks):
        ft = tracks.groupby("frame")["t_s"].first()
        idx = ft.index.to_numpy(int)
        ok = (idx >= 0) & (idx < n)
        t[idx[ok]] = ft.to_numpy(float)[ok]
    return t


# --------------------------------------------------------------------------- main
def analyze_clip(clip_path, out_dir, settings: AnalyzeSettings | None = None, progress: Progress | None = None,
                 replace: bool = False) -> AnalysisResult:
    """Analyse one clip into ``out_dir`` (the finished result folder itself, e.g. results/<clip stem>).

    Raises FeltlabError for bad input (missing/unreadable clip, bad settings,
    a finished result in the way). ``progress(stage, done, total)`` is called
    while frames are read and drawn.
    """
    settings = settings or AnalyzeSettings()
    clip = Path(clip_path)
    out_dir = Path(out_dir)
    if not settings.calib and clip.exists():
        settings = settings.for_clip(clip)
        if settings.calib:
            log.info("calibration: using %s, kept beside the clip (pass --calib to use another file)",
                     settings.calib)
    _check_inputs(clip, settings)
    timings: dict[str, float] = {}
    warnings: list[str] = []
    t0 = time.perf_counter()

    table = _preset(settings.table) if settings.table else None
    sha = sha256_file(clip)
    ident = settings.identity()
    prev = _check_destination(out_dir, sha, ident, replace)
    if prev is not None:
        log.info("already analysed with the same clip and settings: %s (pass --replace to redo)", out_dir)
        return AnalysisResult.from_finished(out_dir, clip, prev)

    t = time.perf_counter()
    with _stage("calibrate"):
        cal = _calibration(settings, table)
    if table is None:
        table = cal.table if cal is not None else _preset(DEFAULT_TABLE)
    if cal is not None:
        log.info("calibration: read from %s (%s)", settings.calib, cal.method)
    with _stage("track"):
        tr = _track(clip, table, cal, settings, progress)
    timings["track_s"] = time.perf_counter() - t
    cal = tr.calibration
    table = cal.table  # the balls' size may have chosen another preset (tracking/ball_size.py)
    log.info("calibration: %s, residual %s px / %s mm, %.3f px/mm", cal.method, _fmt(cal.residual_px, None),
             _fmt(cal.residual_mm, None), cal.px_per_mm)
    for w in getattr(tr, "warnings", None) or []:
        warnings.append(f"tracking: {w}")
        log.warning("tracking: %s", w)
    n_balls = tr.tracks["ball"].nunique() if len(tr.tracks) else 0
    log.info("tracking: %d frames at %g frames/s (%s), %d balls, %d track rows", tr.n_frames, tr.fps,
             tr.fps_source, n_balls, len(tr.tracks))

    t = time.perf_counter()
    mass = settings.ball_mass_kg if settings.ball_mass_kg is not None else table.ball.mass_kg
    radius = cal.ball_radius_mm
    with _stage("physics"):
        ph = _physics(tr, table, radius, mass, settings)
    timings["physics_s"] = time.perf_counter() - t
    contacts = ph.contacts
    log.info("physics: %d contact(s) (%d ball-ball, %d ball-cushion); mu_s %s, mu_r %s", len(contacts),
             int((contacts["kind"] == "ball-ball").sum()) if len(contacts) else 0,
             int((contacts["kind"] == "ball-cushion").sum()) if len(contacts) else 0,
             _fmt(ph.mu_s, ph.mu_s_sigma), _fmt(ph.mu_r, ph.mu_r_sigma))

    friction = {"mu_s": ph.mu_s, "mu_s_sigma": ph.mu_s_sigma, "mu_r": ph.mu_r, "mu_r_sigma": ph.mu_r_sigma,
                "mu_r_definition": "rolling deceleration / g"}
    with _stage("outputs"), ResultFolder(out_dir, replace=replace) as tmp:
        shot = write_outputs(tmp, clip=clip, sha=sha, tr=tr, ph=ph, table=table, mass=mass, ident=ident,
                             friction=friction, settings=settings, timings=timings, warnings=warnings,
                             progress=progress, t_start=t0)
    log.info("results: %s", out_dir)
    return AnalysisResult(out_dir=out_dir, clip=clip, sha256=sha, n_frames=int(tr.n_frames), fps=float(tr.fps),
                          fps_source=str(tr.fps_source), contacts=contacts, shot=shot, files=shot["files"],
                          reused=False, warnings=warnings)


def _fmt(v, s) -> str:
    from feltlab.outputs.report import pm

    return pm(v, s, None if s is not None else 2)


def write_outputs(folder: Path, *, clip: Path, sha: str, tr, ph, table: TablePreset, mass: float, ident: dict,
                  friction: dict, settings: AnalyzeSettings, timings: dict, warnings: list[str],
                  progress: Progress | None = None, t_start: float | None = None) -> dict:
    """Write every output of one analysed clip into ``folder`` (already the temporary folder); return shot.json's dict.

    The tables and shot.json are the measurement and always written; the
    pictures (video, frames, plots, report) are drawn afterwards and a failure
    in one of them is recorded as a warning in shot.json rather than losing
    the measurement.
    """
    from feltlab.outputs import frames as fr_out
    from feltlab.outputs import plots as plot_out
    from feltlab.outputs import report as rep_out
    from feltlab.outputs.shotfile import build_shot, write_shot
    from feltlab.outputs.tables import write_table

    folder = Path(folder)
    cal = tr.calibration
    files: list[Path] = []
    t = time.perf_counter()
    files += write_table(tr.tracks, "tracks", folder)
    files += write_table(ph.segments, "segments", folder)
    files += write_table(ph.contacts, "contacts", folder)
    if getattr(ph, "events", None) is not None:
        files += write_table(ph.events, "events", folder)
    timings["tables_s"] = time.perf_counter() - t
    log.info("tables: tracks, segments, contacts, events (CSV + Parquet)")

    plots: dict[str, Path] = {}
    contact_images: list[tuple[str, Path]] = []
    stem = clip.stem

    def attempt(what: str, fn):
        try:
            return fn()
        except FeltlabError as exc:
            warnings.append(f"{what}: {exc}")
        except Exception as exc:  # noqa: BLE001 - a drawing bug must not lose the measurement
            warnings.append(f"{what} failed: {type(exc).__name__}: {exc}")
        log.warning("%s", warnings[-1])
        return None

    model = None
    if callable(getattr(ph, "state", None)):
        def model(ball, t):
            return ph.state(ball, t)[1]
    if settings.plots:
        t = time.perf_counter()
        p = attempt("speed plot", lambda: plot_out.speed_plot(tr.tracks, ph.segments, ph.contacts,
                                                               folder / "speed.png",
                                                               title=f"Ball speed against time: {stem}",
                                                               model=model))
        if p:
            plots["Speed of each moving ball against time: smoothed track (solid) and fitted motion model "
                  "(dashed); fitted sliding (orange) and rolling (blue) phases shaded; contacts dotted."] = p
        p = attempt("table diagram", lambda: plot_out.table_diagram(tr.tracks, ph.contacts, table, cal.ball_radius_mm,
                                                                     folder / "table.png"))
        if p:
            plots["Top view to scale: every path, contact points and departure angles."] = p
        files += list(plots.values())
        timings["plots_s"] = time.perf_counter() - t
        log.info("plots: %s", ", ".join(p.name for p in plots.values()) or "none")

    if settings.video or settings.frames:
        t = time.perf_counter()
        n = max(int(tr.n_frames), int(tr.tracks["frame"].max()) + 1 if len(tr.tracks) else 0)

        def draw():
            ov = fr_out.build_overlay(tr.tracks, ph.contacts, cal, float(tr.fps), n, velocity=model)
            cb = (lambda d, tot: progress("draw", d, tot)) if progress is not None else None
            res = fr_out.render_annotations(clip, ov, folder, write_video=settings.video,
                                            write_frames=settings.frames,
                                            frame_times=_frame_times(tr.tracks, n, float(tr.fps)), progress=cb,
                                            start_frame=settings.frame_range[0] if settings.frame_range else 0)
            return ov, res

        out = attempt("annotated frames", draw)
        if out is not None:
            ov, res = out
            if res["video"] is not None:
                files.append(res["video"])
            by_contact: dict[int, list] = {}
            for c, tag, k, p in res["frames"]:
                files.append(p)
                by_contact.setdefault(c, []).append((tag, k, p))
            closeups = dict(res.get("closeups", []))
            files += list(closeups.values())
            for con in ov.contacts:
                c = con["contact"]
                if c in closeups:
                    contact_images.append((f"{con['label']} at {con['t_s']:.4f} s: close-up just before, at and "
                                           f"just after the contact; {con['e_text']}", closeups[c]))
                at = [p for tag, k, p in by_contact.get(c, []) if tag == "at"]
                if at:
                    contact_images.append((f"{con['label']}: the whole frame nearest the contact", at[0]))
        timings["draw_s"] = time.perf_counter() - t
        log.info("frames: %s%d contact frames", "annotated.mp4, " if settings.video and out else "",
                 len(out[1]["frames"]) if out else 0)

    rel = sorted(str(p.relative_to(folder)) for p in files)
    rel += ["shot.json"] + (["report.html"] if settings.report else [])
    if t_start is not None:
        timings["total_s"] = time.perf_counter() - t_start

    def shot_dict(files_list):
        s = build_shot(clip_path=clip, sha256=sha, n_frames=tr.n_frames, fps=tr.fps, fps_source=tr.fps_source,
                       table=table, calibration=cal, balls=_balls_table(tr), contacts=ph.contacts,
                       friction=friction, ball_mass_kg=mass, settings=ident, version=__version__,
                       files=files_list, timings_s=timings)
        s["warnings"] = list(warnings)
        return s

    if settings.report:
        def report():
            shot = shot_dict(rel)
            ctx = rep_out.build_context(shot, ph.contacts, plots, contact_images, rel, tracks=tr.tracks)
            return rep_out.write_report(folder / "report.html", ctx)

        if attempt("report", report) is None:
            rel.remove("report.html")
        else:
            log.info("report: report.html")
    shot = shot_dict(rel)
    write_shot(shot, folder / "shot.json")
    return shot
