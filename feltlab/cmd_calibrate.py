"""``feltlab calibrate CLIP``: fit the camera to the table and write calibration.toml + calibration.png.

A thin layer over :func:`tracking.calibrate.calibrate_auto` (or
:func:`tracking.calibrate.calibration_from_file` with ``--calib``). Output goes
to ``--out DIR`` (default ``results/<clip stem>/``); existing files are kept
unless ``--replace``. Bad input: one line on stderr, exit 2.
"""
from __future__ import annotations

from pathlib import Path

import click
import cv2
import numpy as np

from feltlab.cli_options import hfov_option
from feltlab.errors import FeltlabError
from feltlab.standards import DEFAULT_TABLE, table_preset


@click.command(name="calibrate")
@click.argument("clip", type=click.Path(path_type=Path, dir_okay=True))
@click.option("--table", default=None, metavar="PRESET",
              help=f"Table preset: pool-9ft, pool-8ft, pool-7ft, snooker, carom (default {DEFAULT_TABLE}, or "
                   "carom when the long cushions have no side pockets, or the --calib file's).")
@click.option("--fps", type=float, default=None, metavar="N",
              help="Capture frame rate, frames/s (only checked here; high-speed cameras store a playback rate).")
@click.option("--calib", type=click.Path(path_type=Path), default=None, metavar="FILE",
              help="Fit from a manual calibration TOML (four corners) instead of finding the table.")
@hfov_option()
@click.option("--frames", "n_frames", type=int, default=9, show_default=True, metavar="N",
              help="Frames sampled across the clip (their median hides moving balls).")
@click.option("--out", type=click.Path(path_type=Path), default=None, metavar="DIR",
              help="Output folder (default results/<clip stem>/).")
@click.option("--replace", is_flag=True, help="Replace an existing calibration.toml / calibration.png.")
def command(clip: Path, table: str | None, fps: float | None, calib: Path | None, hfov: float | None,
            n_frames: int, out: Path | None, replace: bool) -> None:
    """Fit the camera to the table's cushion noses; write calibration.toml and a check image."""
    from tracking.calibrate import calibrate_auto, calibration_from_file, draw_calibration, save_calibration
    from tracking.video import open_video

    if n_frames < 1:
        raise FeltlabError(f"--frames must be at least 1, got {n_frames}")
    preset = None
    if table is not None:
        try:
            preset = table_preset(table)
        except ValueError as exc:
            raise FeltlabError(str(exc)) from None
    dest = Path(out) if out is not None else Path("results") / clip.stem
    toml_path, png_path = dest / "calibration.toml", dest / "calibration.png"
    # timing does not enter a calibration: a frame folder (no frame rate) needs no --fps here
    src = open_video(clip, fps_override=fps if fps is not None or not clip.is_dir() else 1.0)
    if not replace:
        for p in (toml_path, png_path):
            if p.exists():
                raise FeltlabError(f"{p} already exists; pass --replace to redo it or choose another --out")
    samples = [img for _, _, img in src.sample(n_frames)]
    if calib is not None:
        cal = calibration_from_file(calib, table=preset, hfov_deg=hfov)
        if tuple(cal.camera.image_size) != (src.width, src.height):
            raise FeltlabError(f"{calib.name} is for {cal.camera.image_size[0]}x{cal.camera.image_size[1]} px "
                               f"images but {clip.name} is {src.width}x{src.height}")
    elif preset is None:
        from tracking.table_choice import calibrate_choosing_table

        cal, notes = calibrate_choosing_table(samples, table_preset(DEFAULT_TABLE), hfov_deg=hfov)
        for note in notes:
            click.echo(f"feltlab: {note}", err=True)
    else:
        cal = calibrate_auto(samples, preset, hfov_deg=hfov)
    frame = np.median(np.stack(samples), axis=0).astype(np.uint8) if len(samples) > 1 else samples[0]
    picture = draw_calibration(frame, cal)
    dest.mkdir(parents=True, exist_ok=True)
    tmp_png = dest / ".calibration.tmp.png"
    if not cv2.imwrite(str(tmp_png), picture):
        raise FeltlabError(f"could not write {png_path}; check the folder is writable")
    try:
        save_calibration(cal, toml_path, overwrite=replace)
    except BaseException:
        tmp_png.unlink(missing_ok=True)
        raise
    tmp_png.replace(png_path)
    click.echo(f"calibration: {cal.method}, residual {cal.residual_px:.2f} px / {cal.residual_mm:.2f} mm, "
               f"{cal.px_per_mm:.3f} px/mm")
    for note in cal.notes + src.warnings:
        click.echo(f"note: {note}")
    click.echo(f"wrote {toml_path} and {png_path}")
