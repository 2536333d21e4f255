"""One rigid body's ten inertial parameters: conversions, the log-Cholesky parametrisation and
the conditions of physical consistency.

Vector ``pi`` (10,), Pinocchio's order (``Inertia.toDynamicParameters``): mass m (kg), first
moment m·c (kg·m, c the centre of mass), rotational inertia about the frame's origin
``Ixx, Ixy, Iyy, Ixz, Iyz, Izz`` (kg·m²), all in the body frame.

Log-Cholesky parametrisation (Rucker and Wensing, "Smooth parameterization of rigid-body
inertia", IEEE Robotics and Automation Letters 7(2), 2022): the pseudo-inertia
``J = [[Sigma, h], [h^T, m]]`` (``Sigma = 1/2 tr(I) E - I`` the second moment of mass) is
written ``J = U U^T`` with ``U = e^alpha [[e^d1, s12, s13, t1], [0, e^d2, s23, t2],
[0, 0, e^d3, t3], [0, 0, 0, 1]]``, theta = (alpha, d1, d2, d3, s12, s23, s13, t1, t2, t3).
Every theta gives a positive-definite J, which is exactly the set of inertias some positive
density can have (Wensing, Kim and Slotine, "Linear matrix inequalities for physically
consistent inertial parameter identification", IEEE RA-L 3(1), 2018). The forward map and its
Jacobian come from Pinocchio (``LogCholeskyParameters``); the inverse (a "reverse" Cholesky
factor of J) is here.

Physical consistency as Traversaro, Brossette, Escande and Nori state it ("Identification of
fully physical consistent inertial parameters using optimization on manifolds", IROS 2016):
m > 0 and the rotational inertia about the centre of mass has non-negative principal moments,
each at most the sum of the other two (:func:`consistency_violation`).
"""
from __future__ import annotations

import math

import numpy as np
import pinocchio as pin

LABELS = ("m", "mc_x", "mc_y", "mc_z", "I_xx", "I_xy", "I_yy", "I_xz", "I_yz", "I_zz")
_SYM = ((0, 0), (0, 1), (1, 1), (0, 2), (1, 2), (2, 2))   # pi[4:] entries of the 3x3 tensor


def skew(p: np.ndarray) -> np.ndarray:
    return np.array([[0.0, -p[2], p[1]], [p[2], 0.0, -p[0]], [-p[1], p[0], 0.0]])


def tensor(six: np.ndarray) -> np.ndarray:
    """Symmetric 3x3 from (xx, xy, yy, xz, yz, zz)."""
    t = np.empty((3, 3))
    for k, (i, j) in enumerate(_SYM):
        t[i, j] = t[j, i] = six[k]
    return t


def six_of(t: np.ndarray) -> np.ndarray:
    """(xx, xy, yy, xz, yz, zz) of a 3x3 tensor."""
    return np.array([t[i, j] for i, j in _SYM])


def parameters(mass: float, com: np.ndarray, inertia_com: np.ndarray) -> np.ndarray:
    """pi (10,) of a body of ``mass`` kg, centre of mass ``com`` (3,) m and rotational inertia
    ``inertia_com`` (3, 3) kg·m² about the centre of mass, all in the body frame (parallel-axis
    theorem: I_o = I_c + m (|c|^2 E - c c^T))."""
    c = np.asarray(com, float)
    i_o = np.asarray(inertia_com, float) + mass * (c @ c * np.eye(3) - np.outer(c, c))
    return np.concatenate([[mass], mass * c, six_of(i_o)])


