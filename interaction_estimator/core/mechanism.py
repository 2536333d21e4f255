"""Mechanisms from the contact point's path: a hinge (revolute) or a slider (prismatic).

The articulation models of Sturm, Stachniss and Burgard ("A probabilistic framework for learning
kinematic models of articulated objects", J. Artificial Intelligence Research 41, 2011): the
grasp point of a hinged object moves on a circle about the hinge axis, that of a slider on a
line. Both are fitted by least squares to the contact point's path since the contact began:

- line: through the path's mean along the principal direction of its scatter (total least
  squares; Golub and Van Loan, Matrix Computations, 4th ed. 2013, sec. 6.3); its residual is the
  RMS distance of the points from the line.
- circle in 3-D: started from the plane of the two larger principal directions and the algebraic
  circle fit in that plane (Kasa, IEEE Trans. Instrum. Meas. 25, 1976), then refined by
  Gauss-Newton on the orthogonal distance of each point from the circle (centre c, unit normal n,
  radius r; residuals n.(p - c) and |(I - n n^T)(p - c)| - r; Nocedal and Wright, Numerical
  Optimization, 2nd ed. 2006, sec. 10.3). The covariance of the fit, s^2 (J^T J)^-1 with s^2 the
  residual variance, gives the radius's and the axis's standard deviations.

The path is kept as a bounded list of points (:data:`CAPACITY`) at least ``spacing`` m apart
(the first at the contact onset); when the list is full, every other point is dropped and the
spacing doubled. Points are taken by distance, not by time, so a pause does not weigh the fit.
The fit is made again whenever a point is added.

The geometry's verdict (:data:`GEOMETRY_WORDS`): too short a path (below
``mechanism.min_travel``) is not fitted; a path that fits neither a line nor a circle within
``mechanism.path_tolerance`` (RMS) is reported and not forced into either; for a hinge, a path
whose curvature the data do not yet determine (radius standard deviation above 10 % of the
radius, or a radius above ``mechanism.max_radius``) is "straight"; for a slider, a path that a
circle fits and a line does not is "curved". Otherwise the geometry is used, and it has
converged once the path has swept ``mechanism.min_arc`` degrees about the hinge axis (a hinge)
or reached ``mechanism.converged_travel`` m from the onset (a slider).

Signs: the axis is oriented so that the first motion away from the onset (the first point
farther than ``mechanism.min_travel``) is positive: a positive rotation about the hinge axis
(right hand), or a positive displacement along the slider's axis. u is the tangent of the circle
(hinge) or the axis (slider) in that sense; x is the arc length r (theta - theta_onset) or the
displacement along the axis, from the contact onset.
"""
from __future__ import annotations

import math

import numpy as np

from .compiled import kernel
from .records import B1, F8, I1, I8, record
from .wrench import symmetric_eigen

KIND_NONE, KIND_REVOLUTE, KIND_PRISMATIC = 0, 1, 2
GEOMETRY_NONE, GEOMETRY_SHORT, GEOMETRY_NO_FIT, GEOMETRY_STRAIGHT, GEOMETRY_CURVED, \
    GEOMETRY_FITTED, GEOMETRY_CONVERGED = range(7)
GEOMETRY_WORDS = ("no_path", "path_short", "path_fits_nothing", "path_straight",
                  "path_curved", "fitted", "converged")
CAPACITY = 256          # points kept of the path
SPACING = 0.002         # m, least distance between kept points at the start
DETERMINED = 0.10       # a hinge's curvature is determined when std(r) <= 10 % of r
GAUSS_NEWTON_STEPS = 30

