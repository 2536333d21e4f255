"""The mechanisms' geometry from the contact path (environment.model revolute, prismatic).

References: scipy.optimize.least_squares minimising the same orthogonal distances of 3-D points
from a circle (centre, unit normal, radius; residuals n.(p - c) and |(I - n n^T)(p - c)| - r),
started from the true circle; numpy.linalg.svd for the principal line of the points (total
least squares, Golub and Van Loan, Matrix Computations, 4th ed. 2013, sec. 6.3). The paths are
invented arcs and lines with Gaussian noise.
"""
import math

import numpy as np
import pytest
from scipy.optimize import least_squares

from interaction_estimator.core import mechanism as mech


def arc(rng, radius, sweep_deg, noise, n=120, centre=None, normal=None, start=0.0):
    """Points (n, 3) on a circle of ``radius`` m about a random axis, over ``sweep_deg``,
    with isotropic Gaussian noise ``noise`` m; and (centre, normal)."""
    normal = rng.normal(0, 1, 3) if normal is None else np.asarray(normal, float)
    normal /= np.linalg.norm(normal)
    centre = rng.normal(0, 0.5, 3) if centre is None else np.asarray(centre, float)
    e1 = np.cross(normal, rng.normal(0, 1, 3))
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(normal, e1)
    phi = start + np.radians(sweep_deg) * np.linspace(0.0, 1.0, n)
    pts = centre + radius * (np.cos(phi)[:, None] * e1 + np.sin(phi)[:, None] * e2)
    return pts + rng.normal(0.0, noise, pts.shape), centre, normal


def scipy_circle(points, centre, normal, radius):
    """The orthogonal-distance circle by scipy.optimize.least_squares (normal by two angles)."""
    def unit(theta, phi):
        return np.array([math.sin(theta) * math.cos(phi), math.sin(theta) * math.sin(phi),
                         math.cos(theta)])

    def residuals(p):
        c, n, r = p[:3], unit(p[3], p[4]), p[5]
        w = points - c
        h = w @ n
        rho = np.sqrt(np.maximum(np.sum(w * w, axis=1) - h * h, 0.0))
        return np.concatenate([h, rho - r])

    theta0 = math.acos(max(-1.0, min(1.0, normal[2])))
    phi0 = math.atan2(normal[1], normal[0])
    sol = least_squares(residuals, np.concatenate([centre, [theta0, phi0, radius]]),
                        xtol=1e-15, ftol=1e-15, gtol=1e-15, method="lm")
    return sol.x[:3], unit(sol.x[3], sol.x[4]), sol.x[5], float(np.sum(sol.fun**2))


def angle_deg(a, b):
    c = abs(float(np.dot(a, b))) / (np.linalg.norm(a) * np.linalg.norm(b))
    return math.degrees(math.acos(min(1.0, c)))


@pytest.mark.parametrize("seed, radius, sweep, noise", [
    (1, 0.45, 30.0, 5e-4), (2, 0.9, 60.0, 1e-3), (3, 0.12, 120.0, 3e-4),
    (4, 1.6, 25.0, 5e-4), (5, 0.3, 200.0, 2e-3)])
def test_circle_fit_equals_scipy_least_squares_on_noisy_arcs(seed, radius, sweep, noise):
    # The estimator's fit (algebraic start, Gauss-Newton on the orthogonal distances) reaches
    # the minimum scipy.optimize.least_squares reaches from the true circle: same cost, centre,
    # normal and radius to rounding.
    rng = np.random.default_rng(seed)
    pts, centre, normal = arc(rng, radius, sweep, noise)
    fit = mech.fit_circle(pts)
    assert fit is not None
    c, n, r, cost = scipy_circle(pts, centre, normal, radius)
    assert fit["rms"] ** 2 * len(pts) == pytest.approx(cost, rel=1e-7)
    assert fit["radius"] == pytest.approx(r, rel=1e-6)
    assert angle_deg(fit["normal"], n) < 1e-4
    # the centre is on the axis: its distance from scipy's along the axis is not free
    np.testing.assert_allclose(fit["centre"], c, atol=1e-6 * max(1.0, radius))
    # and the noise-level bounds of the truth: within a few standard deviations
    assert abs(fit["radius"] - radius) <= 5 * fit["radius_std"] + 1e-9
    assert math.radians(angle_deg(fit["normal"], normal)) <= 5 * fit["axis_std"] + 1e-9


def test_line_fit_equals_svd():
    rng = np.random.default_rng(7)
    axis = rng.normal(0, 1, 3)
    axis /= np.linalg.norm(axis)
    pts = (np.array([0.3, -0.2, 0.8]) + np.linspace(0, 0.2, 80)[:, None] * axis
           + rng.normal(0, 5e-4, (80, 3)))
    fit = mech.fit_line(pts)
    centred = pts - pts.mean(axis=0)
    _, sv, vt = np.linalg.svd(centred, full_matrices=False)
    assert angle_deg(fit["axis"], vt[0]) < 1e-7
    assert fit["rms"] == pytest.approx(math.sqrt((sv[1] ** 2 + sv[2] ** 2) / len(pts)),
                                       rel=1e-9)
    np.testing.assert_allclose(fit["point"], pts.mean(axis=0), atol=1e-12)


