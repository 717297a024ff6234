"""Which presets the automatic table choice tries after a refusal (tracking/table_choice.py).

Pool, snooker and carom presets are all 2:1; they differ in size and in
pocket layout (carom tables have none: UMB; pool and snooker tables six: WPA,
WPBSA; feltlab.standards holds the dimensions). A refusal because the table
was not found in the picture cannot be mended by any preset; one because lines
were missed (not an absurd scale) only by a preset of the other pocket layout,
whose pocket stretches differ; an absurd scale by any other size.
"""
from __future__ import annotations

import numpy as np
import pytest

import tracking.table_choice as tc
from feltlab.errors import FeltlabError
from feltlab.standards import TABLES, table_preset


def _err(kind):
    e = FeltlabError(f"refused ({kind})")
    if kind is not None:
        e.kind = kind
    return e


@pytest.mark.parametrize("kind,start,want", [
    ("region", "pool-9ft", ["pool-9ft"]),
    ("fit", "pool-9ft", ["pool-9ft", "carom"]),
    ("fit", "carom", ["carom"] + [n for n, t in TABLES.items() if t.pockets]),
    ("scale", "pool-9ft", ["pool-9ft"] + [n for n in TABLES if n != "pool-9ft"]),
    (None, "pool-9ft", ["pool-9ft"] + [n for n in TABLES if n != "pool-9ft"]),  # unknown: try all
])
def test_presets_tried_after_a_refusal(monkeypatch, kind, start, want):
    tried = []

    def refuse(frames, table, *a, **k):
        tried.append(table.name)
        raise _err(kind)

    monkeypatch.setattr(tc, "calibrate_auto", refuse)
    with pytest.raises(FeltlabError, match=r"refused"):
        tc.calibrate_choosing_table([np.zeros((64, 64, 3), np.uint8)], table_preset(start))
    assert tried == want
