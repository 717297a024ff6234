"""Settings of tracking/phantoms.py: phantom balls on compressed footage, where a ball centre can be.

Kept apart from tracking/settings.py (one owner per file this session);
lengths mm, image levels DN (0-255), radii in expected ball radii.
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class PhantomSettings:
    """Still-cloth background update and the off-surface test (tracking/phantoms.py)."""

    #: Let the background follow the still cloth of a compressed clip
    #: (tracking/phantoms.py StillCloth). False: the temporal median throughout.
    follow_still_cloth: bool = True
    #: A pixel is still when no channel changed by more than this (DN) from the
    #: previous frame: 0, a codec's copied block is bit-exact (ITU-T H.264
    #: skipped macroblocks); a camera's sensor noise changes almost every pixel.
    still_dn: int = 0
    #: A still pixel replaces the background only where it departs from it by
    #: at least this share of the foreground threshold (1: where the codec's
    #: copy would be a foreground pixel by itself); below it the temporal
    #: median (noise averaged down) is the better estimate of the cloth.
    #: Half the threshold also followed the small offsets of high-quality
    #: MPEG-4 footage (outside clips D1/D2: 0.24-0.30 Mpx per clip against
    #: 1-4 kpx at 1) and moved their contact e by up to 0.001.
    still_min_frac: float = 1.0
    #: Least width of such a patch (x the expected ball radius) worth
    #: following: a ball is detected on its inner disc (0.6 radius, tracking/
    #: detect.py), so a smaller patch of codec error cannot pass for one.
    still_min_patch: float = 0.6
    #: Largest colour change (CIE 1976 Delta-E*ab) a codec makes to still
    #: cloth: pixels within still_protect_radius of a larger difference
    #: between frame and background are a ball or its shadow and keep their
    #: background. Twice the 99th percentile of the cloth's change across a
    #: keyframe measured on H.264 crf 28-32 re-encodes of our renders
    #: (5.4-6.1); a ball closer to the cloth colour is kept by its track.
    codec_max_de: float = 12.0
    #: Guard round such a patch (x the expected image radius): the soft
    #: rim of a blurred ball and the penumbra of its shadow; a wider guard
    #: would hold the codec's wake behind a rolling ball as a ghost that
    #: follows it.
    codec_guard_radius: float = 0.75
    #: Radius (x the expected image radius) round a known ball inside which
    #: the background is never replaced: the ball (1), its blur and shadow
    #: (the 1.8 radii build_background paints) and ~0.7 radius of position
    #: error of a track's last fix.
    still_protect_radius: float = 2.5
    #: Cushion nose height as a share of the ball diameter: 62.5-64.5 %
    #: (WPA equipment specifications for pool tables; from memory). The
    #: higher end gives the smaller contact inset, the safe side.
    nose_height_frac: float = 0.645
    #: Deepest a ball presses into the cushion rubber in a hard hit (mm;
    #: a few mm, from memory); a centre can come this much nearer the nose.
    cushion_compression_mm: float = 5.0
    #: Room for calibration error in a centre's distance from the nose line
    #: (mm): the largest static-ball error of calibrations we accept
    #: (README: outside footage <= 1 mm, MuJoCo renders <= 2.5 mm; refused
    #: or warned beyond) with a 4x margin.
    calibration_slack_mm: float = 10.0
    #: Widest pocket mouths of the pocketed presets (mm), for the pocket
    #: exemption: corner 5 1/8 in = 130 mm and side 5 5/8 in = 143 mm on
    #: pool tables (WPA), snooker narrower (WPBSA); from memory, rounded up.
    corner_mouth_max_mm: float = 135.0
    side_mouth_max_mm: float = 150.0
    #: A track with more than this share of its fixes off the surface is not
    #: a ball (a real ball is there at most during a cushion hit).
    off_surface_share: float = 0.5
