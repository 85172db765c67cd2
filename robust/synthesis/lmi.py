"""LMI synthesis of one state-feedback gain for a whole descriptor polytope (cvxpy).

Every vertex ``i`` is a descriptor model ``E_i x' = A_i x + B_i u``.  With
``u = K x`` (this module's sign; the project's gain is ``-K``):

Common Lyapunov matrix (quadratic stability)
    Augment to ``diag(I, 0) z' = [[0, I], [A, -E]] z + [[0], [B]] u`` with
    ``z = (x, x')`` and look for ``Xbar = [[X1, 0], [X3, X4]]``, ``X1 > 0``,
    ``Y`` with ``K = Y X1^-1``.  With ``S_i = [[X3, X4], [A_i X1 + B_i Y - E_i X3, -E_i X4]]``
    every LMI region of Chilali and Gahinet (1996) with ``L``, ``M`` reads
    ``L (x) diag(X1, 0) + M (x) S_i + M^T (x) S_i^T < 0``; the congruence with
    ``[I, E^-1]`` turns it into the classical region condition on
    ``F = E^-1 (A + B K)`` with Lyapunov matrix ``X1`` (descriptor LMIs of
    Masubuchi, Kamitane, Ohara and Suda 1997).  Everything is affine in
    ``(E_i, A_i, B_i)``, so the vertex LMIs cover the polytope; the common
    ``X1`` covers time-varying parameters too.

Parameter-dependent Lyapunov matrix (``E = I`` only)
    Extended LMI with a slack ``G`` (in the spirit of de Oliveira, Bernussou
    and Geromel 1999 and Apkarian, Tuan and Bernussou 2001, continuous time):
    ``[[He(A_i G + B_i Y), X_i - G^T + eps (A_i G + B_i Y)], [., -eps (G + G^T)]] < 0``
    with ``K = Y G^-1``; the congruence with ``[I, A_cl]`` gives
    ``A_cl X_i + X_i A_cl^T < 0`` with a vertex-dependent ``X_i``: less
    conservative, valid for constant parameters.  ``eps`` is searched on a grid.

Gain scheduled on a measured parameter (common Lyapunov matrix, ``moment_box`` with a schedule)
    ``K(d) = K0 + d K1`` with ``d`` the measured value minus its nominal: ``Y_i = Y + t_i Y1`` at
    vertex ``i`` (``t = d / max|d|``), ``K0 = Y X1^-1``, ``K1 = Y1 X1^-1 / max|d|``.  The vertex LMIs
    are affine in ``(q, d, k d)``, the coordinates the scheduled polytope's vertices span (see
    :func:`robust.synthesis.polytope.moment_box`), so they cover every model at every measurement
    error; constraints on the gain alone hold at both extreme ``t``.  Affine parameter-dependent state
    feedback with a common Lyapunov matrix (Boyd, El Ghaoui, Feron and Balakrishnan 1994, ch. 5, the
    bilinear ``k d`` lifted to a coordinate of its own).

Numerical care: states and inputs are scaled (``x = D x~``, ``u = s u~``);
strict inequalities hold with a margin ``delta`` and bounded ``X``; there is
always an objective; every LMI is symmetric by construction; the returned
point is re-checked with numpy eigenvalues (the certificate) whatever the
solver says, and a failed solve falls back to the next solver.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import cvxpy as cp
import numpy as np

from robust.synthesis.polytope import Polytope

SOLVERS = ("CLARABEL", "SCS")
# Clarabel on one thread (added to every solve by _solve): its thread pool (rayon) does not survive a fork, and
# the dossier solves LMIs in a forked process beside its simulations (robust.beside); measured no slower here
ALWAYS_OPTIONS = {"CLARABEL": {"max_threads": 1}}
# bounded effort: an ill-conditioned request fails in seconds instead of grinding for minutes
SOLVER_OPTIONS = {
    "CLARABEL": {"max_iter": 200, "time_limit": 20.0},
    "SCS": {"max_iters": 20000, "time_limit_secs": 20.0},
}
# second try when the first stops without a conclusion (a limit or an inaccurate point is never a proof)
SOLVER_OPTIONS_ESCALATED = {
    "CLARABEL": {"max_iter": 2000, "time_limit": 300.0},
    "SCS": {"max_iters": 200000, "time_limit_secs": 300.0},
}


# the rate search's solves: its points are re-certified exactly by numpy, so the solver's accuracy only sets
# how close to the optimum the search gets, never what is certified
# (one solver: a search solve that fails only ends the search, so a slow second solver is not worth its time)
SEARCH_OPTIONS = {
    "CLARABEL": {"max_iter": 200, "time_limit": 20.0, "tol_gap_abs": 1e-6, "tol_gap_rel": 1e-6, "tol_feas": 1e-7},
}
# the smallest gain at the rate found: a feasible solve takes a few seconds, one that takes longer is at the edge
FINAL_OPTIONS = {"CLARABEL": {"max_iter": 200, "time_limit": 8.0}}


def proved_infeasible(status: str) -> bool:
    """True only when a solver proved infeasibility (not for limits, failures or inaccurate points)."""
    return "infeasible" in str(status) and "inaccurate" not in str(status)


DEFAULT_STATE_SCALE = np.array([1.0, 1.0, 0.1, 1.0])  # m/s, rad/s, rad, rad/s: typical magnitudes


@dataclass(frozen=True)
class Spec:
    """What the synthesis must achieve and what it optimises.

    Attributes
    ----------
    decay_rate
        Required decay rate: every pole left of ``-decay_rate``. [1/s]
    damping
        Minimum damping ratio (conic sector), or ``None``. [-]
    max_frequency
        Poles inside the disk of this radius about the origin, or ``None``. [rad/s]
    torque_limit
        Bound on each wheel torque for all motions starting in the set of
        ``initial_states`` (invariant ellipsoid), or ``None``. [N m]
    initial_states
        Shifted states ``x - x_ref`` right after the commands the torque bound
        must cover, shape ``(m, 4)`` [SI].
    cost_Q, cost_R
        Weights of the guaranteed cost ``int x^T Q x + u^T R u`` (objective ``"cost"``).
    cost_states
        Initial states whose worst cost is bounded (objective ``"cost"``), ``(m, 4)``.
    objective
        ``"decay"`` (largest decay rate by bisection), ``"gain"`` (smallest
        gain) or ``"cost"`` (smallest guaranteed cost).
    lyapunov
        ``"common"`` or ``"parameter_dependent"``.
    """

    decay_rate: float = 0.0
    damping: float | None = None
    max_frequency: float | None = None
    torque_limit: float | None = None
    initial_states: np.ndarray | None = None
    cost_Q: np.ndarray | None = None
    cost_R: np.ndarray | None = None
    cost_states: np.ndarray | None = None
    objective: str = "gain"
    lyapunov: str = "common"
    state_scale: np.ndarray = field(default_factory=lambda: DEFAULT_STATE_SCALE.copy())
    input_scale: float = 1.0
    fixed_gain: np.ndarray | None = None  # analysis of a given gain (u = -K x, SI): Y is tied to K X1
    scheduled: bool = False  # synthesize K0 + d K1 on the polytope's schedule (moment_box with a schedule)
    fixed_slope: np.ndarray | None = None  # with fixed_gain: the given gain's K1 (u = -(K0 + d K1) x, per unit of d)
    lyapunov_bound: float = 1e3  # upper bound of the Lyapunov matrix (scaled coordinates); relaxed when active


@dataclass(frozen=True)
class Certificate:
    """The numbers a reviewer needs to re-check the result without the solver.

    ``lyapunov`` holds the Lyapunov matrix (or one per vertex) in scaled
    coordinates; ``smallest_slack`` is the largest eigenvalue over all
    vertex LMIs (negative: strictly satisfied) and ``smallest_x_eig`` the
    smallest eigenvalue of the Lyapunov matrices.  ``passed`` requires both
    to clear ``tolerance``.
    """

    lyapunov: np.ndarray
    slack: dict
    smallest_slack: float
    smallest_x_eig: float
    tolerance: float
    passed: bool
    bound_active: bool = False  # the Lyapunov matrix touches its upper bound: the answer may be capped by it


X_BOUND = 1e3  # first upper bound of the Lyapunov matrix (scaled coordinates), for conditioning
X_BOUND_MAX = 1e5  # the widest bound tried when the first one is active (condition number of X at most this)
X_CONDITION_MAX = 1e10  # a relaxed answer whose Lyapunov matrix is worse conditioned than this is not taken


@dataclass(frozen=True)
class SynthesisResult:
    """A synthesized gain with its certificate."""

    K: np.ndarray
    decay_rate: float
    objective_value: float
    solver: str
    status: str
    certificate: Certificate
    spec: Spec
    epsilon: float | None = None
    solve_count: int = 0
    K1: np.ndarray | None = None  # a scheduled gain's slope (per unit of the measured parameter), project's sign


class Infeasible(ValueError):
    """No gain meets the request; the message says what can be met."""


def _he(M):
    return M + M.T


def _sym(M):
    """Symmetric by construction (cvxpy would silently keep only the symmetric part)."""
    return 0.5 * (M + M.T)


def _schedule_of(poly: Polytope, spec: Spec):
    """``(t, rho)``: the vertex deviations of the measured parameter scaled to at most 1 (``d = rho t``), or
    ``(None, 1)`` when the gain is not scheduled."""
    if not spec.scheduled and spec.fixed_slope is None:
        return None, 1.0
    if poly.schedule is None:
        raise ValueError("a scheduled gain needs a polytope built with a schedule (moment_box(box, schedule=...))")
    d = np.asarray(poly.schedule, dtype=float)
    rho = float(np.abs(d).max())
    if float(d.max() - d.min()) <= 1e-12 * max(rho, 1.0):
        raise ValueError(
            "the measured parameter takes one value on every vertex: range it (or give it a measurement error) "
            "before scheduling a gain on it"
        )
    return d / rho, rho


def _at_vertex(Y, i: int):
    """The gain variable's value at vertex ``i``: ``Y`` is ``(2, 4)`` (one gain) or ``(m, 2, 4)`` (scheduled)."""
    return Y[i] if Y.ndim == 3 else Y


