"""A moving base from odometry and an IMU: the base's pose and twist at each joint state's stamp.

With ``base.source: odometry`` the URDF's root link is the base, joined to the world by a
free-flyer joint (:class:`~.model.RobotModel` with ``floating_base``). Its state comes from two
inputs, each at its own rate:

* ``odometry`` (nav_msgs/Odometry, typically 50-100 Hz): the position of the child frame
  (``child_frame_id``: the root link or a link fixed to it) in the odometry frame
  (``header.frame_id``, which becomes the world frame of every output), its orientation, and its
  twist in the child frame (as the message definition says);
* ``imu`` (sensor_msgs/Imu, typically 200-400 Hz, optional: ``base.imu``): the orientation of
  the IMU's frame (``header.frame_id``: the root link or a link fixed to it) relative to a
  gravity-aligned frame whose heading is the IMU's own, and its angular rate.

**Fusion.** Position, heading (yaw) and linear velocity from the odometry; roll, pitch and the
angular rate from the IMU (when used; otherwise from the odometry too). Roll and pitch are the
base's orientation relative to gravity, which does not depend on the heading, so the IMU's
orientation is turned about the vertical until its heading is the odometry's:
``R = Rz(yaw_odometry - yaw_imu) R_imu`` (ZYX yaw, taken algebraically from the first column
of each rotation: no angles, no drift of the IMU's own heading enters).

**Timing: interpolation between neighbouring messages, not propagation from the latest.** The
base state at a joint state's stamp t is interpolated between the messages just before and just
after t (positions and velocities linearly, orientations by normalized linear interpolation of
the quaternions, whose difference from spherical interpolation is below 1e-6 rad over a 0.02 s
interval of a base turning at 2 rad/s), for each input separately. Why: the momentum observer uses
the base's twist inside the measured joints' momentum, p_j = (M v)_j, and its residual answers
to the time derivative of any error in p. Holding the latest twist (or propagating it with the
IMU's rates alone) leaves a sawtooth error in the linear velocity whose derivative is the base's
acceleration itself, M_jb a_b: exactly the term the moving base must not leak into the force.
Linear interpolation leaves an error whose derivative is about T/2 times the base's jerk (T the
odometry interval): two orders of magnitude smaller at 50 Hz for a base that accelerates
smoothly. The price is latency: a joint state waits for the next odometry (and IMU) message, at
most one interval (10-20 ms at 50-100 Hz) plus the transport. Propagating with an IMU's
accelerometer would avoid the wait but integrates its bias and its tilt error (0.01 rad of tilt
is 0.1 m/s^2 of false acceleration). The node and the replay use the same interpolation and the
same rules, so they give the same numbers.

**Stale and missing inputs.** The base state at t is stale when the message before t or the
one after t is more than ``base.max_age`` s from t (or there is none): the joint state is then
rejected and counted, as ``stale_odometry`` or ``missing_imu``. The node holds a joint state
until the messages it needs have arrived, and gives it up as stale when joint states stamped
more than 2 ``base.max_age`` s after it arrive first.

**Bad messages** are refused, counted by reason and never used: odometry in another frame than
its first message's, or in a frame that is a link of the robot, or with a child frame that is
not rigidly attached to the root link; an IMU in such a frame, or without orientation or rate
(element 0 of the covariance -1, the message definition's marker); non-finite values or a
quaternion that is not a unit one; NaN, infinite or negative-variance covariances; stamps out of
order or repeated. See :data:`ODOMETRY_REASONS`, :data:`IMU_REASONS`.

**Rates too low for the motion** (health): linear interpolation across an interval T misses at
most T^2/8 times the second derivative; from three consecutive messages that is
``T |a_k - a_(k-1)| / 8`` (a the acceleration of each interval, from the velocities). When its
root mean square over the last second exceeds the input's own noise (the standard deviation its
covariance states, or ``base.velocity_noise`` / ``base.rate_noise`` when the covariance is zero),
the rate limits the estimate more than the sensor does, and the status says so (common
practice, no source: an interpolation error below the sensor's noise costs nothing measurable).
"""
from __future__ import annotations

import bisect
import math
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from .compiled import kernel
from .health import FINDING_IMU, FINDING_ODOMETRY
from .samples import Sample, SampleRejected

