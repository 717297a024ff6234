"""Output writers: tables (units, round trip), shot.json, annotated frames/video, plots, report, atomic results.

The writers are fed a synthetic shot built from closed forms (REFERENCES.md):
a cue ball rolling straight into a resting ball of equal mass, restitution e,
no friction (v_a' = (1 - e) v / 2, v_b' = (1 + e) v / 2), filmed by a camera
from :meth:`tracking.camera.CameraModel.looking_down`. The stages are replaced
by that data where the pipeline's own glue (atomic folders, re-run rules) is
under test; the real stages are exercised in test_analyze_e2e.py.
"""
from __future__ import annotations

import base64
import hashlib
import json
import math
import re
import types
from pathlib import Path

import cv2
import numpy as np
import pandas as pd
import pytest

from feltlab.errors import FeltlabError
from feltlab.outputs import frames as fr_out
from feltlab.outputs import plots as plot_out
from feltlab.outputs import report as rep_out
from feltlab.outputs.shotfile import build_shot, jsonable, write_shot
from feltlab.outputs.tables import CONTACT_COLUMNS, TRACK_COLUMNS, has_unit, tidy, write_table
from feltlab.standards import table_preset
from tracking.calibration import Calibration
from tracking.camera import CameraModel

TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm
FPS = 60.0
N_FRAMES = 45
V0 = 1500.0  # mm/s
E = 0.9
SIZE = (640, 352)  # non-square on purpose (catches x/y swaps)
#: Settings without pictures, for the tests of the result-folder rules (faster).
LIGHT = dict(video=False, frames=False, plots=False, report=False)


def synthetic_calibration() -> Calibration:
    cam = CameraModel.looking_down(table_centre_mm=(TABLE.length_mm / 2, TABLE.width_mm / 2), height_mm=3000,
                                   focal_px=640, image_size=SIZE, roll_deg=0.7, pitch_deg=1.5, k1=-0.03)
    return Calibration(camera=cam, table=TABLE, ball_diameter_mm=2 * R, residual_px=0.21, residual_mm=0.5,
                       method="synthetic")


def synthetic_shot(name_b: str = "red"):
    """Head-on hit, equal masses, restitution E, frictionless: closed form (REFERENCES.md)."""
    xa0, xb0, y = 800.0, 1400.0, 635.0
    t_c = (xb0 - 2 * R - xa0) / V0
    va_out = (1 - E) * V0 / 2
    vb_out = (1 + E) * V0 / 2
    t = np.arange(N_FRAMES) / FPS
    rows = []
    for k, tk in enumerate(t):
        if tk < t_c:
            xa, va, xb, vb = xa0 + V0 * tk, V0, xb0, 0.0
        else:
            xa, va = xa0 + V0 * t_c + va_out * (tk - t_c), va_out
            xb, vb = xb0 + vb_out * (tk - t_c), vb_out
        for ball, x, v in (("cue", xa, va), (name_b, xb, vb)):
            rows.append(dict(frame=k, t_s=tk, ball=ball, x_mm=x, y_mm=y, vx_mm_s=v, vy_mm_s=0.0, sx_mm=0.2,
                             sy_mm=0.2, visible=1))
    tracks = pd.DataFrame(rows)
    m = TABLE.ball.mass_kg
    ke0 = 0.5 * m * (V0 / 1000) ** 2
    ke1 = 0.5 * m * ((va_out / 1000) ** 2 + (vb_out / 1000) ** 2)
    contacts = pd.DataFrame([dict(
        contact=1, t_s=t_c, t_sigma_s=0.0004, kind="ball-ball", ball_a="cue", ball_b=name_b, cushion="",
        nx=1.0, ny=0.0, va_in_x_mm_s=V0, va_in_y_mm_s=0.0, va_out_x_mm_s=va_out, va_out_y_mm_s=0.0,
        vb_in_x_mm_s=0.0, vb_in_y_mm_s=0.0, vb_out_x_mm_s=vb_out, vb_out_y_mm_s=0.0, speed_in_mm_s=V0,
        e=E, e_sigma=0.01, impulse_Ns=m * vb_out / 1000, impulse_n_Ns=m * vb_out / 1000, impulse_t_Ns=0.0,
        momentum_residual_pct=0.0, ke_before_J=ke0, ke_after_J=ke1, ke_loss_frac=1 - ke1 / ke0,
        cut_angle_deg=0.0, throw_deg=0.0, a_phase_in="roll", b_phase_in="rest", x_mm=xb0 - R, y_mm=y)])
    segments = pd.DataFrame([
        dict(ball="cue", segment=0, t0_s=0.0, t1_s=t_c, phase="roll"),
        dict(ball="cue", segment=1, t0_s=t_c, t1_s=t[-1], phase="slide"),
        dict(ball=name_b, segment=0, t0_s=0.0, t1_s=t_c, phase="rest"),
        dict(ball=name_b, segment=1, t0_s=t_c, t1_s=t[-1], phase="slide"),
    ])
    events = pd.DataFrame([dict(event=0, t_s=t_c, t_sigma_s=0.0004, kind="ball-ball", ball="cue", other=name_b,
                                contact=1)])
    return tracks, contacts, segments, events


def write_synthetic_video(path: Path, tracks: pd.DataFrame, cal: Calibration) -> Path:
    """Green cloth with white/red discs at the projected ball centres."""
    w, h = SIZE
    vw = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*"mp4v"), FPS, (w, h))
    assert vw.isOpened()
    r_px = R * cal.px_per_mm
    for k in range(N_FRAMES):
        img = np.zeros((h, w, 3), np.uint8)
        img[:] = (50, 120, 30)
        for _, row in tracks[tracks["frame"] == k].iterrows():
            p = cal.table_to_px([[row.x_mm, row.y_mm]])[0]
            col = (235, 235, 235) if row.ball == "cue" else (40, 40, 200)
            cv2.circle(img, (int(round(p[0])), int(round(p[1]))), int(round(r_px)), col, -1, cv2.LINE_AA)
        vw.write(img)
    vw.release()
    return path


