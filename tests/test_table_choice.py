"""Which table is it? Side pockets and ball size (tracking/pockets.py, tracking/ball_size.py).

A carom match table has no pockets (UMB rules art. 2.1, secondary copy); pool
tables have a pocket in the middle of each long side (WPA Tournament Table &
Equipment Specifications, 2001, secondary copy). Both are 2:1, so the cushion
fit cannot tell them apart and a carom clip read as 9-ft pool comes out scaled
by 2540/2840 (11 %). Frames are drawn by feltlab's renderer from a scenario of
our own (a training drill), so these are behaviour checks of the decision on
pictures whose table is known, not accuracy figures.
"""
from __future__ import annotations

import numpy as np
import pytest

from feltlab.render import camera_for, render_scenario, render_to_arrays, scenario_from_dict
from tracking.calibrate import nose_height_mm
from tracking.pockets import has_side_pockets, side_pocket_contrast

POS = {"cue": [600.0, 400.0], "yellow": [1300.0, 800.0], "red": [1900.0, 380.0]}


def _scenario(table: str, seed: int, cloth=None, duration_s: float = 0.1):
    d = {"clip": {"table": table, "fps": 30, "duration_s": duration_s, "resolution": [960, 540], "seed": seed},
         "camera": {"height_mm": 2700 if table != "snooker" else 3600, "fov_deg": 62, "pitch_deg": 1.0,
                    "roll_deg": 0.5, "k1": -0.02},
         "ball": [{"label": k, "position_mm": v} for k, v in POS.items()]}
    if cloth is not None:
        d["lighting"] = {"cloth_rgb": cloth}
    return scenario_from_dict(d)


@pytest.mark.parametrize("table,cloth,pockets", [
    ("pool-9ft", None, True), ("pool-8ft", [40, 70, 150], True), ("snooker", None, True),
    ("carom", None, False), ("carom", [40, 70, 150], False),
])
def test_side_pockets_seen_or_not(table, cloth, pockets):
    sc = _scenario(table, seed=61, cloth=cloth)
    frame = render_to_arrays(sc, times_s=[0.0])[0]
    cam, t = camera_for(sc), sc.preset
    c = side_pocket_contrast(frame, cam, t, nose_height_mm(t, 2 * t.ball.radius_mm))
    got = has_side_pockets(c)
    if table == "snooker" and not np.all(np.isfinite(c)):
        got = bool(np.nanmax(c) < 0.6)  # one long side may be cut off by the 16:9 frame
    assert got is pockets, c


def test_carom_clip_is_recognised_without_a_preset(tmp_path):
    """End to end: a carom clip tracked with no preset named comes out in the carom table's mm."""
    from tracking.pipeline import track_clip

    clip = tmp_path / "carom.mp4"
    render_scenario(_scenario("carom", seed=62, duration_s=0.3), clip)
    res = track_clip(clip, table=None, auto_table=True)
    assert res.calibration.table.name == "carom"
    assert any("carom" in w and "--table" in w for w in res.warnings)
    got = res.tracks.groupby("ball")[["x_mm", "y_mm"]].median().to_numpy()
    truth = np.array(list(POS.values()))
    L, W = res.calibration.table.length_mm, res.calibration.table.width_mm
    # the table's 180-degree symmetry is not fixed by the picture: take the better of the two
    best = min(np.hypot(got[:, None, 0] - t_[None, :, 0], got[:, None, 1] - t_[None, :, 1]).min(axis=0).max()
               for t_ in (truth, np.column_stack([L - truth[:, 0], W - truth[:, 1]])))
    assert len(got) == 3 and best < 3.0  # read as 9-ft pool: 60-200 mm off


def test_pocketless_table_with_a_pool_ball_set_stays_pool(tmp_path):
    """No side pockets but six balls (a carom set has three or four; common practice): the missing
    pockets are not believed (some renderers and practice tables draw none) and the default pool
    preset is kept, with a warning that says why."""
    from tracking.pipeline import track_clip

    sc = scenario_from_dict({
        "clip": {"table": "carom", "fps": 30, "duration_s": 0.3, "resolution": [960, 540], "seed": 63},
        "camera": {"height_mm": 2700, "fov_deg": 62, "pitch_deg": 1.0, "k1": -0.02},
        "ball": [{"label": k, "position_mm": v} for k, v in
                 {"cue": [500.0, 400.0], "yellow": [1000.0, 900.0], "red": [1500.0, 300.0], "blue": [2000.0, 700.0],
                  "green": [800.0, 1100.0], "black": [2400.0, 1200.0]}.items()],
    })
    clip = tmp_path / "pocketless.mp4"
    render_scenario(sc, clip)
    res = track_clip(clip, table=None, auto_table=True)
    assert res.tracks.ball.nunique() >= 5
    assert res.calibration.table.name == "pool-9ft"
    assert any("not a carom set" in w for w in res.warnings)
