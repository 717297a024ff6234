"""Batch on a dask.distributed cluster gives the same results as the single-process run.

The cluster is a LocalCluster on this machine (in-process, one worker): dask is an
independent general-purpose scheduler from PyPI; the comparison is against our own
single-process path, which tests/test_batch.py checks in detail.
"""
from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd
import pytest

pytest.importorskip("distributed")

from feltlab.batch import settings as batch_settings  # noqa: E402
from feltlab.batch.runner import connect_scheduler, run_batch  # noqa: E402
from feltlab.errors import FeltlabError  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_batch import fake_analyze, write_clip  # noqa: E402

SETTINGS = {"table": "carom"}


@pytest.fixture(scope="module")
def cluster():
    from distributed import Client, LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=None) as lc:
        with Client(lc) as client:
            yield lc, client


@pytest.fixture()
def folder(tmp_path: Path) -> Path:
    root = tmp_path / "clips"
    for i in range(4):
        write_clip(root / f"series_a/shot_{i}.mp4", seed=30 + i)
    (root / "series_b").mkdir()
    (root / "series_b" / "shot_0_again.mp4").write_bytes((root / "series_a/shot_0.mp4").read_bytes())
    (root / "series_b" / "empty.mkv").write_bytes(b"")
    return root


def _tables(out: Path) -> dict[str, pd.DataFrame]:
    return {name: pd.read_csv(out / name) for name in ("all_contacts.csv", "series.csv", "failures.csv",
                                                       "series_session.csv")}


def test_dask_cluster_matches_single_process(cluster, folder: Path, tmp_path: Path) -> None:
    _, client = cluster
    single = run_batch(folder, tmp_path / "single", SETTINGS, analyze=fake_analyze, workers=1)
    on_dask = run_batch(folder, tmp_path / "dask", SETTINGS, analyze=fake_analyze, scheduler=client)
    assert [(o.clip_rel, o.status, o.stage) for o in on_dask.outcomes] == \
        [(o.clip_rel, o.status, o.stage) for o in single.outcomes]
    assert {o.status for o in on_dask.outcomes} == {"analysed", "copied", "failed"}
    a, b = _tables(tmp_path / "single"), _tables(tmp_path / "dask")
    for name in a:
        pd.testing.assert_frame_equal(a[name], b[name], check_exact=True, obj=name)
    for rel in ("series_a/shot_1", "series_b/shot_0_again"):
        assert (tmp_path / "single" / rel / "contacts.csv").read_bytes() == \
            (tmp_path / "dask" / rel / "contacts.csv").read_bytes()
    # resuming on the cluster: nothing analysed again
    again = run_batch(folder, tmp_path / "dask", SETTINGS, analyze=fake_analyze, scheduler=client, series=False)
    assert {o.status for o in again.outcomes if o.status != "failed"} == {"skipped"}


def test_cli_scheduler_option_reaches_the_cluster(cluster, folder: Path, tmp_path: Path,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    from click.testing import CliRunner

    import feltlab.batch.runner as runner
    import feltlab.cmd_batch as cmd
    from feltlab.cli import main

    lc, _ = cluster
    monkeypatch.setattr(runner, "default_analyzer", lambda: fake_analyze)
    monkeypatch.setattr(cmd, "analyze_settings", lambda table, calib=None, fps=None, hfov=None: SETTINGS)
    (folder / "series_b" / "empty.mkv").unlink()
    res = CliRunner().invoke(main, ["batch", str(folder), "--out", str(tmp_path / "o"), "--scheduler",
                                    lc.scheduler_address, "--quiet"])
    assert res.exit_code == 0, res.output
    assert "4 analysed" in res.output and "1 copied" in res.output


def test_missing_dask_is_a_clear_error(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "distributed", None)  # import now raises ImportError
    with pytest.raises(FeltlabError, match=r"feltlab\[cluster\]"):
        connect_scheduler("tcp://127.0.0.1:8786")


def test_unreachable_scheduler_is_a_clear_error(monkeypatch: pytest.MonkeyPatch) -> None:
    import socket

    with socket.socket() as s:  # a port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setattr(batch_settings, "SCHEDULER_CONNECT_TIMEOUT_S", 1.0)
    with pytest.raises(FeltlabError, match="could not reach the dask scheduler") as exc:
        connect_scheduler(f"127.0.0.1:{port}")
    assert "\n" not in str(exc.value)