def fake_stages(monkeypatch, name_b: str = "red", calls: list | None = None):
    """Replace tracking and physics in feltlab.pipeline by the synthetic shot (glue tests only)."""
    import feltlab.pipeline as P

    tracks, contacts, segments, events = synthetic_shot(name_b)
    cal = synthetic_calibration()

    def _track(clip, table, c, settings, progress):
        if calls is not None:
            calls.append(("track", settings.fps))
        return types.SimpleNamespace(tracks=tracks, detections=None, calibration=cal, fps=settings.fps or FPS,
                                     fps_source="override" if settings.fps else "container", n_frames=N_FRAMES,
                                     balls=None)

    def _physics(tr, table, radius, mass, settings):
        return types.SimpleNamespace(events=events, segments=segments, contacts=contacts, mu_s=0.21,
                                     mu_s_sigma=0.02, mu_r=0.011, mu_r_sigma=0.001)

    monkeypatch.setattr(P, "_track", _track)
    monkeypatch.setattr(P, "_physics", _physics)
    return tracks, contacts, cal


# --------------------------------------------------------------------------- tables
def test_tables_round_trip_with_units(tmp_path):
    tracks, contacts, segments, events = synthetic_shot()
    for kind, df in (("tracks", tracks), ("contacts", contacts), ("segments", segments), ("events", events)):
        paths = write_table(df, kind, tmp_path)
        assert [p.name for p in paths] == [f"{kind}.csv", f"{kind}.parquet"]
        back_csv = pd.read_csv(paths[0], keep_default_na=False, na_values=[""])
        import pyarrow.parquet as pq  # independent reader of the Parquet file

        back_pq = pq.read_table(paths[1]).to_pandas()
        assert list(back_csv.columns) == list(back_pq.columns)
        assert all(has_unit(c) for c in back_csv.columns), [c for c in back_csv.columns if not has_unit(c)]
        num = [c for c in df.columns if pd.api.types.is_float_dtype(df[c])]
        for c in num:
            np.testing.assert_allclose(back_csv[c].to_numpy(float), df[c].to_numpy(float), rtol=1e-8, atol=1e-9)
            np.testing.assert_array_equal(back_pq[c].to_numpy(float), df[c].to_numpy(float))
    # Documented order (DEVELOPERS.md) comes first.
    assert list(pd.read_csv(tmp_path / "tracks.csv").columns[: len(TRACK_COLUMNS)]) == TRACK_COLUMNS
    cols = list(pd.read_csv(tmp_path / "contacts.csv").columns)
    assert cols[:5] == CONTACT_COLUMNS[:5]
    # A cushion-free ball-ball row keeps an empty cushion field, not "nan".
    assert pd.read_csv(tmp_path / "contacts.csv", keep_default_na=False)["cushion"].tolist() == [""]


def test_empty_tables_keep_their_header(tmp_path):
    """No contact found is a result too: contacts.csv then has the documented header and no rows."""
    write_table(pd.DataFrame(), "contacts", tmp_path)
    back = pd.read_csv(tmp_path / "contacts.csv")
    assert len(back) == 0 and list(back.columns) == CONTACT_COLUMNS


def test_unit_names():
    assert has_unit("vx_mm_s") and has_unit("impulse_Ns") and has_unit("ke_loss_frac") and has_unit("x0_sigma_mm")
    assert not has_unit("speed") and not has_unit("velocity")


def test_table_missing_required_column_is_refused():
    tracks, *_ = synthetic_shot()
    with pytest.raises(ValueError, match="x_mm"):
        tidy(tracks.drop(columns=["x_mm"]), "tracks")


# --------------------------------------------------------------------------- shot.json
def test_shot_json_strict_and_complete(tmp_path):
    tracks, contacts, segments, _ = synthetic_shot()
    contacts = contacts.copy()
    contacts.loc[0, "throw_deg"] = float("nan")
    clip = tmp_path / "bench shot.mp4"
    clip.write_bytes(b"not really a video, only hashed here")
    cal = synthetic_calibration()
    shot = build_shot(clip_path=clip, sha256=hashlib.sha256(clip.read_bytes()).hexdigest(), n_frames=N_FRAMES,
                      fps=FPS, fps_source="container", table=TABLE, calibration=cal, balls=["cue", "red"],
                      contacts=contacts, friction={"mu_s": 0.2, "mu_s_sigma": float("nan")}, ball_mass_kg=0.163,
                      settings={"fps": None, "table": "pool-9ft"}, version="9.9", files=["tracks.csv"])
    p = write_shot(shot, tmp_path / "shot.json")

    def no_nan(x):
        raise AssertionError(f"non-JSON constant {x}")

    d = json.loads(p.read_text(encoding="utf-8"), parse_constant=no_nan)
    # sha256 checked against Python's hashlib on the same bytes.
    assert d["clip"] == {"name": "bench shot.mp4", "path": str(clip),
                         "sha256": hashlib.sha256(clip.read_bytes()).hexdigest()}
    assert d["n_frames"] == N_FRAMES and d["fps"] == FPS and d["fps_source"] == "container"
    assert d["table"]["preset"] == "pool-9ft"
    assert d["calibration"]["method"] == "synthetic"
    assert d["calibration"]["residual_px"] == pytest.approx(0.21)
    assert d["calibration"]["px_per_mm"] == pytest.approx(cal.px_per_mm)
    assert [b["ball"] for b in d["balls"]] == ["cue", "red"]
    assert d["contacts"][0]["e"] == pytest.approx(E) and d["contacts"][0]["throw_deg"] is None
    assert d["friction"]["mu_s_sigma"] is None
    assert d["software"]["version"] == "9.9" and d["settings"]["table"] == "pool-9ft"
    assert jsonable(np.float32(1.5)) == 1.5


