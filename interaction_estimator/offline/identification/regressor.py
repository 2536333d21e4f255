"""The joint-torque regressor and the robot's base inertial parameters.

Rigid-body dynamics are linear in the bodies' inertial parameters:
``tau = M(q) q'' + C(q, q') q' + g(q) = Y(q, q', q'') pi`` with pi the stacked (10 per body)
vector of :mod:`.inertia`. ``Y`` is Pinocchio's ``computeJointTorqueRegressor``.

Not every parameter changes the torques (a link's mass moment along its own joint axis, most of
the first links' parameters on a fixed base...), and some only in fixed combinations: the base
parameters (Gautier and Khalil, "Direct calculation of minimum set of inertial parameters of
serial robots", IEEE Trans. Robotics and Automation 6(3), 1990) are the independent
combinations. They are found numerically (Gautier, "Numerical calculation of the base inertial
parameters of robots", J. Robotic Systems 8(4), 1991): the regressor stacked at random states
is factored by QR with column pivoting (scipy.linalg.qr), ``Y P = Q [R1 R2]``; its rank r gives
the independent columns (the first r pivots) and ``beta = pi_1 + R1^-1 R2 pi_2``, so that
``Y pi = Y_1 beta`` for every state.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pinocchio as pin
import scipy.linalg

RANK_TOLERANCE = 1e-8   # |R_kk| / |R_00| below which a column is dependent (common practice)


@dataclass
class BaseParameters:
    """independent (r,) column indices of pi; matrix (r, P): beta = matrix @ pi; labels (r,):
    the independent parameter each base parameter is named after (``link: m`` ...)."""

    independent: np.ndarray
    matrix: np.ndarray
    labels: list[str]

    @property
    def count(self) -> int:
        return len(self.independent)


def random_states(model: pin.Model, count: int, seed: int) -> tuple[np.ndarray, ...]:
    """``count`` random (q, v, a): positions uniform within the joint limits where they are
    finite (else within +-pi rad or +-1 m), velocities and accelerations standard normal."""
    rng = np.random.default_rng(seed)
    lo, hi = model.lowerPositionLimit.copy(), model.upperPositionLimit.copy()
    bad = ~(np.isfinite(lo) & np.isfinite(hi)) | (hi - lo > 1e6) | (hi <= lo)
    lo[bad], hi[bad] = -np.pi, np.pi
    Q = np.empty((count, model.nq))
    for k in range(count):
        q = rng.uniform(lo, hi)
        Q[k] = pin.normalize(model, q)
    V = rng.standard_normal((count, model.nv))
    A = rng.standard_normal((count, model.nv))
    return Q, V, A


def stacked_regressor(model: pin.Model, Q: np.ndarray, V: np.ndarray, A: np.ndarray
                      ) -> np.ndarray:
    """Y at each state, stacked: (count x nv, 10 x bodies)."""
    data = model.createData()
    return np.vstack([pin.computeJointTorqueRegressor(model, data, q, v, a)
                      for q, v, a in zip(Q, V, A)])


def base_parameters(model: pin.Model, body_names: list[str], seed: int = 0,
                    states: int | None = None) -> BaseParameters:
    """The base parameters of ``model`` by QR with column pivoting of the regressor stacked at
    random states (at least 4 x the parameter count of rows)."""
    P = 10 * (model.njoints - 1)
    count = states or max(30, (4 * P) // max(model.nv, 1) + 1)
    Y = stacked_regressor(model, *random_states(model, count, seed))
    _, R, piv = scipy.linalg.qr(Y, mode="economic", pivoting=True)
    d = np.abs(np.diag(R))
    r = int(np.sum(d > RANK_TOLERANCE * d[0])) if len(d) and d[0] > 0 else 0
    ind, dep = piv[:r], piv[r:]
    K = np.zeros((r, P))
    K[:, ind] = np.eye(r)
    if len(dep):
        K[:, dep] = scipy.linalg.solve_triangular(R[:r, :r], R[:r, r:P])
    # order by parameter index, for readable reports
    order = np.argsort(ind)
    from .inertia import LABELS
    labels = [f"{body_names[i // 10]}: {LABELS[i % 10]}" for i in ind[order]]
    return BaseParameters(ind[order], K[order], labels)