PARAMS = record(
    "mechanism parameters",
    ("kind", I1, "", "KIND_NONE, KIND_REVOLUTE or KIND_PRISMATIC"),
    ("min_travel_m", F8, "m", "path below which no geometry is fitted (mechanism.min_travel)"),
    ("min_arc_rad", F8, "rad", "swept arc for a converged hinge (mechanism.min_arc)"),
    ("converged_travel_m", F8, "m", "travel for a converged slider"),
    ("tolerance_m", F8, "m", "RMS distance from the fitted curve above which it does not fit"),
    ("max_radius_m", F8, "m", "largest grasp radius taken for a hinge"),
)
STATE = record(
    "mechanism state",
    ("count", I8, "", "points kept of the path"),
    ("spacing_m", F8, "m", "least distance between kept points now"),
    ("onset", F8, (3,), "m", "contact point at the contact onset, world frame"),
    ("last", F8, (3,), "m", "last point kept"),
    ("has_sense", B1, "", "the path has left the onset by mechanism.min_travel"),
    ("sense", F8, (3,), "", "unit vector from the onset to the first point that far"),
    ("code", I1, "", "GEOMETRY_*"),
    ("travel_m", F8, "m", "farthest distance of the path from the onset"),
    ("line_axis", F8, (3,), "", "principal direction of the path (unit)"),
    ("line_point", F8, (3,), "m", "mean of the path"),
    ("line_rms_m", F8, "m", "RMS distance of the path from that line"),
    ("extent_m", F8, "m", "extent of the path along the line"),
    ("has_circle", B1, "", "a circle was fitted"),
    ("centre", F8, (3,), "m", "the circle's centre (a point on the hinge axis)"),
    ("normal", F8, (3,), "", "the circle's unit normal (the hinge axis, unsigned)"),
    ("radius_m", F8, "m", "the circle's radius"),
    ("circle_rms_m", F8, "m", "RMS distance of the path from the circle"),
    ("radius_std_m", F8, "m", "standard deviation of the radius"),
    ("axis_std_rad", F8, "rad", "standard deviation of the axis direction"),
    ("swept_rad", F8, "rad", "arc the path swept about the fitted axis"),
    ("axis", F8, (3,), "", "the reported axis (unit, signed: the opening sense positive)"),
    ("axis_point", F8, (3,), "m", "a point on the hinge axis (the circle's centre)"),
    ("basis1", F8, (3,), "", "unit vector from the axis to the onset, across the axis"),
    ("basis2", F8, (3,), "", "axis x basis1"),
    ("angle_now_rad", F8, "rad", "angle of the contact point now, from the onset"),
    ("angle_centre_rad", F8, "rad", "angle at the kinematics window centre, from the onset"),
)
PATH = record(
    "mechanism path point",
    ("point", F8, (3,), "m", "contact point, world frame"),
)


@kernel
def _norm(a0, a1, a2):
    return math.sqrt(a0 * a0 + a1 * a1 + a2 * a2)


@kernel
def mechanism_reset(s):
    """No path (no contact since the last reset)."""
    s.count = 0
    s.code = GEOMETRY_NONE
    s.has_sense = False
    s.has_circle = False
    s.travel_m = 0.0
    s.swept_rad = 0.0
    s.extent_m = 0.0
    s.line_rms_m = 0.0
    s.circle_rms_m = 0.0
    s.radius_m = 0.0
    s.radius_std_m = 0.0
    s.axis_std_rad = 0.0
    s.angle_now_rad = 0.0
    s.angle_centre_rad = 0.0
    for r in range(3):
        s.axis[r] = 0.0
        s.axis_point[r] = 0.0


@kernel
def mechanism_start(p, s, path, onset):
    """A new contact: the path starts at ``onset`` (3,) m."""
    mechanism_reset(s)
    if p.kind == KIND_NONE:
        return
    s.spacing_m = SPACING
    for r in range(3):
        s.onset[r] = onset[r]
        s.last[r] = onset[r]
        path[0].point[r] = onset[r]
    s.count = 1
    s.code = GEOMETRY_SHORT


@kernel
def mechanism_add(p, s, path, point):
    """The contact point (3,) m now: kept when it is ``spacing`` from the last point kept, and
    then the geometry is fitted again. Returns True when it was."""
    if p.kind == KIND_NONE or s.count == 0:
        return False
    d0, d1, d2 = point[0] - s.last[0], point[1] - s.last[1], point[2] - s.last[2]
    if _norm(d0, d1, d2) < s.spacing_m:
        return False
    capacity = path.shape[0]
    if s.count == capacity:   # keep every other point (the onset stays), twice the spacing
        kept = 0
        for k in range(0, capacity, 2):
            for r in range(3):
                path[kept].point[r] = path[k].point[r]
            kept += 1
        s.count = kept
        s.spacing_m *= 2.0
    for r in range(3):
        path[s.count].point[r] = point[r]
        s.last[r] = point[r]
    s.count += 1
    o0, o1, o2 = point[0] - s.onset[0], point[1] - s.onset[1], point[2] - s.onset[2]
    distance = _norm(o0, o1, o2)
    if distance > s.travel_m:
        s.travel_m = distance
    if not s.has_sense and distance >= p.min_travel_m:
        s.has_sense = True
        s.sense[0], s.sense[1], s.sense[2] = o0 / distance, o1 / distance, o2 / distance
    mechanism_fit(p, s, path)
    return True


