"""``feltlab batch FOLDER``: analyse every clip below a folder, resumably, with series statistics.

Results go to ``OUT/<clip path relative to FOLDER, without extension>/``. Exit codes:
0 every clip analysed (and the spec passed, when given); 1 one or more clips failed
(listed in OUT/failures.csv); 2 bad input (one-line error); 3 every clip analysed
but the acceptance spec failed.
"""
from __future__ import annotations

import dataclasses
import os
import sys
from pathlib import Path

import click

from feltlab.cli_options import hfov_option
from feltlab.errors import FeltlabError

EXIT_CLIP_FAILED = 1
EXIT_SPEC_FAILED = 3


def analyze_settings(table: str | None, calib: Path | None = None, fps: float | None = None,
                     hfov: float | None = None):
    """The single-clip analyser's settings, with ``table`` (preset name or alias), ``calib``
    (manual calibration file used for every clip), ``fps`` (capture rate of every clip) and ``hfov``
    (the lens's horizontal field of view, deg) set when given."""
    import math

    from feltlab.standards import table_preset

    try:
        from feltlab.pipeline import AnalyzeSettings
    except ImportError as exc:
        raise FeltlabError(f"the single-clip analyser is not available ({exc}); reinstall feltlab",
                           stage="batch") from None
    names = {f.name for f in dataclasses.fields(AnalyzeSettings)}
    kw: dict = {}
    if table is not None:
        try:
            kw["table"] = table_preset(table).name
        except ValueError as exc:
            raise FeltlabError(str(exc), stage="input") from None
    if calib is not None:
        if not Path(calib).is_file():
            raise FeltlabError(f"calibration file {calib} does not exist; check the path (or omit --calib)",
                               stage="input")
        kw["calib"] = str(Path(calib).resolve())
    if fps is not None:
        if not (math.isfinite(fps) and 0 < fps <= 100000):
            raise FeltlabError(f"--fps {fps} is not a frame rate; give the camera's capture rate, e.g. --fps 240",
                               stage="input")
        kw["fps"] = float(fps)
    if hfov is not None:
        kw["hfov_deg"] = float(hfov)  # checked by the option (feltlab/cli_options.py)
    missing = set(kw) - names
    if missing:
        raise FeltlabError(f"this version of the analyser has no {', '.join(sorted(missing))} setting; "
                           "drop that option", stage="batch")
    return AnalyzeSettings(**kw)


@click.command(name="batch")
@click.argument("folder", type=click.Path(path_type=Path))
@click.option("--out", "out_dir", type=click.Path(path_type=Path), default=Path("results"), show_default=True,
              help="Output folder; each clip's results go to OUT/<relative path without extension>/.")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Local worker processes (default: the number of CPU cores).")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Run on an existing dask.distributed cluster at tcp://HOST:PORT (needs feltlab[cluster]); "
                   "its workers must see FOLDER and OUT at the same paths.")
@click.option("--table", default=None, metavar="PRESET", help="Table preset for every clip, e.g. pool-9ft, snooker, carom.")
@click.option("--calib", type=click.Path(path_type=Path), default=None, metavar="FILE",
              help="Manual calibration (TOML) for every clip, e.g. a bench camera filming part of a table "
                   "(default: NAME.calibration.toml beside a clip NAME.mp4, else automatic).")
@click.option("--fps", type=float, default=None, metavar="N",
              help="Capture frame rate of every clip, frames/s (high-speed cameras store a playback rate; "
                   "needed for folders of frames).")
@hfov_option(" for every clip")
@click.option("--spec", "spec_path", type=click.Path(path_type=Path), default=None, metavar="SPEC.toml",
              help="Acceptance bands to judge the series against (see clips/example_spec.toml).")
@click.option("--quiet", is_flag=True, help="No progress bar, only the summary lines.")
def command(folder: Path, out_dir: Path, workers: int | None, scheduler: str | None, table: str | None,
            calib: Path | None, fps: float | None, hfov: float | None, spec_path: Path | None,
            quiet: bool) -> None:
    """Analyse every video clip (or folder of frames) below FOLDER; skip clips already finished with the same settings.

    Writes failures.csv, all_contacts.csv/.parquet, series.csv, series.html and
    series_plots/ into OUT. Clips that cannot be analysed are listed with a reason and
    the batch goes on. Exit codes: 0 all analysed (and the spec passed), 1 some clips failed,
    2 bad input, 3 the spec failed. Safety: ball launchers can hurt people; local safety
    rules first.
    """
    from feltlab.batch.runner import run_batch
    from feltlab.batch.spec import load_spec

    spec = load_spec(spec_path) if spec_path is not None else None
    settings = analyze_settings(table, calib, fps, hfov)
    show = not quiet and sys.stderr.isatty()
    try:
        report = run_batch(folder, out_dir, settings, workers=workers or os.cpu_count(), scheduler=scheduler,
                           progress=show, log=lambda m: click.echo(f"feltlab: warning: {m}", err=True), spec=spec)
    except KeyboardInterrupt:
        click.echo("feltlab: interrupted; finished clips are kept, run the same command again to resume",
                   err=True)
        sys.exit(130)
    n = len(report.outcomes)
    click.echo(f"{n} clips: {report.count('analysed')} analysed, {report.count('skipped')} already finished, "
               f"{report.count('copied')} copied from identical clips, {report.count('failed')} failed")
    for o in report.failed:
        click.echo(f"  failed: {o.clip_rel} [{o.stage}] {o.reason}", err=True)
    if report.failed:
        click.echo(f"failures listed in {report.failures_csv}")
    if report.series is not None:
        click.echo(f"series summary: {report.series.html} (rewritten for this run)")
        sres = report.series.result.spec
        if sres is not None:
            for b in sres.bands:
                click.echo(f"  {b.verdict:7s} {b.band.name}: n={b.n}, {b.why}")
            click.echo(f"acceptance: {sres.verdict}")
    if report.failed:
        sys.exit(EXIT_CLIP_FAILED)
    if report.series is not None and report.series.result.spec is not None and not report.series.result.spec.passed:
        sys.exit(EXIT_SPEC_FAILED)