BASE_OK, BASE_STALE_ODOMETRY, BASE_MISSING_IMU = 0, 1, 2
SAMPLE_REASONS = ("stale_odometry", "missing_imu")
ODOMETRY_REASONS = (
    "odometry_frame",            # frame_id a link, changed, or child frame not on the base
    "odometry_invalid",          # a non-finite value or a quaternion that is not a unit one
    "odometry_covariance",       # NaN, infinite or negative variances
    "odometry_time_backwards",   # stamp older than the previous odometry message's
    "odometry_duplicate_time",   # the same stamp as the previous one
)
IMU_REASONS = (
    "imu_frame", "imu_no_orientation", "imu_no_rate", "imu_invalid", "imu_covariance",
    "imu_time_backwards", "imu_duplicate_time",
)
REASONS = SAMPLE_REASONS + ODOMETRY_REASONS + IMU_REASONS
PROBLEM_WINDOW_S = 1.0   # s: a stale or refused input is reported this long after
_QUATERNION_TOLERANCE = 0.01   # |norm - 1| of a received quaternion
_TRACK_CAPACITY = 4096   # messages kept per input in the node (tens of seconds)
_QUEUE_CAPACITY = 5000   # joint states held waiting for the base's messages
# columns of the tracks
ODOMETRY_COLUMNS = 13    # p_WC (3) m, q_WB (4) x y z w, v_B (3) m/s, w_B (3) rad/s
IMU_COLUMNS = 7          # q (4) x y z w of the base relative to gravity, w_B (3) rad/s


@dataclass(frozen=True)
class OdometryMessage:
    """One nav_msgs/Odometry, as numbers. time s (header stamp); frame_id (the world) and
    child_frame_id (a frame on the base); position (3,) m and orientation (4,) [x, y, z, w] of
    the child frame in the world; linear (3,) m/s and angular (3,) rad/s, the twist in the
    child frame; pose_covariance, twist_covariance (36,) row-major 6x6 (m^2, rad^2, ...)."""

    time: float
    frame_id: str
    child_frame_id: str
    position: np.ndarray
    orientation: np.ndarray
    linear: np.ndarray
    angular: np.ndarray
    pose_covariance: np.ndarray = field(default_factory=lambda: np.zeros(36))
    twist_covariance: np.ndarray = field(default_factory=lambda: np.zeros(36))


@dataclass(frozen=True)
class ImuMessage:
    """One sensor_msgs/Imu, as numbers. time s; frame_id (the IMU's frame on the base);
    orientation (4,) [x, y, z, w] relative to a gravity-aligned frame; angular_velocity (3,)
    rad/s and linear_acceleration (3,) m/s^2 in the IMU frame; the three (9,) covariances
    (row-major 3x3; element 0 = -1: that quantity is not provided)."""

    time: float
    frame_id: str
    orientation: np.ndarray
    angular_velocity: np.ndarray
    linear_acceleration: np.ndarray = field(default_factory=lambda: np.zeros(3))
    orientation_covariance: np.ndarray = field(default_factory=lambda: np.zeros(9))
    angular_velocity_covariance: np.ndarray = field(default_factory=lambda: np.zeros(9))
    linear_acceleration_covariance: np.ndarray = field(default_factory=lambda: np.zeros(9))


# --------------------------------------------------------------------------------------------
# quaternions [x, y, z, w] and the per-sample interpolation (compiled: the same arithmetic for
# one sample in the node and for a block in the replay)


def quaternion_matrix(q: np.ndarray) -> np.ndarray:
    """3x3 rotation of a unit quaternion [x, y, z, w]."""
    x, y, z, w = (float(c) for c in q)
    return np.array([
        [1 - 2 * (y * y + z * z), 2 * (x * y - w * z), 2 * (x * z + w * y)],
        [2 * (x * y + w * z), 1 - 2 * (x * x + z * z), 2 * (y * z - w * x)],
        [2 * (x * z - w * y), 2 * (y * z + w * x), 1 - 2 * (x * x + y * y)]])