def _gain_values(poly: Polytope, spec: Spec, X1, Y):
    """``(K0, K1)`` in SI (this module's sign) from a point; ``K1`` is ``None`` for one gain."""
    Xi = np.linalg.inv(X1)
    unscale = np.diag(1.0 / spec.state_scale)
    if Y.ndim == 2:
        return spec.input_scale * (Y @ Xi) @ unscale, None
    t, rho = _schedule_of(poly, spec)
    i, j = int(np.argmin(t)), int(np.argmax(t))
    Y1 = (Y[j] - Y[i]) / (t[j] - t[i])
    Y0 = Y[i] - t[i] * Y1
    return spec.input_scale * (Y0 @ Xi) @ unscale, spec.input_scale * (Y1 @ Xi) @ unscale / rho


def _scaled(poly: Polytope, spec: Spec):
    D = np.diag(spec.state_scale)
    Di = np.diag(1.0 / spec.state_scale)
    E = Di @ poly.E @ D
    A = Di @ poly.A @ D
    B = Di @ poly.B * spec.input_scale
    return E, A, B


def disk_supported(poly: Polytope) -> bool:
    """The disk (natural-frequency) region needs ``E = I``: in the augmented descriptor
    form its diagonal blocks vanish, so it is imposed only on the sampled-hull route."""
    return bool(np.all(np.abs(poly.E - np.eye(4)) <= 1e-12))


def _regions(spec: Spec, alpha: float, *, tighten: bool = False):
    """(L, M) pairs of the LMI regions requested (Chilali and Gahinet 1996).

    With ``tighten`` the regions shrink slightly (decay rate up by 2% plus
    0.01 1/s, damping up by 0.01, frequency radius down by 2%) so that a
    solution certifies the requested regions with a margin well above the
    solver's accuracy.
    """
    if tighten:
        alpha = max(1.02 * alpha, alpha + 0.01)
    regs = [(np.array([[2.0 * alpha]]), np.array([[1.0]]))]
    if spec.damping is not None:
        zeta = min(spec.damping + 0.01, 0.999) if tighten else spec.damping
        th = np.arccos(zeta)
        regs.append((np.zeros((2, 2)), np.array([[np.sin(th), np.cos(th)], [-np.cos(th), np.sin(th)]])))
    if spec.max_frequency is not None:
        r = spec.max_frequency * (0.98 if tighten else 1.0)
        regs.append((np.array([[-r, 0.0], [0.0, -r]]), np.array([[0.0, 1.0], [0.0, 0.0]])))
    return regs


def _region_names(spec: Spec) -> list[str]:
    names = ["decay"]
    if spec.damping is not None:
        names.append("damping")
    if spec.max_frequency is not None:
        names.append("frequency")
    return names


def _kron_block(L, M, Xbar, S):
    """``L (x) Xbar + M (x) S + M^T (x) S^T`` as three Kronecker atoms (a few nodes per LMI keeps cvxpy's
    compilation time proportional to the vertex count, not to the number of scalar blocks)."""
    L, M = np.asarray(L, dtype=float), np.asarray(M, dtype=float)
    return cp.kron(L, Xbar) + cp.kron(M, S) + cp.kron(M.T, S.T)


def _kron_value(L, M, Xbar, S):
    m = L.shape[0]
    return np.block([[L[a, b] * Xbar + M[a, b] * S + M[b, a] * S.T for b in range(m)] for a in range(m)])


STATUS_WORDS = {
    "optimal": "solved to the solver's accuracy",
    "optimal_inaccurate": "solved only approximately (the solver stopped before its accuracy target)",
    "infeasible": "the solver proved that no solution exists",
    "infeasible_inaccurate": "the solver found the request probably impossible (not proved)",
    "unbounded": "the problem is unbounded (a modelling error)",
    "unbounded_inaccurate": "the problem is probably unbounded (a modelling error)",
    "user_limit": "the solver stopped at its iteration or time limit (not a proof of anything)",
    "solver_error": "the solver failed numerically (not a proof of anything)",
}


def explain_status(status: str) -> str:
    """A solver status (``"clarabel: optimal_inaccurate"`` or ``"optimal"``) in plain words."""
    parts = [p.strip() for p in str(status).split(";")]
    out = []
    for p in parts:
        solver, _, st = p.rpartition(":")
        st = st.strip()
        words = STATUS_WORDS.get(st, st)
        out.append(f"{solver.strip()}: {words}" if solver else words)
    return "; ".join(out)


def _solve(prob: cp.Problem, effort: int = 0, options: dict | None = None):
    last = None
    if options is None:
        options = SOLVER_OPTIONS if effort == 0 else SOLVER_OPTIONS_ESCALATED
    for name in SOLVERS:
        if name not in options:
            continue
        try:
            with warnings.catch_warnings():  # the status is handled below and the certificate re-checked
                warnings.simplefilter("ignore", UserWarning)
                prob.solve(solver=name, **{**ALWAYS_OPTIONS.get(name, {}), **options.get(name, {})})
        except cp.error.SolverError as exc:
            last = f"{name}: {exc}"
            continue
        if prob.status in ("optimal", "optimal_inaccurate"):
            return name, prob.status
        last = f"{name}: {prob.status}"
        if prob.status in ("infeasible", "unbounded", "infeasible_inaccurate", "unbounded_inaccurate"):
            break  # an answer about the problem, not a solver failure
    return None, last or "no solver ran"