@kernel
def _line_fit(s, path, n):
    """Principal line of the n points (total least squares); returns the eigenvalues (3,)
    ascending and eigenvectors (3, 3) of their covariance."""
    mean = np.zeros(3)
    for k in range(n):
        for r in range(3):
            mean[r] += path[k].point[r]
    for r in range(3):
        mean[r] /= n
    C = np.zeros((3, 3))
    for k in range(n):
        d0 = path[k].point[0] - mean[0]
        d1 = path[k].point[1] - mean[1]
        d2 = path[k].point[2] - mean[2]
        C[0, 0] += d0 * d0
        C[0, 1] += d0 * d1
        C[0, 2] += d0 * d2
        C[1, 1] += d1 * d1
        C[1, 2] += d1 * d2
        C[2, 2] += d2 * d2
    C[1, 0], C[2, 0], C[2, 1] = C[0, 1], C[0, 2], C[1, 2]
    for r in range(3):
        for c in range(3):
            C[r, c] /= n
    w = np.empty(3)
    V = np.empty((3, 3))
    symmetric_eigen(C, w, V)
    for r in range(3):
        s.line_point[r] = mean[r]
        s.line_axis[r] = V[r, 2]
    s.line_rms_m = math.sqrt(max(w[0] + w[1], 0.0))
    lo = math.inf
    hi = -math.inf
    for k in range(n):
        x = 0.0
        for r in range(3):
            x += (path[k].point[r] - mean[r]) * V[r, 2]
        lo = min(lo, x)
        hi = max(hi, x)
    s.extent_m = hi - lo
    return w, V


@kernel
def _circle_cost(path, n, c, normal, radius):
    total = 0.0
    for k in range(n):
        w0 = path[k].point[0] - c[0]
        w1 = path[k].point[1] - c[1]
        w2 = path[k].point[2] - c[2]
        h = normal[0] * w0 + normal[1] * w1 + normal[2] * w2
        rho = math.sqrt(max(w0 * w0 + w1 * w1 + w2 * w2 - h * h, 0.0))
        total += h * h + (rho - radius) * (rho - radius)
    return total


@kernel
def _perpendicular(normal):
    """Two unit vectors across ``normal`` (unit), with normal, t1, t2 right-handed."""
    a = 0 if abs(normal[0]) <= abs(normal[1]) and abs(normal[0]) <= abs(normal[2]) else (
        1 if abs(normal[1]) <= abs(normal[2]) else 2)
    e = np.zeros(3)
    e[a] = 1.0
    t1 = np.empty(3)
    t1[0] = e[1] * normal[2] - e[2] * normal[1]
    t1[1] = e[2] * normal[0] - e[0] * normal[2]
    t1[2] = e[0] * normal[1] - e[1] * normal[0]
    size = _norm(t1[0], t1[1], t1[2])
    for r in range(3):
        t1[r] /= size
    t2 = np.empty(3)
    t2[0] = normal[1] * t1[2] - normal[2] * t1[1]
    t2[1] = normal[2] * t1[0] - normal[0] * t1[2]
    t2[2] = normal[0] * t1[1] - normal[1] * t1[0]
    return t1, t2