def matrix_quaternion(R: np.ndarray) -> np.ndarray:
    """Unit quaternion [x, y, z, w] (w >= 0) of a rotation matrix (Shepperd's method)."""
    t = R[0, 0] + R[1, 1] + R[2, 2]
    if t > 0:
        s = 2.0 * math.sqrt(1.0 + t)
        q = np.array([(R[2, 1] - R[1, 2]) / s, (R[0, 2] - R[2, 0]) / s,
                      (R[1, 0] - R[0, 1]) / s, 0.25 * s])
    else:
        i = int(np.argmax(np.diag(R)))
        j, k = (i + 1) % 3, (i + 2) % 3
        s = 2.0 * math.sqrt(max(1.0 + R[i, i] - R[j, j] - R[k, k], 0.0))
        q = np.zeros(4)
        q[i] = 0.25 * s
        q[j] = (R[j, i] + R[i, j]) / s
        q[k] = (R[k, i] + R[i, k]) / s
        q[3] = (R[k, j] - R[j, k]) / s
    q /= np.linalg.norm(q)
    return q if q[3] >= 0 else -q


@kernel
def _bracket(times, count, t, max_age):
    """(i0, i1, weight) of the messages around t (i0 = i1 when one is stamped t), or
    (-1, -1, 0) when the state at t is stale (none before or after within max_age)."""
    lo, hi = 0, count
    while lo < hi:   # first index with times[i] >= t
        mid = (lo + hi) // 2
        if times[mid] < t:
            lo = mid + 1
        else:
            hi = mid
    i1 = lo
    if i1 == count:
        return -1, -1, 0.0
    if times[i1] == t:
        return i1, i1, 0.0
    i0 = i1 - 1
    if i0 < 0 or t - times[i0] > max_age or times[i1] - t > max_age:
        return -1, -1, 0.0
    return i0, i1, (t - times[i0]) / (times[i1] - times[i0])


@kernel
def _nlerp(a, b, w, out):
    """Normalized linear interpolation of unit quaternions a, b (4,) at weight w into out."""
    dot = a[0] * b[0] + a[1] * b[1] + a[2] * b[2] + a[3] * b[3]
    sign = -1.0 if dot < 0.0 else 1.0
    norm = 0.0
    for c in range(4):
        out[c] = (1.0 - w) * a[c] + w * sign * b[c]
        norm += out[c] * out[c]
    norm = math.sqrt(norm)
    for c in range(4):
        out[c] /= norm


@kernel
def _heading(q):
    """(cos, sin) of the ZYX yaw of the rotation of q [x, y, z, w]: its first column's
    horizontal direction."""
    x, y, z, w = q[0], q[1], q[2], q[3]
    r00 = 1.0 - 2.0 * (y * y + z * z)
    r10 = 2.0 * (x * y + w * z)
    h = math.sqrt(r00 * r00 + r10 * r10)
    if h == 0.0:
        return 1.0, 0.0
    return r00 / h, r10 / h


