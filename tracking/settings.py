"""Tracking tolerances and defaults, each with its source.

Sections are owned by the stage that uses them; keep each number beside the
reason it has that value.
"""
from __future__ import annotations

from dataclasses import dataclass


# ===========================================================================
# Video input and camera calibration (tracking/video.py, calibrate.py,
# _table_edges.py, _camera_fit.py)
# ===========================================================================
@dataclass(frozen=True)
class CalibrationSettings:
    """Automatic calibration from the table's cushion-nose lines.

    Lengths in pixels unless named _mm; _mm lengths are on the table and are
    turned into pixels with the rough scale of the first table outline.
    """

    #: Frames combined (per-pixel median) before looking for the table: a
    #: median over >= 5 frames removes a ball that sits on an edge in fewer
    #: than half of them (common practice for background estimation).
    max_frames: int = 9
    #: Side of the central image box (fraction of width/height) whose median
    #: colour seeds the cloth region; the cloth fills the middle of an
    #: overhead shot (common practice when filming a table).
    seed_box_frac: float = 0.3
    #: Gaussian smoothing (px) of the image used to grow the cloth region.
    region_smooth_px: float = 1.0
    #: The cloth region stops at relative colour gradients (DN/px over the
    #: pixel's brightness in DN, strongest channel) above median + this many
    #: robust sigmas of that gradient over the seed box, and at least
    #: region_step_rel per px (2 DN/px on a cloth at 128 DN). Vignetting and
    #: lamp fall-off change the cloth by well under 1 % per px; a cushion,
    #: pocket or rail edge by several % per px, dim or bright (light falls on
    #: both sides of an edge alike). On a dim cloth (46 DN) a fixed 2 DN/px
    #: let the region leak over 2-3 DN/px cushion edges (our sweep render
    #: f06, a carom table at 0.35 exposure).
    region_grad_sigmas: float = 8.0
    region_step_rel: float = 2.0 / 128.0
    #: Added to the brightness (DN) before dividing, so near-black pixels
    #: (pockets, a dark room) do not turn sensor noise into steep gradients.
    region_level_floor_dn: float = 4.0
    #: Spacing (px) of the profiles taken across each side.
    profile_spacing_px: float = 2.0
    #: Profile sampling step (px) and half-width of the averaging strip
    #: along the edge (px).
    profile_step_px: float = 0.25
    profile_strip_px: float = 1.5
    #: On dim cloth the strip grows with the profiles' noise
    #: (_table_edges.noise_strip_px) so that a nose step of
    #: nose_contrast_min of the cloth level still clears edge_min_snr, up to
    #: profile_strip_max_px (half-length, px; the edge must stay in line with
    #: the profile over it: a provisional line 2 deg off blurs a 2 x 8 px
    #: strip by 0.6 px). 0.2: cushion tops of the cloth's own colour at 0.8 of
    #: its shade (our MuJoCo renders, see edge_signal) must still be found.
    #: Sweep render f10 (one lamp, vignetting, cloth ~35 DN at the short
    #: cushions), profiles along the true line: nose points on a dim short
    #: side 85 -> 263 of ~400 with a 1.5 vs 8 px strip.
    nose_contrast_min: float = 0.2
    profile_strip_max_px: float = 8.0
    #: Fit band edges with linear shading slopes beside the band
    #: (_table_edges.refine_band_edges). Light falling off towards a cushion
    #: or a highlight on a rounded nose pulls an edge fitted without them by
    #: a few tenths of a px, and with them the calibration's ball-plane RMS
    #: error fell a further 30-70% (renders and D1/D2), but in bands under
    #: ~3.5 px (coarse views) the slopes trade off against the edge
    #: positions: the camera height from the faces was then 6-22% off on
    #: plain synthetic tables (tests/test_calibrate.py). Off until that is
    #: resolved.
    band_shading_slopes: bool = False
    #: Tone curve undone before edges are located to sub-pixel (None: locate
    #: on the stored values). Optical blur acts on light, so a step blurred
    #: by the lens alone is symmetric only in linear light: through a
    #: 1/2.2-like curve its gradient peak moves 0.2-0.8 px to the dark side
    #: ("srgb", IEC 61966-2-1, undoes that; "none": the footage is linear).
    #: But blur added after encoding (resizing, lens-distortion remapping,
    #: filters on 8-bit frames) is symmetric in the stored values. Measured
    #: ball-plane RMS error of the calibration (mm, band_shading_slopes on),
    #: stored values vs srgb: our
    #: renders (blur in linear light) 0.25 vs 0.20, the outside footage D1/D2
    #: (blur on the stored values) 0.09/0.23 vs 0.13/0.35 with the camera
    #: height 3-4% vs 9% low. Stored values are the safer default.
    tone_curve: str | None = None
    #: Image on which profile edges are *detected* (they are located to
    #: sub-pixel on the grey image as before): "cloth", the projection on
    #: the cloth's colour direction (_table_edges.cloth_projection: a cushion
    #: top of the cloth's own colour, less lit, differs along that direction),
    #: or "gray" (channel mean). On our MuJoCo renders with cushion tops at 0.8
    #: of the cloth's shade (nose step ~6 DN grey) "gray" missed the nose on
    #: the short sides (corners 41 px off, or refused); D1/D2 unchanged.
    edge_signal: str = "cloth"
    #: Refuse a fit where the cloth inward of a fitted nose line shows an
    #: edge stronger than this fraction of the nose edge (side-averaged
    #: profiles, calibrate.inner_step_ratio): the nose was missed and a line
    #: further out taken. Measured: 0.07-0.24 on D1/D2 and synthetic tables,
    #: 0.12-0.36 on correct fits of our MuJoCo renders (cloth shade near the
    #: cushions). It flagged none of our wrong fits (a band of the cushion
    #: top is skipped with the face band); those were caught by the colour
    #: check below. Kept as a guard for a rail taken with the nose visible
    #: inward of it; 0.7 is a guess with 2x margin over correct fits.
    inner_step_max: float = 0.7
    #: Widest face band (mm on the cloth) skipped by that check: a vertical
    #: face of nose height h = 36.5 mm at the table's edge seen from >= 2 m
    #: over the centre shows <= ~20 mm (h * d / H); a cushion top is ~50 mm
    #: from nose to rail (common practice).
    face_band_max_mm: float = 25.0
    #: Refuse a fit whose four sides show colours outside the fitted nose
    #: lines (a strip cushion_strip_mm wide, on the cushion tops) whose
    #: chromaticities differ by more than cushion_chroma_max
    #: (calibrate.cushion_colour_spread): all cushions are covered alike, so
    #: a differing side was fitted to another line. Measured: 0.001-0.030 on
    #: correct fits (D1/D2, our renders, MuJoCo renders, synthetic tables),
    #: 0.16 and 0.53 where rail lines were taken (MuJoCo renders mj9613,
    #: mj9611). A strip of 12 mm stays on a cushion top (~50 mm wide).
    cushion_chroma_max: float = 0.08
    cushion_strip_mm: float = 12.0
    #: Gaussian derivative scale (px) for locating edges along a profile
    #: (~ the optical blur of a sharp camera; small so a narrow shadow band
    #: between cloth and cushion does not bias the nose edge).
    edge_sigma_px: float = 0.8
    #: Lean-back of the cushion face below the nose (deg from vertical; 0 =
    #: vertical). An undercut face is seen from above only where the sight
    #: line to the nose is further off vertical than the lean (calibrate.
    #: face_in_view); just past that it shows as a dark line a few tenths of
    #: a px wide inward of the nose, unresolved, that pulls a single edge's
    #: gradient peak inward by up to ~1.2 px (MuJoCo renders m02, mj8861,
    #: mj9103: short sides seen 25.7-26.5 deg off vertical); where the face is
    #: hidden no line model applies (a dip beside the edge there is something
    #: else: m01's short sides at 21 deg show one, with the edge on the nose
    #: to 0.13 px). Real cushions' lean is not in the WPA / WPBSA texts we
    #: hold: 25 deg is assumed, our MuJoCo scene's undercut (rubber cushion
    #: faces lean back roughly 20-30 deg, from memory). A vertical face (our
    #: own renderer) shows a band several px wide, fitted as a band (single
    #: edges there are few). None: no face-line model.
    face_lean_deg: float | None = 25.0
    #: Widest face line (px) modelled (a wider predicted width is taken as
    #: this: the profiles showed no resolved band, so the face is narrower
    #: than the camera, possibly biased by it, predicts).
    face_line_max_px: float = 1.5
    #: Narrowest face line (px) modelled, where the face is in view only for
    #: a focal within face_focal_unc: it sets only the line's position (half
    #: its width inward of the nose).
    face_line_min_px: float = 0.1
    #: Relative uncertainty of the fitted focal length (so of the view
    #: angle's tangent) when deciding whether a face may be in view: near-
    #: overhead the focal is set by the edge lines' perspective through a
    #: weak prior. Measured on MuJoCo tuning renders before the face model:
    #: -17.6 % to +11.9 %. 0.10 chosen on them: 0.15 also took in mj9102's
    #: short side (22.1 deg true), whose corners went 0.59 -> 1.62 px; 0.10
    #: took no side truly below 23.9 deg.
    face_focal_unc: float = 0.10
    #: The face line's shift is taken only where the side's own profiles show
    #: the line (tracking/_table_edges.face_line_shift): split into this many
    #: stretches along the side, whose scatter gives the noise (and its
    #: correlation along the profile) of the shift and of the dip below both
    #: plateaus ...
    face_line_blocks: int = 8
    #: ... each of which must pass a one-sided Student-t test at this false-
    #: alarm rate (t 3.50 at 8 stretches). Without the test the fit found
    #: 0.3-0.7 px lines on plain blurred steps (noise, a tone curve,
    #: sharpening) in 10-50 % of synthetic noise seeds.
    face_line_alpha: float = 0.005
    #: A profile edge counts if its gradient exceeds this many noise sigmas.
    edge_min_snr: float = 6.0
    #: Edges weaker than this fraction of the first cloth edge are ignored
    #: when looking for the nose (shading on the cushion top).
    edge_rel_min: float = 0.3
    #: Length (mm on the table) of flat profile that marks the cushion top,
    #: i.e. the end of the cloth -> (shadow / face band) -> cushion transition.
    #: A cushion is ~50 mm wide from nose to rail top (common practice), a
    #: visible face or shadow band at most ~h = 36 mm wide at 45 deg.
    plateau_mm: float = 18.0
    #: Widest band (mm on the table) accepted between cloth and a cushion top
    #: of the cloth's own colour: a face of nose height h = 36.5 mm seen at up
    #: to ~45 deg off vertical (wider dark stripes are balls or marks).
    band_max_mm: float = 40.0
    #: Search window of the first pass, inward / outward of the rough
    #: outline, as a fraction of the table width in px.
    search_in_frac: float = 0.10
    search_out_frac: float = 0.10
    #: ... plus how far the region's rim reaches beyond the outline
    #: (_table_edges.region_reach_px); a side whose main line holds fewer than
    #: search_min_share of its profiles is searched again with the outward
    #: window times each factor of search_out_grow in turn, where the cloth
    #: is dim enough for the profile strip to have grown (noise_strip_px; a
    #: region stopped short of a dim cushion: sweep render f06, dim carom
    #: table, needed x2 on its short sides, then 0.31 px; f07, one low lamp,
    #: 84 px short on a 72 px window, then fits from its first 12 frames but
    #: 3.9 px off - not yet right). On bright cloth a grown window took the
    #: rail (f04h32, H.264 crf 32, 33-76 px off as pool-8ft, no warning).
    search_min_share: float = 0.15
    search_out_grow: tuple[float, ...] = (1.0, 2.0, 3.0)
    #: Half-width (px) of the search window of the refinement passes around
    #: the nose line predicted by the previous camera fit.
    refine_window_px: float = 10.0
    #: Stretches of cushion excluded next to each pocket (mm along the
    #: nose line from the corner, and either side of a side pocket's centre).
    #: WPA pocket mouths are ~4.9-5.1 in (corner) and ~5.4-5.6 in (side)
    #: (from memory); the jaws add a cut of similar length.
    corner_pocket_mm: float = 170.0
    side_pocket_mm: float = 160.0
    #: Stretch excluded at the corners of a table without pockets (mm): the
    #: cushion noses meet in a rounded or mitred joint (common practice).
    corner_plain_mm: float = 40.0
    #: First pass: only the edge points on each side's innermost
    #: well-supported line (calibrate.main_line) are fitted; points farther
    #: than this (px) from it lie on another line (rail) or a ball. Edge points
    #: scatter by a few tenths of a px, a lens bends the line by a few px
    #: over a side (absorbed by the parabola).
    line_tol_px: float = 1.5
    #: ... of the lines holding at least line_share of the best-supported
    #: line's points, the innermost is taken (1.0: the best-supported line);
    #: when the fit then fails its checks it is tried again with
    #: line_share_retry (a faint nose found on only part of a side, the rail
    #: on the rest). MuJoCo render mj9621: nose on ~25% of the x0 profiles,
    #: rail on 75%. A first share of 0.5 took a shadow line on the cloth of
    #: mj8403 (x0, 30 points 22 px inward of the nose) once the cloth region
    #: changed (e5db95e).
    line_share: float = 1.0
    line_share_retry: float = 0.15
    #: Robust fitting: residual scale (px) of the soft-L1 loss, and the
    #: outlier cut (px) applied between passes.
    loss_scale_px: float = 0.5
    outlier_px: float = 2.0
    #: Refinement passes (resample edges along the fitted curved lines).
    passes: int = 3
    #: Fit the second radial coefficient k2 as well as k1. k1 alone describes
    #: most lenses over a table-sized field (OpenCV calib3d docs recommend
    #: adding higher terms only for wide-angle / fisheye lenses).
    fit_k2: bool = False
    #: Prior on the horizontal field of view (deg, sigma in deg), used when
    #: no cushion-face band fixes the camera height: plane targets seen almost
    #: square-on do not fix the focal length (only focal / height). 60 +/- 25
    #: deg spans common video lenses (from memory). It moves the cloth plane
    #: relative to the measured nose plane, hardly the ball-centre plane.
    hfov_prior_deg: float = 60.0
    hfov_prior_sigma_deg: float = 25.0
    #: A field of view given by the user (lens data sheet; ``hfov_deg`` of
    #: calibrate_auto) replaces that prior, with this sigma (deg): lens focal
    #: lengths are nominal to about +/-5 % (from memory), 2.3 deg at 60 deg,
    #: and video modes may crop the sensor. Where cushion faces measure the
    #: field of view the measurement is kept; a given value further off than
    #: ``hfov_given_conflict_deg`` gets a note. Values outside
    #: [hfov_given_min_deg, hfov_given_max_deg] are refused: a pinhole
    #: (rectilinear) lens has under 180 deg, and below 5 deg a 3 m table
    #: fills the view only from over 30 m away.
    hfov_given_sigma_deg: float = 2.0
    hfov_given_conflict_deg: float = 6.0
    hfov_given_min_deg: float = 5.0
    hfov_given_max_deg: float = 150.0
    #: Cushion-face band (between cloth and cushion top) used to fix the
    #: camera height: it must show on this fraction of a side's profiles, be
    #: at least band_min_mm wide (mm on the table; narrower carries too little
    #: height information), pass the L/W width-ratio test within
    #: band_ratio_tol (see calibrate._band_check), and fit the face-foot line
    #: to band_resid_px RMS.
    band_min_frac: float = 0.5
    band_min_mm: float = 1.5
    #: (0.25 -> 0.30: a synthetic carom table with vertical faces, 2-3 px
    #: bands, sat at 0.26 once edges were detected on the cloth projection.)
    band_ratio_tol: float = 0.30
    band_resid_px: float = 0.6
    #: ... or to band_resid_rel x the RMS of the nose-line fit, whichever is
    #: larger: the foot edge (face foot or shadow against the cloth) has less
    #: contrast and, in a band only a few px wide, interacts with the nose
    #: edge, so it scatters more. Measured on our renders at 960x540: foot/nose
    #: RMS 1.0-2.2 where the face band was real (the fitted focal then within
    #: 5% of the truth), 4.8 where an edge was taken at the wrong line.
    band_resid_rel: float = 3.0
    #: Warn when the observed table aspect ratio departs from the preset's by
    #: more than this fraction (a different table size; WPA tolerance is
    #: 3.2 mm on 1270 mm, 0.25%).
    aspect_warn_frac: float = 0.03
    #: ... and refuse beyond this: pool, snooker and carom playing surfaces
    #: are all 2:1 (WPA, WPBSA, UMB; feltlab.standards), so an outline 15 %
    #: off is no table of ours but a line taken at the wrong edge (our sweep
    #: render f09m: 1.20:1 with k1 -1.44, 17 px off, accepted with warnings).
    aspect_max_frac: float = 0.15
    #: Warn when the fitted radial distortion |k1| exceeds this: common video
    #: lenses stay within ~0.3 in OpenCV's normalised model, wide action
    #: cameras reach it (from memory); a larger fitted k1 usually means an
    #: edge was found on the wrong line and the fit bent the lens to reach it
    #: (our MuJoCo render mj9104: k1 -0.66, corners 41 px off).
    k1_warn: float = 0.4
    #: Note when an error of corner_note_edge_px on one nose line would move
    #: the fitted cloth corners by more than corner_note_px
    #: (calibrate.corner_gain, root-sum-square over the four lines). 0.25 px:
    #: what our nose lines reach on clean footage (mid-side within 0.13 px of
    #: truth on D1/D2, 0.1-0.4 px on our and MuJoCo renders' long sides); the
    #: short sides of MuJoCo renders are off by up to 1.2 px where an undercut
    #: face just shows. Measured gains (truth presets): 0.75-1.0 where the
    #: face-foot lines fix the height, 1.7-2.4 on the other clips, 4.7 / 6.2
    #: / 8.7 on the MuJoCo tuning renders m02 / m03 / mj8861 (true corner
    #: error 3.05 / 1.13 / 0.87 px); fresh MuJoCo seed 10412: 8.1 (0.80 px).
    corner_note_edge_px: float = 0.25
    corner_note_px: float = 1.0
    #: Where the face-foot lines fix the camera's height (8 lines, 7-8
    #: unknowns), note when their RMS residual exceeds foot_note_px or any
    #: line's median residual exceeds line_offset_note_px: the lines do not
    #: meet one camera. Measured on the sweep tuning clips (our renderer):
    #: foot RMS 0.18-0.58 px and line offsets <= 0.36 px where the corners were
    #: within 0.5 px; foot RMS 0.82 / 0.85 px on the H.264 recodes f01ch (crf
    #: 28) and f04h32 (crf 32), corners 2.05 / 1.68 px off, and a line offset
    #: of 2.32 px on f07 (its true preset; 3.87 px). Fresh renders (seeds
    #: chosen before looking, clean): foot RMS 0.19-0.69 px.
    foot_note_px: float = 0.75
    line_offset_note_px: float = 0.5
    #: Refuse a fitted camera higher than this above the cloth (mm): a table
    #: room's ceiling is ~2.5-4 m (common practice); 10 m leaves room for halls.
    #: Edge points on the wrong line (a rail instead of the nose) give fits
    #: with the camera 15-30 m up on our dim renders.
    max_camera_height_mm: float = 10000.0
    #: After a refusal for an absurd camera height H with one preset, a preset
    #: of the same family (same pocket layout, nose height and ball: pool
    #: 9/8/7 ft) is tried only if H x (its length / the refused preset's
    #: length) stays below max_camera_height_mm x this factor
    #: (table_choice._scaled_height_absurd: similar figures). The factor
    #: leaves room for the pocket stretches, fixed in mm and so different as
    #: fractions of the side. Our choice.
    scale_skip_factor: float = 1.5
    #: Note when the cloth just inside the brightest side is more than this
    #: many times as bright as inside the dimmest (calibrate.side_light_levels):
    #: light that falls off that much comes from a low lamp at one end, which
    #: meets the far cushions at a grazing angle, so a lit face or a highlight
    #: on the rounded nose moves their brightness edge off the nose line.
    #: Measured: sweep render f07 (one low lamp at one end, ambient 0.05)
    #: 8.3, its far noses found 2.7-3.7 px outward, corners 3.9 px off with a
    #: 0.47 px residual; 1.03-1.72 on 31 other clips that calibrate (D1/D2,
    #: our renders with 1-4 lamps, dim, vignetted; MuJoCo renders). Between
    #: them, our choice.
    light_ratio_note: float = 4.0
    #: A nose point counts only if its profile, out to the end of the
    #: cushion-top plateau beyond it, stays this many px inside the picture
    #: (_table_edges.edge_points_along): past the frame the samples repeat
    #: the border row, so an edge there is the frame's and a flat "cushion
    #: top" the repeated row. Our sweep render f09m (MPEG-4 part 2 at 300
    #: kbit/s, the near nose running off a 540 px frame) calibrated along the
    #: frame's bottom edge: focal 1470 vs 752 px, 7 px at the corners, 18 mm
    #: per ball, no warning.
    border_margin_px: float = 1.0
    #: Warn when more than this fraction of a side's fitted nose line lies
    #: within border_margin_px of the picture's edge or off it
    #: (calibrate.off_frame_share): no point was measured there, the fit
    #: extrapolates (a synthetic table, tests/test_calib_frame_edge.py, with
    #: its near nose 2-10 px inside a 540 px frame: 21 % of y0, corners within
    #: 0.2 px; nearer the edge it is refused as cut off by the frame).
    off_frame_note: float = 0.05
    #: Refuse a fit whose RMS edge residual exceeds this (px).
    max_residual_px: float = 3.0