@kernel
def circle_fit(path, n, w, V, out):
    """The circle of the n points ``path[:n].point`` (3-D) by orthogonal-distance least squares,
    started from the algebraic fit in the plane of the principal directions (w, V: eigenvalues
    ascending and eigenvectors of the points' covariance). ``out`` (8 + 3,): centre (3) m,
    normal (3), radius m, RMS distance m, radius std m, axis std rad, cost. Returns False when
    no circle is determined (collinear points, fewer than 4 points)."""
    if n < 4:
        return False
    mean = np.zeros(3)
    for k in range(n):
        for r in range(3):
            mean[r] += path[k].point[r]
    for r in range(3):
        mean[r] /= n
    # algebraic fit in the plane of the two larger principal directions: |q|^2 = 2 a.q + k
    A = np.zeros((3, 3))
    b = np.zeros(3)
    for k in range(n):
        q0 = 0.0
        q1 = 0.0
        for r in range(3):
            d = path[k].point[r] - mean[r]
            q0 += d * V[r, 2]
            q1 += d * V[r, 1]
        row = (2.0 * q0, 2.0 * q1, 1.0)
        rhs = q0 * q0 + q1 * q1
        for i in range(3):
            b[i] += row[i] * rhs
            for j in range(3):
                A[i, j] += row[i] * row[j]
    scale = A[0, 0] + A[1, 1] + A[2, 2]
    if not scale > 0.0:
        return False
    try:
        sol = np.linalg.solve(A, b)
    except Exception:   # numpy.linalg.LinAlgError: collinear points
        return False
    r2 = sol[2] + sol[0] * sol[0] + sol[1] * sol[1]
    if not (r2 > 0.0 and math.isfinite(r2)):
        return False
    radius = math.sqrt(r2)
    c = np.empty(3)
    normal = np.empty(3)
    for r in range(3):
        c[r] = mean[r] + sol[0] * V[r, 2] + sol[1] * V[r, 1]
        normal[r] = V[r, 0]
    # Gauss-Newton on the orthogonal distances (6 parameters: c, r, two turns of n)
    cost = _circle_cost(path, n, c, normal, radius)
    JtJ = np.zeros((6, 6))
    for _ in range(GAUSS_NEWTON_STEPS):
        t1, t2 = _perpendicular(normal)
        JtJ[:, :] = 0.0
        Jte = np.zeros(6)
        row = np.empty(6)
        for k in range(n):
            w0 = path[k].point[0] - c[0]
            w1 = path[k].point[1] - c[1]
            w2 = path[k].point[2] - c[2]
            h = normal[0] * w0 + normal[1] * w1 + normal[2] * w2
            s0, s1, s2 = w0 - h * normal[0], w1 - h * normal[1], w2 - h * normal[2]
            rho = _norm(s0, s1, s2)
            if rho < 1e-12:
                continue
            a1 = t1[0] * w0 + t1[1] * w1 + t1[2] * w2
            a2 = t2[0] * w0 + t2[1] * w1 + t2[2] * w2
            # residual h (out of the plane)
            row[0], row[1], row[2] = -normal[0], -normal[1], -normal[2]
            row[3], row[4], row[5] = 0.0, a1, a2
            for i in range(6):
                Jte[i] += row[i] * h
                for j in range(6):
                    JtJ[i, j] += row[i] * row[j]
            # residual rho - r (in the plane)
            e = rho - radius
            row[0], row[1], row[2] = -s0 / rho, -s1 / rho, -s2 / rho
            row[3], row[4], row[5] = -1.0, -h * a1 / rho, -h * a2 / rho
            for i in range(6):
                Jte[i] += row[i] * e
                for j in range(6):
                    JtJ[i, j] += row[i] * row[j]
        try:
            step = np.linalg.solve(JtJ, -Jte)
        except Exception:   # numpy.linalg.LinAlgError
            return False
        accepted = False
        for _half in range(20):   # step halving until the cost does not rise
            c_new = np.empty(3)
            n_new = np.empty(3)
            for r in range(3):
                c_new[r] = c[r] + step[r]
                n_new[r] = normal[r] + step[4] * t1[r] + step[5] * t2[r]
            size = _norm(n_new[0], n_new[1], n_new[2])
            for r in range(3):
                n_new[r] /= size
            r_new = radius + step[3]
            new_cost = _circle_cost(path, n, c_new, n_new, r_new)
            if new_cost <= cost:
                accepted = True
                break
            for i in range(6):
                step[i] *= 0.5
        if not accepted:
            break
        moved = abs(step[3]) + _norm(step[0], step[1], step[2]) + abs(step[4]) + abs(step[5])
        c, normal, radius = c_new, n_new, r_new
        cost = new_cost
        if moved <= 1e-13 * (1.0 + radius):
            break
    if not (radius > 0.0 and math.isfinite(radius)):
        return False
    dof = 2 * n - 6
    variance = cost / dof if dof > 0 else math.inf
    try:
        cov = np.linalg.inv(JtJ)
        radius_std = math.sqrt(max(variance * cov[3, 3], 0.0))
        axis_std = math.sqrt(max(variance * (cov[4, 4] + cov[5, 5]), 0.0))
    except Exception:   # numpy.linalg.LinAlgError
        radius_std = math.inf
        axis_std = math.inf
    for r in range(3):
        out[r] = c[r]
        out[3 + r] = normal[r]
    out[6] = radius
    out[7] = math.sqrt(cost / n)
    out[8] = radius_std
    out[9] = axis_std
    out[10] = cost
    return True


