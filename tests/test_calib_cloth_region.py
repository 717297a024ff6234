"""The cloth region stops at the cushions under dim and uneven light (tracking/_table_edges.cloth_mask).

The region is grown from the image centre up to steep colour gradients. Light
falls on cloth and cushion alike, so the gradient is measured relative to the
local brightness: a fixed DN/px cut-off let the region leak over the weak
cushion edges of a dim table (2-3 DN/px on a 46 DN cloth). Reference: the
rendering camera (feltlab.render.camera_for), whose playing-surface corners the
region's rough outline must lie near. Frames are drawn from scenarios of our own
(a training drill) with the sweep lighting options of feltlab.render.variety.
"""
from __future__ import annotations

import numpy as np
import pytest

from feltlab.render import camera_for, render_to_arrays, scenario_from_dict
from feltlab.render.variety import apply_overrides
from tracking._table_edges import cloth_mask, rough_quad
from tracking.settings import CalibrationSettings


@pytest.mark.parametrize("table,cloth,light,uneven,seed", [
    ("carom", "grey", 0.35, False, 5),  # dim grey cloth, no pockets to break the cushion line
    ("pool-9ft", "grey", 0.3, False, 6),
    ("pool-9ft", None, None, True, 7),  # one low lamp at one end, little ambient
    ("carom", "blue", None, True, 8),
    ("pool-9ft", None, None, False, 9),  # control: ordinary light
])
def test_cloth_region_stops_at_the_cushions(table, cloth, light, uneven, seed):
    d = {"clip": {"table": table, "fps": 30, "duration_s": 0.1, "resolution": [960, 540], "seed": seed},
         "camera": {"height_mm": 2900, "fov_deg": 62, "pitch_deg": 1.0, "roll_deg": 0.5, "k1": -0.02},
         "ball": [{"label": "cue", "position_mm": [600.0, 400.0]}, {"label": "red", "position_mm": [1900.0, 380.0]}]}
    sc = scenario_from_dict(d)
    apply_overrides(sc, cloth=cloth, light=light, uneven=uneven)
    frame = render_to_arrays(sc, times_s=[0.0])[0].astype(np.float32)
    mask = cloth_mask(frame, CalibrationSettings())
    quad = rough_quad(mask)
    assert quad is not None
    L, W = sc.preset.length_mm, sc.preset.width_mm
    corners = camera_for(sc).project(np.array([[0, 0, 0], [L, 0, 0], [L, W, 0], [0, W, 0]], float))
    dist = np.sqrt(((quad[:, None, :] - corners[None]) ** 2).sum(-1)).min(axis=1)
    table_px = np.linalg.norm(corners[1] - corners[0])
    # a rough outline for the edge search: within 8 % of the table's length of
    # each true corner (pocket mouths and cushion faces move it ~2 %); a region
    # leaking over the cushions covers the whole frame, > 12 % off
    assert dist.max() < 0.08 * table_px, (dist, mask.mean())
    assert 0.3 < mask.mean() < 0.8