# The problem of one (polytope, spec, delta) is built once and re-solved for every decay rate of a search:
# the rate enters as a cvxpy Parameter (disciplined parametrized programming), so cvxpy compiles the vertex
# LMIs once and each further solve only refills the rate.  Keyed by identity; the cache keeps the polytope
# and spec alive, so an identity is never reused while its entry exists.
_PROBLEMS: dict = {}
_PROBLEMS_KEPT = 4


def _problem(poly: Polytope, spec: Spec, delta: float, rate_slack: bool = False):
    key = (id(poly), id(spec), float(delta), rate_slack)
    entry = _PROBLEMS.get(key)
    if entry is None or entry[0] is not poly or entry[1] is not spec:
        entry = (poly, spec, _build_common(poly, spec, delta, rate_slack))
        _PROBLEMS[key] = entry
        while len(_PROBLEMS) > _PROBLEMS_KEPT:
            _PROBLEMS.pop(next(iter(_PROBLEMS)))
    return entry[2]


def _common(poly: Polytope, spec: Spec, alpha: float, delta: float, effort: int = 0, options: dict | None = None):
    prob, h = _problem(poly, spec, delta)
    # the decay region, tightened as in _regions (a cost objective keeps it as asked: Q makes it strict)
    h["two_alpha"].value = 2.0 * (alpha if spec.objective == "cost" else _tight(alpha))
    solver, status = _solve(prob, effort, options)
    if solver is None:
        return None, status
    X1v, Yv = h["X1"].value, _y_values(h)
    slack_vals = _slack_values(h)
    K, K1 = _gain_values(poly, h["spec"], X1v, Yv)
    gamma_v = float(h["gamma"].value) if h["gamma"] is not None else None
    cert = _check_common(poly, h["spec"], alpha, X1v, Yv, slack_vals, delta, gamma_v)
    value = float(prob.value)
    return {"K": K, "K1": K1, "solver": solver, "status": status, "certificate": cert, "value": value}, status


def _slack_values(h) -> list:
    """The descriptor slack matrices ``(X3, X4)`` of each region at the solution (zeros where unused)."""
    z = np.zeros((4, 4))
    return [(z if a.value is None else a.value, z if b.value is None else b.value) for a, b in h["slacks"]]


def _build_common(poly: Polytope, spec: Spec, delta: float, rate_slack: bool = False):
    """The common-Lyapunov problem with the decay rate as a parameter; returns ``(problem, handles)``.

    With ``rate_slack`` the decay-region LMIs read ``... <= s I`` with a free ``s`` that is minimised (the
    other constraints stay as they are): the problem is then feasible for every rate at which the other
    constraints are, which is what :func:`_raise_rate` needs (a solve never has to prove infeasibility)."""
    if rate_slack and spec.objective == "cost":
        raise ValueError("the rate-slack problem is for the decay search, not the cost objective")
    if spec.max_frequency is not None and not disk_supported(poly):
        spec = replace(spec, max_frequency=None)
    two_alpha = cp.Parameter(name="two_alpha")
    alpha = 0.0  # the other regions do not depend on the rate
    E, A, B = _scaled(poly, spec)
    n = 4
    X1 = cp.Variable((n, n), symmetric=True)
    t_sched, rho = _schedule_of(poly, spec)
    Y1 = None
    if spec.fixed_gain is None:
        Y = cp.Variable((2, n))
        if t_sched is not None:
            Y1 = cp.Variable((2, n))  # K1 = rho^-1 Y1 X1^-1 (scaled)
    else:  # the gain is given: in scaled coordinates Y = K_s X1 with K_s = -K S / u_scale (an expression)
        K_s = -(np.asarray(spec.fixed_gain, dtype=float) / spec.input_scale) @ np.diag(spec.state_scale)
        Y = K_s @ X1
        if t_sched is not None:
            K1_s = -(rho * np.asarray(spec.fixed_slope, dtype=float) / spec.input_scale) @ np.diag(spec.state_scale)
            Y1 = K1_s @ X1
    # the gain variable at each vertex (Y + t_i Y1 when scheduled) and at the extremes of the measured value
    # (a constraint affine in the gain alone holds for every t in between when it holds at both ends)
    if Y1 is None:
        Yv, Yends = [Y] * A.shape[0], [Y]
    else:
        Yv = [Y + float(t) * Y1 for t in t_sched]
        Yends = [Y + float(t_sched.min()) * Y1, Y + float(t_sched.max()) * Y1]
    Z = np.zeros((n, n))
    cons = [X1 >> delta * np.eye(n), X1 << spec.lyapunov_bound * np.eye(n)]
    s_rate = cp.Variable(name="rate_slack") if rate_slack else None
    # with a cost objective the positive definite Q already makes the Lyapunov
    # inequality strict, so the decay region is not tightened (the optimum then
    # equals the Riccati cost on a single model)
    regs = _regions(spec, alpha, tighten=True)
    if spec.objective == "cost":
        regs[0] = _regions(spec, alpha)[0]
    slacks = [(cp.Variable((n, n)), cp.Variable((n, n))) for _ in regs]
    Xbar = cp.bmat([[X1, Z], [Z, Z]])
    cost_terms = None
    if spec.objective == "cost":
        Q = np.diag(spec.state_scale) @ spec.cost_Q @ np.diag(spec.state_scale)
        R = spec.cost_R * spec.input_scale**2
        Qh, Rh = _sqrtm(Q), _sqrtm(R)
        cost_terms = (Qh, Rh)
    plain = disk_supported(poly)  # E = I: the classical region LMIs, no slack variables
    for i in range(A.shape[0]):
        for k, ((L, M), (X3, X4)) in enumerate(zip(regs, slacks)):
            if plain:
                S = A[i] @ X1 + B[i] @ Yv[i]
                blk = two_alpha * X1 + S + S.T if k == 0 else _kron_block(L, M, X1, S)
                pad = 0
            else:
                S = cp.bmat([[X3, X4], [A[i] @ X1 + B[i] @ Yv[i] - E[i] @ X3, -E[i] @ X4]])
                blk = two_alpha * Xbar + S + S.T if k == 0 else _kron_block(L, M, Xbar, S)
                pad = n
            size = blk.shape[0]
            if cost_terms is not None and L.shape[0] == 1:
                Qh, Rh = cost_terms
                C = cp.bmat(
                    [
                        [Qh @ X1] + ([np.zeros((n, n))] if pad else []),
                        [Rh @ Yv[i]] + ([np.zeros((2, n))] if pad else []),
                    ]
                )
                big = cp.bmat([[blk, C.T], [C, -np.eye(n + 2)]])
                cons.append(_sym(big) << -delta * np.eye(size + n + 2))
            elif rate_slack and k == 0:
                cons.append(_sym(blk) << s_rate * np.eye(size))
            else:
                cons.append(_sym(blk) << -delta * np.eye(size))
    kappa = cp.Variable()
    for Ye in Yends:
        cons.append(_sym(cp.bmat([[X1, Ye.T], [Ye, kappa * np.eye(2)]])) >> 0)
    obj = kappa
    extra = False
    for Ye in Yends:
        extra = _ellipsoid_constraints(spec, X1, Ye, cons, states=Ye is Yends[0])
    if spec.objective == "cost":
        xs = np.diag(1.0 / spec.state_scale) @ np.atleast_2d(spec.cost_states).T
        gamma = cp.Variable()
        for j in range(xs.shape[1]):
            cons.append(
                _sym(cp.bmat([[cp.reshape(gamma, (1, 1), order="C"), xs[:, j : j + 1].T], [xs[:, j : j + 1], X1]])) >> 0
            )
        obj = gamma + 1e-6 * kappa
    else:
        cons.append(X1 >> np.eye(n) * (delta if extra else 1.0))
    if rate_slack:
        # the slack alone: a gain-size term skewed it (measured on the transporter: with 1e-6 x kappa the slack
        # at 2 1/s came out at -610, -58 or -789 depending on solver settings, alone it is -377 whatever the
        # settings); the smallest gain is found afterwards at the rate found
        obj = s_rate
    prob = cp.Problem(cp.Minimize(obj), cons)
    handles = {
        "two_alpha": two_alpha,
        "X1": X1,
        "Y": Y,
        "Y1": Y1,
        "t": t_sched,
        "slacks": slacks,
        "gamma": gamma if spec.objective == "cost" else None,
        "spec": spec,
        "rate_slack": s_rate,
    }
    return prob, handles