@kernel
def _angle(s, p0, p1, p2):
    """Angle of the point about the axis from the onset, in (-pi, pi]."""
    w0, w1, w2 = p0 - s.axis_point[0], p1 - s.axis_point[1], p2 - s.axis_point[2]
    x = w0 * s.basis1[0] + w1 * s.basis1[1] + w2 * s.basis1[2]
    y = w0 * s.basis2[0] + w1 * s.basis2[1] + w2 * s.basis2[2]
    return math.atan2(y, x)


@kernel
def _unwrap(angle, previous):
    """angle + 2 pi k nearest to previous."""
    return angle + 2.0 * math.pi * round((previous - angle) / (2.0 * math.pi))


@kernel
def mechanism_fit(p, s, path):
    """The line (and for a hinge, or to word a slider's curved path, the circle) of the kept
    path, and the verdict (module docstring)."""
    n = s.count
    w, V = _line_fit(s, path, n)
    fit = np.zeros(11)
    s.has_circle = circle_fit(path, n, w, V, fit)
    if s.has_circle:
        for r in range(3):
            s.centre[r] = fit[r]
            s.normal[r] = fit[3 + r]
        s.radius_m = fit[6]
        s.circle_rms_m = fit[7]
        s.radius_std_m = fit[8]
        s.axis_std_rad = fit[9]
    tol = p.tolerance_m
    line_fits = s.line_rms_m <= tol
    circle_fits = (s.has_circle and s.circle_rms_m <= tol and s.radius_m <= p.max_radius_m
                   and s.radius_std_m <= DETERMINED * s.radius_m)
    if s.travel_m < p.min_travel_m or not s.has_sense:
        s.code = GEOMETRY_SHORT
        return
    if p.kind == KIND_PRISMATIC:
        if line_fits:
            ax = s.line_axis
            sign = 1.0 if (ax[0] * s.sense[0] + ax[1] * s.sense[1] + ax[2] * s.sense[2]
                           >= 0.0) else -1.0
            for r in range(3):
                s.axis[r] = sign * ax[r]
                s.axis_point[r] = s.line_point[r]
            s.code = GEOMETRY_CONVERGED if s.travel_m >= p.converged_travel_m \
                else GEOMETRY_FITTED
        else:
            s.code = GEOMETRY_CURVED if circle_fits else GEOMETRY_NO_FIT
        return
    if not circle_fits:
        s.code = GEOMETRY_STRAIGHT if line_fits else GEOMETRY_NO_FIT
        return
    # the axis oriented so that the first motion away from the onset is a positive turn
    o0 = s.onset[0] - s.centre[0]
    o1 = s.onset[1] - s.centre[1]
    o2 = s.onset[2] - s.centre[2]
    nn = s.normal
    t0 = nn[1] * o2 - nn[2] * o1
    t1 = nn[2] * o0 - nn[0] * o2
    t2 = nn[0] * o1 - nn[1] * o0
    sign = 1.0 if t0 * s.sense[0] + t1 * s.sense[1] + t2 * s.sense[2] >= 0.0 else -1.0
    for r in range(3):
        s.axis[r] = sign * nn[r]
        s.axis_point[r] = s.centre[r]
    h = s.axis[0] * o0 + s.axis[1] * o1 + s.axis[2] * o2
    e0, e1, e2 = o0 - h * s.axis[0], o1 - h * s.axis[1], o2 - h * s.axis[2]
    size = _norm(e0, e1, e2)
    s.basis1[0], s.basis1[1], s.basis1[2] = e0 / size, e1 / size, e2 / size
    a, b1 = s.axis, s.basis1
    s.basis2[0] = a[1] * b1[2] - a[2] * b1[1]
    s.basis2[1] = a[2] * b1[0] - a[0] * b1[2]
    s.basis2[2] = a[0] * b1[1] - a[1] * b1[0]
    # the swept arc: the kept points' angles, unwrapped along the path
    previous = 0.0
    lo = 0.0
    hi = 0.0
    for k in range(n):
        q = path[k].point
        angle = _unwrap(_angle(s, q[0], q[1], q[2]), previous)
        previous = angle
        lo = min(lo, angle)
        hi = max(hi, angle)
    s.swept_rad = hi - lo
    s.code = GEOMETRY_CONVERGED if s.swept_rad >= p.min_arc_rad else GEOMETRY_FITTED


