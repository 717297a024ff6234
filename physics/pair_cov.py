"""Joint covariance of the two balls of a ball-ball contact whose fits share one slip shift.

Both balls of a linked contact carry the same vertical-friction slip shift ``X`` (mm/s, along
the contact normal ``n``) in their cloth-slip priors (:func:`physics.segments.slip_residuals`).
Pass 2 gives both the prior ``X ~ N(X0, s0^2)``; in pass 3
(:func:`physics.pipeline._shared_slip_shifts`) each ball's prior on X becomes the OTHER ball's
pass-2 estimate of it, so each ball's final fit is (to first order) the joint estimate of
``(x_a, x_b, X)`` from both balls' samples. Each ball's own covariance still treats its prior as
an outside number; the two fits are in fact correlated through X: their post-contact velocities
along ``n`` err together and the error largely cancels in ``(vb' - va') . n``, e's numerator.

The joint covariance is the inverse of the joint Gauss-Newton information of
``(x_a, x_b, X)`` (normal equations of the stacked least-squares problem):

* each ball's own information ``H = C^-1`` (``C = k (J^T J)^-1`` its covariance, k its scale:
  reduced chi^2 x residual autocorrelation time) with its slip-link row along ``n`` taken out,
  ``H - g g^T / (k sigma^2)`` (``g`` the gradient of the implied shift ``I = (u' - u - dv) . n``,
  ``sigma`` the row's sigma in the fit, which includes the prior's);
* the row put back with X as a parameter, ``(I(x) - X) / s_p`` (``s_p`` the slip prior's own
  sigma, without the prior on X): information ``[g; -1] [g; -1]^T / (k s_p^2)``;
* the pass-2 prior on X, ``1 / s0^2``.

Standard linear least squares; nothing fitted. That is where both balls' pass-3 priors follow
the other's estimate (not held at a bound: ``ChainLayout.slip_shift_s0``). Where only one does
(the other's data added too little), the follower's error holds the other's implied shift's
(:func:`_one_way`); where neither does but both took the same pass-2 prior, that prior centre's
error is common to both (:func:`_common_prior`).

Checked against Monte Carlo over noise draws (tests/test_physics_pair_cov.py): the two balls'
post-contact normal velocities err together as the joint covariance says. Its noise part
(``sampling=True``) matches the spread of e where the priors' centres do not move with the
data; where they do (the shot's friction priors come from the other balls' fits) the spread is
larger than the noise part and smaller than the full posterior sigma.
"""
from __future__ import annotations

import numpy as np

from physics.contacts import _jacobian
from physics.segments import ChainFit, _link_state, link_sigma_along
from physics.settings import PhysicsSettings


def implied_shift(z: np.ndarray, lay, j: int, n: np.ndarray) -> float:
    """(u_start - u_end - dv) . n at break j of a chain with parameters z (mm/s)."""
    st = _link_state(z, lay, j)
    if st is None:
        return float("nan")
    _, _, _, u_end, _, u_start, dv = st
    return float((u_start - u_end - dv) @ n)


def _s0(f: ChainFit, j: int) -> float:
    lay = f.layout
    if lay.slip_shift_s0 is None or not lay.links[j] or _link_state(f.x, lay, j) is None:
        return float("nan")
    return float(lay.slip_shift_s0[j])


