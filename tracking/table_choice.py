"""Automatic calibration that also decides, from the picture, whether the table is a carom table.

Pool, snooker and carom tables are all 2:1, so the cushion fit cannot tell
them apart; a carom table has no pockets (UMB), the others have one in the
middle of each long side (tracking/pockets.py). Which pocketed preset (pool
9/8/7 ft or snooker) is decided later, from the balls' size
(tracking/ball_size.py, in tracking.pipeline.track_clip).
"""
from __future__ import annotations

import logging

import numpy as np

from feltlab.errors import FeltlabError
from feltlab.standards import TABLES, TablePreset, table_preset
from tracking.calibrate import calibrate_auto, nose_height_mm
from tracking.calibration import Calibration
from tracking.pockets import has_side_pockets, side_pocket_contrast
from tracking.settings import CalibrationSettings

log = logging.getLogger("feltlab.tracking")

#: Frames whose side-pocket contrast is measured (their median is used).
POCKET_FRAMES = 5


def same_family(a: TablePreset, b: TablePreset) -> bool:
    """True when two presets differ only in size: same pocket layout, cushion-nose height and ball."""
    return (bool(a.pockets) == bool(b.pockets) and a.cushion_nose_height_mm == b.cushion_nose_height_mm
            and a.ball.diameter_mm == b.ball.diameter_mm)


def _scaled_height_absurd(refusal: FeltlabError, table: TablePreset, other: TablePreset,
                          settings: CalibrationSettings = CalibrationSettings()) -> bool:
    """Whether ``other`` (same family as ``table``) must also fit a camera too high to be real.

    The same picture fitted with a table scaled by s = L_other / L_table puts
    the camera s times as high at the same focal (similar figures), so a
    refusal at height H (mm, ``refusal.height_mm``) carries over as s H; it is
    absurd above ``max_camera_height_mm * scale_skip_factor``
    (CalibrationSettings).
    """
    h = getattr(refusal, "height_mm", None)
    if h is None or not same_family(table, other):
        return False
    s = other.length_mm / table.length_mm
    return h * s > settings.max_camera_height_mm * settings.scale_skip_factor


def calibrate_choosing_table(frames: list[np.ndarray], table: TablePreset,
                             hfov_deg: float | None = None) -> tuple[Calibration, list[str]]:
    """calibrate_auto with ``table``; if it has pockets but the picture shows none, again as carom.

    frames: BGR images of one clip (the calibration sample). Returns the
    calibration and warnings for the user (empty when ``table`` was kept).
    hfov_deg: the lens's horizontal field of view if given (deg; see
    :func:`tracking.calibrate.calibrate_auto`).
    When ``table`` cannot be fitted at all, every other preset is tried in
    turn (their cushion heights and pocket stretches differ) and the first
    that fits is used, with a warning; the first error is raised when none
    fits. Presets that cannot mend the failure are skipped: none is tried
    when the table was not found in the picture (error kind "region"), and
    those of the same pocket layout are not when lines were missed rather
    than the scale absurd (kind "fit"; see tracking.calibrate._refusal); after
    an absurd camera height (kind "scale") a preset of the same family that
    would scale it to an absurd height too (:func:`_scaled_height_absurd`).
    """
    try:
        cal = calibrate_auto(frames, table, hfov_deg=hfov_deg)
    except FeltlabError as first:
        kind = getattr(first, "kind", None)
        if kind == "region":  # the table was not found in the picture: no preset mends that
            raise
        cal = None
        k1_max = CalibrationSettings().k1_warn
        for name, other in TABLES.items():
            if name == table.name:
                continue
            if kind == "fit" and bool(other.pockets) == bool(table.pockets):
                continue  # same pocket layout, only the size differs: the same lines would be found
            if kind == "scale" and _scaled_height_absurd(first, table, other):
                log.info("calibration as %s skipped: the camera would stand ~%.0f m up", name,
                         getattr(first, "height_mm", 0.0) * other.length_mm / table.length_mm / 1000)
                continue
            try:
                cand = calibrate_auto(frames, other, hfov_deg=hfov_deg)
            except FeltlabError:
                continue
            k1 = float(cand.camera.dist[0])
            if abs(k1) > k1_max:
                # a stand-in preset reached only by bending the lens beyond any video lens is a wrong
                # fit, not a different table (sweep render f09: pool-9ft refused, pool-7ft "fitted"
                # with k1 = -1.07 and put every ball 200-380 mm off)
                log.info("calibration as %s needs k1 = %.2f (> %.2f): not taken", name, k1, k1_max)
                continue
            cal = cand
            log.info("calibration as %s failed (%s); it fits as %s", table.name, first, name)
            break
        if cal is None:
            raise first
        notes = [f"the cushions did not fit as {table.name} but fit as {cal.table.name}; pass --table to set it"]
        return cal, notes
    if not cal.table.pockets:
        return cal, []
    z = nose_height_mm(cal.table, cal.ball_diameter_mm)
    contrast = np.nanmedian([side_pocket_contrast(im, cal.camera, cal.table, z) for im in frames[:POCKET_FRAMES]],
                            axis=0)
    if has_side_pockets(list(contrast)) is not False:
        return cal, []
    log.info("no side pockets (mid-cushion brightness %.2f, %.2f of the cushion's): carom", *contrast)
    return calibrate_auto(frames, table_preset("carom"), hfov_deg=hfov_deg), [
        "table taken as carom: the long cushions have no side pockets; pass --table to set it"]