# --------------------------------------------------------------------------- frames and video
def test_overlay_positions_match_opencv_projection():
    """Overlay pixels come from the calibration; checked against OpenCV's own cv2.projectPoints."""
    tracks, contacts, *_ = synthetic_shot()
    cal = synthetic_calibration()
    ov = fr_out.build_overlay(tracks, contacts, cal, FPS, N_FRAMES)
    cam = cal.camera
    g = tracks[tracks["ball"] == "cue"]
    pts = np.column_stack([g["x_mm"], g["y_mm"], np.full(len(g), R)])
    rvec, _ = cv2.Rodrigues(cam.R)
    ref, _ = cv2.projectPoints(pts, rvec, cam.t, cam.K, cam.dist)
    np.testing.assert_allclose(ov.px["cue"], ref.reshape(-1, 2), atol=1e-3)
    # Arrow length proportional to speed: tip - centre = v * arrow_s mapped through the camera.
    k = 3
    tip_ref, _ = cv2.projectPoints(pts[k:k + 1] + [V0 * ov.arrow_s, 0, 0], rvec, cam.t, cam.K, cam.dist)
    np.testing.assert_allclose(ov.tip["cue"][k], tip_ref.reshape(2), atol=1e-3)


def test_annotated_video_and_contact_frames(tmp_path):
    tracks, contacts, *_ = synthetic_shot()
    cal = synthetic_calibration()
    clip = write_synthetic_video(tmp_path / "clip.mp4", tracks, cal)
    ov = fr_out.build_overlay(tracks, contacts, cal, FPS, N_FRAMES)
    out = tmp_path / "out"
    out.mkdir()
    res = fr_out.render_annotations(clip, ov, out)
    cap = cv2.VideoCapture(str(res["video"]))
    n, size = 0, None
    while True:
        ok, img = cap.read()
        if not ok:
            break
        n += 1
        size = img.shape[1], img.shape[0]
    cap.release()
    assert n == N_FRAMES and size == SIZE
    tags = [(c, tag) for c, tag, k, p in res["frames"]]
    assert tags == [(1, "before"), (1, "at"), (1, "after")]
    at_frame = [k for c, tag, k, p in res["frames"] if tag == "at"][0]
    assert at_frame == round(contacts["t_s"][0] * FPS)
    # The overlay actually changed the frame around the ball (it is drawn, not a copy).
    raw = cv2.VideoCapture(str(clip))
    for _ in range(at_frame + 1):
        ok, raw_img = raw.read()
    raw.release()
    ann = cv2.imread(str(res["frames"][1][3]))
    assert ann.shape == raw_img.shape
    x, y = np.round(ov.px["cue"][at_frame]).astype(int)
    box = (slice(y - 20, y + 20), slice(x - 20, x + 20))
    assert np.abs(ann[box].astype(int) - raw_img[box].astype(int)).mean() > 5
    closeups = dict(res["closeups"])
    assert set(closeups) == {1}
    img = cv2.imread(str(closeups[1]))
    assert img is not None and img.shape[1] > img.shape[0]


def test_contact_frame_plan_offsets():
    plan = fr_out.contact_frame_plan(pd.DataFrame({"contact": [3], "t_s": [0.5]}), 1000.0, 2000)
    # 10 ms either side at 1000 frames/s.
    assert plan == [(3, "before", 490), (3, "at", 500), (3, "after", 510)]
    plan = fr_out.contact_frame_plan(pd.DataFrame({"contact": [1], "t_s": [0.001]}), 60.0, 10)
    assert [k for *_, k in plan] == [0, 0, 1]


# --------------------------------------------------------------------------- plots
def test_departure_angles_against_closed_form():
    """Frictionless cut on a resting ball of equal mass: separation angle arctan(2 tan(phi) / (1 - e))
    (REFERENCES.md closed form; e = 0.95, phi = 30 deg -> 87.5 deg; 90 deg when e = 1)."""
    for e, phi_deg in ((0.95, 30.0), (1.0, 30.0), (0.9, 15.0), (0.93, 55.0)):
        phi = math.radians(phi_deg)
        v = np.array([1000.0, 0.0])
        n = np.array([math.cos(phi), -math.sin(phi)])  # line of centres, phi off the cue's path
        vb = (1 + e) / 2 * (v @ n) * n
        va = v - vb
        c = dict(kind="ball-ball", va_in_x_mm_s=v[0], va_in_y_mm_s=v[1], va_out_x_mm_s=va[0], va_out_y_mm_s=va[1],
                 vb_out_x_mm_s=vb[0], vb_out_y_mm_s=vb[1])
        a = plot_out.departure_angles(c)
        sep = 90.0 if e == 1.0 else math.degrees(math.atan(2 * math.tan(phi) / (1 - e)))
        assert a["object_deg"] == pytest.approx(phi_deg, abs=1e-9)
        assert a["object_deg"] + a["cue_deg"] == pytest.approx(sep, abs=1e-6)


def test_plots_are_written(tmp_path):
    tracks, contacts, segments, _ = synthetic_shot()
    p1 = plot_out.speed_plot(tracks, segments, contacts, tmp_path / "speed.png")
    p2 = plot_out.table_diagram(tracks, contacts, TABLE, R, tmp_path / "table.png")
    for p in (p1, p2):
        img = cv2.imread(str(p))
        assert img is not None and img.std() > 10
    # The diagram is to scale: the figure's aspect follows the table's 2:1 (WPA playing surface).
    img = cv2.imread(str(p2))
    assert 1.4 < img.shape[1] / img.shape[0] < 2.2


def test_contact_labels_on_speed_plot_do_not_overlap(tmp_path, monkeypatch):
    """Two cushion contacts 7 ms apart (two balls reaching cushions together) must not print their
    labels on top of each other; measured with matplotlib's own text extents after drawing."""
    import matplotlib.pyplot as plt
    tracks, contacts, segments, _ = synthetic_shot()
    t0 = float(contacts["t_s"].iloc[0])
    extra = contacts.iloc[[0, 0, 0]].copy()
    extra["contact"] = [7, 8, 12]
    extra["t_s"] = [t0 + 0.004, t0 + 0.007, t0 + 0.009]
    both = pd.concat([contacts, extra], ignore_index=True)
    kept = []
    monkeypatch.setattr(plot_out.plt, "close", lambda fig=None: kept.append(fig))
    plot_out.speed_plot(tracks, segments, both, tmp_path / "speed.png")
    fig = kept[-1]
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    boxes = [t.get_window_extent(r) for ax in fig.axes for t in ax.texts if t.get_text().startswith("C")]
    assert len(boxes) == len(both)
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (i, j)
    plt.close(fig)