def summary(pi: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """(mass kg, centre of mass (3,) m, inertia (3, 3) kg·m² about the centre of mass); the
    centre of mass is nan for a zero mass."""
    m = float(pi[0])
    c = pi[1:4] / m if m > 0 else np.full(3, np.nan)
    i_o = tensor(pi[4:])
    i_c = i_o - m * (c @ c * np.eye(3) - np.outer(c, c)) if m > 0 else i_o
    return m, c, i_c


def pseudo_inertia(pi: np.ndarray) -> np.ndarray:
    """J (4, 4) = [[Sigma, h], [h^T, m]], Sigma = 1/2 tr(I) E - I (Wensing et al. 2018)."""
    i_o = tensor(pi[4:])
    J = np.empty((4, 4))
    J[:3, :3] = 0.5 * np.trace(i_o) * np.eye(3) - i_o
    J[:3, 3] = J[3, :3] = pi[1:4]
    J[3, 3] = pi[0]
    return J


def from_pseudo_inertia(J: np.ndarray) -> np.ndarray:
    """pi (10,) of a pseudo-inertia (I = tr(Sigma) E - Sigma)."""
    sigma = 0.5 * (J[:3, :3] + J[:3, :3].T)
    return np.concatenate([[J[3, 3]], J[:3, 3], six_of(np.trace(sigma) * np.eye(3) - sigma)])


def from_log_cholesky(theta: np.ndarray) -> np.ndarray:
    """pi (10,) of log-Cholesky parameters theta (10,) (Pinocchio)."""
    return pin.LogCholeskyParameters(np.asarray(theta, float)).toDynamicParameters()


def log_cholesky_jacobian(theta: np.ndarray) -> np.ndarray:
    """d pi / d theta (10, 10) (Pinocchio)."""
    return pin.LogCholeskyParameters(np.asarray(theta, float)).calculateJacobian()


def project_consistent(pi: np.ndarray, floor: float) -> np.ndarray:
    """The nearest pi (Frobenius norm of the pseudo-inertia) whose pseudo-inertia has every
    eigenvalue at least ``floor`` (kg·m², > 0): unchanged when it already has."""
    J = pseudo_inertia(pi)
    w, V = np.linalg.eigh(J)
    if w[0] >= floor:
        return np.array(pi, float)
    return from_pseudo_inertia((V * np.maximum(w, floor)) @ V.T)


def to_log_cholesky(pi: np.ndarray, floor: float) -> np.ndarray:
    """theta (10,) with ``from_log_cholesky(theta) == pi`` for a pi whose pseudo-inertia is
    positive definite; others are first projected (:func:`project_consistent` with ``floor``).

    J = U U^T with U upper triangular: with P the exchange matrix, P J P = L L^T (Cholesky,
    L lower), so U = P L P."""
    J = pseudo_inertia(project_consistent(pi, floor))
    P = np.eye(4)[::-1]
    U = P @ np.linalg.cholesky(P @ J @ P) @ P
    ea = U[3, 3]
    alpha = math.log(ea)
    d = [math.log(U[i, i] / ea) for i in range(3)]
    return np.array([alpha, *d, U[0, 1] / ea, U[1, 2] / ea, U[0, 2] / ea,
                     U[0, 3] / ea, U[1, 3] / ea, U[2, 3] / ea])


def transform_matrix(rotation: np.ndarray, translation: np.ndarray) -> np.ndarray:
    """T (10, 10): pi of a body in frame A from its pi in frame B, B placed in A by
    (rotation (3, 3), translation (3,) m). Linear in pi:
    m' = m; h' = R h + m p; I'_o = R I_o R^T - S(p) S(R h) - S(R h) S(p) - m S(p) S(p)."""
    R, p = np.asarray(rotation, float), np.asarray(translation, float)
    Sp = skew(p)
    T = np.zeros((10, 10))
    for k in range(10):
        e = np.zeros(10)
        e[k] = 1.0
        m, h, i_o = e[0], e[1:4], tensor(e[4:])
        rh = R @ h
        i_new = R @ i_o @ R.T - Sp @ skew(rh) - skew(rh) @ Sp - m * Sp @ Sp
        T[:, k] = np.concatenate([[m], rh + m * p, six_of(i_new)])
    return T


def consistency_violation(pi: np.ndarray, tolerance: float | None = None) -> str:
    """'' when the body is physically consistent (Traversaro et al. 2016): mass > 0, the
    inertia about the centre of mass positive semi-definite with principal moments satisfying
    the triangle inequalities (each within ``tolerance`` kg·m²; default 1e-12 of the trace of
    the inertia about the origin: round-off of a body on the boundary, a flat plate or a
    rod); else what is violated."""
    m, _c, i_c = summary(pi)
    if tolerance is None:
        tolerance = 1e-12 * abs(float(np.trace(tensor(pi[4:])))) + 1e-300
    if not m > 0:
        return f"mass {m:.6g} kg is not positive"
    a, b, c = np.sort(np.linalg.eigvalsh(0.5 * (i_c + i_c.T)))
    if a < -tolerance:
        return f"principal moment {a:.6g} kg·m² is negative"
    if c > a + b + tolerance:
        return f"principal moments {a:.6g}, {b:.6g}, {c:.6g} kg·m² violate the triangle inequality"
    return ""