# ===========================================================================
# Detection and tracking (tracking/detect.py, kalman.py, assign.py, labels.py,
# pipeline.py)
# ===========================================================================
@dataclass(frozen=True)
class DetectionSettings:
    """Ball detection in one frame; lengths in pixels unless named _mm.

    Radii are given as fractions of the expected ball radius in px
    (Calibration.ball_radius_px), so the same settings serve every lens and
    resolution.
    """

    #: A resting "ball" whose centre lies between a corner point and that
    #: pocket's mouth (tracking/pockets.py) is the pocket itself: no slate
    #: under it. The narrowest corner mouth of our pocketed presets: snooker
    #: ~3 3/8 in = 86 mm (pool 4 7/8-5 1/8 in, WPA); both from memory.
    corner_mouth_min_mm: float = 86.0
    #: Frames sampled for the temporal-median background (a median over >= ~15
    #: samples rejects a ball present in fewer than half of them; common practice).
    background_samples: int = 31
    #: Noise floor for the foreground threshold, in multiples of the robust
    #: (MAD) noise sigma of the frame-background difference (6 sigma: < 1e-8
    #: false pixels per frame for Gaussian noise; standard tail probability).
    fg_sigma: float = 6.0
    #: Unused since the foreground test moved to CIELAB (see fg_min_de); kept
    #: so configs that set it still load. Was: minimum RGB colour distance
    #: (DN, 0..255 scale) counted as foreground, whatever the noise estimate (compression blocks reach ~5-8 DN; from
    #: inspecting MPEG-4 part 2 output at default quality, from memory).
    fg_min_dn: float = 9.0
    #: Minimum CIE 1976 Delta-E*ab counted as foreground whatever the noise
    #: estimate (the foreground test works in CIELAB): ~1.3 x the just-
    #: noticeable difference Delta-E ~ 2.3 (Sharma, Digital Color Imaging
    #: Handbook, CRC 2003; from memory); 9 DN at mid-grey is ~3.5.
    fg_min_de: float = 3.0
    #: Lower bound of the Delta-E noise sigma (a noiseless render).
    noise_min_de: float = 0.2
    #: Frames (of the background samples) whose Delta-E to the background
    #: gives the noise level; the per-pixel temporal median needs >= ~5.
    noise_frames: int = 7
    #: Width (x expected radius px) of the region over which the local noise
    #: sigma is averaged: ~4 ball diameters, smaller than vignetting scales.
    noise_window: float = 8.0
    #: Minimum Gaussian-weighted (sigma = r/2) foreground of a candidate (0..1;
    #: a filled disc scores 0.86; 0.6 keeps a ball whose disc is mostly above
    #: threshold, e.g.
    #: a dark ball partly in its own shadow, and drops thin edge strips).
    disc_score_min: float = 0.6
    #: Mean foreground strength inside 0.6 radius of an accepted centre must
    #: reach this many thresholds (a ball differs from the cloth over its whole
    #: disc; compression ringing along cushion edges does not).
    min_inner_contrast: float = 1.0
    #: Local maxima of the disc score closer than this (x radius) are merged.
    #: Two touching balls have centres 2 radii apart, so anything < 2 keeps them.
    nms_radius: float = 1.3
    #: Rays cast from the first centre estimate for the edge fit (64 rays give
    #: a centre noise sqrt(2/64) = 0.18 of the per-ray edge noise; circle-fit
    #: variance, e.g. Chernov, "Circular and Linear Regression", 2010).
    n_rays: int = 64
    #: Edge search window along each ray, x expected radius.
    ray_min: float = 0.55
    ray_max: float = 1.6
    #: Radial sampling step along a ray (px).
    ray_step_px: float = 0.25
    #: Where a ray ends on another ball (foreground at its end, aimed at
    #: another seed or fit 1.6-2.6 radii away: a touching or near neighbour),
    #: the edge is the strongest colour change between touch_edge_lo and
    #: touch_edge_hi x the expected radius (detect._colour_edge_points; rays
    #: that end on the ball's own motion smear keep 0.8-1.25, where the
    #: narrow window cost fast balls fitted as circles 2-5 mm). Rigid
    #: balls: the boundary with a neighbour, or with the cloth showing in a
    #: gap, lies at one radius from the centre, so the window need only hold
    #: the centre's error during the fit plus the edge blur (~1 px at 12-15
    #: px radius: 0.1). A wider window (0.8-1.25 until 2026-12-03) let the
    #: neighbour's own markings beyond the contact point win: a stripe's or
    #: number circle's edge 1.1-1.25 radii out pulled the centre 2-3 px into
    #: the neighbour (blue on blue in rack9931, black on blue in rack8853).
    touch_edge_lo: float = 0.9
    touch_edge_hi: float = 1.1
    #: Gaussian pre-smoothing of the difference image before differentiating
    #: (px); small so that a 10 px radius edge is not biased.
    edge_smooth_px: float = 0.8
    #: Tukey biweight constant, x robust residual scale (4.685: 95% efficiency
    #: under Gaussian noise; Holland & Welsch 1977).
    tukey_c: float = 4.685
    #: The fitted silhouette radius must lie within this fraction of the
    #: expected one for a free-radius fit to be trusted; otherwise the radius is
    #: fixed at the expected value (occlusion, cushion overlap, clusters).
    radius_tol: float = 0.2
    #: The silhouette is the outermost drop along a ray of at least this
    #: fraction of the ray's strongest drop (detect._edge_points: a shadow's
    #: soft outer edge is weaker; inner edges such as a number circle are
    #: never outside the outline).
    edge_outer_frac: float = 0.15
    #: Fraction of rays that must carry an inlying edge to accept a detection.
    min_support: float = 0.4
    #: Floor of the per-detection centre sigma (px): compression and the
    #: renderer's pixel grid correlate neighbouring rays, so the formal circle-
    #: fit sigma is optimistic below ~0.05 px (Crocker & Grier 1996 reach
    #: ~0.05 px with centroids; we do not claim better).
    sigma_floor_px: float = 0.05
    #: Model error of the silhouette centre (px), added in quadrature to the fit
    #: sigma: shading and shadows move the photometric edge off the true limb
    #: unevenly around the ball. Measured on outside renders (D1/D2 footage):
    #: per-detection centre errors of ~0.2 px per axis (RMS) with the fit sigma
    #: at 0.05-0.1 px; 0.2 makes their mean squared normalised error ~1.
    model_sigma_px: float = 0.2
    #: Second edge stage (detect._limb_points): each pixel near the rim is
    #: split, in linear light, into a ball part and a cloth part (directions
    #: from windows just inside and just outside), and the limb is where the
    #: cloth part reaches half its outside level (the 50 % coverage contour).
    #: EXPERIMENTAL, off by default. On closed-form Lambertian balls at full
    #: colour resolution (tests/test_detect_limb.py) it removes the dark-limb
    #: bias of the first stage (centre 0.26 -> 0.03 px RMS at r 11 px, blur
    #: 0.9 px; radius bias -0.19 -> -0.07 px). On rendered clips the recovered
    #: diameter mostly moves to the published one (bench diam_mm: D1 55.4 ->
    #: 57.0, bench_restitution 55.8 -> 57.4, fresh pool renders 56.2-59.3 ->
    #: 56.5-57.5; but a carom render 61.3 -> 59.7 for 61.25) while the
    #: centres get worse (rmse_rest D1 1.07 -> 1.79 mm, drill_cut 0.30 ->
    #: 0.80, 3 of 4 fresh renders worse, only bench_restitution better 0.30
    #: -> 0.11; rmse_move worse on 5 of 9 clips):
    #: with 4:2:0 chroma subsampling (MPEG-4 and nearly all consumer video)
    #: colour differences are blurred at half resolution in gamma space, so
    #: the split no longer follows coverage (closed form with simulated 4:2:0:
    #: 0.03 -> 0.25 px), and the contact shadow darkens the cloth next to the
    #: limb faster than the straight-line shadow model allows.
    limb_linear: bool = False
    #: Edge location on a shade-free colour difference (detect.shade_free_de)
    #: instead of Delta-E*ab: darkening of the cloth along its own colour
    #: (the ball's cast shadow) does not count. In CIELAB a pure intensity
    #: scale k of a colour multiplies (L* + 16, a*, b*) by k^(1/3) (CIE
    #: 15:2004 cube-root branch, Y/Yn > 0.008856), so a shadow keeps that
    #: vector's direction; the shade-free difference is the pixel vector's
    #: part across the cloth's direction plus any brightening past the cloth
    #: or darkening deeper than a shadow (shade_min_light).
    #: Seeds, contrast tests and the streak axis keep Delta-E (for the streak's
    #: rim see streak_shade_free). Only the silhouette
    #: edge moves: on the side away from the lamp the limb is dark and runs
    #: into the ball's own shadow, so with Delta-E the cloth just outside
    #: still reads as foreground and the steepest drop sits inside the limb.
    #: On by default since 2026-12-02 (integrator's call on the figures below:
    #: large gains on the outside engine's renders - D1 and two of three
    #: MuJoCo renders of our own - and on 3 of 4 fresh renders of ours, D2
    #: neutral; the cost is a tail of 2-5 mm misses on balls smeared 0.5-1
    #: radius, the same class that Delta-E misses by 2-3 mm). Measured
    #: (2026-12-02): outside-footage score (auto calibration) D1 0.77 ->
    #: 0.43 mm, D2 0.64 -> 0.64 (median 0.64 -> 0.62), recall/precision 1.00
    #: both ways, e error median 0.0042 both, max 0.0068 -> 0.0095; truth-
    #: camera bench rmse_rest / rmse_move (mm): D1 1.06/0.60 -> 0.50/0.40,
    #: D2 0.43/0.58 -> 0.44/0.57, drill_cut 0.28/0.64 -> 0.34/0.50,
    #: bench_restitution 0.30/0.15 -> 0.24/0.12; fresh varied renders
    #: (seeds 8201-8204, chosen before looking) rest 0.69/7.16/1.34/0.55
    #: -> 0.44/1.23/1.12/0.46, move 0.60/5.09/3.08/1.47 -> 0.50/0.58/1.37/
    #: 1.57. Per detection (no tracker) the moving RMSE on 9 fresh clips is
    #: higher on 4 (by 0.06-0.46 mm, from a few large errors: rack 8212 2.22
    #: -> 2.68, 960x540 30 fps 8301 1.21 -> 1.46, while their medians drop
    #: 0.40 -> 0.24, 0.43 -> 0.30), within 0.01 on 2, lower on 3 (8201 0.73
    #: -> 0.62, 8203 3.36 -> 1.34, 8302 3.21 -> 2.91); D2's resting yellow-
    #: stripe ball on blue cloth gets worse (detection median 0.39 -> 0.49
    #: mm). MuJoCo renders (scripts/make_mujoco_clips.py, seeds 8401-8403,
    #: 1280x720 60 fps, chosen before looking), truth-camera rmse_move /
    #: rmse_rest: 4.50/2.19 -> 0.80/1.99, 3.79/0.98 -> 3.83/0.98, 1.40/2.68
    #: -> 0.44/0.21 (the 8402 tail: a ball smeared 0.5-1 radius, where both
    #: maps miss by 2-3 mm and this one by 3-5). The recovered diameter
    #: shrinks on two of them (diam_mm 54.4 -> 53.0, 57.8 -> 53.9): dark
    #: limbs lose contrast. Renders 8101-8104 were the diagnosis set (the
    #: shade_min_light floor came from a black ball in 8103). Closed-form
    #: shadowed balls: tests/test_limb_shade.py.
    edge_shade_free: bool = True
    #: A ball that differs from the cloth mostly by being darker along the
    #: cloth's own colour (a black ball; a dark ball of the cloth's hue) loses
    #: most of its contrast in the shade-free difference and is located on
    #: Delta-E: the shade-free map is used when the mean inside 0.6 radius
    #: keeps at least this share of the Delta-E one. Closed-form Lambertian
    #: balls (tests/test_limb_shade.py colours: orange, red, blue, white,
    #: yellow on green, blue, red cloth) keep 0.84-1.0, a black ball
    #: 0.41-0.48; 0.65 is our choice between the two groups.
    edge_shade_free_min_ratio: float = 0.65
    #: A ball whose rim is darker than the cloth along the cloth's own colour
    #: (a black ball: its rim keeps little contrast on the shade-free map,
    #: whatever its white number circle does inside, which can keep the inner
    #: disc's ratio above edge_shade_free_min_ratio and pull the fit onto the
    #: number) has its edge located on the lightness difference |L* - L*_bg|
    #: (detect.edge_map; the outermost clear drop, as on the other maps). Its
    #: outline is a step in lightness, and video carries lightness at full
    #: resolution while colour is sampled at half resolution (4:2:0, common
    #: practice in MPEG/H.264) and quantised in codec blocks: on dark cloth a
    #: black ball differs from the cloth largely by colour, and Delta-E there
    #: showed 16 px chroma blocks that moved the fit 3 px (1000 fps render
    #: varied11012). Test: median of the shade-free map over the annulus
    #: dark_rim_inner-dark_rim_outer r below dark_rim_ratio x Delta-E's median
    #: (medians: a number circle reaching into part of the annulus does not
    #: decide). Measured at truth centres: black balls on green, blue and dark
    #: purple cloth (our renders, 4 clips) 0.26-0.46; every other ball on our
    #: and MuJoCo renders (stripes, maroon, blue on blue, cloth-coloured; 11
    #: clips) 0.58-1.00, maroon on blue cloth (MuJoCo mj9911) the lowest;
    #: closed-form black balls of 0.5-4 % reflectance with a white cap on
    #: green, blue, red cloth 0.39-0.55 (tests/test_detect_dark_rim.py). 0.55
    #: is our choice between the groups; a black ball as light as a dark cloth
    #: (reflectance within ~2x of it) differs from it by colour and stays on
    #: the shade-free map. Not near a pocket (detect._ball_room): a pocket's
    #: hole is a dark rim too, and fitted as a black ball it became a phantom
    #: that moved the balls' size ratio (7-ft table test, tests/test_ball_size).
    dark_rim_luminance: bool = True
    dark_rim_ratio: float = 0.55
    dark_rim_inner: float = 0.6
    dark_rim_outer: float = 0.95
    #: Least share of the light a cast shadow keeps (linear light): darker
    #: than that is not shadow and counts in the shade-free difference (a
    #: black ball's limb). Under one lamp in a dark room the umbra keeps
    #: ~10-30 % (ambient and bounce light; from memory), under a row of
    #: lamps far more; 0.15 is our choice at the low end.
    shade_min_light: float = 0.15
    #: Reference windows of detect._limb_points: a guard band of
    #: limb_guard_px either side of the first limb estimate (> 2 sigma of a
    #: sharp video camera's blur, lens plus demosaicing ~0.7-1 px; from
    #: memory), then limb_inner_px inside (at most half of what is left of
    #: the radius) and limb_outer_px outside.
    limb_guard_px: float = 2.0
    limb_inner_px: float = 2.0
    limb_outer_px: float = 3.0
    #: Starting blur sigma (px) and the floor of the measured one.
    limb_blur0_px: float = 1.0
    limb_blur_min_px: float = 0.3
    #: Rays whose edge is wider than this multiple of the ball's median
    #: edge width (motion smear along the direction of travel) keep the
    #: first-stage point.
    limb_ray_blur_ratio: float = 1.8
    #: Smallest angle between the ball's and the cloth's linear colours
    #: (sine) for the split into ball and cloth parts: the split's noise
    #: grows as 1/sine; 0.1 (6 deg) is our choice, not a measured optimum.
    limb_min_sin: float = 0.1
    #: Passes of the second stage (each re-centres the rays on the last fit).
    limb_iters: int = 3
    #: Photometric model fit of each ball's image after the silhouette fit
    #: (detect.fit_ball_model): disc of the expected radius with a blurred
    #: rim, per-sector limb-darkened shading and a shadow term, over the known
    #: cloth, in linear light. EXPERIMENTAL, off by default: on closed-form
    #: Lambertian balls (tests/test_detect_model.py) it removes the dark-limb
    #: bias (silhouette 0.2-0.4 px -> < 0.1 px), but on rendered clips it is
    #: not better overall (detection RMSE lower on D1 moving and on 4 of our
    #: renders, higher on D2 and on 3 of 4 fresh renders: shadows, stripes
    #: and compression break its shading model) and it costs ~5-8x the
    #: detection time.
    model_fit: bool = False
    #: Undo the sRGB transfer curve (IEC 61966-2-1) before the model fit:
    #: video is gamma-encoded (sRGB / Rec. 709 curves are close), and light
    #: adds linearly only before encoding.
    model_linear_light: bool = True
    #: Smallest image radius (px) for the model fit (below ~4 px the rim is
    #: one or two pixels and the silhouette fit is as good).
    model_min_radius_px: float = 4.0
    #: Fit window: the ring from radius - max(model_inner_px, model_inner x
    #: radius) to radius + model_out_px about the first centre (the outer
    #: part pins the blur, the inner part the shading next to the rim; the
    #: middle of the disc adds nothing on the rim's position).
    model_inner: float = 0.3
    model_inner_px: float = 3.0
    model_out_px: float = 3.5
    #: The ball's shading is modelled separately in this many angular
    #: sectors (smooth tent functions), each a + b nz in every channel, so
    #: stripes, numbers and any lamp layout are followed round the rim.
    model_sectors: int = 12
    #: Add a third shading term per sector, c rho/r (the surface normal's
    #: horizontal part): Lambert's n.l for a lamp off the vertical is
    #: a + b nz + c (rho/r) cos(phi - phi_lamp), and with a + b nz alone the
    #: lamp-side tilt of the shading is taken up by moving the rim.
    #: EXPERIMENTAL, off: it did not help where it was meant to (sweep render
    #: f03b's red ball on red cloth, resting, truth camera: model-fit centre
    #: 0.53 px off across 30 frames without it, 0.51 px with it).
    model_rho_term: bool = False
    #: Decay length of the shadow term next to the rim (x radius): a lamp
    #: 1-2 m above a 57 mm ball casts a shadow a few tenths of a radius long
    #: near the contact point (geometric, R tan(zenith angle)).
    model_shadow_decay: float = 0.3
    #: Largest edge-blur sigma fitted (x radius): motion blur of a swept
    #: disc is a box of length 2 L along the motion, variance L^2/3; L up to
    #: ~1 radius (faster balls keep the silhouette centre).
    model_max_motion: float = 0.6
    #: Fit the anisotropic (motion) part of the rim blur; False: one sigma.
    model_motion: bool = True
    #: Starting blur sigma (px; a sharp lens plus demosaicing ~0.7-1 px) and
    #: Gauss-Newton iterations.
    model_blur0_px: float = 1.0
    model_iters: int = 8
    #: Iterations of plain least squares before the Tukey weights start (a
    #: misplaced rim has its largest residuals where the centre information
    #: is; robust weights from the start would freeze it).
    model_ls_iters: int = 3
    #: Stop when the centre moves less than this (px): well below the
    #: 0.05 px sigma floor.
    model_tol_px: float = 0.005
    #: A model centre further than this (x radius) from the silhouette centre
    #: is rejected (the silhouette centre is kept).
    model_max_shift: float = 0.25
    #: Motion streaks (tracking/streak.py): when the foreground blob round a
    #: seed is a stadium (a swept disc) with a smear length over
    #: streak_min_len radii, its centre comes from a point-symmetric fit all
    #: round the streak instead of the circle fit (which reaches only
    #: ~1.3 radii from its seed and settles on one end of a long smear).
    #: 1.0: below about one radius the circle fit reaches both ends (its
    #: outermost-drop search goes to 1.3 radii, a smear's ends lie at
    #: 1 + L/2r) and both fits measured alike on our fast renders.
    #: Re-seeding the circle fit from the outline (detect._outline_reseed),
    #: for a fit located on Delta-E while a shade-free map exists: where a
    #: disc of the known radius best covers the shade-free map's not-cloth
    #: pixels (weight clip(de / level, 0, 1), level outline_level_frac x the
    #: patch's outline_level_pct percentile: the ball's own contrast; score
    #: the disc's mean minus that of the annulus r + 1 px .. outline_ring_out
    #: r), searched within outline_search r of the seed; the fit is redone
    #: there only where the ball keeps outline_reseed_min_ratio of its Delta-E
    #: contrast on the shade-free map. Measured there (mean inside 0.6 r,
    #: shade-free / Delta-E, truth camera): MuJoCo mj9911's blue ball on blue
    #: cloth 0.99-1.00 (seeds on its shadow, fits 4.8-5.4 px off -> 0.6-1.5);
    #: sweep f05b's black ball with its white number 0.69-0.80 (the refit
    #: went to the white part, 0.2-1.8 -> 1.3-2.7 px). 0.9 lies between
    #: (chosen on these clips); 1.0 is a ball with no part darker than the
    #: cloth along the cloth's own colour.
    outline_reseed: bool = True
    outline_search: float = 1.0
    outline_ring_out: float = 1.4
    outline_reseed_min_ratio: float = 0.9
    outline_level_frac: float = 0.5
    outline_level_pct: float = 90.0
    streak_fit: bool = True
    #: Locate a streak's rim (tracking.streak.refine_streak) on the same edge
    #: map as the circle fit (detect.edge_map: shade-free where the ball keeps
    #: its contrast there), not on Delta-E; the streak's axis and length still
    #: come from the Delta-E blob. On Delta-E the dark band of a ball of the
    #: cloth's colour (its dim limb and its contact shadow on the cloth, which
    #: differ from the cloth only by darkness) counted as ball: MuJoCo render
    #: m05 (blue on blue, 30 fps, sweep tuning clip) had streak fits of radius
    #: 1.15-1.23 r pulled 1.0-1.7 px towards the shadow side, alternating frame
    #: by frame with circle fits 0.5-1 px towards the lamp; ball-ball / cushion
    #: e error 0.085 / 0.147 -> 0.036 / 0.030 with this on (figures in the
    #: commit and DET9's report).
    streak_shade_free: bool = True
    streak_min_len: float = 1.0
    #: Longest smear searched, x radius (blob window 1 + streak_max_len/2 radii):
    #: a ball at 6 m/s (a hard break, common practice) over a 0.95 x 1/30 s
    #: exposure smears 190 mm, 6.6 radii of a 57.15 mm ball; 8 is the end of
    #: the stadium moment table.
    streak_max_len: float = 8.0
    #: Rays of the streak fit and their search window, x the stadium's reach
    #: in each direction; the outermost clear drop within streak_outer x reach.
    streak_rays: int = 96
    streak_ray_min: float = 0.3
    streak_ray_max: float = 1.35
    streak_outer: float = 1.2
    #: Edge position: first moment of the drop over its run above this share
    #: of the peak (a smeared end is a ramp: its middle).
    streak_run_frac: float = 0.5
    #: A drop counts as clear when >= this share of the ray's strongest.
    streak_strong_frac: float = 0.15
    #: Even harmonics of the point-symmetric contour (rho(phi) up to cos/sin
    #: of this order); re-cast passes.
    streak_harmonics: int = 4
    streak_iters: int = 4
    #: Centre sigma added in quadrature (per axis), x smear length px: along-
    #: motion errors of 0.012-0.026 L RMS (across 0.2-1 mm) measured on our
    #: 30 and 60 fps fast renders (streaks of 1.5-3 radii; shadows and
    #: compression make the two ends differ); 0.05 there gave streak
    #: detections a mean squared normalised error of 0.03-0.4.
    streak_sigma_frac: float = 0.025
    #: A circle-fit detection whose centre lies within this many radii of a
    #: streak's smear path is that streak's end and is dropped (a touching
    #: ball is >= 2 - L/(2r) radii from the path: safe for L < 2.8 r).
    streak_end_sep: float = 0.6
    #: A streak's ends must be ramps: the median steepest drop on the rays
    #: within 22.5 deg of the smear axis, at either end, at most this share of
    #: the sides'. A ramp L px long under an edge blur b px would give
    #: ~2.5 b / L in coverage, but the colour difference rises fastest at low
    #: coverage, so measured on our fast renders smears of 1.2-2.4 radii gave
    #: 0.45-0.8 (one 1.26), while resting balls stretched by their shadow
    #: (outside footage D1) gave 1.04-1.7. Both this and streak_min_len must
    #: hold; our choice between the two groups.
    streak_max_end_ratio: float = 0.9
    #: The end-ramp test applies to smears shorter than this many radii
    #: only: a cast shadow stretches a resting ball's blob by about a radius
    #: at most (lamp <= 45 deg off the vertical: R tan 45 deg past the limb;
    #: 0.8 r measured on D1), while beyond ~2 radii no pixel is covered for
    #: the whole exposure (peak coverage 2r/L), the sides weaken as much as
    #: the ends and the ratio says nothing (1.3 measured at L = 3.9 r). Two
    #: touching balls read as a stadium of L = 2.4 r (closed-form moments of
    #: two discs), so the test must still apply there: 3.0.
    streak_ratio_max_len: float = 3.0
    #: The blob's width across its axis through the centroid, over its widest,
    #: must reach this: a swept disc's support is 2r wide all along its middle
    #: (1.0), two touching balls pinch to the edge blur between them (~0.2).
    streak_min_waist: float = 0.75
    #: The same for the foreground strength summed across the axis, its least
    #: value within +-streak_waist_span radii of the centroid over its largest
    #: (a faint shadow can fill the thresholded gap between two balls, as on
    #: MuJoCo render mj9104 at its contact, waist 0.89). Closed form: a
    #: uniformly swept disc's profile is a chord convolved with a box, largest
    #: in the middle (1.0); two touching discs' falls to 2 sqrt(2 r x - x^2)
    #: over 2r at x = 0.25 r from the tangent point (0.66) and to ~0 at it.
    streak_min_waist_strength: float = 0.6
    streak_waist_span: float = 0.25
    #: The blob's stadium radius (from its moments) over the expected ball
    #: radius, lower and upper bound (+-1 px). The blob is every pixel above
    #: the foreground threshold, so its edge lies outside the limb by the
    #: optical blur and the ball's contact shadow, a few px whatever the ball's
    #: size: measured 1.14-1.47 at r = 9-11 px and 1.01-1.16 at r = 21 px on
    #: 30 fps 960x540 renders. Two balls side by side read as >= 2.2 (closed-
    #: form moments of two touching discs: across variance r^2/4 + r^2).
    streak_blob_radius: tuple = (0.8, 1.6)
    #: Largest point asymmetry of a streak (streak.point_asymmetry: the share
    #: of its foreground strength a half turn about the fitted centre does not
    #: map onto itself). A swept disc is symmetric under that half turn; a
    #: streak that ran into a resting ball at a contact frame is not (the rest
    #: ball's full-coverage disc sits at one end). Taken within the blob's
    #: stadium only (a ball beside the streak is not part of it). Measured on
    #: our 30 and 60 fps fast renders: single streaks 0.01-0.2, streak +
    #: resting ball 0.25-0.51; our choice between the two groups. Such a blob
    #: falls back to circle fits.
    streak_max_asym: float = 0.2
    #: Pixels whose HSV saturation < this and value > white_value count as white
    #: (stripe/cue summary); 0..1 scale, common practice for "white" in HSV.
    white_saturation: float = 0.28
    white_value: float = 0.62
    #: Explain each cluster blob (detect._explain_cluster): discs of the
    #: expected radius round the accepted balls are removed from the blob of
    #: touching balls, and any ball-sized remainder is seeded at its distance-
    #: transform maximum and refined like any candidate (a dark ball among dark
    #: neighbours on dark cloth casts too few Hough votes to be seeded).
    explain_clusters: bool = True
    #: A remainder is seeded only when it covers >= this many ball areas and
    #: holds an inscribed circle of >= explain_min_inradius radii. Rigid
    #: neighbours never cover a missing ball's own disc, so its remainder
    #: holds nearly the whole disc (inscribed radius ~r less the neighbours'
    #: centre errors, pad and blur: 0.6 leaves 0.4 r for those); the rim, blur
    #: and shadow crescents left round accepted balls are a few px wide, and
    #: the end of a motion smear past a ball's disc is narrower (0.4 r let one
    #: through on outside footage D2).
    explain_min_area: float = 0.5
    explain_min_inradius: float = 0.6
    #: Removed discs reach this far (px) past the expected radius: the edge
    #: blur of a sharp video camera, ~1 px (lens plus demosaicing; from memory).
    explain_disc_pad_px: float = 1.0
    #: A new ball must lie at least this many radii from every accepted one:
    #: rigid balls' centres are >= 2 radii apart, less ~0.15 r centre error each.
    explain_min_sep: float = 1.7
    #: Seeds tried per blob (a 15-ball rack plus the cue ball fits).
    explain_max_seeds: int = 16
    #: A new ball's disc out to explain_fill_radius radii (inside the rim blur)
    #: must be foreground over >= explain_min_fill of its area (half, as
    #: explain_min_area): a ball differs from the cloth over its whole disc
    #: except where its colour or shading comes near the cloth's (a green
    #: ball on green cloth was measured at 0.6 in a compressed render).
    explain_fill_radius: float = 0.8
    explain_min_fill: float = 0.5
    #: Mean strength inside 0.6 radius of a ball found this way, x threshold
    #: (min_inner_contrast = 1 for other candidates): such a ball has neither
    #: Hough nor disc-score support, so it must differ from the cloth by
    #: 2 thresholds (12 noise sigma); the end of a motion smear is part cloth
    #: and weaker (at 1.0 one passed on outside footage D2).
    explain_min_contrast: float = 2.0
    #: Faint-ball search (tracking/faint.py): a matched disc filter over the
    #: signed CIELAB difference finds balls too close to the cloth's colour for
    #: the per-pixel test (green on green cloth, maroon on red). Off: the
    #: detector alone.
    faint_search: bool = True
    #: Probability of one false seed per frame (over the frame's independent
    #: disc positions; Bonferroni). A false seed must still pass the shape and
    #: surround tests, and a track must last min_track_s. Our choice.
    faint_false_alarm: float = 1e-4
    #: Quantile of the frame's own chi-square statistic above which its tail
    #: is fitted (faint.tail_level, peaks over threshold): 0.99, where a ball
    #: (< 1% of the positions) cannot move it.
    faint_tail_p: float = 0.99
    #: Surround ring of the centre-surround filter, x radius: from outside the
    #: rim blur and the darkest part of the ball's own shadow (~0.3 r; see
    #: model_shadow_decay) to about one diameter past the rim.
    faint_ring_in: float = 1.3
    faint_ring_out: float = 2.2
    #: Pixels within this many radii of a detected ball carry no weight in
    #: the faint search (its disc plus rim blur and shadow).
    faint_known_pad: float = 1.25
    #: A faint ball's centre lies at least this many radii from every detected
    #: one (explain_min_sep: rigid balls, less two centre errors).
    faint_min_sep: float = 1.7
    #: Least usable (on-cloth, not under a detected ball) share of the disc
    #: and of the ring for a position to be tested (a ball against a cushion
    #: has nearly half its ring off the cloth).
    faint_min_cover: float = 0.5
    #: Seeds refined per frame (more than one faint ball of a set is rare).
    faint_max_seeds: int = 4
    #: At most this share of the ring may be per-pixel foreground that no
    #: detected ball explains: a cue stick, a hand or a motion streak runs
    #: through the surround; a lone faint ball's ring is cloth and shadow.
    faint_max_strong_ring: float = 0.25
    #: Shape test in 8 sectors of 45 deg: the ring must differ from the disc
    #: (by half the mean step) along the seed's colour direction in all but
    #: faint_max_open of the sectors that can be seen (ring mostly on cloth,
    #: not under a detected ball), and at least faint_min_sectors must be
    #: seen. A ball's silhouette is closed; a line (cushion shadow, wrinkle,
    #: cue) is open at both ends, a shadow crescent on its sides.
    faint_min_sectors: int = 4
    faint_max_open: int = 1
    #: Centre at least this many mm (x ball radius) inside the cushion nose.
    faint_margin: float = 0.8
    #: Edge floor of the silhouette fit of a faint ball, x threshold (its
    #: edges are weaker than a clear ball's).
    faint_edge_frac: float = 0.3
    #: The silhouette centre is used when within this many radii of the
    #: template peak; else the template peak is.
    faint_agree: float = 0.35
    #: Least model error of a faint ball's centre, x its radius: measured on
    #: our renders (rack and cut-shot scenes, green on green), faint centres
    #: lie 0.03-0.3 r from the truth at rest, silhouette and template alike.
    faint_model_frac: float = 0.12
    #: Edge blur sigma (px) assumed by the template centre sigma: a sharp
    #: video camera's lens plus demosaicing, ~0.7-1 px (from memory).
    faint_blur_px: float = 1.0
    #: A seed whose colour change points within faint_shadow_cos (cosine) of
    #: a pure darkening of the cloth (a shadow: the cloth's linear colour
    #: scaled by k < 1) and lies within faint_shadow_reach radii of a detected
    #: ball is that ball's shadow: a lamp 0.8-1.6 m above the cloth and up to
    #: ~1 m to the side casts a shadow up to ~R tan(zenith) + R ~ 2 R past
    #: the centre (geometric); the reach adds the disc's own radius.
    faint_shadow_cos: float = 0.9
    faint_shadow_reach: float = 3.2
    #: A faint ball is taken only this many radii or more from every detected
    #: ball: the inner edge of its ring (faint_ring_in = 1.3) plus a
    #: neighbour's excluded disc (faint_known_pad = 1.25) plus ~0.25 r for
    #: its shadow. Closer (a faint ball in a rack), the neighbours' rims and
    #: shadows pull both centre estimates: measured on our rack renders,
    #: 10-30 mm errors at 2.0-2.7 radii against 1-7 mm beyond 2.8.
    faint_isolation: float = 2.8
    #: The median change over the disc must reach this share of its mean
    #: (both less the ring's median): a ball changes most of its disc, a
    #: small bright mark (a table spot ~1/20 of a ball's area) only its mean.
    faint_min_extent: float = 0.5
    #: Dark-ring search (tracking/dark_ring.py): balls of the cloth's own colour found
    #: by the dark ring a lit sphere shows at its silhouette (Lambert limb
    #: darkening inside, the contact shadow outside). Off: not searched.
    ring_search: bool = True
    #: Annuli of the ring template, x radius: inner (the ball's lit top
    #: beyond its centre marks' usual reach), rim (the last 15 % of the
    #: limb, where n.l of an overhead lamp falls below ~0.5, plus the first
    #: tenth of a radius of contact shadow and the rim blur), outer (open
    #: cloth past the contact shadow). Geometry, not fitted.
    ring_inner: tuple[float, float] = (0.5, 0.75)
    ring_rim: tuple[float, float] = (0.85, 1.12)
    ring_outer: tuple[float, float] = (1.28, 1.55)
    #: Pixels within this many radii of a ball already found carry no weight
    #: (its silhouette and rim blur; its contact shadow is left in, a real
    #: neighbour's shadow darkens only the sectors facing it).
    ring_known_pad: float = 1.05
    #: A limb ball's centre lies at least this many radii from every ball
    #: already found (as explain_min_sep: rigid balls touch at 2 radii; less
    #: two centre errors).
    ring_min_sep: float = 1.7
    #: The statistic's noise and tail level are measured on positions at
    #: least this many radii from balls already found (open cloth: a ball's
    #: shadow reaches ~2 radii past its centre, plus the ring's 1.12 radii).
    ring_clutter_sep: float = 3.2
    #: Least usable share of the inner, rim and outer annulus (on the cloth,
    #: not under a ball): a ball at the edge of a rack has 3-4 touching
    #: neighbours covering ~2/3 of its outer annulus.
    ring_min_cover: tuple[float, float, float] = (0.5, 0.5, 0.2)
    #: Probability of one false seed per frame over the frame's independent
    #: disc positions (Bonferroni; our choice, as faint_false_alarm).
    ring_false_alarm: float = 1e-4
    #: Seeds refined per frame, out of at most ring_max_tested peaks.
    ring_max_seeds: int = 4
    ring_max_tested: int = 24
    #: Closed-ring test in 8 sectors of 45 deg (dark_ring._closed_ring): at
    #: least ring_min_sectors seen and at most ring_max_open of them (or
    #: ring_max_open_frac of those seen, a 90 deg arc of 8) open: a lamp to
    #: one side lights the limb on its side; a line, a crescent or a
    #: pocket's shade is open over half the ring or more.
    ring_min_sectors: int = 4
    ring_max_open: int = 1
    ring_max_open_frac: float = 0.25
    #: A sector is closed when its rim lies below its inner (and visible
    #: outer) annulus by ring_sector_frac of the ring's contrast and by
    #: ring_sector_z sigmas of the medians' difference.
    ring_sector_frac: float = 0.1
    ring_sector_z: float = 3.0
    #: Search at half resolution when the ball radius is at least this (px):
    #: the rim annulus is then still >= 1.6 px wide.
    ring_half_res_px: float = 12.0
    #: Second centre stage (dark_ring.ring_refine): a circle through the
    #: darkest point of each of ring_rays rays (ring_ray_span radii), free
    #: radius, Tukey weights; kept when >= ring_min_rays rays are free of
    #: other balls, the radius is within ring_refine_radius and the centre
    #: moves <= ring_refine_max_shift radii.
    ring_refine: bool = True
    ring_rays: int = 48
    ring_ray_span: tuple[float, float] = (0.75, 1.45)
    ring_min_rays: int = 16
    ring_refine_radius: tuple[float, float] = (0.8, 1.3)
    ring_refine_max_shift: float = 0.3
    #: Model error of the ring centre, x radius: on closed-form Lambert
    #: spheres of the cloth's colour with a sky and a cast shadow
    #: (tests/test_detect_dark_ring.py, after ring_refine) the centre is
    #: within 0.01 r with the lamp overhead and 0.04-0.13 r off, away from
    #: the lamp, with it 15-35 deg to the side (the cast shadow widens the
    #: ring there; the ring's peak alone: up to 0.25 r). 0.1 r puts the
    #: worst case at 1.3 sigma.
    ring_model_frac: float = 0.1
    #: Highest confidence of a limb ball (below faint balls' 0.5 and any
    #: clear detection, so merges keep those).
    ring_max_conf: float = 0.4
    #: Where the dark-ring search runs in a clip (dark_ring.RingGate): the
    #: whole surface on the first ring_gate_warmup frames (3: a track is
    #: confirmed after 3 fixes, TrackingSettings.confirm_hits), then every
    #: ring_gate_period frames and whenever the colour detector finds fewer
    #: balls than on the frame before; in between only windows of
    #: ring_gate_reach radii round the ring finds of the last period. A
    #: ball of the cloth's colour that comes into view in the open is found
    #: at most ring_gate_period - 1 frames late (0.12 s at 60 fps; a track
    #: needs min_track_s = 0.08 s anyway). 6 radii per frame is 10 m/s at
    #: 60 fps for a 57 mm ball, past which its ring is smeared away (a
    #: streak has no dark ring). Our choices, not fitted.
    #: Re-centre on the dark ring (dark_ring.recentre_by_ring) a circle-fit
    #: detection whose mean colour difference inside 0.6 radius is below
    #: ring_recentre_contrast x the foreground threshold (its dim limb
    #: matches the cloth, so its colour silhouette is lost on the dark
    #: side). Measured (contrast / threshold, median per ball): balls of the
    #: cloth's colour 2.4 (red on red, sweep f03b) and 2.8 (green on green,
    #: f02), clear balls 5.2-42 (outside footage D1/D2, our sweep renders
    #: f02, f03b, f08g, MuJoCo m03, m05); 4 lies between (chosen on these
    #: tuning clips). Not caught: a red ball on red cloth under low noise
    #: (fresh render 8811: contrast 9.0 thresholds, yet its free radius
    #: 0.82 x the expected one and its centre 3.3 mm off). The ring centre
    #: is kept only within ring_recentre_max_shift radii of the colour
    #: centre (the same ball).
    ring_recentre: bool = True
    ring_recentre_contrast: float = 4.0
    ring_recentre_max_shift: float = 0.5
    #: The ring centre must keep the ball's outline (dark_ring._outline_holds):
    #: every part of a ball, white caps and number circle included, lies
    #: inside its silhouette disc, so a ring centre whose disc (r +
    #: ring_outline_pad_px, the edge's blur) leaves more than
    #: ring_outline_max_out of the clearly-not-cloth pixels (shade-free
    #: colour difference above ring_outline_level thresholds) outside, beyond
    #: what the colour fit's disc left, is refused. Measured (share left out
    #: by the ring's disc minus the colour fit's, truth camera): a stripe
    #: ball whose dark band the ring took for a limb, sweep f09 blue-stripe
    #: 0.08-0.19 (ring centre 2.9-5.0 px off, colour fit 0.3-0.9) and fresh
    #: varied10102 purple-stripe 0.13-0.16 (3.2-3.6 px off vs 0.6-0.9);
    #: the balls the ring is for, f02 green on green -0.21-0.02 and f03b
    #: red on red 0. 0.05 lies between (chosen on these clips).
    ring_outline_level: float = 2.0
    ring_outline_pad_px: float = 1.0
    ring_outline_max_out: float = 0.05
    #: A stripe ball whose band is the cloth's colour (tracking/stripe_outline.py):
    #: circle-fit detections with clear colour contrast are refitted on the
    #: lit-only colour difference from their dark ring's centre; the
    #: outermost drop counts from stripe_outer_frac of the ray's strongest
    #: (the band's lit limb is a few units, the white cap's inner edge tens);
    #: the refit's free radius must lie within stripe_radius_tol of the
    #: expected one (the cap's edge is a circle of ~0.83 radii on the sphere,
    #: so a cap traced alone fits 0.8-0.9) and move the centre more than
    #: stripe_min_shift radii (closer: the colour fit stands). Where the ring
    #: lies more than stripe_min_shift radii from the colour fit and no refit
    #: passes, the sigma is widened to that distance. Chosen on the tuning
    #: clip mj14001_g120 (ball 14), see the commit for fresh figures.
    stripe_refit: bool = True
    stripe_outer_frac: float = 0.04
    stripe_radius_tol: float = 0.1
    stripe_min_shift: float = 0.1
    #: A solid ball of nearly the cloth's colour (tracking/tint_disc.py): every
    #: detection is refitted on the brightness-free tint map (0 cloth and its
    #: shadows, 1 the ball), the ball's tint read over the darker half of its
    #: pixels within tint_core radii, when that tint lies within tint_near_sep
    #: (unit-colour distance) of the cloth's: red on red 0.18-0.19, green on
    #: green 0.03, clear balls 0.55-1.5 on MuJoCo and outside footage (measured).
    #: Rays (tint_rays) from tint_ray_span radii; per ray the level half way
    #: between the ball's (tint_in_band) and beyond the edge (tint_out_band)
    #: marks the silhouette; a free circle through the crossings. Kept when
    #: >= tint_min_rays of the rays cross, the radius is within tint_radius_tol
    #: of the expected, the separation is tint_min_snr x the map's noise on the
    #: cloth, the fit moved <= tint_max_shift radii, and tint_min_fill of the
    #: darker half of the disc (tint_fill_radius radii) reads > tint_fill_level.
    #: tint_edge_px: the blurred edge's width (rays closer share pixels);
    #: tint_model_frac x r: model error added to the fit's sigma. Chosen on
    #: mj15002_rc60 (ball 13) and closed-form scenes; fresh figures in the commit.
    tint_refit: bool = True
    tint_core: float = 0.7
    tint_rays: int = 64
    tint_ray_span: tuple[float, float] = (0.3, 1.6)
    tint_min_rays: float = 0.6
    tint_radius_tol: float = 0.1
    tint_min_snr: float = 5.0
    tint_min_fill: float = 0.85
    tint_near_sep: float = 0.35
    #: The tint map needs a dyed cloth: on a neutral one (grey: CIELAB chroma
    #: C* 3-4 measured on MuJoCo grey cloth) every off-white or grey ball has
    #: "the cloth's tint" up to white balance, and the map holds only that error
    #: (an ivory cue ball on grey cloth, C* 13-17, was moved 4 mm: mj16002_gs60).
    #: Coloured cloths measure C* 40-55; below tint_min_cloth_chroma the
    #: brightness-based colour fit stands.
    tint_min_cloth_chroma: float = 15.0
    #: a first look on the detection's core square skips balls whose tint lies
    #: beyond tint_quick_margin x tint_near_sep from the cloth's (speed only)
    tint_quick_margin: float = 1.5
    tint_in_band: tuple[float, float] = (0.4, 0.8)
    tint_out_band: tuple[float, float] = (1.25, 1.55)
    tint_fill_radius: float = 0.75
    tint_fill_level: float = 0.25
    tint_max_shift: float = 0.6
    tint_edge_px: float = 2.0
    tint_model_frac: float = 0.03
    #: a streak fit is replaced only by a tint circle that is one (a resting ball
    #: whose shadows on both sides looked like a smear): >= tint_streak_rays of the
    #: rays that cross inliers, residual scale <= tint_streak_scale_px
    tint_streak_rays: float = 0.9
    tint_streak_scale_px: float = 0.5
    ring_gate_warmup: int = 3
    ring_gate_period: int = 8
    ring_gate_reach: float = 6.0