def _y_values(h):
    """The gain variable's value: ``(2, 4)``, or ``(m, 2, 4)`` per vertex for a scheduled gain."""
    if h["Y1"] is None:
        return h["Y"].value
    Y0, Y1 = h["Y"].value, h["Y1"].value
    return Y0[None] + h["t"][:, None, None] * Y1[None]


def _ellipsoid_constraints(spec: Spec, X1, Y, cons, *, states: bool = True) -> bool:
    if spec.torque_limit is None:
        return False
    xs = np.diag(1.0 / spec.state_scale) @ np.atleast_2d(spec.initial_states).T
    for j in range(xs.shape[1] if states else 0):
        x0 = xs[:, j : j + 1]
        cons.append(_sym(cp.bmat([[np.ones((1, 1)), x0.T], [x0, X1]])) >> 0)
    lim = (spec.torque_limit / spec.input_scale) ** 2
    for j in range(2):
        cons.append(_sym(cp.bmat([[X1, Y[j : j + 1, :].T], [Y[j : j + 1, :], lim * np.ones((1, 1))]])) >> 0)
    return True


def _sqrtm(M):
    w, V = np.linalg.eigh(0.5 * (M + M.T))
    return V @ np.diag(np.sqrt(np.maximum(w, 0.0))) @ V.T


def _check_common(poly, spec, alpha, X1, Y, slacks, delta, gamma: float | None = None) -> Certificate:
    """Re-evaluate every constraint the result claims at the returned point with numpy (independent of
    the solver): every region LMI at every vertex, and, when requested, the torque ellipsoid (initial
    states inside it, torque bound on it) and the guaranteed cost (cost LMI at every vertex, bound).
    Non-strict constraints ``M >= 0`` are recorded as ``-min eig(M)`` (must be <= the tolerance)."""
    E, A, B = _scaled(poly, spec)
    n = 4
    X1 = 0.5 * (X1 + X1.T)
    Xbar = np.block([[X1, np.zeros((n, n))], [np.zeros((n, n)), np.zeros((n, n))]])
    worst = -np.inf
    per_region = {}
    plain = disk_supported(poly)
    for r, ((L, M), (X3, X4)) in enumerate(zip(_regions(spec, alpha), slacks)):
        top = -np.inf
        for i in range(A.shape[0]):
            Yi = _at_vertex(Y, i)
            if plain:
                blk = _kron_value(L, M, X1, A[i] @ X1 + B[i] @ Yi)
            else:
                S = np.block([[X3, X4], [A[i] @ X1 + B[i] @ Yi - E[i] @ X3, -E[i] @ X4]])
                blk = _kron_value(L, M, Xbar, S)
            top = max(top, float(np.linalg.eigvalsh(0.5 * (blk + blk.T)).max()))
        per_region[_region_names(spec)[r]] = top
        worst = max(worst, top)
    xe = float(np.linalg.eigvalsh(X1).min())
    tol = 1e-10 * max(1.0, float(np.abs(X1).max()))
    nonstrict = -np.inf

    def psd_gap(M) -> float:
        return -float(np.linalg.eigvalsh(0.5 * (M + M.T)).min())

    if spec.torque_limit is not None:
        xs = np.diag(1.0 / spec.state_scale) @ np.atleast_2d(spec.initial_states).T
        inside = max(
            psd_gap(np.block([[np.ones((1, 1)), xs[:, j : j + 1].T], [xs[:, j : j + 1], X1]]))
            for j in range(xs.shape[1])
        )
        lim = (spec.torque_limit / spec.input_scale) ** 2
        bound = max(
            psd_gap(np.block([[X1, Yi[j : j + 1, :].T], [Yi[j : j + 1, :], lim * np.ones((1, 1))]]))
            for Yi in (Y if Y.ndim == 3 else Y[None])
            for j in range(2)
        )
        per_region["torque ellipsoid: initial states inside"] = inside
        per_region["torque ellipsoid: torque bound"] = bound
        nonstrict = max(nonstrict, inside, bound)
    if spec.objective == "cost" and spec.cost_Q is not None and gamma is not None:
        Q = np.diag(spec.state_scale) @ spec.cost_Q @ np.diag(spec.state_scale)
        R = spec.cost_R * spec.input_scale**2
        Qh, Rh = _sqrtm(Q), _sqrtm(R)
        L, M = _regions(spec, alpha)[0]
        top = -np.inf
        for i in range(A.shape[0]):
            Yi = _at_vertex(Y, i)
            if plain:
                blk = _kron_value(L, M, X1, A[i] @ X1 + B[i] @ Yi)
                C = np.vstack([Qh @ X1, Rh @ Yi])
            else:
                X3, X4 = slacks[0]
                S = np.block([[X3, X4], [A[i] @ X1 + B[i] @ Yi - E[i] @ X3, -E[i] @ X4]])
                blk = _kron_value(L, M, Xbar, S)
                C = np.vstack([np.hstack([Qh @ X1, np.zeros((n, n))]), np.hstack([Rh @ Yi, np.zeros((2, n))])])
            big = np.block([[blk, C.T], [C, -np.eye(n + 2)]])
            top = max(top, float(np.linalg.eigvalsh(0.5 * (big + big.T)).max()))
        xs = np.diag(1.0 / spec.state_scale) @ np.atleast_2d(spec.cost_states).T
        cost_bound = max(
            psd_gap(np.block([[np.full((1, 1), gamma), xs[:, j : j + 1].T], [xs[:, j : j + 1], X1]]))
            for j in range(xs.shape[1])
        )
        per_region["guaranteed cost LMI"] = top
        per_region["guaranteed cost bound"] = cost_bound
        worst = max(worst, top)
        nonstrict = max(nonstrict, cost_bound)
    return Certificate(
        lyapunov=X1,
        slack=per_region,
        smallest_slack=worst,
        smallest_x_eig=xe,
        tolerance=tol,
        passed=bool(worst < -tol and xe > tol and nonstrict <= tol * 10),
        bound_active=_touches(X1, spec.lyapunov_bound),
    )


def _touches(X: np.ndarray, bound: float) -> bool:
    """The Lyapunov matrix reaches its upper bound (the answer may be capped by the bound)."""
    return bool(float(np.linalg.eigvalsh(0.5 * (X + X.T)).max()) >= 0.99 * bound)


def _condition(X: np.ndarray) -> float:
    w = np.linalg.eigvalsh(0.5 * (X + X.T)) if X.ndim == 2 else np.concatenate([np.linalg.eigvalsh(x) for x in X])
    return float(w.max() / w.min()) if w.min() > 0 else np.inf