def test_speed_plot_of_a_break_keeps_the_fastest_balls_and_one_label_per_group(tmp_path, monkeypatch):
    """Eight balls set moving by one compound event: the panels are the cue ball and the fastest
    others (MAX_SPEED_PANELS in all), and the group's touches share one label. Counting only."""
    tracks, contacts, segments, _ = synthetic_shot()
    t = np.sort(tracks["t_s"].unique())
    rows, cs = [], []
    names = [f"ball-{i}" for i in range(1, 8)]
    for i, b in enumerate(names):  # ball-i leaves at (100 + 300 i) mm/s
        v = 100.0 + 300.0 * i
        for k, tk in enumerate(t):
            rows.append(dict(frame=k, t_s=tk, ball=b, x_mm=1500.0 + v * tk, y_mm=300.0 + 100 * i, vx_mm_s=v,
                             vy_mm_s=0.0, sx_mm=0.2, sy_mm=0.2, visible=1))
        cs.append(dict(contacts.iloc[0].to_dict(), contact=i, ball_a="cue", ball_b=b, group=1, e=np.nan,
                       t_s=0.3 + 0.001 * i))
    tr = pd.concat([tracks[tracks["ball"] == "cue"], pd.DataFrame(rows)], ignore_index=True)
    kept = []
    monkeypatch.setattr(plot_out.plt, "close", lambda fig=None: kept.append(fig))
    plot_out.speed_plot(tr, None, pd.DataFrame(cs), tmp_path / "speed.png")
    fig = kept[-1]
    panels = [ax.get_ylabel().split("\n")[0] for ax in fig.axes]
    assert panels == ["cue"] + [f"ball-{i}" for i in range(8 - plot_out.MAX_SPEED_PANELS + 1, 8)]
    assert [t.get_text() for t in fig.axes[0].texts] == ["C0-C6"]
    import matplotlib.pyplot as plt
    plt.close(fig)


# --------------------------------------------------------------------------- report
def _report_context(tmp_path, clip_name="shot.mp4", ball="red"):
    tracks, contacts, segments, _ = synthetic_shot(ball)
    cal = synthetic_calibration()
    p1 = plot_out.speed_plot(tracks, segments, contacts, tmp_path / "speed.png")
    shot = build_shot(clip_path=tmp_path / clip_name, sha256="0" * 64, n_frames=N_FRAMES, fps=FPS,
                      fps_source="container", table=TABLE, calibration=cal, balls=["cue", ball], contacts=contacts,
                      friction={"mu_s": 0.2, "mu_s_sigma": 0.02, "mu_r": 0.01, "mu_r_sigma": 0.001},
                      ball_mass_kg=0.163, settings={}, version="0.1.0", files=[])
    return rep_out.build_context(shot, contacts, {f"speed of {ball}": p1}, [(f"frame of {ball}", p1)],
                                 ["tracks.csv", clip_name], tracks=tracks)


def test_report_escapes_names_and_embeds_images(tmp_path):
    evil = '<script>alert("x")</script>&<b>'
    html = rep_out.render_report(_report_context(tmp_path, clip_name=evil + ".mp4", ball='<img src=x onerror=1>'))
    assert "<script>" not in html and "<b>" not in html and "<img src=x" not in html
    assert "&lt;script&gt;" in html and "&lt;img src=x onerror=1&gt;" in html
    srcs = re.findall(r'<img src="([^"]*)"', html)
    assert len(srcs) == 2
    for s in srcs:
        assert s.startswith("data:image/png;base64,")
        img = cv2.imdecode(np.frombuffer(base64.b64decode(s.split(",", 1)[1]), np.uint8), cv2.IMREAD_COLOR)
        assert img is not None and img.size > 0
    assert "http://" not in html and "https://" not in html


def test_report_says_a_calibration_note_once():
    """A calibration note also carried in the run's warnings is shown once, not twice; others stay."""
    shot_note, own_note = "field of view 60 deg assumed", "corners good to about 2 x the usual precision"
    ctx_warn = [f"tracking: calibration: {shot_note}"]
    shot = {"clip": {"name": "s.mp4", "sha256": "0" * 64}, "n_frames": 1, "fps": 60.0, "fps_source": "container",
            "duration_s": 0.0, "table": {"preset": "pool-9ft", "length_mm": 2540, "width_mm": 1270},
            "ball": {"diameter_mm": 57.15, "mass_kg": 0.163}, "warnings": ctx_warn,
            "calibration": {"method": "auto", "notes": [shot_note, own_note]}, "software": {"version": "0"}}
    ctx = rep_out.build_context(shot, None, {}, [], [])
    assert ctx["warnings"] == ctx_warn and ctx["notes"] == [own_note]
    html = rep_out.render_report(ctx)
    assert html.count(shot_note) == 1 and html.count(own_note) == 1


def test_report_sentence_closed_form(tmp_path):
    """Head-on, equal masses: object ball leaves at (1 + e) v / 2, cue at (1 - e) v / 2, and the fraction
    of kinetic energy lost is (1 - e^2) / 2 (REFERENCES.md closed forms; 1.5 m/s, e = 0.9 -> 1.43, 0.07 m/s, 9.5%)."""
    ctx = _report_context(tmp_path)
    s = ctx["sentences"][0]
    assert "cue arrived at 1.50 m/s (rolling)" in s
    assert f"red left at {(1 + E) * V0 / 2000:.2f} m/s" in s
    assert f"cue at {(1 - E) * V0 / 2000:.2f} m/s" in s
    assert f"e = {E:.3f} ± 0.010" in s
    assert f"{100 * (1 - E ** 2) / 2:.1f}% of the kinetic energy lost" in s
    # 1.5 m/s lies in the "medium" band, 0.89-1.9 m/s (Physics of Pool FAQ, Colorado State University).
    assert ctx["summary"][0] == "cue moved at up to 1.50 m/s before its first contact " \
                                "(a medium shot by the Physics of Pool FAQ speed bands)."
    assert ctx["summary"][1] == "1 contact found: 1 ball-ball, 0 ball-cushion."