@dataclass(frozen=True)
class TrackingSettings:
    """Linking detections into per-ball tracks and smoothing them (mm, s)."""

    #: White-acceleration process noise (mm/s^2): cloth friction decelerates a
    #: sliding ball at mu_s g ~ 0.2 * 9.81 = 2 m/s^2 (mu_s typical 0.2, Physics
    #: of Pool FAQ, Colorado State University); 2x for curve/swerve margin.
    accel_sigma_mm_s2: float = 4000.0
    #: Velocity sigma of a newly born track (mm/s): covers a power shot
    #: (4.5 m/s, Physics of Pool FAQ shot-speed bands).
    birth_speed_sigma_mm_s: float = 3000.0
    #: Mahalanobis gate on the innovation (chi-square, 2 dof, p = 0.999 -> 13.8;
    #: standard table value).
    gate_chi2: float = 13.8
    #: Fallback gate for a measurement that fails the Mahalanobis gate: the
    #: farthest a ball can travel in one frame (mm/s): a break shot reaches
    #: 11-13 m/s (Physics of Pool FAQ); we allow 14 m/s.
    max_speed_mm_s: float = 14000.0
    #: Weight of the colour distance (0..1 normalised RGB) in the assignment
    #: cost, in chi-square units per unit colour distance.
    colour_weight: float = 40.0
    #: NIS above this splits a track into motion segments (chi-square 2 dof,
    #: p = 0.9999 -> 18.4; standard table value): a contact's velocity jump.
    split_nis: float = 18.4
    #: Frames a track may go unseen before it is ended (occlusion by cue/hand).
    max_missed_s: float = 0.5
    #: Fixes before a track counts as confirmed; a tentative track is ended
    #: once unseen for longer than jump_max_gap_s (M-of-N confirmation with
    #: 3 of 3 is a common choice; Blackman & Popoli 1999, ch. 9, from memory).
    confirm_hits: int = 3
    #: Longest gap (s) since a track's last fix across which the linker may
    #: re-start its motion (a contact) instead of continuing it through the
    #: gate. Two touching balls can merge into one blob for the frame or two
    #: around a contact; 0.05 s covers two frames at 50-60 fps (one at 30 fps
    #: is always allowed). A ball lost for longer (left the view, covered)
    #: must come back through the gate or start a new track (then stitched).
    jump_max_gap_s: float = 0.05
    #: Rigid balls cannot pass through each other: a detection is not given
    #: to a track whose straight path from its last fix (one frame before) to
    #: it would pass closer than (2 - pass_through_tol) radii to the centre of
    #: another ball resting there (assign.Linker). At a full hit the moving
    #: ball's prediction runs on to where the struck ball went; this keeps that
    #: detection for the struck ball. The tolerance covers the detection
    #: errors at a contact frame (end fits of a smeared ball: up to ~half a
    #: radius). None: no such rule.
    pass_through_tol: float | None = 0.5
    #: Detections in one frame closer than this fraction of a ball diameter are
    #: one ball (balls cannot overlap; touching balls are one diameter apart,
    #: and detection errors are a few mm, well under 20% of a diameter). A long
    #: motion streak can otherwise come out as two blobs at its ends.
    merge_below_frac: float = 0.8
    #: Push apart detections of one frame closer than one ball diameter
    #: (tracking/overlap.py): rigid balls cannot interpenetrate, so in a
    #: cluster a fit that leans into its neighbour is corrected, each ball
    #: moving in proportion to its variance along the line of centres.
    separate_overlaps: bool = True
    #: Tracks shorter than this (s) with no stationary part are dropped as
    #: clutter (a real ball is on the table for the whole shot or rolls in).
    min_track_s: float = 0.08
    #: Rest detection: all detections of a run lie within this many sigma
    #: (plus rest_tol_mm) of the run mean, for at least rest_min_s.
    rest_sigma: float = 3.0
    rest_tol_mm: float = 0.25
    rest_min_s: float = 0.1
    #: ... and shows no drift: a straight line fitted to the run's detections
    #: (least squares) must not move more than rest_drift_mm over the run with
    #: a slope significant at false-alarm probability rest_drift_p (F-test of
    #: the two slopes against the run's own scatter about the line, F(2, 2(m-2))
    #: for m points; handbook linear regression). A detector sigma that is large
    #: for a model error (a ball of the cloth's colour) would otherwise let a
    #: creeping ball, e.g. one nudged in a rack, pass as at rest and be averaged
    #: (measured 5-9 mm off on rack clips). The floor: a still ball's own
    #: detections wander along a line by up to 1.0-1.5 mm over 0.1-1 s (a
    #: neighbour's shadow, shading; measured on the rack clips f08, f08g and
    #: rack8853 with truth speed < 1 mm/s), which is not motion; 2 mm end to
    #: end keeps an averaged run's error within +-1 mm. 1e-3 per test keeps a
    #: still ball's run whole although the test is repeated as the run grows.
    #: None: no drift test.
    rest_drift_mm: float = 2.0
    rest_drift_p: float | None = 1e-3
    #: A detection farther from both its neighbours (previous and next frame)
    #: than the ball moves in one frame on either side, by more than this many
    #: sigma, is one a ball cannot have made (tracking/pipeline.py spikes) and
    #: is left out; a lone wrong fix next to a rest run otherwise became a
    #: one-point piece no outlier test could reject (measured 24 mm off in the
    #: fresh rack8853). None: keep every detection.
    spike_sigma: float | None = 3.0
    #: Shutter open time as a fraction of the frame interval, when known.
    #: None: unknown, and a full-frame shutter (exposure = 1/fps, the longest
    #: possible, so the largest smear) is assumed.
    exposure_frac: float | None = None
    #: Extra centre variance along the motion per squared smear length
    #: (L = speed x exposure, mm): 1/12, the variance of a uniform
    #: distribution on an interval of length L (the silhouette centre of a
    #: smeared ball may come out anywhere along its sweep).
    smear_var_per_len2: float = 1.0 / 12.0
    #: Measure the smear scale from the clip's own detections (second
    #: differences, covariance matching; tracking/kalman.py smear_scale),
    #: capped by the uniform-smear bound above; False: use the bound itself.
    smear_from_clip: bool = True
    #: Weigh each ball's moving fixes by their own scatter in the smoother:
    #: their covariances are scaled by k^2 >= 1, the median of the third
    #: differences' chi-square over its median 2 ln 2 (tracking/kalman.py
    #: scatter_scale; a third difference is blind to constant acceleration,
    #: friction while sliding or rolling), from at least scatter_min_quads
    #: runs of four consecutive fixes. A dark or cloth-coloured ball's fits
    #: wander with its turning markings and its shadow (measured k^2 2-7 at
    #: 30 fps on sweep clips f09, f05b, m05, MuJoCo mj9911, where the cue
    #: ball's are below 1); with its claimed sigma the smoother followed them.
    #: The contact and outlier tests keep the detector's covariances.
    scatter_scale: bool = True
    scatter_min_quads: int = 5
    #: Warn when the balls' image size (median fitted / expected silhouette
    #: radius of resting balls, tracking/ball_size.py) lies outside
    #: [ball_size_low, ball_size_high]: a wrong --table preset or ball set.
    #: The detector finds the silhouette slightly inside the true limb: the
    #: ratio is 0.95-0.99 with the right preset (outside footage D1/D2 0.953,
    #: renders 0.98), down to 0.93 with the shade-free edge map on some
    #: renders (DetectionSettings.edge_shade_free); a preset mistake multiplies
    #: it by 1.087 or 1/1.087 (8-ft vs 9-ft pool, 100/92 in, WPA), 0.654
    #: (snooker table and balls on a 9-ft pool preset, WPBSA) or 0.9625 (carom,
    #: UMB: goes unnoticed). The low edge leaves the measured bias room; the
    #: high edge stays >= 2 % clear of an 8-ft table read as 9-ft.
    ball_size_low: float = 0.90
    ball_size_high: float = 1.03


