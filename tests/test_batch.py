"""Batch runner: discovery, resume, failure isolation, copies, interruption.

The fast tests use ``fake_analyze`` (test-only): it decodes the clip with OpenCV
(an outside library) so unreadable or truncated files fail the way a real
analyser would, then writes a small, deterministic result. One slow test runs the
real analyser on the bundled clips.
"""
from __future__ import annotations

import csv
import hashlib
import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import cv2
import numpy as np
import pandas as pd
import pytest

from feltlab.batch import resume
from feltlab.batch.discover import discover_clips, is_video_name
from feltlab.batch.runner import run_batch
from feltlab.errors import FeltlabError

REPO = Path(__file__).resolve().parents[1]


# ---------------------------------------------------------------------------
# test doubles and fixtures
# ---------------------------------------------------------------------------

def fake_analyze(clip: Path, out_dir: Path, settings) -> None:
    """Stand-in analyser: decode every frame (OpenCV), then write contacts/shot/tracks.

    Appends the clip path to $FAKE_LOG when it finishes (to count analyses); sleeps
    $FAKE_SLEEP seconds first (to leave time to interrupt a run).
    """
    time.sleep(float(os.environ.get("FAKE_SLEEP", "0")))
    cap = cv2.VideoCapture(str(clip))
    if not cap.isOpened():
        raise FeltlabError(f"cannot open {clip.name} as video; check the file is a complete video clip",
                           stage="video")
    expected = int(cap.get(cv2.CAP_PROP_FRAME_COUNT))
    n = 0
    while cap.read()[0]:
        n += 1
    cap.release()
    if n == 0:
        raise FeltlabError(f"no frames could be decoded from {clip.name}; re-export the clip", stage="video")
    if n < expected:
        raise FeltlabError(f"{clip.name} ends after {n} of {expected} frames (truncated?); copy it again",
                           stage="video")
    sha = hashlib.sha256(clip.read_bytes()).hexdigest()
    rng = np.random.default_rng(int(sha[:12], 16))
    rows = []
    for i, kind in enumerate(["ball-ball", "ball-cushion", "ball-ball", "ball-cushion"]):
        v = rng.uniform(500, 3000)
        base = 0.95 if kind == "ball-ball" else 0.80
        rows.append({"contact": i, "t_s": 0.1 * (i + 1), "kind": kind, "ball_a": "cue",
                     "ball_b": "yellow" if kind == "ball-ball" else "", "cushion": "" if kind == "ball-ball" else "x0",
                     "speed_in_mm_s": v, "e": base - 0.01 * v / 1000 + rng.normal(0, 0.004),
                     "e_sigma": rng.uniform(0.003, 0.006), "momentum_residual_pct": rng.normal(0, 1),
                     "cut_angle_deg": rng.uniform(0, 60) if kind == "ball-ball" else np.nan})
    out_dir.mkdir(parents=True)
    pd.DataFrame(rows).to_csv(out_dir / "contacts.csv", index=False)
    pd.DataFrame({"ball": ["cue", "cue"], "t_s": [0.0, 0.01], "vx_mm_s": [rng.uniform(800, 3000), 10.0],
                  "vy_mm_s": [0.0, 0.0]}).to_csv(out_dir / "tracks.csv", index=False)
    (out_dir / "shot.json").write_text(json.dumps({"sha256": sha, "settings": settings, "mu_s": 0.2,
                                                   "mu_s_sigma": 0.01, "mu_r": 0.01, "mu_r_sigma": 0.001}))
    log = os.environ.get("FAKE_LOG")
    if log:
        with open(log, "a") as fh:
            fh.write(f"{clip}\n")


def write_clip(path: Path, seed: int, frames: int = 12) -> Path:
    """A small real MP4 (OpenCV writer) whose pixels depend on ``seed``."""
    path.parent.mkdir(parents=True, exist_ok=True)
    w = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*"mp4v"), 30.0, (64, 48))
    assert w.isOpened()
    rng = np.random.default_rng(seed)
    for k in range(frames):
        img = np.full((48, 64, 3), 40, np.uint8)
        cv2.circle(img, (int(8 + 3 * k + seed), 24), 5, tuple(int(c) for c in rng.integers(60, 255, 3)), -1)
        w.write(img)
    w.release()
    return path


