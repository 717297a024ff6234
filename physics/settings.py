"""Tolerances and defaults of the physics stage (tracks -> events, segments, contacts).

Units: mm, s, mm/s, mm/s^2. Each value says where it comes from: a published figure
(see /work/shared/REFERENCES.md and :mod:`feltlab.standards`), "common practice", "from memory",
or "design choice" (a statistical or numerical choice of ours, not a physical constant).
"""
from __future__ import annotations

from dataclasses import dataclass

from feltlab.standards import (
    G_MM_S2,
    MU_CUSHION,
    MU_ROLL_RANGE,
    MU_ROLL_TYPICAL,
    MU_SLIDE_CLOTH_RANGE,
    MU_SLIDE_CLOTH_TYPICAL,
)


@dataclass(frozen=True)
class PhysicsSettings:
    """Settings of :func:`physics.pipeline.analyze_tracks`.

    Geometry of candidates: a contact is looked for where the sampled gap (centre distance
    minus 2R, or distance to a cushion-nose line minus R) has a local minimum below
    ``gap_margin_mm + gap_margin_sigma * sigma + speed * frame period`` (a ball can travel
    one frame period between the last sample and the touch).

    Kinematic evidence: on each side of a candidate a quadratic per coordinate is fitted over
    ``side_window_s`` (at least ``min_side_points`` samples); the velocity jump at the candidate
    must exceed both ``dv_min_mm_s`` and ``dv_z`` standard errors, along the physically required
    direction (line of centres, cushion normal).
    """

    #: Standard gravity, mm/s^2 (CGPM conventional value, feltlab.standards).
    g_mm_s2: float = G_MM_S2
    #: Position sigma used when a table gives none (mm). Design choice: ~1 mm single-camera
    #: tracking (Mathavan, Jackson & Parkin, Am. J. Phys. 77:788, 2009) halved for sub-pixel centroids.
    default_sigma_mm: float = 0.5
    #: Floor on any per-sample sigma (mm); guards against zero sigmas in input. Design choice.
    min_sigma_mm: float = 0.05

    # -- rest / motion ------------------------------------------------------------------
    #: A ball slower than this (local fit) is at rest (mm/s). Design choice: ~1% of the slowest
    #: shot band (450 mm/s, Physics of Pool FAQ) plus a noise allowance below.
    rest_speed_mm_s: float = 8.0
    #: ... and slower than this many standard errors of the local speed. Design choice.
    rest_speed_z: float = 4.0
    #: Window of the local speed fit (s); at least 5 samples. Design choice.
    speed_window_s: float = 0.05
    #: A resting ball starts to move when it is faster than the rest speed for a whole speed
    #: window and has moved this many position sigmas over it. Design choice (false-alarm
    #: probability of a Gaussian 8-sigma excursion is negligible).
    onset_sigmas: float = 8.0

    # -- contact candidates -----------------------------------------------------------------
    gap_margin_mm: float = 3.0
    gap_margin_sigma: float = 4.0
    #: Fraction of (speed x frame period) added to the gap margin. 1.0 covers a touch anywhere
    #: between two samples. Geometry, not tuned.
    gap_margin_frames: float = 1.0

    #: Candidates of the same ball pair / ball and cushion closer than this (s) are one contact
    #: seen through noise: they do not cut each other's fit windows. Design choice (~ a contact
    #: plus the time a slow ball needs to leave the touching distance).
    same_contact_s: float = 0.05

    #: A resting ball that starts to move was hit: the path of each ball moving just before the
    #: onset is extrapolated to it, and one that reaches the touching distance then is a candidate
    #: even where the sampled gap never shows the touch (samples missing or wrong while the two
    #: balls touch, e.g. seen as one blob). Physics (no contact, no start), not tuned; the
    #: kinematic test below still decides (physics.events.onset_candidates).
    onset_candidates: bool = True

    # -- kinematic evidence -----------------------------------------------------------------
    #: Two cushion candidates of one ball at most this many frame periods apart (a corner) are
    #: also judged by one fit with both changes (physics.events.kink_fit_double), since each
    #: one-sided window then holds too few samples. Geometry: a ball meeting the second cushion
    #: within ~2 ball radii of travel after the first, at 0.5-4.5 m/s (Physics of Pool FAQ
    #: shot speeds) and 60-240 fps, is 1-6 frames later. Design choice.
    corner_frames: float = 6.0
    #: Two cushions of one ball met within about a frame period (geometric candidates within 2.5
    #: frame periods): a cushion candidate that neither a one-change fit at its own time nor the
    #: two-change fit confirms is judged on the one-change fit at the other cushion's time,
    #: which holds both changes (physics.events.find_contacts). Geometry, not tuned.
    corner_shared_fit: bool = True
    side_window_s: float = 0.08
    #: ... but at least this many frame periods on each side (low frame rates). Design choice.
    side_window_frames: float = 8.0
    min_side_points: int = 3
    #: Minimum velocity jump of a contact (mm/s). The truth convention of our outside test
    #: footage calls a contact significant at >= 30 mm/s normal change; we accept a bit lower.
    dv_min_mm_s: float = 20.0
    #: Velocity jump must exceed this many standard errors (for ball-ball: on one ball, or
    #: combined in quadrature over both). Design choice (false-alarm rate ~1e-6 per candidate
    #: for a Gaussian test).
    dv_z: float = 5.0

    # -- samples left out around a contact ---------------------------------------------------
    #: Ball-ball contact lasts ~0.24-0.45 ms (Hertz estimate, REFERENCES.md): samples closer than
    #: this to the break are not fitted (s).
    guard_ball_s: float = 0.0006
    #: Ball-cushion contacts last a few ms (from memory: 2-5 ms for pool cushions at medium
    #: speed); samples within this of the break are not fitted (s).
    guard_cushion_s: float = 0.004
    #: Cue-tip contact lasts ~1 ms (from memory); guard at a strike (s).
    guard_strike_s: float = 0.002

    # -- model error added to the propagated restitution sigma -------------------------------
    #: A real contact is not instantaneous (cushion: a few ms, from memory; ball-ball ~0.3 ms,
    #: Hertz estimate in REFERENCES.md) and a ball can hop briefly after it, so cloth friction
    #: acts on an unmodelled schedule for about this long (s): each sliding ball's velocity just
    #: after the contact is uncertain by mu_s g times it.
    model_time_cushion_s: float = 0.0015
    model_time_ball_s: float = 0.0003
    #: Vertical friction at a ball-ball contact (the slip shift X n, see slip_mu_bb_max) lifts one
    #: ball off the cloth: its vertical speed is v_z = p_z / m and X = (5/2) p_z / m, so
    #: v_z = (2/5) |X|, and it flies t_h = 2 v_z / g (projectile motion) with no cloth friction;
    #: the other ball is pressed into the cloth and may rebound, by at most as much (cloth
    #: restitution < 1). The fitted slide starts at the break, so each sliding ball's velocity
    #: just after is uncertain by up to mu_s g t_h = (4/5) mu_s |X|, taken as uniform on
    #: [0, that] (sigma = bound / sqrt 3). Seen on an independent engine (MuJoCo, mj9101: the cue
    #: ball's normal velocity flat for ~12 ms after a rolling hit, v_z 58 mm/s, e +0.007 in every
    #: noise draw). Derivation ours; not tuned.
    hop_sigma: bool = True
    #: |X| in the hop bound is estimated without the noise's bias: sqrt(max(X_hat^2 - var, 0))
    #: (E[X_hat^2] = X^2 + var for an unbiased X_hat; standard). A shift within its own noise of
    #: 0 (no ball-ball friction, or no spin across the contact) then adds no hop term.
    hop_shift_debias: bool = True
    #: Only the normal parts of the velocities enter e: a ball that flies for t_h misses its
    #: slide's acceleration a for t_h, so its fitted velocity at the break errs by a t_h, whose
    #: part along the contact normal n is mu_s g t_h |a_hat . n| (a_hat from its fitted slide).
    #: Each sliding ball's hop bound is scaled by that projection (was: 1 per sliding ball).
    hop_along_normal: bool = True
    #: An e whose propagated sigma is above this says nothing beyond 0 <= e <= 1: its one-sigma
    #: interval (2 sigma wide) is wider than that whole range. Such a contact (e.g. in the clip's
    #: last frames, where the segment after it has one or two samples for a velocity and its
    #: deceleration) keeps its row but e and e_sigma are left empty with a note, rather than a
    #: number whose sigma runs to hundreds (fresh MuJoCo clip mj10111: e = 0.69 +- 506, 2 frames
    #: after a cushion contact). Short segments between two contacts usually keep a useful sigma,
    #: because the chained fit ties their positions at both ends.
    e_sigma_no_information: float = 0.5
    #: A ball leaves a cushion sliding (its spin is not reversed with its velocity), but a short
    #: slide can hide in the samples: its path differs from a roll from the break (whose time the
    #: fit may move) by at most ~ dv (t_s - t)^2 / (2 t_s) over the slide of duration t_s, with
    #: dv = mu_s g t_s. Summed over the samples after the guard t_g at ``fps``, the squared
    #: deviation is ~ fps mu_s^2 g^2 (t_s - t_g)^5 / 20 (integral of the square); a slide is
    #: seen once that reaches ``hidden_slide_z``^2 sigma^2. Where the fit shows no slide after a
    #: cushion (fewer than ``hidden_slide_min_samples`` used samples in it), the velocity just
    #: after is uncertain by the largest hidden dv, added to e's sigma. Derivation ours; z = 2
    #: and 3 samples are design choices.
    #: Two cushion contacts of one ball within one frame period share one break of its fit (a
    #: ball into a corner), so the fit sees only their summed velocity change, and the cushion
    #: met first changes the other's incoming velocity along that other normal by its friction,
    #: up to mu_c times its own normal change (Coulomb). Each such contact's e gets that much of
    #: the other's normal change, over its own approach speed, as extra sigma. mu_c: cushion
    #: friction 0.14 (Mathavan, Jackson & Parkin, Proc. IMechE C 224(9):1863, 2010; feltlab.standards).
    shared_cushion_mu: float = MU_CUSHION
    hidden_slide_sigma: bool = True
    hidden_slide_z: float = 2.0
    hidden_slide_min_samples: int = 3
    #: Keep e's variance split into its parts (fit, its noise-only part, lack-of-fit widening,
    #: model-time, hop, hidden-slide, shared-cushion and model-choice terms) in a private
    #: ``_e_var_parts`` column of the contacts table, for scripts/bench_physics.py --parts. Off
    #: in analyses: it costs two more propagations per contact.
    e_sigma_parts: bool = False

    # -- motion-model priors (weak; keep parameters defined when data say nothing) -----------
    #: Ball-cloth sliding friction, typical 0.2, range 0.15-0.4 (Physics of Pool FAQ, CSU).
    mu_s_prior: float = MU_SLIDE_CLOTH_TYPICAL
    mu_s_prior_sigma: float = MU_SLIDE_CLOTH_RANGE[1] - MU_SLIDE_CLOTH_TYPICAL
    #: Rolling resistance as deceleration / g, typical 0.01, range 0.005-0.015 (same source;
    #: the "force / weight" definition, R. Cross, Am. J. Phys. 90(9):648, 2022).
    mu_r_prior: float = MU_ROLL_TYPICAL
    mu_r_prior_sigma: float = MU_ROLL_RANGE[1] - MU_ROLL_TYPICAL + 0.005
    #: Upper bound of the fitted rolling deceleration / g. Design choice (10x the published max).
    mu_r_max: float = 0.15
    #: Upper bound of the fitted sliding deceleration / g. Design choice (2x the published max).
    mu_s_max: float = 0.8
    #: Upper bound of a slide's duration (s) where the cloth-slip prior gives it a meaning beyond
    #: the segment (next to a linked ball-ball contact; elsewhere 3x the segment + 0.1 s). Physics:
    #: a cue tip hits at most ~R/2 off centre (miscue limit, common practice), giving R omega <=
    #: (5/2)(1/2) v = 1.25 v, so a struck ball's slip is <= 2.25 v, and a contact adds at most v
    #: (u' = u + dv): |u| <= 3.25 v; with v <= 13 m/s (break speeds, Physics of Pool FAQ) and
    #: mu_s >= 0.15 the slide lasts <= 2 |u| / (7 mu_s g) = 8.2 s.
    t_roll_max_s: float = 8.2

    #: Cloth-slip continuity across a ball-ball contact (physics.segments.slip_residuals): the
    #: cloth contact point's slip changes by the velocity change, u' = u + dv (equal balls meet at
    #: centre height: the normal and throw impulses are horizontal through the equator and turn
    #: the balls only about the vertical). Soft prior, sigma per component (mm/s):
    #: across dv, hypot(slip_sigma_rel |dv|, slip_sigma_mm_s); along dv additionally
    #: slip_sigma_rel_along |dv|. Reasoning, not fitting:
    #: * vertical friction at the contact point (ball-ball friction 0.03-0.08, Physics of Pool
    #:   FAQ) turns the balls about a horizontal axis; its impulse <= mu_bb J_n shifts each ball's
    #:   slip along the line of centres (~ along dv) by <= (5/2) mu_bb |dv| (I = 2/5 m R^2), i.e.
    #:   up to ~0.2 |dv|: slip_sigma_rel_along = 5/2 x 0.06 (one sigma covers 0-0.08 about 0.03);
    #: * cloth friction during the ~0.3 ms contact (REFERENCES.md): mu_s g x 0.3 ms ~ 1 mm/s, and
    #:   roll-over inside the contact or slightly unequal balls: a few % of |dv| and a few mm/s
    #:   (design choice: 3 % and 5 mm/s).
    slip_prior: bool = True
    slip_sigma_rel: float = 0.03
    slip_sigma_mm_s: float = 5.0
    slip_sigma_rel_along: float = 0.15
    #: Second pass: the vertical-friction shift is modelled per contact from the pass-1 fits
    #: (physics.pipeline._with_slip_shifts) with the ball-ball friction between 0 and this
    #: (upper end of the published 0.03-0.08, Physics of Pool FAQ); replaces the along-dv term.
    slip_mu_bb_max: float = 0.08
    #: ... whose sign needs each ball's slip just before the contact: a pass-1 fit that rolls over
    #: within the last ``slip_roll_min_samples`` samples before the contact is not trusted there
    #: when the slip after the contact (through u' = u + dv + X n) disagrees by more than the
    #: largest |X| plus ``slip_roll_check_z`` sigmas (physics.pipeline._vertical_slip). Design choice.
    slip_roll_min_samples: int = 3
    slip_roll_check_z: float = 3.0
    #: Third pass: the shift is the same X n for both balls of a contact, so each ball's prior
    #: on X takes in the other ball's estimate (physics.pipeline._shared_slip_shifts).
    slip_share_shift: bool = True
    #: ... and e's sigma of such a contact is propagated with the two balls' joint covariance
    #: (physics.pair_cov): each fit follows the other ball's data through the shared shift, so
    #: their post-contact velocities along n err together and largely cancel in e. First-order
    #: error propagation, not tuned.
    pair_joint_cov: bool = True
    #: A linked contact whose fitted slip residuals still add up to more than this chi^2 (2 degrees
    #: of freedom; 13.8 is the 99.9 % point) contradicts the prior: the motion model on one side is
    #: wrong there (e.g. a roll-over fitted on the wrong side of the contact, where the slip has no
    #: gradient and the fit cannot move it), so that ball is refitted without the link. Design choice.
    slip_reject_chi2: float = 13.8
    #: A ball fitted as rolling into a linked contact, or out of it shorter than its link says,
    #: gets one more start sliding through it (physics.segments.slide_into_breaks): rolling, the
    #: slip is 0 with no gradient, so the prior alone cannot move the fit there.
    slide_through_restart: bool = True
    #: The ball-ball touch time (and with it the contact normal, the line of centres of the
    #: pre-contact models then) combines three estimates by their covariance: the time the models
    #: are 2R apart and the two balls' velocity breaks. At a cut angle phi a gap error moves the
    #: gap-only time by gap / v_n, which turns the normal by v_t / v_n x that over 2R, so e's error
    #: grows as tan^2 phi; the breaks are independent evidence of the same instant. Design choice.
    touch_time_fuse: bool = True

    #: Second pass: every slide phase of the shot shares the cloth's mu_s and every roll phase its
    #: mu_r (one cloth, one ball set): the pass-1 shot estimates become priors with these relative
    #: floors on their sigma (design choice: allows ball-to-ball and speed dependence of a few %).
    shot_mu_s_rel_sigma: float = 0.05
    shot_mu_r_rel_sigma: float = 0.25
    #: Slide phases whose deceleration / g falls outside this band are not used for the shot's
    #: mu_s (half the published minimum, 1.5x the published maximum, Physics of Pool FAQ).
    mu_s_plausible: tuple[float, float] = (0.5 * MU_SLIDE_CLOTH_RANGE[0], 1.5 * MU_SLIDE_CLOTH_RANGE[1])
    #: Floor on one slide phase's relative mu_s sigma when combining phases. Design choice.
    mu_s_single_rel_sigma: float = 0.1
    #: Without a usable pass-1 estimate the published typical values are used with these sigmas
    #: (range half-widths, Physics of Pool FAQ ranges in feltlab.standards).
    fallback_mu_s_sigma: float = 0.1
    fallback_mu_r_sigma: float = 0.005

    #: The second pass fits each ball from two starts; when the worse one's robust cost is within
    #: this of the better one's (half a chi^2 difference of 4, i.e. ~2 sigma), the contacts'
    #: restitution difference between them is added to e_sigma as model-choice uncertainty.
    ambiguity_dcost: float = 2.0
    #: Pass 3 (shared slip shifts) refits the runner-up too, and keeps it as the alternate when
    #: it is still within ambiguity_dcost (it was dropped there before). A slow ball after a
    #: contact (the cue ball of a stun shot, 15-60 mm/s) can fit a short decelerating slide or an
    #: accelerating one about equally well; with only the better one's linearised sigma, e was
    #: 2.1-5.1 sigma off in 4 of 40 noise draws of a closed-form stun shot at 120 fps (0.9-1.1
    #: sigma with the alternate; tests/test_physics_sigma_calibration.py). Not tuned.
    alternates_pass3: bool = True
    #: Profile of e over the end of a short slide after a ball-ball contact (physics.slide_profile):
    #: where a ball's slide after the contact holds at most ``slide_profile_max_samples`` used
    #: samples, its chain is refitted with t_roll held on ``slide_profile_points`` values from 0 to
    #: max(2 t_roll, t_roll + ``slide_profile_frames`` frame periods), and e_sigma is widened to the
    #: largest |e_k - e| / sqrt(max(dchi2_k, 1)) among refits within ``slide_profile_dchi2_max``
    #: (3 sigma) of the best (profile likelihood, Wilks; from memory). Stun shot, 120 fps (tests/test_physics_sigma_calibration.py): draws
    #: 3, 8, 10 were 3.3-3.5 sigma off with a ~30 ms slide where the truth slides 3-6 ms.
    #: Counts and span are design choices. Since session 15 the three switches below change
    #: "widened to the largest ratio" into "the linearised t_roll part replaced by the profile's
    #: spread" (all three False: the session 14 behaviour).
    slide_profile: bool = True
    slide_profile_max_samples: int = 4
    slide_profile_frames: float = 4.0
    slide_profile_points: int = 9
    slide_profile_dchi2_max: float = 9.0
    #: ``slide_profile_replace``: the profile REPLACES the t_roll part of e's linearised variance
    #: (e's variance minus its variance with t_roll held) instead of only widening e_sigma; where
    #: the slide lies between two samples the profile is flat to fourth order at its best point and
    #: the linearised part is far too wide (stun shot draw 13 at 120 fps: e_sigma 0.87, e left
    #: empty, where the refits move e by 0.03). ``slide_profile_flip``: each grid point is also
    #: refitted from the reversed slide acceleration (the slip after a contact the ball slid into
    #: is free, so forward and backward slides to the same roll velocity fit alike).
    slide_profile_replace: bool = True
    slide_profile_flip: bool = True
    #: ``slide_profile_moments``: the profile's part is the mean squared difference of e from the
    #: reported e under the profile likelihood exp(-dchi2 / 2) with a flat prior over the signed
    #: slide end (physics.slide_profile._profile_mse), not the largest |e_k - e| / sqrt(dchi2_k):
    #: the profile is flat-topped, and a flat top of width W has a spread W / sqrt(12), not W / 2.
    slide_profile_moments: bool = True
    #: ``slide_profile_pre``: also profile the slide end of the segment each ball ENDS at a contact
    #: (cushion or ball-ball; physics.slide_profile): a draw bank reaching the cushion ~85 ms after
    #: the strike still sliding fits a roll-over a few frames before it about as well (dchi2 ~3),
    #: and the roll phase carries the contact velocity unchanged where the slide takes mu_s g dt
    #: off it per frame; with that slide end taken as known, cushion e was 5.5 sigma off on two
    #: such banks (bench seed 1515, 120 fps). Its part is the largest |e_k - e| / sqrt(dchi2_k)
    #: (the profile rises to a plateau, not flat-topped). False: session 15's behaviour.
    slide_profile_pre: bool = True

    # -- slow touches and compound events (physics.events, physics.compound) ------------------
    #: Change-point windows tried (multiples of the standard window) while a jump is not yet
    #: significant. A slow ball's velocity changes little over many frames (rolling deceleration
    #: ~100 mm/s^2, Physics of Pool FAQ), so a longer window keeps the two-sided quadratic model
    #: valid while its velocity error falls as window^-3/2: an 80 mm/s touch at 60 fps and 0.4 mm
    #: noise needs ~2x the standard window to pass 5 sigma. Design choice.
    kink_window_scales: tuple[float, ...] = (1.0, 2.0, 4.0)
    #: A longer window counts only while the two-sided model still fits it (reduced chi^2 below
    #: this; for ~30 samples a chi^2/dof of 2 is beyond the 99.9 % point). Design choice.
    kink_escalate_max_chi2: float = 2.0
    #: Velocity-change floor (mm/s) of a compound-event link and of a group's jumping ball: the
    #: sliding friction mu_s g (~2000 mm/s^2, Physics of Pool FAQ) changes a velocity by ~2 mm/s
    #: within a ms, so a softer touch cannot be told from cloth effects. Design choice.
    link_dv_floor_mm_s: float = 5.0
    #: Compound events: balls whose velocity changes their tracked touching neighbours cannot
    #: balance (objective drop beyond dv_z^2) were touched by a ball the tracker lost; one unseen
    #: ball is placed where a ball fits, pushing every ball it touches (physics.compound.
    #: solve_links_open; at most one per four tracked balls). Physics, not tuned.
    compound_open_balls: bool = True
    #: Place grid and position tolerance (mm) for such an unseen ball: a 5-degree step around a
    #: ball of radius R misses a place by up to 2R sin(2.5 deg) ~ 2.5 mm. Geometry.
    compound_unseen_tol_mm: float = 3.0
    #: Compound events: a significant link not connected to the event's other links (a push
    #: passed along a side row of a rack) is reported with the event, not left to the pairwise
    #: test, which refuses a ball that passed the push on within the frame.
    compound_lone_links: bool = True
    #: Compound events: a group whose balls' breaks are pinned at the edge of the scanned frame
    #: saw a change at or beyond it; another group sharing one of its links that far on, within
    #: this many frame periods, is the same event and the pinned one a copy. A slow ball is within
    #: the touching margin (3 mm + 4 sigma + one frame of travel, ~8 mm) for ~8 mm / (v dt)
    #: frames before it arrives: 2.7 frames at 180 mm/s and 60 fps. Geometry.
    compound_copy_frames: float = 3.0
    #: A pairwise contact's velocity changes must lie along the line of centres: across it each
    #: ball may change by the throw (at most the published ball-ball friction times the normal
    #: change, feltlab.standards.MU_BALL_BALL_RANGE) plus dv_z standard errors. Physics.
    pair_tangent_check: bool = True
    #: A pairwise contact's two balls must change their normal velocities alike (one impulse,
    #: equal masses): the smaller change must reach this fraction of the larger, within dv_z
    #: standard errors. Half: allows a cue ball up to twice an object ball's mass (the equal-mass
    #: model; heavier coin-op cue balls are ~10-25 % heavier, from memory) and a few % of fit bias.
    #: A ball that changes far less was pushed by another ball at that time. Physics, not tuned.
    pair_impulse_ratio_min: float = 0.5
    #: Contacts have no energy source: the touching balls' translational kinetic energy just after
    #: (fitted velocities at the break) must not exceed the energy before by more than this
    #: fraction plus dv_z standard errors (restitution <= 1; spin is not turned into speed within
    #: the ~0.3 ms contact, REFERENCES.md). A jump of resting neighbours found in a window that
    #: reaches a later hit breaks it. 10 %: bias of velocities extrapolated to the break. Design choice.
    ke_gain_tol: float = 0.1

    #: A contact whose fitted restitution is below 0 by more than this many sigmas (the fitted
    #: motion still approaches after the break) is not reported: its kinematic evidence did not
    #: survive the fit. 2 sigma: ~2.3 % of true contacts with e near 0 would be lost, and true
    #: restitution is >= 0.5 for every published ball and cushion (feltlab.standards). Design choice.
    e_reject_z: float = 2.0

    #: A move segment whose fit leaves a reduced chi^2 above ``split_chi2`` over at least
    #: ``split_min_samples`` samples holds a change the contact finder missed (a slow cushion
    #: touch whose change-point windows were cut short): it is split where a cushion contact
    #: has both kinds of evidence (physics.pipeline._split_hidden). 4 over >= 12 samples (>= 18
    #: degrees of freedom) is far beyond the 99.9 % point of chi^2. Design choice.
    split_hidden: bool = True
    split_chi2: float = 4.0
    split_min_samples: int = 12

    # -- robust fitting ----------------------------------------------------------------------
    #: scipy.optimize.least_squares loss and scale (in standard errors). Design choice: quadratic
    #: up to ~3 sigma, so Gaussian noise keeps full efficiency and outliers lose weight.
    loss: str = "soft_l1"
    f_scale: float = 3.0
    #: Multi-start fractions of a segment's duration for the slide->roll time. Design choice.
    t_roll_starts: tuple[float, ...] = (0.0, 0.1, 0.25, 0.45, 0.7, 1.0, 1.6)
    #: Early windows (s from a segment's start) in which the start values also search the
    #: slide->roll time at every sample interval (physics.segments._move_start_guess): a slide
    #: after a contact lasts up to ~0.5 s (2 |u| / (7 mu_s g) with |u| <= 3 m/s, mu_s >= 0.2),
    #: often tens of ms. Design choice (a search range, not a fitted value).
    guess_windows_s: tuple[float, ...] = (0.3, 1.0)
    #: Floor on the reduced chi^2 that scales the covariance (design choice: input sigmas may be
    #: overstated, but never trust them to be more than 2x too large).
    chi2_floor: float = 0.5
    #: Local lack of fit (physics.segments.misfit_scales): a segment whose residuals over the
    #: whole segment, or over its first / last ``misfit_window`` samples, fail a chi^2 test at
    #: level ``misfit_alpha`` has its parameters' standard errors scaled by sqrt(chi^2/dof) (scale
    #: factor practice of the Particle Data Group's Review of Particle Physics, from memory). The
    #: window is about the samples that fix a velocity at a break; alpha is a conventional 1 %
    #: test. Design choices, not tuned.
    misfit_inflation: bool = True
    misfit_window: int = 8
    misfit_alpha: float = 0.01
    #: The fit covariance is multiplied by the residuals' integrated autocorrelation time
    #: (physics.segments.integrated_autocorr_time; Geyer's initial positive sequence, Statistical
    #: Science 7:473, 1992), at lags up to ``corr_max_lag`` samples: detection errors of a moving
    #: ball are correlated over several frames on real and rendered footage (shading, blur and
    #: compression change slowly along its path), and white-noise sigmas then understate the
    #: velocity errors. 1 for white residuals. Standard statistics, not tuned; the lag cap only
    #: bounds run time.
    residual_corr_inflation: bool = True
    corr_max_lag: int = 60
    #: Parameter directions a chain's samples and priors leave undetermined (a segment with no
    #: sample between two contacts closer than their guards) get the variance of a uniform
    #: spread over each parameter's range (physics.segments.bounded_cov), not the zero a
    #: pseudo-inverse gives them: a 240 fps corner (cushions 2.6 frames apart, no sample left
    #: between) reported e 0.41 +- 0.006 and 1.19 +- 0.064 for a true 0.72. Ranges: the fit's
    #: bounds; start position and velocities, unbounded in the fit, over the table's size
    #: (5 m covers a 12 ft table's diagonal) and +-15 m/s (above break speeds of ~13 m/s, as
    #: for t_roll_max_s). Design choice (a bound, not fitted).
    unresolved_bounded: bool = True
    unresolved_position_mm: float = 5000.0
    unresolved_speed_mm_s: float = 15000.0
    #: A cushion break's centre is no farther from the nose line than at first touch (one-sided
    #: prior, physics.segments.touch_residuals): the velocity cannot change before the touch.
    #: Sigma: the cushion line's place from the table calibration and the nose height (62.5-64.5 %
    #: of the ball's diameter, common practice, from memory: +-0.3 mm on the touch distance),
    #: ~1 mm. 240 fps corner, cushions 2.6 frames apart, draw 3: second break 1.06 -> 0.10 frame
    #: from its closed-form time.
    #: Design choice (a tolerance, not fitted).
    touch_prior: bool = True
    touch_sigma_mm: float = 1.0
    #: Consecutive breaks of a chain whose ranges (break_halfwidth) overlap may not pass each
    #: other: the overlap is split halfway between their initial times (physics.segments._bounds).
    #: At 500 fps a corner's two cushions 5 ms apart (ranges +-4 ms) were fitted in reverse order.
    #: Geometry (time order), not tuned.
    ordered_breaks: bool = True

    # -- leaving the table -----------------------------------------------------------------
    #: A ball whose samples stop this many frame periods before the clip end left the table.
    leave_frames: int = 3

    # -- high frame rates ----------------------------------------------------------------------
    #: Every search for a contact's time spans at least this (s) on either side, and candidates of
    #: one pair (or one ball and cushion) closer than twice it are one contact: the change-point
    #: scan around a sampled gap minimum, a break's freedom in the chain fit (ChainLayout
    #: break_halfwidth) and the duplicate test. The sampled gap's minimum is uncertain by about the
    #: gap noise over the closing speed (sqrt(2) x 0.3-0.5 mm over 150-400 mm/s: 1-5 ms), which one
    #: frame period covers at <= 250 fps (so nothing changes there) but not at 500-1000 fps, where
    #: contacts were held 1-3 ms from their time (bench seed 213 at 1000 fps: ball-ball e errors up
    #: to 0.12). Geometry and noise, not tuned; 4 ms = one frame at 250 fps.
    contact_time_floor_s: float = 0.004
    #: Each cushion candidate is moved to the change point of its touching run before the
    #: kinematic test (physics.events.run_change_point: the instant where the ball's velocity along
    #: the cushion normal changes, from all samples either side), not left at the sampled gap's
    #: minimum: a run within the touching margin spans margin / speed (~15 ms at 700 mm/s), and at
    #: 500-1000 fps its noise minima lie anywhere in it (bench seed 213 at 1000 fps shot 9: a
    #: corner's first cushion 6.9 ms late). Only where the cushion guard spans a frame period or
    #: more (>= 250 fps; identical below by construction), and there the change point is also the
    #: contact's initial time (no sample inside the guard fixes the break). Ball-ball
    #: candidates keep the gap's minimum: a pair's change point also sees each ball's other changes
    #: (a graze beside a hit was moved onto the hit). Least squares, not tuned.
    run_change_point: bool = True
