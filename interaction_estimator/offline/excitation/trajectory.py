"""The commissioning motion: a periodic joint trajectory, a finite Fourier series per joint,
optimized for the conditioning of the identification problem (Swevers, Ganseman, Tukel, de
Schutter and Van Brussel, "Optimal robot excitation and identification", IEEE Trans. Robotics
and Automation 13(5), 1997).

Each moving joint i follows, with ``w = 2 pi / period`` and ``L`` harmonics::

    q_i(t) = c_i + sum_l ( a_il / (w l) sin(w l t) - b_il / (w l) cos(w l t) )
    q_i'(t) = sum_l ( a_il cos(w l t) + b_il sin(w l t) )

The trajectory starts, and so ends every period, at rest: ``sum_l a_il = 0`` (no velocity) and
``sum_l l b_il = 0`` (no acceleration), imposed by solving for ``a_iL`` and ``b_iL``. The limits
are met by construction: each joint's shape is scaled by the largest factor that keeps its
position range, speed and acceleration within the limits (after the margin), and centred in
its range; so the search is over shapes only and every candidate is feasible.

The criterion is the condition number of the base-parameter regressor (see
:mod:`~..identification.regressor`) stacked over one period, its columns scaled by the prior
spread of each base parameter (the URDF's own magnitudes, :mod:`~..identification.structure`):
a trajectory that excites every base parameter in proportion to its expected size has a small
condition number (Swevers et al. use the regressor's condition number; the scaling makes it
independent of units). Search: random starts (seeded), then L-BFGS-B (scipy.optimize) from the
best, on the logarithm of the condition number.
"""
from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import pinocchio as pin
from scipy.optimize import minimize
from threadpoolctl import threadpool_limits

from ...core.model import RobotModel
from ..identification.regressor import base_parameters
from ..identification.structure import build_layout
from .limits import JointLimits

GRID_PER_HARMONIC = 64      # points per period and harmonic for the limit check
SAFETY = 0.999              # of each limit actually used (grid maxima of a smooth function)


