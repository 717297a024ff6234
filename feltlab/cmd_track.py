"""``feltlab track CLIP``: ball tracks in table millimetres -> tracks.csv + tracks.parquet.

A thin layer over :func:`tracking.pipeline.track_clip`. Also writes
detections.csv (the raw measurements per ball, with sigmas) and balls.csv
(names and colours). Files are written under temporary names and renamed
when complete; existing results are kept unless ``--replace``.
"""
from __future__ import annotations

import sys
from pathlib import Path

import click

from feltlab.cli_options import hfov_option
from feltlab.errors import FeltlabError
from feltlab.standards import DEFAULT_TABLE

OUTPUTS = ("tracks.csv", "tracks.parquet", "detections.csv", "balls.csv")


def parse_frames(text: str | None) -> tuple[int, int | None] | None:
    """'A:B' -> (A, B); 'A:' -> (A, None); None -> None.

    >>> parse_frames("10:250"), parse_frames("5:")
    ((10, 250), (5, None))
    """
    if text is None:
        return None
    a, sep, b = text.partition(":")
    try:
        start = int(a) if a.strip() else 0
        stop = int(b) if b.strip() else None
    except ValueError:
        raise FeltlabError(f"--frames must look like START:STOP (e.g. 0:240), got {text!r}") from None
    if not sep:
        raise FeltlabError(f"--frames must look like START:STOP (e.g. 0:240), got {text!r}")
    return start, stop


@click.command(name="track")
@click.argument("clip", type=click.Path(path_type=Path, dir_okay=True))
@click.option("--table", default=None, metavar="PRESET",
              help=f"Table preset: pool-9ft, pool-8ft, pool-7ft, snooker, carom (default {DEFAULT_TABLE}, "
                   "the --calib file's, or the preset the picture points to: carom without side pockets, "
                   "else the pool size / snooker by the balls' size).")
@click.option("--calib", type=click.Path(path_type=Path), default=None, metavar="FILE",
              help="Calibration TOML (from feltlab calibrate, or manual corners); default: fit automatically.")
@click.option("--fps", type=float, default=None, metavar="N",
              help="Capture frame rate, frames/s (high-speed cameras store a playback rate).")
@hfov_option()
@click.option("--frames", "frames", default=None, metavar="A:B", help="Only frames A (inclusive) to B (exclusive).")
@click.option("--out", type=click.Path(path_type=Path), default=None, metavar="DIR",
              help="Output folder (default results/<clip stem>/).")
@click.option("--replace", is_flag=True, help="Replace existing track files in the output folder.")
def command(clip: Path, table: str | None, calib: Path | None, fps: float | None, hfov: float | None,
            frames: str | None, out: Path | None, replace: bool) -> None:
    """Track every ball; write tracks.csv / tracks.parquet (mm, s, mm/s, table frame)."""
    from tracking.pipeline import track_clip


    dest = Path(out) if out is not None else Path("results") / clip.stem
    if not replace:
        for name in OUTPUTS:
            if (dest / name).exists():
                raise FeltlabError(f"{dest / name} already exists; pass --replace or choose another --out")
    rng = parse_frames(frames)
    if calib is None:
        from feltlab.pipeline import calibration_beside

        calib = calibration_beside(clip)
        if calib is not None:
            click.echo(f"calibration: using {calib}, kept beside the clip (pass --calib to use another file)",
                       err=True)
    state = {"last": -1}

    def progress(done: int, total: int) -> None:
        pct = int(100 * done / total) if total else -1
        if sys.stderr.isatty() and pct != state["last"] and pct % 10 == 0:
            click.echo(f"track: {pct}%", err=True)
            state["last"] = pct

    res = track_clip(clip, table=table, calibration=calib, fps=fps, frame_range=rng, progress=progress,
                     auto_table=table is None and calib is None, hfov_deg=hfov)
    dest.mkdir(parents=True, exist_ok=True)
    tmp = {name: dest / f".{name}.partial" for name in OUTPUTS}
    try:
        res.tracks.to_csv(tmp["tracks.csv"], index=False, float_format="%.4f")
        res.tracks.to_parquet(tmp["tracks.parquet"], index=False)
        res.detections.to_csv(tmp["detections.csv"], index=False, float_format="%.4f")
        res.balls.to_csv(tmp["balls.csv"], index=False, float_format="%.3f")
    except BaseException:
        for p in tmp.values():
            p.unlink(missing_ok=True)
        raise
    for name, p in tmp.items():
        p.replace(dest / name)
    balls = ", ".join(res.balls["ball"].astype(str)) if len(res.balls) else "none"
    click.echo(f"tracked {res.n_frames} frames at {res.fps:g} fps ({res.fps_source}); balls: {balls}")
    for w in res.warnings:
        click.echo(f"note: {w}")
    click.echo(f"wrote {dest / 'tracks.csv'} and {dest / 'tracks.parquet'}")
