"""Command line: a thin layer over the Python API.

Each subcommand lives in its own module (``feltlab/cmd_*.py``) and is registered
here. A :class:`feltlab.errors.FeltlabError` becomes one line on stderr and exit
code 2; anything else is a bug and shows its traceback.
"""
from __future__ import annotations

import sys

import click

from feltlab import __version__
from feltlab.errors import FeltlabError


class _Group(click.Group):
    def invoke(self, ctx: click.Context):  # noqa: D401 - click hook
        try:
            return super().invoke(ctx)
        except FeltlabError as exc:
            click.echo(f"feltlab: error: {exc}", err=True)
            sys.exit(2)


@click.group(cls=_Group)
@click.version_option(__version__, prog_name="feltlab")
def main() -> None:
    """Measure collision physics (tracks, contacts, restitution, impulse, energy) from shot video."""


def _register() -> None:
    import importlib

    for name in ("render", "calibrate", "track", "analyze", "batch"):
        try:
            mod = importlib.import_module(f"feltlab.cmd_{name}")
        except ModuleNotFoundError as exc:  # a stage still being built
            if exc.name != f"feltlab.cmd_{name}":
                raise
            continue
        main.add_command(mod.command, name=name)


_register()

if __name__ == "__main__":
    main()