# Phantom balls on compressed footage (tracking/phantoms.py): still-cloth
# background update and where a ball centre can be; lengths mm, image levels
# DN (0-255), radii in expected ball radii.
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
    #: Re-take the background per pixel as the median over the sampled frames
    #: in which the pixel is cloth (tracking/phantoms.py clean_median).
    #: False: the median of all sampled frames (and the paint) throughout.
    #: Off by default: on its own it removed the start-spot ghost of sweep
    #: f01c at the detector, but together with protect_by_evidence it moved
    #: f01ch's cushion e error from 0.010/0.012 to 0.027/0.040 (median/max)
    #: and cost 2 of 18 found contacts on f08g (auto calibration, scorer);
    #: codec_tracks drops that ghost's track without touching the background.
    clean_median: bool = False
    #: Fewest cloth frames whose median replaces a pixel: the median of n
    #: frames of Gaussian noise has sigma ~1.25 sigma / sqrt(n) (asymptotic
    #: variance of the sample median, pi sigma^2 / 2n), so 5 already brings
    #: it to about half a frame's noise; with fewer the pixel keeps its value.
    clean_min_frames: int = 5
    #: Foreground grown by this many expected radii before a frame counts
    #: as cloth at a pixel: a ball's soft (blurred) rim and the penumbra of
    #: its shadow stay below the threshold but are not cloth.
    clean_grow: float = 0.5
    #: A frame shows a ball at a pixel where its Delta-E*ab from the first
    #: background, box-averaged over ``clean_smooth`` expected radii (sensor
    #: and codec noise of single pixels averages out), exceeds this many
    #: foreground thresholds. Two: the offset a ball leaves in the median (the
    #: thing to remove) is about one threshold, so it does not count as a
    #: ball; a ball a detector finds reliably stands well above two.
    clean_fg_frac: float = 2.0
    clean_smooth: float = 0.5
    #: Ring shading (L*; tracking/phantoms.py ring_shading) from which a fix
    #: shows a ball. Between what we measured (H.264 crf 28-35 and noisy
    #: MPEG-4 renders of ours, the tuning clips): codec and ghost tracks'
    #: 90th percentile <= 2.9 L* (single fixes up to 6.4), real balls'
    #: >= 9.8 (a black ball: median 2.8, 90th percentile 15; a fast blurred
    #: one: median 1.9).
    shade_min_l: float = 4.0
    #: A track with ball evidence in fewer than this share of its fixes
    #: shows no ball: a codec patch beside a rack picks up its neighbours'
    #: shading in some fixes (tuning clips: up to 1/3 of them), while the
    #: real balls there showed it in >= 83 % (a ball of the cloth's colour
    #: among them). Half: the majority of the fixes decides.
    shade_share: float = 0.5
    #: Below this share of fixes with ball evidence a track is not a ball
    #: even when seen in every frame on the cloth (a codec block that
    #: persists: MPEG-4 part 2 at OpenCV's default rate, tests/
    #: test_track_codec_evidence.py, showed them in 25 of 25 frames with no
    #: evidence at all). Every real ball of the tuning clips showed it in
    #: >= 83 % of its fixes.
    shade_none_share: float = 0.1
    #: A track with fixes in fewer than this share of the frames it spans is
    #: mostly predicted (the linker coasted over codec blocks that came and went).
    codec_visible_max: float = 0.5
    #: Drop codec tracks (no ball evidence; tracking/phantoms.py codec_tracks).
    drop_codec_tracks: bool = True
    #: The still-cloth update leaves alone the resting tracks that have
    #: shown ball evidence and every ball-like fix of the last frame (True),
    #: instead of every confirmed track that rolled or sits on a painted
    #: ball (False, session 7's rule, under which a codec track that hopped
    #: across the table protected the patch it came to rest on). Off by
    #: default for the measured reason given at clean_median.
    protect_by_evidence: bool = False
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


