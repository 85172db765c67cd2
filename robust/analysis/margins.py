"""Stability margins at the wheel-torque inputs, vectorised over a batch of models.

Loop-at-a-time: the loop is broken at one input with the other loop
closed.  With ``u = -K x`` the loop transfer at input ``j`` is
``L_j(s) = N_j(s) / D_j(s)`` where ``D_j = det(sI - A + B_o K_o)`` (other
loop ``o`` closed) and, by the matrix determinant lemma,
``N_j = det(sI - A + B K) - D_j``.  On ``s = j w`` every margin reduces to
roots of low-degree real polynomials in ``w^2``, found for the whole batch
at once:

* gain margins: the closed loop ``D + k N`` can only lose stability where
  ``k = -D(jw)/N(jw)`` is real; the nearest such ``k`` above and below 1
  bound the stable gain range;
* phase and delay margins: gain crossovers ``|N| = |D|``;
* disk margin (balanced, skew 0): ``alpha = 1 / ||S - 1/2||_inf``
  (Blight, Dailey and Gangsaas 1994; Seiler, Packard and Gahinet 2020),
  i.e. ``alpha = 2 min_w |D + N| / |D - N|``, at stationary points of a
  rational function of ``w^2``.

The multi-loop disk margin perturbs both inputs at once by independent
complex disks: ``alpha_mimo = 1 / sup_w mu(S(jw) - I/2)`` with ``S`` the
input sensitivity.  For two scalar complex blocks ``mu`` equals its
D-scaled upper bound (Packard and Doyle 1993), computed here in closed form;
the supremum over frequency is taken on a grid refined by golden-section
search, so the figure is accurate to the refinement tolerance, not a proof.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from robust.analysis.eigen import charpoly_4x4, eigenvalues_4x4, quartic_roots


def _pmul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Batched product of polynomials with increasing-power coefficients ``(n, p)``, ``(n, q)``."""
    out = np.zeros((a.shape[0], a.shape[1] + b.shape[1] - 1))
    for i in range(a.shape[1]):
        out[:, i : i + b.shape[1]] += a[:, i : i + 1] * b
    return out


def _padd(*polys: np.ndarray) -> np.ndarray:
    size = max(p.shape[1] for p in polys)
    out = np.zeros((polys[0].shape[0], size))
    for p in polys:
        out[:, : p.shape[1]] += p
    return out


def _shift(p: np.ndarray) -> np.ndarray:
    """Multiply by ``w``."""
    return np.concatenate([np.zeros((p.shape[0], 1)), p], axis=1)


