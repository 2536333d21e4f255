"""The physics of the built-in scenarios: the mobile Marten in Pinocchio, the objects along
their direction (linear objects and the door on its hinge) and the KKT system that solves
robot and object together each internal step (see :mod:`.simulator`)."""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pinocchio as pin

from .marten import CONTACT_FRAME
from .scenarios import _ARM_PREFERRED, JOINT_NAMES, STANDARD_GRAVITY, ScenarioSpec

DOOR_RADIAL_BAUMGARTE = 40.0  # rad/s, drift correction of the door's radial constraint

# ------------------------------------------------------------------------------------------
# robot helpers


class _Robot:
    """Pinocchio model and data of the mobile Marten, and configuration <-> angle conversions."""

    def __init__(self, urdf: str):
        self.model = pin.buildModelFromXML(urdf)
        self.model.gravity.linear = np.array([0.0, 0.0, -STANDARD_GRAVITY])
        self.data = self.model.createData()
        self.fid = self.model.getFrameId(CONTACT_FRAME)
        names = tuple(self.model.names[1:])
        if names != JOINT_NAMES:
            raise RuntimeError(f"unexpected joint order in the Marten URDF: {names}")
        self.nv = self.model.nv
        self.idx_q = [self.model.joints[j].idx_q for j in range(1, self.model.njoints)]
        self.nq_j = [self.model.joints[j].nq for j in range(1, self.model.njoints)]
        self.prismatic = np.array([n in ("marten_base_x", "marten_base_y") for n in names])
        self.arm_v = np.arange(3, 10)
        self.lower = self.model.lowerPositionLimit.copy()
        self.upper = self.model.upperPositionLimit.copy()
        self.lower_tri = np.tril_indices(self.nv, -1)

    def angles(self, q: np.ndarray) -> np.ndarray:
        """Configuration (nq,) -> one coordinate per joint (nv,): continuous joints as angles."""
        out = np.empty(self.nv)
        for j, (iq, nq) in enumerate(zip(self.idx_q, self.nq_j)):
            out[j] = q[iq] if nq == 1 else math.atan2(q[iq + 1], q[iq])
        return out

    def config(self, a: np.ndarray) -> np.ndarray:
        """One coordinate per joint (nv,) -> Pinocchio configuration (nq,)."""
        q = np.empty(self.model.nq)
        for j, (iq, nq) in enumerate(zip(self.idx_q, self.nq_j)):
            if nq == 1:
                q[iq] = a[j]
            else:
                q[iq], q[iq + 1] = math.cos(a[j]), math.sin(a[j])
        return q

    def tool_position(self, q: np.ndarray) -> np.ndarray:
        pin.forwardKinematics(self.model, self.data, q)
        return pin.updateFramePlacement(self.model, self.data, self.fid).translation.copy()

    def ik(self, target: np.ndarray, a_seed: np.ndarray, iterations: int = 300) -> np.ndarray:
        """Arm joints (base fixed at the seed's values) placing the tool at ``target`` (3,) m.

        Damped least squares on Pinocchio's frame Jacobian, with a null-space pull towards the
        preferred posture; returns the joint coordinates (nv,).
        """
        a = a_seed.copy()
        for it in range(iterations):
            q = self.config(a)
            err = target - self.tool_position(q)
            jac = pin.computeFrameJacobian(self.model, self.data, q, self.fid,
                                           pin.LOCAL_WORLD_ALIGNED)[:3, self.arm_v]
            jjt = jac @ jac.T + 1e-4 * np.eye(3)
            step = jac.T @ np.linalg.solve(jjt, err)
            pinv = jac.T @ np.linalg.inv(jjt)
            if it < iterations // 2:  # posture pull first, then converge on the target alone
                step += (np.eye(7) - pinv @ jac) @ (0.2 * (_ARM_PREFERRED - a[3:]))
            a[3:] = np.clip(a[3:] + step, self.lower[4:] + 0.05, self.upper[4:] - 0.05)
            if it >= iterations // 2 and np.linalg.norm(err) < 1e-10:
                break
        if np.linalg.norm(target - self.tool_position(self.config(a))) > 1e-5:
            raise RuntimeError(f"Marten cannot reach {target} (scenario geometry defect)")
        return a