@dataclass(frozen=True)
class ExposureSettings:
    """Brightness matching of each frame to the background (tracking/exposure.py)."""

    #: Sample grid step (px) over the background mask.
    step_px: int = 8
    #: Polynomial order of the gain field in x, y (2: one lamp's pool of light
    #: plus steady ambient light varies smoothly over the table).
    order: int = 2
    #: Background pixels darker than this (DN) are not sampled (the toe of the
    #: sRGB curve, and noise dominates the ratio).
    min_dn: float = 12.0
    #: Tukey biweight constant x robust scale (4.685: 95 % efficiency under
    #: Gaussian noise; Holland & Welsch 1977) and iterations.
    tukey_c: float = 4.685
    iters: int = 4
    #: Correct only when the fitted field departs from 1 by more than this
    #: somewhere on the cloth (q units; 0.006 is a 1.5 % linear gain, < 1 DN on
    #: a mid-grey pixel): steady footage is left bit for bit as it was. The
    #: fit's own scatter on steady clips reaches 0.002-0.004 (measured on the
    #: outside footage D1/D2, a bundled clip and a steady render).
    min_change: float = 0.006
    #: Largest change corrected (q units; 0.25 ~ a factor 1.7 in linear
    #: light): beyond it the frame is not a brightness change of this scene
    #: (a cut, a flash) and is left alone.
    max_change: float = 0.25


@dataclass(frozen=True)
class TrackClipSettings:
    """Everything :func:`tracking.pipeline.track_clip` needs besides the clip."""

    detection: DetectionSettings = DetectionSettings()
    tracking: TrackingSettings = TrackingSettings()
    #: Brightness matching of each frame to the background (flicker, auto exposure).
    exposure: ExposureSettings = ExposureSettings()
    #: Frames handed to automatic calibration when no calibration is given.
    calibration_frames: int = 9
    #: 4:2:0 video decoded with each colour sample copied over its 2 x 2 block: interpolate the
    #: colour between the block centres before detection (tracking/chroma.py). Ray-cast still
    #: balls through the 4:2:0 step: fixed centre offset 0.086 -> 0.059 px per axis (raw frames 0.035);
    #: resting balls better on 6 of 7 clip balls, but off by default: on the outside footage (scorer,
    #: automatic calibration) D1 0.45 -> 0.49 mm (a resting stripe ball 0.53 -> 0.66) and D2's late
    #: cushion e error 0.010 -> 0.020 max (D2 0.65 -> 0.62 mm).
    chroma_rebuild: bool = False