def _pdlf(poly: Polytope, spec: Spec, alpha: float, delta: float, eps: float, effort: int = 0):
    if np.any(np.abs(poly.E - np.eye(4)) > 1e-12):
        raise ValueError("the parameter-dependent Lyapunov variant needs E = I (route 'sampled_hull')")
    if spec.damping is not None or spec.max_frequency is not None or spec.objective == "cost":
        raise ValueError(
            "the parameter-dependent Lyapunov variant supports the decay rate, gain size and torque bound; "
            "use lyapunov = 'common' for damping, frequency or cost"
        )
    _E, A, B = _scaled(poly, spec)
    n, m = 4, A.shape[0]
    G = cp.Variable((n, n))
    Y = cp.Variable((2, n))
    Xs = [cp.Variable((n, n), symmetric=True) for _ in range(m)]
    cons = []
    I = np.eye(n)
    a_in = max(1.02 * alpha, alpha + 0.01)  # solve tighter, certify at the requested rate
    for i in range(m):
        AG = (A[i] + a_in * I) @ G + B[i] @ Y
        Phi = cp.bmat([[_he(AG), Xs[i] - G.T + eps * AG], [Xs[i] - G + eps * AG.T, -eps * _he(G)]])
        cons += [_sym(Phi) << -delta * np.eye(2 * n), Xs[i] >> delta * I, Xs[i] << spec.lyapunov_bound * I]
    kappa = cp.Variable()
    cons.append(_sym(cp.bmat([[kappa * np.eye(2), Y], [Y.T, _he(G) - I]])) >> 0)
    if spec.torque_limit is not None:
        xs = np.diag(1.0 / spec.state_scale) @ np.atleast_2d(spec.initial_states).T
        lim = (spec.torque_limit / spec.input_scale) ** 2
        for i in range(m):
            for j in range(xs.shape[1]):
                x0 = xs[:, j : j + 1]
                cons.append(_sym(cp.bmat([[np.ones((1, 1)), x0.T], [x0, Xs[i]]])) >> 0)
            for j in range(2):
                cons.append(
                    _sym(cp.bmat([[lim * np.ones((1, 1)), Y[j : j + 1, :]], [Y[j : j + 1, :].T, _he(G) - Xs[i]]])) >> 0
                )
    prob = cp.Problem(cp.Minimize(kappa), cons)
    solver, status = _solve(prob, effort)
    if solver is None:
        return None, status
    Gv, Yv = G.value, Y.value
    Xv = [0.5 * (X.value + X.value.T) for X in Xs]
    worst = -np.inf
    for i in range(m):
        AG = (A[i] + alpha * I) @ Gv + B[i] @ Yv
        Phi = np.block([[AG + AG.T, Xv[i] - Gv.T + eps * AG], [Xv[i] - Gv + eps * AG.T, -eps * (Gv + Gv.T)]])
        worst = max(worst, float(np.linalg.eigvalsh(0.5 * (Phi + Phi.T)).max()))
    xe = min(float(np.linalg.eigvalsh(X).min()) for X in Xv)
    tol = 1e-10 * max(1.0, max(float(np.abs(X).max()) for X in Xv))
    cert = Certificate(
        lyapunov=np.stack(Xv),
        slack={"decay": worst},
        smallest_slack=worst,
        smallest_x_eig=xe,
        tolerance=tol,
        passed=bool(worst < -tol and xe > tol),
        bound_active=any(_touches(X, spec.lyapunov_bound) for X in Xv),
    )
    K = spec.input_scale * (Yv @ np.linalg.inv(Gv)) @ np.diag(1.0 / spec.state_scale)
    return {
        "K": K,
        "solver": solver,
        "status": status,
        "certificate": cert,
        "value": float(prob.value),
    }, status


RATE_TOLERANCE = 2e-3  # the rate search stops when a step gains less than this (relative, 1/s at least 1e-4)
RATE_STEPS_MAX = 40


def _tight(alpha: float) -> float:
    """The rate the LMIs are solved at to certify ``alpha`` with a margin (as :func:`_regions` tightens)."""
    return max(1.02 * alpha, alpha + 0.01)


def _untight(a: float) -> float:
    """The largest ``alpha`` with ``_tight(alpha) <= a`` (0 when ``a`` is below the smallest tightening)."""
    return max(min(a / 1.02, a - 0.01), 0.0)


def _rate_of(poly: Polytope, spec: Spec, X1, Y, slacks, delta: float) -> float:
    """The largest rate ``a`` at which the decay-region LMI of every vertex holds with the margin ``delta`` at
    the given point (numpy, independent of the solver): ``He(A_i X + B_i Y) + 2 a X <= -delta I``.

    With ``E = I`` this is half the smallest generalized eigenvalue of the pencil ``(-He(A_i X + B_i Y) -
    delta I, X)`` over the vertices (Boyd, El Ghaoui, Feron and Balakrishnan 1994, sec. 2.2.3); with a
    descriptor polytope, whose block ``diag(X, 0)`` is singular, the same number is found by bisection on
    the largest eigenvalue, which decreases with ``a``.  ``-inf`` when not even ``a = 0`` holds."""
    E, A, B = _scaled(poly, spec)
    n = 4
    X1 = 0.5 * (X1 + X1.T)
    delta = max(delta, 1e-9 * float(np.abs(X1).max()))  # well clear of the certificate's tolerance
    if disk_supported(poly):
        Linv = np.linalg.inv(np.linalg.cholesky(X1))
        S = A @ X1 + B @ Y
        M = -(S + np.swapaxes(S, 1, 2)) - delta * np.eye(n)
        G = Linv @ M @ Linv.T
        return float(0.5 * np.linalg.eigvalsh(0.5 * (G + np.swapaxes(G, 1, 2))).min())
    X3, X4 = slacks[0]
    Z = np.zeros((n, n))
    Xbar = np.block([[X1, Z], [Z, Z]])
    S = np.stack(
        [np.block([[X3, X4], [A[i] @ X1 + B[i] @ _at_vertex(Y, i) - E[i] @ X3, -E[i] @ X4]]) for i in range(A.shape[0])]
    )
    base = S + np.swapaxes(S, 1, 2) + delta * np.eye(2 * n)

    def top(a: float) -> float:
        return float(np.linalg.eigvalsh(base + 2.0 * a * Xbar).max())

    if top(0.0) > 0.0:
        return -np.inf
    lo, hi = 0.0, 1.0
    while top(hi) <= 0.0 and hi < 1e6:
        lo, hi = hi, 2.0 * hi
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if top(mid) <= 0.0 else (lo, mid)
    return lo


def _slack_solve(poly: Polytope, spec: Spec, a: float, delta: float):
    """Minimise the rate slack at rate ``a``; returns ``(X1, Y, slacks, s, status)``, ``X1`` ``None`` on failure."""
    prob, h = _problem(poly, spec, delta, rate_slack=True)
    h["two_alpha"].value = 2.0 * a
    solver, status = _solve(prob, options=SEARCH_OPTIONS)
    if solver is None:
        return None, None, None, np.nan, status
    Yv = _y_values(h)  # a variable, or the expression K_s X1 for a fixed gain; per vertex when scheduled
    return h["X1"].value, Yv, _slack_values(h), float(h["rate_slack"].value), f"{solver}: {status}"


def _bound_binds(spec: Spec, X1) -> bool:
    """The Lyapunov bound limits a rate-search point.  Without a torque ellipsoid the rate-slack problem
    is homogeneous in ``(X, Y)``, so its point always scales up to the upper bound; what limits it then
    is the condition number, i.e. both ``X >= I`` and ``X <= bound I`` active."""
    if not _touches(X1, spec.lyapunov_bound):
        return False
    return spec.torque_limit is not None or float(np.linalg.eigvalsh(0.5 * (X1 + X1.T)).min()) <= 1.02


