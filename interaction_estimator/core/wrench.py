"""WrenchMap: external joint torque -> the wrench at the contact frame.

``tau_ext = J^T F_ext``; the damped least-squares solution (Nakamura and Hanafusa, ASME J. Dyn.
Syst. 1986; Wampler, IEEE SMC 1986) ``F_ext = (J W J^T + lambda^2 I)^-1 J W tau_ext``, each
joint weighted by the inverse of its free-motion residual variance (W, normalized to mean 1:
Gauss-Markov, so that noisy joints such as a heavy mobile base's count less). The package
reports ``F = -F_ext``, the force (and torque) the robot applies to the environment, in world
axes at the contact point.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from . import contact
from .compiled import kernel
from .records import B1, F8, record

PARAMS = record(
    "wrench map parameters",
    ("full_wrench", B1, "", "force and torque (wrench mode) instead of force only"),
    ("damping_squared", F8, "m^2 (force mode), 1 (wrench mode)", "lambda^2 of the inverse"),
    ("condition_limit", F8, "", "condition number above which the wrench is flagged"),
)


class Wrench(NamedTuple):
    """force (3,) N and torque (3,) N·m (zeros in force mode) the robot applies, world axes;
    condition: condition number of the Jacobian rows used (sigma_max / sigma_min)."""

    force: np.ndarray
    torque: np.ndarray
    condition: float


@kernel
def symmetric_eigen(A, w, V):
    """Eigenvalues w (m,) ascending and eigenvectors V (m, m) (columns) of the symmetric A
    (m, m), by the cyclic Jacobi method (Jacobi 1846; Golub and Van Loan, Matrix Computations,
    4th ed. 2013, sec. 8.5): rotations until the off-diagonal part is below the rounding level.
    On a positive definite matrix it finds even the smallest eigenvalue to high relative
    accuracy (Demmel and Veselic, SIAM J. Matrix Anal. Appl. 1992), which is what the condition
    number needs; for 3x3 it is a few dozen rotations, far cheaper than a LAPACK call's set-up.
    A is overwritten."""
    m = A.shape[0]
    for r in range(m):
        for c in range(m):
            V[r, c] = 1.0 if r == c else 0.0
    for _ in range(60):
        off = 0.0
        for p in range(m):
            for q in range(p + 1, m):
                off += A[p, q] * A[p, q]
        if off == 0.0:
            break
        for p in range(m - 1):
            for q in range(p + 1, m):
                apq = A[p, q]
                if apq == 0.0:
                    continue
                app, aqq = A[p, p], A[q, q]
                # negligible against both diagonal entries: set to zero (the classical test)
                if abs(apq) <= 1e-18 * math.sqrt(abs(app * aqq)):
                    A[p, q] = A[q, p] = 0.0
                    continue
                theta = (aqq - app) / (2.0 * apq)
                t = 1.0 / (abs(theta) + math.sqrt(theta * theta + 1.0))
                if theta < 0.0:
                    t = -t
                c = 1.0 / math.sqrt(t * t + 1.0)
                s = t * c
                for k in range(m):
                    akp, akq = A[k, p], A[k, q]
                    A[k, p] = c * akp - s * akq
                    A[k, q] = s * akp + c * akq
                for k in range(m):
                    apk, aqk = A[p, k], A[q, k]
                    A[p, k] = c * apk - s * aqk
                    A[q, k] = s * apk + c * aqk
                A[p, q] = A[q, p] = 0.0
                for k in range(m):
                    vkp, vkq = V[k, p], V[k, q]
                    V[k, p] = c * vkp - s * vkq
                    V[k, q] = s * vkp + c * vkq
    for r in range(m):
        w[r] = A[r, r]
    for i in range(1, m):   # insertion sort, ascending, vectors along
        j = i
        while j > 0 and w[j - 1] > w[j]:
            w[j - 1], w[j] = w[j], w[j - 1]
            for k in range(m):
                V[k, j - 1], V[k, j] = V[k, j], V[k, j - 1]
            j -= 1


@kernel
def wrench_solve(p, out, jacobian, external_torque, joints):
    """Weighted damped least squares: out[:m] = F = -(J W J^T + lambda^2 I)^-1 J W tau_ext
    (m = 6 with p.full_wrench, else 3; out (6,), its tail zeroed in force mode); W from
    ``joints.weight`` ((nv,) contact.JOINTS). Returns the condition number
    sqrt(w_max / w_min) of J W J^T (inf when singular).

    One symmetric eigendecomposition (:func:`symmetric_eigen`) gives both the solve and the
    condition number."""
    m = 6 if p.full_wrench else 3
    damping2 = p.damping_squared
    nv = external_torque.shape[0]
    A = np.empty((m, m))
    b = np.zeros(m)
    for r in range(m):
        for c in range(r, m):
            s = 0.0
            for j in range(nv):
                s += jacobian[r, j] * joints[j].weight * jacobian[c, j]
            A[r, c] = s
            A[c, r] = s
        for j in range(nv):
            b[r] += jacobian[r, j] * joints[j].weight * external_torque[j]
    w = np.empty(m)
    vecs = np.empty((m, m))
    symmetric_eigen(A, w, vecs)
    # F = -f_ext = -V diag(1/(w + lambda^2)) V^T J W tau_ext
    c = np.empty(m)
    for k in range(m):
        s = 0.0
        for r in range(m):
            s += vecs[r, k] * b[r]
        c[k] = s / (-damping2 - w[k])
    for r in range(m):
        s = 0.0
        for k in range(m):
            s += vecs[r, k] * c[k]
        out[r] = s
    for r in range(m, 6):
        out[r] = 0.0
    w_min, w_max = w[0], w[m - 1]
    return math.sqrt(w_max / w_min) if w_min > 0.0 else math.inf


class WrenchMap:
    """Maps external joint torque (nv,) N·m to the contact wrench by damped least squares.
    damping: lambda (m in force mode)."""

    def __init__(self, full_wrench: bool, damping: float, condition_limit: float = 200.0,
                 params: np.ndarray | None = None):
        self.params = PARAMS.one() if params is None else params
        p = self.params[0]
        p["full_wrench"], p["damping_squared"] = bool(full_wrench), damping * damping
        p["condition_limit"] = condition_limit
        self.no_torque = np.zeros(3)   # the torque of force mode (read-only, shared)
        self.no_torque.setflags(write=False)

    full_wrench = property(lambda self: bool(self.params[0]["full_wrench"]))
    damping2 = property(lambda self: float(self.params[0]["damping_squared"]))

    def solve(self, jacobian: np.ndarray, external_torque: np.ndarray,
              weights: np.ndarray | None = None) -> Wrench:
        """jacobian (6, nv) world-aligned; external_torque (nv,) N·m acting on the robot.

        weights (nv,), optional: per-joint weights W (inverse noise variances, normalized to
        mean 1), giving the weighted damped least-squares solution
        ``(J W J^T + lambda^2 I)^-1 J W tau_ext``.
        """
        tau = np.ascontiguousarray(external_torque, dtype=float)
        joints = contact.JOINTS.many(len(tau))
        joints["weight"] = 1.0 if weights is None else np.asarray(weights, float)
        out = np.empty(6)
        condition = wrench_solve(self.params[0], out,
                                 np.ascontiguousarray(jacobian, dtype=float), tau, joints)
        if self.full_wrench:
            return Wrench(out[:3], out[3:], condition)
        return Wrench(out[:3], self.no_torque, condition)