@dataclass
class _Terms:
    """Pinocchio terms at one state: M (nv, nv), h (nv,), J (3, nv), gamma (3,), p (3,) m."""

    M: np.ndarray
    h: np.ndarray
    J: np.ndarray
    gamma: np.ndarray
    p: np.ndarray


def _terms(robot: _Robot, q: np.ndarray, v: np.ndarray) -> _Terms:
    model, data = robot.model, robot.data
    pin.computeAllTerms(model, data, q, v)
    M = data.M.copy()
    M[robot.lower_tri] = M.T[robot.lower_tri]  # crba fills the upper triangle: symmetrize
    p = pin.updateFramePlacement(model, data, robot.fid).translation.copy()
    J = pin.getFrameJacobian(model, data, robot.fid, pin.LOCAL_WORLD_ALIGNED)[:3].copy()
    gamma = pin.getFrameClassicalAcceleration(model, data, robot.fid,
                                              pin.LOCAL_WORLD_ALIGNED).linear.copy()
    return _Terms(M, data.nle.copy(), J, gamma, p)


# ------------------------------------------------------------------------------------------
# objects


class _LinearObject:
    """Mass, damper, spring and constant force along a fixed world direction u (drawer, cart,
    toolbox); the robot's force on it is f u."""

    n_rows = 1

    def __init__(self, spec: ScenarioSpec, p0: np.ndarray):
        self.m, self.d, self.k, self.f0 = spec.mass, spec.damping, spec.stiffness, \
            spec.static_force
        self.u = np.asarray(spec.direction, float)
        self.p0 = p0.copy()

    def rows(self, t: _Terms, v: np.ndarray):
        """(E (3, nc) force directions, A (nc, nv), B (nc, nc), rhs (nc,)) of the KKT rows."""
        ju = self.u @ t.J
        x = float(self.u @ (t.p - self.p0))
        xd = float(ju @ v)
        rhs = np.array([-(self.m * float(self.u @ t.gamma) + self.d * xd + self.k * x
                          + self.f0)])
        return self.u[:, None], (self.m * ju)[None, :], np.array([[-1.0]]), rhs

    def impact_rows(self, t: _Terms):
        ju = self.u @ t.J
        return self.u[:, None], (self.m * ju)[None, :], np.array([[-1.0]])

    def state(self, t: _Terms, v: np.ndarray, a: np.ndarray, lam: np.ndarray):
        """(x m, x' m/s, x'' m/s^2, f along N, F (3,) N, u (3,)) at this state."""
        ju = self.u @ t.J
        x = float(self.u @ (t.p - self.p0))
        return (x, float(ju @ v), float(ju @ a + self.u @ t.gamma), float(lam[0]),
                self.u * lam[0], self.u)


class _CartesianObject:
    """An object with 3x3 mass, damping and stiffness matrices and a constant force vector,
    moving with the tool: the robot's force on it is F = M a + D x' + K x + f_s, x the tool's
    displacement from the contact point (world frame); three KKT rows."""

    n_rows = 3

    def __init__(self, spec: ScenarioSpec, p0: np.ndarray):
        ph = spec.physical
        self.M = np.asarray(ph["mass_matrix_kg"], float)
        self.D = np.asarray(ph["damping_matrix_N_s_per_m"], float)
        self.K = np.asarray(ph["stiffness_matrix_N_per_m"], float)
        self.f0 = np.asarray(ph["static_force_N"], float)
        self.u = np.asarray(spec.direction, float)
        self.p0 = p0.copy()

    def rows(self, t: _Terms, v: np.ndarray):
        x = t.p - self.p0
        xd = t.J @ v
        rhs = -(self.M @ t.gamma + self.D @ xd + self.K @ x + self.f0)
        return np.eye(3), self.M @ t.J, -np.eye(3), rhs

    def impact_rows(self, t: _Terms):
        return np.eye(3), self.M @ t.J, -np.eye(3)

    def state(self, t: _Terms, v: np.ndarray, a: np.ndarray, lam: np.ndarray):
        """Along the display direction u: (x m, x' m/s, x'' m/s^2, u.F N, F (3,) N, u)."""
        x = t.p - self.p0
        xd = t.J @ v
        xdd = t.J @ a + t.gamma
        return (float(self.u @ x), float(self.u @ xd), float(self.u @ xdd),
                float(self.u @ lam), lam.copy(), self.u)