def test_report_tells_a_compound_event_once():
    """Three touches within one frame (a cue ball into a line of two): one sentence for the group
    at its first touch, naming every link, the incoming and the fastest outgoing ball; a separate
    contact keeps its own sentence; a touch of balls all at rest before gets no momentum fraction
    (none was brought in: momentum p = m v, closed form). Plain wording, no outside reference."""
    base = dict(kind="ball-ball", group=1, group_balls="cue red blue yellow", group_momentum_residual_pct=2.0,
                group_momentum_residual_sigma_pct=1.0, group_ke_loss_frac=0.1, e=np.nan)
    rows = [dict(base, contact=0, t_s=0.300, ball_a="cue", ball_b="red", va_in_x_mm_s=2000.0, va_in_y_mm_s=0.0,
                 a_phase_in="roll", vb_out_x_mm_s=30.0, vb_out_y_mm_s=0.0),
            dict(base, contact=1, t_s=0.301, ball_a="red", ball_b="blue", vb_out_x_mm_s=40.0, vb_out_y_mm_s=0.0),
            dict(kind="ball-cushion", contact=2, t_s=0.302, ball_a="green", cushion="x0", e=0.8, e_sigma=0.01,
                 group=-1),
            dict(base, contact=3, t_s=0.302, ball_a="blue", ball_b="yellow", vb_out_x_mm_s=1800.0,
                 vb_out_y_mm_s=0.0),
            dict(kind="ball-ball", contact=4, t_s=0.9, ball_a="black", ball_b="pink", group=2,
                 group_balls="black pink", e=np.nan, group_momentum_residual_pct=np.nan, group_px_in_Ns=0.0,
                 group_py_in_Ns=0.0, va_in_x_mm_s=0.0, va_in_y_mm_s=0.0, a_phase_in="rest")]
    out = rep_out.describe_contacts(rows)
    assert len(out) == 3
    assert out[0].startswith("C0-C1, C3 at 0.300-0.302 s: 3 touches")
    assert "cue–red, red–blue, blue–yellow" in out[0] and "cue came in at 2.00 m/s (rolling)" in out[0]
    assert "yellow left fastest, at 1.80 m/s" in out[0] and "2.0 ± 1.0%" in out[0]
    assert out[1].startswith("C2 at 0.302 s: green reached cushion x0")
    assert out[2].startswith("C4 at 0.900 s: black (at rest) and pink touched")
    assert "%" not in out[2] and "momentum came from other touches" in out[2]


def test_report_never_calls_an_energy_gain_a_negative_loss():
    """KE after > KE before cannot come from a contact (energy conservation, closed form): the report
    says it rose and why, never 'lost -38.8%'."""
    gain = rep_out.energy_words(-0.388, 0.2, group=True)
    assert "rose 38.8 ± 20.0%" in gain and "-" not in gain.split("(")[0]
    assert rep_out.energy_words(0.095) == "9.5% of the kinetic energy lost"
    blank = rep_out.describe_contact(dict(contact=4, t_s=1.4, kind="ball-cushion", ball_a="red", cushion="yW",
                                          e=np.nan, e_sigma=np.nan, note="e not measured: its sigma (5e+02) is "
                                          "above 0.50 (red has 2 frames after the contact)"))
    assert "e = n/a" not in blank and "e not measured: its sigma (5e+02)" in blank
    c = dict(contact=3, t_s=0.5, kind="ball-cushion", ball_a="red", cushion="y0", e=1.02, e_sigma=0.03,
             ke_loss_frac=-0.04)
    s = rep_out.describe_contact(c)
    assert "lost" not in s and "kinetic energy rose 4.0% (a contact cannot add energy" in s


def test_report_does_not_show_an_exact_fit_as_a_zero_residual():
    """Four marked points fix a pinhole camera exactly (8 equations, 8 unknowns: a plane homography,
    Hartley & Zisserman, Multiple View Geometry, 2nd ed., sec. 4.1), so a manual calibration's ~0 px
    residual is no check: the report says so; an automatic fit keeps its residual."""
    manual = rep_out.calibration_words({"method": "manual", "residual_px": 3e-7, "residual_mm": 8e-7,
                                        "px_per_mm": 0.98})
    assert "0.00 px" not in manual and "exact fit" in manual and "0.980 px/mm" in manual
    auto = rep_out.calibration_words({"method": "auto", "residual_px": 0.44, "residual_mm": 1.13, "px_per_mm": 0.392})
    assert auto == "auto, residual 0.44 px / 1.13 mm, 0.392 px/mm"


# --------------------------------------------------------------------------- pipeline glue
def test_analyze_writes_everything_atomically(tmp_path, monkeypatch):
    from feltlab.pipeline import AnalyzeSettings, analyze_clip

    tracks, contacts, cal = fake_stages(monkeypatch)
    clip = write_synthetic_video(tmp_path / "drill.mp4", tracks, cal)
    dest = tmp_path / "results" / "drill"
    res = analyze_clip(clip, dest, AnalyzeSettings())
    assert not res.reused and res.warnings == []
    names = {p.name for p in dest.iterdir()}
    for f in ("tracks.csv", "tracks.parquet", "segments.csv", "segments.parquet", "contacts.csv",
              "contacts.parquet", "shot.json", "report.html", "speed.png", "table.png", "annotated.mp4", "frames"):
        assert f in names, f
    shot = json.loads((dest / "shot.json").read_text())
    assert shot["clip"]["sha256"] == hashlib.sha256(clip.read_bytes()).hexdigest()
    for f in shot["files"]:
        assert (dest / f).is_file(), f
    # nothing left beside the result
    assert sorted(p.name for p in dest.parent.iterdir()) == ["drill"]


def test_failure_leaves_no_half_result(tmp_path, monkeypatch):
    import feltlab.outputs.shotfile as sf
    from feltlab.pipeline import AnalyzeSettings, analyze_clip

    tracks, contacts, cal = fake_stages(monkeypatch)
    clip = write_synthetic_video(tmp_path / "drill.mp4", tracks, cal)

    def boom(*a, **k):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(sf, "write_shot", boom)
    dest = tmp_path / "results" / "drill"
    with pytest.raises(OSError):
        analyze_clip(clip, dest, AnalyzeSettings(**LIGHT))
    assert not dest.exists()
    assert list((tmp_path / "results").iterdir()) == []  # the temporary folder is gone too


