"""Colour of 4:2:0 video put back between the places it was sampled.

Compressed video (MPEG-4 part 2, H.264, Motion JPEG) keeps the two colour-
difference channels (Cb, Cr) at half the resolution in both directions: one
sample per 2 x 2 block of pixels (4:2:0; ITU-T H.264 / ISO 14496-10 and ISO
14496-2 chroma format, JFIF 2 x 2 subsampling). The decoder behind OpenCV's
reader copies each sample over its block, so a decoded frame's colour is a
staircase with 2-px steps (measured on every clip we read: within a block the
chroma changes by ~0.001 DN, across a block edge by 0.1-0.7 DN on average).

A ball's silhouette edge is found on a colour difference (tracking/detect.py)
that is mostly chroma for a coloured ball: on the staircase the edge moves in
2-px jumps, so its sub-pixel place depends on where the ball sits on the 2-px
grid. A moving ball meets every phase of the grid; a still ball meets the same
one in every frame, a fixed offset no averaging removes (ray-cast still balls,
scripts/bench_rest.py --codec: 0.035 px per axis on raw frames, 0.086 after
the 4:2:0 step with copied blocks, 0.059 with the samples interpolated).

Rule: when the chroma of the clip's frames is constant inside the aligned 2 x 2
blocks (:func:`block_chroma`: within-block differences below
``BLOCK_RATIO`` of the across-block ones), each block's value is taken as the
sample at the block's centre (2i + 0.5, 2j + 0.5) and the chroma is
interpolated linearly between the block centres (:func:`rebuild_chroma`; luma
untouched). Frames whose colour is at full resolution are left alone. Used by
tracking.pipeline.track_clip when TrackClipSettings.chroma_rebuild is set (off by default: see there).
"""
from __future__ import annotations

import cv2
import numpy as np

#: Within-block / across-block mean chroma difference below which the frames'
#: chroma counts as copied 2 x 2 blocks. Copied blocks give ~0.01 (uint8
#: rounding of the colour conversion); full-resolution chroma gives ~1 (as
#: many changes inside as across).
BLOCK_RATIO = 0.2


def _block_ratio(img: np.ndarray) -> float:
    """Mean |chroma step| inside aligned 2 x 2 blocks over the mean across block edges (both directions)."""
    ycc = cv2.cvtColor(img, cv2.COLOR_BGR2YCrCb)[..., 1:].astype(np.float32)
    h, w = (ycc.shape[0] // 2) * 2, (ycc.shape[1] // 2) * 2
    c = ycc[:h, :w]
    dx = np.abs(np.diff(c, axis=1))
    dy = np.abs(np.diff(c, axis=0))
    inside = float(dx[:, 0::2].mean() + dy[0::2].mean())
    across = float(dx[:, 1::2].mean() + dy[1::2].mean())
    return inside / across if across > 0 else 1.0


def block_chroma(frames: list[np.ndarray]) -> bool:
    """True when the frames' chroma is copied 2 x 2 blocks (a 4:2:0 clip decoded without interpolation).

    >>> rng = np.random.default_rng(0)
    >>> img = rng.integers(0, 256, (8, 8, 3)).astype(np.uint8)
    >>> block_chroma([img])
    False
    >>> block_chroma([np.repeat(np.repeat(img[::2, ::2], 2, axis=0), 2, axis=1)])
    True
    """
    if not frames:
        return False
    return float(np.median([_block_ratio(f) for f in frames])) < BLOCK_RATIO


def rebuild_chroma(img: np.ndarray) -> np.ndarray:
    """BGR uint8 frame with its chroma interpolated between 2 x 2 block centres (a new array).

    Each block's mean Cr, Cb is its sample at (2i + 0.5, 2j + 0.5);
    cv2.resize with INTER_LINEAR maps a half-size pixel i to full-size
    position 2i + 0.5 (pixel-centre convention), so it interpolates exactly
    between the block centres.
    """
    h2, w2 = img.shape[0] // 2, img.shape[1] // 2
    if h2 < 2 or w2 < 2:
        return img.copy()
    ycc = cv2.cvtColor(img, cv2.COLOR_BGR2YCrCb)
    c = ycc[:2 * h2, :2 * w2, 1:]
    half = cv2.resize(c, (w2, h2), interpolation=cv2.INTER_AREA)
    ycc[:2 * h2, :2 * w2, 1:] = cv2.resize(half, (2 * w2, 2 * h2), interpolation=cv2.INTER_LINEAR)
    return cv2.cvtColor(ycc, cv2.COLOR_YCrCb2BGR)