def follow(kind, points, **params):
    """The compiled path handling of the estimator, point by point: (records, path)."""
    p = mech.PARAMS.one()[0]
    p["kind"] = kind
    p["min_travel_m"] = params.get("min_travel", 0.02)
    p["min_arc_rad"] = math.radians(params.get("min_arc", 20.0))
    p["converged_travel_m"] = params.get("converged_travel", 0.05)
    p["tolerance_m"] = params.get("tolerance", 0.005)
    p["max_radius_m"] = params.get("max_radius", 5.0)
    s = mech.STATE.one()[0]
    path = mech.PATH.many(mech.path_capacity(kind))
    mech.mechanism_start(p, s, path, np.asarray(points[0], float))
    codes = []
    for q in points[1:]:
        mech.mechanism_add(p, s, path, np.asarray(q, float))
        codes.append(int(s["code"]))
    return p, s, codes


def test_hinge_geometry_its_sense_and_convergence_by_swept_arc():
    # A door opened from its closed position through 35 degrees: the axis is oriented so that
    # opening is a positive turn, the radius and axis found, "converged" only once the swept
    # arc reached mechanism.min_arc (20 degrees), and x, u follow the arc.
    rng = np.random.default_rng(9)
    normal = np.array([0.05, -0.03, 1.0])
    normal /= np.linalg.norm(normal)
    pts, centre, _ = arc(rng, 0.5, 35.0, 2e-4, n=700, centre=[0.9, -0.8, 0.95], normal=normal)
    p, s, codes = follow(mech.KIND_REVOLUTE, pts)
    assert codes[-1] == mech.GEOMETRY_CONVERGED
    assert angle_deg(s["axis"], normal) < 0.5
    assert s["radius_m"] == pytest.approx(0.5, rel=0.01)
    # opening (the first motion) is a positive turn about the reported axis
    t = np.cross(s["axis"], pts[0] - s["axis_point"])
    assert t @ (pts[10] - pts[0]) > 0
    # converged exactly from the first point at which the swept arc reached 20 degrees
    sweep = np.degrees(np.arccos(np.clip((pts - centre) @ (pts[0] - centre) / 0.25, -1, 1)))
    first = codes.index(mech.GEOMETRY_CONVERGED)
    assert 19.0 <= sweep[first + 1] <= 21.5
    u0, u1, u2, x = mech.mechanism_along(p, s, pts[-1], False)
    assert x == pytest.approx(0.5 * math.radians(35.0), rel=0.01)
    tangent = np.cross(normal, pts[-1] - centre)
    assert angle_deg([u0, u1, u2], tangent) < 1.0 and np.dot([u0, u1, u2], tangent) > 0


def test_short_straight_curved_and_noisy_paths_are_reported_not_forced():
    rng = np.random.default_rng(4)
    line = np.array([0.5, 0.1, 0.8]) + np.linspace(0, 0.3, 300)[:, None] * np.array(
        [-0.8, 0.6, 0.0]) + rng.normal(0, 2e-4, (300, 3))
    # a slider's path: straight for a hinge, fitted for a slider
    _, s, codes = follow(mech.KIND_REVOLUTE, line)
    assert codes[0] == mech.GEOMETRY_SHORT and codes[-1] == mech.GEOMETRY_STRAIGHT
    _, s, codes = follow(mech.KIND_PRISMATIC, line)
    assert codes[-1] == mech.GEOMETRY_CONVERGED
    assert angle_deg(s["axis"], [-0.8, 0.6, 0.0]) < 0.1 and s["axis"] @ [-0.8, 0.6, 0] > 0
    # a hinge's path: curved for a slider (line RMS above the tolerance)
    pts, _, _ = arc(rng, 0.4, 60.0, 2e-4, n=500)
    _, s, codes = follow(mech.KIND_PRISMATIC, pts)
    assert codes[-1] == mech.GEOMETRY_CURVED
    # a path that fits neither within the tolerance: a wandering, noisy path
    walk = np.cumsum(rng.normal(0, 0.01, (400, 3)), axis=0)
    for kind in (mech.KIND_REVOLUTE, mech.KIND_PRISMATIC):
        _, s, codes = follow(kind, walk)
        assert codes[-1] == mech.GEOMETRY_NO_FIT
    # too short: 1.5 cm of a 2 cm minimum
    _, s, codes = follow(mech.KIND_REVOLUTE, line[:15])
    assert set(codes) == {mech.GEOMETRY_SHORT}


def test_a_long_path_stays_bounded_and_fitted():
    # A crank turned through 3 full turns: the kept path never exceeds its capacity (points
    # thinned, spacing doubled), and the circle is still found.
    rng = np.random.default_rng(6)
    pts, centre, normal = arc(rng, 0.15, 3 * 360.0, 1e-4, n=6000)
    _, s, codes = follow(mech.KIND_REVOLUTE, pts, min_arc=90.0)
    assert s["count"] <= mech.CAPACITY and s["spacing_m"] > mech.SPACING
    assert codes[-1] == mech.GEOMETRY_CONVERGED
    assert s["radius_m"] == pytest.approx(0.15, rel=1e-3)
    assert angle_deg(s["normal"], normal) < 0.1