def test_no_silent_overwrite(tmp_path, monkeypatch):
    from feltlab.pipeline import AnalyzeSettings, analyze_clip

    calls: list = []
    tracks, contacts, cal = fake_stages(monkeypatch, calls=calls)
    clip = write_synthetic_video(tmp_path / "drill.mp4", tracks, cal)
    dest = tmp_path / "res" / "drill"
    s = AnalyzeSettings(**LIGHT)
    analyze_clip(clip, dest, s)
    before = (dest / "shot.json").stat().st_mtime_ns
    # Same clip, same settings: the finished result is reused, not redone.
    again = analyze_clip(clip, dest, AnalyzeSettings(**LIGHT))
    assert again.reused and len(calls) == 1
    assert (dest / "shot.json").stat().st_mtime_ns == before
    assert len(again.contacts) == 1
    # Different settings: refused with a one-line reason, result untouched.
    with pytest.raises(FeltlabError, match="different settings.*--replace"):
        analyze_clip(clip, dest, AnalyzeSettings(**LIGHT, fps=240.0))
    assert (dest / "shot.json").stat().st_mtime_ns == before
    # Different clip into the same folder: refused too.
    other = tmp_path / "other.mp4"
    other.write_bytes(clip.read_bytes() + b"\0")
    with pytest.raises(FeltlabError, match="different clip"):
        analyze_clip(other, dest, AnalyzeSettings(**LIGHT))
    # Asked to replace: done, with the new settings recorded.
    res = analyze_clip(clip, dest, AnalyzeSettings(**LIGHT, fps=240.0), replace=True)
    assert not res.reused
    assert json.loads((dest / "shot.json").read_text())["settings"]["fps"] == 240.0
    assert sorted(p.name for p in dest.parent.iterdir()) == ["drill"]
    # A folder that is not a result is not taken over.
    stranger = tmp_path / "res" / "notes"
    stranger.mkdir()
    (stranger / "mine.txt").write_text("keep me")
    with pytest.raises(FeltlabError, match="not an empty folder"):
        analyze_clip(clip, stranger, AnalyzeSettings(**LIGHT))
    assert (stranger / "mine.txt").read_text() == "keep me"


def test_calibration_file_counts_by_content(tmp_path, monkeypatch):
    """Moving the calibration file keeps a result valid; editing it makes it a different setting."""
    import shutil

    from feltlab.pipeline import AnalyzeSettings, analyze_clip
    from tracking.calibrate import save_calibration

    tracks, contacts, cal = fake_stages(monkeypatch)
    clip = write_synthetic_video(tmp_path / "drill.mp4", tracks, cal)
    (tmp_path / "a").mkdir()
    a = save_calibration(cal, tmp_path / "a" / "bench.toml")
    dest = tmp_path / "res" / "drill"
    analyze_clip(clip, dest, AnalyzeSettings(**LIGHT, calib=str(a)))
    (tmp_path / "b").mkdir()
    b = Path(shutil.copy(a, tmp_path / "b" / "bench.toml"))
    assert analyze_clip(clip, dest, AnalyzeSettings(**LIGHT, calib=str(b))).reused
    b.write_text(b.read_text() + "\n# edited\n")
    with pytest.raises(FeltlabError, match="different settings"):
        analyze_clip(clip, dest, AnalyzeSettings(**LIGHT, calib=str(b)))


def test_cli_bad_input_one_line_exit_2(tmp_path):
    from click.testing import CliRunner

    from feltlab.cli import main

    r = CliRunner().invoke(main, ["analyze", str(tmp_path / "missing.mp4"), "--out", str(tmp_path)])
    assert r.exit_code == 2
    assert r.output.strip().count("\n") == 0 and "does not exist" in r.output
    (tmp_path / "x.mp4").write_bytes(b"x")
    r = CliRunner().invoke(main, ["analyze", str(tmp_path / "x.mp4"), "--ball-mass", "163"])
    assert r.exit_code == 2 and "kg" in r.output
    r = CliRunner().invoke(main, ["analyze", str(tmp_path / "x.mp4"), "--table", "pool-10ft"])
    assert r.exit_code == 2 and "pool-9ft" in r.output
    assert not (Path("results") / "x").exists()
    # a folder of frames needs --fps; a folder without frames is refused
    seq = tmp_path / "seq"
    seq.mkdir()
    r = CliRunner().invoke(main, ["analyze", str(seq), "--out", str(tmp_path / "o")])
    assert r.exit_code == 2 and r.output.strip().count("\n") == 0 and "without frame images" in r.output
    (seq / "f1.png").write_bytes(b"x")
    r = CliRunner().invoke(main, ["analyze", str(seq), "--out", str(tmp_path / "o")])
    assert r.exit_code == 2 and "--fps" in r.output
    assert not (tmp_path / "o").exists()


def test_shot_without_contacts(tmp_path, monkeypatch):
    """A clip where nothing touches still gets every output, with an empty contacts table."""
    import feltlab.pipeline as P
    from feltlab.pipeline import AnalyzeSettings, analyze_clip

    tracks, contacts, cal = fake_stages(monkeypatch)
    clip = write_synthetic_video(tmp_path / "drill.mp4", tracks, cal)
    early = tracks[tracks["t_s"] < contacts["t_s"][0]]  # only the approach, before the hit

    def _physics(tr, table, radius, mass, settings):
        return types.SimpleNamespace(events=pd.DataFrame(), segments=pd.DataFrame(), contacts=pd.DataFrame(),
                                     mu_s=float("nan"), mu_s_sigma=float("nan"), mu_r=float("nan"),
                                     mu_r_sigma=float("nan"))

    real_track = P._track

    def _track(*a, **k):
        tr = real_track(*a, **k)
        tr.tracks = early
        return tr

    monkeypatch.setattr(P, "_physics", _physics)
    monkeypatch.setattr(P, "_track", _track)
    res = analyze_clip(clip, tmp_path / "r" / "drill", AnalyzeSettings())
    assert res.warnings == [] and len(res.contacts) == 0
    d = res.out_dir
    assert len(pd.read_csv(d / "contacts.csv")) == 0
    assert "No contact was found" in (d / "report.html").read_text()
    assert (d / "annotated.mp4").is_file() and (d / "speed.png").is_file()


