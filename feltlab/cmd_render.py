"""``feltlab render SCENARIO.toml --out CLIP.mp4 [--seed N]``: synthetic footage with exact truth."""
from __future__ import annotations

from pathlib import Path

import click

from feltlab.errors import FeltlabError


@click.command(name="render")
@click.argument("scenario", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path),
              help="Clip to write: .mp4 (mp4v), .avi (lossless FFV1) or a suffix-less folder of PNG frames; "
                   "CLIP.truth.json is written beside it.")
@click.option("--seed", type=int, default=None, help="Override the scenario's seed (sensor noise, cloth texture, ball orientations).")
@click.option("--force", is_flag=True, help="Replace an existing clip and truth file.")
@click.option("--quiet", is_flag=True, help="No progress output.")
def command(scenario: Path, out: Path, seed: int | None, force: bool, quiet: bool) -> None:
    """Render SCENARIO (a TOML shot description, e.g. clips/drill_cut.toml) to a clip plus its truth file."""
    from feltlab.render import load_scenario, render_scenario

    sc = load_scenario(scenario)
    if seed is not None:
        if seed < 0:
            raise FeltlabError(f"--seed must be a non-negative integer, got {seed}")
        sc.seed = seed

    def progress(k: int, n: int) -> None:
        if not quiet and (k == n or k % max(1, n // 10) == 0):
            click.echo(f"  frame {k}/{n}", err=True)

    info = render_scenario(sc, out, overwrite=force, progress=progress)
    if not quiet:
        click.echo(f"wrote {info['clip']} and {info['truth']} ({info['frames']} frames, "
                   f"{info['fps_rendered']:.1f} frames/s rendered)")