@kernel
def base_states(ot, ov, odometry_count, it, iv, imu_count, use_imu, offset, max_age, T, Qb,
                Vb, codes, upper):
    """The base's state at each stamp of T (k,) s, interpolated (see the module docstring).

    ot (N,) s and ov (N, ODOMETRY_COLUMNS): the odometry track (its first odometry_count rows);
    it, iv (IMU_COLUMNS): the IMU track; use_imu: roll, pitch and rates from the IMU; offset
    (3,) m: the odometry's child frame in the root link's frame; max_age s. Writes Qb (k, 7)
    [x, y, z m, qx, qy, qz, qw] (Pinocchio's free-flyer configuration of the root link), Vb (k, 6)
    [v m/s, w rad/s] in the root link's frame, codes (k,) BASE_OK / BASE_STALE_ODOMETRY /
    BASE_MISSING_IMU, upper (k, 2) the index of the odometry and the IMU message after each
    stamp (-1: stale)."""
    qo = np.empty(4)
    qi = np.empty(4)
    for k in range(T.shape[0]):
        t = T[k]
        upper[k, 0] = -1
        upper[k, 1] = -1
        i0, i1, w = _bracket(ot, odometry_count, t, max_age)
        if i1 < 0:
            codes[k] = BASE_STALE_ODOMETRY
            continue
        upper[k, 0] = i1
        a, b = ov[i0], ov[i1]
        _nlerp(a[3:7], b[3:7], w, qo)
        if use_imu:
            j0, j1, wi = _bracket(it, imu_count, t, max_age)
            if j1 < 0:
                codes[k] = BASE_MISSING_IMU
                continue
            upper[k, 1] = j1
            c, d = iv[j0], iv[j1]
            _nlerp(c[0:4], d[0:4], wi, qi)
            # the IMU's tilt turned to the odometry's heading: q = Rz(yaw_o - yaw_i) q_imu
            co, so = _heading(qo)
            ci, si = _heading(qi)
            cd = co * ci + so * si
            sd = so * ci - co * si
            ch = math.sqrt(max(0.0, 0.5 * (1.0 + cd)))
            sh = math.sqrt(max(0.0, 0.5 * (1.0 - cd)))
            if sd < 0.0:
                sh = -sh
            x, y, z, qw = qi[0], qi[1], qi[2], qi[3]
            qx, qy, qz, qq = ch * x - sh * y, ch * y + sh * x, ch * z + sh * qw, ch * qw - sh * z
            for r in range(3):
                Vb[k, 3 + r] = (1.0 - wi) * c[4 + r] + wi * d[4 + r]
        else:
            qx, qy, qz, qq = qo[0], qo[1], qo[2], qo[3]
            for r in range(3):
                Vb[k, 3 + r] = (1.0 - w) * a[10 + r] + w * b[10 + r]
        for r in range(3):
            Vb[k, r] = (1.0 - w) * a[7 + r] + w * b[7 + r]
        # the root link's origin: the child frame's position less the rotated offset
        ox, oy, oz = offset[0], offset[1], offset[2]
        rx = ((1.0 - 2.0 * (qy * qy + qz * qz)) * ox + 2.0 * (qx * qy - qq * qz) * oy
              + 2.0 * (qx * qz + qq * qy) * oz)
        ry = (2.0 * (qx * qy + qq * qz) * ox + (1.0 - 2.0 * (qx * qx + qz * qz)) * oy
              + 2.0 * (qy * qz - qq * qx) * oz)
        rz = (2.0 * (qx * qz - qq * qy) * ox + 2.0 * (qy * qz + qq * qx) * oy
              + (1.0 - 2.0 * (qx * qx + qy * qy)) * oz)
        Qb[k, 0] = (1.0 - w) * a[0] + w * b[0] - rx
        Qb[k, 1] = (1.0 - w) * a[1] + w * b[1] - ry
        Qb[k, 2] = (1.0 - w) * a[2] + w * b[2] - rz
        Qb[k, 3], Qb[k, 4], Qb[k, 5], Qb[k, 6] = qx, qy, qz, qq
        codes[k] = BASE_OK


# --------------------------------------------------------------------------------------------
# the tracks: accepted messages, in stamp order


class Track:
    """Accepted messages of one input: times (s, strictly increasing), rows of numbers, and
    per message whether the rate was too low for the motion then. Bounded (the oldest half is
    dropped when full) unless ``capacity`` is None (a recording loaded whole)."""

    def __init__(self, columns: int, capacity: int | None = _TRACK_CAPACITY):
        self.capacity = capacity
        size = capacity or 1024
        self.time = np.zeros(size)
        self.rows = np.zeros((size, columns))
        self.slow = np.zeros(size, bool)
        self.count = 0
        self.error_rms = 0.0       # the interpolation error's RMS over the last second
        self.noise = 0.0           # the noise it was compared with
        self._errors: deque[tuple[float, float]] = deque()   # (stamp s, error^2)
        self._error_sum = 0.0
        self.dropped = 0

    @property
    def last_time(self) -> float:
        return float(self.time[self.count - 1]) if self.count else -math.inf

    def append(self, t: float, row: np.ndarray, rate: np.ndarray, noise: float) -> None:
        """Add a message; ``rate`` (3,): the velocity whose interpolation error is judged,
        ``noise``: its stated standard deviation."""
        n = self.count
        if n == len(self.time):
            if self.capacity is None:   # grow
                self.time = np.concatenate([self.time, np.zeros(n)])
                self.rows = np.concatenate([self.rows, np.zeros_like(self.rows)])
                self.slow = np.concatenate([self.slow, np.zeros(n, bool)])
            else:   # drop the oldest half
                half = n // 2
                self.time[:n - half] = self.time[half:n]
                self.rows[:n - half] = self.rows[half:n]
                self.slow[:n - half] = self.slow[half:n]
                n = self.count = n - half
                self.dropped += half
        self.time[n] = t
        self.rows[n] = row
        self.count = n + 1
        self._judge_rate(t, rate, noise)
        self.slow[n] = self.error_rms > self.noise

    def _judge_rate(self, t: float, rate: np.ndarray, noise: float) -> None:
        """The interpolation error T |a_k - a_(k-1)| / 8 of the newest interval, its RMS over
        the last second (see the module docstring)."""
        self._rates: deque[tuple[float, np.ndarray]] = getattr(self, "_rates",
                                                              deque(maxlen=3))
        self._rates.append((t, np.array(rate, float)))
        if len(self._rates) == 3:
            (t0, v0), (t1, v1), (t2, v2) = self._rates
            if t1 > t0 and t2 > t1:
                jump = (v2 - v1) / (t2 - t1) - (v1 - v0) / (t1 - t0)
                error = (t2 - t1) * float(np.sqrt(jump.dot(jump))) / 8.0
                self._errors.append((t, error * error))
                self._error_sum += error * error
        while self._errors and self._errors[0][0] < t - PROBLEM_WINDOW_S:
            self._error_sum -= self._errors.popleft()[1]
        count = len(self._errors)
        self.error_rms = math.sqrt(max(self._error_sum, 0.0) / count) if count else 0.0
        self.noise = noise

    def clear(self) -> None:
        self.count = 0
        self._errors.clear()
        self._error_sum = 0.0
        self.error_rms = 0.0
        if hasattr(self, "_rates"):
            self._rates.clear()