def test_stage_named_on_errors(tmp_path, monkeypatch):
    """A FeltlabError from a stage says which stage it came from (batch lists it in failures.csv)."""
    import feltlab.pipeline as P
    from feltlab.pipeline import AnalyzeSettings, analyze_clip

    tracks, contacts, cal = fake_stages(monkeypatch)
    clip = write_synthetic_video(tmp_path / "drill.mp4", tracks, cal)

    def bad_physics(*a, **k):
        raise FeltlabError("no ball moved; check the clip shows a shot")

    monkeypatch.setattr(P, "_physics", bad_physics)
    with pytest.raises(FeltlabError) as info:
        analyze_clip(clip, tmp_path / "r" / "drill", AnalyzeSettings(**LIGHT))
    assert info.value.stage == "physics"
    assert not (tmp_path / "r" / "drill").exists()


def test_cli_writes_result_folder(tmp_path, monkeypatch):
    from click.testing import CliRunner

    from feltlab.cli import main

    tracks, contacts, cal = fake_stages(monkeypatch)
    clip = write_synthetic_video(tmp_path / "drill.mp4", tracks, cal)
    r = CliRunner().invoke(main, ["analyze", str(clip), "--out", str(tmp_path / "o"), "--no-video", "--fps", "60"])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "o" / "drill" / "report.html").is_file()
    assert not (tmp_path / "o" / "drill" / "annotated.mp4").exists()
    shot = json.loads((tmp_path / "o" / "drill" / "shot.json").read_text())
    assert shot["fps_source"] == "override" and shot["settings"]["fps"] == 60.0


def test_diagram_labels_a_compound_event_once_and_never_prints_nan(tmp_path, monkeypatch):
    # Links of a compound event (balls touching within one frame) carry no per-link angles (e and
    # velocities cannot be separated), so the diagram gives the group one label.
    import matplotlib.axes

    tracks, contacts, _, _ = synthetic_shot()
    bb = contacts[contacts["kind"] == "ball-ball"].iloc[[0]]
    links = pd.concat([bb] * 3, ignore_index=True)
    for col in ("va_out_x_mm_s", "va_out_y_mm_s", "vb_out_x_mm_s", "vb_out_y_mm_s"):
        links[col] = np.nan
    links["group"], links["group_balls"] = 1, "a b c d"
    lone = links.iloc[[0]].assign(group=2, group_balls="e f")  # a "group" of one touch is a plain contact
    rest = contacts.assign(group=-1, group_balls="")
    allc = pd.concat([rest, links, lone], ignore_index=True)
    allc["contact"] = np.arange(len(allc))
    texts = []
    real = matplotlib.axes.Axes.annotate

    def spy(self, text, *a, **k):
        texts.append(str(text))
        return real(self, text, *a, **k)

    monkeypatch.setattr(matplotlib.axes.Axes, "annotate", spy)
    plot_out.table_diagram(tracks, allc, TABLE, R, tmp_path / "table.png")
    assert not any("nan" in t.lower() for t in texts), texts
    assert sum("3 touches within one frame" in t for t in texts) == 1, texts
    assert not any("1 touch" in t for t in texts), texts
    assert sum(t.startswith(f"C{len(allc) - 1} ") for t in texts) == 1, texts


def test_diagram_magnifies_a_knot_of_contacts_without_hiding_a_ball(tmp_path, monkeypatch):
    """A break-like shot: five object balls racked touching (centres one diameter apart, the
    equilateral packing of a rack, common practice), the cue hits the apex and all fly apart.
    The diagram adds a close-up of the rack that takes in every contact point, names the racked
    balls there, magnifies at least INSET_MIN_ZOOM, and covers no ball's start or end on the table.
    Plain geometry, no outside reference needed."""
    tracks, contacts, _, _ = synthetic_shot()
    apex = np.array([1500.0, 635.0])
    d = 2 * R
    rack = {"red": apex, "blue": apex + [d * math.cos(math.pi / 6), d / 2],
            "green": apex + [d * math.cos(math.pi / 6), -d / 2], "black": apex + [2 * d * math.cos(math.pi / 6), d],
            "yellow": apex + [2 * d * math.cos(math.pi / 6), 0.0]}
    away = {"red": [1900.0, 1100.0], "blue": [2300.0, 900.0], "green": [2300.0, 200.0], "black": [1700.0, 1150.0],
            "yellow": [2400.0, 640.0]}
    t = np.arange(N_FRAMES) / FPS
    rows = [r for r in tracks[tracks["ball"] == "cue"].to_dict("records")]
    for b, p0 in rack.items():
        for k, tk in enumerate(t):
            f = min(1.0, 2.0 * tk / t[-1])
            x, y = np.asarray(p0) + f * (np.asarray(away[b]) - p0)
            rows.append(dict(frame=k, t_s=tk, ball=b, x_mm=x, y_mm=y, vx_mm_s=0.0, vy_mm_s=0.0, sx_mm=0.2,
                             sy_mm=0.2, visible=1))
    tr = pd.DataFrame(rows)
    pairs = [("cue", "red"), ("red", "blue"), ("red", "green"), ("blue", "black"), ("green", "yellow")]
    base = contacts.iloc[0].to_dict()
    cs = []
    for i, (a, b) in enumerate(pairs):
        pa = apex - [d, 0.0] if a == "cue" else rack[a]
        mid = (np.asarray(pa) + rack[b]) / 2
        cs.append({**base, "contact": i, "ball_a": a, "ball_b": b, "x_mm": mid[0], "y_mm": mid[1], "group": 1,
                   "group_balls": " ".join(sorted(set(sum(pairs, ()))))})
    allc = pd.DataFrame(cs)
    kept = []
    monkeypatch.setattr(plot_out.plt, "close", lambda fig=None: kept.append(fig))
    plot_out.table_diagram(tr, allc, TABLE, R, tmp_path / "table.png")
    fig = kept[-1]
    main = fig.axes[0]
    assert len(main.child_axes) == 1
    ins = main.child_axes[0]
    x0, x1 = ins.get_xlim()
    y0, y1 = ins.get_ylim()
    assert ((allc["x_mm"] > x0) & (allc["x_mm"] < x1) & (allc["y_mm"] > y0) & (allc["y_mm"] < y1)).all()
    names = {t.get_text() for t in ins.texts}
    assert set(rack) <= names
    # where the close-up sits on the table (mm) and what it magnifies
    fig.canvas.draw()
    bb = ins.get_window_extent()  # display pixels, after the aspect is applied
    (bx0, by0), (bx1, by1) = main.transData.inverted().transform([[bb.x0, bb.y0], [bb.x1, bb.y1]])
    assert (bx1 - bx0) / (x1 - x0) >= plot_out.INSET_MIN_ZOOM - 1e-6
    for b, g in tr.groupby("ball"):
        for x, y in g.sort_values("t_s")[["x_mm", "y_mm"]].to_numpy()[[0, -1]]:
            assert not (bx0 - R < x < bx1 + R and by0 - R < y < by1 + R), (b, x, y)
    import matplotlib.pyplot as plt
    plt.close(fig)