def joint_cov(fa: ChainFit, ia: int, fb: ChainFit, ib: int, s: PhysicsSettings,
              sampling: bool = False) -> np.ndarray:
    """Covariance (na + nb, na + nb) of the stacked parameters (xa, xb) of a contact's two balls
    at breaks ``ia`` / ``ib``: the joint posterior through the shared slip shift (module
    docstring) where both fits share it, else the two fits' own blocks. ``sampling``: only the
    part the samples' noise makes, ``C H_data C`` (sandwich; the priors' centres held fixed), what
    a Monte Carlo over noise draws of one shot shows."""
    na, nb = len(fa.x), len(fb.x)
    cz = np.zeros((na + nb, na + nb))
    cz[:na, :na] = fa.cov
    cz[na:, na:] = fb.cov
    if s.slip_prior and s.pair_joint_cov:
        try:
            cj = _joint(fa, ia, fb, ib, s)
            if cj is None:
                cj = _one_way(fa, ia, fb, ib, s)
            if cj is None:
                cj = _common_prior(fa, ia, fb, ib, s)
        except (np.linalg.LinAlgError, ValueError, IndexError, TypeError):
            cj = None  # a degenerate fit: its own blocks, as before (never a failed analysis)
        if cj is not None and np.all(np.isfinite(cj)):
            cz = cj
    if sampling:
        h = np.zeros_like(cz)
        for f, sl in ((fa, slice(0, na)), (fb, slice(na, na + nb))):
            if f.info_data is not None:
                h[sl, sl] = f.info_data
        cz = cz @ h @ cz
    return cz


def _joint(fa: ChainFit, ia: int, fb: ChainFit, ib: int, s: PhysicsSettings) -> np.ndarray | None:
    """Joint posterior covariance of (xa, xb) through the shared shift, None where not shared."""
    na, nb = len(fa.x), len(fb.x)
    s0a, s0b = _s0(fa, ia), _s0(fb, ib)
    if not (np.isfinite(s0a) and np.isfinite(s0b) and s0a > 0):
        return None
    n = np.asarray(fa.layout.slip_shift[ia][1:], dtype=float)
    if not np.allclose(n, fb.layout.slip_shift[ib][1:], atol=1e-6):
        return None
    blocks = []
    for f, j in ((fa, ia), (fb, ib)):
        free = np.diag(f.cov) > 0
        k = f.cov_scale
        sig = link_sigma_along(f.x, f.layout, s, j)
        s3 = float(f.layout.slip_shift_sigma[j])
        sp2 = sig**2 - s3**2
        if not (np.isfinite(k) and k > 0 and np.isfinite(sig) and sp2 > 0 and free.any()):
            return None
        g = _jacobian(lambda z, f=f, j=j: np.array([implied_shift(z, f.layout, j, n)]), f.x, f.cov)[0][free]
        if not np.all(np.isfinite(g)):
            return None
        C = f.cov[np.ix_(free, free)]
        d = np.sqrt(np.diag(C))
        H = np.linalg.pinv(C / np.outer(d, d), rcond=1e-12, hermitian=True) / np.outer(d, d)
        blocks.append((free, H - np.outer(g, g) / (k * sig**2), g, k * sp2))
    m = [int(b[0].sum()) for b in blocks]
    N = m[0] + m[1] + 1
    Hj = np.zeros((N, N))
    off = 0
    for (free, H_own, g, w), mi in zip(blocks, m):
        sl = slice(off, off + mi)
        Hj[sl, sl] = H_own + np.outer(g, g) / w
        Hj[sl, -1] = Hj[-1, sl] = -g / w
        Hj[-1, -1] += 1.0 / w
        off += mi
    Hj[-1, -1] += 1.0 / s0a**2
    d = np.sqrt(np.abs(np.diag(Hj)))
    d[d == 0] = 1.0
    try:
        Cj = np.linalg.inv(Hj / np.outer(d, d)) / np.outer(d, d)
    except np.linalg.LinAlgError:
        return None
    Cj = 0.5 * (Cj + Cj.T)[:-1, :-1]
    if not np.all(np.isfinite(Cj)) or np.linalg.eigvalsh(Cj).min() < -1e-9 * np.abs(Cj).max():
        return None
    idx = np.concatenate([np.flatnonzero(blocks[0][0]), na + np.flatnonzero(blocks[1][0])])
    out = np.zeros((na + nb, na + nb))
    out[np.ix_(idx, idx)] = Cj
    return out


