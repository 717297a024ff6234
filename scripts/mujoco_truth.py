"""Simulate a MuJoCo scene and read the truth (ball states, contacts) off the simulated state.

Clock: sim time 0 is the cue strike; video frame k is centred on sim time ``t_video0_s + k/fps``;
every ``t_s`` written to the truth is on the video clock (frame k at k/fps). Units in the truth:
mm, mm/s, rad/s, s, N·s, J (table frame, see ``mujoco_scene``).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

import mujoco_scene as ms

SETTLE_S = 0.02          # balls rest on the cloth this long before the strike
TAIL_S = 0.06            # simulate past the clip end (e windows up to 50 ms)
POCKET_CLEAR_MM = 170.0  # a valid shot keeps every ball centre this far from each pocket centre
MERGE_STEPS = 40         # force episodes of one pair less than 40 steps (1 ms) apart are one contact


@dataclass
class SimRun:
    """Recorded states before each step: t (N,) s (strike = 0), pos (N, nb, 3) mm, vel (N, nb, 3) mm/s,
    w (N, nb, 3) rad/s world frame; events: contact force episodes."""

    t: np.ndarray
    pos: np.ndarray
    vel: np.ndarray
    w: np.ndarray
    events: list[dict]
    ids: list[str]
    dt: float


def _quat_mat(q: np.ndarray) -> np.ndarray:
    w, x, y, z = q
    return np.array([[1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)],
                     [2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)],
                     [2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)]])


def simulate(model, sc: ms.Scene, keep_qpos: bool = True):
    """Run the shot; returns (SimRun, qpos history (N, nq) for rendering)."""
    import mujoco

    d = mujoco.MjData(model)
    ids = [b.id for b in sc.balls]
    jq = [model.jnt_qposadr[mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_JOINT, f"j_{i}")] for i in ids]
    jv = [model.jnt_dofadr[mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_JOINT, f"j_{i}")] for i in ids]
    geom_of = {mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_GEOM, f"ball_{i}"): i for i in ids}
    cush_of = {}
    for k, (name, _a, _b) in enumerate(ms.cushion_segments()):
        cush_of[mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_GEOM, f"cushion_{name}_{k}")] = name
    dt = float(model.opt.timestep)
    for _ in range(int(SETTLE_S / dt)):
        mujoco.mj_step(model, d)
    for b, a, v in zip(sc.balls, jq, jv):
        d.qpos[a + 3:a + 7] = (1, 0, 0, 0)
        d.qvel[v:v + 6] = 0
        d.qvel[v:v + 2] = np.array(b.vel_mm_s) / 1000.0
        d.qvel[v + 3:v + 6] = b.w_rad_s        # body frame = world frame at identity orientation
    n_steps = int(round((sc.t_video0_s + sc.duration_s + TAIL_S) / dt))
    nb = len(ids)
    Q = np.zeros((n_steps + 1, model.nq))
    V = np.zeros((n_steps + 1, model.nv))
    f6 = np.zeros(6)
    active: dict[tuple, list] = {}
    for s in range(n_steps + 1):
        Q[s] = d.qpos
        V[s] = d.qvel
        if s == n_steps:
            break
        mujoco.mj_step(model, d)
        # forces computed in this step act from state s to s+1
        for c in range(d.ncon):
            con = d.contact[c]
            g1, g2 = int(con.geom1), int(con.geom2)
            if g1 in geom_of and g2 in geom_of:
                a, b = sorted((geom_of[g1], geom_of[g2]))
                key = ("ball-ball", a, b)
            elif g1 in geom_of and g2 in cush_of:
                key = ("ball-cushion", geom_of[g1], cush_of[g2])
            elif g2 in geom_of and g1 in cush_of:
                key = ("ball-cushion", geom_of[g2], cush_of[g1])
            else:
                continue
            mujoco.mj_contactForce(model, d, c, f6)
            if f6[0] > 0:
                active.setdefault(key, []).append((s, float(f6[0])))
    t = np.arange(n_steps + 1) * dt
    pos = np.stack([Q[:, a:a + 3] for a in jq], 1) * 1000.0
    vel = np.stack([V[:, v:v + 3] for v in jv], 1) * 1000.0
    w = np.zeros((n_steps + 1, nb, 3))
    for j, (a, v) in enumerate(zip(jq, jv)):
        for s in range(n_steps + 1):
            w[s, j] = _quat_mat(Q[s, a + 3:a + 7]) @ V[s, v + 3:v + 6]
    events = []
    for key, lst in active.items():
        steps = np.array([s for s, _ in lst])
        force = {}
        for s, f in lst:
            force[s] = force.get(s, 0.0) + f
        cuts = np.nonzero(np.diff(steps) > MERGE_STEPS)[0]   # short force dropouts stay one contact
        starts = np.r_[steps[0], steps[cuts + 1]]
        ends = np.r_[steps[cuts], steps[-1]]
        for s0, s1 in zip(starts, ends):
            events.append(dict(key=key, s0=int(s0), s1=int(s1),
                               force={int(s): force[s] for s in range(s0, s1 + 1) if s in force}))
    events.sort(key=lambda e: e["s0"])
    return SimRun(t=t, pos=pos, vel=vel, w=w, events=events, ids=ids, dt=dt), (Q if keep_qpos else None)


def interp(run: SimRun, arr: np.ndarray, t_sim: float) -> np.ndarray:
    """Linear interpolation of a recorded (N, ...) array at sim time t_sim."""
    x = t_sim / run.dt
    i = int(min(max(math.floor(x), 0), len(run.t) - 2))
    f = x - i
    return arr[i] * (1 - f) + arr[i + 1] * f


def _gap(run: SimRun, key, s: int) -> float:
    kind, a, b = key
    ia = run.ids.index(a)
    if kind == "ball-ball":
        return float(np.linalg.norm(run.pos[s, ia] - run.pos[s, run.ids.index(b)]) - ms.D_MM)
    return ms.nose_gap_mm(b, run.pos[s, ia])


def _normal(run: SimRun, key, t_sim: float) -> np.ndarray:
    kind, a, b = key
    if kind == "ball-cushion":
        return ms.cushion_normal(b)
    d = interp(run, run.pos[:, run.ids.index(b), :2], t_sim) - interp(run, run.pos[:, run.ids.index(a), :2], t_sim)
    return d / np.linalg.norm(d)


def _vrel(run: SimRun, key, s_or_t, at_time: bool = False) -> np.ndarray:
    kind, a, b = key
    get = (lambda j: interp(run, run.vel[:, j, :2], s_or_t)) if at_time else (lambda j: run.vel[s_or_t, j, :2])
    va = get(run.ids.index(a))
    return va if kind == "ball-cushion" else get(run.ids.index(b)) - va


def _e(vpre, vpost, n) -> tuple[float, float, float]:
    a, b = float(vpre @ n), float(vpost @ n)
    return (-b / a if a != 0 else float("nan")), a, b


def contacts_truth(run: SimRun, sc: ms.Scene) -> list[dict]:
    """Contacts in the clip, in the truth format (see contact_definitions)."""
    t0, fps = sc.t_video0_s, sc.fps
    t_clip = sc.duration_s
    m = ms.BALL_KG
    inertia = 0.4 * m * (ms.R_MM / 1000.0) ** 2
    out = []
    for ev in run.events:
        key, s0, s1 = ev["key"], ev["s0"], ev["s1"]
        kind, a, b = key
        if kind == "ball-ball" and np.linalg.norm(run.vel[s0, run.ids.index(b)]) > \
                np.linalg.norm(run.vel[s0, run.ids.index(a)]):
            a, b = b, a                                  # ball_a = the faster (striking) ball
            key = (kind, a, b)
        # first touch: last sign change of the gap at or before the first force step
        s = s0
        while s > 0 and _gap(run, key, s) < 0:
            s -= 1
        g0, g1 = _gap(run, key, s), _gap(run, key, s + 1)
        frac = g0 / (g0 - g1) if g0 != g1 else 0.0
        t_touch = run.t[s] + frac * run.dt
        t_end = run.t[s1 + 1]
        ts = t_touch - t0
        if not (0.0 <= ts < t_clip):
            continue
        n = _normal(run, key, t_touch)
        # impulse-weighted normal
        nw = np.zeros(2)
        J = 0.0
        for st, f in ev["force"].items():
            nw += f * _normal(run, key, run.t[st])
            J += f * run.dt
        nw /= np.linalg.norm(nw)
        vpre, vpost = _vrel(run, key, s0), _vrel(run, key, s1 + 1)
        e, vn_pre, vn_post = _e(vpre, vpost, n)
        e_w, _, _ = _e(vpre, vpost, nw)
        win = {}
        for w_s in (0.005, 0.02, 0.05):
            win[f"{int(w_s * 1000)}ms"] = round(_e(_vrel(run, key, t_touch - w_s, True),
                                                  _vrel(run, key, t_end + w_s, True), n)[0], 5)
        movers = [a] if kind == "ball-cushion" else [a, b]
        jb = run.ids.index(b if kind == "ball-ball" else a)
        dvn = float((run.vel[s1 + 1, jb, :2] - run.vel[s0, jb, :2]) @ n)

        def st(idx):
            return {bid: dict(v_mm_s=[round(float(v), 3) for v in run.vel[idx, run.ids.index(bid)]],
                              w_rad_s=[round(float(v), 4) for v in run.w[idx, run.ids.index(bid)]],
                              pos_mm=[round(float(v), 3) for v in run.pos[idx, run.ids.index(bid)]])
                    for bid in movers}

        def ke(idx):
            tr = sum(0.5 * m * float(np.sum((run.vel[idx, run.ids.index(q)] / 1000.0) ** 2)) for q in movers)
            ro = sum(0.5 * inertia * float(np.sum(run.w[idx, run.ids.index(q)] ** 2)) for q in movers)
            return tr, ro

        ktp, krp = ke(s0)
        kto, kro = ke(s1 + 1)
        if kind == "ball-ball":
            cp = interp(run, run.pos[:, run.ids.index(a), :2], t_touch) + n * ms.R_MM
        else:
            p = interp(run, run.pos[:, run.ids.index(a), :2], t_touch)
            cp = {"y0": (p[0], 0.0), "yW": (p[0], ms.W_MM), "x0": (0.0, p[1]), "xL": (ms.L_MM, p[1])}[b]
        rec = dict(kind=kind, duration_ms=round((t_end - t_touch) * 1000.0, 2),
                   normal_impulse_Ns=J, normal_impulse_weighted=[round(float(v), 6) for v in nw],
                   e_impulse_normal=e_w,
                   normal_rotation_deg=math.degrees(math.acos(min(1.0, abs(float(n @ nw))))),
                   e_window=win, ball_a=a, ball_b=b if kind == "ball-ball" else "")
        if kind == "ball-cushion":
            rec["cushion"] = b
        rec.update(normal=[float(v) for v in n], contact_point_mm=[float(v) for v in cp],
                   vn_rel_pre_mm_s=vn_pre, vn_rel_post_mm_s=vn_post, e=e, e_pm5ms=win["5ms"],
                   momentum_transfer_Ns=abs(dvn) / 1000.0 * m, pre=st(s0), post=st(s1 + 1),
                   ke_trans_pre_J=ktp, ke_trans_post_J=kto, ke_rot_pre_J=krp, ke_rot_post_J=kro,
                   energy_loss_J=(ktp + krp) - (kto + kro),
                   energy_loss_frac_trans=(ktp - kto) / ktp if ktp > 0 else None,
                   significant=abs(dvn) >= 100.0, t_s=round(ts, 6), frame_float=round(ts * fps, 4),
                   t_end_s=round(t_end - t0, 6), _balls=set(movers), _e_w_ok=abs(e - e_w) <= 0.01,
                   _vn_ok=abs(vn_pre) >= 150.0, _pair=(kind, a, b))
        out.append(rec)
    out.sort(key=lambda r: r["t_s"])
    for i, r in enumerate(out):
        r["id"] = i
        near = [q for q in out if q is not r and q["_balls"] & r["_balls"]
                and q["t_s"] - 0.002 <= r["t_end_s"] and r["t_s"] - 0.002 <= q["t_end_s"]]
        prev = [q for q in out[:i] if q["_pair"] == r["_pair"]]
        r["overlapping_ids"] = [j for j, q in enumerate(out) if q is not r and q["_balls"] & r["_balls"]
                                and q["t_s"] <= r["t_end_s"] and r["t_s"] <= q["t_end_s"]]
        r["overlaps_other_contact"] = bool(r["overlapping_ids"])
        r["resolvable"] = not (prev and r["t_s"] - prev[-1]["t_s"] < 1.0 / fps)
        r["required"] = bool(r["significant"] and r["resolvable"])
        r["e_valid"] = bool(r["significant"] and r["_vn_ok"] and not near and r["_e_w_ok"])
    for r in out:
        for k in ("_balls", "_e_w_ok", "_vn_ok", "_pair"):
            r.pop(k)
    return out


def check_shot(run: SimRun, sc: ms.Scene, contacts: list[dict]) -> str | None:
    """Why this shot is not usable (None if it is): balls near pockets / off the bed / airborne,
    no cue-object contact, no cushion contact in the clip (contacts checked on clips >= 1.2 s)."""
    end = int(round((sc.t_video0_s + sc.duration_s) / run.dt))
    P = run.pos[:end]
    if np.any(P[..., 2] > ms.R_MM + 3.0):
        return "a ball leaves the cloth"
    for x, y, _r in ms.pockets_mm():
        if np.any(np.hypot(P[..., 0] - x, P[..., 1] - y) < POCKET_CLEAR_MM):
            return "a ball comes near a pocket"
    if np.any(P[..., 0] < ms.R_MM - 5) or np.any(P[..., 0] > ms.L_MM - ms.R_MM + 5) \
            or np.any(P[..., 1] < ms.R_MM - 5) or np.any(P[..., 1] > ms.W_MM - ms.R_MM + 5):
        return "a ball leaves the playing surface"
    if sc.duration_s < 1.2:      # a short clip (tests, looks) need not hold the contacts
        return None
    ob = sc.balls[1].id
    bb = [c for c in contacts if c["kind"] == "ball-ball" and {c["ball_a"], c["ball_b"]} == {"cue", ob}]
    if not bb or bb[0]["t_s"] < 0.12:
        return "no cue-object contact after 0.12 s"
    if not any(c["kind"] == "ball-cushion" and c["t_s"] > bb[0]["t_s"] + 0.05 and c["required"] for c in contacts):
        return "no cushion contact after the hit"
    return None


CONTACT_DEFINITIONS = {
    "t_s": "first touch on the video clock: the gap (ball-ball: centre distance - D; ball-cushion: centre to "
           "nose-line distance - R) interpolated linearly to zero between the two steps around its sign change",
    "pre": "state before the first integration step in which the contact force is non-zero",
    "post": "state after the last integration step in which the contact force is non-zero (force dropouts "
            "shorter than 1 ms count as one contact); cloth friction also acts meanwhile",
    "normal": "ball-ball: unit table-plane line of centres a->b at first touch; ball-cushion: horizontal inward normal",
    "e": "-(normal relative velocity post)/(normal relative velocity pre), table-plane components; ball-ball "
         "v_rel = v_b - v_a, ball-cushion v_rel = v_ball",
    "e_pm5ms": "e from velocities 5 ms before first touch and 5 ms after the force ends (e_window: 5/20/50 ms)",
    "significant": "|change of normal velocity| of ball_b (ball-ball) or of the ball (cushion) >= 100 mm/s",
    "resolvable": "false when the same pair touched less than one frame period earlier",
    "required": "significant and resolvable (counted in recall); other contacts are optional",
    "e_valid": "significant, |normal approach speed| >= 150 mm/s, no other contact sharing a ball within 2 ms, "
               "and e with the force-weighted normal within 0.01 of e",
    "momentum_transfer_Ns": "mass * |change of normal velocity| of ball_b (ball-ball) or of the ball (cushion)",
    "normal_impulse_Ns": "time integral of the MuJoCo contact normal force",
    "energy_loss_J": "translational + rotational kinetic energy of the involved balls, pre - post",
}