def test_closeup_arrows_fit_their_crop():
    """A close-up's velocity arrows are shortened (one common factor, legend included) so every head stays
    inside the crop (inset by CLOSEUP_ARROW_MARGIN); arrows that already fit are left alone. Geometry only:
    the crop box comes from closeup_box, the expected factor from the line-box intersection by hand."""
    n = 3
    p = np.tile(np.array([[640.0, 360.0]]), (n, 1))
    ov = fr_out.Overlay(n_frames=n, fps=60.0, image_size=(1280, 720), px={"cue": p},
                        tip={"cue": p + np.array([600.0, 0.0])}, speed={"cue": np.full(n, 2000.0)},
                        colours={"cue": (255, 255, 255)}, radius_px=10.0, arrow_s=0.45,
                        legend_mm_s=1000.0, legend_px=450.0)
    contact = {"contact": 1, "cp_px": np.array([640.0, 360.0])}
    x0, y0, x1, y1 = fr_out.closeup_box(ov, contact)
    m = fr_out.CLOSEUP_ARROW_MARGIN * min(x1 - x0, y1 - y0)
    f = fr_out.closeup_arrow_factor(ov, contact, [0, 1, 2])
    assert f > fr_out.CLOSEUP_ARROW_MIN_FACTOR
    assert 640.0 + 600.0 * f == pytest.approx(x1 - m)
    # a steep arrow down-left: the bottom edge binds first
    ov.tip["cue"] = p + np.array([-50.0, 400.0])
    f = fr_out.closeup_arrow_factor(ov, contact, [0, 1, 2])
    assert 360.0 + 400.0 * f == pytest.approx(y1 - m)
    assert x0 + m <= 640.0 - 50.0 * f
    ov.tip["cue"] = p + np.array([30.0, 0.0])
    assert fr_out.closeup_arrow_factor(ov, contact, [0, 1, 2]) == 1.0
    # a ball outside the crop does not shrink the others' arrows
    far = np.tile(np.array([[20.0, 20.0]]), (n, 1))
    ov.px["far"], ov.tip["far"], ov.speed["far"] = far, far + 2000.0, np.full(n, 3000.0)
    assert fr_out.closeup_arrow_factor(ov, contact, [0, 1, 2]) == 1.0


def test_compound_event_gets_one_closeup_that_takes_in_every_touch():
    """Touches within one frame are shown once: the first leads with a label naming all of them and a
    close-up box holding every touch point (plus 3 radii); the others draw no frames of their own;
    a plain contact is untouched. Geometry and counting only."""
    cons = [dict(contact=i, t_s=0.30 + 0.001 * i, group=1, e=np.nan, cp_px=np.array([600.0 + 60 * i, 300.0 + 25 * i]),
                 label=f"C{i}", e_text="e = n/a") for i in range(4)]
    cons.append(dict(contact=4, t_s=0.9, group=-1, e=0.8, cp_px=np.array([100.0, 100.0]), label="C4", e_text="x"))
    fr_out._merge_groups(cons)
    lead = cons[0]
    assert lead["label"] == "C0-C3: 4 touches within one frame" and "not measurable" in lead["e_text"]
    assert [bool(c.get("follower")) for c in cons] == [False, True, True, True, False]
    assert cons[4]["label"] == "C4"
    n = 2
    ov = fr_out.Overlay(n_frames=n, fps=60.0, image_size=(1280, 720), px={}, tip={}, speed={}, colours={},
                        radius_px=11.0, arrow_s=0.3, legend_mm_s=1000.0, legend_px=300.0, contacts=cons)
    x0, y0, x1, y1 = fr_out.closeup_box(ov, lead)
    for c in cons[:4]:
        assert x0 + 3 * 11.0 - 1 <= c["cp_px"][0] <= x1 - 3 * 11.0 + 1
        assert y0 + 3 * 11.0 - 1 <= c["cp_px"][1] <= y1 - 3 * 11.0 + 1
    assert (x1 - x0) / (y1 - y0) == pytest.approx(1.6, rel=0.02)  # the close-up's 16:10 shape kept
    assert [c["contact"] for c in fr_out.framed_contacts(ov)] == [0, 4]


def test_compound_event_labels_name_their_contacts():
    """A compound event's label on the table diagram lists its own contact numbers as runs (a group of one
    inside another group's range had read 'C2-C2  1 touches'); plain counting, no outside reference needed."""
    assert plot_out.contact_ranges([0, 1, 3, 4, 5, 6, 7, 8, 9]) == "C0-C1, C3-C9"
    assert plot_out.contact_ranges([2]) == "C2"
    assert plot_out.contact_ranges([np.int64(11), 14, 12, 13]) == "C11-C14"
