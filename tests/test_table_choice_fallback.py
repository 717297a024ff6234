"""Automatic calibration falls back to another preset when the default one cannot be fitted.

A snooker table read with the 9-ft pool preset can be refused by the fit's
plausibility checks (seen on one of our sweep renders: "camera 58 m above the
cloth"), although the same picture fits as snooker. The reference here is the
rendering camera itself: the playing-surface corners projected through it
(feltlab.render.camera_for, the camera the frame was drawn with) against those
projected through the fallback calibration. Frames are drawn from a scenario of
our own (a training drill).
"""
from __future__ import annotations

import numpy as np
import pytest

import tracking.table_choice as tc
from feltlab.errors import FeltlabError
from feltlab.render import camera_for, render_to_arrays, scenario_from_dict
from feltlab.standards import table_preset


def _snooker_frames():
    d = {"clip": {"table": "snooker", "fps": 30, "duration_s": 0.1, "resolution": [960, 540], "seed": 71},
         "camera": {"height_mm": 3600, "fov_deg": 62, "pitch_deg": 1.0, "roll_deg": 0.5, "k1": -0.02},
         "ball": [{"label": "cue", "position_mm": [900.0, 600.0]}, {"label": "red", "position_mm": [2400.0, 1100.0]}]}
    sc = scenario_from_dict(d)
    return sc, render_to_arrays(sc, times_s=[0.0, 0.05])


def test_refused_default_preset_falls_back_to_one_that_fits(monkeypatch):
    sc, frames = _snooker_frames()
    real = tc.calibrate_auto

    def refuse_pool(frames_, table, *a, **k):
        if table.name.startswith("pool"):
            raise FeltlabError("the table edges fit only a camera 58 m above the cloth")
        return real(frames_, table, *a, **k)

    monkeypatch.setattr(tc, "calibrate_auto", refuse_pool)
    cal, notes = tc.calibrate_choosing_table(list(frames), table_preset("pool-9ft"))
    assert cal.table.name == "snooker"
    assert any("snooker" in n and "--table" in n for n in notes)
    L, W = cal.table.length_mm, cal.table.width_mm
    corners = np.array([[0, 0, 0], [L, 0, 0], [L, W, 0], [0, W, 0]], float)
    got = cal.camera.project(corners)
    want = camera_for(sc).project(corners)
    # the table's 180-degree symmetry is not fixed by the picture: take the better reading
    err = min(np.abs(got - want).max(), np.abs(got - want[[2, 3, 0, 1]]).max())
    assert err < 1.0, err  # issue 3's corner target: 1 px


def test_no_preset_fits_raises_the_first_error(monkeypatch):
    _, frames = _snooker_frames()

    def refuse_all(frames_, table, *a, **k):
        raise FeltlabError(f"refused as {table.name}")

    monkeypatch.setattr(tc, "calibrate_auto", refuse_all)
    with pytest.raises(FeltlabError, match="refused as pool-9ft"):
        tc.calibrate_choosing_table(list(frames), table_preset("pool-9ft"))


def test_fallback_skips_a_preset_reached_only_by_bending_the_lens(monkeypatch):
    """A stand-in preset whose fit needs |k1| beyond the largest video-lens distortion (k1_warn, 0.4 in
    OpenCV's normalised model; from memory) is a wrong fit, not a different table: it is passed over
    for the next preset that fits with a plausible lens, and the first error stands when none does.
    (Seen on a noisy 30 fps sweep render: pool-9ft refused, pool-7ft 'fitted' with k1 = -1.07, every
    ball 200-380 mm off.) Reference: the rendering camera's projected corners, as above."""
    import dataclasses

    sc, frames = _snooker_frames()
    real = tc.calibrate_auto

    def bent(frames_, table, *a, **k):
        if table.name == "pool-9ft":
            raise FeltlabError("the table edges fit only a camera 58 m above the cloth")
        cal = real(frames_, table_preset("snooker"), *a, **k)
        if table.name != "snooker":
            dist = np.array(cal.camera.dist, float)
            dist[0] = -1.07
            cal = dataclasses.replace(cal, camera=dataclasses.replace(cal.camera, dist=dist), table=table)
        return cal

    monkeypatch.setattr(tc, "calibrate_auto", bent)
    cal, notes = tc.calibrate_choosing_table(list(frames), table_preset("pool-9ft"))
    assert cal.table.name == "snooker"
    assert abs(cal.camera.dist[0]) < 0.4

    def all_bent(frames_, table, *a, **k):
        if table.name == "pool-9ft":
            raise FeltlabError("refused as pool-9ft")
        cal = real(frames_, table_preset("snooker"), *a, **k)
        dist = np.array(cal.camera.dist, float)
        dist[0] = 0.9
        return dataclasses.replace(cal, camera=dataclasses.replace(cal.camera, dist=dist))

    monkeypatch.setattr(tc, "calibrate_auto", all_bent)
    with pytest.raises(FeltlabError, match="refused as pool-9ft"):
        tc.calibrate_choosing_table(list(frames), table_preset("pool-9ft"))