class _Door:
    """Door on a vertical hinge; the handle (the tool) is held on its circle of radius R.

    theta = atan2(d . t0, d . n0), d = horizontal offset of the handle from the hinge; n0 points
    from the hinge to the closed handle, t0 is the opening direction when closed.
    """

    n_rows = 2

    def __init__(self, spec: ScenarioSpec, p0: np.ndarray):
        ph = spec.physical
        self.I, self.c, self.k, self.tau0 = (ph["inertia_kg_m2"], ph["damping_N_m_s_per_rad"],
                                             ph["stiffness_N_m_per_rad"], ph["preload_N_m"])
        self.R = ph["handle_radius_m"]
        self.t0 = np.asarray(spec.direction, float)
        self.n0 = np.cross(self.t0, [0.0, 0.0, 1.0])  # so that z x n0 = t0
        self.hinge = p0 - self.R * self.n0
        self.hinge[2] = 0.0

    def _geometry(self, p: np.ndarray):
        d = p - self.hinge
        d[2] = 0.0
        r = float(np.hypot(d[0], d[1]))
        theta = math.atan2(float(d @ self.t0), float(d @ self.n0))
        n = d / r
        t = np.array([-n[1], n[0], 0.0])  # z x n = cos(theta) t0 - sin(theta) n0, opening
        return r, theta, n, t

    def rows(self, tm: _Terms, v: np.ndarray):
        r, theta, n, t = self._geometry(tm.p)
        vp = tm.J @ v
        vh = vp.copy()
        vh[2] = 0.0
        vn, vt = float(n @ vh), float(t @ vh)
        thd = vt / r
        A = np.vstack([(self.I / r) * (t @ tm.J), n @ tm.J])
        B = np.array([[-r, 0.0], [0.0, 0.0]])
        rhs_t = -(self.I * (float(t @ tm.gamma) / r - 2 * thd * vn / r) + self.c * thd
                  + self.k * theta + self.tau0)
        w = DOOR_RADIAL_BAUMGARTE
        rhs_n = (-(float(vh @ vh) - vn**2) / r - float(n @ tm.gamma) - 2 * w * vn
                 - w**2 * (r - self.R))
        return np.column_stack([t, n]), A, B, np.array([rhs_t, rhs_n])

    def impact_rows(self, tm: _Terms):
        r, _, n, t = self._geometry(tm.p)
        A = np.vstack([(self.I / r) * (t @ tm.J), n @ tm.J])
        return np.column_stack([t, n]), A, np.array([[-r, 0.0], [0.0, 0.0]])

    def state(self, tm: _Terms, v: np.ndarray, a: np.ndarray, lam: np.ndarray):
        r, theta, n, t = self._geometry(tm.p)
        vp = tm.J @ v
        vh = vp.copy()
        vh[2] = 0.0
        ap = tm.J @ a + tm.gamma
        thd = float(t @ vh) / r
        thdd = float(t @ ap) / r - 2 * thd * float(n @ vh) / r
        return (self.R * theta, self.R * thd, self.R * thdd, float(lam[0]),
                t * lam[0] + n * lam[1], t)


# ------------------------------------------------------------------------------------------
# the simulation


def _kkt(t: _Terms, E: np.ndarray, A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """The matrix [[M, J^T E], [A, B]] ((nv + nc) x (nv + nc))."""
    nv, nc = t.M.shape[0], B.shape[0]
    K = np.empty((nv + nc, nv + nc))
    K[:nv, :nv] = t.M
    K[:nv, nv:] = t.J.T @ E
    K[nv:, :nv] = A
    K[nv:, nv:] = B
    return K


def _solve(t: _Terms, tau: np.ndarray, obj, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Joint accelerations (nv,) and contact-force components (nc,) at one state."""
    if obj is None:
        return np.linalg.solve(t.M, tau - t.h), np.zeros(0)
    E, A, B, rhs = obj.rows(t, v)
    nv = t.M.shape[0]
    sol = np.linalg.solve(_kkt(t, E, A, B), np.concatenate([tau - t.h, rhs]))
    return sol[:nv], sol[nv:]


def _impact(t: _Terms, obj, v: np.ndarray) -> np.ndarray:
    """Velocity after the inelastic grasp of the object at rest (same rows, zero right side)."""
    E, A, B = obj.impact_rows(t)
    nv = t.M.shape[0]
    sol = np.linalg.solve(_kkt(t, E, A, B), np.concatenate([t.M @ v, np.zeros(B.shape[0])]))
    return sol[:nv]


