"""The robot's inertial parameters, friction and torque bias from free motion.

Model of every measured effort (joint i, sample k, bag b)::

    tau_ik = Y_b(q, q', q'')_i beta + f_v,i q'_i + f_c,i tanh(q'_i / eps) + bias_b,i + noise

with ``beta`` the base parameters (:mod:`.regressor`), the friction terms only for efforts on
the motor side (the package's friction model), one bias per bag and joint.

1. Weights (two-step weighted least squares, Gautier and Poignet 2001, see :mod:`.signals`):
   ordinary least squares gives each joint's residual level ``sigma_i``; rows are divided by
   it. The residual is serially correlated (filtered signals, unmodelled effects), so the
   information of the data is divided by the long-run variance ratio ``kappa = 1 + 2 sum
   (1 - l/(L+1)) rho_l`` of the standardized residual (Bartlett weights, as Newey and West,
   Econometrica 1987): confidence intervals and the excitation test then count independent
   information, not samples.
2. The weighted rows are reduced once to a small triangle by QR (numpy): the data term of every
   later step is ``|R x - z|^2``, whatever the number of samples.
3. Maximum a posteriori estimate: data term plus a Gaussian prior centred on the URDF
   (``|(pi_link - pi_urdf) / s|^2``, ``s`` from :func:`~.structure.prior_scales`), so that what
   the motion cannot tell stays as in the URDF: the structurally unidentifiable combinations
   and the directions the trajectory did not excite. Every link's parameters are log-Cholesky
   coordinates (Rucker and Wensing, IEEE RA-L 2022; :mod:`.inertia`), so every estimate is a
   physically consistent body (Wensing, Kim and Slotine, IEEE RA-L 2018). Solved by
   ``scipy.optimize.least_squares`` (trust region reflective, analytic Jacobian, friction >= 0),
   started from the linear estimate projected onto consistent bodies.
4. Excitation: in prior-scaled coordinates, a link's "determined" figure is
   ``10 - trace(posterior covariance / prior covariance)``, the number of parameters' worth the
   data pinned down. Below :data:`MIN_DETERMINED` the link is not excited: it is kept exactly as
   in the URDF and the report says so, unless keeping it would lose what the data say (see
   :func:`_excited`). Our threshold (no source).
5. Confidence: the posterior covariance of the linearized problem (95 % = 1.96 std), carried to
   mass, centre of mass and inertia by the delta method.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pinocchio as pin
from scipy.optimize import least_squares, lsq_linear

from . import inertia as inr
from .regressor import BaseParameters
from .signals import MotionData
from .structure import Layout, tool_prior

MIN_DETERMINED = 0.5       # parameters' worth a link needs to count as excited (our choice)
Z95 = 1.959963984540054
MAX_LAGS = 200             # samples, at most, in the long-run variance
SIGMA_FLOOR = 1e-9         # of the effort's RMS: the least residual level a joint is given


@dataclass
class Options:
    """motor_side: efforts include joint friction (``effort_side: motor``); smoothing_velocity
    rad/s: eps of tanh(v / eps); relative_spread: how far the URDF is believed (prior scales);
    held_out_fraction: the end of each bag's free motion held out for the before/after check."""

    motor_side: bool = False
    smoothing_velocity: float = 0.01
    relative_spread: float = 0.5
    min_determined: float = MIN_DETERMINED
    held_out_fraction: float = 0.25


@dataclass
class Rows:
    """The linear model's rows, one per (sample, joint), sample-major: A (M, p) columns
    [base parameters (r) | friction (2 nv or 0) | bias (bags x nv)]; tau (M,) N·m or N."""

    A: np.ndarray
    tau: np.ndarray
    nv: int
    r: int
    n_friction: int
    n_bags: int
    held: np.ndarray      # (N,) per sample
    run: np.ndarray       # (N,) per sample

    @property
    def samples(self) -> int:
        return len(self.held)


