"""``feltlab analyze CLIP``: the whole job for one clip (a thin layer over :func:`feltlab.pipeline.analyze_clip`).

Writes ``OUT/<clip stem>/`` (default ``results/<clip stem>/``): tables (CSV +
Parquet), shot.json, plots, annotated frames and video, report.html. Exit 0
only on success; bad input gives one line on stderr and exit 2.
"""
from __future__ import annotations

import logging
import sys
from pathlib import Path

import click

from feltlab.cli_options import hfov_option
from feltlab.errors import FeltlabError


def _frame_range(text: str | None) -> tuple[int, int] | None:
    if not text:
        return None
    try:
        a, b = text.split(":")
        return int(a), int(b)
    except ValueError:
        raise FeltlabError(f"--frames {text!r} is not FIRST:LAST (frame indices, e.g. 0:600)") from None


def _setup_logging(quiet: bool, console) -> tuple:
    """Send feltlab's log lines to stderr; returns the previous state for :func:`_restore_logging`."""
    log = logging.getLogger("feltlab")
    saved = (list(log.handlers), log.level, log.propagate)
    for h in list(log.handlers):
        log.removeHandler(h)
    if console is not None:
        from rich.logging import RichHandler

        h: logging.Handler = RichHandler(console=console, show_time=False, show_path=False, show_level=False,
                                         markup=False)
        h.setFormatter(logging.Formatter("%(message)s"))
    else:
        h = logging.StreamHandler(sys.stderr)
        h.setFormatter(logging.Formatter("feltlab: %(message)s"))
    log.addHandler(h)
    log.setLevel(logging.ERROR if quiet else logging.INFO)
    log.propagate = False
    return saved


def _restore_logging(saved: tuple) -> None:
    log = logging.getLogger("feltlab")
    for h in list(log.handlers):
        log.removeHandler(h)
    handlers, level, propagate = saved
    for h in handlers:
        log.addHandler(h)
    log.setLevel(level)
    log.propagate = propagate


@click.command(name="analyze")
@click.argument("clip", type=click.Path(path_type=Path, dir_okay=True))
@click.option("--table", default=None, metavar="PRESET",
              help="Table preset: pool-9ft, pool-8ft, pool-7ft, snooker, carom "
                   "(default: the calibration file's, else pool-9ft, or the preset the picture points "
                   "to: carom without side pockets, else the pool size / snooker by the balls' size).")
@click.option("--calib", type=click.Path(path_type=Path), default=None, metavar="FILE",
              help="Manual calibration TOML (default: NAME.calibration.toml beside the clip NAME.mp4 if there is "
                   "one, else calibrate automatically from the table's cushions).")
@click.option("--fps", type=float, default=None, metavar="N",
              help="Capture frame rate, frames/s (overrides the file's; high-speed cameras often store a playback rate).")
@hfov_option()
@click.option("--ball-mass", "ball_mass", type=float, default=None, metavar="KG",
              help="Ball mass in kg (default: the preset's, e.g. 0.163 for pool).")
@click.option("--frames", "frames", default=None, metavar="FIRST:LAST", help="Analyse only these frame indices.")
@click.option("--out", type=click.Path(path_type=Path), default=Path("results"), show_default=True, metavar="DIR",
              help="Results go to DIR/<clip stem>/.")
@click.option("--replace", is_flag=True, help="Replace a finished result made from another clip or other settings.")
@click.option("--no-video", is_flag=True, help="Skip annotated.mp4 (the contact frames are still drawn).")
@click.option("--quiet", "-q", is_flag=True, help="No progress bar or log lines; errors only.")
def command(clip: Path, table: str | None, calib: Path | None, fps: float | None, hfov: float | None,
            ball_mass: float | None, frames: str | None, out: Path, replace: bool, no_video: bool,
            quiet: bool) -> None:
    """Measure one shot: tracks, contacts, restitution, impulse and energy loss, with plots and a report."""
    from feltlab.pipeline import AnalyzeSettings

    settings = AnalyzeSettings(table=table, calib=str(calib) if calib else None, fps=fps, ball_mass_kg=ball_mass,
                               frame_range=_frame_range(frames), video=not no_video, hfov_deg=hfov)
    dest = Path(out) / Path(clip).stem
    tty = sys.stderr.isatty() and not quiet
    console = None
    if tty:
        from rich.console import Console

        console = Console(stderr=True)
    saved = _setup_logging(quiet, console)
    try:
        result = _run(clip, dest, settings, replace, tty, console)
    finally:
        _restore_logging(saved)
    if not quiet:  # (warnings were logged as they arose)
        click.echo(str(result.out_dir / "report.html") if (result.out_dir / "report.html").exists()
                   else str(result.out_dir))


def _run(clip: Path, dest: Path, settings, replace: bool, tty: bool, console):
    from feltlab.pipeline import analyze_clip

    if not tty:
        return analyze_clip(clip, dest, settings, progress=None, replace=replace)
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    labels = {"track": "reading and tracking frames", "draw": "drawing annotated frames"}
    with Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(),
                  console=console, transient=True) as bar:
        tasks: dict[str, int] = {}

        def progress(stage: str, done: int, total: int) -> None:
            if stage not in tasks:
                for old in tasks.values():  # one bar at a time: the stage now running
                    bar.remove_task(old)
                tasks.clear()
                tasks[stage] = bar.add_task(labels.get(stage, stage), total=total or None)
            bar.update(tasks[stage], completed=done, total=total or None)

        return analyze_clip(clip, dest, settings, progress=progress, replace=replace)