def _peval(p: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Evaluate ``(n, q)`` polynomials at ``(n, m)`` points (Horner)."""
    out = np.zeros(x.shape, dtype=np.result_type(x, float))
    for i in range(p.shape[1] - 1, -1, -1):
        out = out * x + p[:, i : i + 1]
    return out


def _roots(p: np.ndarray) -> np.ndarray:
    """All roots of batched real polynomials ``(n, q)`` (increasing powers), ``(n, q - 1)`` complex.

    A vanishing leading coefficient is replaced by a tiny one, which adds a
    huge spurious root; callers only use roots as candidate points and
    evaluate the exact function there, so spurious roots are harmless.
    """
    deg = p.shape[1] - 1
    scale = np.abs(p).max(axis=1, keepdims=True)
    scale = np.where(scale > 0, scale, 1.0)
    q = p / scale
    lead = q[:, -1]
    tiny = 1e-13
    lead = np.where(np.abs(lead) < tiny, np.where(lead < 0, -tiny, tiny), lead)
    mon = q[:, :-1] / lead[:, None]
    if deg == 4:
        return quartic_roots(mon[:, ::-1])
    comp = np.zeros((p.shape[0], deg, deg))
    comp[:, 0, :] = -mon[:, ::-1]
    if deg > 1:
        comp[:, np.arange(1, deg), np.arange(deg - 1)] = 1.0
    return np.linalg.eigvals(comp)


def _real_nonneg(roots: np.ndarray, rtol: float = 1e-6) -> np.ndarray:
    """Real parts of roots that are real and >= 0 (others set to NaN), ``(n, m)``."""
    re = roots.real
    ok = (np.abs(roots.imag) <= rtol * np.maximum(1.0, np.abs(roots))) & (re >= -1e-12 * np.maximum(1.0, np.abs(re)))
    return np.where(ok, np.maximum(re, 0.0), np.nan)


def _newton(p: np.ndarray, x: np.ndarray, steps: int = 3) -> np.ndarray:
    dp = p[:, 1:] * np.arange(1, p.shape[1])[None, :]
    for _ in range(steps):
        f = _peval(p, np.nan_to_num(x))
        fp = _peval(dp, np.nan_to_num(x))
        ok = np.abs(fp) > 1e-300
        x = np.where(ok & np.isfinite(x), x - f / np.where(ok, fp, 1.0), x)
    return np.maximum(x, 0.0)


@dataclass(frozen=True)
class LoopMargins:
    """Loop-at-a-time margins; every array has shape ``(n, 2)`` (left, right input).

    Attributes
    ----------
    gain_margin_upper_db
        How far the loop gain may rise before instability; ``inf`` if never. [dB]
    gain_margin_lower_db
        How far it may fall (a negative number); ``-inf`` if down to zero. [dB]
    phase_margin_deg
        Smallest absolute phase margin over all gain crossovers, with its
        sign; ``inf`` when ``|L|`` never crosses 1. [deg]
    delay_margin_s
        Smallest pure delay that destabilises the loop; ``inf`` if none. [s]
    crossover_rad_s
        Gain-crossover frequency of the reported phase margin (NaN if none). [rad/s]
    disk_margin
        Balanced disk margin ``alpha`` (skew 0). [-]
    disk_gain_low, disk_gain_high
        Gain factors that the disk margin guarantees: ``(2 - a)/(2 + a)``
        and ``(2 + a)/(2 - a)`` (``inf`` for ``a >= 2``). [-]
    disk_phase_deg
        Phase variation it guarantees, ``2 atan(a / 2)``. [deg]
    stable
        Closed loop stable (shape ``(n,)``); margins of unstable loops are 0.
    """

    gain_margin_upper_db: np.ndarray
    gain_margin_lower_db: np.ndarray
    phase_margin_deg: np.ndarray
    delay_margin_s: np.ndarray
    crossover_rad_s: np.ndarray
    disk_margin: np.ndarray
    disk_gain_low: np.ndarray
    disk_gain_high: np.ndarray
    disk_phase_deg: np.ndarray
    stable: np.ndarray


def loop_polynomials(A: np.ndarray, B: np.ndarray, K: np.ndarray, j: int) -> dict[str, np.ndarray]:
    """``D_j`` and ``N_j`` in powers of ``s`` (increasing, ``(n, 5)``) for the loop broken at input ``j``."""
    o = 1 - j
    F = A - B[:, :, o : o + 1] @ K[..., o : o + 1, :]  # K (2, 4) or one per model (n, 2, 4)
    Acl = A - B @ K
    d = charpoly_4x4(F)
    c = charpoly_4x4(Acl)
    one = np.ones((A.shape[0], 1))
    D = np.concatenate([d[:, ::-1], one], axis=1)
    N = np.concatenate([(c - d)[:, ::-1], np.zeros_like(one)], axis=1)
    return {"D": D, "N": N}


def _even_odd(P: np.ndarray):
    """``P(jw) = E(w^2) + j w O(w^2)``: coefficients of E and O in ``w^2``."""
    n, q = P.shape
    E = np.zeros((n, (q + 1) // 2))
    O = np.zeros((n, max(q // 2, 1)))
    for k in range(q):
        sign = -1.0 if (k // 2) % 2 else 1.0
        if k % 2 == 0:
            E[:, k // 2] = sign * P[:, k]
        else:
            O[:, k // 2] = sign * P[:, k]
    return E, O


def _at(P: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``P(j w)`` for frequencies ``(n, m)``."""
    return _peval(P, 1j * np.nan_to_num(w))


def loop_margins(A: np.ndarray, B: np.ndarray, K: np.ndarray) -> LoopMargins:
    """Loop-at-a-time margins at both inputs for a batch of models.

    Parameters
    ----------
    A, B
        Reduced models, shapes ``(n, 4, 4)`` and ``(n, 4, 2)``.
    K
        Gain, shape ``(2, 4)`` or one per model ``(n, 2, 4)``; control law ``u = -K x``.
    """
    n = A.shape[0]
    stable = eigenvalues_4x4(A - B @ K).real.max(axis=-1) < 0
    cols = {k: [] for k in ("gu", "gl", "pm", "dm", "wc", "disk")}
    for j in range(2):
        polys = loop_polynomials(A, B, K, j)
        D, N = polys["D"], polys["N"]
        De, Do = _even_odd(D)
        Ne, No = _even_odd(N)
        # -- gain margins: Im(N conj D) = w (No De - Ne Do) = 0
        h = _padd(_pmul(No, De), -_pmul(Ne, Do))
        w2 = _real_nonneg(_roots(h))
        w2 = np.concatenate([np.zeros((n, 1)), w2], axis=1)
        om = np.sqrt(w2)
        Dv, Nv = _at(D, om), _at(N, om)
        with np.errstate(divide="ignore", invalid="ignore"):
            k = -Dv / Nv
        realk = np.isfinite(k) & (np.abs(k.imag) <= 1e-6 * np.abs(k)) & np.isfinite(om)
        kr = np.where(realk, k.real, np.nan)
        above = np.where(kr > 1.0, kr, np.inf).min(axis=1)
        below = np.where(kr < 1.0, kr, -np.inf).max(axis=1)
        with np.errstate(divide="ignore"):
            gu = 20.0 * np.log10(above)
            # a crossing at a gain factor of ~1e-15 is the zero-gain crossing of a pole at the origin (D(0) = 0
            # up to roundoff): no finite gain-reduction margin, as python-control also reports it
            gl = np.where(below > 1e-9, 20.0 * np.log10(np.where(below > 1e-9, below, 1.0)), -np.inf)
        # -- phase / delay margins: |D|^2 - |N|^2 = 0
        g = _padd(_pmul(De, De), _shift(_pmul(Do, Do)), -_pmul(Ne, Ne), -_shift(_pmul(No, No)))
        wc2 = _newton(g, _real_nonneg(_roots(g)))
        wc = np.sqrt(wc2)
        with np.errstate(divide="ignore", invalid="ignore"):
            L = _at(N, wc) / _at(D, wc)
        theta = np.angle(L)
        pm = np.remainder(np.degrees(theta), 360.0) - 180.0
        valid = np.isfinite(wc) & (wc > 0)
        pm = np.where(valid, pm, np.nan)
        lag = np.remainder(theta + np.pi, 2.0 * np.pi)
        with np.errstate(divide="ignore", invalid="ignore"):
            delay = np.where(valid, lag / wc, np.inf)
        pick = np.argmin(np.where(valid, np.abs(pm), np.inf), axis=1)
        has = valid.any(axis=1)
        rows = np.arange(n)
        pm_sel = np.where(has, pm[rows, pick], np.inf)
        wc_sel = np.where(has, wc[rows, pick], np.nan)
        dm = np.min(delay, axis=1)
        # -- disk margin: min over w of |D + N|^2 / |D - N|^2
        Pp = _padd(_pmul(De + Ne, De + Ne), _shift(_pmul(Do + No, Do + No)))
        Qp = _padd(_pmul(De - Ne, De - Ne), _shift(_pmul(Do - No, Do - No)))
        dP = Pp[:, 1:] * np.arange(1, Pp.shape[1])
        dQ = Qp[:, 1:] * np.arange(1, Qp.shape[1])
        stat = _padd(_pmul(dP, Qp), -_pmul(Pp, dQ))
        cand = _real_nonneg(_roots(stat))
        cand = np.concatenate([np.zeros((n, 1)), cand], axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = _peval(Pp, np.nan_to_num(cand)) / _peval(Qp, np.nan_to_num(cand))
        ratio = np.where(np.isfinite(cand) & (ratio >= 0), ratio, np.inf)
        alpha = 2.0 * np.sqrt(np.minimum(ratio.min(axis=1), 1.0))  # w -> inf: |L| -> 0, ratio -> 1
        alpha = np.where(alpha > 2.0 - 1e-12, 2.0, alpha)  # 2 up to roundoff: unbounded gain range
        for key, val in (("gu", gu), ("gl", gl), ("pm", pm_sel), ("dm", dm), ("wc", wc_sel), ("disk", alpha)):
            cols[key].append(val)
    st = stable[:, None]
    gu, gl, pm, dm, wc, disk = (np.stack(cols[k], axis=1) for k in ("gu", "gl", "pm", "dm", "wc", "disk"))
    gu = np.where(st, gu, 0.0)
    gl = np.where(st, gl, 0.0)
    pm = np.where(st, pm, 0.0)
    dm = np.where(st, dm, 0.0)
    disk = np.where(st, disk, 0.0)
    return LoopMargins(
        gain_margin_upper_db=gu,
        gain_margin_lower_db=gl,
        phase_margin_deg=pm,
        delay_margin_s=dm,
        crossover_rad_s=wc,
        disk_margin=disk,
        **disk_ranges(disk),
        stable=stable,
    )


def disk_ranges(alpha: np.ndarray) -> dict[str, np.ndarray]:
    """Gain factors and phase that a balanced disk margin ``alpha`` guarantees."""
    alpha = np.asarray(alpha, dtype=float)
    with np.errstate(divide="ignore"):
        high = np.where(alpha < 2.0, (2.0 + alpha) / np.where(alpha < 2.0, 2.0 - alpha, 1.0), np.inf)
    return {
        "disk_gain_low": (2.0 - np.minimum(alpha, 2.0)) / (2.0 + np.minimum(alpha, 2.0)),
        "disk_gain_high": high,
        "disk_phase_deg": np.degrees(2.0 * np.arctan(alpha / 2.0)),
    }


def _mu_2x2(M: np.ndarray) -> np.ndarray:
    """Structured singular value of 2 x 2 complex matrices for two scalar complex blocks.

    ``mu = sqrt((T + sqrt(T^2 - 4 |det M|^2)) / 2)`` with
    ``T = |m11|^2 + |m22|^2 + 2 |m12| |m21|``: the largest singular value
    of ``D M D^-1`` at the optimal diagonal scaling, which equals ``mu``
    for this block structure.
    """
    a, b, c, e = M[..., 0, 0], M[..., 0, 1], M[..., 1, 0], M[..., 1, 1]
    T = np.abs(a) ** 2 + np.abs(e) ** 2 + 2.0 * np.abs(b) * np.abs(c)
    det2 = np.abs(a * e - b * c) ** 2
    return np.sqrt(0.5 * (T + np.sqrt(np.maximum(T * T - 4.0 * det2, 0.0))))


def _input_sensitivity_shifted(V, lam, left, right, w):
    """``S(jw) - I/2`` with ``S = I - K (sI - Acl)^-1 B`` from the modal form of ``Acl``.

    ``left = K V`` ``(n, 2, 4)``, ``right = V^-1 B`` ``(n, 4, 2)``; ``w`` is ``(n, m)``.
    """
    with np.errstate(divide="ignore", invalid="ignore"):  # only unstable loops reach a pole
        res = 1.0 / (1j * w[:, :, None] - lam[:, None, :])  # (n, m, 4)
    G = np.einsum("nik,nmk,nkj->nmij", left, res, right)
    return 0.5 * np.eye(2) - G


def multiloop_disk_margin(
    A: np.ndarray, B: np.ndarray, K: np.ndarray, *, grid_points: int = 160, refine_steps: int = 40
) -> dict[str, np.ndarray]:
    """Disk margin for simultaneous, independent disk perturbations at both inputs.

    Returns ``{"disk_margin": (n,), "peak_rad_s": (n,)}`` plus the guaranteed
    gain and phase ranges (see :func:`disk_ranges`).  Unstable loops get 0.
    """
    n = A.shape[0]
    Acl = A - B @ K
    lam, V = np.linalg.eig(Acl)
    stable = lam.real.max(axis=1) < 0
    cond = np.linalg.cond(V)
    Kn = np.broadcast_to(K, (n, 2, 4))  # one gain, or one per model (a scheduled gain)
    left = np.einsum("nij,njk->nik", Kn.astype(complex), V)
    right = np.linalg.solve(V, B.astype(complex))
    mag = np.abs(lam)
    lo = np.maximum(mag.min(axis=1), 1e-3) * 1e-2
    hi = np.maximum(mag.max(axis=1), 1e-3) * 1e2
    t = np.linspace(0.0, 1.0, grid_points)[None, :]
    w = np.exp(np.log(lo)[:, None] + t * (np.log(hi) - np.log(lo))[:, None])
    w = np.concatenate([np.zeros((n, 1)), w], axis=1)
    mu = _mu_2x2(_input_sensitivity_shifted(V, lam, left, right, w))
    best = np.argmax(mu, axis=1)
    rows = np.arange(n)
    a = w[rows, np.maximum(best - 1, 0)]
    b = w[rows, np.minimum(best + 1, w.shape[1] - 1)]
    gr = (np.sqrt(5.0) - 1.0) / 2.0
    for _ in range(refine_steps):
        c = b - gr * (b - a)
        d = a + gr * (b - a)
        pts = np.stack([c, d], axis=1)
        m = _mu_2x2(_input_sensitivity_shifted(V, lam, left, right, pts))
        left_better = m[:, 0] > m[:, 1]
        b = np.where(left_better, d, b)
        a = np.where(left_better, a, c)
    wpk = 0.5 * (a + b)
    mpk = _mu_2x2(_input_sensitivity_shifted(V, lam, left, right, wpk[:, None]))[:, 0]
    grid_best = mu[rows, best]
    peak = np.maximum(mpk, grid_best)
    wpk = np.where(mpk >= grid_best, wpk, w[rows, best])
    alpha = np.where(stable, 1.0 / np.maximum(peak, 1e-300), 0.0)
    if np.any(stable & (cond > 1e10)):
        # nearly defective closed loop: the modal form is unreliable; solve directly
        bad = np.flatnonzero(stable & (cond > 1e10))
        for i in bad:  # rare; a handful of samples at most
            alpha[i] = _direct_mimo(Acl[i], B[i], Kn[i], w[i])
    out = {"disk_margin": alpha, "peak_rad_s": wpk}
    out.update(disk_ranges(alpha))
    return out


def _direct_mimo(Acl: np.ndarray, B: np.ndarray, K: np.ndarray, w: np.ndarray) -> float:
    """Grid-only multi-loop disk margin of one model by direct solves (fallback)."""
    I4 = np.eye(4)
    S = np.array([np.eye(2) - K @ np.linalg.solve(1j * x * I4 - Acl, B) for x in w])
    return float(1.0 / _mu_2x2(S - 0.5 * np.eye(2)).max())


def loop_shapes(A: np.ndarray, B: np.ndarray, K: np.ndarray, w: np.ndarray) -> dict[str, np.ndarray]:
    """Loop gain, sensitivity and complementary sensitivity magnitudes at each wheel input.

    For the loop broken at input ``j`` (the other loop closed), ``L_j = N_j / D_j``
    (see :func:`loop_polynomials`), ``S_j = 1 / (1 + L_j) = D_j / (D_j + N_j)`` and
    ``T_j = L_j / (1 + L_j) = N_j / (D_j + N_j)``, evaluated at ``s = j w``.

    Returns arrays ``"L"``, ``"S"``, ``"T"`` of shape ``(n, 2, len(w))`` (absolute
    values, not dB) for a batch of ``n`` models, and the peaks ``"S_peak"``,
    ``"T_peak"`` over the grid, shape ``(n, 2)``.
    """
    w = np.asarray(w, dtype=float)
    n = A.shape[0]
    out = {k: np.empty((n, 2, w.size)) for k in ("L", "S", "T")}
    ww = np.broadcast_to(w, (n, w.size))
    for j in range(2):
        polys = loop_polynomials(A, B, K, j)
        D = _at(polys["D"], ww)
        N = _at(polys["N"], ww)
        den = D + N
        with np.errstate(divide="ignore", invalid="ignore"):
            out["L"][:, j] = np.abs(N / D)
            out["S"][:, j] = np.abs(D / den)
            out["T"][:, j] = np.abs(N / den)
    out["S_peak"] = out["S"].max(axis=2)
    out["T_peak"] = out["T"].max(axis=2)
    return out