def _common_prior(fa: ChainFit, ia: int, fb: ChainFit, ib: int, s: PhysicsSettings) -> np.ndarray | None:
    """Joint covariance of (xa, xb) when both fits took the same prior ``X ~ N(X0, s0^2)`` on the
    shift as an outside number (not shared in pass 3): each fit moves with the prior's centre by
    ``K = (C / k) g / sigma^2`` (module docstring), so the error of the one centre, ``X0 - X``
    with variance s0^2, is common to both: ``Cov(xa, xb) = s0^2 K_a K_b^T``. None when the two
    priors differ or a ball has no such link."""
    la, lb = fa.layout, fb.layout
    if la.slip_shift is None or lb.slip_shift is None or not (la.links[ia] and lb.links[ib]):
        return None
    sha, shb = np.asarray(la.slip_shift[ia], float), np.asarray(lb.slip_shift[ib], float)
    s0 = float(la.slip_shift_sigma[ia])
    if not (np.all(np.isfinite(sha)) and np.allclose(sha, shb, atol=1e-6) and np.isfinite(s0) and s0 > 0
            and abs(float(lb.slip_shift_sigma[ib]) - s0) < 1e-6 * max(s0, 1.0)):
        return None
    n = sha[1:]
    ga, gb = _gain(fa, ia, n, s), _gain(fb, ib, n, s)
    if ga is None or gb is None:
        return None
    return _assemble(fa, fb, s0**2 * np.outer(ga[1], gb[1]))


def _gain(f: ChainFit, j: int, n: np.ndarray, s: PhysicsSettings):
    """(g, K): gradient of the implied shift at break j (mm/s per parameter) and how the fit
    moves with its shift prior's centre, ``K = (C / k) g / sigma^2``; None if undefined."""
    k = f.cov_scale
    sig = link_sigma_along(f.x, f.layout, s, j)
    if _link_state(f.x, f.layout, j) is None or not (np.isfinite(k) and k > 0 and np.isfinite(sig) and sig > 0):
        return None
    g = _jacobian(lambda z: np.array([implied_shift(z, f.layout, j, n)]), f.x, f.cov)[0]
    if not np.all(np.isfinite(g)):
        return None
    return g, (f.cov / k) @ g / sig**2


def _one_way(fa: ChainFit, ia: int, fb: ChainFit, ib: int, s: PhysicsSettings) -> np.ndarray | None:
    """Joint covariance of (xa, xb) when only one ball's pass-3 prior is the other's estimate
    (the other kept its pass-2 prior: its own data added too little): the follower's error holds
    ``K I_other``'s error, so ``Cov(x_f, x_o) = K_f g_o^T C_o``. None otherwise."""
    sa, sb = _s0(fa, ia), _s0(fb, ib)
    if np.isfinite(sa) == np.isfinite(sb):
        return None
    flip = np.isfinite(sb)
    (ff, jf), (fo, jo) = ((fb, ib), (fa, ia)) if flip else ((fa, ia), (fb, ib))
    if fo.layout.slip_shift is None or not fo.layout.links[jo]:
        return None
    n = np.asarray(ff.layout.slip_shift[jf][1:], dtype=float)
    if not np.allclose(n, fo.layout.slip_shift[jo][1:], atol=1e-6):
        return None
    gf, go = _gain(ff, jf, n, s), _gain(fo, jo, n, s)
    if gf is None or go is None:
        return None
    c_fo = np.outer(gf[1], go[0] @ fo.cov)  # (n_f, n_o)
    cab = c_fo.T if flip else c_fo
    return _assemble(fa, fb, cab)


def _assemble(fa: ChainFit, fb: ChainFit, cab: np.ndarray) -> np.ndarray | None:
    """[[Ca, Cab], [Cab^T, Cb]], None when that is not positive semi-definite."""
    na, nb = len(fa.x), len(fb.x)
    cz = np.zeros((na + nb, na + nb))
    cz[:na, :na] = fa.cov
    cz[na:, na:] = fb.cov
    cz[:na, na:] = cab
    cz[na:, :na] = cab.T
    d = np.sqrt(np.clip(np.diag(cz), 0, None))
    d[d == 0] = 1.0
    if np.linalg.eigvalsh(cz / np.outer(d, d)).min() < -1e-9:
        return None
    return cz