def _diagonal_std(cov: np.ndarray, indices: tuple[int, ...]) -> float:
    """sqrt of the mean of a covariance's diagonal entries ``indices`` (0 when unknown)."""
    values = [float(cov[i]) for i in indices]
    mean = sum(values) / len(values)
    return math.sqrt(mean) if mean > 0 else 0.0


class BaseInput:
    """The base's inputs for one Pipeline: message checks, tracks, interpolation, findings.

    model: the :class:`~.model.RobotModel` (with a moving base); use_imu: roll, pitch and
    rates from the IMU; max_age s; velocity_noise m/s and rate_noise rad/s: the noise assumed
    for the rate check when a message's covariance states none; reject(t, SampleRejected):
    counts a refused message (the Pipeline's counts); bounded: keep a bounded history (the
    node) instead of the whole recording (the replay)."""

    def __init__(self, model, use_imu: bool, max_age: float, velocity_noise: float,
                 rate_noise: float, reject: Callable[[float, SampleRejected], None],
                 bounded: bool = True):
        self.model = model
        self.use_imu = bool(use_imu)
        self.max_age = float(max_age)
        self.velocity_noise = float(velocity_noise)
        self.rate_noise = float(rate_noise)
        self._reject = reject
        capacity = _TRACK_CAPACITY if bounded else None
        self.odometry = Track(ODOMETRY_COLUMNS, capacity)
        self.imu = Track(IMU_COLUMNS, capacity)
        self.world_frame = ""          # the odometry's frame_id, from its first accepted message
        self.child_frame = ""
        self.offset = np.zeros(3)      # the child frame's origin in the root link's frame, m
        self._child_rotation = np.eye(3)
        self._imu_frame: str | None = None
        self._imu_rotation = np.eye(3)   # R_BI: the IMU's frame in the root link's frame
        # stamps from which a stale or refused input is reported, per input
        self.problems: dict[str, list[float]] = {"odometry": [], "imu": []}   # ascending
        self.last_problem = {"odometry": "", "imu": ""}
        self.queue: deque[Sample] = deque()
        self._newest_sample = -math.inf
        self._scratch = (np.zeros((1, 7)), np.zeros((1, 6)), np.zeros(1, np.int64),
                         np.zeros((1, 2), np.int64))

    def reset(self) -> None:
        """Forget the held joint states (the tracks are kept: they are inputs, not estimates)."""
        self.queue.clear()
        self._newest_sample = -math.inf

    # --- messages --------------------------------------------------------------------------
    def _refuse(self, which: str, t: float, reason: str, message: str) -> bool:
        track = self.odometry if which == "odometry" else self.imu
        # reported from the newest accepted stamp on (the joint states after it are the ones
        # not yet processed, in the node as in the replay)
        at = track.last_time if track.count else (t if math.isfinite(t) else -math.inf)
        if math.isfinite(at):
            self._note(which, at)
        self.last_problem[which] = f"{reason}: {message}"
        self._reject(t if math.isfinite(t) else at, SampleRejected(reason, message))
        return False

    def add_odometry(self, msg: OdometryMessage) -> bool:
        """Check and keep one odometry message; False when it was refused (and counted)."""
        t = float(msg.time)
        name = "odometry"
        if not msg.frame_id or self.model.has_link(msg.frame_id):
            what = "is empty" if not msg.frame_id else "is a link of the robot's URDF"
            return self._refuse(name, t, "odometry_frame",
                                f"odometry frame_id {msg.frame_id!r} {what}; expected the world "
                                "frame the base moves in (for example 'odom')")
        if self.world_frame and msg.frame_id != self.world_frame:
            return self._refuse(name, t, "odometry_frame",
                                f"odometry frame_id {msg.frame_id!r} differs from the first "
                                f"message's {self.world_frame!r}; expected one world frame")
        if self.child_frame and msg.child_frame_id != self.child_frame:
            return self._refuse(name, t, "odometry_frame",
                                f"odometry child_frame_id {msg.child_frame_id!r} differs from "
                                f"the first message's {self.child_frame!r}")
        placement = self.model.base_placement(msg.child_frame_id)
        if placement is None:
            return self._refuse(name, t, "odometry_frame",
                                f"odometry child_frame_id {msg.child_frame_id!r} is not the "
                                f"URDF's root link {self.model.root_frame!r} nor a frame fixed "
                                f"to it; expected one of {self.model.base_frames()[:8]}")
        values = np.concatenate([msg.position, msg.orientation, msg.linear, msg.angular])
        if len(values) != 13 or not np.isfinite(values).all():
            return self._refuse(name, t, "odometry_invalid",
                                f"odometry at {t:.6f} s has non-finite pose or twist values")
        norm = float(np.linalg.norm(msg.orientation))
        if abs(norm - 1.0) > _QUATERNION_TOLERANCE:
            return self._refuse(name, t, "odometry_invalid",
                                f"odometry orientation has norm {norm:.4g}; expected a unit "
                                "quaternion")
        for label, cov in (("pose", msg.pose_covariance), ("twist", msg.twist_covariance)):
            problem = _covariance_problem(cov, 6)
            if problem:
                return self._refuse(name, t, "odometry_covariance",
                                    f"odometry {label} covariance {problem}")
        if not math.isfinite(t):
            return self._refuse(name, t, "odometry_invalid", f"odometry stamp is {t!r}")
        if self.odometry.count and t <= self.odometry.last_time:
            reason = ("odometry_duplicate_time" if t == self.odometry.last_time
                      else "odometry_time_backwards")
            return self._refuse(name, t, reason,
                                f"odometry stamp {t:.6f} s is not after the previous "
                                f"{self.odometry.last_time:.6f} s")
        if not self.world_frame:
            self.world_frame, self.child_frame = msg.frame_id, msg.child_frame_id
            R_bc, self.offset = placement
            self._child_rotation = R_bc
        R_bc = self._child_rotation
        q = np.asarray(msg.orientation, float) / norm
        R_wb = quaternion_matrix(q) @ R_bc.T
        angular = R_bc @ np.asarray(msg.angular, float)
        linear = R_bc @ np.asarray(msg.linear, float) - np.cross(angular, self.offset)
        row = np.concatenate([np.asarray(msg.position, float), matrix_quaternion(R_wb), linear,
                              angular])
        noise = _diagonal_std(msg.twist_covariance, (0, 7, 14)) or self.velocity_noise
        self.odometry.append(t, row, linear, noise)
        return True

    def add_imu(self, msg: ImuMessage) -> bool:
        """Check and keep one IMU message; False when it was refused (and counted)."""
        t = float(msg.time)
        name = "imu"
        if self._imu_frame is None or msg.frame_id != self._imu_frame:
            placement = self.model.base_placement(msg.frame_id)
            if placement is None:
                return self._refuse(name, t, "imu_frame",
                                    f"IMU frame_id {msg.frame_id!r} is not the URDF's root link "
                                    f"{self.model.root_frame!r} nor a frame fixed to it; "
                                    f"expected one of {self.model.base_frames()[:8]}")
            if self._imu_frame is not None:
                return self._refuse(name, t, "imu_frame",
                                    f"IMU frame_id {msg.frame_id!r} differs from the first "
                                    f"message's {self._imu_frame!r}")
        oc = np.asarray(msg.orientation_covariance, float)
        rc = np.asarray(msg.angular_velocity_covariance, float)
        if len(oc) == 9 and oc[0] == -1.0:
            return self._refuse(name, t, "imu_no_orientation",
                                "IMU message carries no orientation (orientation_covariance[0] "
                                "= -1); expected an IMU that estimates its orientation, or "
                                "base.imu: false")
        if len(rc) == 9 and rc[0] == -1.0:
            return self._refuse(name, t, "imu_no_rate",
                                "IMU message carries no angular velocity "
                                "(angular_velocity_covariance[0] = -1)")
        values = np.concatenate([msg.orientation, msg.angular_velocity])
        if len(values) != 7 or not np.isfinite(values).all():
            return self._refuse(name, t, "imu_invalid",
                                f"IMU message at {t:.6f} s has non-finite orientation or rates")
        norm = float(np.linalg.norm(msg.orientation))
        if abs(norm - 1.0) > _QUATERNION_TOLERANCE:
            return self._refuse(name, t, "imu_invalid",
                                f"IMU orientation has norm {norm:.4g}; expected a unit "
                                "quaternion")
        for label, cov in (("orientation", oc), ("angular_velocity", rc),
                           ("linear_acceleration", msg.linear_acceleration_covariance)):
            cov = np.asarray(cov, float)
            if label == "linear_acceleration" and len(cov) == 9 and cov[0] == -1.0:
                continue   # not provided: not used either
            problem = _covariance_problem(cov, 3)
            if problem:
                return self._refuse(name, t, "imu_covariance", f"IMU {label} covariance "
                                                               f"{problem}")
        if not math.isfinite(t):
            return self._refuse(name, t, "imu_invalid", f"IMU stamp is {t!r}")
        if self.imu.count and t <= self.imu.last_time:
            reason = "imu_duplicate_time" if t == self.imu.last_time else "imu_time_backwards"
            return self._refuse(name, t, reason, f"IMU stamp {t:.6f} s is not after the "
                                                 f"previous {self.imu.last_time:.6f} s")
        if self._imu_frame is None:
            self._imu_frame = msg.frame_id
            self._imu_rotation = self.model.base_placement(msg.frame_id)[0]
        R_bi = self._imu_rotation
        q = np.asarray(msg.orientation, float) / norm
        tilt = matrix_quaternion(quaternion_matrix(q) @ R_bi.T)
        rate = R_bi @ np.asarray(msg.angular_velocity, float)
        noise = _diagonal_std(rc, (0, 4, 8)) or self.rate_noise
        self.imu.append(t, np.concatenate([tilt, rate]), rate, noise)
        return True

    # --- the base state at joint states' stamps -------------------------------------------
    def states(self, T: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(Qb (k, 7), Vb (k, 6), codes (k,), upper (k, 2)) at the finite stamps T (k,) s: see
        :func:`base_states` (rows of a stale state hold a level base at the origin, so that the
        model can still be evaluated there)."""
        k = len(T)
        if k == 1:
            Qb, Vb, codes, upper = self._scratch
        else:
            Qb, Vb = np.zeros((k, 7)), np.zeros((k, 6))
            codes, upper = np.zeros(k, np.int64), np.zeros((k, 2), np.int64)
        o, i = self.odometry, self.imu
        base_states(o.time, o.rows, o.count, i.time, i.rows, i.count, self.use_imu,
                    self.offset, self.max_age, np.ascontiguousarray(T, dtype=float), Qb, Vb,
                    codes, upper)
        stale = codes != BASE_OK
        if stale.any():
            Qb[stale] = (0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.0)
            Vb[stale] = 0.0
        return Qb, Vb, codes, upper

    def findings(self, T: np.ndarray, upper: np.ndarray) -> np.ndarray:
        """(k,) FINDING_ODOMETRY / FINDING_IMU bits of the samples at the stamps T (k,) s with
        the messages after them ``upper`` (from :meth:`states`): the rate too low for the
        motion at that message, or a stale or refused input over the second before."""
        out = np.zeros(len(T), np.int64)
        for col, (which, track, bit) in enumerate((("odometry", self.odometry, FINDING_ODOMETRY),
                                                   ("imu", self.imu, FINDING_IMU))):
            if which == "imu" and not self.use_imu:
                continue
            idx = upper[:, col]
            ok = idx >= 0
            if ok.any():
                slow = np.zeros(len(T), bool)
                slow[ok] = track.slow[idx[ok]]
                out[slow] |= bit
            problems = self.problems[which]
            if problems:
                p = np.array(problems)
                # a problem at stamp p is reported for the samples in (p, p + window]
                hi = np.searchsorted(p, T, side="left")
                lo = np.searchsorted(p, T - PROBLEM_WINDOW_S, side="left")
                out[hi > lo] |= bit
        return out

    def stale(self, t: float, code: int) -> SampleRejected:
        """The rejection of a joint state at t whose base state is stale (code), noted as a
        problem of that input."""
        which = "odometry" if code == BASE_STALE_ODOMETRY else "imu"
        track = self.odometry if which == "odometry" else self.imu
        name = "odometry" if which == "odometry" else "IMU"
        before = track.time[:track.count]
        i = int(np.searchsorted(before, t))
        prev = f"{t - before[i - 1]:.3f} s before" if i > 0 else "none before"
        after = (f"{before[i] - t:.3f} s after" if i < track.count else "none after yet")
        reason = "stale_odometry" if which == "odometry" else "missing_imu"
        message = (f"no {name} state at the joint state stamped {t:.6f} s: nearest messages "
                   f"{prev}, {after}; expected messages within base.max_age = "
                   f"{self.max_age:g} s on both sides")
        self._note(which, t)
        self.last_problem[which] = f"{reason}: {message}"
        return SampleRejected(reason, message)

    def _note(self, which: str, t: float) -> None:
        """A problem of an input at stamp t (kept ascending; older than a minute forgotten)."""
        problems = self.problems[which]
        bisect.insort(problems, t)
        if len(problems) > 1000 and problems[0] < problems[-1] - 60.0:
            del problems[:bisect.bisect_left(problems, problems[-1] - 60.0)]

    # --- the node: joint states held until their base state can be decided -----------------
    def hold(self, sample: Sample) -> None:
        """Hold a joint state until :meth:`ready` can release it."""
        self.queue.append(sample)
        if math.isfinite(sample.time):
            self._newest_sample = max(self._newest_sample, sample.time)

    def ready(self) -> list[Sample]:
        """The held joint states, oldest first, whose base state can be decided now: the
        messages after their stamp have arrived, or can no longer arrive in time (a later
        joint state stamped 2 base.max_age after, or the earlier message already too old)."""
        out: list[Sample] = []
        queue = self.queue
        while queue:
            t = queue[0].time
            if not (math.isfinite(t) and self._decidable(t)) and len(queue) <= _QUEUE_CAPACITY:
                break
            out.append(queue.popleft())
        return out

    def release_all(self) -> list[Sample]:
        """Every held joint state (the end of a recording)."""
        out = list(self.queue)
        self.queue.clear()
        return out

    def _decidable(self, t: float) -> bool:
        if self._newest_sample > t + 2.0 * self.max_age:
            return True
        tracks = (self.odometry, self.imu) if self.use_imu else (self.odometry,)
        for track in tracks:
            last = track.last_time
            if last < t and t - last <= self.max_age:
                return False   # the message after t may still come
        return True

    def describe(self, findings: int) -> str:
        """The base findings in words (empty when none)."""
        parts = []
        for which, track, bit, label in (("odometry", self.odometry, FINDING_ODOMETRY,
                                          "odometry"),
                                         ("imu", self.imu, FINDING_IMU, "IMU")):
            if not findings & bit:
                continue
            if track.error_rms > track.noise > 0:
                rate = _rate(track)
                unit = "m/s" if which == "odometry" else "rad/s"
                parts.append(f"{label} at {rate:.0f} Hz too slow for the base's motion "
                             f"(interpolation error {track.error_rms:.3g} {unit} RMS over the "
                             f"last second, above its noise {track.noise:.3g} {unit})")
            if self.last_problem[which]:
                parts.append(f"{label} input problem: {self.last_problem[which]}")
        return "; ".join(parts)


def _rate(track: Track) -> float:
    n = min(track.count, 50)
    if n < 2:
        return 0.0
    span = track.time[track.count - 1] - track.time[track.count - n]
    return (n - 1) / span if span > 0 else 0.0


def _covariance_problem(cov: np.ndarray, size: int) -> str:
    """Why a row-major size x size covariance is unusable ('' when it is usable)."""
    cov = np.asarray(cov, float)
    if len(cov) != size * size:
        return f"has {len(cov)} entries; expected {size * size}"
    bad = ~np.isfinite(cov)
    if bad.any():
        i = int(np.argmax(bad))
        return f"entry {i} is {cov[i]!r}; expected finite numbers"
    diag = cov[:: size + 1]
    if (diag < 0).any():
        i = int(np.argmax(diag < 0))
        return f"variance {i} is {diag[i]!r}; expected >= 0"
    return ""
