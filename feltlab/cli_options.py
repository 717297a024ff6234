"""Command-line options shared by several commands."""
from __future__ import annotations

from typing import Callable

import click

from feltlab.errors import FeltlabError


def _checked_hfov(ctx: click.Context, param: click.Parameter, value: float | None) -> float | None:
    """The --hfov value in degrees, checked (tracking.calibrate.check_hfov_deg); a one-line error otherwise."""
    if value is None:
        return None
    from tracking.calibrate import check_hfov_deg

    try:
        return check_hfov_deg(value)
    except FeltlabError as exc:
        raise FeltlabError(f"--hfov: {exc}") from None


def hfov_option(scope: str = "") -> Callable:
    """``--hfov DEG``: the lens's horizontal field of view (deg), checked when parsed.

    scope: words inserted after "degrees (data sheet)", e.g. " for every clip".
    """
    return click.option(
        "--hfov", "hfov", type=float, default=None, metavar="DEG", callback=_checked_hfov,
        help=f"The lens's horizontal field of view in degrees (data sheet){scope}, for views where the picture "
             "does not fix the camera height (no cushion faces in view); otherwise an assumed one is used.")