def _raise_rate(
    poly: Polytope, spec: Spec, a0: float, delta: float, say=None, cap: float | None = None, stop_when_bound=False
):
    """The largest rate certifiable with a common Lyapunov matrix, from a rate ``a0`` known to certify.

    A generalized-eigenvalue problem: maximise ``a`` with ``He(A_i X + B_i Y) + 2 a X < 0`` at every
    vertex (Boyd, El Ghaoui, Feron and Balakrishnan 1994, sec. 5.1.2).  Each solve minimises, at a trial
    rate ``a``, the largest eigenvalue ``s(a)`` of the decay LMIs with every other constraint kept; that
    problem is feasible at every rate, so no solve has to grind to a proof of infeasibility (with plain
    bisection those solves ran to the time limit and took ten times as long).  ``s(a)`` increases with
    ``a`` and its root is the answer.  The next trial rate is

    - while no trial has ``s >= 0``: the largest of the rate the last point certifies (a Dinkelbach step,
      Crouzeix and Ferland 1991), the secant root of the last two ``(a, s)`` pairs with ``s < 0``, and
      twice the last rise of the certified rate (at most ``max(2 lo, lo + 1)``);
    - once a trial has ``s >= 0`` (an upper bracket): a guess of the root, the secant root above when it
      falls inside the bracket, else the false-position root of the closest trials with ``s < 0`` and
      ``s >= 0``; a guess closer than one tolerance to an end of the bracket is tried one tolerance inside
      it (so a root next to the certified rate closes the bracket in one solve instead of a walk of
      halvings down to it).  A guess that did not halve the bracket is followed by a bisection, so the
      bracket at least halves every second solve.

    Whatever the solver returns, only numpy decides what is certified: each point certifies exactly the
    rate :func:`_rate_of` computes from it.  The search stops when the bracket, or the predicted gain,
    is below :data:`RATE_TOLERANCE` relative (1e-4 1/s at least).

    Returns ``(rate, (X1, Y, slacks) or None, solves, status)``: the rate is raw (the LMI holds at it with
    the margin ``delta``), never below ``a0``, and at most ``cap``.  With ``stop_when_bound`` the search
    returns as soon as the Lyapunov bound is what limits its point (:func:`_bound_binds`), so the caller can
    widen the bound and go on from there instead of converging to an answer set by the bound."""
    lo, best, solves, status = float(a0), None, 0, "not started"
    hi = np.inf if cap is None else float(cap)
    below: list[tuple[float, float]] = []  # (trial rate, s < 0), in order
    above: tuple[float, float] | None = None  # (trial rate, s >= 0) of the lowest such trial
    gain = 0.0  # the last rise of the certified rate
    guessed = None  # the bracket's width when the last trial was a guess (not a bisection)
    a = lo
    for _ in range(RATE_STEPS_MAX):
        if say is not None:
            say(f"LMI rate search at {a:.4g} 1/s on {poly.vertices} vertices")
        X1, Y, slacks, s_val, status = _slack_solve(poly, spec, a, delta)
        solves += 1
        if X1 is None:  # no answer at this rate: treat it as the upper end (this only lowers the answer)
            hi = min(hi, a)
        else:
            try:
                certified = _rate_of(poly, spec, X1, Y, slacks, delta)
            except np.linalg.LinAlgError:  # the returned Lyapunov matrix is not positive definite
                certified = -np.inf
            certified = min(certified, hi)
            if certified > lo:
                gain, lo, best = certified - lo, certified, (X1, Y, slacks)
                if stop_when_bound and _bound_binds(spec, X1):
                    break
            if s_val < 0.0:
                below.append((a, s_val))
            else:
                hi = min(hi, a)
                if above is None or a <= above[0]:
                    above = (a, s_val)
        tol = max(RATE_TOLERANCE * max(lo, 1e-12), 1e-4)
        if hi - lo <= tol:
            break
        secant = None
        if len(below) >= 2:
            (a1, s1), (a2, s2) = below[-2], below[-1]
            if s2 > s1 and a2 != a1:
                secant = a2 - s2 * (a2 - a1) / (s2 - s1)  # the secant root of the last two trials below
        if np.isfinite(hi):
            # bracketed: a guess of the root; a guess that did not halve the bracket is followed by a bisection,
            # so the bracket at least halves every second solve whatever the solver's s is worth near the answer
            bisect = guessed is not None and hi - lo > 0.5 * guessed
            guessed = None
            guess = secant if secant is not None and lo + tol < secant < hi - tol else None
            if guess is None and below and above is not None:  # false position between the closest trials
                (ab, sb), (ah, sh) = max(below), above
                if sh > sb:
                    guess = ab - sb * (ah - ab) / (sh - sb)
            a = 0.5 * (lo + hi)
            if not bisect and guess is not None and lo + 2.0 * tol < hi:
                # a root predicted within a tolerance of an end is tried a whole tolerance inside it: at the
                # low end one solve then either closes the bracket or lifts the certified rate
                a, guessed = min(max(guess, lo + tol), hi - tol), hi - lo
            continue
        nxt = max(lo, lo + 2.0 * gain)  # the Dinkelbach step, or a doubling of the last rise
        if secant is not None:
            nxt = max(nxt, secant)
        nxt = min(nxt, max(2.0 * lo, lo + 1.0))
        if nxt - a <= tol:
            break  # the next trial would gain less than the tolerance over this one
        a = nxt
    return lo, best, solves, status


def _point_result(poly, spec, a, point, delta, status) -> dict:
    """The result dict of a rate-search point, certified (numpy) at the raw rate ``a`` it was computed for."""
    X1, Y, slacks = point
    K, K1 = _gain_values(poly, spec, X1, Y)
    cert = _check_common(poly, spec, a, X1, Y, slacks, delta)
    # the gain-size objective of the point: the smallest kappa with [[X1, Y^T], [Y, kappa I]] >= 0
    kappa = max(float(np.linalg.eigvalsh(Yi @ np.linalg.solve(X1, Yi.T)).max()) for Yi in (Y if Y.ndim == 3 else [Y]))
    return {"K": K, "K1": K1, "solver": status.split(":")[0], "status": status, "certificate": cert, "value": kappa}


def _maximize_decay(poly, spec, alpha, res, delta, say=None):
    """Largest certified decay rate from ``alpha`` (certified by ``res``), common Lyapunov matrix.

    The rate search (:func:`_raise_rate`) finds the largest rate; the gain returned is then the smallest
    one (the synthesis's objective) at a rate just below it, solved once with the tightened regions as
    every other synthesis answer.  When that solve does not conclude, the search's own point is returned,
    certified at the rate it was found for.  Returns ``(rate, result, spec, solves)``: ``spec`` carries
    the Lyapunov bound the answer was found with (widened when the bound limited the search)."""
    a_star, point, solves, status = _tight(alpha), None, 0, ""
    if spec.torque_limit is None and spec.lyapunov_bound < X_BOUND_MAX:
        # without a torque ellipsoid the rate-slack problem is homogeneous: its point scales up to the bound
        # and only the condition number X_BOUND_MAX / 1 limits it, so the search starts with the widest bound
        spec = replace(spec, lyapunov_bound=X_BOUND_MAX)
    while True:
        a, p, c, st = _raise_rate(poly, spec, a_star, delta, say, stop_when_bound=spec.lyapunov_bound < X_BOUND_MAX)
        solves += c
        if p is not None:
            a_star, point, status = a, p, st
        if p is None or spec.lyapunov_bound >= X_BOUND_MAX or not _bound_binds(spec, p[0]):
            break
        if say is not None:
            say(
                f"the Lyapunov bound {spec.lyapunov_bound:.0e} limits the rate search; widening it to {X_BOUND_MAX:.0e}"
            )
        spec = replace(spec, lyapunov_bound=X_BOUND_MAX)
    if point is None:
        return alpha, res, spec, solves
    top = _untight(a_star)
    for shrink in (5e-3, 1e-2, 2e-2):
        trial = top * (1.0 - shrink)
        if trial <= alpha:
            break
        if say is not None:
            say(f"LMI solve for the smallest gain at decay rate {trial:.4g} 1/s")
        r, _st = _common(poly, spec, trial, delta, options=FINAL_OPTIONS)
        solves += 1
        if r is not None and r["certificate"].passed:
            return trial, r, spec, solves
    fallback = _point_result(poly, spec, a_star, point, delta, status)
    if fallback["certificate"].passed and a_star > alpha:
        return a_star, fallback, spec, solves
    return alpha, res, spec, solves


