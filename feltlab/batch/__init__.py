"""Batch analysis of clip folders with series statistics for restitution testing.

Read the data flow off the modules: discover (find clips) -> resume (hashes,
manifests, atomic results) -> runner (local processes or dask) -> stats (pure
series statistics) -> spec (acceptance bands) -> series_report (files, plots, HTML).
"""
from feltlab.batch.discover import Clip, discover_clips, file_sha256
from feltlab.batch.runner import BatchReport, ClipOutcome, run_batch
from feltlab.batch.spec import Spec, evaluate_spec, load_spec

__all__ = ["Clip", "discover_clips", "file_sha256", "BatchReport", "ClipOutcome", "run_batch", "Spec",
           "evaluate_spec", "load_spec"]
