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

from feltlab.standards import TablePreset, table_preset
from tracking.calibrate import calibrate_auto, nose_height_mm
from tracking.calibration import Calibration
from tracking.pockets import has_side_pockets, side_pocket_contrast

log = logging.getLogger("feltlab.tracking")

#: Frames whose side-pocket contrast is measured (their median is used).
POCKET_FRAMES = 5


def calibrate_choosing_table(frames: list[np.ndarray], table: TablePreset) -> tuple[Calibration, list[str]]:
    """calibrate_auto with ``table``; if it has pockets but the picture shows none, again as carom.

    frames: BGR images of one clip (the calibration sample). Returns the
    calibration and warnings for the user (empty when ``table`` was kept).
    """
    cal = calibrate_auto(frames, table)
    if not cal.table.pockets:
        return cal, []
    z = nose_height_mm(cal.table, cal.ball_diameter_mm)
    contrast = np.nanmedian([side_pocket_contrast(im, cal.camera, cal.table, z) for im in frames[:POCKET_FRAMES]],
                            axis=0)
    if has_side_pockets(list(contrast)) is not False:
        return cal, []
    log.info("no side pockets (mid-cushion brightness %.2f, %.2f of the cushion's): carom", *contrast)
    return calibrate_auto(frames, table_preset("carom")), [
        "table taken as carom: the long cushions have no side pockets; pass --table to set it"]