def build_rows(layout: Layout, base: BaseParameters, data: MotionData, options: Options,
               n_bags: int) -> Rows:
    """Regressor rows of every sample (Pinocchio's joint-torque regressor, base columns)."""
    robot = layout.robot
    model, nv = robot.model, robot.nv
    d = model.createData()
    N = len(data)
    nf = 2 * nv if options.motor_side else 0
    r = base.count
    p = r + nf + n_bags * nv
    A = np.zeros((N * nv, p))
    ind = base.independent
    for k in range(N):
        q = robot.configuration_from_angles(data.angles[k])
        Y = pin.computeJointTorqueRegressor(model, d, q, data.velocity[k], data.acceleration[k])
        A[k * nv:(k + 1) * nv, :r] = Y[:, ind]
    rows = np.arange(N * nv).reshape(N, nv)
    if nf:
        v = data.velocity
        for j in range(nv):
            A[rows[:, j], r + j] = v[:, j]
            A[rows[:, j], r + nv + j] = np.tanh(v[:, j] / options.smoothing_velocity)
    for j in range(nv):
        A[rows[:, j], r + nf + data.bag * nv + j] = 1.0
    held = np.zeros(N, bool)
    for b in np.unique(data.bag):
        t = data.time[data.bag == b]
        cut = t.min() + (1.0 - options.held_out_fraction) * (t.max() - t.min())
        held |= (data.bag == b) & (data.time >= cut)
    return Rows(A, data.effort.reshape(-1).copy(), nv, r, nf, n_bags, held, data.run.copy())


@dataclass
class Solution:
    """One fit. links (n, 10) each body's child link pi (kept ones: the URDF's); tools (k, 10);
    linear (p - r,) friction and bias; beta (r,); free (n,) bool; determined (n + k,);
    covariance (n + k, 10, 10) of each link's/tool's pi (zeros when kept); sigma (nv,) N·m the
    residual levels; kappa; notes: what was projected or kept."""

    links: np.ndarray
    tools: np.ndarray
    linear: np.ndarray
    beta: np.ndarray
    free: np.ndarray
    determined: np.ndarray
    covariance: np.ndarray
    sigma: np.ndarray
    kappa: float
    samples: int
    notes: list[str] = field(default_factory=list)


def _weights(rows: Rows, use: np.ndarray) -> tuple[np.ndarray, float]:
    """(sigma (nv,), kappa) from an ordinary least-squares fit on the samples ``use``."""
    nv = rows.nv
    sel = np.repeat(use, nv)
    A, tau = rows.A[sel], rows.tau[sel]
    # least squares through the triangle of [A | tau] (one QR of the tall matrix, then a small
    # minimum-norm solve: columns of joints that never moved are zero)
    Rt = np.linalg.qr(np.column_stack([A, tau]), mode="r")
    p = A.shape[1]
    x, *_ = np.linalg.lstsq(Rt[:p, :p], Rt[:p, p], rcond=None)
    E = (tau - A @ x).reshape(-1, nv)
    T = tau.reshape(-1, nv)
    floor = SIGMA_FLOOR * np.sqrt(np.mean(T * T, axis=0)) + 1e-300
    sigma = np.maximum(np.sqrt(np.mean(E * E, axis=0)), floor)
    Z = E / sigma
    run = rows.run[use]
    var = float(np.mean(Z * Z))
    rho = []
    for lag in range(1, MAX_LAGS + 1):
        same = run[lag:] == run[:-lag]
        if same.sum() < 10:
            break
        rho.append(float(np.mean(Z[lag:][same] * Z[:-lag][same])) / var)
        if rho[-1] < 1.0 / math.e:
            break
    L = min(4 * len(rho), MAX_LAGS)
    rho_all = []
    for lag in range(1, L + 1):
        same = run[lag:] == run[:-lag]
        if same.sum() < 10:
            break
        rho_all.append(float(np.mean(Z[lag:][same] * Z[:-lag][same])) / var)
    kappa = 1.0 + 2.0 * sum((1.0 - (k + 1) / (L + 1.0)) * c for k, c in enumerate(rho_all))
    return sigma, max(kappa, 1.0)


def _reduce(rows: Rows, use: np.ndarray, sigma: np.ndarray, kappa: float
            ) -> tuple[np.ndarray, np.ndarray]:
    """(R (p, p), z (p,)): |R x - z|^2 is the weighted data term up to a constant."""
    nv = rows.nv
    sel = np.repeat(use, nv)
    w = 1.0 / (np.tile(sigma, int(use.sum())) * math.sqrt(kappa))
    M = np.column_stack([rows.A[sel] * w[:, None], rows.tau[sel] * w])
    R = np.linalg.qr(M, mode="r")
    p = rows.A.shape[1]
    return R[:p, :p], R[:p, p]