@dataclass
class FourierTrajectory:
    """joints (n,) model order; period s; a, b (L, n) rad/s (m/s) coefficients; centre (n,)
    rad (m): the constant c_i (held joints: their position, a = b = 0)."""

    joints: tuple[str, ...]
    period: float
    a: np.ndarray
    b: np.ndarray
    centre: np.ndarray

    @property
    def harmonics(self) -> int:
        return self.a.shape[0]

    def evaluate(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(position, velocity, acceleration), each (len(t), n), at times t s."""
        t = np.asarray(t, float)[:, None, None]
        w = 2.0 * math.pi / self.period
        ls = np.arange(1, self.harmonics + 1)[None, :, None]
        s, c = np.sin(w * ls * t), np.cos(w * ls * t)
        a, b = self.a[None], self.b[None]
        q = self.centre + np.sum(a / (w * ls) * s - b / (w * ls) * c, axis=1)
        v = np.sum(a * c + b * s, axis=1)
        acc = np.sum(w * ls * (b * c - a * s), axis=1)
        return q, v, acc


def _shape(x: np.ndarray, L: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    """(a, b) (L, n) of the free coefficients x (2 (L-1) n,), at rest at t = 0."""
    X = x.reshape(2, L - 1, n)
    a = np.vstack([X[0], -X[0].sum(axis=0, keepdims=True)])
    ls = np.arange(1, L)[:, None]
    b = np.vstack([X[1], -(ls * X[1]).sum(axis=0, keepdims=True) / L])
    return a, b


def fit_to_limits(a: np.ndarray, b: np.ndarray, period: float, limits: Sequence[JointLimits]
                  ) -> FourierTrajectory:
    """Scale each joint's shape to the largest size its limits allow and centre it in its
    position range (held joints: zero motion at their hold position)."""
    L, n = a.shape
    grid = np.arange(GRID_PER_HARMONIC * L) * period / (GRID_PER_HARMONIC * L)
    shape = FourierTrajectory(tuple(j.name for j in limits), period, a, b, np.zeros(n))
    q, v, acc = shape.evaluate(grid)
    a, b, centre = a.copy(), b.copy(), np.zeros(n)
    for i, lim in enumerate(limits):
        if lim.held:
            a[:, i] = b[:, i] = 0.0
            centre[i] = lim.hold_at
            continue
        span = float(q[:, i].max() - q[:, i].min())
        peak_v, peak_a = float(np.abs(v[:, i]).max()), float(np.abs(acc[:, i]).max())
        factors = [(lim.upper - lim.lower) / span if span > 0 else math.inf,
                   lim.velocity / peak_v if peak_v > 0 else math.inf,
                   lim.acceleration / peak_a if peak_a > 0 else math.inf]
        s = SAFETY * min(factors)
        if not math.isfinite(s):
            s = 0.0
        a[:, i] *= s
        b[:, i] *= s
        mid = 0.5 * (q[:, i].max() + q[:, i].min()) * s
        centre[i] = 0.5 * (lim.lower + lim.upper) - mid
    return FourierTrajectory(shape.joints, period, a, b, centre)


class Criterion:
    """log condition number of the scaled base regressor over one period of a trajectory."""

    def __init__(self, robot: RobotModel, urdf: str, points: int):
        self.robot = robot
        layout = build_layout(robot, urdf)
        base = base_parameters(robot.model, [b.link for b in layout.bodies])
        scale = np.concatenate([b.scale for b in layout.bodies])
        self.columns = base.independent
        # spread of each base parameter beta = K pi with independent pi of spread `scale`
        self.column_scale = np.sqrt((base.matrix ** 2) @ scale ** 2)
        self.base = base
        self.points = points
        self.data = robot.model.createData()

    def regressor(self, traj: FourierTrajectory, times: np.ndarray) -> np.ndarray:
        """Scaled base regressor stacked at ``times`` (len x nv, r)."""
        q, v, acc = traj.evaluate(times)
        m, d, robot = self.robot.model, self.data, self.robot
        rows = [pin.computeJointTorqueRegressor(m, d, robot.configuration_from_angles(qk), vk,
                                                ak)[:, self.columns]
                for qk, vk, ak in zip(q, v, acc)]
        return np.vstack(rows) * self.column_scale

    def condition(self, traj: FourierTrajectory, times: np.ndarray | None = None) -> float:
        if times is None:
            times = np.arange(self.points) * traj.period / self.points
        s = np.linalg.svd(self.regressor(traj, times), compute_uv=False)
        return float(s[0] / s[-1]) if s[-1] > 0 else math.inf


@dataclass
class SearchResult:
    trajectory: FourierTrajectory
    condition: float          # of the scaled base regressor over one period
    evaluations: int
    base_parameters: int


def optimize(robot: RobotModel, urdf: str, limits: Sequence[JointLimits], period: float,
             harmonics: int, seed: int = 0, starts: int = 24, iterations: int = 40,
             points: int = 100, log: Callable[[str], None] | None = None) -> SearchResult:
    """The trajectory of smallest condition number found (see the module text)."""
    say = log or (lambda _m: None)
    if harmonics < 2:
        raise ValueError(f"harmonics {harmonics} < 2; expected 2 or more (one is spent on "
                         "starting at rest)")
    n, L = len(limits), harmonics
    crit = Criterion(robot, urdf, points)
    count = 0

    def cost(x: np.ndarray) -> float:
        nonlocal count
        count += 1
        a, b = _shape(x, L, n)
        c = crit.condition(fit_to_limits(a, b, period, limits))
        return math.log(c) if math.isfinite(c) else 1e3

    rng = np.random.default_rng(seed)
    with threadpool_limits(limits=1, user_api="blas"):
        candidates = [rng.standard_normal(2 * (L - 1) * n) / np.sqrt(np.arange(1, L).repeat(n)
                                                                     .reshape(1, -1)
                                                                     .repeat(2, 0).ravel())
                      for _ in range(starts)]
        scored = sorted((cost(x), k) for k, x in enumerate(candidates))
        say(f"{starts} random starts: best condition number {math.exp(scored[0][0]):.4g}")
        x = candidates[scored[0][1]]
        res = minimize(cost, x, method="L-BFGS-B",
                       options={"maxiter": iterations, "eps": 1e-4})
        best = res.x if res.fun <= scored[0][0] else x
        a, b = _shape(best, L, n)
        traj = fit_to_limits(a, b, period, limits)
        cond = crit.condition(traj)
    say(f"after {count} evaluations: condition number {cond:.4g}")
    return SearchResult(traj, cond, count, crit.base.count)