@pytest.fixture()
def clip_folder(tmp_path: Path) -> Path:
    """3 good clips, a copy of one in a subfolder, a text file renamed .mp4, a truncated clip."""
    root = tmp_path / "clips"
    for i in range(3):
        write_clip(root / f"bench_{i}.mp4", seed=i + 1)
    (root / "sub").mkdir()
    (root / "sub" / "bench_0_copy.MP4").write_bytes((root / "bench_0.mp4").read_bytes())
    (root / "notes.mp4").write_text("these are my notes, not a video\n")
    good = write_clip(tmp_path / "long.mov", seed=9, frames=60).read_bytes()
    (root / "sub" / "cut.mov").write_bytes(good[: len(good) // 2])
    (root / "readme.txt").write_text("not a clip")
    return root


def read_failures(path: Path) -> dict[str, dict]:
    with open(path, newline="") as fh:
        return {r["path"]: r for r in csv.DictReader(fh)}


def log_lines(path: Path) -> list[str]:
    return path.read_text().splitlines() if path.exists() else []


SETTINGS = {"table": "pool-9ft", "fps": None}


# ---------------------------------------------------------------------------
# discovery
# ---------------------------------------------------------------------------

def test_discover_finds_video_extensions_any_case_and_skips_output(tmp_path: Path) -> None:
    root = tmp_path / "in"
    for name in ["a.mp4", "b.MOV", "c.Mkv", "d.mts", "e.webm", "f.txt", "g.mp4.json", ".hidden.mp4",
                 "deep/x/y.AVI", "results/old.mp4", "twin.mp4", "twin.mov"]:
        (root / name).parent.mkdir(parents=True, exist_ok=True)
        (root / name).write_bytes(b"x")
    clips = discover_clips(root, root / "results")
    rels = [c.rel for c in clips]
    assert rels == ["a.mp4", "b.MOV", "c.Mkv", "d.mts", "deep/x/y.AVI", "e.webm", "twin.mov", "twin.mp4"]
    results = {c.rel: c.result_rel for c in clips}
    assert results["deep/x/y.AVI"] == "deep/x/y"
    # two clips that would share a result folder both keep their extension
    assert results["twin.mp4"] == "twin_mp4" and results["twin.mov"] == "twin_mov"
    assert is_video_name("clip.M2TS") and not is_video_name("mp4")


def test_discover_takes_a_folder_of_frames_as_one_clip(tmp_path: Path) -> None:
    root = tmp_path / "in"
    for name in ["shot1/f1.png", "shot1/f2.png", "shot1/f10.png", "shot1/nested/x.mp4",
                 "seq/a.TIF", "seq/b.tif", "lone/only.png", "mixed/v.mp4", "mixed/p.png", "mixed/q.png"]:
        (root / name).parent.mkdir(parents=True, exist_ok=True)
        (root / name).write_bytes(b"x" * 3)
    clips = {c.rel: c for c in discover_clips(root)}
    # a frame folder is one clip and is not searched further; one image alone is not a clip;
    # a folder with a video holds clips, not frames
    assert sorted(clips) == ["mixed/v.mp4", "seq", "shot1"]
    assert clips["shot1"].result_rel == "shot1" and clips["shot1"].size_bytes == 9
    # the batch's clip digest covers every frame, in order: editing one frame changes it
    from feltlab.batch.discover import file_sha256

    before = file_sha256(clips["shot1"].path)
    (root / "shot1" / "f10.png").write_bytes(b"y" * 3)
    assert file_sha256(clips["shot1"].path) != before


def test_batch_fps_reaches_the_analyser_and_bad_rates_are_refused() -> None:
    from feltlab.cmd_batch import analyze_settings

    assert analyze_settings(None, None, 480.0).fps == 480.0
    for bad in (0.0, -5.0, float("nan")):
        with pytest.raises(FeltlabError, match="capture rate"):
            analyze_settings(None, None, bad)


def test_discover_empty_folder_is_a_clear_error(tmp_path: Path) -> None:
    (tmp_path / "notes.txt").write_text("x")
    with pytest.raises(FeltlabError, match="no video clips found"):
        discover_clips(tmp_path)
    with pytest.raises(FeltlabError, match="not a folder"):
        discover_clips(tmp_path / "missing")


# ---------------------------------------------------------------------------
# the batch
# ---------------------------------------------------------------------------

def test_good_clips_once_copies_filled_bad_ones_listed_and_second_run_skips(
        clip_folder: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    log = tmp_path / "log.txt"
    monkeypatch.setenv("FAKE_LOG", str(log))
    out = tmp_path / "out"
    rep = run_batch(clip_folder, out, SETTINGS, analyze=fake_analyze, workers=2)
    status = {o.clip_rel: o.status for o in rep.outcomes}
    assert status == {"bench_0.mp4": "analysed", "bench_1.mp4": "analysed", "bench_2.mp4": "analysed",
                      "notes.mp4": "failed", "sub/bench_0_copy.MP4": "copied", "sub/cut.mov": "failed"}
    # each distinct good content analysed exactly once; the copy was filled, not analysed
    assert sorted(Path(p).name for p in log_lines(log)) == ["bench_0.mp4", "bench_1.mp4", "bench_2.mp4"]
    copy_manifest = resume.read_manifest(out / "sub" / "bench_0_copy")
    assert copy_manifest["origin"] == "copied" and copy_manifest["copied_from"] == "bench_0.mp4"
    assert (out / "sub" / "bench_0_copy" / "contacts.csv").read_bytes() == \
        (out / "bench_0" / "contacts.csv").read_bytes()
    fails = read_failures(out / "failures.csv")
    assert set(fails) == {"notes.mp4", "sub/cut.mov"}
    assert fails["notes.mp4"]["stage"] == "video" and "cannot open" in fails["notes.mp4"]["reason"]
    assert fails["sub/cut.mov"]["stage"] == "video"
    assert all("\n" not in r["reason"] and r["reason"] for r in fails.values())
    # no result folder for a failed clip, nothing left in staging
    assert not (out / "notes").exists() and not (out / "sub" / "cut").exists()
    assert not (out / resume.STAGING_NAME).exists()
    assert (out / "series.html").is_file() and (out / "all_contacts.parquet").is_file()
    # the copy is counted once in the statistics: 3 distinct contents x 4 contacts
    allc = pd.read_csv(out / "all_contacts.csv")
    assert len(allc) == 12 and set(allc["clip"]) == {"bench_0.mp4", "bench_1.mp4", "bench_2.mp4"}

    rep2 = run_batch(clip_folder, out, SETTINGS, analyze=fake_analyze, workers=2, series=False)
    status2 = {o.clip_rel: o.status for o in rep2.outcomes}
    assert [status2[k] for k in ("bench_0.mp4", "bench_1.mp4", "bench_2.mp4", "sub/bench_0_copy.MP4")] == \
        ["skipped"] * 4
    assert len(log_lines(log)) == 3  # nothing analysed again
    assert set(read_failures(out / "failures.csv")) == {"notes.mp4", "sub/cut.mov"}


@pytest.mark.slow  # four CLI runs, each drawing the series plots
def test_cli_exits_nonzero_when_a_clip_fails(clip_folder: Path, tmp_path: Path,
                                              monkeypatch: pytest.MonkeyPatch) -> None:
    from click.testing import CliRunner

    import feltlab.batch.runner as runner
    import feltlab.cmd_batch as cmd
    from feltlab.cli import main

    monkeypatch.setattr(runner, "default_analyzer", lambda: fake_analyze)
    monkeypatch.setattr(cmd, "analyze_settings", lambda table, calib=None, fps=None, hfov=None: {"table": table})
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["batch", str(clip_folder), "--out", str(out), "--workers", "1", "--quiet"])
    assert res.exit_code == 1, res.output
    assert "2 failed" in res.output and "failures listed in" in res.output
    (clip_folder / "notes.mp4").unlink()
    (clip_folder / "sub" / "cut.mov").unlink()
    # acceptance spec: the stand-in's ball-ball e scatter about 0.93 (8 contacts)
    ok, bad = tmp_path / "ok.toml", tmp_path / "bad.toml"
    ok.write_text('[[band]]\nkind = "ball-ball"\ne_min = 0.85\ne_max = 0.99\n')
    bad.write_text('[[band]]\nkind = "ball-ball"\ne_min = 0.96\ne_max = 0.99\n')
    res = CliRunner().invoke(main, ["batch", str(clip_folder), "--out", str(out), "--workers", "1", "--quiet",
                                    "--spec", str(ok)])
    assert res.exit_code == 0, res.output
    assert "4 already finished" in res.output and "acceptance: PASS" in res.output
    res = CliRunner().invoke(main, ["batch", str(clip_folder), "--out", str(out), "--workers", "1", "--quiet",
                                    "--spec", str(bad)])
    assert res.exit_code == 3 and "acceptance: FAIL" in res.output
    verdicts = pd.read_csv(out / "series_spec.csv")
    assert list(verdicts["verdict"]) == ["FAIL"] and verdicts["n"].iloc[0] == 6  # 3 distinct clips x 2
    # bad input: one line, exit 2
    res = CliRunner().invoke(main, ["batch", str(tmp_path / "nowhere"), "--out", str(out)])
    assert res.exit_code == 2 and "not a folder" in res.output


def test_other_settings_never_overwrite_a_finished_result(clip_folder: Path, tmp_path: Path) -> None:
    out = tmp_path / "out"
    run_batch(clip_folder, out, {"table": "pool-9ft"}, analyze=fake_analyze, workers=1, series=False)
    before = (out / "bench_1" / resume.MANIFEST_NAME).read_text()
    rep = run_batch(clip_folder, out, {"table": "snooker"}, analyze=fake_analyze, workers=1, series=False)
    assert (out / "bench_1" / resume.MANIFEST_NAME).read_text() == before  # old one kept
    o = next(o for o in rep.outcomes if o.clip_rel == "bench_1.mp4")
    assert o.status == "analysed" and Path(o.result_dir).name.startswith("bench_1__")
    assert resume.read_manifest(Path(o.result_dir))["settings"] == {"table": "snooker"}
    assert any("kept it and wrote the new result" in w for w in rep.warnings)
    # both settings are now finished: neither is redone
    for s in ({"table": "pool-9ft"}, {"table": "snooker"}):
        again = run_batch(clip_folder, out, s, analyze=fake_analyze, workers=1, series=False)
        assert {o.status for o in again.outcomes if o.clip_rel.startswith("bench")} == {"skipped"}


def test_a_failing_analyser_bug_is_isolated(clip_folder: Path, tmp_path: Path) -> None:
    def buggy(clip, out_dir, settings):
        if clip.name == "bench_1.mp4":
            raise ZeroDivisionError("division by zero")
        fake_analyze(clip, out_dir, settings)

    rep = run_batch(clip_folder, tmp_path / "out", SETTINGS, analyze=buggy, in_process=True, series=False)
    bad = {o.clip_rel: o for o in rep.failed}
    assert bad["bench_1.mp4"].stage == "internal" and "ZeroDivisionError" in bad["bench_1.mp4"].reason
    assert {o.status for o in rep.outcomes if o.clip_rel in ("bench_0.mp4", "bench_2.mp4")} == {"analysed"}


def test_output_lock_refuses_a_second_live_run(tmp_path: Path) -> None:
    with resume.OutputLock(tmp_path):
        with pytest.raises(FeltlabError, match="another batch run"):
            with resume.OutputLock(tmp_path):
                pass
    # a stale lock from a dead process is taken over
    (tmp_path / resume.LOCK_NAME).write_text(json.dumps({"host": os.uname().nodename, "pid": 2**22 + 12345}))
    with resume.OutputLock(tmp_path):
        pass


# ---------------------------------------------------------------------------
# interruption: kill a worker, kill the whole run
# ---------------------------------------------------------------------------

DRIVER = textwrap.dedent("""
    import sys
    sys.path.insert(0, {tests!r})
    from test_batch import fake_analyze
    from feltlab.batch.runner import run_batch
    rep = run_batch({folder!r}, {out!r}, {{"table": "pool-9ft"}}, analyze=fake_analyze, workers=2, series=False)
    print("STATUS", sorted((o.clip_rel, o.status) for o in rep.outcomes))
""")


def _children(pid: int) -> list[int]:
    kids = []
    for task in Path(f"/proc/{pid}/task").glob("*"):
        try:
            kids += [int(x) for x in (task / "children").read_text().split()]
        except OSError:
            pass
    return kids


def _finished(out: Path) -> set[str]:
    return {p.parent.relative_to(out).as_posix() for p in out.rglob(resume.MANIFEST_NAME)
            if resume.STAGING_NAME not in p.parts}


def _start_driver(folder: Path, out: Path, log: Path) -> subprocess.Popen:
    env = {**os.environ, "FAKE_LOG": str(log), "FAKE_SLEEP": "0.6"}
    code = DRIVER.format(tests=str(Path(__file__).parent), folder=str(folder), out=str(out))
    return subprocess.Popen([sys.executable, "-c", code], env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, start_new_session=True)


def _wait_for(cond, timeout: float = 30.0) -> None:
    t0 = time.time()
    while not cond():
        assert time.time() - t0 < timeout, "timed out"
        time.sleep(0.05)


@pytest.fixture()
def six_clips(tmp_path: Path) -> Path:
    root = tmp_path / "six"
    for i in range(6):
        write_clip(root / f"drill_{i}.mp4", seed=10 + i)
    return root


def test_killed_worker_is_retried_and_nothing_is_done_twice(six_clips: Path, tmp_path: Path) -> None:
    out, log = tmp_path / "out", tmp_path / "log.txt"
    proc = _start_driver(six_clips, out, log)
    try:
        _wait_for(lambda: len(_children(proc.pid)) >= 2 and any((out / resume.STAGING_NAME).glob("*")))
        os.kill(_children(proc.pid)[0], signal.SIGKILL)
        stdout, stderr = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == 0, stderr
    assert "failed" not in stdout  # the clips in flight were retried, not failed
    assert _finished(out) == {f"drill_{i}" for i in range(6)}
    done = [Path(p).name for p in log_lines(log)]
    assert sorted(done) == sorted(set(done)) and len(done) == 6  # each completed exactly once
    rerun = run_batch(six_clips, out, {"table": "pool-9ft"}, analyze=fake_analyze, workers=2, series=False)
    assert {o.status for o in rerun.outcomes} == {"skipped"}


def test_killed_run_resumes_without_loss_or_repeats(six_clips: Path, tmp_path: Path,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    out, log = tmp_path / "out", tmp_path / "log.txt"
    proc = _start_driver(six_clips, out, log)
    try:
        _wait_for(lambda: len(_finished(out)) >= 2)
        os.killpg(proc.pid, signal.SIGKILL)  # the whole run: driver and workers
        proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    finished_before = _finished(out)
    assert 2 <= len(finished_before) < 6
    # every folder that looks like a result is complete (has its manifest and files)
    for rel in finished_before:
        assert (out / rel / "contacts.csv").is_file() and (out / rel / "shot.json").is_file()
    assert not [p for p in out.iterdir() if p.is_dir() and p.name.startswith("drill_") and p.name not in
                finished_before]
    log2 = tmp_path / "log2.txt"
    monkeypatch.setenv("FAKE_LOG", str(log2))
    rep = run_batch(six_clips, out, {"table": "pool-9ft"}, analyze=fake_analyze, workers=2, series=False)
    redone = {Path(p).stem for p in log_lines(log2)}
    assert redone.isdisjoint(finished_before)  # nothing done twice
    assert redone | finished_before == {f"drill_{i}" for i in range(6)}  # nothing lost
    assert not rep.failed and not (out / resume.STAGING_NAME).exists()


def test_a_result_made_by_single_clip_analysis_is_reused(clip_folder: Path, tmp_path: Path) -> None:
    """A folder written by `feltlab analyze` (shot.json with the clip hash and settings, no batch
    manifest) counts as finished when hash and settings agree, and is kept aside otherwise."""
    out = tmp_path / "out"
    clip = clip_folder / "bench_2.mp4"
    sha = hashlib.sha256(clip.read_bytes()).hexdigest()
    fake_analyze(clip, out / "bench_2", SETTINGS)  # writes shot.json with sha256 + settings
    shot = json.loads((out / "bench_2" / "shot.json").read_text())
    shot["clip"] = {"sha256": sha}
    (out / "bench_2" / "shot.json").write_text(json.dumps(shot))
    rep = run_batch(clip_folder, out, SETTINGS, analyze=fake_analyze, workers=1, series=False)
    assert next(o for o in rep.outcomes if o.clip_rel == "bench_2.mp4").status == "skipped"
    assert resume.read_manifest(out / "bench_2") is None  # left untouched
    other = run_batch(clip_folder, out, {"table": "snooker"}, analyze=fake_analyze, workers=1, series=False)
    o = next(o for o in other.outcomes if o.clip_rel == "bench_2.mp4")
    assert o.status == "analysed" and Path(o.result_dir).name.startswith("bench_2__")
    assert any("did not make" in w for w in other.warnings)


def test_series_html_is_self_contained_and_escapes_file_names(tmp_path: Path) -> None:
    import base64
    import re

    root = tmp_path / "in"
    write_clip(root / "drill <1>&.mp4", seed=5)
    write_clip(root / "drill_2.mp4", seed=6)
    write_clip(root / "drill_3.mp4", seed=7)
    out = tmp_path / "out"
    run_batch(root, out, SETTINGS, analyze=fake_analyze, workers=1)
    html = (out / "series.html").read_text()
    assert "drill &lt;1&gt;&amp;.mp4" in html and "drill <1>" not in html
    srcs = re.findall(r'<img[^>]*src="([^"]+)"', html)
    assert len(srcs) >= 2 and all(s.startswith("data:image/png;base64,") for s in srcs)
    for s in srcs:  # every embedded image decodes (OpenCV's PNG decoder) and is not blank
        img = cv2.imdecode(np.frombuffer(base64.b64decode(s.split(",", 1)[1]), np.uint8), cv2.IMREAD_COLOR)
        assert img is not None and img.shape[0] > 100 and img.std() > 5
    assert "http://" not in html and "https://" not in html  # nothing fetched from a network


# ---------------------------------------------------------------------------
# end to end with the real single-clip analyser
# ---------------------------------------------------------------------------

BENCH_CLIP = REPO / "clips" / "bench_restitution.mp4"


def _calibration_from_truth(clip: Path, out: Path) -> Path:
    """A calibration file from the render's known camera: a bench user calibrates the fixed
    camera once and passes the same file for every clip (--calib)."""
    from tracking.calibrate import save_calibration
    from tracking.calibration import Calibration
    from tracking.camera import CameraModel

    from feltlab.standards import table_preset

    t = json.loads(clip.with_suffix(".truth.json").read_text())
    cal = Calibration(camera=CameraModel.from_dict(t["camera"]), table=table_preset(t["table"]["preset"]),
                      ball_diameter_mm=float(t["ball"]["diameter_mm"]), method="manual")
    return save_calibration(cal, out / "bench.calibration.toml", overwrite=True)


@pytest.mark.slow
def test_bench_series_with_the_real_analyser(tmp_path: Path) -> None:
    """The bundled restitution-bench clip, a copy of it and a text file renamed .mp4, through the
    real analyser with one calibration file; e checked against the render's exact truth."""
    pipeline = pytest.importorskip("feltlab.pipeline")
    pytest.importorskip("tracking.pipeline")
    if not BENCH_CLIP.is_file() or not BENCH_CLIP.with_suffix(".truth.json").is_file():
        pytest.skip("bundled bench clip missing (run `make clips`)")
    root = tmp_path / "in"
    (root / "copies").mkdir(parents=True)
    os.symlink(BENCH_CLIP, root / BENCH_CLIP.name)  # link, never copy the clip
    os.symlink(BENCH_CLIP, root / "copies" / BENCH_CLIP.name)
    (root / "not_a_video.mp4").write_text("plain text renamed to .mp4\n")
    calib = _calibration_from_truth(BENCH_CLIP, tmp_path)
    settings = pipeline.AnalyzeSettings(calib=str(calib), video=False, frames=False, plots=False, report=False)
    out = tmp_path / "out"
    rep = run_batch(root, out, settings, workers=2)
    status = {o.clip_rel: o for o in rep.outcomes}
    pair = sorted([status[BENCH_CLIP.name], status[f"copies/{BENCH_CLIP.name}"]], key=lambda o: o.status)
    assert [o.status for o in pair] == ["analysed", "copied"], pair  # same content: analysed once
    rd = Path(pair[0].result_dir)
    shot = json.loads((rd / "shot.json").read_text())
    # the analyser's recorded hash equals an independent hashlib digest of the file
    assert shot["clip"]["sha256"] == hashlib.sha256(BENCH_CLIP.read_bytes()).hexdigest()
    contacts = pd.read_csv(rd / "contacts.csv")
    allc = pd.read_csv(out / "all_contacts.csv")
    assert (allc["clip"] == pair[0].clip_rel).sum() == len(contacts) == len(allc)  # the copy counted once
    bad = status["not_a_video.mp4"]
    assert bad.status == "failed" and bad.stage != "internal" and bad.reason and "\n" not in bad.reason
    assert set(read_failures(out / "failures.csv")) == {"not_a_video.mp4"}
    # head-on bench contact: measured e against the simulator's exact e (render truth); 0.03 is
    # a loose bound for this batch-level check (the physics tests pin the accuracy)
    truth = json.loads(BENCH_CLIP.with_suffix(".truth.json").read_text())
    e_true = [c["e_measured"] for c in truth["contacts"] if c["kind"] == "ball-ball"]
    series = pd.read_csv(out / "series.csv").set_index("kind")
    assert series.loc["ball-ball", "n"] == len(e_true) == (allc["kind"] == "ball-ball").sum()
    assert series.loc["ball-ball", "e_mean"] == pytest.approx(float(np.mean(e_true)), abs=0.03)
    again = run_batch(root, out, settings, workers=2, series=False)
    assert {o.status for o in again.outcomes if o.clip_rel != "not_a_video.mp4"} == {"skipped"}


def test_hash_cache_skips_rereading_unchanged_clips(clip_folder: Path, tmp_path: Path) -> None:
    out = tmp_path / "out"
    run_batch(clip_folder, out, SETTINGS, analyze=fake_analyze, workers=1, series=False)
    cache = json.loads((out / resume.HASHES_NAME).read_text())
    key = str((clip_folder / "bench_1.mp4").resolve())
    assert cache[key][2] == hashlib.sha256((clip_folder / "bench_1.mp4").read_bytes()).hexdigest()
    # an unchanged size+mtime is trusted: a planted wrong hash makes the clip look new
    cache[key][2] = "0" * 64
    (out / resume.HASHES_NAME).write_text(json.dumps(cache))
    rep = run_batch(clip_folder, out, SETTINGS, analyze=fake_analyze, workers=1, series=False)
    o = next(o for o in rep.outcomes if o.clip_rel == "bench_1.mp4")
    assert o.clip_sha256 == "0" * 64 and o.status == "analysed"
    # touching the file forces a fresh hash: the original finished result is found again
    os.utime(clip_folder / "bench_1.mp4", ns=(time.time_ns(), time.time_ns()))
    rep = run_batch(clip_folder, out, SETTINGS, analyze=fake_analyze, workers=1, series=False)
    assert next(o for o in rep.outcomes if o.clip_rel == "bench_1.mp4").status == "skipped"


def test_an_analyser_that_cannot_reach_a_worker_fails_each_clip_cleanly(clip_folder: Path, tmp_path: Path) -> None:
    """A lambda cannot be pickled to a worker process: every clip fails with a reason, no crash."""
    rep = run_batch(clip_folder, tmp_path / "out", SETTINGS, analyze=lambda c, o, s: fake_analyze(c, o, s),
                    workers=2, series=False)
    assert {o.stage for o in rep.failed} == {"worker"} and all("could not run" in o.reason for o in rep.failed)
    assert not [o for o in rep.outcomes if o.status in ("analysed", "copied")]


def crashing_analyze(clip: Path, out_dir: Path, settings) -> None:
    """Stand-in for a clip that takes its whole process down (SIGKILL, as a hard decoder crash or
    the out-of-memory killer would)."""
    if clip.name == "bench_1.mp4":
        os.kill(os.getpid(), signal.SIGKILL)
    fake_analyze(clip, out_dir, settings)


def test_a_clip_that_crashes_its_worker_is_isolated(clip_folder: Path, tmp_path: Path) -> None:
    rep = run_batch(clip_folder, tmp_path / "out", SETTINGS, analyze=crashing_analyze, workers=1, series=False)
    status = {o.clip_rel: o for o in rep.outcomes}
    assert status["bench_1.mp4"].status == "failed" and status["bench_1.mp4"].stage == "worker"
    assert "died 2 times" in status["bench_1.mp4"].reason
    assert status["bench_0.mp4"].status == "analysed" and status["bench_2.mp4"].status == "analysed"
    assert status["sub/bench_0_copy.MP4"].status == "copied"


def test_progress_bar_counts_clips_and_failures(clip_folder: Path, tmp_path: Path, capsys) -> None:
    run_batch(clip_folder, tmp_path / "out", SETTINGS, analyze=fake_analyze, in_process=True, series=False,
              progress=True)
    err = capsys.readouterr().err
    final = [line for line in err.splitlines() if line.startswith("clips")][-1]
    assert "6/6" in final and "failed 2" in final and "ETA" in final


# ---------------------------------------------------------------------------
# a calibration file kept beside a clip
# ---------------------------------------------------------------------------

def test_calibration_beside_a_clip_is_used_per_clip_and_counts_as_a_setting(tmp_path: Path) -> None:
    """A bench clip with NAME.calibration.toml beside it is analysed with that file, a whole-table
    clip in the same folder without one; a byte-identical copy without the file is not taken as
    "the same result"; editing the file re-analyses only that clip, beside the old result."""
    from feltlab.pipeline import AnalyzeSettings, calibration_beside

    root = tmp_path / "clips"
    write_clip(root / "table.mp4", seed=1)
    write_clip(root / "bench.MOV", seed=2)
    (root / "bench_copy.mp4").write_bytes((root / "bench.MOV").read_bytes())
    side = root / "bench.calibration.toml"
    side.write_text('table = "pool-9ft"\n')
    (root / "frames").mkdir()
    (root / "frames.calibration.toml").write_text("x = 1\n")
    assert calibration_beside(root / "bench.MOV") == side
    assert calibration_beside(root / "table.mp4") is None
    assert calibration_beside(root / "frames") == root / "frames.calibration.toml"
    assert AnalyzeSettings(calib="given.toml").for_clip(root / "bench.MOV").calib == "given.toml"

    seen: list[tuple[str, str | None]] = []

    def recording(clip: Path, out_dir: Path, settings) -> None:
        seen.append((clip.name, settings.calib))
        fake_analyze(clip, out_dir, {"calib": settings.calib})

    out = tmp_path / "out"
    run_batch(root, out, AnalyzeSettings(), analyze=recording, in_process=True, series=False)
    assert sorted(seen) == [("bench.MOV", str(side)), ("bench_copy.mp4", None), ("table.mp4", None)]
    seen.clear()
    run_batch(root, out, AnalyzeSettings(), analyze=recording, in_process=True, series=False)
    assert seen == []
    side.write_text('table = "pool-8ft"\n')
    rep = run_batch(root, out, AnalyzeSettings(), analyze=recording, in_process=True, series=False)
    assert seen == [("bench.MOV", str(side))]
    again = next(o for o in rep.outcomes if o.clip_rel == "bench.MOV")
    assert Path(again.result_dir).name.startswith("bench__")  # the first result is kept, not overwritten
    assert (out / "bench" / "shot.json").is_file()