EPSILONS = (0.03, 0.1, 0.3, 1.0)


def _attempt_once(poly, spec, alpha, delta, effort):
    if spec.lyapunov == "common":
        res, status = _common(poly, spec, alpha, delta, effort)
        ok = res is not None and res["certificate"].passed
        if res is not None and not ok:
            status = f"{status}; the returned point failed the numpy certificate check"
        return (res if ok else None), status, 1
    best = None
    last = "infeasible"
    count = 0
    for eps in EPSILONS:
        res, status = _pdlf(poly, spec, alpha, delta, eps, effort)
        count += 1
        last = status
        if res is not None and res["certificate"].passed and (best is None or res["value"] < best["value"]):
            best = dict(res, epsilon=eps)
    return best, last, count


def _attempt(poly, spec, alpha, delta, say=None, escalate: bool = True):
    """One solve at decay rate ``alpha``; returns (result or None, status text, solves).

    When the first solve ends without a conclusion (an iteration or time
    limit, an inaccurate point, a point that fails the certificate check),
    the solve is repeated once with ten times the effort before the rate is
    counted as not certifiable; the status then says which it was.  Searches
    (bisection, growth) pass ``escalate=False``: a failure there only makes
    the reported rate smaller, which stays certified.
    """
    if say is not None:
        say(f"LMI solve at decay rate {alpha:.4g} 1/s on {poly.vertices} vertices")
    res, status, count = _attempt_once(poly, spec, alpha, delta, 0)
    if res is None and escalate and not proved_infeasible(status):
        if say is not None:
            say(
                f"no conclusion at decay rate {alpha:.4g} 1/s ({explain_status(status)}); trying again with more effort"
            )
        res, status, more = _attempt_once(poly, spec, alpha, delta, 1)
        count += more
    return res, status, count


def _bisect(poly, spec, lo: float, hi: float, delta: float, steps: int, say=None):
    """Largest decay rate in ``[lo, hi]`` that certifies (``lo`` assumed feasible).

    Returns ``(rate, result at that rate or None if only lo is known, solves)``.
    """
    best = None
    solves = 0
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        r, _s, c = _attempt(poly, spec, mid, delta, say, escalate=False)
        solves += c
        if r is not None:
            lo, best = mid, r
        else:
            hi = mid
    return lo, best, solves


def _relax_bound(poly, spec, alpha, res, delta, steps, say=None):
    """While the Lyapunov matrix touches its upper bound at the answer, raise the bound to
    :data:`X_BOUND_MAX` and search again from the answer: the bound keeps the matrix well conditioned
    and must not be what limits the result.  A relaxed answer is taken only when it is better and its
    Lyapunov matrix stays conditioned below :data:`X_CONDITION_MAX`.  Returns ``(spec, alpha, res, solves)``."""
    solves = 0
    while res["certificate"].bound_active and spec.lyapunov_bound < X_BOUND_MAX:
        wider = replace(spec, lyapunov_bound=X_BOUND_MAX)
        if say is not None:
            say(
                f"the Lyapunov bound {spec.lyapunov_bound:.0e} is active at the answer; relaxing it to "
                f"{wider.lyapunov_bound:.0e}"
            )
        new_alpha, new = alpha, None
        if spec.objective == "decay" and spec.lyapunov == "common":
            new_alpha, new, _wider, c = _maximize_decay(poly, wider, alpha, None, delta, say)
            solves += c
        elif spec.objective == "decay":
            lo, hi = alpha, max(1.25 * alpha, alpha + 0.05)
            while hi < 64.0:
                r, _s, c = _attempt(poly, wider, hi, delta, say, escalate=False)
                solves += c
                if r is None:
                    break
                lo, new, hi = hi, r, 1.5 * hi
            new_alpha, r, c = _bisect(poly, wider, lo, hi, delta, steps, say)
            solves += c
            new = r or new
        else:
            r, _s, c = _attempt(poly, wider, alpha, delta, say, escalate=False)
            solves += c
            if r is not None and r["value"] < res["value"] * (1.0 - 1e-6):
                new = r
        if new is None or _condition(new["certificate"].lyapunov) > X_CONDITION_MAX:
            break
        spec, alpha, res = wider, new_alpha, new
    return spec, alpha, res, solves


def _infeasible(poly, spec, delta, bisection_steps, say):
    """Raise :class:`Infeasible` for a rate that did not certify, with the largest rate that does.

    The search grows from below (the feasible interval is usually far below an
    infeasible request), then bisects; where the Lyapunov bound is active at
    the best rate found, the bracket is searched again with the widest bound
    and the better answer is kept.  A rate that the solver could not settle
    only lowers the answer, which stays certified.
    """
    base, st0, _c = _attempt(poly, spec, 0.0, delta, say)
    if base is None and spec.lyapunov_bound < X_BOUND_MAX:
        spec = replace(spec, lyapunov_bound=X_BOUND_MAX)
        base, st0, _c = _attempt(poly, spec, 0.0, delta, say)
    if base is None:
        parts = ["stability of every model"]
        if spec.damping is not None:
            parts.append(f"damping >= {spec.damping:g}")
        if spec.max_frequency is not None and disk_supported(poly):
            parts.append(f"natural frequency <= {spec.max_frequency:g} rad/s")
        if spec.torque_limit is not None:
            parts.append(f"wheel torque <= {spec.torque_limit:g} N m for the stated initial states")
        where = (
            f"over this polytope ({poly.route}, {poly.vertices} vertices, {spec.lyapunov} Lyapunov matrix bounded "
            f"by {spec.lyapunov_bound:.0e} in scaled coordinates"
        )
        if proved_infeasible(st0):
            raise Infeasible(
                f"no gain could be certified for {', '.join(parts)} {where}; {explain_status(st0)}). Relax the "
                "damping, frequency or torque request, narrow the ranges, or try the other route."
            )
        raise Infeasible(
            f"the LMIs for {', '.join(parts)} {where}) were NOT SOLVED, even with escalated effort: "
            f"{explain_status(st0)}. This is not a proof that no gain exists; narrow the ranges or try the "
            "other route."
        )
    lo, hi, last_ok = 0.0, None, base
    trial = min(0.25, spec.decay_rate / 2)
    while trial < spec.decay_rate:
        r, _s, _c = _attempt(poly, spec, trial, delta, say, escalate=False)
        if r is None:
            hi = trial
            break
        lo, trial, last_ok = trial, 2.0 * trial, r
    if hi is None:
        hi = spec.decay_rate
    best, r, _c = _bisect(poly, spec, lo, hi, delta, bisection_steps, say)
    last_ok = r or last_ok
    resolution = (hi - lo) / 2**bisection_steps
    bound = spec.lyapunov_bound
    if last_ok["certificate"].bound_active and spec.lyapunov_bound < X_BOUND_MAX:
        wider = replace(spec, lyapunov_bound=X_BOUND_MAX)
        if say is not None:
            say(f"the Lyapunov bound is active at {best:.4g} 1/s; searching again with the bound {X_BOUND_MAX:.0e}")
        more, r, _c = _bisect(poly, wider, best, hi, delta, bisection_steps, say)
        if r is not None and more > best:
            best, bound, resolution = more, X_BOUND_MAX, (hi - best) / 2**bisection_steps
    raise Infeasible(
        f"decay rate {spec.decay_rate:g} 1/s could not be certified over this polytope "
        f"({poly.route}, {spec.lyapunov} Lyapunov matrix) with the other constraints kept; "
        f"the largest certifiable decay rate is about {best:.4g} 1/s (certified with the Lyapunov bound "
        f"{bound:.0e}; {resolution:.2g} 1/s resolution)"
    )