@kernel
def mechanism_usable(s):
    return s.code == GEOMETRY_FITTED or s.code == GEOMETRY_CONVERGED


@kernel
def mechanism_along(p, s, point, centre):
    """(u0, u1, u2, x m) at the contact point (3,) m: the tangent of the hinge's circle in the
    opening sense and the arc length from the onset, or the slider's axis and the
    displacement along it. ``centre``: the point is the kinematics window's centre (else the
    point now): each keeps its own angle for unwrapping."""
    if p.kind == KIND_PRISMATIC:
        a = s.axis
        x = (a[0] * (point[0] - s.onset[0]) + a[1] * (point[1] - s.onset[1])
             + a[2] * (point[2] - s.onset[2]))
        return a[0], a[1], a[2], x
    previous = s.angle_centre_rad if centre else s.angle_now_rad
    angle = _unwrap(_angle(s, point[0], point[1], point[2]), previous)
    if centre:
        s.angle_centre_rad = angle
    else:
        s.angle_now_rad = angle
    a = s.axis
    w0 = point[0] - s.axis_point[0]
    w1 = point[1] - s.axis_point[1]
    w2 = point[2] - s.axis_point[2]
    u0 = a[1] * w2 - a[2] * w1
    u1 = a[2] * w0 - a[0] * w2
    u2 = a[0] * w1 - a[1] * w0
    size = _norm(u0, u1, u2)
    if size > 0.0:
        u0, u1, u2 = u0 / size, u1 / size, u2 / size
    return u0, u1, u2, s.radius_m * angle


def fit_circle(points: np.ndarray) -> dict[str, object] | None:
    """The circle of points (n, 3) m, as the estimator fits it (for tests and tools): centre
    (3,) m, normal (3,) unit (unsigned), radius m, rms m (RMS orthogonal distance), radius_std
    m, axis_std rad; None when no circle is determined."""
    pts = np.ascontiguousarray(points, dtype=float)
    path = PATH.many(len(pts))
    path["point"] = pts
    s = STATE.one()
    w, V = _line_fit(s[0], path, len(pts))
    out = np.zeros(11)
    if not circle_fit(path, len(pts), w, V, out):
        return None
    return {"centre": out[:3].copy(), "normal": out[3:6].copy(), "radius": float(out[6]),
            "rms": float(out[7]), "radius_std": float(out[8]), "axis_std": float(out[9])}


def fit_line(points: np.ndarray) -> dict[str, object]:
    """The principal line of points (n, 3) m, as the estimator fits it: point (3,) m (the
    mean), axis (3,) unit (unsigned), rms m (RMS distance from the line), extent m."""
    pts = np.ascontiguousarray(points, dtype=float)
    path = PATH.many(len(pts))
    path["point"] = pts
    s = STATE.one()
    _line_fit(s[0], path, len(pts))
    return {"point": s[0]["line_point"].copy(), "axis": s[0]["line_axis"].copy(),
            "rms": float(s[0]["line_rms_m"]), "extent": float(s[0]["extent_m"])}


def path_capacity(kind: int) -> int:
    """Points kept of the path for a mechanism of ``kind`` (2: a placeholder otherwise)."""
    return CAPACITY if kind != KIND_NONE else 2