class _Problem:
    """The MAP problem over the free links, the tools and the linear (friction, bias) terms."""

    def __init__(self, layout: Layout, base: BaseParameters, rows: Rows, R: np.ndarray,
                 z: np.ndarray, free: np.ndarray, motor: bool):
        self.layout, self.K, self.R, self.z = layout, base.matrix, R, z
        self.r = rows.r
        self.n_lin = R.shape[1] - rows.r
        self.n_friction = rows.n_friction
        self.free = free
        self.blocks = [b for b in range(len(layout.bodies)) if free[b]]
        self.n_tools = len(layout.tools)
        n = len(self.blocks) + self.n_tools
        self.n_w = 10 * n
        means, scales = [], []
        for b in self.blocks:
            means.append(layout.bodies[b].link_urdf)
            scales.append(layout.bodies[b].scale)
        for tool in layout.tools:
            m, s = tool_prior(tool, layout)
            means.append(m)
            scales.append(s)
        self.mean = np.concatenate(means) if means else np.zeros(0)
        self.scale = np.concatenate(scales) if scales else np.zeros(0)
        # w (stacked free links and tools) -> body stack, and its constant part
        P = layout.n_parameters
        L = np.zeros((P, self.n_w))
        for i, b in enumerate(self.blocks):
            L[10 * b:10 * b + 10, 10 * i:10 * i + 10] = np.eye(10)
        for t, tool in enumerate(layout.tools):
            i = len(self.blocks) + t
            L[10 * tool.body:10 * tool.body + 10, 10 * i:10 * i + 10] = tool.transform
        self.L = L
        const = np.array([b.rest + (0.0 if free[k] else 1.0) * b.link_urdf
                          for k, b in enumerate(layout.bodies)]).reshape(-1)
        self.beta_const = self.K @ const
        self.KL = self.K @ L
        tau_scale = float(np.max(np.abs(z))) if len(z) else 1.0
        # a very weak prior on friction and bias (1e6 x the data's scale): full rank when a
        # joint never moved, no pull otherwise
        self.lin_scale = 1e6 * max(tau_scale, 1.0) * np.ones(self.n_lin)
        self.motor = motor

    # -- linear pieces
    def beta(self, w: np.ndarray) -> np.ndarray:
        return self.beta_const + self.KL @ w

    def linear_estimate(self) -> np.ndarray:
        """Unconstrained MAP (w, lin) of the linear problem."""
        Rb, Rl = self.R[:, :self.r], self.R[:, self.r:]
        top = np.hstack([Rb @ self.KL, Rl])
        prior = np.zeros((self.n_w + self.n_lin, self.n_w + self.n_lin))
        prior[:self.n_w, :self.n_w] = np.diag(1.0 / self.scale)
        prior[self.n_w:, self.n_w:] = np.diag(1.0 / self.lin_scale)
        rhs = np.concatenate([self.z - Rb @ self.beta_const,
                              self.mean / self.scale, np.zeros(self.n_lin)])
        x, *_ = np.linalg.lstsq(np.vstack([top, prior]), rhs, rcond=None)
        return x

    def covariance(self) -> np.ndarray:
        """Posterior covariance of (w, lin) of the linearized problem."""
        Rb, Rl = self.R[:, :self.r], self.R[:, self.r:]
        J = np.vstack([np.hstack([Rb @ self.KL, Rl]),
                       np.diag(np.concatenate([1.0 / self.scale, 1.0 / self.lin_scale]))])
        # (J^T J)^-1 from the SVD of J itself: forming J^T J would square a condition number
        # that noise-free data make large (data rows ~1e9 x the prior rows)
        _, s, Vt = np.linalg.svd(J, full_matrices=False)
        return (Vt.T / s ** 2) @ Vt

    def determined(self) -> np.ndarray:
        """Parameters' worth the data determined, per free link and tool."""
        C = self.covariance()[:self.n_w, :self.n_w]
        rel = np.diag(C) / self.scale ** 2
        return 10.0 - rel.reshape(-1, 10).sum(axis=1)

    # -- the nonlinear problem in log-Cholesky coordinates
    def split(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return x[:self.n_w], x[self.n_w:]

    def residual(self, x: np.ndarray) -> np.ndarray:
        th, lin = self.split(x)
        w = np.concatenate([inr.from_log_cholesky(th[10 * i:10 * i + 10])
                            for i in range(self.n_w // 10)]) if self.n_w else np.zeros(0)
        data = self.R @ np.concatenate([self.beta(w), lin]) - self.z
        return np.concatenate([data, (w - self.mean) / self.scale, lin / self.lin_scale])

    def jacobian(self, x: np.ndarray) -> np.ndarray:
        th, _ = self.split(x)
        n = self.n_w // 10
        D = np.zeros((self.n_w, self.n_w))
        for i in range(n):
            D[10 * i:10 * i + 10, 10 * i:10 * i + 10] = inr.log_cholesky_jacobian(
                th[10 * i:10 * i + 10])
        Rb, Rl = self.R[:, :self.r], self.R[:, self.r:]
        top = np.hstack([Rb @ self.KL @ D, Rl])
        mid = np.hstack([D / self.scale[:, None], np.zeros((self.n_w, self.n_lin))])
        bot = np.hstack([np.zeros((self.n_lin, self.n_w)), np.diag(1.0 / self.lin_scale)])
        return np.vstack([top, mid, bot])

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        lo = np.full(self.n_w + self.n_lin, -np.inf)
        if self.motor:
            lo[self.n_w:self.n_w + self.n_friction] = 0.0
        return lo, np.full_like(lo, np.inf)


def _excited(layout: Layout, base: BaseParameters, rows: Rows, R: np.ndarray, z: np.ndarray,
             options: Options) -> tuple[np.ndarray, np.ndarray]:
    """Which links the data excite: (free (n,) bool, determined (n + tools,) with every link
    free). A link below ``min_determined`` is kept from the URDF unless keeping it loses
    information: links are kept one at a time, least determined first, as long as the
    parameters' worth the data determine over all links and tools stays within
    ``min_determined`` of its value with every link free (a direction shared by several
    little-determined links then keeps one of them free)."""
    n = len(layout.bodies)

    def total(free: np.ndarray) -> tuple[float, np.ndarray]:
        det = _Problem(layout, base, rows, R, z, free, options.motor_side).determined()
        return float(det.sum()), det

    free = np.ones(n, bool)
    full, det_all = total(free)
    for b in np.argsort(det_all[:n]):
        if det_all[b] >= options.min_determined:
            break
        trial = free.copy()
        trial[b] = False
        if full - total(trial)[0] < options.min_determined:
            free = trial
    return free, det_all


def solve(layout: Layout, base: BaseParameters, rows: Rows, use: np.ndarray,
          options: Options) -> Solution:
    """The MAP fit on the samples ``use`` (N,) bool (see the module text)."""
    sigma, kappa = _weights(rows, use)
    R, z = _reduce(rows, use, sigma, kappa)
    n_bodies, n_tools = len(layout.bodies), len(layout.tools)
    notes: list[str] = []
    free, det_all = _excited(layout, base, rows, R, z, options)
    prob = _Problem(layout, base, rows, R, z, free, options.motor_side)
    x_lin = prob.linear_estimate()
    w_lin, lin0 = prob.split(x_lin)
    theta0 = []
    labels = [layout.bodies[b].link for b in prob.blocks] + [t.name for t in layout.tools]
    for i, label in enumerate(labels):
        block = w_lin[10 * i:10 * i + 10]
        problem = inr.consistency_violation(block)
        if problem:
            notes.append(f"{label}: the unconstrained estimate is not a physical body ({problem}); "
                         "the estimate written is the closest consistent body the data allow")
        theta0.append(inr.to_log_cholesky(block, 1e-9 * float(prob.scale[10 * i + 4])))
    if options.motor_side:
        lin0 = lin0.copy()
        lin0[:prob.n_friction] = np.maximum(lin0[:prob.n_friction], 0.0)
    x0 = np.concatenate(theta0 + [lin0])
    lo, hi = prob.bounds()
    x0 = np.clip(x0, lo, hi)
    if len(x0):
        with np.errstate(over="ignore", invalid="ignore"):  # trial steps may overflow exp
            sol = least_squares(prob.residual, x0, jac=prob.jacobian, bounds=(lo, hi), method="trf",
                                x_scale="jac", ftol=1e-15, xtol=1e-15, gtol=1e-15,
                                max_nfev=400)
        x = sol.x
    else:
        x = x0
    th, lin = prob.split(x)
    w = np.concatenate([inr.from_log_cholesky(th[10 * i:10 * i + 10])
                        for i in range(len(labels))]) if labels else np.zeros(0)
    links = np.array([b.link_urdf for b in layout.bodies])
    for i, b in enumerate(prob.blocks):
        links[b] = w[10 * i:10 * i + 10]
    tools = np.array([w[10 * (len(prob.blocks) + t):10 * (len(prob.blocks) + t) + 10]
                      for t in range(n_tools)]).reshape(n_tools, 10)
    C = prob.covariance()[:prob.n_w, :prob.n_w]
    cov = np.zeros((n_bodies + n_tools, 10, 10))
    for i, b in enumerate(prob.blocks):
        cov[b] = C[10 * i:10 * i + 10, 10 * i:10 * i + 10]
    for t in range(n_tools):
        i = len(prob.blocks) + t
        cov[n_bodies + t] = C[10 * i:10 * i + 10, 10 * i:10 * i + 10]
    determined = np.concatenate([det_all[:n_bodies], det_all[n_bodies:]])
    beta = prob.beta(w)
    return Solution(links, tools, lin, beta, free, determined, cov, sigma, kappa,
                    int(use.sum()), notes)


def linear_with_fixed_beta(rows: Rows, use: np.ndarray, beta: np.ndarray, motor: bool
                           ) -> np.ndarray:
    """Friction and bias fitted with the inertial part fixed at ``beta`` (the URDF's, for the
    "before" figures): bounded least squares (scipy.optimize.lsq_linear), friction >= 0."""
    nv = rows.nv
    sel = np.repeat(use, nv)
    A = rows.A[sel]
    y = rows.tau[sel] - A[:, :rows.r] @ beta
    X = A[:, rows.r:]
    present = np.any(X != 0, axis=0)
    lo = np.full(X.shape[1], -np.inf)
    if motor:
        lo[:rows.n_friction] = 0.0
    out = np.zeros(X.shape[1])
    if present.any():
        res = lsq_linear(X[:, present], y, bounds=(lo[present], np.inf))
        out[present] = res.x
    return out


def residual_rms(rows: Rows, use: np.ndarray, beta: np.ndarray, linear: np.ndarray
                 ) -> np.ndarray:
    """RMS (nv,) N·m or N of the measured efforts minus the model on the samples ``use``."""
    nv = rows.nv
    sel = np.repeat(use, nv)
    if not sel.any():
        return np.full(nv, np.nan)
    e = rows.tau[sel] - rows.A[sel] @ np.concatenate([beta, linear])
    E = e.reshape(-1, nv)
    return np.sqrt(np.mean(E * E, axis=0))


def summary_with_intervals(pi: np.ndarray, covariance: np.ndarray
                           ) -> tuple[np.ndarray, np.ndarray]:
    """(values (10,), 95 % half-widths (10,)) of [mass kg, centre of mass (3) m, inertia about
    the centre of mass (xx, xy, yy, xz, yz, zz) kg·m²], half-widths by the delta method
    (central differences)."""
    def f(p: np.ndarray) -> np.ndarray:
        m, c, i_c = inr.summary(p)
        return np.concatenate([[m], c, inr.six_of(i_c)])

    value = f(pi)
    if not np.any(covariance):
        return value, np.full(10, np.nan)
    step = 1e-6 * (np.abs(pi) + np.sqrt(np.maximum(np.diag(covariance), 0.0)) + 1e-12)
    J = np.column_stack([(f(pi + step[k] * e) - f(pi - step[k] * e)) / (2 * step[k])
                         for k, e in enumerate(np.eye(10))])
    var = np.einsum("ij,jk,ik->i", J, covariance, J)
    return value, Z95 * np.sqrt(np.maximum(var, 0.0))