def synthesize(
    poly: Polytope,
    spec: Spec,
    *,
    delta: float = 1e-6,
    bisection_steps: int = 8,
    progress: Callable[[str], None] | None = None,
) -> SynthesisResult:
    """Synthesize one gain for the whole polytope.

    Raises
    ------
    Infeasible
        When the request cannot be certified; the message names what could
        not be met and the best value that can (largest certifiable decay
        rate with the other constraints kept).
    """
    if spec.objective not in ("decay", "gain", "cost"):
        raise ValueError(f"objective: expected 'decay', 'gain' or 'cost', got {spec.objective!r}")
    if spec.lyapunov not in ("common", "parameter_dependent"):
        raise ValueError(f"lyapunov: expected 'common' or 'parameter_dependent', got {spec.lyapunov!r}")
    if spec.scheduled and spec.lyapunov != "common":
        raise ValueError("a scheduled gain is synthesized with a common Lyapunov matrix (lyapunov = 'common')")
    say = progress
    solves = 0
    res, status, c = _attempt(poly, spec, spec.decay_rate, delta, say)
    solves += c
    if res is None and spec.lyapunov_bound < X_BOUND_MAX:
        # the bound on the Lyapunov matrix is part of the LMIs: see whether it, not the models, stops the request
        wider = replace(spec, lyapunov_bound=X_BOUND_MAX)
        if say is not None:
            say(f"not certified with the Lyapunov bound {spec.lyapunov_bound:.0e}; trying {X_BOUND_MAX:.0e}")
        r, _s, c = _attempt(poly, wider, spec.decay_rate, delta, say, escalate=False)
        solves += c
        if r is not None:
            spec, res = wider, r
    if res is None:
        _infeasible(poly, spec, delta, bisection_steps, say)
    alpha = spec.decay_rate
    if spec.objective == "decay" and spec.lyapunov == "common":
        alpha, res, spec, c = _maximize_decay(poly, spec, alpha, res, delta, say)
        solves += c
    elif spec.objective == "decay":
        lo, hi = alpha, max(2.0 * alpha, 1.0)
        while True:  # grow the bracket (up to 64 1/s: faster is beyond any drive)
            r, _s, c = _attempt(poly, spec, hi, delta, say, escalate=False)
            solves += c
            if r is None or hi >= 64.0:
                break
            lo, res, hi = hi, r, 2.0 * hi
        alpha, r, c = _bisect(poly, spec, lo, hi, delta, bisection_steps, say)
        solves += c
        res = r or res
    spec, alpha, res, c = _relax_bound(poly, spec, alpha, res, delta, bisection_steps, say)
    solves += c
    cert = res["certificate"]
    return SynthesisResult(
        K=-res["K"],
        decay_rate=alpha,
        objective_value=res["value"],
        solver=res["solver"],
        status=res["status"],
        certificate=cert,
        spec=spec,
        epsilon=res.get("epsilon"),
        solve_count=solves,
        K1=None if res.get("K1") is None else -res["K1"],
    )


@dataclass(frozen=True)
class GainCertificate:
    """What a common Lyapunov matrix proves for a given gain over a polytope.

    ``decay_rate`` is the largest decay rate certified (bisection to
    ``resolution``), ``None`` when not even stability could be certified;
    ``certificate`` is the numpy re-check at that rate.
    """

    decay_rate: float | None
    resolution: float
    certificate: Certificate | None
    status: str
    solves: int
    lyapunov_bound: float = X_BOUND  # the bound on the Lyapunov matrix the answer was found with


def certify_gain(
    poly: Polytope,
    K: np.ndarray,
    *,
    input_scale: float,
    upper: float,
    slope: np.ndarray | None = None,
    delta: float = 1e-6,
    lyapunov_bound: float = X_BOUND,
    progress: Callable[[str], None] | None = None,
) -> GainCertificate:
    """The largest decay rate a common Lyapunov matrix certifies for the fixed gain ``K`` over ``poly``.

    The LMIs are those of the synthesis with the gain variable tied to ``K``
    (quadratic stability of the closed-loop polytope; Boyd, El Ghaoui, Feron
    and Balakrishnan 1994, ch. 5), so for a gain that came from the synthesis
    the answer agrees with its synthesis certificate.  ``upper`` bounds the
    search (the sampled worst-case decay rate: no certificate can exceed it).
    The rate is found by the generalized-eigenvalue search of :func:`_raise_rate`
    (``resolution`` is its stopping step, not a proven distance to the optimum);
    the bound on the Lyapunov matrix is widened (to :data:`X_BOUND_MAX`) while it
    is what stops the certificate.

    A scheduled gain ``K + d slope`` is certified on a scheduled polytope (``poly.schedule``): the gain
    at vertex ``i`` is ``K + d_i slope``.  The vertices are those reduced in the coordinates the LMIs
    depend on: with ``slope`` zero (or ``None``) the gain ignores the measurement and the polytope's
    ``fixed`` vertices are used, so the answer is the fixed gain's certificate exactly.
    """
    scheduled = slope is not None and bool(np.any(np.asarray(slope, dtype=float) != 0.0))
    if not scheduled and poly.fixed is not None:
        poly = poly.fixed
    spec = Spec(
        decay_rate=0.0,
        objective="gain",
        input_scale=float(input_scale),
        fixed_gain=np.asarray(K, dtype=float),
        fixed_slope=np.asarray(slope, dtype=float) if scheduled else None,
        lyapunov_bound=float(lyapunov_bound),
    )
    # stability first (one solve at ordinary effort per bound): a rate not certified only lowers the answer
    solves = 0
    while True:
        res, status, c = _attempt_once(poly, spec, 0.0, delta, 0)
        solves += c
        if res is not None or spec.lyapunov_bound >= X_BOUND_MAX:
            break
        spec = replace(spec, lyapunov_bound=X_BOUND_MAX)
    if res is None:
        return GainCertificate(None, 0.0, None, status, solves, spec.lyapunov_bound)
    top = max(float(upper), 0.0)
    lo, best, c = _certified_rate(poly, spec, _tight(0.0), res, delta, top, progress)
    solves += c
    while best["certificate"].bound_active and spec.lyapunov_bound < X_BOUND_MAX and top - lo > 1e-9:
        wider = replace(spec, lyapunov_bound=X_BOUND_MAX)
        if progress is not None:
            progress(
                f"the Lyapunov bound {spec.lyapunov_bound:.0e} is active; relaxing it to {wider.lyapunov_bound:.0e}"
            )
        a, new, c = _certified_rate(poly, wider, lo, None, delta, top, progress)
        solves += c
        if new is None or a <= lo or _condition(new["certificate"].lyapunov) > X_CONDITION_MAX:
            break
        spec, lo, best = wider, a, new
    resolution = max(RATE_TOLERANCE * lo, 1e-4)
    return GainCertificate(min(lo, top), resolution, best["certificate"], best["status"], solves, spec.lyapunov_bound)


def _certified_rate(poly, spec, a0, res, delta, top, say=None):
    """The rate search for a fixed gain from the raw rate ``a0`` (certified by ``res``, or ``None``):
    ``(rate, result, solves)``; the result's certificate is the numpy re-check at the returned rate."""
    a, point, solves, status = _raise_rate(poly, spec, a0, delta, say, cap=top)
    if point is None:
        return a0, res, solves
    return a, _point_result(poly, spec, a, point, delta, status), solves
